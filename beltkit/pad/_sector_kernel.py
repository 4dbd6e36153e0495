r"""The compiled kernel of :func:`beltkit.pad.bin_sectors` and its driver over time blocks.

One pass over the samples: for each sample the looks' pitch-angle bands
(module :mod:`beltkit.pad.sectors`: geometry), their solid-angle weights in
the bins as one list (look, bin, weight), the fed looks in order of their
bands (to find the look pairs of the gyrotropy statistic and the union of the
bands), then the sums over that list with the energies innermost, and the
outputs. The geometry is computed once per sample, not per energy; the
weights do not depend on energy. Sums are accumulated in float64 in the
order of the weight list (looks ascending), so the results do not depend on
the block length or the number of threads.

Speed notes (86,400 samples x 8 energies x 32 looks into 12 bins, int32
counts, spin form; CPU time of one thread, minimum of 7, on the 2-core
development machine, where one ``np.einsum("tesd,sd->te")`` over the counts
takes 17 ms): the kernel takes about 187 ms (it took 270 ms before the
changes listed here), of which the geometry -- bands, weights, order, pairs,
coverage -- about 63 ms (band edges 13, weights 35, order 6, pair search 12,
coverage 7) and the values about 125 ms (the (look, energy) copy 17, the two
sums over the weight list 50, the pair statistic 12, flux and error 10, the
writes of the four (time, energy, bin) outputs 30). The floor of one pass that
reads the counts and writes those four outputs is 10-20 ms (1x einsum); the
sums are about 1,600 multiply-adds per sample (101 (look, bin) weights x 8
energies x 2) and the error 96 square roots per sample, which the compiler
leaves mostly scalar (runtime-length energy loops of 8). What makes it this
fast: the looks are sorted by insertion from the previous sample's order (the
field turns little between samples, so the pass is nearly linear; the order
is total -- band edge, then look -- so the result is the one a sort from
scratch gives); each look's first bin is searched from the previous sample's
(the answer is unique, so it does not depend on the block); the band edges
and their inverse widths are computed in one loop over the looks without a
branch; the search for pairs stops as soon as no later band can reach the
similarity (a partner needs an overlap of at least ``pair_min`` times the
band, so its upper edge must lie within the top ``1 - pair_min`` of it);
integer counts are read as they are (no float copy of the block) and checked
for negative values in a pass of their own; the denominator is :math:`G_e \sum_k
w_{ki}` when the exposure is the same for every look; flux and error of all
(bin, energy) are computed in one pass without a branch and written
energy-major.

Measured and not kept (one-thread CPU time unchanged within the noise, about
+-3 %, or worse): the energies padded to lanes of 8 (fixed-length inner
loops, all loads written out before the stores, unsigned indices), max(counts,
1) stored once per sample, min/max written as conditional expressions, the
NaN selection moved into the flux pass, blocks of 1,024-8,192 samples (4,096
is fastest). On its own the counts sum over the weight list (86,400 samples
x 98 weights x 8 energies) takes 26 ms, about one clock cycle per
multiply-add-store: the loop is limited by its loads and stores, not by the
arithmetic. Outside the kernel, bin_sectors spends about 9 ms (reading the
input 2.4, look geometry 3.2, the output dataset 3.1).
"""

from __future__ import annotations

import math

import numpy as np

from .._threads import map_slices
from ..errors import ConventionError
from .sector_input import factor_array

__all__ = ["BLOCK", "bin_block", "run_blocks"]

#: samples per block (one task of the thread pool; the input is read one block at a time)
BLOCK = 4096
_JIT = {}
#: value types the kernel reads directly (one compiled variant each)
_DIRECT = (np.dtype(np.int32), np.dtype(np.int64), np.dtype(np.float32), np.dtype(np.float64))


