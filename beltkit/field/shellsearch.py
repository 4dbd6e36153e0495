r"""The drift shell's field lines and the magnetic flux they enclose (the pieces of L*).

Roederer's (1970) L* labels a drift shell by the magnetic flux :math:`\Phi`
through the polar cap bounded by its footprints (see
:mod:`beltkit.field.invariants`). This module holds the numerical pieces:

* :class:`ShellSearch`: a bracketed secant search, vectorised over many
  (sample, MLT) pairs, of the start radius of the shell's field line on a ray
  in the SM equatorial plane;
* :func:`shell_residual`: the residual of a candidate line, the relative
  difference of its integral invariant :math:`I(B_m)` from the sample's;
* :func:`contour_radius`: the first guess of the search, the point of each
  ray where :math:`|B|` equals a given field;
* :func:`cap_flux_footprints`: :math:`\Phi` from the footprints, on the
  footprint sphere;
* :func:`cap_flux_equator`: :math:`\Phi` from the start points of the
  shell's lines in the magnetic equatorial plane, with no footprint needed.

Flux through the cap from the equatorial plane
----------------------------------------------
The field lines from the shell's footprint curve (colatitude
:math:`\theta_f(\varphi)` on the sphere :math:`r_f`) to its start curve
:math:`r_s(\varphi)` in the equatorial plane :math:`z = 0` of the model's
dipole (MAG) frame form a surface that no flux crosses. With the band of the
sphere between :math:`\theta_f` and the equator and the annulus of the plane
between :math:`r_f` and :math:`r_s`, it closes a volume; :math:`\nabla\cdot
\mathbf B = 0` (Gauss) then gives the flux through the band as the flux
through the annulus, and

.. math::

    \Phi = \Phi_N - \int_0^{2\pi}\!d\varphi\int_{r_f}^{r_s(\varphi)} B_z\,r\,dr,
    \qquad
    \Phi_N = -\int_0^{2\pi}\!d\varphi\int_0^{\pi/2} B_r\,r_f^2\sin\theta\,d\theta

(:math:`\Phi_N`: the flux into the northern hemisphere of the sphere). It
holds for any divergence-free field, internal or not (T89's external field
is built from divergence-free modules, Tsyganenko 1989). In a centred dipole
:math:`\Phi_N = 2\pi B_0 R_E^3/r_f` and the annulus carries
:math:`2\pi B_0 R_E^3 (1/r_f - 1/(L R_E))`, so :math:`\Phi = 2\pi B_0 R_E^2/L`.
Quadrature: the radial integral in :math:`u = 1/r` (where :math:`B_z r^3`
of an internal field of degree :math:`n` is a polynomial of degree
:math:`n - 1`, integrated exactly by Gauss-Legendre), the trapezoidal rule in
the uniform start longitude (spectrally accurate for a smooth shell);
:math:`\Phi_N` by Gauss-Legendre in :math:`\cos\theta` and the trapezoidal
rule in :math:`\varphi` (exact for IGRF's degree 13).
"""

from __future__ import annotations

import numba as nb
import numpy as np

from ..constants import R_E_KM
from .trace_integral import FOOT_TOLERANCE, mirror_rows

__all__ = ["NODES_ANY", "NODES_INTERNAL", "ShellSearch", "cap_flux_equator",
           "cap_flux_footprints", "contour_radius", "integral_invariant_many", "shell_residual"]

# Gauss-Legendre nodes of the footprint-cap integral in colatitude
CAP_NODES = 32
# nodes of the equatorial-annulus integral (in 1/r) and of the hemisphere flux
# (annulus, colatitude, longitude) nodes: for any field, and for an internal field of
# degree <= 13 (B_z r^3 a polynomial of degree <= 12 in 1/r, B_r on the sphere of degree
# <= 13 in cos(theta) and in the longitude: these rules are exact for it)
NODES_ANY = (16, 16, 24)
NODES_INTERNAL = (8, 8, 16)


