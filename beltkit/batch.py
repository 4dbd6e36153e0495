"""Many flux files to loss-cone summaries, and summaries to a binned survey.

:func:`summarize` turns every input flux file into one summary file
(``<stem>.summary.nc``: the outputs of :func:`beltkit.pad.partition` per time
and energy, with the position carried along) in an output folder, and appends
one JSON line per file to ``run-report.jsonl`` there. It is safe to stop and
rerun:

* inputs are opened read-only and never written;
* each output is written to a temporary file in the output folder and renamed
  into place only when complete; temporary files left by a killed run are
  removed when the next run starts;
* an output whose recorded input checksum (SHA-256) and settings match the
  present ones is skipped as up to date; any other is redone
  (``overwrite=True`` redoes all);
* one bad file is reported (status ``"failed"`` with a one-line reason) and
  the others go on, unless ``fail_fast=True``.

Files run one after another in this process (``workers=1``), in parallel in
``workers`` local processes, or as tasks on an existing dask.distributed
cluster (``scheduler=`` address or Client). Each file is one task, so the
result does not depend on where it ran. A file is read and partitioned in
slabs along ``time`` (a day at 1 s is one slab; longer files stream in
smaller ones), so memory does not grow with its length; the netCDF library
is used by one thread at a time, and the compiled engine runs on every core
in between. In this process, file k is read and computed while file k - 1 is
written, flushed and renamed in a background thread.

:func:`survey` bins the summaries' fractions and integrated fluxes onto an
L x MLT (x time-window) grid and writes count, mean, median, standard
deviation and interquartile range per cell and energy, as CF-1.8 netCDF with
bounds for every binned coordinate.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import glob
import json
import os
import sys
import threading
import time as _time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .errors import ConventionError, SurveyError
from .io import (
    load_mapping,
    open_indexed,
    read_attributes,
    remove_stale_temporaries,
    sha256,
    write_dataset,
    write_stream,
)
from .units import K_UNITS

__all__ = [
    "DIFFUSION_DEFAULTS",
    "INPUT_SUFFIXES",
    "FIELD_CHOICES",
    "FileResult",
    "PSD_SUFFIX",
    "SUMMARY_SUFFIX",
    "REPORT_NAME",
    "SURVEY_VARIABLES",
    "SurveyError",
    "expand_inputs",
    "one_line",
    "psd_files",
    "summarize",
    "summarize_dataset",
    "survey",
]

#: Suffix of summary files (the input's stem goes in front).
SUMMARY_SUFFIX = ".summary.nc"
#: Suffix of phase-space density files (:func:`phase_space_density`).
PSD_SUFFIX = ".psd.nc"
#: Name of the run report written beside the outputs.
REPORT_NAME = "run-report.jsonl"
#: Variables of a summary that :func:`survey` bins (those present are used).
SURVEY_VARIABLES = (
    "fraction_precipitating",
    "fraction_quasi_trapped",
    "fraction_trapped",
    "flux_precipitating",
    "flux_quasi_trapped",
    "flux_trapped",
    "fraction_lost_north",
    "fraction_lost_south",
    "flux_lost_north",
    "flux_lost_south",
    "omni_flux",
    "loss_cone_filling",
    "diffusion_coefficient",
    "z0",
    "lifetime",
)
#: Survey variables that span decades: their median is the meaningful statistic.
_LOG_SPREAD = ("diffusion_coefficient", "z0", "lifetime")
#: File name endings that a folder given as input contributes.
INPUT_SUFFIXES = (".nc", ".nc4", ".cdf", ".h5", ".hdf5")
#: samples per slab of a summarized file (about 100 MB of float32 flux and errors in memory;
#: a day at 1 s is one slab)
_TIME_SLAB = 131072
#: samples per slab of files longer than one slab (peak memory below a one-slab file's)
_STREAM_SLAB = 65536
_POSITION = ("L", "mlat", "mlt")


@dataclass
class FileResult:
    """What happened to one input file.

    Attributes
    ----------
    input : str
        The input path.
    output : str or None
        The summary path (None when no output name could be formed).
    status : str
        ``"ok"`` (written), ``"skipped"`` (up to date, or not attempted after
        an earlier failure with ``fail_fast``) or ``"failed"``.
    reason : str
        One line: why it failed or was skipped; empty when ok.
    seconds : float
        Wall time spent on the file.
    """

    input: str
    output: str | None
    status: str
    reason: str = ""
    seconds: float = 0.0

    def to_dict(self) -> dict:
        """Return the result as a JSON-ready dict.

        Keys ``file`` (the input), ``status``, ``reason``, ``seconds`` and
        ``output`` (the summary file, or None when none exists for this input).
        """
        has_output = self.status == "ok" or self.reason == "up to date"
        return {"file": self.input, "status": self.status, "reason": self.reason,
                "seconds": round(float(self.seconds), 3),
                "output": self.output if has_output else None}


# ------------------------------------------------------------------------ helpers


def one_line(exc: BaseException, path=None) -> str:
    """Return an exception as one line of text (problems joined by ``; ``).

    With `path`, a leading ``"<file name>: "`` is dropped (the caller's line
    names the file already).
    """
    if isinstance(exc, ConventionError):
        text = "; ".join(exc.problems) or str(exc)
    else:
        text = str(exc) or type(exc).__name__
    text = " ".join(text.split())
    for prefix in ((str(path), Path(path).name) if path is not None else ()):
        if text.startswith(prefix + ": "):
            text = text[len(prefix) + 2:]
            break
    if isinstance(exc, (KeyError, TypeError, AttributeError, IndexError, ZeroDivisionError)):
        text = f"{type(exc).__name__}: {text}"
    return text


def expand_inputs(inputs, *, suffixes=INPUT_SUFFIXES) -> list[Path]:
    """Expand files, folders and glob patterns into a sorted, de-duplicated list of files.

    A folder contributes its files with one of `suffixes` (not hidden ones,
    not summaries or psd files); a pattern with ``*``, ``?`` or ``[`` is globbed; any other
    entry is kept as given (a missing file then fails on its own line).
    """
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    seen, out = set(), []
    for item in inputs:
        text = str(item)
        if any(ch in text for ch in "*?["):
            found = [Path(p) for p in sorted(glob.glob(text))]
        elif Path(text).is_dir():
            found = sorted(
                p for p in Path(text).iterdir()
                if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in suffixes
                and not p.name.endswith((SUMMARY_SUFFIX, PSD_SUFFIX))
            )
        else:
            found = [Path(text)]
        for p in found:
            key = os.path.abspath(p)
            if key not in seen:
                seen.add(key)
                out.append(p)
    return out


def _output_name(path: Path, suffix: str = SUMMARY_SUFFIX) -> str:
    name = path.name
    for ext in (".nc4", ".nc", ".cdf", ".hdf5", ".h5"):
        if name.lower().endswith(ext):
            name = name[: -len(ext)]
            break
    else:
        name = path.stem
    return name + suffix


_sync_lock = threading.Lock()
_sync_depth = 0
_sync_saved = None


@contextlib.contextmanager
def _single_threaded():
    """Run dask computations in this block with the synchronous scheduler.

    Safe when several threads of one process (a threaded dask.distributed
    worker) enter at once: the setting is made by the first and undone by
    the last.
    """
    import dask

    global _sync_depth, _sync_saved
    with _sync_lock:
        if _sync_depth == 0:
            _sync_saved = dask.config.set(scheduler="synchronous")
        _sync_depth += 1
    try:
        yield
    finally:
        with _sync_lock:
            _sync_depth -= 1
            if _sync_depth == 0:
                _sync_saved.__exit__(None, None, None)
                _sync_saved = None


#: Field models that ``field=`` names ("auto": IGRF with ``position_geo``, else the dipole;
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
        from .field.t89 import T89

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
        from .field.t89 import T89

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


def _storm_field(field, kp):
    """Turn ``field="t89"`` and ``kp`` into a :class:`StormField`; refuse a stray ``kp``."""
    if isinstance(field, str) and field == "t89":
        if kp is None:
            raise ValueError("field 't89' needs Kp: give kp= a value 0-9, a Kp series "
                             "(beltkit.field.read_kp) or the name of a Kp variable of the files "
                             "(--kp VALUE|FILE or --kp-variable NAME)")
        return StormField(kp)
    if kp is not None:
        raise ValueError(f"kp applies to field 't89' only, not to field={field!r}")
    return field


def _check_field(field, epoch):
    """Refuse an unknown field name, or an epoch override with a model that does not take one."""
    if not isinstance(field, str):
        if epoch is not None and getattr(field, "name", None) == "t89":
            raise ValueError("an epoch override applies to the dipole model only, not to "
                             "field='t89'")
        return
    if field not in FIELD_CHOICES:
        raise ValueError(f"field model must be one of {', '.join(map(repr, FIELD_CHOICES))}, "
                         f"got {field!r}")
    if field != "dipole" and epoch is not None:
        raise ValueError(f"an epoch override applies to the dipole model only, not to "
                         f"field={field!r}: the IGRF is evaluated at each sample's time (drop "
                         f"--epoch, or use --field dipole)")


def _field_model(field, epoch, ds):
    """Return the ``model`` argument for :func:`beltkit.pad.partition`.

    ``"auto"`` becomes the IGRF where the dataset carries ``position_geo``
    and the centred dipole (closed forms from ``L`` and ``mlat``) otherwise.
    """
    if isinstance(field, StormField):
        return field.resolve(ds)
    if not isinstance(field, str):
        return field
    _check_field(field, epoch)
    if field == "t89":
        raise ValueError("field 't89' needs Kp (kp=...)")
    name = field
    if name == "auto":
        name = "igrf" if "position_geo" in ds.variables else "dipole"
    if name == "dipole":
        if epoch is None or "position_geo" not in ds.variables:
            # closed forms from L and mlat; the dipole's strength cancels in the loss cones
            return "dipole"
        from .field import CenteredDipole

        return CenteredDipole(epoch=epoch)
    from .field import as_model

    return as_model("igrf")


def _epoch_text(field, epoch, geo_position) -> str:
    if epoch is not None:
        return f"{epoch} (fixed by the caller)"
    if field == "igrf" or geo_position:
        return "time of each sample"
    from .constants import B0_EPOCH

    return f"{B0_EPOCH:g} (dipole closed forms from the file's L and mlat)"


#: Options of ``summarize(..., diffusion=...)`` and their defaults.
DIFFUSION_DEFAULTS = {"loss_time": "half_bounce", "species": "electron", "interval_sigma": 2.0}


def _diffusion_options(diffusion):
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
    from .diffusion import LOSS_TIMES
    from .particles import get_species

    if opts["loss_time"] not in LOSS_TIMES:
        raise ValueError(f"diffusion loss_time must be one of {', '.join(LOSS_TIMES)}, got "
                         f"{opts['loss_time']!r}")
    sigma = float(opts["interval_sigma"])
    if not (np.isfinite(sigma) and sigma > 0):
        raise ValueError(f"diffusion interval_sigma must be a positive number of sigmas, got "
                         f"{opts['interval_sigma']!r}")
    return {"loss_time": str(opts["loss_time"]), "species": get_species(opts["species"]).name,
            "interval_sigma": sigma}


def _settings(field, altitude_km, epoch, mapping, compress, diffusion=None) -> dict:
    if mapping is None:
        mapping_key = None
    elif isinstance(mapping, dict):
        mapping_key = {k: mapping.get(k, {}) for k in ("variables", "units", "dimensions")}
    else:
        mapping_key = sha256(mapping)
    settings = {
        "field": field if isinstance(field, str) else getattr(field, "name", repr(field)),
        **(field.settings_key() if isinstance(field, StormField) else {}),
        "altitude_km": float(altitude_km),
        "epoch": None if epoch is None else str(epoch),
        "mapping": mapping_key,
        "compress": int(4 if compress is True else 0 if not compress else compress),
        "beltkit_version": __version__,
    }
    if diffusion is not None:  # only then: summaries made without it stay up to date
        settings["diffusion"] = dict(diffusion)
    return settings


def _settings_text(settings: dict) -> str:
    return json.dumps(settings, sort_keys=True, separators=(",", ":"))


# ---------------------------------------------------------------------- one file


def summarize_dataset(ds: xr.Dataset, *, field="auto", altitude_km=100.0,
                      epoch=None, diffusion=None) -> xr.Dataset:
    """Partition one flux dataset and keep the position for the survey.

    Parameters
    ----------
    ds : xarray.Dataset
        Convention-following flux dataset (lazy or not; not modified).
    field : {"auto", "dipole", "igrf"} or FieldModel
        Field model for the loss cones. "auto" (default): the IGRF at each
        sample's time where the dataset carries ``position_geo``, else the
        centred dipole from ``L`` and ``mlat``.
    altitude_km : float
        Footpoint altitude of the loss cones.
    epoch : float or str, optional
        Epoch of the dipole (decimal year); used when the dataset gives its
        position in GEO coordinates (``field="dipole"`` only).
    diffusion : bool or dict, optional
        Add the outputs of :func:`beltkit.diffusion.from_pitch_angle_data`
        (``z0``, ``diffusion_coefficient``, ``lifetime``, their intervals, the
        regime and flags), computed with the partition's loss cones. True takes
        :data:`DIFFUSION_DEFAULTS`; a dict sets some of ``loss_time``
        (``"half_bounce"`` or ``"quarter_bounce"``), ``species`` and
        ``interval_sigma``.

    Returns
    -------
    xarray.Dataset
        :func:`beltkit.pad.partition`'s result plus ``L``, ``mlat`` and ``mlt``
        per time when the input has them; its attributes name the model used
        (and, with ``diffusion``, the diffusion conventions as ``beltkit_*``).
    """
    return _summary(ds, field=field, altitude_km=altitude_km, epoch=epoch,
                    diffusion=_diffusion_options(diffusion))[0]


def _summary(ds, *, field, altitude_km, epoch, defer_value_check=False, buffers=None,
             diffusion=None):
    """:func:`summarize_dataset`, returning ``(summary, pending value check or None)``.

    With ``defer_value_check`` the flux values of lazy data are checked by
    the engine while the summary is computed (see
    ``beltkit.pad.partition.partition_slab``), instead of in a separate pass
    over the file before it.
    """
    from .pad.partition import partition_slab

    model = _field_model(field, epoch, ds)
    out, pending = partition_slab(ds, model=model, altitude_km=altitude_km,
                              defer_value_check=defer_value_check, buffers=buffers)
    if diffusion is not None:
        counts = None if pending is None else pending[0]
        valid = None if counts is None or hasattr(counts, "dask") else np.asarray(counts)[0]
        out = _with_diffusion(out, ds, model, altitude_km, diffusion, valid)
    for name in _POSITION:
        if name not in out.variables and name in ds.variables and ds[name].dims == ("time",):
            out[name] = ds[name]
    return out, pending


#: diffusion outputs that do not depend on the measured flux (kept where a slab has none)
_DIFFUSION_MODEL_ONLY = ("loss_time", "strong_diffusion_lifetime")


def _with_diffusion(out, ds, model, altitude_km, options, valid=None):
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
    from .diffusion import from_pitch_angle_data

    dead = None if valid is None or not ds.sizes.get("time") else ~(np.asarray(valid) > 0)
    src = ds
    if dead is not None and dead.any():
        src = _placeholder_channels(ds, model, np.flatnonzero(dead))
    res = from_pitch_angle_data(src, model=model, altitude_km=altitude_km, cones=out,
                                species=options["species"], loss_time=options["loss_time"],
                                interval_sigma=options["interval_sigma"], allow_negative=True)
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


def _placeholder_channels(ds, model, channels):
    """Return a copy of ``ds`` with one valid flux value in each of the given energy channels."""
    from .pad.conventions import check

    mask = check(ds, model=model, check_values=False).flux_mask
    flux = ds["flux"]
    value = 1.0
    if not (mask.vmin <= value <= mask.vmax) or value in mask.fill:
        value = mask.vmin if np.isfinite(mask.vmin) else mask.vmax
    other = [d for d in flux.dims if d not in ("time", "energy")][0]
    filled = flux.copy(deep=True)
    filled[{"time": 0, "energy": channels, other: 0}] = value
    return ds.assign(flux=filled)


def _summary_slabs(ds, *, field, altitude_km, epoch, slab=None, computed=None,
                   diffusion=None):
    """Summarize a lazily indexed dataset one time slab at a time.

    Returns ``(slabs, finish, count, record)``: a generator of the summaries of consecutive
    slabs of ``slab`` samples (each read from disk only when its turn comes,
    partitioned eagerly by the compiled engine on every core, then dropped),
    and a function that raises the :class:`ConventionError` of the flux-value
    checks summed over the whole file, to call once every slab is done. The
    structure, the time order and the positions are checked on the whole
    file before the first slab. ``count`` is the number of slabs; ``record`` the
    field model's name and the file's low-altitude note (:func:`_model_record`).
    ``computed``, if given, is called once the last slab is computed (before
    it is written). With ``diffusion`` (checked options) each slab is read
    into memory once and its diffusion outputs are added (:func:`_with_diffusion`).
    """
    from .pad.conventions import check

    model = _field_model(field, epoch, ds)
    prep = check(ds, model=model, check_values=False)
    record = _model_record(ds, model, prep)
    n = ds.sizes.get("time", 0)
    if slab is None:  # a file up to one slab long in one piece; longer ones in smaller slabs
        slab = _TIME_SLAB if n <= _TIME_SLAB else _STREAM_SLAB
    slab = int(slab)
    starts = range(0, n, slab) if n else [0]  # an empty file still gets its summary
    state = {"totals": None, "verify": None}

    def slabs():
        for a in starts:
            piece = ds.isel(time=slice(a, a + slab)) if n else ds
            if diffusion is not None:  # read once for the partition and the diffusion
                piece = piece[_read_names(piece)].load()
            # each slab is written out before the next is computed: the memory of its
            # outputs serves the next slab, and the next file (one file at a time)
            out, (counts, verify) = _summary(piece, field=model, altitude_km=altitude_km,
                                             epoch=None, defer_value_check=True,
                                             buffers=_slab_buffers(), diffusion=diffusion)
            state["totals"] = counts if state["totals"] is None else state["totals"] + counts
            state["verify"] = verify
            if computed is not None and a == starts[-1]:
                computed()
            yield out

    def finish():
        if state["verify"] is not None:
            state["verify"](state["totals"])

    return slabs(), finish, len(starts), record


def _read_names(ds) -> list:
    """Return the variables the summary reads (counts are not used beside flux_err)."""
    return [v for v in ds.data_vars if not (v == "counts" and "flux_err" in ds.data_vars)]


def _model_record(ds, model, prep) -> tuple:
    """Return ``(name, note)``: the resolved model's name and its low-altitude note for a file.

    The note (empty unless the centred dipole is used for samples below
    2,000 km) is computed on the whole file, so that it does not depend on
    how the file is cut into slabs.
    """
    from .pad.losscones import dipole_low_altitude_note, model_name

    return model_name(model), dipole_low_altitude_note(ds, prep, model)


_BUFFERS = {"pid": None, "buffers": None}


def _slab_buffers():
    """Return the process's reused slab output memory (used under ``_FILE_LOCK`` only)."""
    if _BUFFERS["pid"] != os.getpid():
        from .pad.partition import OutputBuffers

        _BUFFERS["buffers"] = OutputBuffers()
        _BUFFERS["pid"] = os.getpid()
    return _BUFFERS["buffers"]


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
        "field_epoch": _epoch_text(name, epoch, geo_position),
        "footpoint_altitude_km": float(settings["altitude_km"]),
        "beltkit_settings": _settings_text(settings),
        "comment": "precipitating / quasi-trapped / trapped populations as defined in "
                   "beltkit's docs/conventions.md (bounce and drift loss cones)",
    }
    if note:  # the whole file's note (a slab's own may miss samples of other slabs)
        attrs["field_model_note"] = note
        attrs["beltkit_field_model_note"] = note
    kp = _kp_text(settings)
    if kp:
        attrs["field_kp"] = kp
    return attrs