def _bin_block_py(x, g, v, has_v, is_counts, mode, bvec, look, cp0, sp0, cp1, sp1, ph0, ph1,
                 cth, sth, cdel, sdel, cedges, z, tol, pair_min, flux, err, cnt, nlook, chi,
                 dof, flag, cover, bcov, bands):
    """Bin one block of times (module docstring); fill the outputs in place.

    Return the number of negative values met (counts must be >= 0).
    """
    n_t, n_e, n_k = x.shape
    n_i = cedges.shape[0] - 1
    nan = np.nan
    two_pi = 2.0 * math.pi
    inv_two_pi = 1.0 / two_pi
    # per look: band edges as cosines (upper = cos of the lower pitch angle), fed or not
    ulo = np.empty(n_k)
    uhi = np.empty(n_k)
    blo = np.empty(n_k)
    bhi = np.empty(n_k)
    inv = np.empty(n_k)
    fed = np.zeros(n_k, np.bool_)
    # the non-zero weights of a sample as one list (look, bin, weight), in look order
    ek = np.zeros(n_k * n_i, np.int64)
    ei = np.zeros(n_k * n_i, np.int64)
    ew = np.zeros(n_k * n_i)
    order = np.zeros(n_k, np.int64)
    perm = np.arange(n_k)
    key = np.zeros(n_k)
    rh = np.zeros(n_k)
    rl = np.zeros(n_k)
    pa = np.zeros(n_k * (n_k - 1) // 2 + 1, np.int64)
    pb = np.zeros(n_k * (n_k - 1) // 2 + 1, np.int64)
    nnb = np.zeros(n_i, np.int64)
    wsum = np.zeros(n_i)
    # per look: its first bin at the previous sample (the search for the next starts there)
    first = np.zeros(n_k, np.int64)
    # the sample's values with energies innermost (look, energy)
    an = np.zeros((n_i, n_e))
    av = np.zeros((n_i, n_e))
    ad = np.zeros((n_i, n_e))
    ge = np.zeros(n_e)
    n_ie = n_i * n_e
    an_f = an.reshape(n_ie)
    av_f = av.reshape(n_ie)
    ad_f = ad.reshape(n_ie)
    fo = np.zeros(n_ie)
    eo = np.zeros(n_ie)
    xt = np.zeros((n_k, n_e))
    vt = np.zeros((n_k, n_e))
    gt = np.zeros((n_k, n_e))
    ct = np.zeros((n_k, n_e))
    gv = np.zeros((n_k, n_e))
    mt = np.zeros((n_k, n_e), np.int64)
    num = np.zeros((n_i, n_e))
    den = np.zeros((n_i, n_e))
    var = np.zeros((n_i, n_e))
    nn = np.zeros((n_i, n_e), np.int64)
    c2 = np.zeros(n_e)
    mp = np.zeros(n_e, np.int64)
    nv = np.zeros(n_e, np.int64)
    g_time = g.shape[0] > 1
    g_energy = g.shape[1] > 1
    # exposure the same for every look (per time and energy at most): the denominator is
    # G_e sum_k w_ki, one sum of weights per bin instead of one per bin and energy
    g_flat = True
    for a in range(g.shape[0]):
        for b in range(g.shape[1]):
            for k in range(1, n_k):
                if g[a, b, k] != g[a, b, 0]:
                    g_flat = False
    have_g = False
    has_err = has_v or is_counts
    n_neg = 0
    for t in range(n_t):
        # ---- geometry: each look's band [cos a_hi, cos a_lo] -------------------------
        bs, b1, b2 = bvec[t, 0], bvec[t, 1], bvec[t, 2]
        if mode == 0:
            tl = t if look.shape[0] > 1 else 0
            for k in range(n_k):
                u = -(look[tl, k, 0] * bs + look[tl, k, 1] * b1 + look[tl, k, 2] * b2)
                ulo[k] = u
                uhi[k] = u
        else:
            rho = math.sqrt(b1 * b1 + b2 * b2)
            phib = math.atan2(b2, b1)
            phin = phib + math.pi
            tp = t if cp0.shape[0] > 1 else 0
            for k in range(n_k):
                c0 = b1 * cp0[tp, k] + b2 * sp0[tp, k]  # rho cos(phi0 - phib)
                c1 = b1 * cp1[tp, k] + b2 * sp1[tp, k]
                hi = max(c0, c1)
                lo = min(c0, c1)
                if math.ceil((ph0[tp, k] - phib) * inv_two_pi) * two_pi + phib <= ph1[tp, k]:
                    hi = rho
                if math.ceil((ph0[tp, k] - phin) * inv_two_pi) * two_pi + phin <= ph1[tp, k]:
                    lo = -rho
                ulo[k] = -(sth[k] * hi + cth[k] * bs)
                uhi[k] = -(sth[k] * lo + cth[k] * bs)
        for k in range(n_k):  # no branch: one vector loop over the looks
            umin = ulo[k]
            umax = uhi[k]
            # NaN geometry: the look samples nothing
            nanu = 0.0 if umin == umin else nan
            nanu = nanu if umax == umax else nan
            umin = min(max(umin, -1.0), 1.0)
            umax = min(max(umax, -1.0), 1.0)
            # band edges as cosines: cos(alpha_min - delta) and cos(alpha_max + delta)
            cd = cdel[k]
            clo = 1.0 if umax >= cd else umax * cd + math.sqrt(1.0 - umax * umax) * sdel[k]
            chi_ = -1.0 if umin <= -cd else umin * cd - math.sqrt(1.0 - umin * umin) * sdel[k]
            blo[k] = clo + nanu
            bhi[k] = chi_ + nanu
            inv[k] = 1.0 / (clo - chi_)
        if bands.shape[1] == n_k:
            for k in range(n_k):
                bands[t, k, 0] = blo[k]
                bands[t, k, 1] = bhi[k]
        # ---- weights: the band's solid-angle fraction in each bin ---------------------
        n_nz = 0
        n_fed = 0
        for i in range(n_i):
            nnb[i] = 0
            wsum[i] = 0.0
        for k in range(n_k):
            clo = blo[k]
            chi_ = bhi[k]
            om = clo - chi_
            f = False
            if om > 0.0:
                inv_om = inv[k]
                # first bin not wholly above the band (the edge cosines fall with i, so
                # this is the first i with cedges[i + 1] < clo, found from last sample's)
                i = first[k]
                while i < n_i and cedges[i + 1] >= clo:
                    i += 1
                while i > 0 and cedges[i] < clo:
                    i -= 1
                first[k] = i
                while i < n_i and cedges[i] > chi_:
                    ov = min(clo, cedges[i]) - max(chi_, cedges[i + 1])
                    if ov > 0.0:
                        ek[n_nz] = k
                        ei[n_nz] = i
                        ew[n_nz] = ov * inv_om
                        wsum[i] += ov * inv_om
                        nnb[i] += 1
                        n_nz += 1
                        f = True
                    i += 1
            fed[k] = f
            if f:
                n_fed += 1
        # ---- the fed looks in order of decreasing upper band cosine, ties by look --------
        # (a total order, so insertion from the previous sample's order -- nearly sorted,
        # the field turns little between samples -- gives the same result as from scratch)
        for k in range(n_k):
            key[k] = blo[k] if fed[k] else -np.inf
        for a in range(1, n_k):
            kk = perm[a]
            kv = key[kk]
            b = a - 1
            while b >= 0:
                kb = perm[b]
                vb = key[kb]
                if vb < kv or (vb == kv and kb > kk):
                    perm[b + 1] = kb
                    b -= 1
                else:
                    break
            perm[b + 1] = kk
        m = n_fed
        for a in range(m):
            order[a] = perm[a]
        # pairs of looks whose bands nearly coincide (similarity >= pair_min); in that
        # order, once a band starts below the end of band a, no later one overlaps a
        n_pair = 0
        if n_e > 0:
            for a in range(m):
                ka = order[a]
                hia = blo[ka]
                loa = bhi[ka]
                oma = pair_min * (hia - loa)
                # a partner needs ov >= pair_min * (hia - loa) with ov <= hib - loa
                # (ov^2 >= pair_min Om_a Om_b and ov <= Om_b), and hib only falls from here
                stop = max(loa, loa + oma - 1e-9)
                for b in range(a + 1, m):
                    kb = order[b]
                    hib = blo[kb]
                    if hib <= stop:
                        break
                    lob = bhi[kb]
                    ov = hib - max(loa, lob)
                    if ov * ov >= oma * (hib - lob):
                        pa[n_pair] = min(ka, kb)
                        pb[n_pair] = max(ka, kb)
                        n_pair += 1
        # solid angle of the union of the bands (cosine length; x 2 pi gives sr)
        total = 0.0
        n_run = 0
        if m > 0:
            run_hi = blo[order[0]]
            run_lo = bhi[order[0]]
            for a in range(1, m):
                ka = order[a]
                if blo[ka] >= run_lo:
                    run_lo = min(run_lo, bhi[ka])
                else:
                    total += run_hi - run_lo
                    rh[n_run] = run_hi
                    rl[n_run] = run_lo
                    n_run += 1
                    run_hi = blo[ka]
                    run_lo = bhi[ka]
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
        if n_e == 0:
            continue
        # ---- the sample's values, energies innermost ----------------------------------
        te = t if g_time else 0
        if g_time or not have_g:  # exposure and its inverse (flux per count)
            for e in range(n_e):
                ee = e if g_energy else 0
                ge[e] = g[te, ee, 0]
                for k in range(n_k):
                    gt[k, e] = g[te, ee, k]
                    ct[k, e] = 1.0 / g[te, ee, k]
        have_g = True
        n_nan = 0
        for e in range(n_e):
            for k in range(n_k):
                xv = x[t, e, k]
                n_neg += 1 if xv < 0 else 0
                n_nan += 0 if xv == xv else 1
        for e in range(n_e):
            for k in range(n_k):
                xv = x[t, e, k]
                xt[k, e] = xv
        bits0 = 16 if partial else 0
        if is_counts and not has_v and n_nan == 0:
            # every value valid: sums over the weight list (looks ascending), energies
            # innermost, of counts, max(counts, 1) and (unless it is the same for every
            # look) exposure
            for i in range(n_i):
                for e in range(n_e):
                    an[i, e] = 0.0
                    av[i, e] = 0.0
            for q in range(n_nz):
                k = ek[q]
                i = ei[q]
                wi = ew[q]
                w2 = wi * wi
                for e in range(n_e):
                    an[i, e] += wi * xt[k, e]
                for e in range(n_e):
                    av[i, e] += w2 * max(xt[k, e], 1.0)
            if g_flat:
                for i in range(n_i):
                    for e in range(n_e):
                        ad[i, e] = ge[e] * wsum[i]
            else:
                for i in range(n_i):
                    for e in range(n_e):
                        ad[i, e] = 0.0
                for q in range(n_nz):
                    k = ek[q]
                    i = ei[q]
                    wi = ew[q]
                    for e in range(n_e):
                        ad[i, e] += wi * gt[k, e]
            for e in range(n_e):
                c2[e] = 0.0
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
                    c2[e] += (ra - rb) ** 2 / sd
            # flux and error of every (bin, energy) in one vector pass (no test in it: the
            # bins with no look, zero denominator, are set NaN when written energy-major)
            for j in range(n_ie):
                inv_d = 1.0 / ad_f[j]
                fo[j] = an_f[j] * inv_d
                eo[j] = math.sqrt(av_f[j]) * inv_d
            mm = n_pair
            for e in range(n_e):
                n_uns = 0
                for i in range(n_i):
                    j = i * n_e + e
                    d = ad_f[j]
                    flux[t, e, i] = fo[j] if d > 0.0 else nan
                    err[t, e, i] = eo[j] if d > 0.0 else nan
                    cnt[t, e, i] = an_f[j] if d > 0.0 else nan
                    nlook[t, e, i] = nnb[i]
                    n_uns += 0 if d > 0.0 else 1
                bits = bits0
                if n_uns > 0:
                    bits |= 1
                if n_fed == 0:
                    bits |= 8
                if mm > 0:
                    chi[t, e] = c2[e] / mm
                    dof[t, e] = mm
                    a2 = 2.0 / (9.0 * mm)
                    if c2[e] > mm * (1.0 - a2 + z * math.sqrt(a2)) ** 3:
                        bits |= 2
                else:
                    chi[t, e] = nan
                    dof[t, e] = 0.0
                flag[t, e] = bits
            continue
        # some values missing, or flux input: the same sums over the valid values
        for e in range(n_e):
            nv[e] = 0
            for k in range(n_k):
                xv = xt[k, e]
                ok = xv == xv
                if ok:
                    if has_v:
                        vv = v[t, e, k]
                    elif is_counts:
                        vv = max(xv, 1.0)
                    else:
                        vv = 0.0
                    vt[k, e] = vv
                    gv[k, e] = gt[k, e]
                    mt[k, e] = 1
                    if fed[k]:
                        nv[e] += 1
                else:
                    xt[k, e] = 0.0
                    vt[k, e] = 0.0
                    gv[k, e] = 0.0
                    mt[k, e] = 0
        for i in range(n_i):
            for e in range(n_e):
                num[i, e] = 0.0
                den[i, e] = 0.0
                var[i, e] = 0.0
                nn[i, e] = 0
        for q in range(n_nz):
            k = ek[q]
            i = ei[q]
            wi = ew[q]
            w2 = wi * wi
            for e in range(n_e):
                mk = mt[k, e]
                num[i, e] += wi * xt[k, e]
                den[i, e] += wi * gv[k, e]
                var[i, e] += w2 * vt[k, e]
                nn[i, e] += mk
        for e in range(n_e):
            c2[e] = 0.0
            mp[e] = 0
        if has_err:
            for q in range(n_pair):
                ka = pa[q]
                kb = pb[q]
                for e in range(n_e):
                    if mt[ka, e] == 0 or mt[kb, e] == 0:
                        continue
                    ga = gt[ka, e]
                    gb = gt[kb, e]
                    ra = xt[ka, e] / ga
                    rb = xt[kb, e] / gb
                    if is_counts:
                        va = max(xt[ka, e], 1.0) / (ga * ga)
                        vb = max(xt[kb, e], 1.0) / (gb * gb)
                    else:
                        va = vt[ka, e]
                        vb = vt[kb, e]
                    sd = va + vb + (tol * 0.5 * (ra + rb)) ** 2
                    if sd > 0.0:
                        c2[e] += (ra - rb) ** 2 / sd
                        mp[e] += 1
        for e in range(n_e):
            bits = bits0
            for i in range(n_i):
                if nn[i, e] > 0 and den[i, e] > 0.0:
                    flux[t, e, i] = num[i, e] / den[i, e]
                    err[t, e, i] = math.sqrt(var[i, e]) / den[i, e] if has_err else nan
                    cnt[t, e, i] = num[i, e]
                else:
                    flux[t, e, i] = nan
                    err[t, e, i] = nan
                    cnt[t, e, i] = nan
                    bits |= 1
                nlook[t, e, i] = nn[i, e]
            if nv[e] == 0:
                bits |= 8
            mm = mp[e]
            if mm > 0:
                chi[t, e] = c2[e] / mm
                dof[t, e] = mm
                a2 = 2.0 / (9.0 * mm)
                if c2[e] > mm * (1.0 - a2 + z * math.sqrt(a2)) ** 3:
                    bits |= 2
            else:
                chi[t, e] = nan
                dof[t, e] = 0.0
            flag[t, e] = bits
    return n_neg


def bin_block(*args):
    """Run the compiled kernel on one block; return the number of negative values met.

    The arguments are those of ``_bin_block_py`` (inputs, geometry, outputs).
    """
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
    return _JIT["bin"](*args)


def run_blocks(s, ds, geo, edges, z, tol, pair_min, *, n_e=None, bands=None):
    """Run the kernel over time blocks (threads); return the output arrays.

    Parameters
    ----------
    s : SectoredInput
        From :func:`beltkit.pad.sector_input.read_sectored`.
    ds : xarray.Dataset
        The sectored dataset (read one block of times at a time).
    geo : tuple
        From :func:`beltkit.pad.sector_input.look_geometry`.
    edges : ndarray
        Pitch-angle bin edges (degree).
    z : float
        Upper-tail standard normal quantile of the gyrotropy level.
    tol : float
        Relative tolerance of paired looks.
    pair_min : float
        Band similarity of a look pair.
    n_e : int, optional
        0 to compute the geometry only (with `bands`).
    bands : ndarray, optional
        (time, look, 2) filled with the band edges (cosines) when given.

    Returns
    -------
    tuple
        flux, err, cnt, nlook, chi, dof, flag, cover, bcov.
    """
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
        g_all = 1.0 / factor_array(s.c2f, s, s.c2f_scale)
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
            if xb.dtype not in _DIRECT:  # read as they are: no float copy of the block
                xb = xb.astype(np.float64)
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
        n_neg = bin_block(
            xb, tsl(g_all, sl), vb, err_var is not None, s.is_counts, s.mode, bvec[sl],
            tsl(look, sl), tsl(cp0, sl), tsl(sp0, sl), tsl(cp1, sl), tsl(sp1, sl), tsl(ph0, sl),
            tsl(ph1, sl), cth, sth, cdel, sdel, cedges, z, tol, pair_min, flux[sl], err[sl],
            cnt[sl], nlook[sl], chi[sl], dof[sl], flag[sl], cover[sl], bcov[sl],
            bands[sl] if bands.shape[1] else bands)
        if s.is_counts and n_neg:
            raise ConventionError([f"counts: negative values between times {sl.start} and "
                                   f"{sl.stop}; counts must be >= 0 (NaN for missing)"],
                                  ds.encoding.get("source"))

    map_slices(block, n_t, BLOCK)
    return flux, err, cnt, nlook, chi, dof, flag, cover, bcov
