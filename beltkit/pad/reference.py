"""The numpy reference implementation of the pitch-angle partition (one time block).

:mod:`beltkit.pad.partition` states the formulas and runs either this kernel or
the compiled one in :mod:`beltkit.pad._kernels`, which must agree with it to
float rounding. Here: the names and order of the output rows, the exact
solid-angle weights of bins and telescope bands in each population, and the
kernel itself.
"""

from __future__ import annotations

import numpy as np

from . import _kernels
from .geometry import look_bands

__all__ = [
    "ERR_NAMES",
    "HEMI_ERR_NAMES",
    "HEMI_NAMES",
    "NAMES",
    "POPULATIONS",
    "bin_weights",
    "edge_cosines",
    "hemisphere_row",
    "n_outputs",
    "output_names",
    "range_weights",
    "reference_kernel",
    "telescope_weights",
]

#: The three populations, in the order of the output rows.
POPULATIONS = ("precipitating", "quasi_trapped", "trapped")
#: Output rows of every partition; then the uncertainties (``ERR_NAMES``) and the losses
#: per hemisphere (``HEMI_NAMES``, ``HEMI_ERR_NAMES``) when asked for.
NAMES = (
    [f"flux_{p}" for p in POPULATIONS] + ["omni_flux"]
    + [f"fraction_{p}" for p in POPULATIONS]
    + [f"coverage_{p}" for p in POPULATIONS]
    + [f"solid_angle_{p}" for p in POPULATIONS]
    + ["loss_cone_filling", "partition_flag"]
)
ERR_NAMES = [f"flux_{p}_err" for p in POPULATIONS] + ["omni_flux_err"] + [
    f"fraction_{p}_err" for p in POPULATIONS] + ["loss_cone_filling_err"]
_HEMIS = ("north", "south")
HEMI_NAMES = [f"flux_lost_{h}" for h in _HEMIS] + [f"fraction_lost_{h}" for h in _HEMIS]
HEMI_ERR_NAMES = [f"{name}_err" for name in HEMI_NAMES]
_FOUR_PI = 4.0 * np.pi
_TWO_PI = 2.0 * np.pi


# ------------------------------------------------------------------ weights


#: weight columns: 0-2 populations, 3 the band outside the loss cone, 4 the whole bin,
#: 5 lost north, 6 lost south
_N_W = 7


def range_weights(cos_a1, cos_a2, cos_edges, folded):
    """Solid-angle weights (n, P, 7) of intervals [a1, a2] (cosines, (P,) or (n, P)).

    Columns: precipitating, quasi-trapped, trapped, band outside the loss cone,
    whole interval, lost north ``[0, lcn]``, lost south ``[180 - lcs, 180]``.
    """
    cb, cd, co, cn, cs = (c[:, None] for c in cos_edges)  # cosines of the edges, (n, 1)

    def cum(c):  # solid angle of each interval below the pitch angle arccos(c)
        return _TWO_PI * (cos_a1 - np.clip(c, cos_a2, cos_a1))

    full = _TWO_PI * (cos_a1 - cos_a2)
    c_b, c_d, c_o = cum(cb), cum(cd), cum(co)
    c_bm, c_dm, c_om = cum(-cb), cum(-cd), cum(-co)
    c_n, c_sm = cum(cn), cum(-cs)
    w = np.empty(np.broadcast_shapes(c_b.shape, np.shape(full)) + (_N_W,))
    w[..., 0] = c_b + full - c_bm
    w[..., 1] = c_d - c_b + c_bm - c_dm
    w[..., 2] = c_dm - c_d
    w[..., 3] = c_o - c_b + c_bm - c_om
    w[..., 4] = full
    w[..., 5] = c_n
    w[..., 6] = full - c_sm
    if folded:  # each folded bin also stands for its mirror image [180 - a2, 180 - a1]
        w[..., :5] *= 2.0  # the populations are symmetric
        w[..., 5] += full - cum(-cn)  # mirror image below lcn
        w[..., 6] += cum(cs)  # mirror image above 180 - lcs
    np.maximum(w, 0.0, out=w)
    return w


def bin_weights(cos_a1, cos_a2, cos_edges, folded):
    """Solid-angle weights (n, P, 7) of fixed pitch-angle bins (see :func:`range_weights`)."""
    return range_weights(cos_a1, cos_a2, cos_edges, folded)


