r"""The International Geomagnetic Reference Field, 14th generation (IGRF-14).

The main field of the IAGA standard: the shipped Gauss-coefficient table
(``data/igrf14coeffs.shc``, the published IAGA release in the SHC text
format), its time interpolation exactly as the standard prescribes, and a
vectorised spherical-harmonic synthesis of the field vector.

Model
-----
Outside the sources the main field is :math:`\mathbf B = -\nabla V` with

.. math::

    V(r, \theta, \phi, t) = a \sum_{n=1}^{N} \left(\frac{a}{r}\right)^{n+1}
        \sum_{m=0}^{n} \left[g_n^m(t) \cos m\phi + h_n^m(t) \sin m\phi\right]
        P_n^m(\cos\theta),

*a* = 6371.2 km (:data:`beltkit.constants.R_E_KM`), :math:`\theta`
geocentric colatitude, :math:`\phi` east longitude and :math:`P_n^m` the
Schmidt semi-normalised associated Legendre functions (no Condon-Shortley
phase). Source: Alken, P., et al. (2021), "International Geomagnetic
Reference Field: the thirteenth generation", *Earth Planets Space* 73, 49
(the model definition, unchanged for IGRF-14); IGRF-14 coefficients:
IAGA V-MOD (2024/2025), doi:10.5281/zenodo.14012302.

Time interpolation (the IGRF prescription): the coefficients at decimal year
*t* are linear in *t* between the 5-year epochs 1900.0, ..., 2025.0; from
2025.0 to 2030.0 they follow the predictive linear secular variation, which
the SHC table encodes as its 2030.0 column (:math:`g(2025) + 5\,\dot g`),
so the same linear formula applies on the last interval. Outside
1900.0-2030.0 the model is undefined; :func:`igrf_coefficients` raises
unless extrapolation is asked for explicitly.

Legendre functions by recursion
-------------------------------
With :math:`u = \cos\theta`, :math:`s = \sin\theta`, write
:math:`P_n^m = s^m Q_n^m(u)`. The polynomial parts obey (Schmidt
normalisation, e.g. Langel 1987, "The main field", in *Geomagnetism* vol. 1,
ed. Jacobs, sect. 4.3; Winch et al. 2005, *Geophys. J. Int.* 160, 487)

.. math::

    Q_0^0 = Q_1^1 = 1, \qquad Q_m^m = \sqrt{\tfrac{2m-1}{2m}}\, Q_{m-1}^{m-1}
    \; (m \ge 2),

    Q_n^m = \frac{(2n-1)\,u\,Q_{n-1}^m - \sqrt{(n-1)^2 - m^2}\, Q_{n-2}^m}
                 {\sqrt{n^2 - m^2}} \quad (n > m),

and the same recursion differentiated gives :math:`dQ_n^m/du`. The powers
:math:`s^m` are carried with the longitude factors, :math:`s^m e^{i m\phi}
= (s\,e^{i\phi})^m` (in Cartesian form :math:`((x + i y)/r)^m`), so no
division by :math:`\sin\theta` ever occurs:

.. math::

    B_r &= \sum_n (n+1) \rho_n \sum_m Q_n^m (g_n^m A_m + h_n^m B_m), \\
    B_\theta &= -u \sum_n \rho_n \sum_m m Q_n^m (g_n^m E_m + h_n^m F_m)
               + s \sum_n \rho_n \sum_m \frac{dQ_n^m}{du} (g_n^m A_m + h_n^m B_m), \\
    B_\phi &= \sum_n \rho_n \sum_m m Q_n^m (g_n^m F_m - h_n^m E_m),

with :math:`\rho_n = (a/r)^{n+2}`, :math:`A_m + i B_m = s^m e^{im\phi}` and
:math:`E_m + i F_m = s^{m-1} e^{im\phi}`. At the geographic poles
(:math:`s = 0`) only the *m* = 1 terms survive in :math:`B_\theta` and
:math:`B_\phi`: they are the limits along the given meridian, finite and
exact.

Engines
-------
Two implementations of the same recursion give the same values to rounding
(the tests check it): a compiled one (numba, the default; one point at a
time, column recursion in *n* for each order *m*, threads over blocks of
points) and a vectorised numpy reference (recursion in *n* over all orders at
once, on blocks of points). On the 2-core development machine (shared with
other jobs) the compiled engine evaluated 1.2-2.4 million points per second,
the numpy one about 0.6 million (``benchmarks/bench_igrf.py``). Tracing code
should call :func:`synth_geo` with the coefficients of :func:`coefficients_at`, or
:meth:`beltkit.field.IGRF.field_geo`, which does exactly that.
"""

