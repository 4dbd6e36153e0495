r"""From spin-sectored counts and a field vector to pitch-angle data.

:func:`bin_sectors` turns a *sectored* dataset (counts or flux per time,
energy, sector and optionally detector, with the look directions and the
magnetic field; ``docs/conventions.md`` section 9) into a dataset that follows
the pitch-angle conventions (section 1-3), ready for
:func:`beltkit.pad.partition`, ``beltkit inspect`` and ``summarize``.

Geometry (gyrotropy; the telescope geometry of :mod:`beltkit.pad.geometry`)
    Each look -- one sector of one detector at one time -- stands for the band
    of pitch angles it sweeps: the axis pitch angles :math:`\alpha(\varphi)`
    of the boresight over the accumulation (the spin phase runs from
    :math:`\varphi_0` to :math:`\varphi_1`), widened on both sides by the
    field-of-view half-angle :math:`\delta` (:func:`beltkit.pad.swept_band`),

    .. math::
        [a_{lo}, a_{hi}] = [\max(0, \min_\varphi\alpha - \delta),
        \ \min(180, \max_\varphi\alpha + \delta)],

    with the flux uniform over the band's solid angle
    :math:`\Omega_k = 2\pi(\cos a_{lo} - \cos a_{hi})`. Its weight in
    pitch-angle bin :math:`i` is the band's solid-angle fraction inside the
    bin, :math:`w_{ki} = \Omega(\text{band}_k \cap \text{bin}_i) / \Omega_k`
    (:func:`beltkit.pad.band_overlap_solid_angle`; spherical zones).

    For a boresight at polar angle :math:`\theta_d` from the spin axis
    :math:`\hat{\mathbf s}` and spin phase :math:`\varphi` (from the reference
    direction, right-handed about :math:`\hat{\mathbf s}`), with
    :math:`\hat{\mathbf b} = (b_s, \rho\cos\varphi_b, \rho\sin\varphi_b)` in
    the spin frame,

    .. math::
        \cos\alpha(\varphi) = -\hat{\mathbf l}\cdot\hat{\mathbf b}
        = -\left(\sin\theta_d\,\rho\cos(\varphi - \varphi_b)
        + \cos\theta_d\, b_s\right),

    a sinusoid in :math:`\varphi`, so its extremes over the accumulation are
    at the ends or at :math:`\varphi_b`, :math:`\varphi_b + \pi` when they lie
    inside it (vector algebra). The kernel works in :math:`\cos\alpha` (the
    widening by :math:`\delta` with the angle-sum formula), so no arc cosine
    is taken per look.

Combination (Poisson counting statistics)
    With counts :math:`N_k` and exposure :math:`G_k = 1/c_k`
    (:math:`c_k` = ``counts_to_flux``: flux per count),

    .. math::
        C_i = \sum_k w_{ki} N_k, \quad
        j_i = \frac{C_i}{\sum_k w_{ki} G_k}, \quad
        \sigma_i = \frac{\sqrt{\sum_k w_{ki}^2 N_k}}{\sum_k w_{ki} G_k}

    (first-order propagation of independent Poisson counts, variance
    :math:`N_k`, with :math:`N_k = 0` counted as 1 as in section 2 of the
    conventions). Flux input without counts uses :math:`G_k = 1`,
    :math:`N_k \to j_k` and the variance :math:`\sigma_k^2` of ``flux_err``.
    :math:`j_i` is unbiased when the flux is uniform over the bands that feed
    the bin; a band wider than the bins smooths the distribution (it is the
    looks' resolution, not hidden). Every look's counts are shared out in
    full, so :math:`\sum_i C_i = \sum_k N_k` when the bins cover 0-180 deg.

Gyrotropy statistic
    Under gyrotropy two looks that sweep the same pitch-angle band see the
    same flux, whatever their gyrophases (in a spin, the sectors at
    :math:`\varphi_b \pm \Delta` do). Looks :math:`a, b` whose bands have a
    similarity :math:`\Omega(a \cap b)^2 / (\Omega_a\Omega_b) \ge 0.8`
    (:data:`PAIR_SIMILARITY`) form a pair, and

    .. math::
        \chi^2 = \sum_{pairs} \frac{(j_a - j_b)^2}
        {\sigma_a^2 + \sigma_b^2 + (\epsilon\,\bar j_{ab})^2}

    over the :math:`m` pairs, with the looks' own flux :math:`j = N/G` and
    Poisson variances :math:`\sigma^2 = \max(N, 1)/G^2`, and an optional
    relative tolerance :math:`\epsilon` (``gyrotropy_tolerance``, default 0.1:
    paired bands are alike, not identical).
    Its reduced value :math:`\chi^2/m` is ``gyrotropy_chi2``; a sample and
    energy is flagged not gyrotropic where :math:`\chi^2` exceeds the
    chi-square quantile of :math:`m` degrees of freedom at the level
    ``gyrotropy_level`` (Wilson & Hilferty 1931 cube-root approximation of the
    quantile; pairs taken as independent). A gyrophase dependence that is
    mirror-symmetric about the plane of the spin axis and B is invisible to
    any spinning instrument and so to this test.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from .._threads import map_slices
from ..errors import ConventionError
from .conventions import FLUX_UNITS, flux_unit_factor

__all__ = ["SECTOR_FLAG_MEANINGS", "bin_sectors", "sector_bands"]

#: bits of ``sector_flag``
SECTOR_FLAG_MEANINGS = {
    1: "unsampled_bin",
    2: "not_gyrotropic",
    4: "degenerate_geometry",
    8: "no_valid_data",
    16: "partly_covered_bin",
}

_INPUT_NAMES = ("counts", "flux", "flux_err", "counts_to_flux", "look_direction", "spin_axis",
                "spin_phase_reference", "sector_phase_bnds", "detector_polar_angle",
                "detector_azimuth", "fov_half_angle", "b_vector")
_DEG = math.pi / 180.0
_BLOCK = 4096
#: two looks form a gyrotropy pair when their bands' similarity
#: Omega(a & b)^2 / (Omega(a) Omega(b)) is at least this
PAIR_SIMILARITY = 0.8
_JIT = {}


# --------------------------------------------------------------------------- kernel
def _bin_block_py(x, g, v, has_v, is_counts, mode, bvec, look, cp0, sp0, cp1, sp1, ph0, ph1,
                  cth, sth, cdel, sdel, cedges, z, tol, pair_min, flux, err, cnt, nlook, chi,
                  dof, flag, cover, bcov, bands):
    """Bin one time block (see the module docstring); fills the output arrays in place."""
    n_t, n_e, n_k = x.shape
    n_i = cedges.shape[0] - 1
    w = np.zeros((n_k, n_i))
    i0 = np.zeros(n_k, np.int64)
    i1 = np.zeros(n_k, np.int64)
    blo = np.zeros(n_k)
    bhi = np.zeros(n_k)
    num = np.zeros(n_i)
    den = np.zeros(n_i)
    var = np.zeros(n_i)
    nn = np.zeros(n_i, np.int64)
    jb = np.zeros(n_i)
    hs = np.zeros(n_k)
    ls = np.zeros(n_k)
    rh = np.zeros(n_k)
    rl = np.zeros(n_k)
    order = np.zeros(n_k, np.int64)
    xt = np.zeros((n_k, n_e))
    gt = np.zeros((n_k, n_e))
    ct = np.zeros((n_k, n_e))
    have_g = False
    num2 = np.zeros((n_i, n_e))
    den2 = np.zeros((n_i, n_e))
    var2 = np.zeros((n_i, n_e))
    nng = np.zeros(n_i, np.int64)
    c2v = np.zeros(n_e)
    ek = np.zeros(n_k * n_i, np.int64)
    ei = np.zeros(n_k * n_i, np.int64)
    ew = np.zeros(n_k * n_i)
    pa = np.zeros(n_k * (n_k - 1) // 2 + 1, np.int64)
    pb = np.zeros(n_k * (n_k - 1) // 2 + 1, np.int64)
    two_pi = 2.0 * math.pi
    inv_two_pi = 1.0 / two_pi
    nan = np.nan
    for t in range(n_t):
        bs, b1, b2 = bvec[t, 0], bvec[t, 1], bvec[t, 2]
        if mode == 1:
            rho = math.sqrt(b1 * b1 + b2 * b2)
            phib = math.atan2(b2, b1)
        for k in range(n_k):
            if mode == 0:
                tl = t if look.shape[0] > 1 else 0
                u = -(look[tl, k, 0] * bs + look[tl, k, 1] * b1 + look[tl, k, 2] * b2)
                umin = u
                umax = u
            else:
                tp = t if cp0.shape[0] > 1 else 0
                c0 = b1 * cp0[tp, k] + b2 * sp0[tp, k]  # rho cos(phi0 - phib)
                c1 = b1 * cp1[tp, k] + b2 * sp1[tp, k]
                hi = max(c0, c1)
                lo = min(c0, c1)
                if math.ceil((ph0[tp, k] - phib) * inv_two_pi) * two_pi + phib <= ph1[tp, k]:
                    hi = rho
                ph = phib + math.pi
                if math.ceil((ph0[tp, k] - ph) * inv_two_pi) * two_pi + ph <= ph1[tp, k]:
                    lo = -rho
                umin = -(sth[k] * hi + cth[k] * bs)
                umax = -(sth[k] * lo + cth[k] * bs)
            if not (umin == umin and umax == umax):  # NaN geometry: the look samples nothing
                i0[k] = 1
                i1[k] = 0
                blo[k] = nan
                bhi[k] = nan
                continue
            umin = min(max(umin, -1.0), 1.0)
            umax = min(max(umax, -1.0), 1.0)
            # band edges as cosines: cos(alpha_min - delta) and cos(alpha_max + delta)
            if umax >= cdel[k]:
                clo = 1.0
            else:
                clo = umax * cdel[k] + math.sqrt(1.0 - umax * umax) * sdel[k]
            if umin <= -cdel[k]:
                chi_ = -1.0
            else:
                chi_ = umin * cdel[k] - math.sqrt(1.0 - umin * umin) * sdel[k]
            om = clo - chi_
            blo[k] = clo
            bhi[k] = chi_
            first = -1
            last = -2
            if om > 0.0:
                inv_om = 1.0 / om
                i = 0
                while i < n_i and cedges[i + 1] >= clo:  # bins wholly above the band
                    i += 1
                while i < n_i and cedges[i] > chi_:
                    ov = min(clo, cedges[i]) - max(chi_, cedges[i + 1])
                    if ov > 0.0:
                        w[k, i] = ov * inv_om
                        if first < 0:
                            first = i
                        last = i
                    else:
                        w[k, i] = 0.0
                    i += 1
            if first < 0:
                i0[k] = 1
                i1[k] = 0
            else:
                i0[k] = first
                i1[k] = last
        # the non-zero weights as one list (look, bin, weight)
        n_nz = 0
        for k in range(n_k):
            for i in range(i0[k], i1[k] + 1):
                if w[k, i] > 0.0:
                    ek[n_nz] = k
                    ei[n_nz] = i
                    ew[n_nz] = w[k, i]
                    n_nz += 1
        # the valid looks in order of decreasing upper band cosine (insertion sort)
        m = 0
        for k in range(n_k):
            if i0[k] <= i1[k]:
                order[m] = k
                m += 1
        for a in range(1, m):
            kk = order[a]
            b = a - 1
            while b >= 0 and blo[order[b]] < blo[kk]:
                order[b + 1] = order[b]
                b -= 1
            order[b + 1] = kk
        for a in range(m):
            hs[a] = blo[order[a]]
            ls[a] = bhi[order[a]]
        # pairs of looks whose bands nearly coincide (similarity >= pair_min); in that
        # order, once a band starts below the end of band a, no later one overlaps a
        n_pair = 0
        for a in range(m):
            ka = order[a]
            for b in range(a + 1, m):
                kb = order[b]
                if blo[kb] <= bhi[ka]:
                    break
                ov = blo[kb] - max(bhi[ka], bhi[kb])
                if ov * ov >= pair_min * (blo[ka] - bhi[ka]) * (blo[kb] - bhi[kb]):
                    pa[n_pair] = min(ka, kb)
                    pb[n_pair] = max(ka, kb)
                    n_pair += 1
        # solid angle of the union of the bands (cosine length; x 2 pi gives sr)
        total = 0.0
        n_run = 0
        if m > 0:
            run_hi = hs[0]
            run_lo = ls[0]
            for a in range(1, m):
                if hs[a] >= run_lo:
                    run_lo = min(run_lo, ls[a])
                else:
                    total += run_hi - run_lo
                    rh[n_run] = run_hi
                    rl[n_run] = run_lo
                    n_run += 1
                    run_hi = hs[a]
                    run_lo = ls[a]
            total += run_hi - run_lo
            rh[n_run] = run_hi
            rl[n_run] = run_lo
            n_run += 1
        cover[t] = 0.5 * total
        # each bin's solid-angle fraction inside the union of the bands
        partial = False
        for i in range(n_i):
            inside = 0.0
            for a in range(n_run):
                ov = min(rh[a], cedges[i]) - max(rl[a], cedges[i + 1])
                if ov > 0.0:
                    inside += ov
            fr = inside / (cedges[i] - cedges[i + 1])
            bcov[t, i] = fr
            if fr < 0.99:
                partial = True
        if bands.shape[1] == n_k:
            for k in range(n_k):
                bands[t, k, 0] = blo[k]
                bands[t, k, 1] = bhi[k]
        # fast path (counts, every value of the sample valid): energies innermost
        clean = is_counts and (not has_v) and n_e > 0
        if clean:
            te = t if g.shape[0] > 1 else 0
            fresh = g.shape[0] > 1 or not have_g
            have_g = True
            for e in range(n_e):
                ee = e if g.shape[1] > 1 else 0
                for k in range(n_k):
                    xv = x[t, e, k]
                    if not (xv == xv):
                        clean = False
                    xt[k, e] = xv
                    if fresh:  # exposure and its inverse (flux per count), once per block
                        gt[k, e] = g[te, ee, k]
                        ct[k, e] = 1.0 / g[te, ee, k]
        if clean:
            for i in range(n_i):
                for e in range(n_e):
                    num2[i, e] = 0.0
                    den2[i, e] = 0.0
                    var2[i, e] = 0.0
                nng[i] = 0
            n_valid = 0
            for k in range(n_k):
                if i0[k] <= i1[k]:
                    n_valid += 1
            for q in range(n_nz):
                k = ek[q]
                i = ei[q]
                wi = ew[q]
                w2 = wi * wi
                nng[i] += 1
                for e in range(n_e):
                    xv = xt[k, e]
                    num2[i, e] += wi * xv
                    den2[i, e] += wi * gt[k, e]
                    var2[i, e] += w2 * max(xv, 1.0)
            for e in range(n_e):
                c2v[e] = 0.0
            for q in range(n_pair):
                ka = pa[q]
                kb = pb[q]
                for e in range(n_e):
                    ca = ct[ka, e]
                    cb = ct[kb, e]
                    ra = xt[ka, e] * ca
                    rb = xt[kb, e] * cb
                    sd = (max(xt[ka, e], 1.0) * ca * ca + max(xt[kb, e], 1.0) * cb * cb
                          + (tol * 0.5 * (ra + rb)) ** 2)
                    c2v[e] += (ra - rb) ** 2 / sd
            for e in range(n_e):
                bits = 0
                for i in range(n_i):
                    if nng[i] > 0 and den2[i, e] > 0.0:
                        flux[t, e, i] = num2[i, e] / den2[i, e]
                        err[t, e, i] = math.sqrt(var2[i, e]) / den2[i, e]
                        cnt[t, e, i] = num2[i, e]
                    else:
                        flux[t, e, i] = nan
                        err[t, e, i] = nan
                        cnt[t, e, i] = nan
                        bits |= 1
                    nlook[t, e, i] = nng[i]
                if n_valid == 0:
                    bits |= 8
                if partial:
                    bits |= 16
                m = n_pair
                if m > 0:
                    chi[t, e] = c2v[e] / m
                    dof[t, e] = m
                    a = 2.0 / (9.0 * m)
                    crit = m * (1.0 - a + z * math.sqrt(a)) ** 3
                    if c2v[e] > crit:
                        bits |= 2
                else:
                    chi[t, e] = nan
                    dof[t, e] = 0.0
                flag[t, e] = bits
            continue
        for e in range(n_e):
            for i in range(n_i):
                num[i] = 0.0
                den[i] = 0.0
                var[i] = 0.0
                nn[i] = 0
            n_valid = 0
            te = t if g.shape[0] > 1 else 0
            ee = e if g.shape[1] > 1 else 0
            for k in range(n_k):
                if i0[k] <= i1[k] and x[t, e, k] == x[t, e, k]:
                    n_valid += 1
            for q in range(n_nz):
                k = ek[q]
                xv = x[t, e, k]
                if not (xv == xv):
                    continue
                i = ei[q]
                wi = ew[q]
                if has_v:
                    vv = v[t, e, k]
                elif is_counts:
                    vv = max(xv, 1.0)
                else:
                    vv = 0.0
                num[i] += wi * xv
                den[i] += wi * g[te, ee, k]
                var[i] += wi * wi * vv
                nn[i] += 1
            bits = 0
            for i in range(n_i):
                if nn[i] > 0 and den[i] > 0.0:
                    jb[i] = num[i] / den[i]
                    flux[t, e, i] = jb[i]
                    err[t, e, i] = math.sqrt(var[i]) / den[i] if (has_v or is_counts) else nan
                    cnt[t, e, i] = num[i]
                else:
                    jb[i] = 0.0
                    flux[t, e, i] = nan
                    err[t, e, i] = nan
                    cnt[t, e, i] = nan
                    bits |= 1
                nlook[t, e, i] = nn[i]
            if n_valid == 0:
                bits |= 8
            if partial:
                bits |= 16
            # gyrotropy: looks that sweep (nearly) the same pitch-angle band must agree
            c2 = 0.0
            m = 0
            if has_v or is_counts:
                for q in range(n_pair):
                    ka = pa[q]
                    kb = pb[q]
                    xa = x[t, e, ka]
                    xb = x[t, e, kb]
                    if not (xa == xa and xb == xb):
                        continue
                    ga = g[t if g.shape[0] > 1 else 0, e if g.shape[1] > 1 else 0, ka]
                    gb = g[t if g.shape[0] > 1 else 0, e if g.shape[1] > 1 else 0, kb]
                    ra = xa / ga
                    rb = xb / gb
                    if is_counts:
                        va = max(xa, 1.0) / (ga * ga)
                        vb = max(xb, 1.0) / (gb * gb)
                    else:
                        va = v[t, e, ka]
                        vb = v[t, e, kb]
                    sd = va + vb + (tol * 0.5 * (ra + rb)) ** 2
                    if sd > 0.0:
                        c2 += (ra - rb) ** 2 / sd
                        m += 1
            if m > 0:
                chi[t, e] = c2 / m
                dof[t, e] = m
                a = 2.0 / (9.0 * m)
                crit = m * (1.0 - a + z * math.sqrt(a)) ** 3
                if c2 > crit:
                    bits |= 2
            else:
                chi[t, e] = nan
                dof[t, e] = 0.0
            flag[t, e] = bits


def _kernel():
    if "bin" not in _JIT:
        try:
            import numba
        except ImportError:  # pragma: no cover - numba is a declared dependency
            _JIT["bin"] = _bin_block_py
        else:
            # fast-math without the no-NaN/no-inf flags (NaN tests stay valid); numpy's
            # error model: every division is guarded, so no zero-divisor branch is needed
            _JIT["bin"] = numba.njit(cache=True, nogil=True, error_model="numpy",
                                     fastmath={"reassoc", "contract", "arcp", "nsz"})(
                _bin_block_py)
    return _JIT["bin"]


# --------------------------------------------------------------------------- checks
def _unit(v):
    """Return unit vectors; NaN where the vector is zero or not finite."""
    norm = np.sqrt(np.einsum("...i,...i->...", v, v))
    ok = np.isfinite(norm) & (norm > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok[..., None], v / np.where(ok, norm, 1.0)[..., None], np.nan)


def _deg_values(ds, name, problems, dims_ok, *, lo=None, hi=None, lo_open=False):
    """Values of an angle variable in degree (rad converted), checked; None if absent/bad."""
    var = ds[name]
    if not set(var.dims) <= set(dims_ok):
        problems.append(f"{name}: dims {var.dims} must be a subset of {tuple(dims_ok)}")
        return None
    units = str(var.attrs.get("units", "")).strip().lower()
    if units in ("degree", "degrees", "deg", "degree_east", "degree_north"):
        f = 1.0
    elif units in ("rad", "radian", "radians"):
        f = 180.0 / math.pi
    else:
        problems.append(f"{name}: units {var.attrs.get('units')!r}; give it in 'degree' (or "
                        "'rad')")
        return None
    vals = np.asarray(var.values, dtype=float) * f
    bad = ~np.isfinite(vals)
    if lo is not None:
        bad |= (vals <= lo) if lo_open else (vals < lo)
    if hi is not None:
        bad |= vals > hi
    if np.any(bad):
        rng = f"{'(' if lo_open else '['}{lo}, {hi}]"
        where = f" and in {rng}" if lo is not None else ""
        problems.append(f"{name}: values must be finite{where} degree ({int(bad.sum())} are "
                        "not)")
        return None
    return var.copy(data=vals)


def _frame(var, problems):
    from ..field.coords import FRAMES

    f = str(var.attrs.get("frame", "")).strip().upper()
    if f not in FRAMES:
        problems.append(f"{var.name}: needs a 'frame' attribute, one of {', '.join(FRAMES)} "
                        f"(got {var.attrs.get('frame')!r})")
        return None
    return f


def _vector_var(ds, name, problems, lead_ok):
    """(values (..., 3) broadcastable, lead dims) of a vector variable; None when bad."""
    var = ds[name]
    if var.ndim == 0 or var.shape[-1] != 3 or var.dims[-1] in lead_ok:
        problems.append(f"{name}: needs a last dimension of length 3 (x, y, z), got dims "
                        f"{var.dims} and shape {var.shape}")
        return None
    lead = var.dims[:-1]
    if not set(lead) <= set(lead_ok):
        problems.append(f"{name}: leading dims {lead} must be a subset of {tuple(lead_ok)}")
        return None
    return var


def _field_direction(ds, field, time, target, problems):
    """Return the unit field vector (T, 3) in frame `target`."""
    if field is not None:
        if "position_geo" not in ds.variables:
            problems.append("position_geo: a field model needs the sample positions (time, 3) "
                            "GEO km; or give b_vector (time, 3) with a frame attribute")
            return None
        from ..field.coords import convert
        from ..field.models import as_model

        if target is None:
            return None
        model = as_model(field)
        pos = np.asarray(ds["position_geo"].values, dtype=float)
        b = np.asarray(model.field_geo(pos, time), dtype=float)
        if target != "GEO":
            b = np.asarray(convert(b, time, "GEO", target, model=model), dtype=float)
        return _unit(b)
    if "b_vector" not in ds.variables:
        problems.append("b_vector: missing; give the field vector per time (time, 3) with a "
                        "'frame' attribute, or pass field=... (a field model evaluated at "
                        "position_geo)")
        return None
    var = _vector_var(ds, "b_vector", problems, ("time",))
    if var is None:
        return None
    frame = _frame(var, problems)
    if frame is None or target is None:
        return None
    b = np.broadcast_to(np.asarray(var.values, dtype=float), (time.shape[0], 3))
    if frame != target:
        from ..field.coords import convert

        b = np.asarray(convert(b, time, frame, target), dtype=float)
    return _unit(b)


class _Setup:
    """Everything the kernel needs, checked."""


def _setup(ds, edges_deg, field):
    problems = []
    if not isinstance(ds, xr.Dataset):
        raise ConventionError([f"dataset: expected an xarray.Dataset, got {type(ds).__name__}"])
    s = _Setup()
    edges = np.asarray(edges_deg, dtype=float)
    if (edges.ndim != 1 or edges.size < 2 or np.any(~np.isfinite(edges))
            or np.any(np.diff(edges) <= 0) or edges[0] < 0 or edges[-1] > 180):
        problems.append("pitch_angle_edges_deg: needs at least two strictly increasing edges "
                        f"in 0-180 degree, got {edges.tolist()}")
    s.edges = edges
    if "counts" in ds.data_vars:
        s.is_counts, s.name = True, "counts"
    elif "flux" in ds.data_vars:
        s.is_counts, s.name = False, "flux"
    else:
        raise ConventionError(["counts: missing; a sectored dataset needs 'counts' (with "
                               "'counts_to_flux') or 'flux', dims (time, energy, sector[, "
                               "detector])"], ds.encoding.get("source"))
    data = ds[s.name]
    dims = set(data.dims)
    need = {"time", "energy", "sector"}
    if not need <= dims or not dims <= need | {"detector"}:
        problems.append(f"{s.name}: dims must be (time, energy, sector) or (time, energy, "
                        f"sector, detector), got {data.dims}")
    s.has_det = "detector" in data.dims
    s.order = ("time", "energy", "sector") + (("detector",) if s.has_det else ())
    s.n_t = ds.sizes.get("time", 0)
    s.n_e = ds.sizes.get("energy", 0)
    s.n_s = ds.sizes.get("sector", 0)
    s.n_d = ds.sizes.get("detector", 1) if s.has_det else 1
    s.n_k = s.n_s * s.n_d
    if s.is_counts:
        if "counts_to_flux" not in ds.variables:
            problems.append("counts_to_flux: missing; counts need the flux per count "
                            f"({FLUX_UNITS!r}), dims a subset of the counts' dims")
        else:
            c2f = ds["counts_to_flux"]
            f = flux_unit_factor(c2f.attrs.get("units", ""))
            if f is None or not set(c2f.dims) <= set(s.order):
                problems.append(f"counts_to_flux: units must be a directional flux per count "
                                f"({FLUX_UNITS!r}) and dims a subset of {s.order}; got "
                                f"{c2f.attrs.get('units')!r}, {c2f.dims}")
            else:
                s.c2f, s.c2f_scale = c2f, f
    else:
        f = flux_unit_factor(data.attrs.get("units", ""))
        if f is None:
            problems.append(f"flux: units {data.attrs.get('units')!r} are not a directional "
                            f"flux; expected {FLUX_UNITS!r}")
        s.flux_scale = f
        s.err = None
        if "flux_err" in ds.data_vars:
            fe = ds["flux_err"]
            fs = flux_unit_factor(fe.attrs.get("units", ""))
            if fs is None or set(fe.dims) != dims:
                problems.append("flux_err: must have flux's dims and directional-flux units")
            else:
                s.err, s.err_scale = fe, fs
    if "time" not in ds.coords or "energy" not in ds.coords:
        problems.append("time, energy: coordinates missing")
        raise ConventionError(problems, ds.encoding.get("source"))
    s.time = ds["time"].values
    # field of view
    if "fov_half_angle" not in ds.variables:
        problems.append("fov_half_angle: missing; give each detector's field-of-view "
                        "half-angle (degree, scalar or (detector,))")
        s.half = None
    else:
        s.half = _deg_values(ds, "fov_half_angle", problems, ("detector",), lo=0.0, hi=90.0,
                             lo_open=True)
    # look geometry
    det_dims = ("detector",) if s.has_det else ()
    if "look_direction" in ds.variables:
        s.mode = 0
        var = _vector_var(ds, "look_direction", problems, ("time", "sector") + det_dims)
        s.frame = _frame(var, problems) if var is not None else None
        s.look = var
    elif "spin_axis" in ds.variables:
        s.mode = 1
        var = _vector_var(ds, "spin_axis", problems, ("time",))
        s.frame = _frame(var, problems) if var is not None else None
        s.spin = var
        for name in ("spin_phase_reference", "sector_phase_bnds", "detector_polar_angle"):
            if name not in ds.variables:
                problems.append(f"{name}: missing (the spin form needs spin_axis, "
                                "spin_phase_reference, sector_phase_bnds and "
                                "detector_polar_angle; docs/conventions.md section 9)")
        if "spin_phase_reference" in ds.variables:
            ref = _vector_var(ds, "spin_phase_reference", problems, ("time",))
            if ref is not None and s.frame is not None:
                rf = _frame(ref, problems)
                rv = np.broadcast_to(np.asarray(ref.values, float), (s.n_t, 3))
                if rf is not None and rf != s.frame:
                    from ..field.coords import convert

                    rv = np.asarray(convert(rv, s.time, rf, s.frame), float)
                s.ref = rv
        s.bnds = s.polar = s.azimuth = None
        if "sector_phase_bnds" in ds.variables:
            pb = ds["sector_phase_bnds"]
            if pb.ndim < 2 or pb.shape[-1] != 2 or "sector" not in pb.dims[:-1] or not set(
                    pb.dims[:-1]) <= {"time", "sector"}:
                problems.append(f"sector_phase_bnds: dims must be (sector, 2) or (time, "
                                f"sector, 2), got {pb.dims}")
            else:
                b = _deg_values(ds, "sector_phase_bnds", problems, pb.dims)
                if b is not None:
                    width = b.isel({pb.dims[-1]: 1}) - b.isel({pb.dims[-1]: 0})
                    if np.any(width.values <= 0) or np.any(width.values > 360):
                        problems.append("sector_phase_bnds: each sector needs start < end <= "
                                        "start + 360 degree (unwrap phases past 360)")
                    else:
                        s.bnds = b
        if "detector_polar_angle" in ds.variables:
            s.polar = _deg_values(ds, "detector_polar_angle", problems, ("detector",), lo=0.0,
                                  hi=180.0)
        if "detector_azimuth" in ds.variables:
            s.azimuth = _deg_values(ds, "detector_azimuth", problems, ("detector",))
    else:
        problems.append("look_direction: missing; give the look directions as unit vectors "
                        "(look_direction, (..., 3) with a 'frame' attribute) or in the spin "
                        "form (spin_axis, spin_phase_reference, sector_phase_bnds, "
                        "detector_polar_angle); docs/conventions.md section 9")
        s.mode, s.frame = -1, None
    s.bhat = _field_direction(ds, field, s.time, s.frame, problems)
    if problems:
        raise ConventionError(problems, ds.encoding.get("source"))
    return s


def _per_look(var, s, with_time):
    """Broadcast a variable over (time?, sector, detector) and flatten the looks: (Tx, K)."""
    dims = (("time",) if with_time else ()) + ("sector", "detector")
    da = var
    if not s.has_det and "detector" not in da.dims:
        da = da.expand_dims(detector=1)
    shape = tuple(s.n_t if d == "time" else s.n_s if d == "sector" else s.n_d for d in dims)
    for d, n in zip(dims, shape):
        if d not in da.dims:
            da = da.expand_dims({d: n})
    arr = np.ascontiguousarray(da.transpose(*dims).values, dtype=float)
    return arr.reshape(arr.shape[:-2] + (s.n_k,)) if with_time else arr.reshape(1, s.n_k)


def _geometry(s):
    """Kernel geometry arrays: (bvec, look, cp0, sp0, cp1, sp1, ph0, ph1, cth, sth, cdel, sdel)."""
    half = s.half if s.has_det or "detector" not in s.half.dims else s.half
    hv = np.broadcast_to(np.asarray(half.values, float).reshape(-1), (s.n_d,)) if (
        half.ndim) else np.full(s.n_d, float(half.values))
    hk = np.tile(hv, s.n_s)  # k = sector * n_d + detector
    cdel, sdel = np.cos(hk * _DEG), np.sin(hk * _DEG)
    dummy2 = np.zeros((1, s.n_k))
    if s.mode == 0:
        lv = s.look
        tdim = "time" in lv.dims
        comp = lv.dims[-1]
        parts = [_per_look(lv.isel({comp: c}), s, tdim) for c in range(3)]
        look = _unit(np.stack(parts, axis=-1))  # (Tl, K, 3)
        bvec = np.ascontiguousarray(s.bhat)
        z = np.zeros(s.n_k)
        return (bvec, look, dummy2, dummy2, dummy2, dummy2, dummy2, dummy2, z, z, cdel, sdel,
                None)
    spin = _unit(np.broadcast_to(np.asarray(s.spin.values, float), (s.n_t, 3)))
    ref = s.ref
    e1 = _unit(ref - np.einsum("ti,ti->t", ref, spin)[:, None] * spin)
    e2 = np.cross(spin, e1)
    bh = s.bhat
    bvec = np.ascontiguousarray(np.stack([np.einsum("ti,ti->t", bh, spin),
                                          np.einsum("ti,ti->t", bh, e1),
                                          np.einsum("ti,ti->t", bh, e2)], axis=-1))
    psi = np.degrees(np.arccos(np.clip(bvec[:, 0], -1.0, 1.0)))
    bd = s.bnds.dims[-1]
    tdim = "time" in s.bnds.dims
    p0 = _per_look(s.bnds.isel({bd: 0}), s, tdim)
    p1 = _per_look(s.bnds.isel({bd: 1}), s, tdim)
    if s.azimuth is not None:
        az = np.tile(np.broadcast_to(np.asarray(s.azimuth.values, float).reshape(-1),
                                     (s.n_d,)), s.n_s)
        p0, p1 = p0 + az, p1 + az
    p0r, p1r = p0 * _DEG, p1 * _DEG
    pol = np.asarray(s.polar.values, float).reshape(-1)
    pk = np.tile(np.broadcast_to(pol, (s.n_d,)), s.n_s)
    look = np.zeros((1, 1, 3))
    return (bvec, look, np.cos(p0r), np.sin(p0r), np.cos(p1r), np.sin(p1r), p0r, p1r,
            np.cos(pk * _DEG), np.sin(pk * _DEG), cdel, sdel, psi)


def _factor_array(var, s, scale):
    """Return a per-look factor variable as an array (T|1, E|1, K) in canonical units."""
    da = var
    for d in ("time", "energy", "sector", "detector"):
        if d == "detector" and not s.has_det:
            continue
        if d not in da.dims:
            da = da.expand_dims({d: 1})
    arr = np.asarray(da.transpose(*s.order).values, dtype=float) * scale
    if not s.has_det:
        arr = arr[..., None]
    arr = np.broadcast_to(arr, arr.shape[:2] + (s.n_s, s.n_d))
    return np.ascontiguousarray(arr).reshape(arr.shape[:2] + (s.n_k,))


def _run(s, ds, geo, edges, z, tol=0.0, *, n_e=None, bands=None):
    """Run the kernel over time blocks; return the output arrays."""
    kernel = _kernel()
    n_t, n_k = s.n_t, s.n_k
    n_e = s.n_e if n_e is None else n_e
    n_i = edges.size - 1
    cedges = np.cos(np.radians(edges))
    out_dtype = np.float32
    data = ds[s.name].transpose(*s.order) if n_e else None
    if n_e and not s.is_counts and ds[s.name].dtype == np.float64:
        out_dtype = np.float64
    flux = np.empty((n_t, n_e, n_i), out_dtype)
    err = np.empty((n_t, n_e, n_i), out_dtype)
    cnt = np.empty((n_t, n_e, n_i), out_dtype)
    nlook = np.empty((n_t, n_e, n_i), np.int16)
    chi = np.empty((n_t, n_e), np.float32)
    dof = np.empty((n_t, n_e), np.float32)
    flag = np.empty((n_t, n_e), np.uint8)
    cover = np.empty(n_t)
    bcov = np.empty((n_t, n_i), np.float32)
    bands = np.zeros((1, 0, 2)) if bands is None else bands
    if n_e and s.is_counts:
        g_all = 1.0 / _factor_array(s.c2f, s, s.c2f_scale)
    else:
        g_all = np.ones((1, 1, n_k))
    err_var = None if (s.is_counts or not n_e) else s.err
    if err_var is not None:
        err_var = err_var.transpose(*s.order)
    (bvec, look, cp0, sp0, cp1, sp1, ph0, ph1, cth, sth, cdel, sdel, _) = geo

    def tsl(a, sl):
        return a[sl] if a.shape[0] == n_t and n_t > 1 else a

    def block(sl):
        b = sl.stop - sl.start
        if n_e:
            xb = np.asarray(data[sl].values)
            if s.is_counts and np.any(xb < 0):
                raise ConventionError([f"counts: negative values between times {sl.start} and "
                                       f"{sl.stop}; counts must be >= 0 (NaN for missing)"],
                                      ds.encoding.get("source"))
            if not np.issubdtype(xb.dtype, np.floating):
                xb = xb.astype(np.float32)
            if not s.is_counts and s.flux_scale != 1.0:
                xb = xb * s.flux_scale
            xb = xb.reshape(b, n_e, n_k)
            if err_var is not None:
                vb = (np.asarray(err_var[sl].values, dtype=float) * s.err_scale) ** 2
                vb = vb.reshape(b, n_e, n_k)
            else:
                vb = np.zeros((1, 1, 1))
        else:
            xb = np.zeros((b, 0, n_k), np.float32)
            vb = np.zeros((1, 1, 1))
        kernel(xb, tsl(g_all, sl), vb, err_var is not None, s.is_counts, s.mode,
               bvec[sl], tsl(look, sl), tsl(cp0, sl), tsl(sp0, sl), tsl(cp1, sl), tsl(sp1, sl),
               tsl(ph0, sl), tsl(ph1, sl), cth, sth, cdel, sdel, cedges, z, tol, PAIR_SIMILARITY,
               flux[sl], err[sl], cnt[sl], nlook[sl], chi[sl], dof[sl], flag[sl], cover[sl],
               bcov[sl], bands[sl] if bands.shape[1] else bands)

    map_slices(block, n_t, _BLOCK)
    return flux, err, cnt, nlook, chi, dof, flag, cover, bcov


def _passed_through(ds, s):
    """Variables of `ds` carried into the output: positions, energy bounds, per-time data."""
    keep = {}
    skip = set(_INPUT_NAMES)
    for name, var in ds.data_vars.items():
        if name in skip or {"sector", "detector", "pitch_angle"} & set(var.dims):
            continue
        if "time" in var.dims or set(var.dims) <= {"energy", "nv", "bnds"}:
            keep[name] = var
    if "energy_bnds" in ds.variables:
        keep["energy_bnds"] = ds["energy_bnds"]
    return keep


def bin_sectors(ds, pitch_angle_edges_deg, *, field=None, gyrotropy_level=1e-3,
                gyrotropy_tolerance=0.1, degenerate_deg=10.0):
    r"""Bin a sectored dataset into pitch-angle bins (pitch-angle conventions out).

    Each look (sector x detector x time) stands for the band of pitch angles
    its field of view sweeps over a gyration, widened by the spin during its
    accumulation; its counts are shared among the bins in proportion to the
    band's solid angle in each (module docstring: geometry, combination,
    gyrotropy statistic).

    .. math::
        j_i = \frac{\sum_k w_{ki} N_k}{\sum_k w_{ki}/c_k}, \qquad
        w_{ki} = \frac{\Omega(\text{band}_k \cap \text{bin}_i)}{\Omega(\text{band}_k)},
        \qquad \Omega([a_1, a_2]) = 2\pi(\cos a_1 - \cos a_2)

    Parameters
    ----------
    ds : xarray.Dataset
        Sectored data (``docs/conventions.md`` section 9): ``counts`` with
        ``counts_to_flux`` (or ``flux`` with optional ``flux_err``) on (time,
        energy, sector[, detector]); the look directions (``look_direction``
        with a ``frame``, or the spin form); ``b_vector`` (time, 3) with a
        ``frame`` (or `field`); ``fov_half_angle``. Not modified; a file
        opened lazily is read one block of times at a time.
    pitch_angle_edges_deg : array_like
        Bin edges (degree, strictly increasing, within 0-180).
    field : FieldModel or str, optional
        Field model evaluated at ``position_geo`` (GEO km) instead of the
        dataset's ``b_vector``.
    gyrotropy_level : float
        Significance level of the gyrotropy test (default 1e-3): a sample and
        energy whose chi-square exceeds the quantile ``1 - level`` is flagged.
    gyrotropy_tolerance : float
        Relative difference of two paired looks tolerated beyond their Poisson
        errors (default 0.1): paired bands are alike, not identical (similarity
        >= 0.8), so where the flux is steep (a loss-cone edge) two looks of a
        gyrotropic distribution differ by up to ~10 %, which finely counted
        data (1e4-1e6 counts) would otherwise flag. 0 tests the counting
        statistics alone.
    degenerate_deg : float
        Flag samples whose field lies within this angle (degree) of the spin
        axis or its opposite (spin form only): the sectors then see nearly one
        pitch angle per detector.

    Returns
    -------
    xarray.Dataset
        ``flux``, ``flux_err`` (time, energy, pitch_angle) in
        cm-2 s-1 sr-1 keV-1; ``counts`` (apportioned counts :math:`C_i`, counts
        input only); ``look_count`` (looks that fed each bin; 0 and NaN flux
        where none did); ``gyrotropy_chi2`` (reduced) and ``gyrotropy_dof``
        (time, energy); ``pitch_angle_coverage`` (time,) (solid angle of the
        union of the looks' bands over 4 pi); ``bin_coverage`` (time,
        pitch_angle) (each bin's solid-angle fraction inside that union: a bin
        below 1 is estimated from looks that see only part of it, bit 16 of
        ``sector_flag`` where one is below 0.99); ``spin_b_angle`` (time,) (spin
        form); ``sector_flag`` (bits in :data:`SECTOR_FLAG_MEANINGS`);
        ``pitch_angle_bnds``, ``energy_bnds`` and the position variables passed
        through. It passes :func:`beltkit.pad.validate`.

    Raises
    ------
    ConventionError
        Listing every problem of the dataset at once.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> t = np.array(["2027-03-08T00:00"], dtype="datetime64[ns]")
    >>> ds = xr.Dataset(
    ...     {"counts": (("time", "energy", "sector"), np.full((1, 1, 4), 100.0)),
    ...      "counts_to_flux": ((), 2.0, {"units": "cm-2 s-1 sr-1 keV-1"}),
    ...      "energy_bnds": (("energy", "nv"), [[90.0, 110.0]], {"units": "keV"}),
    ...      "spin_axis": (("time", "xyz"), [[0.0, 0.0, 1.0]], {"frame": "GSE"}),
    ...      "spin_phase_reference": (("time", "xyz"), [[1.0, 0.0, 0.0]], {"frame": "GSE"}),
    ...      "sector_phase_bnds": (("sector", "nv"), [[0, 90], [90, 180], [180, 270],
    ...                                              [270, 360]], {"units": "degree"}),
    ...      "detector_polar_angle": ((), 90.0, {"units": "degree"}),
    ...      "fov_half_angle": ((), 10.0, {"units": "degree"}),
    ...      "b_vector": (("time", "xyz"), [[100.0, 0.0, 0.0]], {"frame": "GSE",
    ...                                                          "units": "nT"})},
    ...     coords={"time": t, "energy": ("energy", [100.0], {"units": "keV"})})
    >>> out = bin_sectors(ds, np.linspace(0, 180, 7))
    >>> out["flux"].values[0, 0].tolist()  # isotropic counts: every bin 200
    [200.0, 200.0, 200.0, 200.0, 200.0, 200.0]
    """
    s = _setup(ds, pitch_angle_edges_deg, field)
    geo = _geometry(s)
    z = float(_normal_isf(gyrotropy_level))
    flux, err, cnt, nlook, chi, dof, flag, cover, bcov = _run(s, ds, geo, s.edges, z,
                                                        float(gyrotropy_tolerance))
    psi = geo[-1]
    if psi is not None:
        psi_eff = np.minimum(psi, 180.0 - psi)
        degenerate = psi_eff < degenerate_deg
        flag |= np.where(degenerate, np.uint8(4), np.uint8(0))[:, None]
    edges = s.edges
    centres = 0.5 * (edges[:-1] + edges[1:])
    dims3 = ("time", "energy", "pitch_angle")
    has_err = s.is_counts or s.err is not None
    data = {
        "flux": (dims3, flux, {"units": FLUX_UNITS,
                               "long_name": "differential directional flux binned from "
                                            "spin sectors",
                               **({"ancillary_variables": "flux_err"} if has_err else {})}),
        "look_count": (dims3, nlook, {"units": "1",
                                      "long_name": "number of sector looks that fed the bin "
                                                   "(0: unsampled, flux NaN)"}),
        "gyrotropy_chi2": (("time", "energy"), chi,
                           {"units": "1", "long_name": "reduced chi-square of the flux "
                                                       "differences of looks sweeping the "
                                                       "same pitch-angle band"}),
        "gyrotropy_dof": (("time", "energy"), dof,
                          {"units": "1", "long_name": "number of look pairs with the same "
                                                      "pitch-angle band (degrees of freedom "
                                                      "of gyrotropy_chi2)"}),
        "bin_coverage": (("time", "pitch_angle"), bcov,
                         {"units": "1", "long_name": "solid-angle fraction of the bin inside "
                                                     "the union of the looks' bands"}),
        "pitch_angle_coverage": ("time", cover.astype(np.float32),
                                 {"units": "1", "long_name": "solid angle of the union of the "
                                                             "looks' pitch-angle bands over "
                                                             "4 pi"}),
        "sector_flag": (("time", "energy"), flag,
                        {"long_name": "sector binning quality flags",
                         "flag_masks": np.array(list(SECTOR_FLAG_MEANINGS), np.uint8),
                         "flag_meanings": " ".join(SECTOR_FLAG_MEANINGS.values()),
                         "gyrotropy_level": float(gyrotropy_level),
                         "gyrotropy_tolerance": float(gyrotropy_tolerance),
                         "degenerate_deg": float(degenerate_deg)}),
        "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([edges[:-1], edges[1:]], -1),
                             {"units": "degree"}),
    }
    if has_err:
        data["flux_err"] = (dims3, err, {"units": FLUX_UNITS,
                                         "long_name": "flux uncertainty (1 sigma, Poisson "
                                                      "counts propagated)"})
    if s.is_counts:
        data["counts"] = (dims3, cnt, {"units": "1",
                                       "long_name": "counts apportioned to the bin (sum over "
                                                    "looks of solid-angle weight x counts)"})
    if psi is not None:
        data["spin_b_angle"] = ("time", psi.astype(np.float32),
                                {"units": "degree",
                                 "long_name": "angle between the spin axis and the field"})
    passed = {k: v for k, v in _passed_through(ds, s).items() if k not in data}
    out = xr.Dataset(data, coords={
        "time": ds["time"],
        "energy": ds["energy"],
        "pitch_angle": ("pitch_angle", centres, {"units": "degree",
                                                 "long_name": "local pitch angle",
                                                 "bounds": "pitch_angle_bnds"}),
    })
    out = out.assign(passed)
    out.attrs = {**ds.attrs}
    out.attrs["beltkit_sectors"] = (
        f"binned from {s.n_s} sectors x {s.n_d} detector(s) by beltkit.pad.bin_sectors "
        f"({'spin form' if s.mode == 1 else 'look directions'}; field "
        f"{'model ' + str(field) if field is not None else 'b_vector'})")
    out.attrs.setdefault("Conventions", "CF-1.8")
    return out


def _normal_isf(level):
    """Upper-tail standard normal quantile (scipy.special.ndtri)."""
    from scipy.special import ndtri

    level = float(level)
    if not 0.0 < level < 1.0:
        raise ValueError(f"gyrotropy_level must lie in (0, 1), got {level}")
    return -ndtri(level)


def sector_bands(ds, *, field=None):
    r"""Pitch-angle band (deg) each look of a sectored dataset sweeps.

    The band :math:`[\max(0, \min_\varphi\alpha - \delta), \min(180,
    \max_\varphi\alpha + \delta)]` of :func:`bin_sectors`, from the same
    compiled geometry.

    Parameters
    ----------
    ds : xarray.Dataset
        Sectored dataset (``docs/conventions.md`` section 9); its counts are
        not read.
    field : FieldModel or str, optional
        As for :func:`bin_sectors`.

    Returns
    -------
    xarray.Dataset
        ``band_lower``, ``band_upper`` (time, sector[, detector]) in degree.
    """
    s = _setup(ds, [0.0, 180.0], field)
    geo = _geometry(s)
    bands = np.zeros((s.n_t, s.n_k, 2))
    _run(s, ds, geo, s.edges, 0.0, n_e=0, bands=bands)
    with np.errstate(invalid="ignore"):
        deg = np.degrees(np.arccos(np.clip(bands, -1.0, 1.0))).reshape(
            s.n_t, s.n_s, s.n_d, 2)
    dims = ("time", "sector", "detector")
    out = xr.Dataset({
        "band_lower": (dims, deg[..., 0], {"units": "degree",
                                           "long_name": "lower edge of the look's swept "
                                                        "pitch-angle band"}),
        "band_upper": (dims, deg[..., 1], {"units": "degree",
                                           "long_name": "upper edge of the look's swept "
                                                        "pitch-angle band"})},
        coords={"time": ds["time"]})
    return out if s.has_det else out.isel(detector=0, drop=True)
