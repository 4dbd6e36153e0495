"""A plain numpy reference of the IGRF synthesis, for the tests of the compiled engine.

Formerly beltkit's numpy engine; the package now has one engine (numba kernels
in ``beltkit/field/igrf_kernels.py``) and this module is what the tests check
it against. It is written independently of the package's kernels:

* the recursion constants are computed here, and the recursion runs in
  degree *n* over all orders at once on blocks of points (the kernel runs one
  point at a time, column by column in *n* for each order *m*): the Schmidt
  semi-normalised recursion of Langel (1987, sect. 4.3) and Winch et al.
  (2005), as written in the module notes of ``beltkit/field/igrf.py``;
* a time per point is handled through the linearity of the field in the
  coefficients: on each table interval the coefficients are
  ``g(T_k) + (t - T_k) * gdot_k``, so the field is
  ``B(g(T_k)) + (t - T_k) * B(gdot_k)``, with the slopes computed here from the
  table's columns (the kernel instead forms each point's coefficients).
"""

from __future__ import annotations

import math

import numpy as np

from beltkit.constants import R_E_KM
from beltkit.field.igrf_table import igrf_table
from beltkit.field.timeconv import decimal_year

CHUNK = 8192  # points per block (keeps the work arrays in cache)


def recursion_constants(nmax):
    """(2n-1)/sqrt(n^2-m^2), sqrt((n-1)^2-m^2)/sqrt(n^2-m^2), and the diagonal Q_m^m."""
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


def degree_in_use(g, h):
    nz = np.nonzero(np.any(g != 0, axis=1) | np.any(h != 0, axis=1))[0]
    return max(int(nz.max()) if nz.size else 1, 1)


def synth_block(r, u, s, cp, sp, g, h, nmax):
    """Br, Btheta, Bphi (nT) of one block of points and one coefficient set (N+1, N+1)."""
    a_c, b_c, diag = recursion_constants(nmax)
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


def _run_blocks(r, u, s, cp, sp, g, h):
    nmax = degree_in_use(g, h)
    n = r.shape[0]
    out = [np.empty(n), np.empty(n), np.empty(n)]
    for i in range(0, n, CHUNK):
        j = min(i + CHUNK, n)
        res = synth_block(r[i:j], u[i:j], s[i:j], cp[i:j], sp[i:j], g, h, nmax)
        for o, v in zip(out, res):
            o[i:j] = v
    return out


def synth_spherical(r_km, colat_deg, lon_deg, g, h):
    """Br, Btheta, Bphi (nT) for one coefficient set, any broadcastable shapes."""
    r, th, ph = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float)
    )
    thr = np.radians(th.ravel())
    phr = np.radians(ph.ravel())
    out = _run_blocks(r.ravel(), np.cos(thr), np.sin(thr), np.cos(phr), np.sin(phr),
                      np.asarray(g, float), np.asarray(h, float))
    return tuple(o.reshape(r.shape) for o in out)


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


def synth_geo(xyz_km, g, h):
    """GEO (Bx, By, Bz) in nT for one coefficient set; xyz_km shape (..., 3)."""
    xyz = np.asarray(xyz_km, dtype=float)
    flat = xyz.reshape(-1, 3)
    r, u, s, cp, sp = _geo_angles(flat[:, 0], flat[:, 1], flat[:, 2])
    br, bt, bp = _run_blocks(r, u, s, cp, sp, np.asarray(g, float), np.asarray(h, float))
    bh = br * s + bt * u
    out = np.empty((br.shape[0], 3))
    out[:, 0] = bh * cp - bp * sp
    out[:, 1] = bh * sp + bp * cp
    out[:, 2] = br * u - bt * s
    return out.reshape(xyz.shape)


def _grouped(t, max_degree, evaluate):
    """Field at per-point decimal years t (flat) through linearity, by table interval."""
    table = igrf_table()
    span = np.diff(table.epochs)[:, None, None]
    gdot = np.diff(table.g, axis=0) / span
    hdot = np.diff(table.h, axis=0) / span
    k = np.clip(np.searchsorted(table.epochs, np.where(np.isfinite(t), t, table.epochs[0]),
                                side="right") - 1, 0, len(table.epochs) - 2)
    d = t - table.epochs[k]
    keep = slice(max_degree + 1, None)
    results = None
    finite = np.isfinite(t)
    for kk in np.unique(k[finite]):
        idx = np.nonzero((k == kk) & finite)[0]
        g0, h0, g1, h1 = (a[kk].copy() for a in (table.g, table.h, gdot, hdot))
        for a in (g0, h0, g1, h1):
            a[keep] = 0.0
        v0 = evaluate(idx, g0, h0)
        v1 = evaluate(idx, g1, h1)
        vals = [a + d[idx].reshape((-1,) + (1,) * (a.ndim - 1)) * b for a, b in zip(v0, v1)]
        if results is None:
            results = [np.full((t.size,) + v.shape[1:], np.nan) for v in vals]
        for res, v in zip(results, vals):
            res[idx] = v
    return results


def field_cartesian(xyz_km, time, max_degree=13):
    """GEO field (nT) with a time per point (broadcast against xyz_km[..., 0])."""
    xyz = np.asarray(xyz_km, dtype=float)
    t = np.asarray(decimal_year(time), dtype=float)
    lead = np.broadcast_shapes(xyz.shape[:-1], t.shape)
    flat = np.broadcast_to(xyz, lead + (3,)).reshape(-1, 3)
    res = _grouped(np.broadcast_to(t, lead).ravel(), max_degree,
                   lambda idx, g, h: (synth_geo(flat[idx], g, h),))
    if res is None:
        return np.full(lead + (3,), np.nan)
    return res[0].reshape(lead + (3,))


def field_spherical(r_km, colat_deg, lon_deg, time, max_degree=13):
    """Br, Btheta, Bphi (nT) with a time per point (all arguments broadcast)."""
    r, th, ph, t = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float),
        np.asarray(decimal_year(time), dtype=float),
    )
    rr, tt, pp = r.ravel(), th.ravel(), ph.ravel()
    res = _grouped(t.ravel(), max_degree,
                   lambda idx, g, h: synth_spherical(rr[idx], tt[idx], pp[idx], g, h))
    if res is None:
        return tuple(np.full(r.shape, np.nan) for _ in range(3))
    return tuple(v.reshape(r.shape) for v in res)
