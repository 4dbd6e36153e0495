r"""The second adiabatic invariant K and Roederer's L* in any field model.

Second invariant
----------------
For a particle of local pitch angle :math:`\alpha` where the field is
:math:`B`, the mirror field is :math:`B_m = B/\sin^2\alpha` (first invariant
conserved) and the trade's modified second invariant is

.. math::

    K = \int_{s_1}^{s_2} \sqrt{B_m - B(s)}\;ds = \sqrt{B_m}\; I, \qquad
    I = \int_{s_1}^{s_2} \sqrt{1 - B(s)/B_m}\;ds

between the mirror points, in G^(1/2) R_E (Roederer 1970, ch. 3). The field
line through each sample is traced once (:func:`beltkit.field.trace.trace_lines`)
and :math:`I` is integrated on it for every requested pitch angle
(:meth:`beltkit.field.fieldlines.FieldLines.integral_invariant`, the same
machinery as McIlwain's L in :mod:`beltkit.field.lshell`).

Roederer's L*
-------------
The drift shell of a particle is the set of field lines on which it keeps
its :math:`B_m` and :math:`K` (equivalently :math:`I`) while it drifts round
the Earth. Roederer's (1970) L* labels it by the magnetic flux :math:`\Phi`
it encloses:

.. math::

    L^* = \frac{2\pi k_0}{\Phi\, R_E}, \qquad
    \Phi = \int_0^{2\pi}\! d\varphi \int_0^{\theta_f(\varphi)}
        B_r(r_f, \theta, \varphi)\; r_f^2 \sin\theta\; d\theta

with :math:`k_0 = B_0 R_E^3` the dipole moment of the model's epoch
(:meth:`FieldModel.dipole_b0_nt`) and :math:`\Phi` the flux through the
northern polar cap bounded by the shell's footprints
:math:`\theta_f(\varphi)` on the sphere :math:`r_f = R_E + h` (the stop
altitude :math:`h` of the tracing; colatitude and longitude in the MAG frame
of the model's dipole axis). For an internal field the flux through any
surface bounded by the footprint curve is the same (the field is
divergence-free and current-free above the sphere), so the cap on the sphere
is exact. In a centred dipole :math:`\Phi = 2\pi B_0 R_E^2/L` and
:math:`L^* = L`.

Method (vectorised over samples)
--------------------------------
1. The field line through every sample is traced; :math:`B_m` and
   :math:`I_0` follow.
2. At each of ``n_mlt`` magnetic local times (uniform in SM longitude), the
   shell's field line is searched along the ray in the SM equatorial plane:
   the start radius :math:`r` is adjusted until the line's integral
   invariant at :math:`B_m` equals :math:`I_0` (for :math:`I_0 = 0`: until
   its minimum field equals :math:`B_m`). All samples x MLTs are traced
   together in each iteration: a first quasi-Newton step in :math:`\ln r`
   with the dipole's slope :math:`d\ln I/d\ln L = 1 + 3J/Y`
   (:func:`beltkit.dipole.y_integral_kernel`), then safeguarded secant steps
   inside a bracket.
3. The footprints' colatitudes :math:`\theta_f(\varphi_f)` give :math:`\Phi`:
   the inner integral by Gauss-Legendre quadrature of the model's
   :math:`B_r` on :math:`[0, \theta_f]`, the outer one by the trapezoidal
   rule in the (uniform) start longitude :math:`\varphi_s` with the Jacobian
   :math:`d\varphi_f/d\varphi_s` from the Fourier series of the periodic
   :math:`\varphi_f - \varphi_s` (spectrally accurate for a smooth shell).

The fast path (``method="fast"``, the default) computes the same L* with
less work, in three ways (:mod:`beltkit.field.shellsearch`,
:mod:`beltkit.field.shelltable`):

* every line is traced only to just beyond its two mirror points (``b_stop_nt``
  of :func:`~beltkit.field.trace.trace_lines`; :math:`I` is unchanged), and
  :math:`I` is integrated by a compiled kernel (same values);
* :math:`\Phi` comes from the shell's start curve in the magnetic equatorial
  plane instead of its footprints (Gauss's theorem:
  :func:`~beltkit.field.shellsearch.cap_flux_equator`), so no line needs a
  footprint; a secant root through two residuals whose product is below 1e-5
  is taken without a confirming trace;
* in IGRF (lines fixed in the MAG frame but for the secular variation) the
  search starts from a table of equatorial field lines of the epoch
  (:class:`~beltkit.field.shelltable.ShellTable`, 48 MAG longitudes x 64
  radii, built once per 30 days of epoch and kept in memory; for blocks of at
  least 5,000 sample x MLT pairs or when one is in memory), which gives each
  shell line to ~1e-5 in :math:`\ln r`: one traced line and a Newton step with
  the table's slope (taken when that line's residual is below 3e-4) replace
  the search; without a table (T89, small calls) every third MLT is searched
  first and the others start from their neighbours' shells (correction to
  the contour guess and residual slope interpolated in MLT).

The exact path (``method="exact"``) traces every candidate to both footpoints,
accepts only traced lines and integrates the flux over the footprint cap. The
two agree to ~1e-6 in L* (measured: 3e-7 on IGRF and IGRF + T89 orbit
samples; the tests require 1e-4).

Samples whose line is open, whose mirror point lies below the stop altitude,
or whose drift shell is open, dips below the stop altitude at some MLT or is
not found get NaN and a reason code (:data:`LSTAR_REASONS`).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._wrap import as_float_array
from ..constants import GAUSS_PER_NT, R_E_KM
from ..dipole import y_integral_kernel
from ..errors import PhysicsError
from ..units import K_UNITS
from .coords import frame_matrix
from .lshell import kp_level_variable, model_attrs
from .points import broadcast_time, positions
from .shellsearch import (
    NODES_ANY,
    NODES_INTERNAL,
    ShellSearch,
    cap_flux_equator,
    cap_flux_footprints,
    contour_radius,
    integral_invariant_many,
    shell_residual,
)
from .shelltable import shell_table
from .trace import blocks, time_block, trace_lines

__all__ = ["LSTAR_REASONS", "lstar", "second_invariant_k"]

#: Reason codes of :func:`lstar` (CF ``flag_values``; 0 means L* is defined).
LSTAR_REASONS = {
    0: "defined",
    1: "sample_line_open_or_invalid",
    2: "sample_mirror_point_below_stop_altitude",
    3: "drift_shell_open",
    4: "drift_shell_crosses_stop_altitude",
    5: "drift_shell_not_found",
}
_K_UNITS = K_UNITS
# relative tolerance on I (and on B_min for I = 0) of the shell search: L* averages the
# footprints and depends weakly on each line's I, so 1e-5 moved L* of 100 IGRF orbit
# samples by <= 3e-7 relative against 1e-6, with a tenth fewer traces (1e-4 would save a
# quarter, but the shell's start points then carry K only to ~1e-4)
_SHELL_TOL = 1e-5
# residual beyond which a pair counts as not found
_SHELL_ACCEPT = 2e-5
# fast path: a secant root is taken untraced when the last residual is below _SECANT_MAX
# and the product of the last two below _SECANT_PRODUCT (its error in ln r is about
# |f'' / (2 f'^3)| |f1 f2|, with f' ~ 1-4 and f'' of order f' on these lines)
_SECANT_MAX = 1e-3
_SECANT_PRODUCT = 1e-5
# fast path in an internal field: a table guess whose traced residual is below this takes
# the Newton step with the table's slope without a confirming trace
_TABLE_NEWTON_MAX = 3e-4
# (sample, MLT) pairs of a block from which a table is built when none is in memory
_TABLE_MIN_PAIRS = 5000


def _positions(xyz_km):
    """Return (values (N, 3), leading shape, dims, coords) of GEO positions."""
    x, lead, dims, coords = positions(xyz_km)
    return x.reshape(-1, 3), lead, dims, coords


def _pitch(alpha_local_deg, name="alpha_local_deg"):
    a = as_float_array(alpha_local_deg.values if isinstance(alpha_local_deg, xr.DataArray)
                       else alpha_local_deg, name)
    with np.errstate(invalid="ignore"):
        bad = (a <= 0) | (a > 180)
    if np.any(bad):
        raise PhysicsError(f"argument {name!r} must lie in (0, 180] degrees (local pitch "
                           f"angle; 0 has no mirror point); got {a[bad].ravel()[0]:g}")
    return np.where(a > 90.0, 180.0 - a, a)


def _k_from(b_m_nt, i_km):
    """K in G^(1/2) R_E from B_m (nT) and I (km)."""
    return np.sqrt(b_m_nt * GAUSS_PER_NT) * (i_km / R_E_KM)


def second_invariant_k(model, xyz_km, time, alpha_local_deg, *, altitude_km=100.0,
                       **trace_options):
    r"""Second adiabatic invariant K along the field line through each position.

    .. math::

        K = \int_{s_1}^{s_2}\sqrt{B_m - B(s)}\;ds = \sqrt{B_m}\,I,
        \qquad B_m = \frac{B_\mathrm{local}}{\sin^2\alpha}

    Parameters
    ----------
    model : FieldModel
        Any field model (:class:`~beltkit.field.CenteredDipole`,
        :class:`~beltkit.field.IGRF`, :class:`~beltkit.field.T89`, ...).
    xyz_km : array_like or DataArray, shape (..., 3)
        Positions, GEO Cartesian km.
    time : numpy.datetime64 or array_like
        Time(s), broadcast against the leading dimensions.
    alpha_local_deg : float or 1-D array_like
        Local pitch angle(s) in degrees, (0, 180] (folded about 90), shared by
        all positions: one trace per position serves all of them.
    altitude_km : float, keyword-only
        Stop altitude of the tracing, in km above the sphere of radius
        R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the
        ellipsoid; a mirror point below it gives NaN.
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines` (``rtol``, ...).

    Returns
    -------
    numpy.ndarray or DataArray
        :math:`K` in G^(1/2) R_E, shape ``leading`` (+ ``(M,)`` for M pitch
        angles; dimension ``alpha_local`` for DataArray input). NaN for open
        lines and mirror points below the stop altitude.

    Notes
    -----
    Roederer (1970), *Dynamics of Geomagnetically Trapped Radiation*, ch. 3.
    :math:`I` is integrated on the traced line's samples of :math:`\ln B`
    (:func:`beltkit.field.trace.integral_invariant`).
    """
    x, lead, dims, coords = _positions(xyz_km)
    t = broadcast_time(time, lead)
    a = _pitch(alpha_local_deg)
    if a.ndim > 1:
        raise PhysicsError("argument 'alpha_local_deg' must be a scalar or a 1-D set of "
                           "pitch angles shared by all positions")
    s2 = np.sin(np.radians(np.atleast_1d(a))) ** 2
    n = x.shape[0]
    out = np.full((n, s2.size), np.nan)
    for sl in blocks(n):
        lines = trace_lines(model, x[sl], time_block(t, sl), altitude_km, arg_name="xyz_km",
                            **trace_options)
        b_m = lines.b_start[:, None] / s2[None, :]
        out[sl] = _k_from(b_m, lines.integral_invariant(b_m))
    shape = lead + ((s2.size,) if a.ndim == 1 else ())
    out = out.reshape(shape)
    if dims is not None:
        d = tuple(dims) + (("alpha_local",) if a.ndim == 1 else ())
        c = dict(coords)
        if a.ndim == 1:
            c["alpha_local"] = xr.Variable("alpha_local", np.atleast_1d(
                np.asarray(alpha_local_deg, dtype=float)), {"units": "degree",
                                                            "long_name": "local pitch angle"})
        return xr.DataArray(out, dims=d, coords=c, name="K",
                            attrs={"units": _K_UNITS, "long_name": "second adiabatic invariant K"})
    return out if shape else float(out)


# ---------------------------------------------------------------- L*


def _guide_from_neighbours(search, ln_r0, start, best_f, slope_seen, todo, m):
    """Start the pairs `todo` from their MLT neighbours' shell lines (staged fast path).

    The searched MLTs (every third) give d = ln r_shell - ln r_contour and the
    residual's slope; each other MLT gets both by periodic four-point Lagrange
    interpolation in MLT. Returns the pairs so guided (the rest keep the
    contour guess and the dipole slope).
    """
    ns = ln_r0.size // m
    nodes = m // 3
    found = best_f < _SHELL_ACCEPT
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.log(np.linalg.norm(start, axis=1) / R_E_KM) - ln_r0
    d = np.where(found, d, np.nan).reshape(ns, m)[:, ::3]
    sl = np.where(found, slope_seen, np.nan).reshape(ns, m)[:, ::3]
    j = np.arange(m)
    q, r = j // 3, j % 3
    d_g = np.zeros((ns, m))
    s_g = np.zeros((ns, m))
    t = r / 3.0
    for k, off in enumerate((-1, 0, 1, 2)):
        w = np.ones(m)
        for kk, off2 in enumerate((-1, 0, 1, 2)):
            if kk != k:
                w = w * (t - off2) / (off - off2)
        col = (q + off) % nodes
        d_g += w * d[:, col]
        s_g += w * sl[:, col]
    d_g, s_g = d_g.reshape(-1), s_g.reshape(-1)
    ok = todo & np.isfinite(d_g) & np.isfinite(s_g) & (s_g > 0)
    search.x[ok] = ln_r0[ok] + d_g[ok]
    search.slope[ok] = s_g[ok]
    return ok


def _lstar_block(model, x, t, a_deg, n_mlt, altitude_km, max_iterations, opts, search_rtol,
                 fast):
    """L* and companions for one block of samples (all of its MLT lines traced together).

    `fast`: lines traced to just beyond their mirror points, secant roots accepted
    without a confirming trace, flux from the equatorial start curve (see :func:`lstar`).
    """
    ns = x.shape[0]
    m = n_mlt
    r_stop = R_E_KM + altitude_km
    out = dict(lstar=np.full(ns, np.nan), reason=np.zeros(ns, dtype=np.int8),
               k=np.full(ns, np.nan), b_m=np.full(ns, np.nan), i=np.full(ns, np.nan),
               shell=np.full((ns, m, 3), np.nan), b0=np.full(ns, np.nan))
    if fast:
        # the sample's mirror field, from |B| at the start points (one field call)
        b_here = np.linalg.norm(np.asarray(model.field_geo(x, t), dtype=float), axis=-1)
        stop = dict(b_stop_nt=b_here / np.sin(np.radians(a_deg)) ** 2)
    else:
        stop = {}
    lines = trace_lines(model, x, t, altitude_km, arg_name="xyz_km", **opts, **stop)
    b_m = lines.b_start / np.sin(np.radians(a_deg)) ** 2
    i0 = integral_invariant_many(lines, b_m) if fast else lines.integral_invariant(b_m)
    out["b_m"] = b_m
    out["i"] = i0
    out["k"] = _k_from(b_m, i0)
    b0 = np.broadcast_to(np.asarray(model.dipole_b0_nt(t), dtype=float), (ns,))
    out["b0"] = b0.copy()
    ok = np.isfinite(i0)
    with np.errstate(invalid="ignore"):
        weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
        sample_below = lines.closed & ~ok & (b_m > weak)
    out["reason"][~ok] = 1
    out["reason"][sample_below] = 2
    if not np.any(ok):
        return out
    # pairs (sample, MLT) of the samples with a defined I
    si = np.repeat(np.flatnonzero(ok), m)
    mj = np.tile(np.arange(m), int(ok.sum()))
    use_i = i0[si] > 1e-9 * lines.length[si]
    phi_sm = np.radians((24.0 * mj / m - 12.0) * 15.0)
    ray_sm = np.stack([np.cos(phi_sm), np.sin(phi_sm), np.zeros_like(phi_sm)], axis=-1)
    tb = t[si] if np.ndim(t) else t
    sm = frame_matrix("SM", tb, model=model)
    ray = np.einsum("...ji,...j->...i", sm, ray_sm) if np.ndim(t) else ray_sm @ sm
    # first guess: on each ray, the point whose field equals the sample line's minimum
    # field (the equatorial contour of B_min; exact in a centred dipole), found by
    # Newton steps in ln r with field evaluations only (no tracing)
    r0 = contour_radius(model, ray, tb, lines.b_min[si], np.linalg.norm(lines.xyz_min[si],
                                                                         axis=1), r_stop)
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.sqrt(np.clip(lines.b_min[si] / b_m[si], 0.0, 1.0))
        yy, jj = y_integral_kernel(y, with_j=True)
        slope = np.where(use_i, 1.0 + 3.0 * jj / yy, 3.0)
    slope = np.where(np.isfinite(slope) & (slope > 0), slope, 3.0)
    ln_r0 = np.log(r0 / R_E_KM)
    guided = np.zeros(si.size, dtype=bool)
    table = None
    if fast and getattr(model, "name", "") == "igrf":
        # an internal field: the table of equatorial lines of its epoch gives the shell's
        # line on each ray to ~1e-5 in ln r, and the slope for one Newton step
        # (built for a block of many pairs, where it saves more traces than it costs)
        table = shell_table(model, tb if np.ndim(tb) == 0 else tb[tb.size // 2], altitude_km,
                            rtol=max(float(search_rtol), float(opts.get("rtol", 0.0))),
                            build=si.size >= _TABLE_MIN_PAIRS)
    if fast and table is not None:
        mag = frame_matrix("MAG", tb, model=model)
        ray_mag = np.einsum("...ij,...j->...i", mag, ray)
        ln_t, slope_t = table.lookup(np.arctan2(ray_mag[:, 1], ray_mag[:, 0]), b_m[si], i0[si])
        guided = np.isfinite(ln_t) & use_i
        ln_r0 = np.where(guided, ln_t, ln_r0)
        slope = np.where(guided, slope_t, slope)
    search = ShellSearch(ln_r0, slope)
    npair = si.size
    best_f = np.full(npair, np.inf)
    foot = np.full((npair, 3), np.nan)
    start = np.full((npair, 3), np.nan)
    below_any = np.zeros(npair, dtype=bool)
    ln_floor = np.log(1.001 * r_stop / R_E_KM)
    # the candidate lines are traced at the search tolerance (never tighter than the
    # sample's own line): fewer Runge-Kutta steps per candidate line
    s_opts = dict(opts, rtol=max(float(search_rtol), float(opts.get("rtol", 0.0))))
    # fast path without a table: every third MLT is searched first; the others start from
    # their neighbours' shell, interpolated in MLT as a correction to the contour guess
    staged = fast and table is None and m % 3 == 0
    first = (mj % 3 == 0) if staged else np.ones(npair, dtype=bool)
    slope_seen = np.full(npair, np.nan)
    for stage in ((first, ~first) if staged else (first,)):
        dead = np.bincount(np.arange(npair) // m, weights=below_any, minlength=npair // m)
        active = stage & ~np.repeat(dead > 0, m)
        if stage is not first:
            guided = _guide_from_neighbours(search, ln_r0, start, best_f, slope_seen, stage, m)
            guided &= active
        for it in range(max_iterations):
            idx = np.flatnonzero(active)
            if idx.size == 0:
                break
            search.x[idx] = np.maximum(search.x[idx], ln_floor)
            x_now = search.x[idx].copy()
            xyz = ray[idx] * (np.exp(x_now) * R_E_KM)[:, None]
            ti = tb[idx] if np.ndim(tb) else tb
            if fast:
                s_opts["b_stop_nt"] = b_m[si[idx]]
            cand = trace_lines(model, xyz, ti, altitude_km, arg_name="xyz_km", **s_opts)
            f, below = shell_residual(cand, b_m[si[idx]], i0[si[idx]], use_i[idx],
                                      compiled=fast)
            below_any[idx] |= below
            better = np.abs(f) < best_f[idx]
            sel = idx[better]
            best_f[sel] = np.abs(f[better])
            foot[sel] = cand.foot_north[better]
            start[sel] = xyz[better]
            conv = (np.abs(f) < _SHELL_TOL) | below
            fp, xp = search.fp[idx], search.xp[idx]
            with np.errstate(invalid="ignore", divide="ignore"):
                seen = (f - fp) / (x_now - xp)
            slope_seen[idx] = np.where(np.isfinite(seen) & (seen > 0), seen, slope_seen[idx])
            sec = search.update(idx, np.where(below, 0.0, f))
            if fast:
                # two residuals whose product is tiny: the secant root through them is
                # within ~|f fp| of the root (superlinear convergence); take it untraced
                with np.errstate(invalid="ignore"):
                    take = (~conv & np.isfinite(sec) & (np.abs(f) < _SECANT_MAX)
                            & (np.abs(f * fp) < _SECANT_PRODUCT))
                sel = idx[take]
                best_f[sel] = 0.0
                start[sel] = ray[sel] * (np.exp(sec[take]) * R_E_KM)[:, None]
                conv |= take
                if it == 0:
                    # a guided guess with a small residual: its Newton step (slope good
                    # to ~1e-2) is within ~1e-2 |f| / slope of the root; take it untraced
                    take = guided[idx] & ~conv & (np.abs(f) < _TABLE_NEWTON_MAX)
                    sel = idx[take]
                    best_f[sel] = 0.0
                    start[sel] = ray[sel] * (np.exp(search.x[sel]) * R_E_KM)[:, None]
                    conv |= take
            narrow = np.abs(search.hi[idx] - search.lo[idx]) < 1e-10
            active[idx[conv | narrow]] = False
            # a sample with one MLT below the stop altitude is undefined (reason 4) whatever
            # its other MLTs give: stop searching them (they are the slow tail of the search)
            if np.any(below):
                dead = np.zeros(si.size // m, dtype=bool)
                dead[idx[below] // m] = True
                active &= ~np.repeat(dead, m)
    found = best_f < _SHELL_ACCEPT
    # per sample: every MLT found, none below the stop altitude
    rows = np.flatnonzero(ok)
    pos = np.repeat(np.arange(rows.size), m)
    all_found = np.bincount(pos, weights=found, minlength=rows.size) == m
    any_below = np.bincount(pos, weights=below_any, minlength=rows.size) > 0
    # an unresolved pair whose bracket never closed from above saw only open lines
    open_side = ~found & ~np.isfinite(search.hi) & np.isfinite(search.lo)
    any_open = np.bincount(pos, weights=open_side, minlength=rows.size) > 0
    reason = np.where(any_below, 4, np.where(all_found, 0, np.where(any_open, 3, 5)))
    out["reason"][rows] = reason
    out["shell"][rows] = start.reshape(rows.size, m, 3)
    good = reason == 0
    if np.any(good):
        g = rows[good]
        gp = np.flatnonzero(np.repeat(good, m))
        tg = t[g] if np.ndim(t) else t
        mag = frame_matrix("MAG", tg, model=model)
        mag = np.broadcast_to(mag, (g.size, 3, 3))
        ray_mag = np.einsum("sij,smj->smi", mag, ray[gp].reshape(g.size, m, 3))
        phi_s = np.arctan2(ray_mag[..., 1], ray_mag[..., 0])
        if fast:
            r_s = np.linalg.norm(start[gp], axis=1).reshape(g.size, m)
            internal = getattr(model, "name", "") in ("igrf", "dipole")
            phi = cap_flux_equator(model, tg, r_s, phi_s, r_stop, mag,
                                   NODES_INTERNAL if internal else NODES_ANY)
        else:
            phi = cap_flux_footprints(model, tg, foot[gp].reshape(g.size, m, 3), phi_s, r_stop,
                                      mag)
        out["lstar"][g] = 2.0 * np.pi * b0[g] * R_E_KM * R_E_KM / phi
    return out


def lstar(model, xyz_km, time, alpha_local_deg=90.0, *, n_mlt=24, altitude_km=100.0,
          max_iterations=20, block_samples=None, search_rtol=1e-7, method="fast",
          **trace_options):
    r"""Roederer's L* of the drift shell through each sample, in any field model.

    .. math::

        L^* = \frac{2\pi k_0}{\Phi\,R_E}, \qquad
        \Phi = \int_0^{2\pi}\!d\varphi\int_0^{\theta_f(\varphi)}
        B_r\,r_f^2\sin\theta\,d\theta

    Parameters
    ----------
    model : FieldModel
        Any field model (dipole, IGRF, T89, ...): it must provide
        ``field_geo``, ``dipole_b0_nt`` and ``dipole_axis_geo``.
    xyz_km : array_like or DataArray, shape (..., 3)
        Sample positions, GEO Cartesian km.
    time : numpy.datetime64 or array_like
        Time(s), broadcast against the leading dimensions.
    alpha_local_deg : array_like, default 90
        Local pitch angle (deg, (0, 180], folded about 90), broadcast against
        the leading dimensions; with the local field it fixes :math:`B_m` and
        :math:`K` of the drift shell.
    n_mlt : int, keyword-only
        Magnetic local times at which the shell is traced (>= 24 recommended;
        uniform in SM longitude).
    altitude_km : float, keyword-only
        Stop altitude h in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid: the
        footprints lie on the sphere :math:`R_E + h`, and
        a shell whose mirror points dip below it anywhere is undefined.
    max_iterations : int, keyword-only
        Iterations of the shell search (each traces the still unresolved
        lines only; most converge in 5-8, dayside lines of a stretched
        external field can take 15).
    block_samples : int, keyword-only
        Samples per batch (default: ``BLOCK_LINES // n_mlt``, four times that
        on the fast path, whose lines stop at their mirror points), bounding
        memory.
    search_rtol : float, keyword-only
        Tracing tolerance of the candidate shell lines (the sample's own line
        keeps ``rtol``; the looser of the two is used). The default 1e-7
        moved L* by at most 1.2e-5 relative against tracing at 1e-8 (IGRF,
        50 samples of an elliptical orbit) for about 3/4 of the cost; 1e-6
        is not faster and lets tracing noise stall the search on stretched
        T89 lines (Kp 4, midnight, 6 R_E).
    method : {"fast", "exact"}, keyword-only
        ``"fast"`` (default): lines traced only past their mirror points,
        untraced secant (or, in IGRF, table-guided Newton) roots when the
        residuals show they are within ~1e-6 of the root, flux from the
        shell's equatorial start curve; ``"exact"``: every accepted line
        traced and converged, flux through the footprint cap. They agree to
        ~1e-6 in L* (module notes).
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines` (``rtol``,
        ``max_step_frac``, ``max_radius_re``, ``max_steps``).

    Returns
    -------
    xarray.Dataset
        Leading dimensions of `xyz_km` (``sample``, or ``sample_0``, ``sample_1``,
        ... for plain arrays):
        ``lstar`` (1), ``lstar_reason`` (flags, :data:`LSTAR_REASONS`),
        ``k`` (G0.5 R_E), ``b_mirror`` (nT), ``i_invariant`` (km),
        ``dipole_b0`` (nT; :math:`k_0 = B_0 R_E^3`) and ``drift_shell_xyz``
        (GEO km, ``mlt`` x ``xyz``: the start points of the shell's field
        lines in the SM equatorial plane; on the fast path a point may be an
        untraced secant or Newton root); for :class:`~beltkit.field.T89`
        also ``kp_level`` per sample. Attributes state :math:`k_0`, the
        footprint sphere, the number of MLTs and the model
        (``field_model``, ``field_model_description``; ``kp``, ``kp_level``
        for one fixed Kp).

    Notes
    -----
    Roederer (1970), *Dynamics of Geomagnetically Trapped Radiation*, ch. 3
    and 4. See the module notes for the search and the flux quadrature. In a
    centred dipole :math:`\Phi = 2\pi B_0 R_E^2/L` and :math:`L^* = L`.
    The whole computation is vectorised: all samples of a batch times all
    MLTs are traced at once in each search iteration.
    """
    from .trace import BLOCK_LINES

    x, lead, dims, coords = _positions(xyz_km)
    n = x.shape[0]
    t = broadcast_time(time, lead)
    a = _pitch(alpha_local_deg)
    try:
        a = np.broadcast_to(a, lead).reshape(-1)
    except ValueError as exc:
        raise PhysicsError(
            f"argument 'alpha_local_deg' of shape {a.shape} does not broadcast against the "
            f"positions' leading shape {lead}"
        ) from exc
    n_mlt = int(n_mlt)
    if n_mlt < 8:
        raise PhysicsError(f"argument 'n_mlt' must be at least 8 (24 or more recommended); "
                           f"got {n_mlt}")
    altitude_km = float(altitude_km)
    if method not in ("fast", "exact"):
        raise PhysicsError(f"argument 'method' must be 'fast' or 'exact'; got {method!r}")
    fast = method == "fast"
    # the fast path's lines stop at their mirror points (a tenth of the samples per line):
    # four times as many fit the same memory, and bigger calls run the field kernels threaded
    size = int(block_samples) if block_samples else max(1, (4 if fast else 1) * BLOCK_LINES
                                                          // n_mlt)
    res = dict(lstar=np.full(n, np.nan), reason=np.ones(n, dtype=np.int8),
               k=np.full(n, np.nan), b_m=np.full(n, np.nan), i=np.full(n, np.nan),
               shell=np.full((n, n_mlt, 3), np.nan), b0=np.full(n, np.nan))
    for sl in blocks(n, size):
        part = _lstar_block(model, x[sl], time_block(t, sl), a[sl], n_mlt, altitude_km,
                            int(max_iterations), trace_options, search_rtol, fast)
        for key, val in part.items():
            res[key][sl] = val
    if dims is not None:
        d = tuple(dims)
    else:
        d = ("sample",) if len(lead) == 1 else tuple(f"sample_{i}" for i in range(len(lead)))
    c = dict(coords) if coords else {}

    def var(v, units, long_name, extra=()):
        return xr.Variable(d + extra, v.reshape(lead + v.shape[1:]),
                           {"units": units, "long_name": long_name} if units else
                           {"long_name": long_name})

    ds = xr.Dataset({
        "lstar": var(res["lstar"], "1", "Roederer L*"),
        "lstar_reason": xr.Variable(d, res["reason"].reshape(lead), {
            "long_name": "why L* is undefined (0: defined)",
            "flag_values": np.array(sorted(LSTAR_REASONS), dtype=np.int8),
            "flag_meanings": " ".join(LSTAR_REASONS[k] for k in sorted(LSTAR_REASONS))}),
        "k": var(res["k"], _K_UNITS, "second adiabatic invariant K"),
        "b_mirror": var(res["b_m"], "nT", "mirror field magnitude"),
        "i_invariant": var(res["i"], "km", "integral invariant I"),
        "dipole_b0": var(res["b0"], "nT", "equatorial surface field of the epoch's dipole "
                         "(k0 = dipole_b0 R_E^3)"),
        "drift_shell_xyz": var(res["shell"], "km", "start points of the drift shell's field "
                               "lines, GEO Cartesian", ("mlt", "xyz")),
    }, coords=c)
    ds = ds.assign_coords(mlt=xr.Variable("mlt", 24.0 * np.arange(n_mlt) / n_mlt,
                                          {"units": "hour", "long_name": "magnetic local time"}),
                          xyz=["x", "y", "z"])
    ds["lstar"].attrs["ancillary_variables"] = "lstar_reason"
    ds.attrs = {
        "lstar_definition": "L* = 2 pi k0 / (Phi R_E) (Roederer 1970); Phi = magnetic flux "
                            "through the northern polar cap bounded by the drift shell's "
                            "footprints",
        "lstar_k0": "k0 = B0 R_E^3 with B0 = dipole_b0, the field model's centred-dipole "
                    "term of the sample's epoch, R_E = 6371.2 km",
        "lstar_footprint_altitude_km": altitude_km,
        "lstar_n_mlt": n_mlt,
        "lstar_method": method,
        **model_attrs(model),  # which model and, for T89, which Kp
    }
    kp = kp_level_variable(model, t, lead, d)
    if kp is not None:
        ds["kp_level"] = kp
    return ds
