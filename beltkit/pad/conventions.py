"""beltkit's data conventions for pitch-angle flux datasets, and the one validator.

The conventions are written out in ``docs/conventions.md``; this module
enforces them. :func:`validate` lists every problem at once (each naming the
variable and what is wrong); :func:`check` raises one
:class:`~beltkit.errors.ConventionError` holding that list, or returns a
:class:`Prepared` description that the engines use.

Nothing here modifies the caller's dataset. Unit conversions and fill-value
masks of the large flux arrays are not applied here: they are recorded in
:class:`Prepared` (a scale factor and a mask) and applied block by block by
the engines, so that no full-size copy of the data is made.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import ConventionError
from ..units import FLUX_UNITS, conversion_factor, l_shell_factor
from .samples import MIN_GEOCENTRIC_KM, POSITION_RANGES, READ_FLAG_MEANINGS, inside_earth
from .values import (
    ValueMask,
    check_range,
    mask_of,
    run_pending_ranges,
    value_problems,
    value_summary,
)

__all__ = [
    "FLUX_UNITS",
    "INTEGRATED_FLUX_UNITS",
    "Prepared",
    "ValueMask",
    "check",
    "flux_unit_factor",
    "validate",
    "value_problems",
]

#: Canonical unit of solid-angle-integrated (or omnidirectional) flux.
INTEGRATED_FLUX_UNITS = "cm-2 s-1 keV-1"

# the unit each kind of variable is converted to (any spelling beltkit.units parses)
_ANGLE = "degree"
_ENERGY = "keV"
_FIELD = "nT"
_DISTANCE = "km"
_HOURS = "hour"
_DIMENSIONLESS = "1"  # L: dimensionless, or in Earth radii

def flux_unit_factor(units):
    """Factor converting a differential directional flux to ``cm-2 s-1 sr-1 keV-1``.

    Parameters
    ----------
    units : str
        A unit string in the UDUNITS grammar or a CDF spelling
        (:mod:`beltkit.units`), e.g. ``"cm-2 s-1 sr-1 MeV-1"``,
        ``"1/(cm2 s sr keV)"`` or ``"cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N"``.

    Returns
    -------
    float or None
        The factor (multiply values by it), or None when the string is not a
        known spelling of a directional differential flux.

    Examples
    --------
    >>> flux_unit_factor("cm-2 s-1 sr-1 MeV-1")
    0.001
    >>> flux_unit_factor("counts") is None
    True
    """
    return conversion_factor(units, FLUX_UNITS)


@dataclass
class Prepared:
    """What the engines need to know about a dataset that passed :func:`check`.

    Attributes
    ----------
    kind : str
        ``"bins"`` (pitch-angle bins) or ``"telescope"`` (look directions).
    edges : numpy.ndarray or None
        Pitch-angle bin edges (n_bins, 2) in degrees, for ``kind == "bins"``.
    centres : numpy.ndarray or None
        Pitch-angle bin centres (n_bins,) in degrees.
    folded : bool
        Whether the bins are folded to 0-90 (each also stands for its mirror).
    flux_mask, err_mask, counts_mask : ValueMask
        Scaling and fill handling of ``flux``, ``flux_err`` and ``counts``.
    error_source : str or None
        ``"flux_err"``, ``"counts"`` or None (no uncertainties available).
    energy_kev : numpy.ndarray or None
        Energy channel centres in keV; None for a record-varying energy table
        (``channel_energy`` (time, energy), see `energy_scale`).
    energy_bnds_kev : numpy.ndarray or None
        Energy channel edges (n_energy, 2) in keV; None when the dataset
        gives none (nothing in the partition, the mapping or the fits needs
        them).
    angle_scale : dict
        Factor to degrees of each angle variable that is not in degrees.
    other_scale : dict
        Factor to the canonical unit of position variables (b_local, position_geo, mlt).
    n_negative : int
        Number of negative flux values found.
    energy_scale : float
        Factor to keV of ``channel_energy`` (record-varying energy tables).
    strict : bool
        Whether per-sample problems refuse the dataset (else they are masked
        and flagged, :mod:`beltkit.pad.samples`).
    has_read_flag : bool
        Whether the dataset carries the reader's ``read_flag`` variable.
    """

    kind: str
    edges: np.ndarray | None
    centres: np.ndarray | None
    folded: bool
    flux_mask: ValueMask
    err_mask: ValueMask | None
    counts_mask: ValueMask | None
    error_source: str | None
    energy_kev: np.ndarray | None
    energy_bnds_kev: np.ndarray | None
    angle_scale: dict = field(default_factory=dict)
    other_scale: dict = field(default_factory=dict)
    n_negative: int = 0
    energy_scale: float = 1.0
    strict: bool = True
    has_read_flag: bool = False


def _unit_factor(var, name, want, problems, what, required=True):
    units = var.attrs.get("units")
    if units is None:
        if required:
            problems.append(f"{name}: missing 'units' attribute; set it to {want!r} ({what})")
        return 1.0
    if want == _DIMENSIONLESS:
        factor = l_shell_factor(str(units))
    else:
        factor = conversion_factor(str(units), want)
    if factor is None:
        problems.append(f"{name}: units {units!r} are not {what}; give its 'units' attribute "
                        f"as {want!r} or another unit of that kind (UDUNITS spelling)")
        return 1.0
    return factor


def _is_true(value):
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return value == 1
    return str(value).strip().lower() in ("true", "yes", "1")


def _check_edges(ds, problems, folded):
    """Check pitch_angle and pitch_angle_bnds; return edges (n, 2) in degrees or None."""
    pa = ds["pitch_angle"]
    scale = _unit_factor(pa, "pitch_angle", _ANGLE, problems, "an angle")
    centres = np.asarray(pa.values, dtype=float) * scale
    if "pitch_angle_bnds" not in ds.variables:
        problems.append("pitch_angle_bnds: missing; give the bin edges as a (pitch_angle, 2) "
                        "bounds variable and set pitch_angle.attrs['bounds'] = "
                        "'pitch_angle_bnds'")
        return None, centres
    bnds = ds["pitch_angle_bnds"]
    if bnds.ndim != 2 or bnds.dims[0] != "pitch_angle" or bnds.shape[1] != 2:
        problems.append(f"pitch_angle_bnds: must have dims (pitch_angle, 2), got {bnds.dims} "
                        f"with shape {bnds.shape}")
        return None, centres
    bscale = scale
    if "units" in bnds.attrs:
        bscale = _unit_factor(bnds, "pitch_angle_bnds", _ANGLE, problems, "an angle")
    edges = np.asarray(bnds.values, dtype=float) * bscale
    if not np.all(np.isfinite(edges)):
        problems.append("pitch_angle_bnds: contains NaN or infinite edges")
        return None, centres
    if np.any(edges < 0) or np.any(edges > 180):
        problems.append(f"pitch_angle_bnds: edges must lie in 0-180 degree, got "
                        f"{edges.min():g} to {edges.max():g}")
    if np.any(np.isnan(centres)) or np.any(centres < 0) or np.any(centres > 180):
        problems.append("pitch_angle: centres must lie in 0-180 degree")
    if np.any(edges[:, 1] <= edges[:, 0]):
        problems.append("pitch_angle_bnds: each bin needs lower edge < upper edge")
    if np.any(np.diff(centres) <= 0):
        problems.append("pitch_angle: centres must be strictly increasing")
    elif np.any(edges[1:, 0] < edges[:-1, 1] - 1e-9):
        k = int(np.argmax(edges[1:, 0] < edges[:-1, 1] - 1e-9))
        problems.append(f"pitch_angle_bnds: bins overlap ({edges[k].tolist()} and "
                        f"{edges[k + 1].tolist()}); bins must be disjoint")
    if np.any((centres < edges[:, 0] - 1e-9) | (centres > edges[:, 1] + 1e-9)):
        problems.append("pitch_angle: centres must lie inside their bins (pitch_angle_bnds)")
    if folded and np.any(edges > 90 + 1e-9):
        problems.append("pitch_angle: attribute folded='true' but bins extend beyond 90 degree; "
                        "folded data must lie in 0-90")
    return edges, centres



def _check_energy(ds, flux, problems):
    """Check the energy table; return (centres keV or None, edges keV or None, scale).

    The table is either a 1-D ``energy`` coordinate (channel centres, optional
    ``energy_bnds`` edges) or, when it varies from record to record, a 2-D
    ``channel_energy`` (time, energy) variable (scale returned for it).
    """
    if "energy" in ds.variables and ds["energy"].ndim == 1 and (
            "channel_energy" not in ds.variables or "units" in ds["energy"].attrs):
        es = _unit_factor(ds["energy"], "energy", _ENERGY, problems, "an energy")
        energy_kev = np.asarray(ds["energy"].values, dtype=float) * es
        if np.any(~np.isfinite(energy_kev)) or np.any(energy_kev <= 0):
            problems.append("energy: values must be finite and positive")
        return energy_kev, _check_energy_edges(ds, energy_kev, es, problems), 1.0
    if "channel_energy" in ds.variables:
        ce = ds["channel_energy"]
        if ce.dims != ("time", "energy") or "energy" not in flux.dims:
            problems.append(f"channel_energy: a record-varying energy table must have dims "
                            f"('time', 'energy') like flux, got {ce.dims}")
            return None, None, 1.0
        scale = _unit_factor(ce, "channel_energy", _ENERGY, problems, "an energy")
        check_range(ds, "channel_energy", 0.0, None, problems, scale)
        return None, None, scale
    if "energy" in ds.variables:
        problems.append(f"energy: must be one-dimensional (channel centres), got dims "
                        f"{ds['energy'].dims}; a table that varies with time belongs in "
                        "'channel_energy' (time, energy)")
    else:
        problems.append("energy: missing coordinate variable (channel centres in keV), or "
                        "'channel_energy' (time, energy) for a record-varying table")
    return None, None, 1.0


def _check_energy_edges(ds, energy_kev, es, problems):
    """Return the channel edges (n, 2) in keV when ``energy_bnds`` is given (else None)."""
    if "energy_bnds" not in ds.variables:
        return None
    eb = ds["energy_bnds"]
    if eb.ndim != 2 or eb.dims[0] != "energy" or eb.shape[1] != 2:
        problems.append(f"energy_bnds: must have dims (energy, 2), got {eb.dims}")
        return None
    bs = es
    if "units" in eb.attrs:
        bs = _unit_factor(eb, "energy_bnds", _ENERGY, problems, "an energy")
    ebnds = np.asarray(eb.values, dtype=float) * bs
    if np.any(~(ebnds[:, 0] < ebnds[:, 1])):
        problems.append("energy_bnds: each channel needs lower edge < upper edge")
    elif energy_kev.shape == ebnds[:, 0].shape and np.any(
        (energy_kev < ebnds[:, 0]) | (energy_kev > ebnds[:, 1])
    ):
        problems.append("energy: channel centres must lie inside energy_bnds")
    return ebnds


def _check_time(ds, problems):
    if "time" not in ds.variables:
        problems.append("time: missing coordinate variable; add a 'time' coordinate "
                        "(datetime64 UTC or seconds)")
        return
    t = ds["time"].values
    if t.ndim != 1:
        problems.append("time: must be one-dimensional")
        return
    if t.size == 0:
        problems.append("time: no samples (the dataset is empty); nothing to partition")
        return
    if np.issubdtype(t.dtype, np.datetime64):
        bad_nat = np.isnat(t)
        tv = t.astype("datetime64[ns]", copy=False).view(np.int64)
    else:
        try:
            tv = np.asarray(t, dtype=float)
        except (TypeError, ValueError):
            problems.append(f"time: values must be datetime64 or numbers, got dtype {t.dtype}")
            return
        bad_nat = np.isnan(tv)
    if np.any(bad_nat):
        problems.append(f"time: {int(np.sum(bad_nat))} missing (NaT/NaN) time values")
    elif t.size > 1 and np.any(np.diff(tv) <= 0):
        k = int(np.argmax(np.diff(tv) <= 0))
        problems.append(f"time: not strictly increasing (at index {k + 1}); sort the dataset "
                        "by time and drop duplicates")


def _check_position_present(ds, problems):
    """Note a missing or half-given position; return (has L and mlat, has position_geo)."""
    has_lm = "L" in ds.variables and "mlat" in ds.variables
    has_geo = "position_geo" in ds.variables
    if not has_lm and not has_geo:
        problems.append("position: need either 'L' and 'mlat' (degree) per time, or "
                        "'position_geo' (time, 3) in km")
    if "L" in ds.variables and "mlat" not in ds.variables and not has_geo:
        problems.append("mlat: missing (magnetic latitude in degree, per time, next to L)")
    if "mlat" in ds.variables and "L" not in ds.variables and not has_geo:
        problems.append("L: missing (L-shell per time, next to mlat)")
    return has_lm, has_geo


def _check_read_flag(ds, flux, problems, count):
    """Check the reader's ``read_flag``; with `count`, name its masked values as problems."""
    if "read_flag" not in ds.variables:
        return False
    rf = ds["read_flag"]
    if rf.dims != flux.dims or not np.issubdtype(rf.dtype, np.integer):
        problems.append(f"read_flag: must be an integer variable with the dims of flux "
                        f"{flux.dims}, got {rf.dtype} {rf.dims}")
        return False
    if count:
        data = rf.data
        counts = [(data & bit).astype(bool).sum() for bit in (2, 4)]
        if hasattr(data, "dask"):
            import dask

            counts = dask.compute(*counts)
        for bit, n in zip((2, 4), counts):
            if int(n):
                what = READ_FLAG_MEANINGS[bit].replace("_", " ")
                problems.append(f"flux: {int(n)} values {what} (masked when read); drop "
                                "strict to keep the file with those samples masked and flagged")
    return True