def telescope_weights(look_deg, half_deg, cos_edges):
    """Weights (n, K, 7) of telescope looks: the union of their swept bands.

    Each elementary interval of the union (:func:`beltkit.pad.geometry.look_bands`)
    is split among the populations like a bin, and its solid angles are shared
    among the looks that cover it in proportion to their band solid angles.
    """
    a1, a2, share = look_bands(look_deg, half_deg)  # (n, M), (n, M), (n, M, K)
    wm = range_weights(np.cos(np.radians(a1)), np.cos(np.radians(a2)), cos_edges, False)
    return np.einsum("nmk,nmp->nkp", share, wm)


def edge_cosines(blc, dlc, outer, lcn, lcs):
    """Return the cosines of the loss-cone edges (degree): bounce, drift, band, north, south."""
    return tuple(np.cos(np.radians(np.asarray(a, dtype=float)))
                 for a in (blc, dlc, outer, lcn, lcs))


# ------------------------------------------------------------------ kernel


def output_names(with_err, hemispheres):
    """Names of the output rows, in the order the kernels write them."""
    names = list(NAMES) + (list(ERR_NAMES) if with_err else [])
    if hemispheres:
        names += HEMI_NAMES + (HEMI_ERR_NAMES if with_err else [])
    return names


def n_outputs(with_err, hemispheres):
    """Return the number of output rows (see :func:`output_names`)."""
    return len(output_names(with_err, hemispheres))


def hemisphere_row(with_err, hemispheres):
    """First row of the hemisphere outputs (-1 without them)."""
    return len(NAMES) + (len(ERR_NAMES) if with_err else 0) if hemispheres else -1


