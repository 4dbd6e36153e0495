"""The options of a batch run, checked before any file is read: field model, diffusion, settings.

The settings of a run (:func:`run_settings`) decide whether an existing
output is up to date: an output is redone when its recorded settings or its
input's checksum differ from the present ones.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .. import __version__
from ..errors import ConventionError
from ..io import MAPPING_SECTIONS, sha256
from ..io.write import compress_level

__all__ = [
    "DIFFUSION_DEFAULTS",
    "FIELD_CHOICES",
    "FIRST_MAPPING_SECTIONS",
    "StormField",
    "check_field",
    "diffusion_options",
    "epoch_text",
    "field_model",
    "kp_text",
    "mapping_key",
    "psd_settings",
    "run_settings",
    "settings_text",
    "storm_field",
]

#: Names of the field model a batch run takes (``model=``; ``--field`` on the command line;
#: "t89": the IGRF plus Tsyganenko's 1989 external field, with ``kp=``).
FIELD_CHOICES = ("auto", "dipole", "igrf", "t89")


@dataclass(frozen=True, repr=False)
class StormField:
    """The storm-time field of a batch run: the IGRF plus T89, with Kp from the caller.

    ``kp`` is one Kp value for every sample, a Kp series (a 1-D DataArray
    along time, e.g. from :func:`beltkit.field.read_kp`), or the name of a
    variable of each flux file holding Kp per sample. The model itself is
    built per file (:meth:`resolve`), so a per-file Kp variable works and
    the request travels to worker processes as plain data.
    """

    kp: object
    name = "t89"

    def __post_init__(self):
        from ..field.t89 import T89

        if isinstance(self.kp, str):
            if not self.kp:
                raise ValueError("kp: give a Kp value, a Kp series or a variable name")
            return
        T89(kp=self.kp)  # a bad value or series is refused before any file is read

    def __repr__(self):
        if isinstance(self.kp, str):
            return f"StormField(kp_variable={self.kp!r})"
        if np.ndim(getattr(self.kp, "values", self.kp)) == 0:
            return f"StormField(kp={float(np.asarray(getattr(self.kp, 'values', self.kp)))!r})"
        return f"StormField(kp=<series of {np.size(self.kp)} values>)"

    def resolve(self, ds):
        """Return the :class:`beltkit.field.T89` model for one dataset."""
        from ..field.t89 import T89

        kp = self.kp
        if isinstance(kp, str):
            if kp not in ds.variables:
                raise ConventionError([
                    f"{kp}: missing; the Kp variable named by kp (--kp-variable) is not in "
                    "this file (give --kp VALUE or --kp FILE instead)"])
            kp = ds[kp].load()
        return T89(kp=kp)

    def settings_key(self):
        """Return what decides whether an output made with this field is up to date."""
        if isinstance(self.kp, str):
            return {"kp_variable": self.kp}
        if np.ndim(getattr(self.kp, "values", self.kp)) == 0:
            return {"kp": float(np.asarray(getattr(self.kp, "values", self.kp)))}
        import hashlib

        values = np.ascontiguousarray(np.asarray(self.kp.values, dtype=float))
        times = np.ascontiguousarray(np.asarray(self.kp[self.kp.dims[0]].values,
                                                dtype="datetime64[ns]"))
        digest = hashlib.sha256(values.tobytes() + times.view("int64").tobytes()).hexdigest()
        return {"kp_series_sha256": digest, "kp_series_length": int(values.size)}


def storm_field(model, kp):
    """Turn ``model="t89"`` and ``kp`` into a :class:`StormField`; refuse a stray ``kp``."""
    if isinstance(model, str) and model == "t89":
        if kp is None:
            raise ValueError("field model 't89' needs Kp: give kp= a value 0-9, a Kp series "
                             "(beltkit.field.read_kp) or the name of a Kp variable of the files "
                             "(--kp VALUE|FILE or --kp-variable NAME)")
        return StormField(kp)
    if kp is not None:
        raise ValueError(f"kp applies to field model 't89' only, not to model={model!r}")
    return model


def check_field(model, epoch):
    """Refuse an unknown field-model name, or an epoch override with a model that takes none."""
    if not isinstance(model, str):
        if epoch is not None and getattr(model, "name", None) == "t89":
            raise ValueError("an epoch override applies to the dipole model only, not to "
                             "model='t89'")
        return
    if model not in FIELD_CHOICES:
        raise ValueError(f"field model must be one of {', '.join(map(repr, FIELD_CHOICES))}, "
                         f"got {model!r}")
    if model != "dipole" and epoch is not None:
        raise ValueError(f"an epoch override applies to the dipole model only, not to "
                         f"model={model!r}: the IGRF is evaluated at each sample's time (drop "
                         f"--epoch, or use --field dipole)")


def field_model(model, epoch, ds):
    """Return the ``model`` argument for :func:`beltkit.pad.partition`.

    ``"auto"`` becomes the IGRF where the dataset carries ``position_geo``
    and the centred dipole (closed forms from ``L`` and ``mlat``) otherwise.
    """
    if isinstance(model, StormField):
        return model.resolve(ds)
    if not isinstance(model, str):
        return model
    check_field(model, epoch)
    if model == "t89":
        raise ValueError("field model 't89' needs Kp (kp=...)")
    name = model
    if name == "auto":
        name = "igrf" if "position_geo" in ds.variables else "dipole"
    if name == "dipole":
        if epoch is None or "position_geo" not in ds.variables:
            # closed forms from L and mlat; the dipole's strength cancels in the loss cones
            return "dipole"
        from ..field import CenteredDipole

        return CenteredDipole(epoch=epoch)
    from ..field import as_model

    return as_model("igrf")


def epoch_text(model_name, epoch, geo_position) -> str:
    """Say which epoch a summary's field model used (recorded as ``field_epoch``)."""
    if epoch is not None:
        return f"{epoch} (fixed by the caller)"
    if model_name == "igrf" or geo_position:
        return "time of each sample"
    from ..constants import B0_EPOCH

    return f"{B0_EPOCH:g} (dipole closed forms from the file's L and mlat)"