def _kp_text(settings: dict) -> str | None:
    """Say which Kp a storm-time (T89) output used, from its settings; None without one."""
    if "kp" in settings:
        return f"{settings['kp']:g} for every sample"
    if "kp_variable" in settings:
        return f"per sample from the input's variable {settings['kp_variable']!r}"
    if "kp_series_sha256" in settings:
        return (f"a Kp series of {settings['kp_series_length']} values (SHA-256 of values and "
                f"times {settings['kp_series_sha256']})")
    return None


_HASHER = {"pid": None, "pool": None}


def _hasher():
    """One background thread per process for input checksums (made again after a fork)."""
    if _HASHER["pid"] != os.getpid():
        from concurrent.futures import ThreadPoolExecutor

        _HASHER["pool"] = ThreadPoolExecutor(max_workers=1, thread_name_prefix="beltkit-sha256")
        _HASHER["pid"] = os.getpid()
        _HASHER["ahead"] = {}
    return _HASHER["pool"]


def _digest(src: Path):
    """Return a future of the input's SHA-256 (the one started ahead, if any)."""
    pool = _hasher()
    fut = _HASHER["ahead"].pop(str(src), None)
    return fut if fut is not None else pool.submit(sha256, src)


def _digest_ahead(src) -> None:
    """Start the checksum of the next input, which the hasher reads while this one is written.

    The checksum (about 0.1 s of CPU per 100 MB) then overlaps the single-threaded
    netCDF writing of the file before instead of the next file's compute.
    """
    pool = _hasher()
    if str(src) not in _HASHER["ahead"]:
        _HASHER["ahead"][str(src)] = pool.submit(sha256, src)