def reference_kernel(x, s, cones, look, *, geom, opts):
    """Partition one time block.

    x : (n, E, P) flux, already scaled and masked; s : (n, E, P) 1-sigma or None;
    cones : (blc, dlc, lcn, lcs), each (n,) degrees; look : (n, K) look pitch angles
    or None. Returns (n_out, n, E).
    """
    out_dtype = x.dtype
    x = np.asarray(x, dtype=np.float64)  # reference path: float64 throughout
    s = None if s is None else np.asarray(s, dtype=np.float64)
    dtype = x.dtype
    n, n_e, _ = x.shape
    band = opts["band_deg"]
    hemi = opts.get("hemispheres", True)
    blc, dlc, lcn, lcs = (np.asarray(c, dtype=float) for c in cones)
    dlc = np.maximum(dlc, blc)
    outer = np.minimum(blc + band, 90.0)
    cos_edges = edge_cosines(blc, dlc, outer, lcn, lcs)
    if geom["kind"] == "bins":
        w64 = bin_weights(geom["cos_a1"], geom["cos_a2"], cos_edges, geom["folded"])
    else:
        w64 = telescope_weights(np.asarray(look, dtype=float), geom["half"], cos_edges)
    w64[np.isnan(blc)] = np.nan
    w = w64.astype(dtype, copy=False)
    finite = np.isfinite(x)
    all_finite = bool(finite.all())
    x0 = x if all_finite else np.where(finite, x, dtype.type(0))
    r = np.matmul(x0, w)  # (n, E, 7)
    if all_finite:
        m = np.broadcast_to(w.sum(axis=1)[:, None, :], r.shape)
    else:
        m = np.matmul(finite.astype(dtype), w)
    cb, cd, co, cn, cs = cos_edges
    omega = np.stack([_FOUR_PI * (1.0 - cb), _FOUR_PI * (cb - cd), _FOUR_PI * cd,
                      _FOUR_PI * (cb - co), _FOUR_PI + 0 * cb, _TWO_PI * (1.0 - cn),
                      _TWO_PI * (1.0 - cs)], axis=-1)[:, None, :]  # (n, 1, 7)
    omega = np.where(omega > _kernels.TOL_SR, omega, 0.0)
    names = output_names(s is not None, hemi)
    out = np.empty((len(names), n, n_e), dtype=dtype)
    nan = dtype.type(np.nan)
    hrow = hemisphere_row(s is not None, hemi)
    with np.errstate(invalid="ignore", divide="ignore"):
        sampled = m > _kernels.TOL_SR
        nonempty = np.broadcast_to(omega > 0, sampled.shape)
        pops = np.where(nonempty, np.where(sampled, r, nan), 0.0)
        cov = np.where(nonempty, np.minimum(m / np.where(omega > 0, omega, 1), 1), 1.0)
        total = pops[..., 0] + pops[..., 1] + pops[..., 2]
        good_total = total > 0
        frac = np.where(good_total[..., None], pops / total[..., None], nan)
        out[0:3] = np.moveaxis(pops[..., :3], -1, 0)
        out[3] = np.where(m[..., 4] > 0, r[..., 4], nan)
        out[4:7] = np.moveaxis(frac[..., :3], -1, 0)
        out[7:10] = np.moveaxis(cov[..., :3], -1, 0)
        out[10:13] = np.moveaxis(m[..., :3], -1, 0)
        if hemi:
            out[hrow:hrow + 2] = np.moveaxis(pops[..., 5:7], -1, 0)
            out[hrow + 2:hrow + 4] = np.moveaxis(frac[..., 5:7], -1, 0)
        mean_in = r[..., 0] / m[..., 0]
        mean_out = r[..., 3] / m[..., 3]
        fill_ok = sampled[..., 0] & nonempty[..., 0] & sampled[..., 3] & (mean_out != 0)
        out[13] = np.where(fill_ok, mean_in / mean_out, nan)
        flag = np.zeros((n, n_e), dtype=np.int16)
        for k in range(3):
            flag |= np.where(nonempty[..., k] & ~sampled[..., k], 1 << k, 0).astype(np.int16)
        partial = ((cov[..., :3] < 1 - 1e-6) & (cov[..., :3] > 0)).any(axis=-1)
        flag |= np.where(partial, 8, 0).astype(np.int16)
        flag |= np.where((x < 0).any(axis=-1), 16, 0).astype(np.int16)
        flag |= np.where(~(m[..., 4] > 0), 32, 0).astype(np.int16)
        unknown = np.isnan(blc) | np.isnan(dlc)
        flag[unknown] = 64
        out[14] = flag
        if s is not None:
            s2 = np.where(finite, s * s, dtype.type(0))
            we = np.empty(w.shape[:2] + (13,), dtype=dtype)
            we[..., 0:3] = w[..., 0:3] ** 2
            we[..., 3] = w[..., 4] ** 2
            we[..., 4] = w[..., 3] ** 2
            we[..., 5:8] = w[..., 0:3] * w[..., 4:5]
            we[..., 8] = w[..., 0] * w[..., 3]
            we[..., 9:11] = w[..., 5:7] ** 2
            we[..., 11:13] = w[..., 5:7] * w[..., 4:5]
            v = np.matmul(s2, we)  # (n, E, 13)
            base = len(NAMES)
            for k in range(3):
                out[base + k] = np.where(nonempty[..., k],
                                         np.where(sampled[..., k], np.sqrt(v[..., k]), nan), 0.0)
            out[base + 3] = np.where(m[..., 4] > 0, np.sqrt(v[..., 3]), nan)
            # d f_P / d j_i = (Omega_iP - f_P Omega_i) / F_tot
            for k in range(3):
                f = frac[..., k]
                var = (v[..., k] - 2 * f * v[..., 5 + k] + f * f * v[..., 3]) / (total * total)
                out[base + 4 + k] = np.where(good_total, np.sqrt(np.maximum(var, 0)), nan)
            # rho = r0 * kf with kf = m3 / (m0 r3): d rho/d r0 = kf, d rho/d r3 = -rho/r3
            # (no division by r0, so an empty loss cone keeps its error bar)
            kf = np.where(fill_ok, m[..., 3] / (m[..., 0] * r[..., 3]), nan)
            q = out[13] / r[..., 3]
            var = kf * kf * v[..., 0] + q * q * v[..., 4] - 2 * kf * q * v[..., 8]
            out[base + 7] = np.where(fill_ok, np.sqrt(np.maximum(var, 0)), nan)
            if hemi:
                for h in range(2):
                    k = 5 + h
                    out[hrow + 4 + h] = np.where(
                        nonempty[..., k], np.where(sampled[..., k], np.sqrt(v[..., 9 + h]), nan),
                        0.0)
                    f = frac[..., k]
                    var = ((v[..., 9 + h] - 2 * f * v[..., 11 + h] + f * f * v[..., 3])
                           / (total * total))
                    out[hrow + 6 + h] = np.where(good_total, np.sqrt(np.maximum(var, 0)), nan)
    # unknown loss cone: nothing can be said of the populations (as in the compiled engine)
    out[:14, unknown] = nan
    out[15:, unknown] = nan
    return out.astype(out_dtype, copy=False)