from __future__ import annotations

import functools
import math
import os
from importlib import resources
from pathlib import Path

import numpy as np

try:
    import numba as _nb
except ImportError:  # pragma: no cover - numba is a declared dependency
    _nb = None

from .._wrap import array_api
from ..constants import R_E_KM
from ..errors import FieldModelError
from .earth import INSIDE_EARTH_TOLERANCE_KM, inside_earth
from .timeconv import decimal_year

__all__ = [
    "DEFAULT_BACKEND",
    "IGRFTable",
    "coefficients_at",
    "igrf_coefficients",
    "igrf_field_cartesian",
    "igrf_field_spherical",
    "load_shc",
    "synth_geo",
    "synth_spherical",
    "igrf_table",
]

_DEFAULT_TABLE = "igrf14coeffs.shc"
_BLOCK = 256  # points per thread work item in the compiled kernels
_MIN_THREADED = 4096  # below this many points the single-threaded kernel is used
_IMPORT_PID = os.getpid()

#: Synthesis engine used by default: "numba" (compiled, multi-threaded) when
#: numba is importable, else "numpy" (the vectorised reference).
DEFAULT_BACKEND = "numba" if _nb is not None else "numpy"
_CHUNK = 8192  # points per block of the numpy engine (keeps the work arrays in cache)


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