#: Options of ``summarize(..., diffusion=...)`` and their defaults.
DIFFUSION_DEFAULTS = {"loss_time": "half_bounce", "species": "electron", "interval_sigma": 2.0}


def diffusion_options(diffusion):
    """Return the checked diffusion options (a dict), or None when the outputs are not wanted.

    ``diffusion`` is None/False (off), True (the defaults of
    :data:`DIFFUSION_DEFAULTS`) or a mapping with some of its keys.
    """
    if diffusion is None or diffusion is False:
        return None
    opts = {} if diffusion is True else dict(diffusion)
    unknown = sorted(set(opts) - set(DIFFUSION_DEFAULTS))
    if unknown:
        raise ValueError(f"diffusion options {unknown} are unknown; use "
                         f"{', '.join(DIFFUSION_DEFAULTS)} (or diffusion=True for the defaults)")
    opts = {**DIFFUSION_DEFAULTS, **opts}
    from ..diffusion import LOSS_TIMES
    from ..particles import get_species

    if opts["loss_time"] not in LOSS_TIMES:
        raise ValueError(f"diffusion loss_time must be one of {', '.join(LOSS_TIMES)}, got "
                         f"{opts['loss_time']!r}")
    sigma = float(opts["interval_sigma"])
    if not (np.isfinite(sigma) and sigma > 0):
        raise ValueError(f"diffusion interval_sigma must be a positive number of sigmas, got "
                         f"{opts['interval_sigma']!r}")
    return {"loss_time": str(opts["loss_time"]), "species": get_species(opts["species"]).name,
            "interval_sigma": sigma}


#: Sections of a mapping dict always in its fingerprint (the sections of the first format).
FIRST_MAPPING_SECTIONS = ("variables", "units", "dimensions")


def mapping_key(mapping):
    """Return what of a mapping decides whether an output made with it is up to date.

    Every section of :data:`beltkit.io.MAPPING_SECTIONS` changes what is read
    (names, time decoding, pitch-angle edges, common energies, quality rule,
    position form, telescope conversion, valid ranges), so every one is in
    the fingerprint. A mapping file counts by its content (SHA-256), so
    editing any section redoes the outputs. A mapping dict counts by its
    sections: the three of the first format always (as before, so outputs
    made with such a mapping stay up to date), every later section when it
    is not empty. The ``source`` entry of a checked mapping is only its name
    and does not count. None without a mapping.
    """
    if mapping is None:
        return None
    if not isinstance(mapping, Mapping):
        return sha256(mapping)
    key = {k: mapping.get(k, {}) for k in FIRST_MAPPING_SECTIONS}
    key.update({k: mapping[k] for k in MAPPING_SECTIONS
                if k not in FIRST_MAPPING_SECTIONS and mapping.get(k)})
    return key


def run_settings(model, altitude_km, epoch, mapping, compress, diffusion=None,
                 strict=False, hemispheres=False) -> dict:
    """Return the settings of a summarize run, as recorded in each output.

    The field model is recorded under the key ``"field"`` (the name of the
    first release), so that outputs made before the keyword became ``model=``
    stay up to date.
    """
    settings = {
        "field": model if isinstance(model, str) else getattr(model, "name", repr(model)),
        **(model.settings_key() if isinstance(model, StormField) else {}),
        "altitude_km": float(altitude_km),
        "epoch": None if epoch is None else str(epoch),
        "mapping": mapping_key(mapping),
        "compress": compress_level(compress),
        "beltkit_version": __version__,
    }
    if diffusion is not None:  # only then: summaries made without it stay up to date
        settings["diffusion"] = dict(diffusion)
    if strict:  # whole-file refusal of per-sample problems (pad.samples); default: flagged
        settings["strict"] = True
    if hemispheres:  # only then, as for the diffusion outputs
        settings["hemispheres"] = True
    return settings


def settings_text(settings: dict) -> str:
    """Return settings as the canonical JSON text stored in ``beltkit_settings``."""
    return json.dumps(settings, sort_keys=True, separators=(",", ":"))


# ---------------------------------------------------------------------- one file


def kp_text(settings: dict) -> str | None:
    """Say which Kp a storm-time (T89) output used, from its settings; None without one."""
    if "kp" in settings:
        return f"{settings['kp']:g} for every sample"
    if "kp_variable" in settings:
        return f"per sample from the input's variable {settings['kp_variable']!r}"
    if "kp_series_sha256" in settings:
        return (f"a Kp series of {settings['kp_series_length']} values (SHA-256 of values and "
                f"times {settings['kp_series_sha256']})")
    return None



def psd_settings(mu, k, model, species, lstar_cadence_s, altitude_km, mapping,
                 compress) -> dict:
    """Return the settings of a psd run (those of :func:`run_settings` plus the invariants)."""
    settings = run_settings(model, altitude_km, None, mapping, compress)
    settings.update({"product": "psd", "mu_mev_per_g": [float(v) for v in mu],
                     "k_g05_re": [float(v) for v in k], "species": species,
                     "lstar_cadence_s": float(lstar_cadence_s)})
    return settings