class ShellSearch:
    """Bracketed secant search of the shell's start radius, for many (sample, MLT) pairs.

    Parameters
    ----------
    ln_r0 : ndarray
        First points to evaluate (ln of the start radius in R_E).
    slope : ndarray
        Estimate of the residual's derivative in ln r (first step).
    """

    def __init__(self, ln_r0, slope):
        n = ln_r0.size
        self.x = ln_r0.copy()          # next ln r to evaluate
        self.slope = slope             # dipole estimate of dF/d ln r (first step)
        self.lo = np.full(n, -np.inf)  # bracket: F(lo) < 0 < F(hi)
        self.hi = np.full(n, np.inf)
        self.flo = np.full(n, np.nan)
        self.fhi = np.full(n, np.nan)
        self.xp = np.full(n, np.nan)   # previous evaluated point and residual
        self.fp = np.full(n, np.nan)
        self.side = np.zeros(n, dtype=np.int8)  # bracket end replaced last (-1 lo, +1 hi)

    def update(self, idx, f):
        """Record residuals `f` at the current points of pairs `idx`; propose the next ones.

        Returns the secant root through the two last evaluated points of
        each pair (NaN before a pair has two finite residuals).
        """
        x = self.x[idx]
        new_lo = (f < 0) & (x > self.lo[idx])
        new_hi = (f > 0) & (x < self.hi[idx])
        side = self.side[idx]
        # Illinois rule: the end kept while the other is replaced twice in a row has its
        # residual halved, so a false position never stalls at one end of the bracket
        self.fhi[idx] = np.where(new_lo & (side == -1), 0.5 * self.fhi[idx], self.fhi[idx])
        self.flo[idx] = np.where(new_hi & (side == 1), 0.5 * self.flo[idx], self.flo[idx])
        self.lo[idx] = np.where(new_lo, x, self.lo[idx])
        self.flo[idx] = np.where(new_lo, f, self.flo[idx])
        self.hi[idx] = np.where(new_hi, x, self.hi[idx])
        self.fhi[idx] = np.where(new_hi, f, self.fhi[idx])
        self.side[idx] = np.where(new_lo, -1, np.where(new_hi, 1, side))
        lo, hi, flo, fhi = self.lo[idx], self.hi[idx], self.flo[idx], self.fhi[idx]
        xp, fp = self.xp[idx], self.fp[idx]
        finite = np.isfinite(f)
        with np.errstate(divide="ignore", invalid="ignore"):
            # before a bracket: secant with the previous point, else the dipole slope
            sec = x - f * (x - xp) / (f - fp)
            newton = x - f / self.slope[idx]
            step = np.where(np.isfinite(sec) & np.isfinite(fp) & finite, sec, newton)
            # inside a known bracket, when that step leaves it: regula falsi with the
            # Illinois rule (never stalls where the residual is steep on one side, as on
            # dayside lines of a stretched external field)
            both = np.isfinite(lo) & np.isfinite(hi)
            falsi = lo - flo * (hi - lo) / (fhi - flo)
            falsi = np.where(np.isfinite(falsi), falsi, 0.5 * (lo + hi))
            outside = ~((step > lo) & (step < hi))
            step = np.where(both & outside, falsi, step)
            # no finite residual (open line): halve the way to the bracket or step inwards
            step = np.where(finite, step, np.where(np.isfinite(lo), 0.5 * (x + lo), x - 0.3))
            # limit a single step to a factor 1.5 in r
            step = np.clip(step, x - 0.4, x + 0.4)
        self.xp[idx] = np.where(finite, x, xp)
        self.fp[idx] = np.where(finite, f, fp)
        self.x[idx] = step
        return np.where(np.isfinite(sec) & np.isfinite(fp) & finite, sec, np.nan)


def shell_residual(lines, b_m, i0, use_i, compiled=False):
    """Residual of a candidate line (increasing with r), and the status of each line.

    Parameters
    ----------
    lines : FieldLines
        The candidate lines (:func:`beltkit.field.trace.trace_lines`).
    b_m, i0 : ndarray
        The sample's mirror field (nT) and integral invariant (km), per line.
    use_i : ndarray of bool
        Match I (else, for I0 = 0, the line's minimum field).
    compiled : bool
        Integrate I with :func:`integral_invariant_many` (same values).

    Returns
    -------
    f : ndarray
        2 (I - I0) / (I + I0) where I is defined (bounded: I grows steeply with r on
        lines whose field is flat along them), continued by -2 - ln(B_min / B_m) where
        the line's minimum exceeds B_m (line inside the shell); ln(B_m / B_min) for
        I0 = 0; +inf for open lines (outside the shell, or beyond the model).
    below : ndarray of bool
        B_m exceeds a footpoint field of the line (the mirror point lies below the stop
        altitude) while the line's minimum is below B_m.
    """
    closed = lines.closed
    b_min = lines.b_min
    with np.errstate(invalid="ignore", divide="ignore"):
        weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
        i_km = integral_invariant_many(lines, b_m) if compiled else lines.integral_invariant(b_m)
        f_i = np.where(np.isfinite(i_km), 2.0 * (i_km - i0) / (i_km + i0),
                       np.where(b_min >= b_m, -2.0 - np.log(b_min / b_m), np.nan))
        f_b = np.log(b_m / b_min)
        f = np.where(use_i, f_i, f_b)
        below = closed & (b_m > weak) & (b_min < b_m) & use_i & ~np.isfinite(i_km)
    f = np.where(closed, f, np.inf)
    f = np.where(below, np.nan, f)
    return f, below