def _digests_dropped() -> None:
    """Forget the checksums started ahead for files that will not be processed."""
    if _HASHER["pid"] == os.getpid():
        for fut in _HASHER["ahead"].values():
            fut.cancel()
        _HASHER["ahead"].clear()


# The netCDF-C and HDF5 libraries are not thread-safe: a threaded dask worker
# must not read or write two files at once. One file at a time per process.
_FILE_LOCK = threading.Lock()


def _process_file(task: dict) -> FileResult:
    """Summarize one file (runs in this process, a worker process or a dask worker).

    Files are processed one at a time per process (see ``_FILE_LOCK``); run
    dask.distributed workers with one thread each, more processes for speed.
    """
    return _committed(*_process_file_deferred(task))


def _process_file_deferred(task: dict):
    """Summarize one file up to the flush and rename of its output.

    Returns ``(result, commit)``: ``commit`` (None when nothing was written)
    flushes the temporary output and renames it into place; it makes no
    netCDF call, so it runs outside ``_FILE_LOCK`` (see :func:`_committed`).
    """
    with _FILE_LOCK:
        return _process_file_locked(task)


def _committed(result: FileResult, commit) -> FileResult:
    """Run a file's deferred commit; return its final result (failed if the commit fails)."""
    if commit is None:
        return result
    t0 = _time.perf_counter()
    try:
        commit()
    except Exception as exc:
        return FileResult(result.input, result.output, "failed",
                          one_line(exc, Path(result.input)), result.seconds)
    return FileResult(result.input, result.output, result.status, result.reason,
                      result.seconds + _time.perf_counter() - t0)