def _interval(t, table: IGRFTable, allow_extrapolation: bool, name: str):
    """Index of the table interval holding each decimal year, and the offset into it."""
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
def _rates(table: IGRFTable):
    """Slopes (nT/yr) of g and h on every table interval, shape (K-1, N+1, N+1)."""
    span = np.diff(table.epochs)[:, None, None]
    gdot = np.diff(table.g, axis=0) / span
    hdot = np.diff(table.h, axis=0) / span
    gdot.setflags(write=False)
    hdot.setflags(write=False)
    return gdot, hdot


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
    return g, h, _effective_degree(g, h)


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
    coefficients.

    Examples
    --------
    >>> g, h = igrf_coefficients(2020.0)
    >>> float(g[1, 0]), float(g[1, 1]), float(h[1, 1])
    (-29403.41, -1451.37, 4653.35)
    """
    table = igrf_table()
    t = np.asarray(decimal_year(time), dtype=float)
    k, dt = _interval(t, table, allow_extrapolation, "time")
    gdot, hdot = _rates(table)
    dt = dt[..., None, None]
    g = table.g[k] + dt * gdot[k]
    h = table.h[k] + dt * hdot[k]
    _truncate(g, h, max_degree)
    return g, h


def _truncate(g, h, max_degree):
    if not 1 <= int(max_degree) <= 13:
        raise FieldModelError(f"argument 'max_degree' must be 1-13, got {max_degree!r}")
    g[..., int(max_degree) + 1 :, :] = 0.0
    h[..., int(max_degree) + 1 :, :] = 0.0


# ---------------------------------------------------------------------------
# synthesis kernels


@functools.cache
def _recursion_constants(nmax: int):
    """Recursion factors (2n-1)/sqrt(n^2-m^2), sqrt((n-1)^2-m^2)/sqrt(n^2-m^2), diagonal."""
    a = np.zeros((nmax + 1, nmax + 1))
    b = np.zeros((nmax + 1, nmax + 1))
    diag = np.ones(nmax + 1)
    for n in range(1, nmax + 1):
        for m in range(n):
            den = math.sqrt(n * n - m * m)
            a[n, m] = (2 * n - 1) / den
            b[n, m] = math.sqrt((n - 1) ** 2 - m * m) / den if n - 1 >= m else 0.0
    for m in range(2, nmax + 1):
        diag[m] = diag[m - 1] * math.sqrt((2 * m - 1) / (2 * m))
    return a, b, diag


def _synth_block(r, u, s, cp, sp, g, h, nmax):
    """Spherical field components for one block of points and one coefficient set.

    ``g``, ``h`` have shape (N+1, N+1). Returns Br, Btheta, Bphi (nT).
    """
    a_c, b_c, diag = _recursion_constants(nmax)
    npt = r.shape[0]
    a_r = R_E_KM / r
    mm = np.arange(nmax + 1, dtype=float)[:, None]
    # longitude/sine factors: E_m + i F_m = s^(m-1) e^{i m phi}; A, B = s * (E, F)
    E = np.empty((nmax + 1, npt))
    F = np.empty((nmax + 1, npt))
    E[0] = 0.0
    F[0] = 0.0
    E[1] = cp
    F[1] = sp
    A1 = s * cp
    B1 = s * sp
    for m in range(2, nmax + 1):
        E[m] = E[m - 1] * A1 - F[m - 1] * B1
        F[m] = E[m - 1] * B1 + F[m - 1] * A1
    A = s * E
    B = s * F
    A[0] = 1.0
    # accumulators over n, per order m
    Gq = np.zeros((nmax + 1, npt))  # sum (n+1) rho g Q
    Hq = np.zeros((nmax + 1, npt))
    Gp = np.zeros((nmax + 1, npt))  # sum rho g Q
    Hp = np.zeros((nmax + 1, npt))
    Gd = np.zeros((nmax + 1, npt))  # sum rho g dQ/du
    Hd = np.zeros((nmax + 1, npt))
    Q2 = np.zeros((nmax + 1, npt))  # Q_{n-2}
    D2 = np.zeros((nmax + 1, npt))
    Q1 = np.zeros((nmax + 1, npt))  # Q_{n-1}
    D1 = np.zeros((nmax + 1, npt))
    Q1[0] = 1.0
    rho = a_r * a_r
    for n in range(1, nmax + 1):
        rho = rho * a_r
        an = a_c[n, :n, None]
        bn = b_c[n, :n, None]
        Q0 = np.empty((nmax + 1, npt))
        D0 = np.empty((nmax + 1, npt))
        Q0[:n] = an * (u * Q1[:n]) - bn * Q2[:n]
        D0[:n] = an * (Q1[:n] + u * D1[:n]) - bn * D2[:n]
        Q0[n] = diag[n]
        D0[n] = 0.0
        R = rho * Q0[: n + 1]
        Rd = rho * D0[: n + 1]
        gn = g[n, : n + 1, None]
        hn = h[n, : n + 1, None]
        Gp[: n + 1] += gn * R
        Hp[: n + 1] += hn * R
        Gq[: n + 1] += (n + 1) * gn * R
        Hq[: n + 1] += (n + 1) * hn * R
        Gd[: n + 1] += gn * Rd
        Hd[: n + 1] += hn * Rd
        Q2, Q1 = Q1, Q0
        D2, D1 = D1, D0
        Q1[n + 1 :] = 0.0
        D1[n + 1 :] = 0.0
    br = np.einsum("mp,mp->p", Gq, A) + np.einsum("mp,mp->p", Hq, B)
    X = np.einsum("mp,mp->p", mm * Gp, E) + np.einsum("mp,mp->p", mm * Hp, F)
    bphi = np.einsum("mp,mp->p", mm * Gp, F) - np.einsum("mp,mp->p", mm * Hp, E)
    Y = np.einsum("mp,mp->p", Gd, A) + np.einsum("mp,mp->p", Hd, B)
    btheta = s * Y - u * X
    return br, btheta, bphi



# ---------------------------------------------------------------------------
# compiled kernel (numba): the same recursion, one point at a time, run on
# blocks of 256 points in parallel threads. Numerically the same algorithm as
# _synth_block (the numpy reference, used by the tests to check this one).

if _nb is not None:

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _point(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, E, F, rho):
        a_r = R_E_KM / r
        rho[0] = a_r * a_r * a_r
        for n in range(1, nmax + 1):
            rho[n] = rho[n - 1] * a_r  # rho[n - 1] = (a/r)^(n + 2)
        E[0] = 0.0
        F[0] = 0.0
        E[1] = cp
        F[1] = sp
        A1 = s * cp
        B1 = s * sp
        for m in range(2, nmax + 1):
            E[m] = E[m - 1] * A1 - F[m - 1] * B1
            F[m] = E[m - 1] * B1 + F[m - 1] * A1
        br = 0.0
        X = 0.0
        Y = 0.0
        bp = 0.0
        for m in range(nmax + 1):
            if m == 0:
                Am = 1.0
                Bm = 0.0
            else:
                Am = s * E[m]
                Bm = s * F[m]
            # column recursion in n for this order m, starting from Q_m^m
            # (for m = 0 from Q_0^0 = 1; there is no n = 0 term)
            q1 = diag[m]
            d1 = 0.0
            q2 = 0.0
            d2 = 0.0
            sgq = 0.0
            shq = 0.0
            sg = 0.0
            sh = 0.0
            sgd = 0.0
            shd = 0.0
            if m > 0:
                rq = rho[m - 1] * q1
                sg = g[m, m] * rq
                sh = h[m, m] * rq
                sgq = (m + 1) * sg
                shq = (m + 1) * sh
            for n in range(m + 1, nmax + 1):
                an = a_c[n, m]
                bn = b_c[n, m]
                q = an * u * q1 - bn * q2
                d = an * (q1 + u * d1) - bn * d2
                q2 = q1
                d2 = d1
                q1 = q
                d1 = d
                rq = rho[n - 1] * q
                rd = rho[n - 1] * d
                gnm = g[n, m]
                hnm = h[n, m]
                sg += gnm * rq
                sh += hnm * rq
                sgq += (n + 1) * gnm * rq
                shq += (n + 1) * hnm * rq
                sgd += gnm * rd
                shd += hnm * rd
            br += sgq * Am + shq * Bm
            Y += sgd * Am + shd * Bm
            if m > 0:
                X += m * (sg * E[m] + sh * F[m])
                bp += m * (sg * F[m] - sh * E[m])
        return br, s * Y - u * X, bp

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _rows_spherical(lo, hi, r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out):
        E = np.empty(nmax + 1)
        F = np.empty(nmax + 1)
        rho = np.empty(nmax + 1)
        for i in range(lo, hi):
            b0, b1, b2 = _point(r[i], u[i], s[i], cp[i], sp[i], g, h, nmax,
                                a_c, b_c, diag, E, F, rho)
            out[i, 0] = b0
            out[i, 1] = b1
            out[i, 2] = b2

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _geo_point(x, y, z, g, h, nmax, a_c, b_c, diag, E, F, rho):
        rho2 = x * x + y * y
        r = np.sqrt(rho2 + z * z)
        rh = np.sqrt(rho2)
        u = z / r
        s = rh / r
        if rh > 0.0:
            cp = x / rh
            sp = y / rh
        else:  # on the rotation axis: use the meridian phi = 0
            cp = 1.0
            sp = 0.0
        br, bt, bp = _point(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, E, F, rho)
        bh = br * s + bt * u
        return bh * cp - bp * sp, bh * sp + bp * cp, br * u - bt * s

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _rows_geo(lo, hi, xyz, g, h, nmax, a_c, b_c, diag, out):
        E = np.empty(nmax + 1)
        F = np.empty(nmax + 1)
        rho = np.empty(nmax + 1)
        for i in range(lo, hi):
            bx, by, bz = _geo_point(xyz[i, 0], xyz[i, 1], xyz[i, 2], g, h, nmax,
                                    a_c, b_c, diag, E, F, rho)
            out[i, 0] = bx
            out[i, 1] = by
            out[i, 2] = bz

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _rows_geo_t(lo, hi, xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
        # per-point times: coefficients G[k] + dt * GD[k], interpolated point by point
        E = np.empty(nmax + 1)
        F = np.empty(nmax + 1)
        rho = np.empty(nmax + 1)
        g = np.zeros((nmax + 1, nmax + 1))
        h = np.zeros((nmax + 1, nmax + 1))
        for i in range(lo, hi):
            kk = k[i]
            d = dt[i]
            for n in range(1, nmax + 1):
                for m in range(n + 1):
                    g[n, m] = G[kk, n, m] + d * GD[kk, n, m]
                    h[n, m] = H[kk, n, m] + d * HD[kk, n, m]
            bx, by, bz = _geo_point(xyz[i, 0], xyz[i, 1], xyz[i, 2], g, h, nmax,
                                    a_c, b_c, diag, E, F, rho)
            out[i, 0] = bx
            out[i, 1] = by
            out[i, 2] = bz

    # drivers: threaded over blocks of _BLOCK points, and single-threaded (used for
    # small inputs and in forked child processes, where GNU OpenMP is not safe)

    @_nb.njit(cache=True, error_model="numpy", parallel=True)
    def _par_spherical(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out):
        npt = r.shape[0]
        for blk in _nb.prange((npt + _BLOCK - 1) // _BLOCK):
            lo = blk * _BLOCK
            _rows_spherical(lo, min(npt, lo + _BLOCK), r, u, s, cp, sp, g, h, nmax,
                            a_c, b_c, diag, out)

    @_nb.njit(cache=True, error_model="numpy")
    def _ser_spherical(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out):
        _rows_spherical(0, r.shape[0], r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out)

    @_nb.njit(cache=True, error_model="numpy", parallel=True)
    def _par_geo(xyz, g, h, nmax, a_c, b_c, diag, out):
        npt = xyz.shape[0]
        for blk in _nb.prange((npt + _BLOCK - 1) // _BLOCK):
            lo = blk * _BLOCK
            _rows_geo(lo, min(npt, lo + _BLOCK), xyz, g, h, nmax, a_c, b_c, diag, out)

    @_nb.njit(cache=True, error_model="numpy")
    def _ser_geo(xyz, g, h, nmax, a_c, b_c, diag, out):
        _rows_geo(0, xyz.shape[0], xyz, g, h, nmax, a_c, b_c, diag, out)

    @_nb.njit(cache=True, error_model="numpy", parallel=True)
    def _par_geo_t(xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
        npt = xyz.shape[0]
        for blk in _nb.prange((npt + _BLOCK - 1) // _BLOCK):
            lo = blk * _BLOCK
            _rows_geo_t(lo, min(npt, lo + _BLOCK), xyz, k, dt, G, H, GD, HD, nmax,
                        a_c, b_c, diag, out)

    @_nb.njit(cache=True, error_model="numpy")
    def _ser_geo_t(xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
        _rows_geo_t(0, xyz.shape[0], xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out)

    def _nb_spherical(r, *args):
        (_par_spherical if _threads_ok(r.shape[0]) else _ser_spherical)(r, *args)

    def _nb_geo(xyz, *args):
        (_par_geo if _threads_ok(xyz.shape[0]) else _ser_geo)(xyz, *args)

    def _nb_geo_t(xyz, *args):
        (_par_geo_t if _threads_ok(xyz.shape[0]) else _ser_geo_t)(xyz, *args)

else:  # pragma: no cover - numba is a declared dependency
    _nb_spherical = _nb_geo = _nb_geo_t = None


def synth_spherical(r_km, colat_deg, lon_deg, g, h, *, backend=None):
    """Field in geocentric spherical components for one set of coefficients.

    Low-level: no checks of radius or time. Flat or any-shaped arrays that
    broadcast together.

    Parameters
    ----------
    r_km, colat_deg, lon_deg : array_like
        Geocentric radius (km), colatitude and east longitude (deg).
    g, h : ndarray, shape (N+1, N+1)
        Gauss coefficients in nT (e.g. from :func:`igrf_coefficients`).
    backend : {None, "numba", "numpy"}
        Engine; None uses :data:`DEFAULT_BACKEND`. Both give the same values
        to rounding.

    Returns
    -------
    Br, Btheta, Bphi : ndarray
        Radial (outward), southward and eastward components in nT.
    """
    r, th, ph = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float)
    )
    shape = r.shape
    thr = np.radians(th.ravel())
    phr = np.radians(ph.ravel())
    u = np.cos(thr)
    s = np.sin(thr)
    cp = np.cos(phr)
    sp = np.sin(phr)
    out = _run_blocks(
        r.ravel(), u, s, cp, sp, np.asarray(g, float), np.asarray(h, float), backend
    )
    return tuple(o.reshape(shape) for o in out)


def _run_blocks(r, u, s, cp, sp, g, h, backend=None):
    nmax = _effective_degree(g, h)
    n = r.shape[0]
    if _use_numba(backend):
        a_c, b_c, diag = _recursion_constants(nmax)
        out = np.empty((n, 3))
        _nb_spherical(
            np.ascontiguousarray(r), np.ascontiguousarray(u), np.ascontiguousarray(s),
            np.ascontiguousarray(cp), np.ascontiguousarray(sp),
            np.ascontiguousarray(g), np.ascontiguousarray(h), nmax, a_c, b_c, diag, out,
        )
        return [out[:, 0], out[:, 1], out[:, 2]]
    out = [np.empty(n), np.empty(n), np.empty(n)]
    for i in range(0, n, _CHUNK):
        j = min(i + _CHUNK, n)
        res = _synth_block(r[i:j], u[i:j], s[i:j], cp[i:j], sp[i:j], g, h, nmax)
        for o, v in zip(out, res):
            o[i:j] = v
    return out


def _threads_ok(npt):
    """Whether to use the threaded kernel: big inputs, and not in a forked child process."""
    return npt >= _MIN_THREADED and os.getpid() == _IMPORT_PID


def _use_numba(backend):
    if backend is None:
        backend = DEFAULT_BACKEND
    if backend not in ("numba", "numpy"):
        raise FieldModelError(f"argument 'backend' must be 'numba' or 'numpy', got {backend!r}")
    if backend == "numba" and _nb_geo is None:
        raise FieldModelError("backend 'numba' requested but numba is not installed")
    return backend == "numba"


def _effective_degree(g, h):
    nz = np.nonzero(np.any(g != 0, axis=1) | np.any(h != 0, axis=1))[0]
    return max(int(nz.max()) if nz.size else 1, 1)


def _geo_angles(x, y, z):
    """Spherical factors of Cartesian GEO points (no division by zero, NaN kept)."""
    rho2 = x * x + y * y
    r = np.sqrt(rho2 + z * z)
    rho = np.sqrt(rho2)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = z / r
        s = rho / r
        on_axis = rho == 0.0
        cp = np.where(on_axis, 1.0, x / np.where(on_axis, 1.0, rho))
        sp = np.where(on_axis, 0.0, y / np.where(on_axis, 1.0, rho))
    return r, u, s, cp, sp


def synth_geo(xyz_km, g, h, *, backend=None, nmax=None):
    r"""Cartesian GEO field vector for one set of coefficients (fast entry point).

    Low-level: no checks of radius or time, no broadcasting of time. This is
    what :meth:`beltkit.field.IGRF.field_geo` and field-line tracing call.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    g, h : ndarray, shape (N+1, N+1)
        Gauss coefficients in nT of one epoch.
    backend : {None, "numba", "numpy"}
        Engine; None uses :data:`DEFAULT_BACKEND`.
    nmax : int, optional
        Highest degree to sum (default: the highest non-zero one of ``g``,
        ``h``); passing it saves a scan of the coefficients per call.

    Returns
    -------
    ndarray, shape (..., 3)
        :math:`(B_x, B_y, B_z)` in GEO, nT.

    Notes
    -----
    The spherical components from the recursion in the module notes are
    rotated to Cartesian with :math:`B_x = (B_r s + B_\theta u)\cos\phi -
    B_\phi \sin\phi`, :math:`B_y = (B_r s + B_\theta u)\sin\phi + B_\phi
    \cos\phi`, :math:`B_z = B_r u - B_\theta s`. On the rotation axis the
    meridian :math:`\phi = 0` is used; the horizontal vector does not depend
    on that choice.
    """
    xyz = np.asarray(xyz_km, dtype=float)
    shape = xyz.shape
    flat = np.ascontiguousarray(xyz.reshape(-1, 3))
    g = np.asarray(g, float)
    h = np.asarray(h, float)
    if _use_numba(backend):
        nmax = _effective_degree(g, h) if nmax is None else int(nmax)
        a_c, b_c, diag = _recursion_constants(nmax)
        out = np.empty(flat.shape)
        _nb_geo(flat, np.ascontiguousarray(g), np.ascontiguousarray(h), nmax, a_c, b_c, diag, out)
        return out.reshape(shape)
    r, u, s, cp, sp = _geo_angles(flat[:, 0], flat[:, 1], flat[:, 2])
    br, bt, bp = _run_blocks(r, u, s, cp, sp, g, h, "numpy")
    return _to_cartesian(br, bt, bp, u, s, cp, sp).reshape(shape)


def _to_cartesian(br, bt, bp, u, s, cp, sp):
    bh = br * s + bt * u
    out = np.empty((br.shape[0], 3))
    out[:, 0] = bh * cp - bp * sp
    out[:, 1] = bh * sp + bp * cp
    out[:, 2] = br * u - bt * s
    return out


def _grouped(time, lead_shape, max_degree, allow_extrapolation, evaluate):
    """Evaluate a linear-in-coefficients synthesis with per-point times.

    On each table interval the coefficients are ``c_k + dt * cdot_k``, so the
    field is ``B(c_k) + dt * B(cdot_k)``; points are grouped by interval.
    ``evaluate(idx, g, h)`` returns the field of the points ``idx`` (flat).
    """
    table = igrf_table()
    t = np.broadcast_to(np.asarray(decimal_year(time), dtype=float), lead_shape).ravel()
    k, dt = _interval(t, table, allow_extrapolation, "time")
    gdot, hdot = _rates(table)
    results = None
    finite = np.isfinite(t)
    for kk in np.unique(k[finite]):
        idx = np.nonzero((k == kk) & finite)[0]
        g0, h0 = table.g[kk].copy(), table.h[kk].copy()
        _truncate(g0, h0, max_degree)
        d = dt[idx]
        if np.all(d == d[0]):
            gk, hk = g0 + d[0] * gdot[kk], h0 + d[0] * hdot[kk]
            _truncate(gk, hk, max_degree)
            vals = evaluate(idx, gk, hk)
        else:
            g1, h1 = gdot[kk].copy(), hdot[kk].copy()
            _truncate(g1, h1, max_degree)
            v0 = evaluate(idx, g0, h0)
            v1 = evaluate(idx, g1, h1)
            vals = tuple(a + _expand(d, a) * b for a, b in zip(v0, v1))
        if results is None:
            results = tuple(np.full((t.size,) + v.shape[1:], np.nan) for v in vals)
        for res, v in zip(results, vals):
            res[idx] = v
    if results is None:  # every time NaN
        return None
    return results


def _expand(d, a):
    return d.reshape(d.shape + (1,) * (a.ndim - 1))


@array_api(
    ("nT", "nT", "nT"),
    long_name=("radial magnetic field", "southward magnetic field", "eastward magnetic field"),
    name=("b_r", "b_theta", "b_phi"),
)
def igrf_field_spherical(r_km, colat_deg, lon_deg, time, *, max_degree=13,
                         allow_extrapolation=False, backend=None):
    r"""IGRF-14 field vector in geocentric spherical components.

    Parameters
    ----------
    r_km : array_like
        Geocentric radius in km (IGRF reference radius 6371.2 km).
    colat_deg : array_like
        Geocentric colatitude in degrees, 0-180 (the poles are exact).
    lon_deg : array_like
        East longitude in degrees.
    time : datetime64, datetime, str, float or array_like
        UTC instants or decimal years, broadcast elementwise against the
        points (one time per point, not an outer product).
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0 (see :func:`igrf_coefficients`).
    backend : {None, "numba", "numpy"}
        Engine; None uses :data:`DEFAULT_BACKEND`.

    Returns
    -------
    Br, Btheta, Bphi : ndarray or xarray.DataArray
        Radial (outward), southward and eastward components in nT, shape of
        the broadcast inputs (floats for scalar input; DataArrays with
        ``units`` for DataArray input). NaN inputs give NaN.

    Raises
    ------
    FieldModelError
        For times outside 1900.0-2030.0 (unless allowed), colatitudes outside
        0-180 deg, or points more than 10 km below the WGS-84 ellipsoid (the
        rule of :func:`beltkit.field.models.check_positions`).

    Notes
    -----
    Spherical-harmonic synthesis of :math:`\mathbf B = -\nabla V` (module
    notes; IAGA IGRF-14) with Schmidt semi-normalised Legendre functions by
    recursion. Points with several times are grouped by table interval and
    use :math:`\mathbf B(g_k) + (t - T_k)\,\mathbf B(\dot g_k)`, exact
    because the field is linear in the coefficients.

    Examples
    --------
    >>> br, bt, bp = igrf_field_spherical(6371.2, 90.0, 0.0, "2020-01-01")
    >>> round(float(bt))  # northward field on the equator is -Btheta
    -27637
    """
    r, th, ph, t = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float),
        _time_array(time),
    )
    shape = r.shape
    thr = np.radians(th.ravel())
    phr = np.radians(ph.ravel())
    u, s, cp, sp = np.cos(thr), np.sin(thr), np.cos(phr), np.sin(phr)
    rr = r.ravel()
    _check_spherical(rr, th.ravel(), u, s)

    def evaluate(idx, g, h):
        return tuple(_run_blocks(rr[idx], u[idx], s[idx], cp[idx], sp[idx], g, h, backend))

    res = _grouped(t, shape, max_degree, allow_extrapolation, evaluate)
    if res is None:
        return tuple(np.full(shape, np.nan) for _ in range(3))
    return tuple(v.reshape(shape) for v in res)


def _check_spherical(r, colat, u, s):
    """Refuse colatitudes outside 0-180 deg and points inside the Earth (NaN ignored)."""
    bad = (colat < 0.0) | (colat > 180.0)
    if np.any(bad):
        raise FieldModelError(
            f"argument 'colat_deg' must lie in [0, 180] degrees (geocentric colatitude); "
            f"got {colat[bad][0]:g}"
        )
    inside = inside_earth((r * s) ** 2, r * u)
    if np.any(inside):
        raise FieldModelError(
            f"argument 'r_km': {int(inside.sum())} point(s) inside the Earth (e.g. "
            f"{r[inside][0]:g} km, more than {INSIDE_EARTH_TOLERANCE_KM:g} km below the "
            f"WGS-84 surface); give the geocentric radius in km"
        )


def _time_array(time):
    """Time as an array that broadcasts (decimal years kept, datetimes as datetime64)."""
    t = decimal_year(time)
    return np.asarray(t, dtype=float)


def igrf_field_cartesian(xyz_km, time, *, max_degree=13, allow_extrapolation=False,
                         backend=None):
    r"""IGRF-14 field vector in GEO Cartesian components, with per-point times.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    time : datetime64, datetime, str, float or array_like
        Broadcast against ``xyz_km[..., 0]``.
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0.
    backend : {None, "numba", "numpy"}
        Engine. The numba engine interpolates the coefficients point by
        point; the numpy one groups points by table interval and combines
        :math:`\mathbf B(g_k) + (t - T_k)\,\mathbf B(\dot g_k)`.

    Returns
    -------
    ndarray, shape (..., 3)
        GEO :math:`(B_x, B_y, B_z)` in nT; NaN positions or times give NaN.

    Raises
    ------
    FieldModelError
        For times outside 1900.0-2030.0 (unless allowed).
    """
    xyz = np.asarray(xyz_km, dtype=float)
    t = _time_array(time)
    lead = np.broadcast_shapes(xyz.shape[:-1], t.shape)
    flat = np.ascontiguousarray(np.broadcast_to(xyz, lead + (3,)).reshape(-1, 3))
    if _use_numba(backend):
        table = igrf_table()
        tt = np.ascontiguousarray(np.broadcast_to(t, lead).ravel())
        k, dt = _interval(tt, table, allow_extrapolation, "time")
        nmax = int(max_degree)
        if not 1 <= nmax <= table.nmax:
            raise FieldModelError(f"argument 'max_degree' must be 1-13, got {max_degree!r}")
        gdot, hdot = _rates(table)
        a_c, b_c, diag = _recursion_constants(nmax)
        sl = slice(0, nmax + 1)
        out = np.empty(flat.shape)
        _nb_geo_t(
            flat, np.ascontiguousarray(k, dtype=np.int64), np.ascontiguousarray(dt),
            np.ascontiguousarray(table.g[:-1, sl, sl]), np.ascontiguousarray(table.h[:-1, sl, sl]),
            np.ascontiguousarray(gdot[:, sl, sl]), np.ascontiguousarray(hdot[:, sl, sl]),
            nmax, a_c, b_c, diag, out,
        )
        return out.reshape(lead + (3,))

    def evaluate(idx, g, h):
        return (synth_geo(flat[idx], g, h, backend="numpy"),)

    res = _grouped(t, lead, max_degree, allow_extrapolation, evaluate)
    if res is None:
        return np.full(lead + (3,), np.nan)
    return res[0].reshape(lead + (3,))