def _field(model, pts, t_block, per):
    """|B| vectors at points (..., 3) GEO km; `per` repeats each sample's time."""
    tt = np.repeat(np.asarray(t_block), per) if np.ndim(t_block) else t_block
    return np.asarray(model.field_geo(pts.reshape(-1, 3), tt), dtype=float).reshape(pts.shape)


def cap_flux_footprints(model, t_block, foot, phi_start, r_f, mag):
    r"""Flux (nT km^2) through the northern cap bounded by the footprints, per sample.

    Parameters
    ----------
    model : FieldModel
    t_block : datetime64 or ndarray (ns,)
    foot : ndarray (ns, M, 3)
        Northern footprints of the shell's lines, GEO km.
    phi_start : ndarray (ns, M)
        MAG longitudes of the (uniform) start rays.
    r_f : float
        Radius of the footprint sphere, km.
    mag : ndarray (ns, 3, 3)
        GEO -> MAG rotations.

    Notes
    -----
    Gauss-Legendre (32 nodes) of :math:`B_r` in colatitude from the pole to
    each footprint; trapezoidal rule in the start longitude with the Jacobian
    :math:`d\varphi_f/d\varphi_s` from the Fourier series of the periodic
    :math:`\varphi_f - \varphi_s`.
    """
    ns, m, _ = foot.shape
    fm = np.einsum("sij,smj->smi", mag, foot)
    rr = np.linalg.norm(fm, axis=-1)
    theta_f = np.arccos(np.clip(fm[..., 2] / rr, -1.0, 1.0))
    phi_f = np.arctan2(fm[..., 1], fm[..., 0])
    d = np.angle(np.exp(1j * (phi_f - phi_start)))  # periodic part, in (-pi, pi]
    d = np.unwrap(d, axis=1)
    k = np.fft.fftfreq(m, 1.0 / m)
    spec = np.fft.fft(d, axis=1) * (1j * k)[None, :]
    if m % 2 == 0:
        spec[:, m // 2] = 0.0
    jac = 1.0 + np.fft.ifft(spec, axis=1).real  # d phi_f / d phi_s
    xg, wg = np.polynomial.legendre.leggauss(CAP_NODES)
    th = 0.5 * theta_f[..., None] * (xg + 1.0)           # (ns, M, G)
    w = 0.5 * theta_f[..., None] * wg
    st = np.sin(th)
    pts_mag = np.stack([r_f * st * np.cos(phi_f)[..., None], r_f * st * np.sin(phi_f)[..., None],
                        r_f * np.cos(th)], axis=-1)      # (ns, M, G, 3)
    pts_geo = np.einsum("sji,smgj->smgi", mag, pts_mag)
    b = _field(model, pts_geo, t_block, m * CAP_NODES)
    b_r = np.einsum("smgi,smgi->smg", b, pts_geo) / r_f
    inner = (b_r * st * w).sum(axis=-1) * r_f * r_f     # (ns, M)
    return -(2.0 * np.pi / m) * (jac * inner).sum(axis=1)


def cap_flux_equator(model, t_block, r_start, phi_start, r_f, mag, nodes=NODES_ANY):
    r"""Flux (nT km^2) through the northern cap of a drift shell, from its equatorial start curve.

    .. math::

        \Phi = \Phi_N - \int_0^{2\pi}\!d\varphi\int_{r_f}^{r_s(\varphi)} B_z\,r\,dr

    (module notes; Gauss's theorem for the volume between the footprint
    sphere, the shell and the magnetic equatorial plane).

    Parameters
    ----------
    model : FieldModel
    t_block : datetime64 or ndarray (ns,)
    r_start : ndarray (ns, M)
        Radii (km) of the shell's lines in the MAG equatorial plane at the
        uniform longitudes `phi_start` (ns, M).
    phi_start : ndarray (ns, M)
    r_f : float
        Radius of the footprint sphere, km.
    mag : ndarray (ns, 3, 3)
        GEO -> MAG rotations.
    nodes : tuple of int
        Gauss-Legendre nodes of the annulus (in 1/r) and of the hemisphere
        (in cos theta), trapezoidal nodes of the hemisphere in longitude
        (:data:`NODES_INTERNAL` is exact for IGRF).
    """
    n_ann, n_th, n_ph = (int(v) for v in nodes)
    ns, m = r_start.shape
    # annulus, in u = 1/r from 1/r_s to 1/r_f
    xg, wg = np.polynomial.legendre.leggauss(n_ann)
    u0, u1 = 1.0 / r_start, 1.0 / r_f
    u = 0.5 * (u1 - u0)[..., None] * (xg + 1.0) + u0[..., None]     # (ns, M, G)
    w = 0.5 * (u1 - u0)[..., None] * wg
    rr = 1.0 / u
    pts_mag = np.stack([rr * np.cos(phi_start)[..., None], rr * np.sin(phi_start)[..., None],
                        np.zeros_like(rr)], axis=-1)
    pts_geo = np.einsum("sji,smgj->smgi", mag, pts_mag)
    b = _field(model, pts_geo, t_block, m * n_ann)
    b_z = np.einsum("smgi,si->smg", b, mag[:, 2, :])
    annulus = (2.0 * np.pi / m) * (b_z * rr ** 3 * w).sum(axis=(1, 2))
    # northern hemisphere of the sphere: Gauss-Legendre in cos(theta), trapezoid in phi
    xc, wc = np.polynomial.legendre.leggauss(n_th)
    ct = 0.5 * (xc + 1.0)
    st = np.sqrt(1.0 - ct * ct)
    ph = 2.0 * np.pi * np.arange(n_ph) / n_ph
    unit = np.stack([st[:, None] * np.cos(ph)[None, :], st[:, None] * np.sin(ph)[None, :],
                     np.broadcast_to(ct[:, None], (ct.size, ph.size))], axis=-1)  # (T, P, 3)
    unit_geo = np.einsum("sji,tpj->stpi", mag, unit)
    b = _field(model, r_f * unit_geo, t_block, ct.size * ph.size)
    b_r = np.einsum("stpi,stpi->stp", b, unit_geo)
    hemi = -(0.5 * wc[None, :, None] * b_r).sum(axis=(1, 2)) * (2.0 * np.pi / ph.size) * r_f ** 2
    return hemi - annulus


def contour_radius(model, ray, tb, b_target, r_start, r_stop, steps=4):
    """Radius (km) on each unit ray (GEO) where |B| is `b_target` (Newton in ln r, slope -3).

    Field evaluations only (no tracing); exact in a centred dipole, the first
    guess of the shell search elsewhere.
    """
    ln_r = np.log(np.where(np.isfinite(r_start), r_start, 3.0 * R_E_KM))
    ln_floor = np.log(1.001 * r_stop)
    for _ in range(steps):
        b = np.linalg.norm(np.asarray(model.field_geo(ray * np.exp(ln_r)[:, None], tb),
                                      dtype=float), axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            step = np.log(b / b_target) / 3.0
        ln_r = np.maximum(ln_r + np.where(np.isfinite(step), np.clip(step, -0.5, 0.5), 0.0),
                          ln_floor)
    return np.exp(ln_r)


# ---------------------------------------------------------------- compiled I on many lines


@nb.njit(cache=True)
def _cubic_at(s, y, j0, q):
    """Lagrange cubic through (s, y)[j0:j0+4] at q (NaN weights -> 0, as numpy.nan_to_num)."""
    out = 0.0
    for i in range(4):
        li = 1.0
        for j in range(4):
            if j != i:
                li = li * (q - s[j0 + j]) / (s[j0 + i] - s[j0 + j])
        if np.isnan(li):
            li = 0.0
        elif np.isinf(li):
            li = 1.7976931348623157e308 if li > 0 else -1.7976931348623157e308
        out += li * y[j0 + i]
    return out


@nb.njit(cache=True)
def _mirror_root(s, y, ns, k, lo, hi):
    j0 = min(max(k - 1, 0), max(ns - 4, 0))
    a, b = lo, hi
    fa = _cubic_at(s, y, j0, a)
    fb = _cubic_at(s, y, j0, b)
    for _ in range(40):
        m = a - fa * (b - a) / (fb - fa)
        if not (np.isfinite(m) and m > a and m < b):
            m = 0.5 * (a + b)
        fm = _cubic_at(s, y, j0, m)
        if np.sign(fm) == np.sign(fa):
            a, fa = m, fm
        else:
            b, fb = m, fm
        if abs(b - a) <= 1e-10 * (abs(a) + 1.0) or abs(fm) < 1e-15:
            break
    root = a - fa * (b - a) / (fb - fa)
    if not np.isfinite(root):
        return a
    return min(max(root, min(a, b)), max(a, b))


@nb.njit(cache=True, parallel=True)
def _invariant_rows(s, lb, ns_all, s_min_all, log_bm_all, rows, theta, w, out):
    for ii in nb.prange(rows.size):
        r = rows[ii]
        ns = ns_all[r]
        sr = s[r]
        y = lb[r, :ns] - log_bm_all[r]
        for end in (0, ns - 1):
            if y[end] < 0 and y[end] > -FOOT_TOLERANCE:
                y[end] = 0.0
        smin = s_min_all[r]
        kn = -1
        ks = ns
        for j in range(ns):
            if y[j] >= 0:
                if sr[j] < smin:
                    kn = j
                elif sr[j] > smin and ks == ns:
                    ks = j
        if kn < 0 or ks >= ns:
            continue
        kn = min(kn, s.shape[1] - 2)
        ks = max(ks, 1)
        s1 = _mirror_root(sr, y, ns, kn, sr[kn], min(sr[kn + 1], smin))
        s2 = _mirror_root(sr, y, ns, ks - 1, max(sr[ks - 1], smin), sr[ks])
        c = 0.5 * (s1 + s2)
        d = 0.5 * (s2 - s1)
        total = 0.0
        for g in range(theta.size):
            q = c + d * np.sin(theta[g])
            k = np.searchsorted(sr[:ns], q, side="right") - 1
            k = min(max(k, 0), max(ns - 2, 0))
            j0 = min(max(k - 1, 0), max(ns - 4, 0))
            yq = _cubic_at(sr, y, j0, q)
            f = -np.expm1(yq)
            total += np.sqrt(f if f > 0 else 0.0) * np.cos(theta[g]) * w[g]
        out[r] = total * d


def integral_invariant_many(lines, b_m_nt):
    r"""Integral invariant :math:`I` (km), one mirror field per line, in a compiled kernel.

    The same computation as :meth:`beltkit.field.fieldlines.FieldLines.integral_invariant`
    (mirror points as roots of the local cubic of :math:`\ln B(s)` through the
    samples; :math:`s = c + d\sin\theta` and 64-point Gauss-Legendre in
    :math:`\theta`), each line on its own thread, each root iterated until it
    converges: identical values to about 1e-10 relative, several times faster.

    Parameters
    ----------
    lines : FieldLines
    b_m_nt : ndarray (N,)
        Mirror field per line, nT.

    Returns
    -------
    ndarray (N,)
        :math:`I` in km (0 at :math:`B_m = B_{min}`; NaN for open lines,
        :math:`B_m < B_{min}` and mirror points below the stop altitude).
    """
    bm = np.asarray(b_m_nt, dtype=float).reshape(-1)
    n = bm.size
    result = np.full(n, np.nan)
    log_bm, eq, work = mirror_rows(lines, bm)
    result[eq] = 0.0
    rows = np.flatnonzero(work)
    if rows.size:
        out = np.full(n, np.nan)
        _invariant_rows(np.ascontiguousarray(lines.s), np.ascontiguousarray(lines.log_b),
                        lines.n_samples.astype(np.int64), lines.s_min, log_bm,
                        rows.astype(np.int64), _THETA, _W, out)
        result[rows] = out[rows]
    return result


_XG, _WG = np.polynomial.legendre.leggauss(64)
_THETA = 0.5 * np.pi * _XG
_W = 0.5 * np.pi * _WG
