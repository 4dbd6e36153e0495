r"""The IGRF-14 coefficient table and its time interpolation, as the standard prescribes.

The shipped Gauss-coefficient table (``data/igrf14coeffs.shc``, the published
IAGA IGRF-14 release in the SHC text format, doi:10.5281/zenodo.14012302) and
the one implementation of the IGRF time rule that every synthesis path uses:
:func:`time_interpolation` finds, for each time, the table interval and the
offset into it, and holds the interval start coefficients and slopes;
:func:`igrf_coefficients` and :func:`coefficients_at` evaluate it in numpy,
and the per-point-time kernels of :mod:`beltkit.field.igrf_kernels` receive
its arrays and evaluate the same expression point by point.

Time interpolation (the IGRF prescription; Alken, P., et al. (2021),
*Earth Planets Space* 73, 49, unchanged for IGRF-14): the coefficients at
decimal year *t* are linear in *t* between the 5-year epochs
1900.0, ..., 2025.0,

.. math:: g_n^m(t) = g_n^m(T_k) + (t - T_k)\,
          \frac{g_n^m(T_{k+1}) - g_n^m(T_k)}{T_{k+1} - T_k},
          \qquad T_k \le t \le T_{k+1};

from 2025.0 to 2030.0 they follow the predictive linear secular variation,
which the SHC table encodes as its 2030.0 column (:math:`g(2025) + 5\,\dot g`),
so the same formula applies on the last interval. Outside 1900.0-2030.0 the
model is undefined: times there raise unless extrapolation is asked for
explicitly (the first/last linear piece is then extended). Decimal years
follow the IGRF convention of :func:`beltkit.field.timeconv.decimal_year`.
"""

from __future__ import annotations

import functools
from importlib import resources
from pathlib import Path
from typing import NamedTuple

import numpy as np

from ..errors import FieldModelError
from .timeconv import decimal_year

__all__ = [
    "IGRFTable",
    "TimeInterpolation",
    "check_max_degree",
    "coefficient_rates",
    "coefficients_at",
    "effective_degree",
    "igrf_coefficients",
    "igrf_table",
    "load_shc",
    "table_interval",
    "time_interpolation",
]

_DEFAULT_TABLE = "igrf14coeffs.shc"


class IGRFTable:
    """Gauss coefficients of a spherical-harmonic model at its epochs.

    Parameters
    ----------
    epochs : ndarray, shape (K,)
        Decimal years of the table's columns, increasing.
    g, h : ndarray, shape (K, N+1, N+1)
        Schmidt semi-normalised Gauss coefficients in nT, indexed
        ``[epoch, n, m]`` (zero where ``m > n`` and for ``n = 0``).
    source : str
        Where the table came from (file path), for messages.

    Attributes
    ----------
    nmax : int
        Highest degree in the table.
    """

    def __init__(self, epochs, g, h, source=""):
        self.epochs = np.asarray(epochs, dtype=float)
        self.g = np.asarray(g, dtype=float)
        self.h = np.asarray(h, dtype=float)
        self.nmax = self.g.shape[1] - 1
        self.source = source
        for arr in (self.epochs, self.g, self.h):
            arr.setflags(write=False)

    @property
    def valid_range(self) -> tuple[float, float]:
        """First and last decimal year of the table (the model's validity)."""
        return float(self.epochs[0]), float(self.epochs[-1])

    def __repr__(self):
        lo, hi = self.valid_range
        return f"IGRFTable(degree {self.nmax}, {lo:g}-{hi:g}, {len(self.epochs)} epochs)"