def _up_to_date(task: dict, digest) -> bool:
    """Whether the task's output records its input's checksum and the present settings."""
    out = Path(task["output"])
    if task["overwrite"] or not out.exists():
        return False
    attrs = read_attributes(out)
    return (attrs.get("source_sha256") == digest.result()
            and attrs.get("beltkit_settings") == _settings_text(task["settings"]))


def _process_file_locked(task: dict):
    t0 = _time.perf_counter()
    src = Path(task["input"])
    out = Path(task["output"])
    settings = task["settings"]
    ds = None
    digest = None
    try:
        if not src.is_file():
            raise FileNotFoundError(f"{src}: no such file")
        # the checksum is read in another thread while the file is summarized (hashlib
        # and file reads release the GIL); it is needed before only to skip a file
        digest = _digest(src)
        if _up_to_date(task, digest):
            return FileResult(str(src), str(out), "skipped", "up to date",
                              _time.perf_counter() - t0), None
        with _single_threaded():
            ds = open_indexed(src, mapping=task["mapping"])
            nxt = task.get("next_input")
            if task.get("product") == "psd":
                slabs, finish, count, attrs_of = _psd_slabs(ds, src, task)
            else:
                slabs, finish, count, record = _summary_slabs(
                    ds, field=task["field"], altitude_km=settings["altitude_km"],
                    epoch=task["epoch"], diffusion=settings.get("diffusion"),
                    # the next input's checksum is read while this summary is written
                    computed=(lambda: _digest_ahead(Path(nxt))) if nxt else None)
                geo = "position_geo" in ds.variables

                def attrs_of(digest_text):
                    return _summary_attrs(src, digest_text, settings, task["epoch"], geo, record)
            # the checksum, if already known, goes in with the other attributes;
            # otherwise it is added once the data are written
            known = digest.done() and digest.exception() is None
            attrs = attrs_of(digest.result() if known else "")
            # the flux values are checked while the summary is computed (one pass over
            # the file); a refused file leaves no output (write_stream's finish)
            commit = write_stream(
                slabs, out, count=count, compress=settings["compress"],
                history=task["command"], attrs=attrs, finish=finish,
                late_attrs=None if known else (lambda: {"source_sha256": digest.result()}),
                defer_commit=True)
        return FileResult(str(src), str(out), "ok", "", _time.perf_counter() - t0), commit
    except Exception as exc:  # one file's failure is reported, never fatal to the run
        if task.get("debug"):
            import traceback

            traceback.print_exc()
        return FileResult(str(src), str(out), "failed", one_line(exc, src),
                          _time.perf_counter() - t0), None
    finally:
        if ds is not None:
            ds.close()
        if digest is not None:
            digest.cancel()


def _read_and_compute(task: dict, buffers):
    """First stage of a pipelined file: read it under the netCDF lock, then summarize it.

    Returns ``(result, job)``: a final result (skipped or failed) and None; or
    None and the job for :func:`_write_job`, the summary held in memory (its
    outputs in ``buffers``), computed with the lock released so that the
    previous file can be written meanwhile; or ``(None, None)`` for a file
    longer than one slab, which is streamed by :func:`_process_file` instead.
    """
    from .pad.conventions import check

    t0 = _time.perf_counter()
    src = Path(task["input"])
    out = Path(task["output"])
    settings = task["settings"]
    digest = None
    if task.get("product") == "psd":
        return None, None  # not pipelined: done whole by _process_file
    try:
        if not src.is_file():
            raise FileNotFoundError(f"{src}: no such file")
        digest = _digest(src)
        with _FILE_LOCK, _single_threaded():
            if _up_to_date(task, digest):
                return FileResult(str(src), str(out), "skipped", "up to date",
                                  _time.perf_counter() - t0), None
            ds = open_indexed(src, mapping=task["mapping"])
            try:
                model = _field_model(task["field"], task["epoch"], ds)
                prep = check(ds, model=model, check_values=False)
                if ds.sizes.get("time", 0) > _TIME_SLAB:
                    return None, None
                piece = ds[_read_names(ds)].load()
                geo = "position_geo" in ds.variables
                record = _model_record(piece, model, prep)
            finally:
                ds.close()
        summary, (counts, verify) = _summary(piece, field=model,
                                             altitude_km=settings["altitude_km"], epoch=None,
                                             defer_value_check=True, buffers=buffers,
                                             diffusion=settings.get("diffusion"))
        verify(counts)  # a refused file is never written
        if task.get("next_input"):
            _digest_ahead(Path(task["next_input"]))  # read while this file is written
        return None, {"task": task, "summary": summary, "digest": digest, "geo": geo,
                      "record": record, "t0": t0}
    except Exception as exc:  # one file's failure is reported, never fatal to the run
        if task.get("debug"):
            import traceback

            traceback.print_exc()
        if digest is not None:
            digest.cancel()
        return FileResult(str(src), str(out), "failed", one_line(exc, src),
                          _time.perf_counter() - t0), None


def _write_job(job: dict) -> FileResult:
    """Second stage of a pipelined file: write its summary (under the lock) and commit it."""
    task, digest = job["task"], job["digest"]
    src, out, settings = Path(task["input"]), Path(task["output"]), task["settings"]
    try:
        with _FILE_LOCK:
            known = digest.done() and digest.exception() is None
            attrs = _summary_attrs(src, digest.result() if known else "", settings,
                                   task["epoch"], job["geo"], job["record"])
            commit = write_stream(
                [job["summary"]], out, count=1, compress=settings["compress"],
                history=task["command"], attrs=attrs,
                late_attrs=None if known else (lambda: {"source_sha256": digest.result()}),
                defer_commit=True)
        commit()  # flush and rename: no netCDF call, outside the lock
        return FileResult(str(src), str(out), "ok", "", _time.perf_counter() - job["t0"])
    except Exception as exc:
        if task.get("debug"):
            import traceback

            traceback.print_exc()
        return FileResult(str(src), str(out), "failed", one_line(exc, src),
                          _time.perf_counter() - job["t0"])
    finally:
        digest.cancel()


