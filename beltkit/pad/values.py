"""Value masks and value checks of the data variables of a pitch-angle flux dataset.

A :class:`ValueMask` records how the raw values of one variable become
numbers in canonical units: the unit factor, the fill values and the valid
range (CF ``_FillValue``/``missing_value``, ``valid_range``/``valid_min``/
``valid_max``; ISTP ``FILLVAL``/``VALIDMIN``/``VALIDMAX`` are turned into
these by :mod:`beltkit.io`). The engines apply it block by block, so that no
full-size copy of a file's flux is made. The value checks (negative flux,
infinite values, channels without any valid value, position variables
outside their physical range) are written once here and shared by the
validator and the engines.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

__all__ = [
    "ValueMask",
    "check_range",
    "mask_of",
    "range_problem",
    "run_pending_ranges",
    "value_problems",
    "value_summary",
]

_BLOCK = 65536


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

    @property
    def masks_values(self):
        """Whether some raw values can be masked (fill values or a finite valid range)."""
        return bool(self.fill) or self.vmin != -np.inf or self.vmax != np.inf

    def hits(self, raw):
        """Return where raw values are fill and where they leave the valid range.

        Parameters
        ----------
        raw : numpy.ndarray
            One block of raw values.

        Returns
        -------
        fill, out_of_range : numpy.ndarray of bool
            Same shape as `raw`; a fill value is not counted as out of range.
        """
        raw = np.asarray(raw)
        fill = np.zeros(raw.shape, dtype=bool)
        for f in self.fill:
            fill |= raw == f
        outside = np.zeros(raw.shape, dtype=bool)
        with np.errstate(invalid="ignore"):
            if self.vmin != -np.inf:
                outside |= raw < self.vmin
            if self.vmax != np.inf:
                outside |= raw > self.vmax
        return fill, outside & ~fill


def mask_of(var, problems, name):
    """Return ``(fills, vmin, vmax)`` of a variable from its CF attributes.

    A malformed ``valid_range`` is appended to `problems` (naming `name`).
    """
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


def _blocks(n):
    for start in range(0, n, _BLOCK):
        yield slice(start, min(start + _BLOCK, n))


def value_summary(da, mask, energy_axis):
    """Return per-energy NaN-ignoring minimum, negative count and inf count of the masked values.

    Infinite values (+-inf) that the mask leaves are counted apart: they are
    not valid, and neither set the minimum nor count as negative.
    """
    data = da.data
    tax = da.dims.index("time")
    other = tuple(i for i in range(da.ndim) if i != energy_axis)
    if hasattr(data, "dask"):
        import dask.array as dsa

        masked = dsa.map_blocks(mask.apply, data, dtype=np.float64)
        infinite = dsa.isinf(masked)
        finite = dsa.where(infinite, np.nan, masked)
        lo = dsa.nanmin(finite, axis=other)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            lo, n_neg, n_inf = dsa.compute(lo, (finite < 0).sum(axis=other),
                                           infinite.sum(axis=other))
        return np.asarray(lo), np.asarray(n_neg), np.asarray(n_inf)
    from ._kernels import value_scan

    data = np.asarray(data)
    order = [tax, energy_axis] + [i for i in range(data.ndim) if i not in (tax, energy_axis)]
    data = data.transpose(order) if data.ndim == 3 else data
    n_e = data.shape[1]
    lo = np.full(n_e, np.nan)
    n_neg = np.zeros(n_e, dtype=np.int64)
    n_inf = np.zeros(n_e, dtype=np.int64)
    for sl in _blocks(data.shape[0]):
        blo, bneg, binf = value_scan(data[sl], mask.fill, mask.vmin, mask.vmax)
        lo = np.fmin(lo, blo)
        n_neg += bneg
        n_inf += binf
    return lo, n_neg, n_inf


def check_range(ds, name, lo, hi, problems, scale=1.0, pending=None):
    """Append a problem if ``ds[name]`` leaves [lo, hi].

    With ``pending`` (a list), a dask variable's extremes are not computed
    here: the check is queued for :func:`run_pending_ranges`, which computes
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
    range_problem(name, lo, hi, vmin, vmax, scale, problems, len(problems))


def range_problem(name, lo, hi, vmin, vmax, scale, problems, where):
    """Insert at `where` the problem of ``vmin``, ``vmax`` (times `scale`) off [lo, hi]."""
    vmin, vmax = float(vmin) * scale, float(vmax) * scale
    if (lo is not None and vmin < lo) or (hi is not None and vmax > hi):
        problems.insert(where, f"{name}: values must lie in [{lo}, {hi}], got {vmin:g} to "
                               f"{vmax:g}")


def run_pending_ranges(pending, problems):
    """Compute the queued range checks of dask variables together (one graph)."""
    if not pending:
        return
    import dask

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices
        values = dask.compute(*[(mn, mx) for *_, mn, mx in pending])
    # insert from the last so that the recorded positions stay valid
    for (where, name, lo, hi, scale, _, _), (vmin, vmax) in reversed(list(zip(pending,
                                                                                 values))):
        range_problem(name, lo, hi, vmin, vmax, scale, problems, where)


def value_problems(energy_kev, has_valid, n_negative, n_err_negative, error_source,
                   allow_negative, *, strict=True, n_infinite=0, n_err_infinite=0):
    """Return the problems found by the value checks (shared by the validator and engines).

    Parameters
    ----------
    energy_kev : numpy.ndarray or None
        Channel energies (keV), for the message (None: a record-varying table).
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
    strict : bool, keyword-only
        True: each of these is a problem of the dataset. False: the engines
        mask and flag those samples; only a dataset without any valid flux
        value is a problem.
    n_infinite, n_err_infinite : int, keyword-only
        Number of infinite (+-inf) flux values and uncertainties (or counts)
        that no fill value or valid range masked. With ``strict=False`` they
        are masked and flagged ``input_out_of_valid_range``.

    Returns
    -------
    list of str
        The problems (possibly empty).
    """
    problems = []
    dead = ~np.asarray(has_valid, dtype=bool)
    if not strict:
        if dead.size and dead.all():
            problems.append("flux: no valid value at all (every value NaN, fill or masked); "
                            "check the fill-value attributes, the valid range and the quality "
                            "rule of the mapping")
        return problems
    if np.any(dead):
        energy_kev = np.asarray(energy_kev)
        where = (f"energies {energy_kev[dead].tolist()} keV" if energy_kev.shape == dead.shape
                 else f"energy indices {np.flatnonzero(dead).tolist()}")
        problems.append(f"flux: all values NaN (or fill) at {where}; drop those channels "
                        "(ds.drop_isel(energy=...)) or check the fill-value attributes")
    if n_negative and not allow_negative:
        problems.append(f"flux: {n_negative} negative values; set them to NaN, or pass "
                        "allow_negative=True to keep them (they are then flagged in "
                        "partition_flag), or strict=False to mask and flag them")
    if n_infinite:
        problems.append(f"flux: {n_infinite} infinite values (+inf or -inf); set them to NaN, "
                        "give the variable a valid range, or pass strict=False to mask and "
                        "flag them")
    if n_err_negative:
        what = "negative counts" if error_source == "counts" else "negative uncertainties"
        problems.append(f"{error_source}: {what}")
    if n_err_infinite:
        what = "counts" if error_source == "counts" else "uncertainties"
        problems.append(f"{error_source}: {n_err_infinite} infinite {what} (+inf or -inf); set "
                        "them to NaN, or pass strict=False to mask and flag them")
    return problems