def _inspect(ds, model=None, allow_negative=False, check_values=True, strict=True):
    """Run every check; return (problems, Prepared or None)."""
    problems: list[str] = []
    if not isinstance(ds, xr.Dataset):
        return [f"dataset: expected an xarray.Dataset, got {type(ds).__name__}"], None
    if "flux" not in ds.data_vars:
        problems.append("flux: missing data variable (differential directional flux, "
                        f"dims (time, energy, pitch_angle), units {FLUX_UNITS!r})")
        # without flux the rest cannot be checked in detail, but say what else is absent
        for name, what in (("time", "the time coordinate"),
                           ("energy", "the energy coordinate (channel centres in keV)")):
            if name not in ds.variables:
                problems.append(f"{name}: missing ({what})")
        _check_position_present(ds, problems)
        return problems, None
    flux = ds["flux"]
    kind = "telescope" if "look" in flux.dims else "bins"
    angle_dim = "look" if kind == "telescope" else "pitch_angle"
    want = {"time", "energy", angle_dim}
    missing = [d for d in ("time", "energy", angle_dim) if d not in flux.dims]
    if "pitch_angle" not in flux.dims and "look" not in flux.dims:
        missing = [d for d in ("time", "energy") if d not in flux.dims]
        problems.append("flux: needs a 'pitch_angle' dimension (pitch-angle bins) or a 'look' "
                        "dimension (telescopes)")
    if missing:
        problems.append(f"flux: missing dimension(s) {missing}; dims are {flux.dims}")
    extra = [d for d in flux.dims if d not in want]
    if extra and "pitch_angle" in flux.dims and "look" in flux.dims:
        problems.append("flux: has both 'pitch_angle' and 'look' dimensions; use one")
    elif extra:
        problems.append(f"flux: unexpected dimension(s) {extra}; expected (time, energy, "
                        f"{angle_dim})")
    if not np.issubdtype(flux.dtype, np.number):
        problems.append(f"flux: must be numeric, got dtype {flux.dtype}")
    # units
    fu = flux.attrs.get("units")
    scale = 1.0
    if fu is None:
        problems.append(f"flux: missing 'units' attribute; expected {FLUX_UNITS!r}")
    else:
        f = flux_unit_factor(fu)
        if f is None:
            problems.append(f"flux: units {fu!r} are not a differential directional flux "
                            f"beltkit knows how to convert; expected {FLUX_UNITS!r} "
                            "(per MeV, per eV and m-2 spellings are converted)")
        else:
            scale = f
    fills, vmin, vmax = mask_of(flux, problems, "flux")
    flux_mask = ValueMask(scale, fills, vmin, vmax)
    _check_time(ds, problems)
    energy_kev, ebnds, energy_scale = _check_energy(ds, flux, problems)
    # angle geometry
    edges = centres = None
    folded = False
    angle_scale: dict = {}
    if kind == "bins" and "pitch_angle" in flux.dims:
        if "pitch_angle" not in ds.variables:
            problems.append("pitch_angle: missing coordinate variable (bin centres, degree)")
        else:
            folded = _is_true(ds["pitch_angle"].attrs.get("folded", False))
            edges, centres = _check_edges(ds, problems, folded)
    elif kind == "telescope":
        for name, dims in (("look_pitch_angle", ("time", "look")), ("look_half_angle", ("look",))):
            if name not in ds.variables:
                problems.append(f"{name}: missing (telescope data need look_pitch_angle (time, "
                                "look) and look_half_angle (look), in degree)")
                continue
            if set(ds[name].dims) != set(dims):
                problems.append(f"{name}: must have dims {dims}, got {ds[name].dims}")
            angle_scale[name] = _unit_factor(ds[name], name, _ANGLE, problems, "an angle")
        if "look_pitch_angle" in ds.variables:
            check_range(ds, "look_pitch_angle", 0, 180, problems,
                         angle_scale.get("look_pitch_angle", 1.0))
        if "look_half_angle" in ds.variables:
            h = np.asarray(ds["look_half_angle"].values, dtype=float) * angle_scale.get(
                "look_half_angle", 1.0)
            if np.any(~np.isfinite(h)) or np.any(h <= 0) or np.any(h > 90):
                problems.append("look_half_angle: must be finite and in (0, 90] degree")
    # position
    other_scale: dict = {}
    has_lm, has_geo = _check_position_present(ds, problems)
    ranges: list = []  # dask variables: their extremes computed together below
    for name, table, what, required in (
        ("L", _DIMENSIONLESS, "the dimensionless L-shell", False),
        ("mlat", _ANGLE, "an angle", True),
        ("mlt", _HOURS, "magnetic local time in hours", True),
        ("b_local", _FIELD, "a magnetic field", True),
    ):
        if name in ds.variables:
            v = ds[name]
            if v.dims != ("time",):
                problems.append(f"{name}: must have dims ('time',), got {v.dims}")
                continue
            f = _unit_factor(v, name, table, problems, what, required=required)
            other_scale[name] = f
            if strict:  # else samples out of range are masked and flagged by the engines
                lo, hi = POSITION_RANGES[name]
                check_range(ds, name, lo, hi, problems, f, pending=ranges)
    run_pending_ranges(ranges, problems)
    if has_geo:
        pg = ds["position_geo"]
        geo_ok = pg.ndim == 2 and pg.dims[0] == "time" and pg.shape[1] == 3
        if not geo_ok:
            problems.append(f"position_geo: must have dims (time, 3) (GEO x, y, z), got "
                            f"{pg.dims} with shape {pg.shape}")
        other_scale["position_geo"] = _unit_factor(pg, "position_geo", _DISTANCE, problems,
                                                   "a distance")
        if strict and geo_ok:
            n_in = inside_earth(pg.data, other_scale["position_geo"])
            if n_in:
                problems.append(f"position_geo: {n_in} positions inside the solid Earth "
                                f"(below {MIN_GEOCENTRIC_KM:.0f} km from its centre); check "
                                "the units, or drop strict to mask those samples")
    if not (model is None or (isinstance(model, str) and model == "dipole")):
        if not has_geo and "mlt" not in ds.variables:
            problems.append("mlt: a field model needs the sample's position: give "
                            "'position_geo' (time, 3) km, or 'mlt' (hours) next to L and mlat")
    # uncertainties
    error_source = None
    err_mask = counts_mask = None
    if "flux_err" in ds.data_vars:
        fe = ds["flux_err"]
        error_source = "flux_err"
        if fe.dims != flux.dims:
            problems.append(f"flux_err: must have the same dims as flux {flux.dims}, "
                            f"got {fe.dims}")
        f = flux_unit_factor(fe.attrs.get("units", ""))
        if f is None:
            problems.append(f"flux_err: units {fe.attrs.get('units')!r} must be a directional "
                            f"flux like flux ({FLUX_UNITS!r})")
            f = 1.0
        fills, vmin, vmax = mask_of(fe, problems, "flux_err")
        err_mask = ValueMask(f, fills, vmin, vmax)
    elif "counts" in ds.data_vars:
        error_source = "counts"
        ct = ds["counts"]
        if ct.dims != flux.dims:
            problems.append(f"counts: must have the same dims as flux {flux.dims}, got {ct.dims}")
        if "counts_to_flux" not in ds.variables:
            problems.append("counts_to_flux: missing; Poisson errors from 'counts' need the "
                            "factor converting counts to flux (flux = counts_to_flux * counts)")
        else:
            c2f = ds["counts_to_flux"]
            if not set(c2f.dims) <= set(flux.dims):
                problems.append(f"counts_to_flux: dims {c2f.dims} must be a subset of flux's")
            if flux_unit_factor(c2f.attrs.get("units", "")) is None:
                problems.append("counts_to_flux: units must be a directional flux per count "
                                f"({FLUX_UNITS!r})")
        fills, vmin, vmax = mask_of(ct, problems, "counts")
        counts_mask = ValueMask(1.0, fills, vmin, vmax)
    # strict: the reader's masks are counted even without the value scan (the engines'
    # single pass does not see them): one pass over the uint8 flags, strict runs only
    has_read_flag = _check_read_flag(ds, flux, problems, strict)
    # values (only when the structure is sound)
    n_negative = 0
    flux_ok = (set(flux.dims) == want and flux.ndim == 3 and flux.sizes["time"] > 0
               and np.issubdtype(flux.dtype, np.number)
               and (error_source is None or ds[error_source].dims == flux.dims))
    if check_values and flux_ok:
        eax = flux.dims.index("energy")
        lo, negs, infs = value_summary(flux, flux_mask, eax)
        n_err_neg = n_err_inf = 0
        if error_source in ("flux_err", "counts"):
            emask = err_mask if error_source == "flux_err" else counts_mask
            elo, _, einf = value_summary(ds[error_source], emask, eax)
            n_err_neg = int(np.sum(elo[~np.isnan(elo)] < 0))
            n_err_inf = int(np.sum(einf))
        n_negative = int(np.sum(negs))
        problems.extend(value_problems(energy_kev, ~np.isnan(lo), n_negative, n_err_neg,
                                       error_source, allow_negative, strict=strict,
                                       n_infinite=int(np.sum(infs)),
                                       n_err_infinite=n_err_inf))
    prepared = None
    if not problems:
        prepared = Prepared(kind=kind, edges=edges, centres=centres, folded=folded,
                            flux_mask=flux_mask,
                            err_mask=err_mask, counts_mask=counts_mask,
                            error_source=error_source, energy_kev=energy_kev,
                            energy_bnds_kev=ebnds, angle_scale=angle_scale,
                            other_scale=other_scale, n_negative=n_negative,
                            energy_scale=energy_scale, strict=bool(strict),
                            has_read_flag=has_read_flag)
    return problems, prepared


