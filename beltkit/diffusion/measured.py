r"""Diffusion rates from measured pitch-angle data (bins or telescope pairs), intervals, flags."""

from __future__ import annotations

import numpy as np
import scipy.special as _sp
import xarray as xr

from .. import motion
from ..constants import R_E_KM
from ..errors import ConventionError, PhysicsError
from .profile import bessel_ratio_g, cone_mean_ratio
from .rates import (
    loss_fraction,
    loss_time_text,
    regime_attrs,
    regime_codes,
    tau_sd_seconds,
)

__all__ = [
    "FLAG_MEANINGS",
    "from_pitch_angle_data",
]

#: Bits of ``diffusion_flag``.
FLAG_MEANINGS = {
    1: "ratio_above_one_model_not_applicable",
    2: "z0_upper_bound_only",
    4: "z0_lower_bound_only",
    8: "loss_cone_unresolved",
    16: "no_valid_data",
    32: "no_uncertainty",
}


# ---------------------------------------------------------------- from data

# cells in u = alpha_eq / alpha0: 100 uniform inside the cone, geometric outside to 64
_U_EDGES = np.concatenate([np.linspace(0.0, 1.0, 101), np.linspace(1.0, 1.5, 101)[1:],
                           1.5 * 1.03 ** np.arange(1, 129)])
_N_INSIDE = 100
# z0 grid of the per-sample response tables (t = ln z)
_T_GRID = np.linspace(np.log(1e-3), np.log(1e3), 193)
_SAMPLE_BLOCK = 2048


def _cell_means(z):
    """Mean of the profile over each u cell (weight u du), shape (cells, len(z))."""
    ua = _U_EDGES[:-1, None]
    ub = _U_EDGES[1:, None]
    z = np.asarray(z, dtype=float)[None, :]
    inside = ub <= 1.0 + 1e-12
    with np.errstate(over="ignore", invalid="ignore"):
        # (2/(ub^2 - ua^2)) [u I1(z u) / z]_ua^ub / I0(z), scaled Bessel functions
        def term(u):
            return u * _sp.i1e(z * u) * np.exp(z * (u - 1.0))

        pin = 2.0 * (term(ub) - term(ua)) / (z * _sp.i0e(z) * (ub * ub - ua * ua))
        k = z * bessel_ratio_g(z)
        lb = np.log(np.maximum(ub, 1.0))
        la = np.log(np.maximum(ua, 1.0))
        # int u ln u du = u^2 ln u / 2 - u^2 / 4
        iln = (ub * ub * lb / 2 - ub * ub / 4) - (ua * ua * la / 2 - ua * ua / 4)
        pout = 1.0 + k * 2.0 * iln / (ub * ub - ua * ua)
    return np.where(inside, pin, pout)


_CELL_TABLE = {}


def _cell_table():
    if "p" not in _CELL_TABLE:
        _CELL_TABLE["p"] = _cell_means(np.exp(_T_GRID))
    return _CELL_TABLE["p"]


def _band_cumulative(cos1, cos2, c):
    """Solid angle of bands [a1, a2] (cosines) at local angles below phi on both sides.

    ``c`` = cos(phi), phi in [0, 90] deg; broadcast as numpy arrays.
    """
    return 2.0 * np.pi * ((cos1 - np.clip(c, cos2, cos1)) + (np.clip(-c, cos2, cos1) - cos2))


