r"""Compiled (numba) kernels of the IGRF spherical-harmonic synthesis.

The Schmidt semi-normalised Legendre recursion of :mod:`beltkit.field.igrf`
(see its module notes for the formulas and sources), one point at a time:
for each order *m* a column recursion in degree *n* from :math:`Q_m^m`,
with the factors of :func:`recursion_constants`. Inputs are trusted (no
checks): the public functions in :mod:`beltkit.field.igrf` check and convert.

Four entry points, each threaded over blocks of 256 points for large inputs
and single-threaded for small ones or in a forked child process (where GNU
OpenMP threads are not safe):

* :func:`spherical_field`, :func:`geo_field`: one coefficient set, spherical
  (:math:`\cos\theta, \sin\theta, \cos\phi, \sin\phi` given) or GEO
  Cartesian points;
* :func:`spherical_field_timed`, :func:`geo_field_timed`: a time per point.
  They receive the linear pieces of
  :meth:`beltkit.field.igrf_table.TimeInterpolation.pieces` (interval index,
  offset, interval start coefficients and slopes) and form each point's
  coefficients ``g_start[k] + offset * g_rate[k]``, the expression that
  :meth:`~beltkit.field.igrf_table.TimeInterpolation.coefficients` evaluates in
  numpy; the time rule itself lives in :mod:`beltkit.field.igrf_table`.

Outputs are written into a caller-supplied ``out`` array of shape (N, 3):
:math:`(B_r, B_\theta, B_\phi)` or :math:`(B_x, B_y, B_z)` in nT.
"""

from __future__ import annotations

import functools
import math
import os

import numba as nb
import numpy as np

from ..constants import R_E_KM

__all__ = [
    "geo_field",
    "geo_field_timed",
    "recursion_constants",
    "spherical_field",
    "spherical_field_timed",
]

_BLOCK = 256  # points per thread work item
_MIN_THREADED = 4096  # below this many points the single-threaded kernel is used
_IMPORT_PID = os.getpid()


@functools.cache
def recursion_constants(nmax: int):
    r"""Factors of the Schmidt semi-normalised Legendre recursion up to degree ``nmax``.

    Parameters
    ----------
    nmax : int
        Highest degree.

    Returns
    -------
    a, b : ndarray, shape (nmax+1, nmax+1)
        :math:`(2n-1)/\sqrt{n^2-m^2}` and
        :math:`\sqrt{(n-1)^2-m^2}/\sqrt{n^2-m^2}` (zero where ``m >= n``).
    diag : ndarray, shape (nmax+1,)
        :math:`Q_m^m`: 1, 1, then :math:`Q_{m-1}^{m-1}\sqrt{(2m-1)/(2m)}`.
    """
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
    for arr in (a, b, diag):
        arr.setflags(write=False)
    return a, b, diag


# ---------------------------------------------------------------------------
# one point


@nb.njit(cache=True, error_model="numpy", inline="always")
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


@nb.njit(cache=True, error_model="numpy", inline="always")
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


@nb.njit(cache=True, error_model="numpy", inline="always")
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


@nb.njit(cache=True, error_model="numpy", inline="always")
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


@nb.njit(cache=True, error_model="numpy", inline="always")
def _coefficients_of_point(kk, d, G, H, GD, HD, nmax, g, h):
    # the point's coefficients from its linear piece: G[k] + offset * GD[k]
    for n in range(1, nmax + 1):
        for m in range(n + 1):
            g[n, m] = G[kk, n, m] + d * GD[kk, n, m]
            h[n, m] = H[kk, n, m] + d * HD[kk, n, m]


@nb.njit(cache=True, error_model="numpy", inline="always")
def _rows_spherical_t(lo, hi, r, u, s, cp, sp, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag,
                      out):
    E = np.empty(nmax + 1)
    F = np.empty(nmax + 1)
    rho = np.empty(nmax + 1)
    g = np.zeros((nmax + 1, nmax + 1))
    h = np.zeros((nmax + 1, nmax + 1))
    for i in range(lo, hi):
        _coefficients_of_point(k[i], dt[i], G, H, GD, HD, nmax, g, h)
        b0, b1, b2 = _point(r[i], u[i], s[i], cp[i], sp[i], g, h, nmax,
                            a_c, b_c, diag, E, F, rho)
        out[i, 0] = b0
        out[i, 1] = b1
        out[i, 2] = b2


