"""A plain numpy reference of the pitch-angle partition, for the tests of the compiled engine.

Formerly beltkit's ``engine="numpy"``; the package now has one engine (the
numba kernels of :mod:`beltkit.pad._kernels`), and this reference lives with
the tests that compare the engine against it. It follows the formulas of the
module docstring of :mod:`beltkit.pad.partition` (exact zone solid angles of
each bin inside each population, spherical geometry; first-order error
propagation) with whole-array numpy operations, in float64 throughout.

:func:`reference_kernel` partitions one block of samples;
:func:`reference_partition` runs it on a whole convention-following dataset
(canonical units), with the per-sample loss cones of a partition of the same
dataset (the loss cones are not what is compared).
"""

from __future__ import annotations

import numpy as np

from beltkit.pad.geometry import edge_cosines, range_weights, telescope_weights
from beltkit.pad.outputs import NAMES, hemisphere_row, output_names
from beltkit.units import FLUX_UNITS

__all__ = ["TOL_SR", "reference_kernel", "reference_partition"]

#: solid angles (sr) below this count as empty (the rounding crumbs of cos near 90 deg);
#: the same threshold as the compiled kernel's
TOL_SR = 1e-12
_FOUR_PI = 4.0 * np.pi
_TWO_PI = 2.0 * np.pi


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
        w64 = range_weights(geom["cos_a1"], geom["cos_a2"], cos_edges, geom["folded"])
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
    omega = np.where(omega > TOL_SR, omega, 0.0)
    names = output_names(s is not None, hemi)
    out = np.empty((len(names), n, n_e), dtype=dtype)
    nan = dtype.type(np.nan)
    hrow = hemisphere_row(s is not None, hemi)
    with np.errstate(invalid="ignore", divide="ignore"):
        sampled = m > TOL_SR
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


def reference_partition(ds, out, *, filling_band_deg=10.0):
    """Return ``{name: (time, energy) array}`` of the reference on a whole dataset.

    ``ds`` follows docs/conventions.md in canonical units (flux and
    ``flux_err`` in cm-2 s-1 sr-1 keV-1, angles in degree); ``out`` is a
    partition of it, whose loss cones (``blc_local``, ``dlc_local``,
    ``loss_cone_north``, ``loss_cone_south``) are used, and whose outputs
    decide whether the losses per hemisphere are computed. Telescope looks
    without a value at an energy leave that energy's union of bands to the
    other looks (docs/conventions.md, section 5): each energy is partitioned
    with the looks that have a value there.
    """
    assert ds["flux"].attrs["units"] == FLUX_UNITS, "the reference takes canonical units"
    telescope = "look" in ds["flux"].dims
    adim = "look" if telescope else "pitch_angle"
    order = ("time", "energy", adim)
    x = np.asarray(ds["flux"].transpose(*order).values)
    s = (np.asarray(ds["flux_err"].transpose(*order).values) if "flux_err" in ds else None)
    cones = tuple(np.asarray(out[k].values, dtype=float)
                  for k in ("blc_local", "dlc_local", "loss_cone_north", "loss_cone_south"))
    opts = {"band_deg": float(filling_band_deg), "hemispheres": "flux_lost_north" in out}
    if telescope:
        look = np.asarray(ds["look_pitch_angle"].transpose("time", "look").values, dtype=float)
        geom = {"kind": "telescope",
                "half": np.asarray(ds["look_half_angle"].values, dtype=float)}
        parts = []
        for e in range(x.shape[1]):
            xe = x[:, e:e + 1, :]
            lk = np.where(np.isfinite(xe[:, 0, :]), look, np.nan)
            parts.append(reference_kernel(xe, None if s is None else s[:, e:e + 1, :], cones,
                                          lk, geom=geom, opts=opts))
        res = np.concatenate(parts, axis=2)
    else:
        edges = np.radians(np.asarray(ds["pitch_angle_bnds"].values, dtype=float))
        flag = str(ds["pitch_angle"].attrs.get("folded", "false")).strip().lower()
        folded = flag in ("true", "yes", "1")
        geom = {"kind": "bins", "cos_a1": np.cos(edges[:, 0]), "cos_a2": np.cos(edges[:, 1]),
                "folded": folded}
        res = reference_kernel(x, s, cones, None, geom=geom, opts=opts)
    names = output_names(s is not None, opts["hemispheres"])
    return dict(zip(names, res))