def _cell_weights(cos1, cos2, coef, cphi):
    """Weights (n, cells) over the u cells of the flux-weighted mean sum_i coef_i j_i.

    The cumulative weight below a local angle, sum_i (coef_i / Omega_i) S_i, is
    piecewise linear in cos(phi) with breaks at the band edges: it is computed
    exactly at the breaks (one matrix product) and interpolated linearly there.
    ``cos1``, ``cos2`` are (P,) for fixed bins (``coef`` may then be a tuple of
    coefficient arrays sharing the interpolation) or (n, 1) for one band per sample.
    """
    omega = 2.0 * np.pi * (cos1 - cos2)
    with np.errstate(invalid="ignore", divide="ignore"):
        inv = np.where(omega > 0, 1.0 / np.where(omega > 0, omega, 1.0), 0.0)
    w = tuple(c * inv for c in coef) if isinstance(coef, tuple) else coef * inv
    if cos1.ndim == 2:  # one band per sample
        cum = w * _band_cumulative(cos1, cos2, cphi)
        return np.diff(cum, axis=-1)
    breaks = np.unique(np.clip(np.concatenate([cos1, cos2, -cos1, -cos2, [0.0, 1.0]]),
                               0.0, 1.0))
    # the interpolation plan (break index and fraction) is shared by every weight row
    j = np.clip(np.searchsorted(breaks, cphi), 1, breaks.size - 1)
    x0, x1 = breaks[j - 1], breaks[j]
    frac = (cphi - x0) / (x1 - x0)
    s_breaks = _band_cumulative(cos1[:, None], cos2[:, None], breaks[None, :])  # (P, B)
    out = []
    for wk in (w if isinstance(w, tuple) else (w,)):
        gb = wk @ s_breaks  # (n, B)
        g0 = np.take_along_axis(gb, j - 1, axis=-1)
        g1 = np.take_along_axis(gb, j, axis=-1)
        out.append(np.diff(g0 + (g1 - g0) * frac, axis=-1))
    return tuple(out) if isinstance(w, tuple) else out[0]


def _cone_share(a1, a2, blc):
    """Solid angle of bands [a1, a2] (deg) inside the cones [0, blc] and [180 - blc, 180]."""
    c1, c2 = np.cos(np.radians(a1)), np.cos(np.radians(a2))
    cb = np.cos(np.radians(blc))[:, None]
    return 2.0 * np.pi * ((c1 - np.clip(cb, c2, c1)) + (np.clip(-cb, c2, c1) - c2))