# --------------------------------------------------------------------- many files


def _default_command(inputs, out_dir, **options) -> str:
    shown = ", ".join(f"{k}={v!r}" for k, v in options.items())
    return f"beltkit.batch.summarize({len(inputs)} file(s), {str(out_dir)!r}, {shown})"


def _format_line(r: FileResult) -> str:
    if r.status == "ok":
        return f"ok  {r.input} -> {r.output} ({r.seconds:.1f} s)"
    if r.status == "skipped":
        return f"skipped  {r.input}: {r.reason}"
    return f"FAILED  {r.input}: {r.reason}"


def summarize(inputs, out_dir, *, field="auto", altitude_km=100.0, epoch=None,
              mapping=None, compress=True, overwrite=False, fail_fast=False, workers=1,
              scheduler=None, command=None, log=None, progress=None,
              debug=False, diffusion=None, kp=None) -> list[FileResult]:
    """Summarize flux files into loss-cone summary files, safely and resumably.

    Parameters
    ----------
    inputs : str, path or sequence of them
        Files, folders (their ``.nc``/``.cdf`` files) or glob patterns.
    out_dir : str or path
        Output folder (created if needed); gets ``<stem>.summary.nc`` per input
        and ``run-report.jsonl``.
    field : {"auto", "dipole", "igrf", "t89"}
        Field model of the loss cones. "t89": the IGRF plus Tsyganenko's
        (1989) external field with ``kp``. "auto" (default) chooses per file: the
        IGRF at each sample's time where the file carries ``position_geo``,
        else the centred dipole from ``L`` and ``mlat`` (an ``L`` declared
        non-dipole by its ``L_definition`` attribute is then refused). Each
        summary records the model it used in ``field_model`` (and the request
        in ``field_model_requested``); a dipole summary of samples below
        2,000 km altitude carries ``field_model_note``.
    altitude_km : float
        Footpoint altitude of the loss cones (km).
    epoch : float or str, optional
        Dipole epoch override (decimal year), used for GEO positions
        (``field="dipole"`` only).
    mapping : str, path or dict, optional
        Variable-name mapping for non-conventional files (see :mod:`beltkit.io`).
    compress : bool or int
        zlib compression of the outputs (True = level 4, 0/False = none).
    overwrite : bool
        Redo every output even if up to date.
    fail_fast : bool
        Stop at the first failed file (files not yet started are reported as
        skipped, "not attempted").
    workers : int
        Local worker processes (1: in this process).
    scheduler : str or distributed.Client, optional
        Address of a running dask.distributed scheduler (or a Client); each
        file becomes one task there.
    command : str, optional
        Command line recorded in the outputs' ``history``.
    log : callable, optional
        Called with one line per file (``ok  in -> out (1.2 s)``,
        ``skipped  in: up to date``, ``FAILED  in: reason``).
    progress : bool, optional
        Show a tqdm progress bar on stderr (default: when stderr is a terminal).
    debug : bool
        Print the traceback of each failure to stderr.
    diffusion : bool or dict, optional
        Add the pitch-angle diffusion outputs of
        :func:`beltkit.diffusion.from_pitch_angle_data` to every summary (see
        :func:`summarize_dataset`): True for :data:`DIFFUSION_DEFAULTS`, or a
        dict with some of ``loss_time``, ``species`` and ``interval_sigma``.
        The options are part of the settings that decide whether an output is
        up to date, so changing them redoes the files.
    kp : float, xarray.DataArray or str, optional
        Kp for ``field="t89"`` (required there, refused otherwise): one value
        0-9 for every sample, a Kp series along time (e.g. from
        :func:`beltkit.field.read_kp`), or the name of a variable of each
        file that holds Kp per sample. The Kp (or the series' checksum, or
        the variable's name) is part of the settings that decide whether an
        output is up to date.

    Returns
    -------
    list of FileResult
        One per input, in input order.

    Raises
    ------
    beltkit.io.MappingError
        If the mapping file itself is malformed (nothing is run).
    ValueError
        For an unknown field model, an epoch with a model other than the
        dipole, workers < 1, or unknown diffusion options.
    """
    if workers is None or int(workers) < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    _check_field(field, epoch)
    field = _storm_field(field, kp)
    diffusion = _diffusion_options(diffusion)
    mapping_checked = load_mapping(mapping) if mapping is not None else None
    files = expand_inputs(inputs)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(out_dir)
    settings = _settings(field, altitude_km, epoch, mapping, compress, diffusion)
    if command is None:
        extra = {} if diffusion is None else {"diffusion": diffusion}
        command = _default_command(files, out_dir, field=field, altitude_km=altitude_km,
                                   epoch=epoch, overwrite=overwrite, **extra)
    return _run_batch(files, out_dir, {
        "settings": settings, "field": field, "epoch": epoch, "mapping": mapping_checked,
        "overwrite": bool(overwrite), "command": command, "debug": bool(debug)},
        suffix=SUMMARY_SUFFIX, desc="summarize", fail_fast=fail_fast, workers=workers,
        scheduler=scheduler, log=log, progress=progress)


def _psd_settings(mu, k, field, species, lstar_cadence_s, altitude_km, mapping,
                  compress) -> dict:
    settings = _settings(field, altitude_km, None, mapping, compress)
    settings.update({"product": "psd", "mu_mev_per_g": [float(v) for v in mu],
                     "k_g05_re": [float(v) for v in k], "species": species,
                     "lstar_cadence_s": float(lstar_cadence_s)})
    return settings


def _psd_slabs(ds, src: Path, task: dict):
    """Compute the psd of one file: ``([dataset], None, 1, attrs_of(digest_text))``."""
    from .psd import at_fixed_invariants

    settings = task["settings"]
    model = _field_model(task["field"], None, ds)
    out = at_fixed_invariants(ds, settings["mu_mev_per_g"], settings["k_g05_re"], model=model,
                              species=settings["species"],
                              lstar_cadence_s=settings["lstar_cadence_s"],
                              altitude_km=settings["altitude_km"])
    for name in _POSITION:
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
            "beltkit_settings": _settings_text(settings),
            **({"field_kp": _kp_text(settings)} if _kp_text(settings) else {}),
        }

    return [out], None, 1, attrs_of