@nb.njit(cache=True, error_model="numpy", inline="always")
def _rows_geo_t(lo, hi, xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
    E = np.empty(nmax + 1)
    F = np.empty(nmax + 1)
    rho = np.empty(nmax + 1)
    g = np.zeros((nmax + 1, nmax + 1))
    h = np.zeros((nmax + 1, nmax + 1))
    for i in range(lo, hi):
        _coefficients_of_point(k[i], dt[i], G, H, GD, HD, nmax, g, h)
        bx, by, bz = _geo_point(xyz[i, 0], xyz[i, 1], xyz[i, 2], g, h, nmax,
                                a_c, b_c, diag, E, F, rho)
        out[i, 0] = bx
        out[i, 1] = by
        out[i, 2] = bz


# ---------------------------------------------------------------------------
# drivers: threaded over blocks of _BLOCK points, and single-threaded


@nb.njit(cache=True, error_model="numpy", parallel=True)
def _par_spherical(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out):
    npt = r.shape[0]
    for blk in nb.prange((npt + _BLOCK - 1) // _BLOCK):
        lo = blk * _BLOCK
        _rows_spherical(lo, min(npt, lo + _BLOCK), r, u, s, cp, sp, g, h, nmax,
                        a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy")
def _ser_spherical(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out):
    _rows_spherical(0, r.shape[0], r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy", parallel=True)
def _par_geo(xyz, g, h, nmax, a_c, b_c, diag, out):
    npt = xyz.shape[0]
    for blk in nb.prange((npt + _BLOCK - 1) // _BLOCK):
        lo = blk * _BLOCK
        _rows_geo(lo, min(npt, lo + _BLOCK), xyz, g, h, nmax, a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy")
def _ser_geo(xyz, g, h, nmax, a_c, b_c, diag, out):
    _rows_geo(0, xyz.shape[0], xyz, g, h, nmax, a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy", parallel=True)
def _par_spherical_t(r, u, s, cp, sp, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
    npt = r.shape[0]
    for blk in nb.prange((npt + _BLOCK - 1) // _BLOCK):
        lo = blk * _BLOCK
        _rows_spherical_t(lo, min(npt, lo + _BLOCK), r, u, s, cp, sp, k, dt, G, H, GD, HD,
                          nmax, a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy")
def _ser_spherical_t(r, u, s, cp, sp, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
    _rows_spherical_t(0, r.shape[0], r, u, s, cp, sp, k, dt, G, H, GD, HD, nmax,
                      a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy", parallel=True)
def _par_geo_t(xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
    npt = xyz.shape[0]
    for blk in nb.prange((npt + _BLOCK - 1) // _BLOCK):
        lo = blk * _BLOCK
        _rows_geo_t(lo, min(npt, lo + _BLOCK), xyz, k, dt, G, H, GD, HD, nmax,
                    a_c, b_c, diag, out)


@nb.njit(cache=True, error_model="numpy")
def _ser_geo_t(xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out):
    _rows_geo_t(0, xyz.shape[0], xyz, k, dt, G, H, GD, HD, nmax, a_c, b_c, diag, out)


def _threaded(npt):
    """Whether to use the threaded kernel: big inputs, and not in a forked child process."""
    return npt >= _MIN_THREADED and os.getpid() == _IMPORT_PID


# ---------------------------------------------------------------------------
# entry points


def spherical_field(r, u, s, cp, sp, g, h, nmax, out):
    r"""Spherical field components of one coefficient set, written into ``out``.

    Parameters
    ----------
    r : ndarray, shape (N,)
        Geocentric radius in km.
    u, s : ndarray, shape (N,)
        :math:`\cos\theta`, :math:`\sin\theta` of the colatitude.
    cp, sp : ndarray, shape (N,)
        :math:`\cos\phi`, :math:`\sin\phi` of the east longitude.
    g, h : ndarray, shape (M+1, M+1), M >= nmax
        Gauss coefficients in nT (C-contiguous float64).
    nmax : int
        Highest degree summed.
    out : ndarray, shape (N, 3)
        Receives :math:`(B_r, B_\theta, B_\phi)` in nT.
    """
    a_c, b_c, diag = recursion_constants(nmax)
    kernel = _par_spherical if _threaded(r.shape[0]) else _ser_spherical
    kernel(r, u, s, cp, sp, g, h, nmax, a_c, b_c, diag, out)


def geo_field(xyz, g, h, nmax, out):
    r"""GEO Cartesian field of one coefficient set, written into ``out``.

    Parameters
    ----------
    xyz : ndarray, shape (N, 3)
        GEO positions in km (C-contiguous float64).
    g, h : ndarray, shape (M+1, M+1), M >= nmax
        Gauss coefficients in nT (C-contiguous float64).
    nmax : int
        Highest degree summed.
    out : ndarray, shape (N, 3)
        Receives :math:`(B_x, B_y, B_z)` in nT. On the rotation axis the
        meridian :math:`\phi = 0` is used.
    """
    a_c, b_c, diag = recursion_constants(nmax)
    kernel = _par_geo if _threaded(xyz.shape[0]) else _ser_geo
    kernel(xyz, g, h, nmax, a_c, b_c, diag, out)


def spherical_field_timed(r, u, s, cp, sp, index, offset, g_start, h_start, g_rate, h_rate,
                          nmax, out):
    r"""Spherical field components with a time per point, written into ``out``.

    Parameters
    ----------
    r, u, s, cp, sp : ndarray, shape (N,)
        As :func:`spherical_field`.
    index, offset, g_start, h_start, g_rate, h_rate : ndarray
        The linear pieces of
        :meth:`beltkit.field.igrf_table.TimeInterpolation.pieces`: interval
        index (int64, (N,)) and offset (years, (N,)) of every point, and the
        interval start coefficients and slopes, shape (K-1, nmax+1, nmax+1).
    nmax : int
        Highest degree summed.
    out : ndarray, shape (N, 3)
        Receives :math:`(B_r, B_\theta, B_\phi)` in nT.
    """
    a_c, b_c, diag = recursion_constants(nmax)
    kernel = _par_spherical_t if _threaded(r.shape[0]) else _ser_spherical_t
    kernel(r, u, s, cp, sp, index, offset, g_start, h_start, g_rate, h_rate, nmax,
           a_c, b_c, diag, out)


def geo_field_timed(xyz, index, offset, g_start, h_start, g_rate, h_rate, nmax, out):
    r"""GEO Cartesian field with a time per point, written into ``out``.

    Parameters
    ----------
    xyz : ndarray, shape (N, 3)
        GEO positions in km (C-contiguous float64).
    index, offset, g_start, h_start, g_rate, h_rate : ndarray
        As :func:`spherical_field_timed`.
    nmax : int
        Highest degree summed.
    out : ndarray, shape (N, 3)
        Receives :math:`(B_x, B_y, B_z)` in nT.
    """
    a_c, b_c, diag = recursion_constants(nmax)
    kernel = _par_geo_t if _threaded(xyz.shape[0]) else _ser_geo_t
    kernel(xyz, index, offset, g_start, h_start, g_rate, h_rate, nmax, a_c, b_c, diag, out)