def validate(ds, *, model=None, allow_negative=False, check_values=True, strict=True):
    """List every way a dataset departs from beltkit's pitch-angle conventions.

    Parameters
    ----------
    ds : xarray.Dataset
        The flux dataset (see ``docs/conventions.md``). Not modified.
    model : None, str or FieldModel, optional
        The field model the dataset will be used with (a model other than the
        dipole needs ``position_geo`` or ``mlt``).
    allow_negative : bool
        Accept negative flux values (background-subtracted data); they are then
        flagged by the engines instead of reported here.
    check_values : bool
        Also scan the data values (negative flux, all-NaN channels); on dask
        data this streams once through the file.
    strict : bool
        True (default): per-sample problems are problems of the dataset
        (negative flux, positions outside their range, values the reader
        masked as out of range or quality-rejected, channels without a valid
        value). False: only structural problems are listed; the engines mask
        and flag those samples (:mod:`beltkit.pad.samples`) and refuse only a
        dataset without any valid flux value.

    Returns
    -------
    list of str
        The problems, each naming the variable and what is wrong; empty if
        the dataset follows the conventions.
    """
    problems, _ = _inspect(ds, model=model, allow_negative=allow_negative,
                           check_values=check_values, strict=strict)
    return problems


def check(ds, *, model=None, allow_negative=False, source=None, check_values=True,
          strict=True):
    """Validate `ds` and return its :class:`Prepared` description.

    Parameters
    ----------
    ds : xarray.Dataset
        The flux dataset. Not modified.
    model : None, str or FieldModel, optional
        Field model to be used (see :func:`validate`).
    allow_negative : bool
        Accept negative flux values.
    source : str, optional
        Where the dataset came from (file name), for the error message;
        defaults to ``ds.encoding['source']`` when present.
    check_values : bool
        Scan the values too (the eager partition engine skips this and
        gathers the same counts in its own single pass).
    strict : bool
        Whether per-sample problems refuse the dataset (see :func:`validate`).

    Returns
    -------
    Prepared
        Scale factors, masks and geometry for the engines.

    Raises
    ------
    ConventionError
        Listing every problem at once.
    """
    problems, prepared = _inspect(ds, model=model, allow_negative=allow_negative,
                                  check_values=check_values, strict=strict)
    if problems and not check_values:  # refusing anyway: name the value problems too
        problems, prepared = _inspect(ds, model=model, allow_negative=allow_negative,
                                      check_values=True, strict=strict)
    if problems:
        if source is None and isinstance(ds, xr.Dataset):
            source = ds.encoding.get("source")
        raise ConventionError(problems, source)
    return prepared
