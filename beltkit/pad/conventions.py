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

_BLOCK = 65536


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


@dataclass(frozen=True)
class ValueMask:
    """Fill-value handling and unit scaling of one data variable (applied per block).

    Attributes
    ----------
    scale : float
        Multiply raw values by this to reach canonical units.
    fill : tuple of float
        Raw values that mean "missing" (``_FillValue``, ``missing_value``).
    vmin, vmax : float
        Valid range of raw values (``valid_range``/``valid_min``/``valid_max``);
        values outside are missing.
    """

    scale: float = 1.0
    fill: tuple = ()
    vmin: float = -np.inf
    vmax: float = np.inf

    @property
    def trivial(self):
        """Whether applying the mask changes nothing."""
        return (self.scale == 1.0 and not self.fill and self.vmin == -np.inf
                and self.vmax == np.inf)

    def apply(self, raw, dtype=None):
        """Return a masked, scaled float copy (or the input itself if nothing to do).

        Parameters
        ----------
        raw : numpy.ndarray
            One block of raw values.
        dtype : numpy dtype, optional
            Floating dtype of the result (default: float32 for float32 input,
            float64 otherwise).

        Returns
        -------
        numpy.ndarray
            Values in canonical units with missing values as NaN.
        """
        raw = np.asarray(raw)
        if dtype is None:
            dtype = np.float32 if raw.dtype == np.float32 else np.float64
        if self.trivial and raw.dtype == dtype:
            return raw
        out = raw.astype(dtype, copy=True)
        bad = None
        for f in self.fill:
            b = raw == f
            bad = b if bad is None else (bad | b)
        if self.vmin != -np.inf:
            b = raw < self.vmin
            bad = b if bad is None else (bad | b)
        if self.vmax != np.inf:
            b = raw > self.vmax
            bad = b if bad is None else (bad | b)
        if bad is not None:
            out[bad] = np.nan
        if self.scale != 1.0:
            out *= dtype(self.scale) if isinstance(dtype, type) else self.scale
        return out


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
    energy_kev : numpy.ndarray
        Energy channel centres in keV.
    energy_bnds_kev : numpy.ndarray
        Energy channel edges (n_energy, 2) in keV.
    angle_scale : dict
        Factor to degrees of each angle variable that is not in degrees.
    other_scale : dict
        Factor to the canonical unit of position variables (b_local, position_geo, mlt).
    n_negative : int
        Number of negative flux values found.
    """

    kind: str
    edges: np.ndarray | None
    centres: np.ndarray | None
    folded: bool
    flux_mask: ValueMask
    err_mask: ValueMask | None
    counts_mask: ValueMask | None
    error_source: str | None
    energy_kev: np.ndarray
    energy_bnds_kev: np.ndarray
    angle_scale: dict = field(default_factory=dict)
    other_scale: dict = field(default_factory=dict)
    n_negative: int = 0


def _mask_of(var, problems, name):
    attrs = var.attrs
    fills = []
    for key in ("_FillValue", "missing_value"):
        if key in attrs:
            vals = np.atleast_1d(np.asarray(attrs[key], dtype=float))
            fills.extend(float(v) for v in vals if not np.isnan(v))
    vmin, vmax = -np.inf, np.inf
    if "valid_range" in attrs:
        vr = np.atleast_1d(np.asarray(attrs["valid_range"], dtype=float))
        if vr.size != 2 or not vr[0] < vr[1]:
            problems.append(f"{name}: attribute valid_range must be two increasing numbers, "
                            f"got {attrs['valid_range']!r}")
        else:
            vmin, vmax = float(vr[0]), float(vr[1])
    if "valid_min" in attrs:
        vmin = float(attrs["valid_min"])
    if "valid_max" in attrs:
        vmax = float(attrs["valid_max"])
    return tuple(fills), vmin, vmax


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


def _blocks(n):
    for start in range(0, n, _BLOCK):
        yield slice(start, min(start + _BLOCK, n))


def _value_summary(da, mask, energy_axis):
    """Return per-energy NaN-ignoring minimum and negative count of the masked values."""
    data = da.data
    tax = da.dims.index("time")
    other = tuple(i for i in range(da.ndim) if i != energy_axis)
    if hasattr(data, "dask"):
        import dask.array as dsa

        masked = dsa.map_blocks(mask.apply, data, dtype=np.float64)
        lo = dsa.nanmin(masked, axis=other)
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            lo, n_neg = dsa.compute(lo, (masked < 0).sum(axis=other))
        return np.asarray(lo), np.asarray(n_neg)
    from ._kernels import value_scan

    data = np.asarray(data)
    order = [tax, energy_axis] + [i for i in range(data.ndim) if i not in (tax, energy_axis)]
    data = data.transpose(order) if data.ndim == 3 else data
    n_e = data.shape[1]
    lo = np.full(n_e, np.nan)
    n_neg = np.zeros(n_e, dtype=np.int64)
    for sl in _blocks(data.shape[0]):
        blo, bneg = value_scan(data[sl], mask.fill, mask.vmin, mask.vmax)
        lo = np.fmin(lo, blo)
        n_neg += bneg
    return lo, n_neg


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


def _check_time(ds, problems):
    if "time" not in ds.variables:
        problems.append("time: missing coordinate variable; add a 'time' coordinate "
                        "(datetime64 UTC or seconds)")
        return
    t = ds["time"].values
    if t.ndim != 1:
        problems.append("time: must be one-dimensional")
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


def _check_range(ds, name, lo, hi, problems, scale=1.0, pending=None):
    """Append a problem if ``ds[name]`` leaves [lo, hi].

    With ``pending`` (a list), a dask variable's extremes are not computed
    here: the check is queued for :func:`_run_pending_ranges`, which computes
    all of them in one pass.
    """
    v = ds[name].data
    if hasattr(v, "dask"):
        import dask.array as dsa

        if pending is not None:
            pending.append((len(problems), name, lo, hi, scale, dsa.nanmin(v), dsa.nanmax(v)))
            return
        vmin, vmax = dsa.compute(dsa.nanmin(v), dsa.nanmax(v))
    else:
        v = np.asarray(v, dtype=float)
        if v.size == 0:
            return
        # fmin/fmax skip NaN (one pass each, no NaN-free copy); all NaN gives NaN
        vmin, vmax = np.fmin.reduce(v, axis=None), np.fmax.reduce(v, axis=None)
        if np.isnan(vmin):
            return
    _range_problem(name, lo, hi, vmin, vmax, scale, problems, len(problems))


def _range_problem(name, lo, hi, vmin, vmax, scale, problems, where):
    vmin, vmax = float(vmin) * scale, float(vmax) * scale
    if (lo is not None and vmin < lo) or (hi is not None and vmax > hi):
        problems.insert(where, f"{name}: values must lie in [{lo}, {hi}], got {vmin:g} to "
                               f"{vmax:g}")


def _run_pending_ranges(pending, problems):
    """Compute the queued range checks of dask variables together (one graph)."""
    if not pending:
        return
    import warnings

    import dask

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices
        values = dask.compute(*[(mn, mx) for *_, mn, mx in pending])
    # insert from the last so that the recorded positions stay valid
    for (where, name, lo, hi, scale, _, _), (vmin, vmax) in reversed(list(zip(pending,
                                                                                 values))):
        _range_problem(name, lo, hi, vmin, vmax, scale, problems, where)


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


def _inspect(ds, model=None, allow_negative=False, check_values=True):
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
    fills, vmin, vmax = _mask_of(flux, problems, "flux")
    flux_mask = ValueMask(scale, fills, vmin, vmax)
    _check_time(ds, problems)
    # energy
    energy_kev = np.array([])
    ebnds = np.zeros((0, 2))
    if "energy" not in ds.variables:
        problems.append("energy: missing coordinate variable (channel centres in keV)")
    else:
        es = _unit_factor(ds["energy"], "energy", _ENERGY, problems, "an energy")
        energy_kev = np.asarray(ds["energy"].values, dtype=float) * es
        if energy_kev.ndim != 1 or np.any(~np.isfinite(energy_kev)) or np.any(energy_kev <= 0):
            problems.append("energy: values must be finite and positive")
        if "energy_bnds" not in ds.variables:
            problems.append("energy_bnds: missing; give the channel edges as an (energy, 2) "
                            "bounds variable and set energy.attrs['bounds'] = 'energy_bnds'")
        else:
            eb = ds["energy_bnds"]
            if eb.ndim != 2 or eb.dims[0] != "energy" or eb.shape[1] != 2:
                problems.append(f"energy_bnds: must have dims (energy, 2), got {eb.dims}")
            else:
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
            _check_range(ds, "look_pitch_angle", 0, 180, problems,
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
    for name, table, what, lo, hi, required in (
        ("L", _DIMENSIONLESS, "the dimensionless L-shell", 1.0, None, False),
        ("mlat", _ANGLE, "an angle", -90.0, 90.0, True),
        ("mlt", _HOURS, "magnetic local time in hours", 0.0, 24.0, True),
        ("b_local", _FIELD, "a magnetic field", 0.0, None, True),
    ):
        if name in ds.variables:
            v = ds[name]
            if v.dims != ("time",):
                problems.append(f"{name}: must have dims ('time',), got {v.dims}")
                continue
            f = _unit_factor(v, name, table, problems, what, required=required)
            other_scale[name] = f
            _check_range(ds, name, lo, hi, problems, f, pending=ranges)
    _run_pending_ranges(ranges, problems)
    if has_geo:
        pg = ds["position_geo"]
        if pg.ndim != 2 or pg.dims[0] != "time" or pg.shape[1] != 3:
            problems.append(f"position_geo: must have dims (time, 3) (GEO x, y, z), got "
                            f"{pg.dims} with shape {pg.shape}")
        other_scale["position_geo"] = _unit_factor(pg, "position_geo", _DISTANCE, problems,
                                                   "a distance")
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
        fills, vmin, vmax = _mask_of(fe, problems, "flux_err")
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
        fills, vmin, vmax = _mask_of(ct, problems, "counts")
        counts_mask = ValueMask(1.0, fills, vmin, vmax)
    # values (only when the structure is sound)
    n_negative = 0
    flux_ok = (set(flux.dims) == want and flux.ndim == 3
               and np.issubdtype(flux.dtype, np.number)
               and (error_source is None or ds[error_source].dims == flux.dims))
    if check_values and flux_ok:
        eax = flux.dims.index("energy")
        lo, negs = _value_summary(flux, flux_mask, eax)
        n_err_neg = 0
        if error_source == "flux_err":
            elo, _ = _value_summary(ds["flux_err"], err_mask, eax)
            n_err_neg = int(np.sum(elo[~np.isnan(elo)] < 0))
        if error_source == "counts":
            clo, _ = _value_summary(ds["counts"], counts_mask, eax)
            n_err_neg = int(np.sum(clo[~np.isnan(clo)] < 0))
        n_negative = int(np.sum(negs))
        problems.extend(value_problems(energy_kev, ~np.isnan(lo), n_negative, n_err_neg,
                                       error_source, allow_negative))
    prepared = None
    if not problems:
        prepared = Prepared(kind=kind, edges=edges, centres=centres, folded=folded,
                            flux_mask=flux_mask,
                            err_mask=err_mask, counts_mask=counts_mask,
                            error_source=error_source, energy_kev=energy_kev,
                            energy_bnds_kev=ebnds, angle_scale=angle_scale,
                            other_scale=other_scale, n_negative=n_negative)
    return problems, prepared


def value_problems(energy_kev, has_valid, n_negative, n_err_negative, error_source,
                   allow_negative):
    """Return the problems found by the value checks (shared by the validator and engines).

    Parameters
    ----------
    energy_kev : numpy.ndarray
        Channel energies (keV), for the message.
    has_valid : numpy.ndarray of bool
        Per channel: whether any valid (non-NaN, non-fill) flux value exists.
    n_negative : int
        Number of negative flux values.
    n_err_negative : int
        Number of negative uncertainties (or negative counts).
    error_source : str or None
        ``"flux_err"`` or ``"counts"``.
    allow_negative : bool
        Whether negative flux values are accepted.

    Returns
    -------
    list of str
        The problems (possibly empty).
    """
    problems = []
    dead = ~np.asarray(has_valid, dtype=bool)
    if np.any(dead):
        energy_kev = np.asarray(energy_kev)
        where = (f"energies {energy_kev[dead].tolist()} keV" if energy_kev.shape == dead.shape
                 else f"energy indices {np.flatnonzero(dead).tolist()}")
        problems.append(f"flux: all values NaN (or fill) at {where}; drop those channels "
                        "(ds.drop_isel(energy=...)) or check the fill-value attributes")
    if n_negative and not allow_negative:
        problems.append(f"flux: {n_negative} negative values; set them to NaN, or pass "
                        "allow_negative=True to keep them (they are then flagged in "
                        "partition_flag)")
    if n_err_negative:
        what = "negative counts" if error_source == "counts" else "negative uncertainties"
        problems.append(f"{error_source}: {what}")
    return problems


def validate(ds, *, model=None, allow_negative=False, check_values=True):
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

    Returns
    -------
    list of str
        The problems, each naming the variable and what is wrong; empty if
        the dataset follows the conventions.
    """
    problems, _ = _inspect(ds, model=model, allow_negative=allow_negative,
                           check_values=check_values)
    return problems


def check(ds, *, model=None, allow_negative=False, source=None, check_values=True):
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
                                  check_values=check_values)
    if problems and not check_values:  # refusing anyway: name the value problems too
        problems, prepared = _inspect(ds, model=model, allow_negative=allow_negative,
                                      check_values=True)
    if problems:
        if source is None and isinstance(ds, xr.Dataset):
            source = ds.encoding.get("source")
        raise ConventionError(problems, source)
    return prepared