def psd_files(inputs, out_dir, mu_mev_per_g, k_g05_re, *, field="auto", species="electron",
              lstar_cadence_s=60.0, altitude_km=100.0, mapping=None, compress=True,
              overwrite=False, fail_fast=False, workers=1, scheduler=None, command=None,
              log=None, progress=None, debug=False, kp=None) -> list[FileResult]:
    """Phase-space density at fixed invariants of flux files, safely and resumably.

    The batch form of :func:`beltkit.psd.at_fixed_invariants`: one
    ``<stem>.psd.nc`` per input in `out_dir`, with the same safety as
    :func:`summarize` (atomic outputs, one-line per-file failures, skipped
    when the output records the input's checksum and the present settings,
    ``run-report.jsonl``, local worker processes or a dask.distributed
    cluster).

    Parameters
    ----------
    inputs : str, path or sequence of them
        Files, folders or glob patterns.
    out_dir : str or path
        Output folder (created if needed).
    mu_mev_per_g, k_g05_re : float or sequence of float
        First invariants (MeV/G) and second invariants (G^(1/2) R_E).
    field : {"auto", "dipole", "igrf", "t89"}
        "auto": the IGRF for a file with ``position_geo``, else the centred
        dipole from ``L`` and ``mlat`` (where L* = L); "t89": the IGRF plus
        Tsyganenko's (1989) external field with ``kp``.
    species : str
        Species of the flux.
    lstar_cadence_s : float
        Cadence (s) of the field-line work (K, B_m, L*) in a field model,
        interpolated linearly in time to the samples.
    altitude_km : float
        Loss altitude of the loss cones and drift shells (km).
    mapping, compress, overwrite, fail_fast, workers, scheduler, command, log, progress, debug, kp
        As for :func:`summarize`.

    Returns
    -------
    list of FileResult
        One per input, in input order.

    Raises
    ------
    ValueError
        For an unknown field model, invalid invariants or cadence, or workers < 1.
    """
    from .particles import get_species

    if workers is None or int(workers) < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    _check_field(field, None)
    field = _storm_field(field, kp)
    mu = np.atleast_1d(np.asarray(mu_mev_per_g, dtype=float))
    k = np.atleast_1d(np.asarray(k_g05_re, dtype=float))
    if mu.ndim != 1 or k.ndim != 1 or not mu.size or not k.size:
        raise ValueError("give at least one mu (MeV/G) and one K (G^(1/2) R_E)")
    if not (np.all(np.isfinite(mu)) and np.all(mu > 0)):
        raise ValueError(f"mu must be positive numbers of MeV/G, got {mu.tolist()}")
    if not (np.all(np.isfinite(k)) and np.all(k >= 0)):
        raise ValueError(f"K must be numbers >= 0 of G^(1/2) R_E, got {k.tolist()}")
    if not (np.isfinite(lstar_cadence_s) and lstar_cadence_s > 0):
        raise ValueError(f"lstar_cadence_s must be a positive number of seconds, got "
                         f"{lstar_cadence_s!r}")
    species = get_species(species).name
    mapping_checked = load_mapping(mapping) if mapping is not None else None
    files = expand_inputs(inputs)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(out_dir)
    settings = _psd_settings(mu, k, field, species, lstar_cadence_s, altitude_km, mapping,
                             compress)
    if command is None:
        command = (f"beltkit.batch.psd_files({len(files)} file(s), {str(out_dir)!r}, "
                   f"mu={mu.tolist()}, k={k.tolist()}, field={field!r})")
    return _run_batch(files, out_dir, {
        "product": "psd", "settings": settings, "field": field, "epoch": None,
        "mapping": mapping_checked, "overwrite": bool(overwrite), "command": command,
        "debug": bool(debug)},
        suffix=PSD_SUFFIX, desc="psd", fail_fast=fail_fast, workers=workers,
        scheduler=scheduler, log=log, progress=progress)


def _run_batch(files, out_dir, common, *, suffix, desc, fail_fast, workers, scheduler, log,
               progress) -> list[FileResult]:
    """Run one per-file job (``common`` plus the file's input and output) over every file.

    Shared by :func:`summarize` and :func:`psd_files`: duplicate
    output names, the run report, the progress bar, and the sequential,
    process-pool or dask.distributed run.
    """
    tasks, results = [], {}
    by_output = {}
    for i, src in enumerate(files):
        target = out_dir / _output_name(src, suffix)
        key = os.path.abspath(target)
        if key in by_output:
            results[i] = FileResult(str(src), str(target), "failed",
                                    f"its output name {target.name} is also the output of "
                                    f"{files[by_output[key]]}; rename one of the inputs")
            continue
        by_output[key] = i
        tasks.append((i, {"input": str(src), "output": str(target), **common}))
    started = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    report = out_dir / "run-report.jsonl"
    if progress is None:
        progress = sys.stderr.isatty()
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(files), file=sys.stderr, unit="file", desc=desc)

    def emit(r: FileResult):
        with open(report, "a", encoding="utf-8") as fh:
            fh.write(json.dumps({"run_started": started, **r.to_dict()}) + "\n")
        if log is not None:
            if bar is not None:
                bar.clear()
            log(_format_line(r))
        if bar is not None:
            bar.update(1)

    for r in results.values():
        emit(r)
    stop = fail_fast and any(r.status == "failed" for r in results.values())
    try:
        if stop:
            pass
        elif scheduler is not None:
            _run_distributed(tasks, results, scheduler, fail_fast, emit)
        elif int(workers) > 1:
            _run_processes(tasks, results, int(workers), fail_fast, emit)
        else:
            _run_sequential(tasks, results, fail_fast, emit)
    finally:
        for i, task in tasks:
            if i not in results:
                r = FileResult(task["input"], task["output"], "skipped",
                               "not attempted: an earlier file failed (fail-fast)")
                results[i] = r
                emit(r)
        if bar is not None:
            bar.close()
        with _FILE_LOCK:  # the reused output memory is not kept beyond the run
            _BUFFERS["pid"] = _BUFFERS["buffers"] = None
    return [results[i] for i in sorted(results)]


def _run_sequential(tasks, results, fail_fast, emit):
    """Summarize the files one after another in this process, as a two-stage pipeline.

    File k is read (under the netCDF lock) and summarized while a background
    thread writes, flushes and renames file k - 1; a file is reported once its
    output is in place, in input order. Two sets of output memory alternate
    between the stages. With ``fail_fast`` every file is finished before the
    next one starts, so that nothing follows a failure.
    """
    if fail_fast:
        for i, task in tasks:
            results[i] = r = _process_file(task)
            emit(r)
            if r.status == "failed":
                break
        return
    from concurrent.futures import ThreadPoolExecutor

    from .pad.partition import OutputBuffers

    buffers = (OutputBuffers(), OutputBuffers())
    pending = []  # at most one write in flight: (index, future)

    def settle():
        while pending:
            i, fut = pending.pop(0)
            results[i] = fut.result()
            emit(results[i])

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="beltkit-writer") as writer:
        try:
            for k, (i, task) in enumerate(tasks):
                # the next input's checksum is started once this file is computed, so that
                # the hasher works beside the writing rather than the compiled engine
                nxt = tasks[k + 1][1]["input"] if k + 1 < len(tasks) else None
                if nxt is not None and Path(nxt).is_file():
                    task = {**task, "next_input": nxt}
                r, job = _read_and_compute(task, buffers[k % 2])
                settle()  # the previous file, written meanwhile
                if job is not None:
                    pending.append((i, writer.submit(_write_job, job)))
                    continue
                if r is None:  # longer than one slab: streamed here, slab by slab
                    r = _process_file(task)
                results[i] = r
                emit(r)
        finally:
            try:
                settle()
            finally:
                _digests_dropped()


def _run_processes(tasks, results, workers, fail_fast, emit):
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor, as_completed

    # a fresh interpreter per worker (never a fork of this threaded process);
    # forkserver starts them quickly from one clean server where available
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        ctx.set_forkserver_preload(["beltkit.batch", "beltkit.io", "beltkit.pad"])
    else:  # pragma: no cover - Windows
        ctx = mp.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
        futures = {pool.submit(_process_file, task): i for i, task in tasks}
        for fut in as_completed(futures):
            i = futures[fut]
            try:
                r = fut.result()
            except Exception as exc:  # a worker died (killed, out of memory)
                task = dict(tasks)[i]
                r = FileResult(task["input"], task["output"], "failed",
                               f"worker process failed: {one_line(exc)}")
            results[i] = r
            emit(r)
            if fail_fast and r.status == "failed":
                for other in futures:
                    other.cancel()
                break


