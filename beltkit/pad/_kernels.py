"""Fused single-pass kernels (numba) of the partition and of the validator's value scan.

The numpy implementation in :mod:`beltkit.pad.partition` is the reference;
these kernels compute the same quantities in one pass over the data (read
each flux value once, write each output once), which the partition benchmark
showed to be needed: the numpy path costs about 40 passes over (time, energy)
arrays plus the per-sample weight matrices. Sums are accumulated in float64.
"""

from __future__ import annotations

import importlib.util
import math

import numpy as np

# numba is a declared dependency; it is imported (and the kernels compiled, or
# loaded from numba's cache) on first use, so `import beltkit` stays fast.
HAVE_NUMBA = importlib.util.find_spec("numba") is not None
_JIT = {}

__all__ = ["HAVE_NUMBA", "partition_block", "value_scan"]

_TWO_PI = 2.0 * math.pi
_FOUR_PI = 4.0 * math.pi
#: solid angles (sr) below this count as empty (rounding crumbs of cos near 90 deg)
TOL_SR = 1e-12


def _partition_block_py(x, s, has_s, wpre, use_pre, cos_a1, cos_a2, fold, blc, dlc, band,
                        has_neg, out, stats):
    n, n_e, n_p = x.shape
    wt = np.empty((n_p, 5))
    nan = np.nan
    for t in range(n):
        b = blc[t]
        d = dlc[t]
        if not (b == b) or not (d == d):
            for k in range(out.shape[0]):
                for e in range(n_e):
                    out[k, t * n_e + e] = nan
            for e in range(n_e):
                out[14, t * n_e + e] = 64.0
                for p in range(n_p):  # the value statistics still see every sample
                    v = x[t, e, p]
                    if v - v == 0.0:
                        stats[e, 0] += 1
                        if v < 0.0:
                            stats[e, 1] += 1
            continue
        if d < b:
            d = b
        o = b + band
        if o > 90.0:
            o = 90.0
        cb = math.cos(math.radians(b))
        cd = math.cos(math.radians(d))
        co = math.cos(math.radians(o))
        if use_pre:
            for p in range(n_p):
                for k in range(5):
                    wt[p, k] = wpre[t, p, k]
        else:
            for p in range(n_p):
                c1 = cos_a1[p]
                c2 = cos_a2[p]
                full = _TWO_PI * (c1 - c2)
                # solid angle of the bin below the pitch angle whose cosine is c
                cbp = _TWO_PI * (c1 - min(max(cb, c2), c1))
                cdp = _TWO_PI * (c1 - min(max(cd, c2), c1))
                cop = _TWO_PI * (c1 - min(max(co, c2), c1))
                cbm = _TWO_PI * (c1 - min(max(-cb, c2), c1))
                cdm = _TWO_PI * (c1 - min(max(-cd, c2), c1))
                com = _TWO_PI * (c1 - min(max(-co, c2), c1))
                wt[p, 0] = max(cbp + full - cbm, 0.0) * fold
                wt[p, 1] = max(cdp - cbp + cbm - cdm, 0.0) * fold
                wt[p, 2] = max(cdm - cdp, 0.0) * fold
                wt[p, 3] = max(cop - cbp + cbm - com, 0.0) * fold
                wt[p, 4] = full * fold
        om0 = _FOUR_PI * (1.0 - cb)
        om1 = _FOUR_PI * (cb - cd)
        om2 = _FOUR_PI * cd
        om0 = om0 if om0 > TOL_SR else 0.0
        om1 = om1 if om1 > TOL_SR else 0.0
        om2 = om2 if om2 > TOL_SR else 0.0
        i0 = 1.0 / om0 if om0 > 0 else 0.0
        i1 = 1.0 / om1 if om1 > 0 else 0.0
        i2 = 1.0 / om2 if om2 > 0 else 0.0
        for e in range(n_e):
            a0 = a1 = a2 = a3 = a4 = 0.0
            m0 = m1 = m2 = m3 = m4 = 0.0
            v0 = v1 = v2 = v3 = v4 = v5 = v6 = v7 = v8 = 0.0
            nneg = 0
            nfin = 0
            nqneg = 0
            for p in range(n_p):
                v = np.float64(x[t, e, p])
                ok = v - v == 0.0  # False for NaN and inf: not sampled
                vv = v if ok else 0.0
                fin = 1.0 if ok else 0.0
                nfin += 1 if ok else 0
                nneg += 1 if vv < 0.0 else 0
                w0 = wt[p, 0]
                w1 = wt[p, 1]
                w2 = wt[p, 2]
                w3 = wt[p, 3]
                w4 = wt[p, 4]
                a0 += vv * w0
                a1 += vv * w1
                a2 += vv * w2
                a3 += vv * w3
                a4 += vv * w4
                m0 += fin * w0
                m1 += fin * w1
                m2 += fin * w2
                m3 += fin * w3
                m4 += fin * w4
                if has_s:
                    q = np.float64(s[t, e, p])
                    nqneg += 1 if (ok and q < 0.0) else 0
                    q2 = q * q if ok else 0.0
                    v0 += q2 * w0 * w0
                    v1 += q2 * w1 * w1
                    v2 += q2 * w2 * w2
                    v3 += q2 * w4 * w4
                    v4 += q2 * w3 * w3
                    v5 += q2 * w0 * w4
                    v6 += q2 * w1 * w4
                    v7 += q2 * w2 * w4
                    v8 += q2 * w0 * w3
            stats[e, 0] += nfin
            stats[e, 1] += nneg
            stats[e, 2] += nqneg
            flag = 0
            s0 = m0 > TOL_SR
            s1 = m1 > TOL_SR
            s2 = m2 > TOL_SR
            pops0 = (a0 if s0 else nan) if om0 > 0 else 0.0
            pops1 = (a1 if s1 else nan) if om1 > 0 else 0.0
            pops2 = (a2 if s2 else nan) if om2 > 0 else 0.0
            if om0 > 0 and not s0:
                flag |= 1
            if om1 > 0 and not s1:
                flag |= 2
            if om2 > 0 and not s2:
                flag |= 4
            cov0 = min(m0 * i0, 1.0) if om0 > 0 else 1.0
            cov1 = min(m1 * i1, 1.0) if om1 > 0 else 1.0
            cov2 = min(m2 * i2, 1.0) if om2 > 0 else 1.0
            if ((0 < cov0 < 1 - 1e-6) or (0 < cov1 < 1 - 1e-6) or (0 < cov2 < 1 - 1e-6)):
                flag |= 8
            if has_neg and nneg > 0:
                flag |= 16
            if not m4 > 0:
                flag |= 32
            total = pops0 + pops1 + pops2
            good = total > 0
            itot = 1.0 / total if good else nan
            f0 = pops0 * itot
            f1 = pops1 * itot
            f2 = pops2 * itot
            out[0, t * n_e + e] = pops0
            out[1, t * n_e + e] = pops1
            out[2, t * n_e + e] = pops2
            out[3, t * n_e + e] = a4 if m4 > 0 else nan
            out[4, t * n_e + e] = f0
            out[5, t * n_e + e] = f1
            out[6, t * n_e + e] = f2
            out[7, t * n_e + e] = cov0
            out[8, t * n_e + e] = cov1
            out[9, t * n_e + e] = cov2
            out[10, t * n_e + e] = m0
            out[11, t * n_e + e] = m1
            out[12, t * n_e + e] = m2
            fill_ok = s0 and om0 > 0 and m0 > 0 and m3 > TOL_SR and a3 != 0.0
            k = m3 / (m0 * a3) if fill_ok else nan
            rho = a0 * k
            out[13, t * n_e + e] = rho
            out[14, t * n_e + e] = flag
            if has_s:
                out[15, t * n_e + e] = (math.sqrt(v0) if s0 else nan) if om0 > 0 else 0.0
                out[16, t * n_e + e] = (math.sqrt(v1) if s1 else nan) if om1 > 0 else 0.0
                out[17, t * n_e + e] = (math.sqrt(v2) if s2 else nan) if om2 > 0 else 0.0
                out[18, t * n_e + e] = math.sqrt(v3) if m4 > 0 else nan
                if good:
                    out[19, t * n_e + e] = itot * math.sqrt(
                        max(v0 - 2 * f0 * v5 + f0 * f0 * v3, 0.0))
                    out[20, t * n_e + e] = itot * math.sqrt(
                        max(v1 - 2 * f1 * v6 + f1 * f1 * v3, 0.0))
                    out[21, t * n_e + e] = itot * math.sqrt(
                        max(v2 - 2 * f2 * v7 + f2 * f2 * v3, 0.0))
                else:
                    out[19, t * n_e + e] = nan
                    out[20, t * n_e + e] = nan
                    out[21, t * n_e + e] = nan
                if fill_ok:
                    # d rho / d a0 = k, d rho / d a3 = -rho / a3; no division by a0,
                    # so an empty loss cone (a0 = 0) still gets its error bar
                    q = rho / a3
                    var = k * k * v0 + q * q * v4 - 2 * k * q * v8
                    out[22, t * n_e + e] = math.sqrt(max(var, 0.0))
                else:
                    out[22, t * n_e + e] = nan