def load_shc(path) -> IGRFTable:
    """Read a spherical-harmonic coefficient table in the IAGA SHC text format.

    Parameters
    ----------
    path : str or pathlib.Path
        The ``.shc`` file.

    Returns
    -------
    IGRFTable
        Epochs and Gauss coefficients.

    Raises
    ------
    FieldModelError
        If the file is missing or does not follow the format; the message
        names the file and the line.

    Notes
    -----
    The SHC format (IAGA V-MOD): lines starting with ``#`` are comments; the
    first other line holds ``N_min N_max N_times spline_order N_steps``
    (optionally followed by the validity start and end); the next holds the
    ``N_times`` epochs in decimal years; every further line is
    ``n m c(t_1) ... c(t_K)`` where ``m >= 0`` gives :math:`g_n^m` and
    ``m < 0`` gives :math:`h_n^{|m|}`. Piecewise-linear tables (spline order
    2), such as IGRF, are accepted.
    """
    path = Path(path)
    try:
        text = path.read_text()
    except OSError as exc:
        raise FieldModelError(f"cannot read coefficient table {str(path)!r}: {exc}") from exc
    rows = [
        (i + 1, ln.split())
        for i, ln in enumerate(text.splitlines())
        if ln.strip() and not ln.lstrip().startswith("#")
    ]

    def fail(lineno, what):
        raise FieldModelError(f"coefficient table {str(path)!r}, line {lineno}: {what}")

    if len(rows) < 3:
        fail(rows[-1][0] if rows else 0, "too short to be an SHC table")
    lineno, head = rows[0]
    try:
        nmin, nmax, ntimes, order = (int(v) for v in head[:4])
    except ValueError:
        fail(lineno, f"header must start with 4 integers, got {' '.join(head)!r}")
    if order != 2:
        fail(lineno, f"spline order {order} not supported (only piecewise linear, order 2)")
    lineno, times = rows[1]
    if len(times) != ntimes:
        fail(lineno, f"expected {ntimes} epochs, found {len(times)}")
    epochs = np.array([float(v) for v in times])
    if np.any(np.diff(epochs) <= 0):
        fail(lineno, "epochs must increase")
    g = np.zeros((ntimes, nmax + 1, nmax + 1))
    h = np.zeros_like(g)
    seen = set()
    for lineno, parts in rows[2:]:
        if len(parts) != ntimes + 2:
            fail(lineno, f"expected n, m and {ntimes} values, found {len(parts)} fields")
        n, m = int(parts[0]), int(parts[1])
        if not (nmin <= n <= nmax and abs(m) <= n):
            fail(lineno, f"degree/order ({n}, {m}) outside the header's range")
        vals = np.array([float(v) for v in parts[2:]])
        if m >= 0:
            g[:, n, m] = vals
        else:
            h[:, n, -m] = vals
        seen.add((n, m))
    expected = {(n, m) for n in range(nmin, nmax + 1) for m in range(-n, n + 1)}
    missing = sorted(expected - seen)
    if missing:
        fail(rows[-1][0], f"{len(missing)} coefficient rows missing, e.g. (n, m) = {missing[0]}")
    return IGRFTable(epochs, g, h, source=str(path))


@functools.lru_cache(maxsize=1)
def igrf_table() -> IGRFTable:
    """Return the shipped IGRF-14 table (read once, then cached).

    Returns
    -------
    IGRFTable
        Degree 13, epochs 1900.0-2025.0 and the 2030.0 secular-variation
        end value (IAGA IGRF-14, doi:10.5281/zenodo.14012302).
    """
    ref = resources.files("beltkit.field").joinpath("data", _DEFAULT_TABLE)
    with resources.as_file(ref) as path:
        return load_shc(path)



# ---------------------------------------------------------------------------
# time interpolation


def table_interval(t, table: IGRFTable, allow_extrapolation: bool = False, name: str = "time"):
    r"""Return the table interval holding each decimal year, and the offset into it.

    Parameters
    ----------
    t : ndarray
        Decimal years (NaN allowed).
    table : IGRFTable
        The coefficient table.
    allow_extrapolation : bool
        Extend the first/last interval to times outside the table instead of
        raising.
    name : str
        Argument name used in the error message.

    Returns
    -------
    k : ndarray of int
        Interval index, :math:`T_k \le t < T_{k+1}`, clipped to the first and
        last interval (NaN times get 0).
    dt : ndarray
        :math:`t - T_k` in years (NaN for NaN times).

    Raises
    ------
    FieldModelError
        For a finite time outside the table's validity, unless
        ``allow_extrapolation``.
    """
    lo, hi = table.valid_range
    finite = t[np.isfinite(t)]
    if not allow_extrapolation and finite.size and (finite.min() < lo or finite.max() > hi):
        worst = finite.min() if finite.min() < lo else finite.max()
        raise FieldModelError(
            f"argument {name!r}: decimal year {worst:.4f} is outside the validity of "
            f"IGRF-14, {lo:.1f}-{hi:.1f} (definitive/IGRF epochs 1900-2025 and the "
            f"predictive secular variation to 2030); pass allow_extrapolation=True to "
            f"extend the first/last linear piece beyond it"
        )
    k = np.searchsorted(table.epochs, np.where(np.isfinite(t), t, lo), side="right") - 1
    k = np.clip(k, 0, len(table.epochs) - 2)
    return k, t - table.epochs[k]