def _run_distributed(tasks, results, scheduler, fail_fast, emit):
    from distributed import Client, as_completed

    own = not isinstance(scheduler, Client)
    client = Client(scheduler) if own else scheduler
    try:
        futures = {}
        for i, task in tasks:
            fut = client.submit(_process_file, task, pure=False,
                                key=f"beltkit-summarize-{i}-{os.getpid()}-{_time.time_ns()}")
            futures[fut] = i
        for fut in as_completed(list(futures)):
            i = futures[fut]
            try:
                r = fut.result()
            except Exception as exc:  # the task itself died on the cluster
                task = dict(tasks)[i]
                r = FileResult(task["input"], task["output"], "failed",
                               f"cluster task failed: {one_line(exc)}")
            results[i] = r
            emit(r)
            if fail_fast and r.status == "failed":
                client.cancel([f for f in futures if futures[f] not in results])
                break
    finally:
        if own:
            client.close()


# ------------------------------------------------------------------------- survey


def _edges(values, default, name):
    edges = np.asarray(default if values is None else values, dtype=float)
    if edges.ndim != 1 or edges.size < 2 or not np.all(np.diff(edges) > 0):
        raise ValueError(f"{name} must be at least two strictly increasing bin edges, "
                         f"got {values!r}")
    return edges


def _window_ns(time_window):
    if time_window is None:
        return None
    import pandas as pd

    try:
        w = pd.to_timedelta(time_window)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"time_window {time_window!r} is not a duration (e.g. '1D', '6h', "
                         f"'90min')") from exc
    if w <= pd.Timedelta(0):
        raise ValueError(f"time_window must be positive, got {time_window!r}")
    return int(w.value)


def _grouped_stats(cell, values, n_cells):
    """Count, mean, median, std (ddof=1), IQR per cell; NaN where a cell has too few."""
    count = np.bincount(cell, minlength=n_cells)
    total = np.bincount(cell, weights=values, minlength=n_cells)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / count
        dev2 = np.bincount(cell, weights=(values - mean[cell]) ** 2, minlength=n_cells)
        std = np.sqrt(dev2 / (count - 1))
    std[count < 2] = np.nan
    order = np.lexsort((values, cell))
    sorted_v = values[order]
    start = np.concatenate([[0], np.cumsum(count)[:-1]])

    def quantile(q):
        pos = start + (count - 1) * q
        lo = np.floor(pos).astype(np.int64)
        hi = np.ceil(pos).astype(np.int64)
        ok = count > 0
        res = np.full(n_cells, np.nan)
        frac = pos[ok] - lo[ok]
        res[ok] = sorted_v[lo[ok]] * (1 - frac) + sorted_v[hi[ok]] * frac
        return res

    median = quantile(0.5)
    iqr = quantile(0.75) - quantile(0.25)
    return count, mean, median, std, iqr


def _read_summary(path: Path, names):
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        problems = [f"has no {v}" for v in ("L", "mlt") if v not in ds.variables]
        if "energy" not in ds.dims:
            problems.append("has no energy dimension")
        if problems:
            raise ValueError(", ".join(problems) + " (is it a beltkit summary file?)")
        present = [n for n in names if n in ds.variables]
        info = {
            "time": ds["time"].values.astype("datetime64[ns]"),
            "L": ds["L"].values.astype(float),
            "mlt": ds["mlt"].values.astype(float),
            "energy": ds["energy"].values.astype(float),
            "energy_attrs": dict(ds["energy"].attrs),
            "energy_bnds": (ds["energy_bnds"].values if "energy_bnds" in ds.variables
                            else None),
            "vars": {n: ds[n].transpose("time", "energy").values.astype(float)
                     for n in present if set(ds[n].dims) == {"time", "energy"}},
            "attrs": {n: dict(ds[n].attrs) for n in present},
            "global": dict(ds.attrs),
        }
    return info