def _value_scan_py(x, fills, vmin, vmax, lo, n_neg):
    """Per-energy NaN-ignoring minimum of the masked values, and the negative count."""
    n, n_e, n_p = x.shape
    for t in range(n):
        for e in range(n_e):
            for p in range(n_p):
                v = float(x[t, e, p])
                if v != v:
                    continue
                bad = v < vmin or v > vmax
                for f in fills:
                    if v == f:
                        bad = True
                if bad:
                    continue
                if not (lo[e] <= v):  # lo NaN or larger
                    lo[e] = v
                if v < 0.0:
                    n_neg[e] += 1


def _jitted(name):
    """Return the compiled kernel `name`, compiling (or loading from cache) once."""
    if name not in _JIT:
        import numba

        # fast-math without the no-NaN/no-inf flags: NaN tests stay valid, sums vectorise
        fastmath = {"reassoc", "contract", "arcp", "nsz"}
        py = {"partition": _partition_block_py, "scan": _value_scan_py}[name]
        opts = {"fastmath": fastmath} if name == "partition" else {}
        _JIT[name] = numba.njit(cache=True, nogil=True, **opts)(py)
    return _JIT[name]


def partition_block(x, s, wpre, cos_a1, cos_a2, fold, blc, dlc, band, has_neg, out, stats):
    """Fill ``out`` with the partition outputs of one time block.

    Parameters
    ----------
    x : numpy.ndarray
        Flux (n, E, P), canonical units, NaN where missing.
    s : numpy.ndarray or None
        1-sigma errors (n, E, P).
    wpre : numpy.ndarray or None
        Precomputed weights (n, P, 5) (telescopes); None for fixed bins.
    cos_a1, cos_a2 : numpy.ndarray
        Cosines of the bin edges (P,), used when ``wpre`` is None.
    fold : float
        2 for folded bins, else 1.
    blc, dlc : numpy.ndarray
        Bounce and drift loss cones (n,) in degrees.
    band : float
        Width of the band outside the loss cone for the filling ratio (deg).
    has_neg : bool
        Whether to flag negative values.
    out : numpy.ndarray
        Output array (n_out, >= n * E), written in place at ``[k, t * E + e]``
        (each output row contiguous; rows may be padded apart).
    stats : numpy.ndarray
        (E, 3) int64 counters, incremented in place: valid flux values,
        negative flux values, negative errors (the validator's value checks,
        gathered in the same pass).
    """
    has_s = s is not None
    s_arr = s if has_s else np.zeros((1, 1, 1), dtype=x.dtype)
    use_pre = wpre is not None
    w_arr = wpre if use_pre else np.zeros((1, 1, 5))
    args = (x, s_arr, has_s, w_arr, use_pre, np.asarray(cos_a1, dtype=float),
            np.asarray(cos_a2, dtype=float), float(fold), np.asarray(blc, dtype=float),
            np.asarray(dlc, dtype=float), float(band), bool(has_neg), out, stats)
    if HAVE_NUMBA:
        _jitted("partition")(*args)
    else:  # pragma: no cover
        _partition_block_py(*args)


def value_scan(x, fills, vmin, vmax):
    """Return the per-energy minimum of valid values (NaN if none) and negative counts.

    Parameters
    ----------
    x : numpy.ndarray
        Raw values (n, E, P) in any order of strides.
    fills : tuple of float
        Fill values.
    vmin, vmax : float
        Valid range.

    Returns
    -------
    lo : numpy.ndarray
        (E,) minimum valid value per energy, NaN where none is valid.
    n_neg : numpy.ndarray
        (E,) number of negative valid values.
    """
    lo = np.full(x.shape[1], np.nan)
    n_neg = np.zeros(x.shape[1], dtype=np.int64)
    f = np.asarray(fills, dtype=float).reshape(-1)
    if HAVE_NUMBA:
        _jitted("scan")(x, f, float(vmin), float(vmax), lo, n_neg)
    else:  # pragma: no cover
        _value_scan_py(x, f, float(vmin), float(vmax), lo, n_neg)
    return lo, n_neg