@functools.lru_cache(maxsize=8)
def coefficient_rates(table: IGRFTable):
    """Slopes of g and h on every table interval.

    Parameters
    ----------
    table : IGRFTable
        The coefficient table.

    Returns
    -------
    gdot, hdot : ndarray, shape (K-1, N+1, N+1)
        :math:`(g(T_{k+1}) - g(T_k)) / (T_{k+1} - T_k)` in nT/yr, read-only
        (cached per table). On the last IGRF-14 interval this is the
        predictive secular variation.
    """
    span = np.diff(table.epochs)[:, None, None]
    gdot = np.diff(table.g, axis=0) / span
    hdot = np.diff(table.h, axis=0) / span
    gdot.setflags(write=False)
    hdot.setflags(write=False)
    return gdot, hdot


def check_max_degree(max_degree, table: IGRFTable | None = None) -> int:
    """Return the truncation degree as an int, refusing one outside 1 to the table's degree.

    Parameters
    ----------
    max_degree : int
        Requested truncation degree.
    table : IGRFTable, optional
        The table (default: the shipped IGRF-14 one, degree 13).

    Returns
    -------
    int
        ``int(max_degree)``.

    Raises
    ------
    FieldModelError
        If it is not in 1 to the table's degree.
    """
    top = (table or igrf_table()).nmax
    if not 1 <= int(max_degree) <= top:
        raise FieldModelError(f"argument 'max_degree' must be 1-{top}, got {max_degree!r}")
    return int(max_degree)


class TimeInterpolation(NamedTuple):
    r"""The IGRF linear pieces selected for a set of times.

    Built by :func:`time_interpolation`. The coefficients at time *i* are
    ``g_start[index[i]] + offset[i] * g_rate[index[i]]`` (same for *h*), with
    degrees above ``max_degree`` dropped: :meth:`coefficients` evaluates this
    in numpy, and the per-point-time kernels of
    :mod:`beltkit.field.igrf_kernels` evaluate it point by point from
    :meth:`pieces`.

    Attributes
    ----------
    index : ndarray of int64
        Table interval of each time (shape of the times).
    offset : ndarray
        Years since the interval's start epoch (NaN for NaN times).
    g_start, h_start : ndarray, shape (K-1, N+1, N+1)
        Coefficients at each interval's start epoch (nT).
    g_rate, h_rate : ndarray, shape (K-1, N+1, N+1)
        Slopes on each interval (nT/yr), :func:`coefficient_rates`.
    max_degree : int
        Truncation degree.
    """

    index: np.ndarray
    offset: np.ndarray
    g_start: np.ndarray
    h_start: np.ndarray
    g_rate: np.ndarray
    h_rate: np.ndarray
    max_degree: int

    def coefficients(self, n: int | None = None, m: int | None = None):
        """Gauss coefficients at the times: the full sets, or one ``(n, m)`` pair.

        Parameters
        ----------
        n, m : int, optional
            Degree and order of a single coefficient (``1 <= n <= max_degree``,
            ``0 <= m <= n``); by default all of them.

        Returns
        -------
        g, h : ndarray
            Shape ``index.shape + (N+1, N+1)`` (degrees above ``max_degree``
            set to zero), or ``index.shape`` for one ``(n, m)``; nT.
        """
        if n is None:
            sel = (self.index,)
        else:
            if not (1 <= n <= self.max_degree and 0 <= m <= n):
                raise FieldModelError(
                    f"coefficient (n, m) = ({n}, {m}) is not in the model "
                    f"(1 <= n <= {self.max_degree}, 0 <= m <= n)"
                )
            sel = (self.index, n, m)
        g = self.g_start[sel]
        d = self.offset.reshape(self.offset.shape + (1,) * (g.ndim - self.offset.ndim))
        g = g + d * self.g_rate[sel]
        h = self.h_start[sel] + d * self.h_rate[sel]
        if n is None:
            g[..., self.max_degree + 1 :, :] = 0.0
            h[..., self.max_degree + 1 :, :] = 0.0
        return g, h

    def pieces(self):
        """Contiguous arrays for the compiled per-point-time kernels.

        Returns
        -------
        index : ndarray of int64, flat
        offset : ndarray, flat
        g_start, h_start, g_rate, h_rate : ndarray, shape (K-1, n+1, n+1)
            Truncated to ``n = max_degree``.
        """
        sl = slice(0, self.max_degree + 1)
        return (
            np.ascontiguousarray(self.index.ravel(), dtype=np.int64),
            np.ascontiguousarray(self.offset.ravel(), dtype=float),
            *(np.ascontiguousarray(a[:, sl, sl])
              for a in (self.g_start, self.h_start, self.g_rate, self.h_rate)),
        )


