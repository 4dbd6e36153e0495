"""What one flux file becomes: its loss-cone summary or its phase-space density, slab by slab.

A *product* is one file's output before it is written: the datasets that
follow one another in time (:class:`Product`), a check to run once they are
all computed, and the global attributes. The file is validated once here
(:func:`beltkit.pad.conventions.check` on the whole file); each slab's
partition trusts that validation.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from .._renamed import renamed_keyword
from ..errors import ConventionError
from ..units import K_UNITS
from .options import diffusion_options, epoch_text, field_model, kp_text, settings_text

__all__ = [
    "POSITION_NAMES",
    "STREAM_SLAB",
    "TIME_SLAB",
    "Product",
    "psd_product",
    "release_buffers",
    "summarize_dataset",
    "summary_product",
]

#: Samples per slab of a summarized file (about 100 MB of float32 flux and errors in memory;
#: a day at 1 s is one slab).
TIME_SLAB = 131072
#: Samples per slab of files longer than one slab (peak memory below a one-slab file's).
STREAM_SLAB = 65536
#: Position variables (per time) carried from the flux file into its outputs.
POSITION_NAMES = ("L", "mlat", "mlt")


@dataclass
class Product:
    """One file's output before it is written.

    Attributes
    ----------
    slabs : iterable of xarray.Dataset
        Consecutive pieces along ``time``; a generator computes each piece
        when the writer asks for it (reading the open file), a list holds
        pieces already computed.
    count : int
        Number of pieces.
    finish : callable or None
        Raises the file's :class:`beltkit.ConventionError` of the value checks
        summed over every piece; called once all are computed.
    attrs_of : callable
        Global attributes of the output, given the input's SHA-256 text.
    loaded : bool
        Whether the input's data were read into memory (the file can be
        closed, and the pieces computed without it: :meth:`compute`).
    flagged : dict or None
        Of a summary: time samples per masked-sample flag
        (:func:`beltkit.pad.samples.flag_counts`), summed over the pieces
        computed so far (complete once every piece is); None otherwise.
    """

    slabs: Iterable
    count: int
    finish: Callable | None
    attrs_of: Callable[[str], dict]
    loaded: bool = False
    flagged: dict | None = None

    def flag_attrs(self) -> dict:
        """Return the summary attributes ``beltkit_samples_<meaning>`` of :attr:`flagged`."""
        return {f"beltkit_samples_{k}": int(v) for k, v in (self.flagged or {}).items()}

    def compute(self) -> None:
        """Compute every piece now and run the value checks (of a loaded product)."""
        self.slabs = list(self.slabs)
        if self.finish is not None:
            self.finish()
            self.finish = None


@renamed_keyword("field", "model")
def summarize_dataset(ds: xr.Dataset, *, model="auto", altitude_km=100.0,
                      epoch=None, diffusion=None, hemispheres=False) -> xr.Dataset:
    """Partition one flux dataset and keep the position for the survey.

    Parameters
    ----------
    ds : xarray.Dataset
        Convention-following flux dataset (lazy or not; not modified).
    model : {"auto", "dipole", "igrf"} or FieldModel
        Field model for the loss cones. "auto" (default): the IGRF at each
        sample's time where the dataset carries ``position_geo``, else the
        centred dipole from ``L`` and ``mlat``. ``field=`` is the deprecated
        former spelling (warns; removed in the next release).
    altitude_km : float
        Footpoint altitude of the loss cones: km above the sphere of radius
        R_E = :data:`beltkit.constants.R_E_KM` (not above the ellipsoid), as in
        :func:`beltkit.pad.partition`.
    epoch : float or str, optional
        Epoch of the dipole (decimal year); used when the dataset gives its
        position in GEO coordinates (``model="dipole"`` only).
    diffusion : bool or dict, optional
        Add the outputs of :func:`beltkit.diffusion.from_pitch_angle_data`
        (``z0``, ``diffusion_coefficient``, ``lifetime``, their intervals, the
        regime and flags), computed with the partition's loss cones. True takes
        :data:`beltkit.batch.DIFFUSION_DEFAULTS`; a dict sets some of
        ``loss_time`` (``"half_bounce"`` or ``"quarter_bounce"``), ``species``
        and ``interval_sigma``.
    hemispheres : bool
        Add the losses per hemisphere (``flux_lost_north``, ``flux_lost_south``,
        their fractions and ``_err``), as ``partition(..., hemispheres=True)``.

    Returns
    -------
    xarray.Dataset
        :func:`beltkit.pad.partition`'s result plus ``L``, ``mlat`` and ``mlt``
        per time when the input has them; its attributes name the model used
        (and, with ``diffusion``, the diffusion conventions as ``beltkit_*``).
    """
    return _summary(ds, model=model, altitude_km=altitude_km, epoch=epoch,
                    diffusion=diffusion_options(diffusion), hemispheres=hemispheres)[0]


def _summary(ds, *, model, altitude_km, epoch, defer_value_check=False, buffers=None,
             diffusion=None, prepared=None, strict=True, hemispheres=False, model_note=None):
    """:func:`summarize_dataset`, returning ``(summary, pending value check or None)``.

    With ``defer_value_check`` (eager data: one slab of a file) the flux
    values are counted by the engine while the summary is computed and the
    pending check is returned, to be made once on the counts summed over the
    slabs (see ``beltkit.pad.partition.partition_slab``), instead of in a
    separate pass over the file before it. ``prepared`` is the file's
    validation, trusted, and ``model_note`` its field-model note.
    """
    from ..pad.partition import partition_slab

    model = field_model(model, epoch, ds)
    out, pending = partition_slab(ds, model=model, altitude_km=altitude_km,
                                  defer_value_check=defer_value_check, buffers=buffers,
                                  prepared=prepared, strict=strict,
                                  hemispheres=bool(hemispheres), model_note=model_note)
    if diffusion is not None:
        counts = None if pending is None else pending[0]
        valid = None if counts is None else np.asarray(counts)[0]
        src = ds
        if not (prepared.strict if prepared is not None else strict):
            # the partition masked negative flux values: so does the diffusion's input
            src = ds.assign(flux=ds["flux"].where(~(ds["flux"] < 0)))
        out = _with_diffusion(out, src, model, altitude_km, diffusion, valid, prepared)
    for name in POSITION_NAMES:
        if name not in out.variables and name in ds.variables and ds[name].dims == ("time",):
            out[name] = ds[name]
    # the geographic position too, so that a survey can bin by longitude and latitude
    if ("position_geo" in ds.variables and "position_geo" not in out.variables
            and ds["position_geo"].dims[0] == "time" and ds["position_geo"].ndim == 2):
        out["position_geo"] = ds["position_geo"]
    return out, pending


#: diffusion outputs that do not depend on the measured flux (kept where a slab has none)
_DIFFUSION_MODEL_ONLY = ("loss_time", "strong_diffusion_lifetime")


def _with_diffusion(out, ds, model, altitude_km, options, valid=None, prepared=None):
    """Merge :func:`beltkit.diffusion.from_pitch_angle_data`'s outputs into a summary.

    ``out`` is the partition of ``ds`` (its loss cones are reused). ``valid``,
    when given, is the number of valid flux values per energy in ``ds`` (the
    engine's count); ``ds`` may then be one time slab of a longer file whose
    value checks are made on the whole file, so a channel without any valid
    value in this slab is not refused here: the diffusion is computed with a
    placeholder value in that channel, and its measured outputs are then set
    as for a sample without data (NaN, regime 0, flag ``no_valid_data`` beside
    ``loss_cone_unresolved`` where that holds) -- what the whole file gives
    at those samples. Negative values are let through for the same reason
    (the file's own checks refuse them).
    """
    from ..diffusion import from_pitch_angle_data

    if prepared is not None and prepared.energy_kev is None:
        raise ConventionError(["channel_energy: the diffusion outputs need one energy per "
                               "channel, and this file's energy table varies from record to "
                               "record; give the mapping an [energy] common_kev axis, or "
                               "summarise without --diffusion"], ds.encoding.get("source"))
    dead = None if valid is None or not ds.sizes.get("time") else ~(np.asarray(valid) > 0)
    src = ds
    if dead is not None and dead.any():
        src = _placeholder_channels(ds, model, np.flatnonzero(dead), prepared)
    res = from_pitch_angle_data(src, model=model, altitude_km=altitude_km, cones=out,
                                species=options["species"], loss_time=options["loss_time"],
                                interval_sigma=options["interval_sigma"], allow_negative=True,
                                prepared=prepared)
    merged = out.copy()
    for name, var in res.data_vars.items():
        var = var.variable
        if dead is not None and dead.any() and var.dims == ("time", "energy") \
                and name not in _DIFFUSION_MODEL_ONLY:
            values = np.array(var.values)
            if name == "diffusion_flag":
                values[:, dead] = (values[:, dead] & 8) | 16  # unresolved kept; no valid data
            elif name == "diffusion_regime":
                values[:, dead] = 0
            else:
                values[:, dead] = np.nan
            var = var.copy(data=values)
        merged[name] = var
    for key, value in res.attrs.items():
        if key.startswith("beltkit_") and key not in merged.attrs:
            merged.attrs[key] = value
    return merged


def _placeholder_channels(ds, model, channels, prepared=None):
    """Return a copy of ``ds`` with one valid flux value in each of the given energy channels."""
    if prepared is None:
        from ..pad.conventions import check

        prepared = check(ds, model=model, check_values=False)
    mask = prepared.flux_mask
    flux = ds["flux"]
    value = 1.0
    if not (mask.vmin <= value <= mask.vmax) or value in mask.fill:
        value = mask.vmin if np.isfinite(mask.vmin) else mask.vmax
    other = [d for d in flux.dims if d not in ("time", "energy")][0]
    filled = flux.copy(deep=True)
    filled[{"time": 0, "energy": channels, other: 0}] = value
    return ds.assign(flux=filled)


def summary_product(ds, src: Path, task: dict, *, load=False, buffers=None,
                    computed=None) -> Product:
    """Return the loss-cone summary of one open flux file as a :class:`Product`.

    The structure, the time order and the positions are checked once, on the
    whole file, before the first slab; each slab's partition trusts that
    check, and the flux-value checks are summed over the slabs by the engine
    (``finish``). With ``load`` a file of up to :data:`TIME_SLAB` samples is
    read into memory now (the caller may close it and :meth:`Product.compute`
    without holding the netCDF lock); otherwise slabs are read from the open
    file one at a time when the writer asks for them, so memory does not grow
    with the file's length. ``buffers`` (a
    :class:`beltkit.pad.partition.OutputBuffers`) is the output memory to
    reuse (default: this process's, used under the netCDF lock only);
    ``computed``, if given, is called once the last slab is computed.
    """
    from ..pad.conventions import check
    from ..pad.losscones import dipole_low_altitude_note, model_name
    from ..pad.samples import flag_counts

    settings = task["settings"]
    epoch = task["epoch"]
    altitude_km = settings["altitude_km"]
    diffusion = settings.get("diffusion")
    model = field_model(task["model"], epoch, ds)
    # the file's one validation; per-sample problems are masked and flagged unless strict
    prep = check(ds, model=model, check_values=False, strict=settings.get("strict", False))
    record = (model_name(model), dipole_low_altitude_note(ds, prep, model))
    geo = "position_geo" in ds.variables
    n = ds.sizes.get("time", 0)
    loaded = bool(load and n <= TIME_SLAB)
    if loaded:
        ds = ds[_read_names(ds)].load()
    slab = TIME_SLAB if n <= TIME_SLAB else STREAM_SLAB
    starts = range(0, n, slab) if n else [0]  # an empty file still gets its summary
    state = {"totals": None, "verify": None}
    flagged = {}

    def slabs():
        for a in starts:
            piece = ds.isel(time=slice(a, a + slab)) if n else ds
            if diffusion is not None and not loaded:  # read once for partition and diffusion
                piece = piece[_read_names(piece)].load()
            # each slab is written out before the next is computed: the memory of its
            # outputs serves the next slab, and the next file (one file at a time)
            out, (counts, verify) = _summary(
                piece, model=model, altitude_km=altitude_km, epoch=None,
                defer_value_check=True, diffusion=diffusion, prepared=prep,
                hemispheres=settings.get("hemispheres", False), model_note=record[1],
                buffers=buffers if buffers is not None else _slab_buffers())
            state["totals"] = counts if state["totals"] is None else state["totals"] + counts
            state["verify"] = verify
            for key, value in flag_counts(out["partition_flag"]).items():
                flagged[key] = flagged.get(key, 0) + value
            if computed is not None and a == starts[-1]:
                computed()
            yield out

    def finish():
        if state["verify"] is not None:
            state["verify"](state["totals"])

    def attrs_of(digest_text):
        return _summary_attrs(src, digest_text, settings, epoch, geo, record)

    return Product(slabs(), len(starts), finish, attrs_of, loaded, flagged)


def _read_names(ds) -> list:
    """Return the variables the summary reads (counts are not used beside flux_err)."""
    return [v for v in ds.data_vars if not (v == "counts" and "flux_err" in ds.data_vars)]


_BUFFERS = {"pid": None, "buffers": None}


def _slab_buffers():
    """Return the process's reused slab output memory (used under the netCDF lock only)."""
    if _BUFFERS["pid"] != os.getpid():
        from ..pad.partition import OutputBuffers

        _BUFFERS["buffers"] = OutputBuffers()
        _BUFFERS["pid"] = os.getpid()
    return _BUFFERS["buffers"]


def release_buffers() -> None:
    """Drop this process's reused slab output memory (at the end of a run)."""
    _BUFFERS["pid"] = _BUFFERS["buffers"] = None


def _summary_attrs(source: Path, digest: str, settings: dict, epoch, geo_position,
                   record) -> dict:
    name, note = record
    attrs = {
        "title": f"beltkit loss-cone summary of {source.name}",
        "source": source.name,
        "source_sha256": digest,
        "beltkit_version": __version__,
        "field_model": name,
        "field_model_requested": settings["field"],
        "field_epoch": epoch_text(name, epoch, geo_position),
        "footpoint_altitude_km": float(settings["altitude_km"]),
        "beltkit_settings": settings_text(settings),
        "comment": "precipitating / quasi-trapped / trapped populations as defined in "
                   "beltkit's docs/conventions.md (bounce and drift loss cones)",
    }
    if note:  # the whole file's note (a slab's own may miss samples of other slabs)
        attrs["field_model_note"] = note
        attrs["beltkit_field_model_note"] = note
    kp = kp_text(settings)
    if kp:
        attrs["field_kp"] = kp
    return attrs


def psd_product(ds, src: Path, task: dict) -> Product:
    """Return the phase-space density at fixed invariants of one open flux file, computed."""
    from ..psd import at_fixed_invariants

    settings = task["settings"]
    model = field_model(task["model"], None, ds)
    out = at_fixed_invariants(ds, settings["mu_mev_per_g"], settings["k_g05_re"], model=model,
                              species=settings["species"],
                              lstar_cadence_s=settings["lstar_cadence_s"],
                              altitude_km=settings["altitude_km"])
    for name in POSITION_NAMES:
        if name not in out.variables and name in ds.variables and ds[name].dims == ("time",):
            out[name] = ds[name]
    # references to variables of the mapping step that are not in this file go
    for name in out.variables:
        refs = out[name].attrs.get("ancillary_variables")
        if refs is not None:
            kept = " ".join(r for r in str(refs).split() if r in out.variables)
            if kept:
                out[name].attrs["ancillary_variables"] = kept
            else:
                del out[name].attrs["ancillary_variables"]
    # K's unit, G^(1/2) R_E, has no UDUNITS form (no fractional powers): the file states
    # it in the long name and in beltkit_units instead of a `units` CF readers would misread
    for name in out.variables:
        if out[name].attrs.get("units") == K_UNITS:
            attrs = dict(out[name].attrs)
            del attrs["units"]
            attrs["beltkit_units"] = "G^(1/2) R_E"
            attrs["long_name"] = f"{attrs.get('long_name', name)} in G^(1/2) R_E"
            out[name].attrs = attrs
    out = out.load()
    used = out.attrs.get("beltkit_field_model", "")

    def attrs_of(digest_text):
        return {
            "title": f"beltkit phase-space density at fixed mu and K of {src.name}",
            "source": src.name,
            "source_sha256": digest_text,
            "beltkit_version": __version__,
            "field_model": used,
            "field_model_requested": settings["field"],
            "footpoint_altitude_km": float(settings["altitude_km"]),
            "beltkit_settings": settings_text(settings),
            **({"field_kp": kp_text(settings)} if kp_text(settings) else {}),
        }

    return Product([out], 1, None, attrs_of, loaded=True)