def survey(summaries, out_file, *, l_edges=None, mlt_edges=None, time_window=None,
           compress=True, command=None) -> Path:
    """Bin summaries onto an L x MLT (x time-window) grid and write the survey file.

    Parameters
    ----------
    summaries : str, path or sequence of them
        Summary files, folders (their ``*.summary.nc``) or glob patterns.
    out_file : str or path
        The survey netCDF file to write (atomically).
    l_edges : array_like, optional
        L bin edges (default 1 to 8 in steps of 0.5). Samples outside are dropped.
    mlt_edges : array_like, optional
        MLT bin edges in hours within 0-24 (default hourly).
    time_window : str or timedelta, optional
        Length of the time windows (``"1D"``, ``"6h"``; windows aligned on
        1970-01-01 UTC). None: one window spanning all samples.
    compress : bool or int
        zlib compression.
    command : str, optional
        Command line recorded in ``history``.

    Returns
    -------
    pathlib.Path
        `out_file`.

    Raises
    ------
    SurveyError
        If any summary cannot be read or does not match the others (energies,
        field model, footpoint altitude); every bad file is listed and nothing
        is written.

    Notes
    -----
    For each variable ``v`` of :data:`SURVEY_VARIABLES` present in the
    summaries, the survey holds ``v_count``, ``v_mean``, ``v_median``,
    ``v_std`` (sample standard deviation) and ``v_iqr`` (75th minus 25th
    percentile, linear interpolation), dims ``(time, energy, L, mlt)``. Only
    finite values count. The statistics are exact, so all binned values are
    held in memory at once (16 bytes per finite value).
    """
    l_edges = _edges(l_edges, np.arange(1.0, 8.01, 0.5), "l_edges")
    mlt_edges = _edges(mlt_edges, np.arange(0.0, 24.01, 1.0), "mlt_edges")
    if mlt_edges[0] < 0 or mlt_edges[-1] > 24:
        raise ValueError(f"mlt_edges must lie within 0-24 h, got {mlt_edges[0]}-{mlt_edges[-1]}")
    w_ns = _window_ns(time_window)
    if isinstance(summaries, (str, os.PathLike)):
        summaries = [summaries]
    files = []
    for item in summaries:
        if Path(str(item)).is_dir():
            files += sorted(Path(str(item)).glob("*" + SUMMARY_SUFFIX))
        else:
            files += expand_inputs([item])
    if not files:
        raise SurveyError(["no summary files given (or the folder holds none)"])
    problems, infos = [], []
    for p in files:
        try:
            infos.append((p, _read_summary(p, SURVEY_VARIABLES)))
        except Exception as exc:  # every bad file is listed, then the survey is refused
            problems.append(f"{p}: {one_line(exc)}")
    if infos:
        ref_path, ref = infos[0]
        for p, info in infos[1:]:
            if info["energy"].shape != ref["energy"].shape or not np.allclose(
                    info["energy"], ref["energy"], rtol=1e-6):
                problems.append(f"{p}: its energies differ from those of {ref_path}; survey "
                                f"files of one instrument setting at a time")
            for key in ("field_model", "footpoint_altitude_km"):
                if str(info["global"].get(key)) != str(ref["global"].get(key)):
                    fix = (" (field=\"auto\" chooses per file: survey the files of each "
                           "model apart, or summarize them all with one --field)"
                           if key == "field_model" else "")
                    problems.append(f"{p}: {key} {info['global'].get(key)!r} differs from "
                                    f"{ref['global'].get(key)!r} in {ref_path}{fix}")
        names = [n for n in SURVEY_VARIABLES if all(n in i["vars"] for _, i in infos)]
        if any(n in _LOG_SPREAD for n in names):  # D depends on these conventions
            for p, info in infos[1:]:
                for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma"):
                    if str(info["global"].get(key)) != str(ref["global"].get(key)):
                        problems.append(f"{p}: diffusion setting {key} "
                                        f"{info['global'].get(key)!r} differs from "
                                        f"{ref['global'].get(key)!r} in {ref_path}; summarize "
                                        f"them all with the same diffusion options")
        if not names:
            problems.append("the summaries share none of the variables "
                            + ", ".join(SURVEY_VARIABLES))
    if problems:
        raise SurveyError(problems)

    n_e = ref["energy"].size
    n_l, n_m = l_edges.size - 1, mlt_edges.size - 1
    all_t = np.concatenate([i["time"] for _, i in infos]).astype("int64")
    if w_ns is None:
        t_lo, t_hi = int(all_t.min()), int(all_t.max())
        win_starts = np.array([t_lo])
        win_ends = np.array([max(t_hi, t_lo + 1)])
    else:
        idx = np.unique(all_t // w_ns)
        win_starts = idx * w_ns
        win_ends = win_starts + w_ns
    n_t = win_starts.size
    n_cells = n_t * n_e * n_l * n_m
    cells = {n: [] for n in names}
    values = {n: [] for n in names}
    for _, info in infos:
        t = info["time"].astype("int64")
        it = (np.zeros(t.size, dtype=np.int64) if w_ns is None
              else np.searchsorted(win_starts, (t // w_ns) * w_ns))
        iL = np.searchsorted(l_edges, info["L"], side="right") - 1
        iL[info["L"] == l_edges[-1]] = n_l - 1
        mlt = info["mlt"]
        iM = np.searchsorted(mlt_edges, mlt, side="right") - 1
        iM[mlt == mlt_edges[-1]] = n_m - 1
        ok = (iL >= 0) & (iL < n_l) & (iM >= 0) & (iM < n_m) & np.isfinite(info["L"]) \
            & np.isfinite(mlt)
        base = ((it * n_e)[:, None] + np.arange(n_e)[None, :]) * n_l
        cell = (base + iL[:, None]) * n_m + iM[:, None]
        for n in names:
            v = info["vars"][n]
            good = ok[:, None] & np.isfinite(v)
            cells[n].append(cell[good])
            values[n].append(v[good])

    mid_l = 0.5 * (l_edges[:-1] + l_edges[1:])
    mid_m = 0.5 * (mlt_edges[:-1] + mlt_edges[1:])
    t_mid = (win_starts + (win_ends - win_starts) // 2).astype("datetime64[ns]")
    t_bnds = np.stack([win_starts, win_ends], -1).astype("datetime64[ns]")
    dims = ("time", "energy", "L", "mlt")
    shape = (n_t, n_e, n_l, n_m)
    data_vars = {
        "time_bnds": (("time", "nv"), t_bnds),
        "L_bnds": (("L", "nv"), np.stack([l_edges[:-1], l_edges[1:]], -1), {"units": "1"}),
        "mlt_bnds": (("mlt", "nv"), np.stack([mlt_edges[:-1], mlt_edges[1:]], -1),
                     {"units": "h"}),
    }
    energy_attrs = {k: v for k, v in ref["energy_attrs"].items()
                    if k in ("units", "long_name", "standard_name")}
    energy_attrs.setdefault("units", "keV")
    energy_attrs.setdefault("long_name", "kinetic energy")
    if ref["energy_bnds"] is not None and np.shape(ref["energy_bnds"]) == (n_e, 2):
        data_vars["energy_bnds"] = (("energy", "nv"), np.asarray(ref["energy_bnds"], float),
                                    {"units": energy_attrs["units"]})
        energy_attrs["bounds"] = "energy_bnds"
    methods = "time: L: mlt:"
    for n in names:
        count, mean, median, std, iqr = _grouped_stats(
            np.concatenate(cells[n]).astype(np.int64), np.concatenate(values[n]), n_cells)
        units = str(infos[0][1]["attrs"][n].get("units", "1"))
        label = infos[0][1]["attrs"][n].get("long_name", n.replace("_", " "))
        data_vars[f"{n}_count"] = (dims, count.reshape(shape).astype(np.int32),
                                   {"units": "1",
                                    "long_name": f"number of finite samples of {label}"})
        for stat, arr, text, method in (
                ("mean", mean, "mean", "mean"), ("median", median, "median", "median"),
                ("std", std, "sample standard deviation", "standard_deviation"),
                ("iqr", iqr, "interquartile range (75th - 25th percentile)", None)):
            attrs = {"units": units, "long_name": f"{text} of {label} per cell"}
            if method:
                attrs["cell_methods"] = f"{methods} {method}"
            if n in _LOG_SPREAD:
                attrs["comment"] = (
                    f"{n} spans decades within a cell: the median is the meaningful statistic "
                    "(the mean and standard deviation are dominated by the largest values); "
                    "samples where only a bound is known (diffusion_flag 2 or 4) have no value "
                    "and are not counted")
            data_vars[f"{n}_{stat}"] = (dims, arr.reshape(shape), attrs)
    coords = {
        "time": ("time", t_mid, {"standard_name": "time", "long_name": "time window centre",
                                 "bounds": "time_bnds"}),
        "energy": ("energy", ref["energy"], energy_attrs),
        "L": ("L", mid_l, {"units": "1", "long_name": "L-shell bin centre",
                           "bounds": "L_bnds"}),
        "mlt": ("mlt", mid_m, {"units": "h", "long_name": "magnetic local time bin centre",
                               "bounds": "mlt_bnds"}),
    }
    g = ref["global"]
    attrs = {
        "title": "beltkit survey: loss-cone populations binned by L, MLT and time",
        "source": ", ".join(p.name for p, _ in infos),
        "source_sha256": json.dumps({p.name: sha256(p) for p, _ in infos}),
        "beltkit_version": __version__,
        "field_model": g.get("field_model", "unknown"),
        "field_model_by_file": json.dumps({p.name: i["global"].get("field_model", "unknown")
                                           for p, i in infos}),
        "field_epoch": g.get("field_epoch", "unknown"),
        "footpoint_altitude_km": g.get("footpoint_altitude_km", np.nan),
        "time_window": "all samples" if time_window is None else str(time_window),
    }
    if any(n in _LOG_SPREAD for n in names):
        for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma",
                    "beltkit_regime_boundary"):
            if key in g:
                attrs[key] = g[key]
    noted = [(p.name, i["global"]["field_model_note"]) for p, i in infos
             if i["global"].get("field_model_note")]
    if noted:  # e.g. the centred dipole below 2,000 km: said once, with the files it concerns
        attrs["field_model_note"] = (
            f"{len(noted)} of {len(infos)} summaries (" + ", ".join(n for n, _ in noted)
            + ") hold samples below 2000 km altitude partitioned in the centred dipole, which "
            "has no quasi-trapped population there (see each summary's field_model_note)")
    ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
    if command is None:
        command = f"beltkit.batch.survey({len(infos)} file(s), {str(out_file)!r})"
    remove_stale_temporaries(Path(out_file).parent, Path(out_file).name)
    return write_dataset(ds, out_file, compress=compress, history=command, time_chunk=64)