def time_interpolation(time, *, max_degree: int = 13,
                       allow_extrapolation: bool = False) -> TimeInterpolation:
    r"""Select the IGRF-14 linear piece of every time (the one time-interpolation rule).

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants or decimal years (IGRF convention,
        :func:`beltkit.field.timeconv.decimal_year`).
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Extend the first/last linear piece outside 1900.0-2030.0 instead of
        raising.

    Returns
    -------
    TimeInterpolation
        Interval index and offset of every time, and the table's interval
        start coefficients and slopes.

    Raises
    ------
    FieldModelError
        For ``max_degree`` outside 1-13, or a time outside 1900.0-2030.0
        (unless ``allow_extrapolation``), naming the valid range.

    Notes
    -----
    .. math:: g_n^m(t) = g_n^m(T_k) + (t - T_k)\,\dot g_{n,k}^m,
              \qquad T_k \le t \le T_{k+1}

    (module notes; the IGRF prescription).
    """
    table = igrf_table()
    nmax = check_max_degree(max_degree, table)
    t = np.asarray(decimal_year(time), dtype=float)
    k, dt = table_interval(t, table, allow_extrapolation, "time")
    gdot, hdot = coefficient_rates(table)
    return TimeInterpolation(np.asarray(k, dtype=np.int64), np.asarray(dt, dtype=float),
                             table.g[:-1], table.h[:-1], gdot, hdot, nmax)


def igrf_coefficients(time, *, max_degree: int = 13, allow_extrapolation: bool = False):
    r"""IGRF-14 Gauss coefficients at the given times.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants or decimal years (IGRF convention,
        :func:`beltkit.field.timeconv.decimal_year`).
    max_degree : int
        Truncation degree, 1-13; higher degrees are returned as zero.
    allow_extrapolation : bool
        Extend the first/last linear piece outside 1900.0-2030.0 instead of
        raising.

    Returns
    -------
    g, h : ndarray, shape ``time.shape + (14, 14)``
        :math:`g_n^m` and :math:`h_n^m` in nT, indexed ``[..., n, m]``
        (``n`` = 0 row and ``m > n`` entries are zero).

    Raises
    ------
    FieldModelError
        For a time outside 1900.0-2030.0 (unless ``allow_extrapolation``),
        naming the valid range.

    Notes
    -----
    .. math:: g_n^m(t) = g_n^m(T_k) + (t - T_k)\,
              \frac{g_n^m(T_{k+1}) - g_n^m(T_k)}{T_{k+1} - T_k},
              \qquad T_k \le t \le T_{k+1},

    the IGRF prescription: linear between the 5-year epochs, and on
    2025-2030 the linear predictive secular variation (the table's 2030.0
    column is :math:`g(2025) + 5\,\dot g`). NaN times give NaN
    coefficients. Evaluated by :meth:`TimeInterpolation.coefficients`.

    Examples
    --------
    >>> g, h = igrf_coefficients(2020.0)
    >>> float(g[1, 0]), float(g[1, 1]), float(h[1, 1])
    (-29403.41, -1451.37, 4653.35)
    """
    return time_interpolation(time, max_degree=max_degree,
                              allow_extrapolation=allow_extrapolation).coefficients()


def effective_degree(g, h) -> int:
    """Highest degree with a non-zero coefficient (at least 1).

    Parameters
    ----------
    g, h : ndarray, shape (N+1, N+1)
        Gauss coefficients of one epoch.

    Returns
    -------
    int
        The degree at which a synthesis can stop without changing the field.
    """
    nz = np.nonzero(np.any(g != 0, axis=1) | np.any(h != 0, axis=1))[0]
    return max(int(nz.max()) if nz.size else 1, 1)


@functools.lru_cache(maxsize=256)
def coefficients_at(t: float, max_degree: int = 13, allow_extrapolation: bool = False):
    """Return cached Gauss coefficients of one decimal year, for repeated fast calls.

    Parameters
    ----------
    t : float
        Decimal year.
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0.

    Returns
    -------
    g, h : ndarray, shape (14, 14)
        Read-only coefficients in nT (as :func:`igrf_coefficients`).
    nmax : int
        Highest degree with a non-zero coefficient (the synthesis stops there).
    """
    g, h = igrf_coefficients(float(t), max_degree=max_degree,
                             allow_extrapolation=allow_extrapolation)
    g = np.ascontiguousarray(g)
    h = np.ascontiguousarray(h)
    g.setflags(write=False)
    h.setflags(write=False)
    return g, h, effective_degree(g, h)