def _table_y(rtab):
    """Return ln(-ln R) of per-sample tables (n, Z), made non-decreasing along z."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ytab = np.log(-np.log(np.clip(rtab, 1e-300, 1.0)))
    return np.maximum.accumulate(np.where(np.isfinite(ytab), ytab, -np.inf), axis=-1)


def _invert_tables(r, ytab):
    """Invert per-sample tables for ratios r (n, K); ``ytab`` from :func:`_table_y`.

    The bracketing table entry is found by a vectorised bisection over the
    table index (8 gathers for 193 entries), then t = ln z is interpolated
    linearly against ln(-ln R); below the table the small-z law q = 2 t + const
    continues it; NaN above it or for r outside (0, 1).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = (r > 0) & (r < 1)
        y = np.where(inside, np.log(-np.log(np.where(inside, r, 0.5))), np.nan)
    n_z = ytab.shape[-1]
    lo = np.zeros(r.shape, dtype=np.intp)  # invariant: ytab[lo] < y <= ytab[hi] when inside
    hi = np.full(r.shape, n_z - 1, dtype=np.intp)
    while True:
        active = hi - lo > 1
        if not active.any():
            break
        mid = (lo + hi) // 2
        below = np.take_along_axis(ytab, mid, axis=-1) < y
        lo = np.where(active & below, mid, lo)
        hi = np.where(active & ~below, mid, hi)
    y0 = np.take_along_axis(ytab, lo, axis=-1)
    y1 = np.take_along_axis(ytab, hi, axis=-1)
    first = ytab[:, :1]
    last = ytab[:, -1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _T_GRID[lo] + (y - y0) * (_T_GRID[hi] - _T_GRID[lo]) / (y1 - y0)
        t = np.where(y <= first, _T_GRID[0] + (y - first) / 2.0, t)
    t = np.where(y > last, np.nan, t)
    return np.where(np.isfinite(y), np.exp(t), np.nan)


def _prepared(ds, model, allow_negative):
    from ..pad.conventions import check

    return check(ds, model=model, allow_negative=allow_negative)


def _flux_arrays(ds, prep):
    """Flux and 1-sigma error (time, energy, angle) in canonical units, masked (numpy)."""
    adim = "look" if prep.kind == "telescope" else "pitch_angle"
    order = ("time", "energy", adim)
    x = prep.flux_mask.apply(np.asarray(ds["flux"].transpose(*order).values), np.float64)
    s = None
    if prep.error_source == "flux_err":
        s = prep.err_mask.apply(np.asarray(ds["flux_err"].transpose(*order).values), np.float64)
    elif prep.error_source == "counts":
        from ..pad import flux_unit_factor

        counts = prep.counts_mask.apply(np.asarray(ds["counts"].transpose(*order).values),
                                        np.float64)
        c2f = ds["counts_to_flux"].astype(float)
        c2f = (c2f * flux_unit_factor(c2f.attrs["units"])).broadcast_like(
            ds["flux"]).transpose(*order).values
        # Poisson, N = 0 counted as 1 (the convention of docs/conventions.md)
        s = np.where(np.isnan(counts), np.nan, np.sqrt(np.maximum(counts, 1.0)) * c2f)
    return x, s


def _cones_from(ds, model, altitude_km, cones):
    needed = ("blc_local", "blc_equatorial", "b_local", "b_min", "L")
    if cones is None:
        from ..pad import partition

        cones = partition(ds, model=model, altitude_km=altitude_km)
    missing = [n for n in needed if n not in cones.variables]
    if missing:
        raise ConventionError([f"cones: missing {', '.join(missing)}; pass the result of "
                               "beltkit.pad.partition (or a summary) for the same dataset, or "
                               "cones=None"])
    if cones.sizes.get("time") != ds.sizes["time"]:
        raise ConventionError([f"cones: {cones.sizes.get('time')} times, but the flux dataset "
                               f"has {ds.sizes['time']}; pass the partition of this dataset"])
    return {n: np.asarray(cones[n].values, dtype=float) for n in needed}


def _measurement(ds, prep, c, x, s, band_deg):
    """Bands, numerator and denominator coefficients per sample and the measured ratio."""
    blc = c["blc_local"]
    n = blc.shape[0]
    if prep.kind == "bins":
        a1 = np.broadcast_to(prep.edges[:, 0], (n, prep.edges.shape[0]))
        a2 = np.broadcast_to(prep.edges[:, 1], (n, prep.edges.shape[0]))
        num = _cone_share(a1, a2, blc)
        outer = np.minimum(blc + band_deg, 90.0)
        den = _cone_share(a1, a2, outer) - num
        num_c = num
    else:
        from ..pad import swept_band

        look = ds["look_pitch_angle"].transpose("time", "look").values.astype(float)
        look = look * prep.angle_scale.get("look_pitch_angle", 1.0)
        half = ds["look_half_angle"].values.astype(float) * prep.angle_scale.get(
            "look_half_angle", 1.0)
        a1, a2 = swept_band(look, half)
        valid = np.isfinite(a1) & np.isfinite(a2) & (a2 > a1)
        a1 = np.where(valid, a1, 0.0)
        a2 = np.where(valid, a2, 0.0)
        omega = 2.0 * np.pi * (np.cos(np.radians(a1)) - np.cos(np.radians(a2)))
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(valid, _cone_share(a1, a2, blc) / omega, np.nan)
        k_in = np.argmax(np.where(np.isnan(frac), -1.0, frac), axis=1)
        k_out = np.argmin(np.where(np.isnan(frac), 2.0, frac), axis=1)
        eye = np.eye(a1.shape[1])
        num_c = eye[k_in] * valid
        den = eye[k_out] * valid
        den = np.where((k_in == k_out)[:, None], 0.0, den)
    with np.errstate(invalid="ignore", divide="ignore"):
        cn = num_c / num_c.sum(axis=1, keepdims=True)
        cd = den / den.sum(axis=1, keepdims=True)
    used = (cn > 0) | (cd > 0)  # (n, P)
    ok = ~np.any(used[:, None, :] & ~np.isfinite(x), axis=-1)  # (n, E)
    x0 = np.where(np.isfinite(x), x, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        num_f = np.einsum("nep,np->ne", x0, np.nan_to_num(cn))
        den_f = np.einsum("nep,np->ne", x0, np.nan_to_num(cd))
        r = np.where(ok & (den_f > 0), num_f / den_f, np.nan)
        if s is None:
            sr = np.full(r.shape, np.nan)
        else:
            s0 = np.where(np.isfinite(s), s, np.nan)
            coef = (np.nan_to_num(cn)[:, None, :] - r[..., None] * np.nan_to_num(cd)[:, None, :])
            var = np.nansum(np.where(used[:, None, :], (s0 * coef) ** 2, 0.0), axis=-1)
            bad_s = np.any(used[:, None, :] & ~np.isfinite(s), axis=-1)
            sr = np.where(bad_s, np.nan, np.sqrt(var) / den_f)
    return a1, a2, cn, cd, r, sr


def _response_tables(a1, a2, cn, cd, c):
    """Per-sample modelled ratio R(z) on the z grid and the in-cone shares of both means."""
    n = c["blc_local"].shape[0]
    ptab = _cell_table()
    n_z = _T_GRID.size
    rtab = np.full((n, n_z), np.nan)
    share_num = np.full(n, np.nan)
    share_den = np.full(n, np.nan)
    n_in = _N_INSIDE  # cells inside the cone
    if a1.ndim == 2 and not np.all(a1 == a1[:1]):  # telescopes: one band per mean
        kn = np.argmax(np.nan_to_num(cn), axis=1)[:, None]
        kd = np.argmax(np.nan_to_num(cd), axis=1)[:, None]
        # a tuple per mean, built at once (a generator here would see only the last k)
        bands = [tuple(np.take_along_axis(a, k, axis=1) for a in (a1, a2)) for k in (kn, kd)]
        bands = [tuple(np.cos(np.radians(b)) for b in pair) for pair in bands]
        coefs = (np.ones((n, 1)), np.ones((n, 1)))
    else:
        c1 = np.cos(np.radians(np.atleast_2d(a1)[0]))
        c2 = np.cos(np.radians(np.atleast_2d(a2)[0]))
        bands = [(c1, c2), (c1, c2)]
        coefs = (np.nan_to_num(cn), np.nan_to_num(cd))
    for start in range(0, n, _SAMPLE_BLOCK):
        sl = slice(start, min(start + _SAMPLE_BLOCK, n))
        a0 = np.radians(c["blc_equatorial"][sl])[:, None]
        ratio_b = (c["b_local"][sl] / c["b_min"][sl])[:, None]
        with np.errstate(invalid="ignore", over="ignore"):
            aeq = np.minimum(_U_EDGES[None, :] * a0, np.pi / 2)
            s_loc = np.sin(aeq) * np.sqrt(ratio_b)
            cphi = np.sqrt(np.clip(1.0 - s_loc * s_loc, 0.0, 1.0))  # cos of local angle
        cphi[:, -1] = 0.0  # the last cell takes every pitch angle beyond it (local 90 deg)
        cphi = np.nan_to_num(cphi, nan=1.0)
        if bands[0][0].ndim == 2:
            wn, wd = (_cell_weights(b1[sl], b2[sl], coef[sl], cphi)
                      for (b1, b2), coef in zip(bands, coefs))
        else:  # fixed bins: one interpolation plan for both means
            wn, wd = _cell_weights(bands[0][0], bands[0][1], (coefs[0][sl], coefs[1][sl]),
                                   cphi)
        with np.errstate(invalid="ignore", divide="ignore"):
            rtab[sl] = (wn @ ptab) / (wd @ ptab)
            share_num[sl] = wn[:, :n_in].sum(axis=1) / wn.sum(axis=1)
            share_den[sl] = wd[:, :n_in].sum(axis=1) / wd.sum(axis=1)
    return rtab, share_num, share_den


def _attrs(long_name, units, **extra):
    return {"long_name": long_name, "units": units, **extra}


def from_pitch_angle_data(ds, model="auto", altitude_km=100.0, *, cones=None,
                          species="electron", loss_time="half_bounce", filling_band_deg=10.0,
                          interval_sigma=2.0, allow_negative=False, prepared=None):
    r"""Diffusion coefficient, lifetime and regime per sample and energy from measured flux.

    For each time and energy a ratio of two measured mean fluxes is formed,

    * pitch-angle bins: the mean flux in the bounce loss cone over the mean in
      the band just outside it, :math:`[\alpha_B, \alpha_B + \Delta]` local
      (both sides of 90 deg) -- the definition of ``loss_cone_filling`` in
      :func:`beltkit.pad.partition`;
    * telescopes: the look with the largest share of its swept band inside the
      bounce loss cone over the look with the smallest share,

    with its 1-sigma error from ``flux_err`` or Poisson ``counts`` (first order,
    keeping the covariance of a bin that is in both means). The same ratio is
    modelled for each sample as :math:`R(z_0) = \bar A(z_0)/\bar B(z_0)`, each
    mean the solid-angle average of :func:`loss_cone_profile` over the local
    pitch angles it covers mapped to the equator
    (:math:`\sin^2\alpha_{eq} = \sin^2\alpha\, B_{min}/B_{local}`; the profile is
    averaged in closed form over 328 cells of :math:`\alpha_{eq}/\alpha_0`).
    :math:`R` falls monotonically from 1 at :math:`z_0 = 0`, so
    :math:`[r - k\sigma, r + k\sigma]` maps to an interval of :math:`z_0`, and
    through :math:`D = \alpha_0^2/(z_0^2\tau)` to one of :math:`D`.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset following ``docs/conventions.md`` (bins or telescopes);
        not modified. Loaded into memory.
    model : "auto", None, "dipole", "igrf" or FieldModel
        Field model of the loss cones, as for :func:`beltkit.pad.partition`
        (``"auto"`` is partition's default: dipole closed forms from ``L`` and
        ``mlat`` when present).
    altitude_km : float
        Altitude of the feet, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    cones : xarray.Dataset, keyword-only, optional
        The partition of ``ds`` (or its summary) when already computed: its
        ``blc_local``, ``blc_equatorial``, ``b_local``, ``b_min`` and ``L`` are
        used instead of partitioning again. It must come from the same model and
        altitude.
    species : str or Species, keyword-only
        Particle species of the flux.
    loss_time : {"half_bounce", "quarter_bounce"}, keyword-only
        Loss time :math:`\tau` (:func:`pitch_angle_diffusion`).
    filling_band_deg : float, keyword-only
        Width :math:`\Delta` of the band outside the cone (bins).
    interval_sigma : float, keyword-only
        Half-width :math:`k` of the ratio interval in sigmas (2: about 95 per
        cent for Gaussian errors).
    allow_negative : bool, keyword-only
        Accept negative flux values (as in partition).
    prepared : beltkit.pad.conventions.Prepared, keyword-only, optional
        The dataset's validation (:func:`beltkit.pad.conventions.check`, e.g.
        made once on a whole file of which ``ds`` is a slab), trusted instead
        of validating ``ds`` again.

    Returns
    -------
    xarray.Dataset
        Per time and energy: ``diffusion_ratio`` and ``diffusion_ratio_err``,
        ``z0`` with ``z0_lower``/``z0_upper``, ``diffusion_coefficient`` (s-1)
        with ``_lower``/``_upper`` (``inf`` where unbounded), ``loss_time`` (s),
        ``strong_diffusion_lifetime`` (s), ``lifetime`` with ``_lower``/``_upper``
        (s), ``diffusion_regime`` (:data:`REGIME_MEANINGS`) and
        ``diffusion_flag`` (:data:`FLAG_MEANINGS`); per time
        ``diffusion_loss_cone`` (the equatorial :math:`\alpha_0`, degree) and
        ``diffusion_field_ratio`` (:math:`B_{min}/B_{local}`). The
        conventions are in the attributes.

    Notes
    -----
    * A ratio above 1 beyond its interval: flag 1, all NaN (the model does not
      apply). An interval reaching 1: ``z0_lower`` = 0 and ``D_upper`` = inf
      (flag 2; ``z0`` is NaN when the ratio itself is at least 1). An interval
      reaching the model's limit for :math:`z_0 \to \infty`: ``z0_upper`` = inf
      (flag 4; ``z0`` NaN when the ratio itself is there).
    * Loss cone unresolved (flag 8, all NaN): less than half of the cone
      mean's solid angle is inside the cone, or less than half of the
      reference mean's is outside.
    * ``lifetime`` = :math:`\tau_{SD}` / :func:`cone_mean_ratio` (:math:`z_0`):
      the flux tube's content over the loss rate of the steady state, taking
      the trapped flux at the level of the cone edge; a lower bound where the
      distribution rises away from the cone. It tends to :math:`\tau_{SD}` for
      :math:`z_0 \to 0`.
    * The bounce period and :math:`\tau_{SD}` are those of the centred dipole at
      the sample's ``L`` with the model's :math:`\alpha_0`.
    * Kennel & Petschek (1966); see ``docs/diffusion.md``.
    """
    frac = loss_fraction(loss_time)
    k_sigma = float(interval_sigma)
    if not k_sigma > 0:
        raise PhysicsError(f"argument 'interval_sigma' must be positive; got {interval_sigma!r}")
    part_model = None if (isinstance(model, str) and model == "auto") else model
    prep = prepared if prepared is not None else _prepared(ds, part_model, allow_negative)
    c = _cones_from(ds, part_model, altitude_km, cones)
    x, s = _flux_arrays(ds, prep)
    a1, a2, cn, cd, r, sr = _measurement(ds, prep, c, x, s, float(filling_band_deg))
    rtab, share_num, share_den = _response_tables(a1, a2, cn, cd, c)
    n, n_e = r.shape
    r_inf = rtab[:, -1:]
    with np.errstate(invalid="ignore"):
        unknown = ~np.isfinite(c["blc_equatorial"]) | ~np.isfinite(c["L"])
        unresolved = ~((share_num >= 0.5) & (share_den <= 0.5)) & ~unknown
        no_data = ~np.isfinite(r) | unknown[:, None]
        no_err = ~np.isfinite(sr) & ~no_data
        ks = np.where(no_err, 0.0, k_sigma * sr)
        r_lo, r_hi = r - ks, r + ks
        above = r_lo > 1.0
        upper_only = (r_hi >= rtab[:, :1]) & ~above
        lower_only = (r_lo <= r_inf) & ~above
    zs = _invert_tables(np.concatenate([r, r_hi, r_lo], axis=1), _table_y(rtab))
    z, z_from_hi, z_from_lo = zs[:, :n_e], zs[:, n_e:2 * n_e], zs[:, 2 * n_e:]
    # beyond the table's largest z0 (1e3) only that lower bound is known
    z_lo = np.where(upper_only, 0.0, np.where(r_hi <= r_inf, np.exp(_T_GRID[-1]), z_from_hi))
    z_hi = np.where(lower_only, np.inf, z_from_lo)
    z = np.where((r >= rtab[:, :1]) | (r <= r_inf), np.nan, z)
    dead = above | unresolved[:, None] | no_data
    z, z_lo, z_hi = (np.where(dead, np.nan, v) for v in (z, z_lo, z_hi))
    flag = (np.where(above, 1, 0) | np.where(upper_only & ~dead, 2, 0)
            | np.where(lower_only & ~dead, 4, 0) | np.where(unresolved[:, None], 8, 0)
            | np.where(no_data, 16, 0) | np.where(no_err, 32, 0)).astype(np.int16)

    e = prep.energy_kev[None, :]
    L = c["L"][:, None]
    a0_deg = c["blc_equatorial"][:, None]
    good = np.isfinite(L) & np.isfinite(a0_deg) & (L >= 1.0)
    Ls = np.where(good, L, 2.0)
    a0s = np.where(good, a0_deg, 45.0)
    tau = np.where(good, frac * np.asarray(motion.bounce_period(e, Ls, a0s, species)), np.nan)
    sin2 = np.sin(np.radians(a0s)) ** 2
    alt = float(altitude_km)
    Lc = np.maximum(Ls, 1.0 + alt / R_E_KM)
    tau_sd = np.where(good, tau_sd_seconds(Lc, e, species, sin2, alt), np.nan)
    a0r2 = np.radians(a0s) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        d = a0r2 / (z * z * tau)
        d_lo = a0r2 / (z_hi * z_hi * tau)
        d_hi = a0r2 / (z_lo * z_lo * tau)

        def life(zz):
            return np.where(np.isinf(zz), np.inf, tau_sd / np.asarray(cone_mean_ratio(
                np.where(np.isfinite(zz), zz, 0.0))))

        lt, lt_lo, lt_hi = life(z), life(z_lo), life(z_hi)
    lt, lt_lo, lt_hi = (np.where(np.isnan(zz), np.nan, v)
                        for zz, v in ((z, lt), (z_lo, lt_lo), (z_hi, lt_hi)))
    regime = np.where(dead, 0, regime_codes(z, z_lo, z_hi)).astype(np.int8)

    lt_text = loss_time_text(loss_time)
    dims = ("time", "energy")
    out = {
        "diffusion_ratio": (dims, r, _attrs(
            "measured loss-cone filling ratio inverted for z0 (cone mean over reference mean)",
            "1", ancillary_variables="diffusion_ratio_err")),
        "diffusion_ratio_err": (dims, sr, _attrs(
            "uncertainty (1 sigma) of diffusion ratio", "1")),
        "z0": (dims, z, _attrs("loss-cone parameter z0 = alpha0 / sqrt(D tau)", "1")),
        "z0_lower": (dims, z_lo, _attrs("lower end of the z0 interval", "1")),
        "z0_upper": (dims, z_hi, _attrs("upper end of the z0 interval", "1")),
        "diffusion_coefficient": (dims, d, _attrs(
            f"bounce-averaged pitch-angle diffusion coefficient at the loss-cone edge "
            f"(loss time: {lt_text})", "s-1")),
        "diffusion_coefficient_lower": (dims, d_lo, _attrs(
            "lower end of the diffusion coefficient interval", "s-1")),
        "diffusion_coefficient_upper": (dims, d_hi, _attrs(
            "upper end of the diffusion coefficient interval", "s-1")),
        "loss_time": (dims, np.broadcast_to(tau, r.shape).copy(), _attrs(
            f"loss time in the loss cone: {lt_text}", "s")),
        "strong_diffusion_lifetime": (dims, np.broadcast_to(tau_sd, r.shape).copy(), _attrs(
            "strong-diffusion lifetime: emptying time of an isotropic flux tube through both "
            "feet", "s")),
        "lifetime": (dims, lt, _attrs(
            "loss lifetime: strong-diffusion lifetime over the cone-mean filling of z0", "s")),
        "lifetime_lower": (dims, lt_lo, _attrs("lower end of the lifetime interval", "s")),
        "lifetime_upper": (dims, lt_hi, _attrs("upper end of the lifetime interval", "s")),
        "diffusion_regime": (dims, regime, regime_attrs()),
        "diffusion_flag": (dims, flag, {
            "long_name": "pitch-angle diffusion quality flags",
            "flag_masks": np.array(list(FLAG_MEANINGS), dtype=np.int16),
            "flag_meanings": " ".join(FLAG_MEANINGS.values())}),
        "diffusion_loss_cone": (("time",), c["blc_equatorial"], _attrs(
            "equatorial bounce loss cone alpha0 used for z0", "degree")),
        "diffusion_field_ratio": (("time",), c["b_min"] / c["b_local"], _attrs(
            "minimum field on the line over the field at the sample (maps local pitch "
            "angles to the equator)", "1")),
    }
    energy = xr.Variable("energy", prep.energy_kev, {"units": "keV",
                                                    "long_name": "kinetic energy"})
    tvar = ds["time"].variable.copy(deep=False)
    tvar.attrs = {"standard_name": "time", "long_name": "time (UTC)", **tvar.attrs}
    res = xr.Dataset(out, coords={"time": tvar, "energy": energy})
    res.attrs = {
        "title": "beltkit pitch-angle diffusion from the loss-cone filling",
        "beltkit_field_model": str(getattr(model, "name", model)),
        "footpoint_altitude_km": alt,
        "beltkit_loss_time": loss_time,
        "beltkit_interval_sigma": k_sigma,
        "beltkit_diffusion_ratio": (
            "pitch-angle bins: mean flux in the bounce loss cone over the mean in "
            f"[blc, blc + {float(filling_band_deg):g} deg]; telescopes: look most inside "
            "the cone over look least inside it; both modelled with their bands mapped to "
            "the equator"),
        "beltkit_species": str(getattr(species, "name", species)),
        "beltkit_regime_boundary": "z0 = 1 (common practice)",
    }
    return res

