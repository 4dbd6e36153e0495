"""Fused single-pass kernels (numba) of the partition and of the validator's value scan.

The package's one partition engine: the formulas are stated in
:mod:`beltkit.pad.partition`, and a plain numpy reference of them lives with
the tests (``tests/_partition_reference.py``), which check these kernels
against it to float rounding. The kernels compute the outputs in one pass over
the data (read each flux value once, write each output once), which the
partition benchmark showed to be needed: a numpy formulation costs about 40
passes over (time, energy) arrays plus the per-sample weight matrices. Sums
are accumulated in float64.
"""

from __future__ import annotations

import math

import numpy as np

# numba (a dependency) is imported, and the kernels compiled or loaded from numba's
# cache, on first use, so `import beltkit` stays fast.
_JIT = {}

__all__ = ["partition_block", "value_scan"]

_TWO_PI = 2.0 * math.pi
_FOUR_PI = 4.0 * math.pi
#: solid angles (sr) below this count as empty (rounding crumbs of cos near 90 deg)
TOL_SR = 1e-12
#: samples per inner chunk (its sums are staged in a small scratch array that stays in cache)
_CHUNK = 256


def _partition_block_py(x, s, has_s, wpre, use_pre, cos_a1, cos_a2, fold, blc, dlc, cosb,
                        cosd, coso, cosn, coss, hrow, out, flag, stats, chunk):
    n, n_e, n_p = x.shape
    xf = x.reshape(n, n_e * n_p)  # the same values, one row per sample
    sf = s.reshape(s.shape[0], -1)
    nan = np.nan
    hemi = hrow >= 0  # losses per hemisphere: weight rows 5-6, outputs from row hrow
    n_w = 7 if hemi else 5
    wt = np.empty((7, n_p))
    wq = np.empty((13, n_p))
    colsum = np.empty(7)
    n_rows = 23  # 0-13 sums, 14-22 error sums
    # rows padded apart (not a multiple of 4 KiB): no cache-set aliasing between them
    sc = np.empty((n_rows, max(chunk, 1) * n_e + 24))
    for t0 in range(0, n, chunk):
        t1 = min(t0 + chunk, n)
        # a clean chunk (every loss cone known, every flux value finite and >= 0, no
        # negative error: the common case) takes the fused path below, which writes
        # the outputs of each sample as soon as its sums are known
        clean = True
        for t in range(t0, t1):
            clean &= (blc[t] == blc[t]) & (dlc[t] == dlc[t])
        if clean:
            n_bad = 0
            for t in range(t0, t1):
                for i in range(n_e * n_p):
                    v = xf[t, i]
                    n_bad += 0 if (v - v == 0.0) & (v >= 0.0) else 1
            if has_s:
                for t in range(t0, t1):
                    for i in range(n_e * n_p):
                        n_bad += 1 if sf[t, i] < 0.0 else 0
            clean = n_bad == 0
        if clean:
            for e in range(n_e):
                stats[e, 0] += (t1 - t0) * n_p
        # ---- pass 1: weighted sums of every (time, energy) of the chunk into `sc`
        for t in range(t0, t1):
            j0 = (t - t0) * n_e
            b = blc[t]
            d = dlc[t]
            if not clean and (not (b == b) or not (d == d)):
                for e in range(n_e):  # the value statistics still see every sample
                    nf = 0
                    ng = 0
                    nq = 0
                    for p in range(n_p):
                        v = x[t, e, p]
                        ok = v - v == 0.0
                        nf += 1 if ok else 0
                        ng += 1 if (ok and v < 0.0) else 0
                        if has_s:
                            nq += 1 if s[t, e, p] < 0.0 else 0
                    stats[e, 0] += nf
                    stats[e, 1] += ng
                    stats[e, 2] += nq
                    for k in range(n_rows):
                        sc[k, j0 + e] = 0.0
                continue
            cb = cosb[t]
            cd = cosd[t]
            co = coso[t]
            cn = cosn[t]
            cs = coss[t]
            if use_pre:
                for p in range(n_p):
                    for k in range(n_w):
                        wt[k, p] = wpre[t, p, k]
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
                    wt[0, p] = max(cbp + full - cbm, 0.0) * fold
                    wt[1, p] = max(cdp - cbp + cbm - cdm, 0.0) * fold
                    wt[2, p] = max(cdm - cdp, 0.0) * fold
                    wt[3, p] = max(cop - cbp + cbm - com, 0.0) * fold
                    wt[4, p] = full * fold
                    if hemi:  # lost north [0, lcn], lost south [180 - lcs, 180]; a folded
                        # bin adds its mirror image [180 - a2, 180 - a1]
                        cnp = _TWO_PI * (c1 - min(max(cn, c2), c1))
                        cnm = _TWO_PI * (c1 - min(max(-cn, c2), c1))
                        csp = _TWO_PI * (c1 - min(max(cs, c2), c1))
                        csm = _TWO_PI * (c1 - min(max(-cs, c2), c1))
                        wt[5, p] = max(cnp + (fold - 1.0) * (full - cnm), 0.0)
                        wt[6, p] = max(full - csm + (fold - 1.0) * csp, 0.0)
            for k in range(n_w):
                acc = 0.0
                for p in range(n_p):
                    acc += wt[k, p]
                colsum[k] = acc
            om0 = _FOUR_PI * (1.0 - cb)
            om1 = _FOUR_PI * (cb - cd)
            om2 = _FOUR_PI * cd
            om5 = _TWO_PI * (1.0 - cn)
            om6 = _TWO_PI * (1.0 - cs)
            if has_s and hemi:
                for p in range(n_p):
                    w4 = wt[4, p]
                    wq[9, p] = wt[5, p] * wt[5, p]
                    wq[10, p] = wt[6, p] * wt[6, p]
                    wq[11, p] = wt[5, p] * w4
                    wq[12, p] = wt[6, p] * w4
            if has_s:  # the weight products of the error propagation
                for p in range(n_p):
                    w0 = wt[0, p]
                    w3 = wt[3, p]
                    w4 = wt[4, p]
                    wq[0, p] = w0 * w0
                    wq[1, p] = wt[1, p] * wt[1, p]
                    wq[2, p] = wt[2, p] * wt[2, p]
                    wq[3, p] = w4 * w4
                    wq[4, p] = w3 * w3
                    wq[5, p] = w0 * w4
                    wq[6, p] = wt[1, p] * w4
                    wq[7, p] = wt[2, p] * w4
                    wq[8, p] = w0 * w3
            if clean:  # fused: sums and outputs of the sample's energies, no scratch
                m0 = colsum[0]
                m1 = colsum[1]
                m2 = colsum[2]
                m3 = colsum[3]
                m4 = colsum[4]
                e0 = om0 > TOL_SR
                e1 = om1 > TOL_SR
                e2 = om2 > TOL_SR
                s0 = m0 > TOL_SR
                s1 = m1 > TOL_SR
                s2 = m2 > TOL_SR
                cov0 = min(m0 / om0, 1.0) if e0 else 1.0
                cov1 = min(m1 / om1, 1.0) if e1 else 1.0
                cov2 = min(m2 / om2, 1.0) if e2 else 1.0
                lim = 1 - 1e-6
                part = (((cov0 > 0.0) & (cov0 < lim)) | ((cov1 > 0.0) & (cov1 < lim))
                        | ((cov2 > 0.0) & (cov2 < lim)))
                flag_t = ((1 if e0 > s0 else 0) + (2 if e1 > s1 else 0)
                          + (4 if e2 > s2 else 0) + (8 if part else 0)
                          + (0 if m4 > 0.0 else 32))
                fill_ok = s0 & e0 & (m3 > TOL_SR)
                e5 = om5 > TOL_SR
                e6 = om6 > TOL_SR
                s5 = colsum[5] > TOL_SR
                s6 = colsum[6] > TOL_SR
                for e in range(n_e):
                    a0 = a1 = a2 = a3 = a4 = a5 = a6 = 0.0
                    for p in range(n_p):  # one read of the values for all the sums
                        v = np.float64(x[t, e, p])
                        a0 += v * wt[0, p]
                        a1 += v * wt[1, p]
                        a2 += v * wt[2, p]
                        a3 += v * wt[3, p]
                        a4 += v * wt[4, p]
                        if hemi:
                            a5 += v * wt[5, p]
                            a6 += v * wt[6, p]
                    pops0 = (a0 if s0 else nan) if e0 else 0.0
                    pops1 = (a1 if s1 else nan) if e1 else 0.0
                    pops2 = (a2 if s2 else nan) if e2 else 0.0
                    total = pops0 + pops1 + pops2
                    itot = 1.0 / total if total > 0 else nan
                    j = t * n_e + e
                    out[0, j] = pops0
                    out[1, j] = pops1
                    out[2, j] = pops2
                    out[3, j] = a4 if m4 > 0 else nan
                    out[4, j] = pops0 * itot
                    out[5, j] = pops1 * itot
                    out[6, j] = pops2 * itot
                    out[7, j] = cov0
                    out[8, j] = cov1
                    out[9, j] = cov2
                    out[10, j] = m0
                    out[11, j] = m1
                    out[12, j] = m2
                    out[13, j] = a0 * (m3 / (m0 * a3)) if (fill_ok & (a3 != 0.0)) else nan
                    flag[j] = flag_t
                    if hemi:
                        pops5 = (a5 if s5 else nan) if e5 else 0.0
                        pops6 = (a6 if s6 else nan) if e6 else 0.0
                        out[hrow, j] = pops5
                        out[hrow + 1, j] = pops6
                        out[hrow + 2, j] = pops5 * itot
                        out[hrow + 3, j] = pops6 * itot
                    if has_s:  # error sums and uncertainties, as in the general path below
                        v0 = v1 = v2 = v3 = v4 = v5 = v6 = v7 = v8 = 0.0
                        for p in range(n_p):
                            q = np.float64(s[t, e, p])
                            q2 = q * q
                            v0 += q2 * wq[0, p]
                            v1 += q2 * wq[1, p]
                            v2 += q2 * wq[2, p]
                            v3 += q2 * wq[3, p]
                            v4 += q2 * wq[4, p]
                            v5 += q2 * wq[5, p]
                            v6 += q2 * wq[6, p]
                            v7 += q2 * wq[7, p]
                            v8 += q2 * wq[8, p]
                        f0 = pops0 * itot
                        f1 = pops1 * itot
                        f2 = pops2 * itot
                        out[15, j] = (math.sqrt(v0) if s0 else nan) if e0 else 0.0
                        out[16, j] = (math.sqrt(v1) if s1 else nan) if e1 else 0.0
                        out[17, j] = (math.sqrt(v2) if s2 else nan) if e2 else 0.0
                        out[18, j] = math.sqrt(v3) if m4 > 0 else nan
                        out[19, j] = itot * math.sqrt(max(v0 - 2 * f0 * v5 + f0 * f0 * v3, 0.0))
                        out[20, j] = itot * math.sqrt(max(v1 - 2 * f1 * v6 + f1 * f1 * v3, 0.0))
                        out[21, j] = itot * math.sqrt(max(v2 - 2 * f2 * v7 + f2 * f2 * v3, 0.0))
                        ok3 = fill_ok & (a3 != 0.0)
                        kf = m3 / (m0 * a3) if ok3 else nan
                        qf = a0 * kf / a3 if ok3 else nan
                        var = kf * kf * v0 + qf * qf * v4 - 2 * kf * qf * v8
                        out[22, j] = math.sqrt(max(var, 0.0)) if ok3 else nan
                        if hemi:
                            u9 = u10 = u11 = u12 = 0.0
                            for p in range(n_p):
                                q = np.float64(s[t, e, p])
                                q2 = q * q
                                u9 += q2 * wq[9, p]
                                u10 += q2 * wq[10, p]
                                u11 += q2 * wq[11, p]
                                u12 += q2 * wq[12, p]
                            f5 = pops5 * itot
                            f6 = pops6 * itot
                            out[hrow + 4, j] = (math.sqrt(u9) if s5 else nan) if e5 else 0.0
                            out[hrow + 5, j] = (math.sqrt(u10) if s6 else nan) if e6 else 0.0
                            out[hrow + 6, j] = itot * math.sqrt(
                                max(u9 - 2 * f5 * u11 + f5 * f5 * v3, 0.0))
                            out[hrow + 7, j] = itot * math.sqrt(
                                max(u10 - 2 * f6 * u12 + f6 * f6 * v3, 0.0))
                continue
            # one vectorised scan of the sample's E x P values: any missing or negative?
            n_bad = 0
            n_low = 0
            for i in range(n_e * n_p):
                v = xf[t, i]
                n_bad += 0 if v - v == 0.0 else 1
                n_low += 1 if v < 0.0 else 0
            all_ok = n_bad == 0
            for e in range(n_e):
                j = j0 + e
                a0 = a1 = a2 = a3 = a4 = a5 = a6 = 0.0
                if n_bad == 0 and n_low == 0:  # every bin sampled: the measured solid
                    for p in range(n_p):      # angles are the weights' sums
                        v = np.float64(x[t, e, p])
                        a0 += v * wt[0, p]
                        a1 += v * wt[1, p]
                        a2 += v * wt[2, p]
                        a3 += v * wt[3, p]
                        a4 += v * wt[4, p]
                        if hemi:
                            a5 += v * wt[5, p]
                            a6 += v * wt[6, p]
                    m0 = colsum[0]
                    m1 = colsum[1]
                    m2 = colsum[2]
                    m3 = colsum[3]
                    m4 = colsum[4]
                    m5 = colsum[5] if hemi else 0.0
                    m6 = colsum[6] if hemi else 0.0
                    nf = n_p
                    ng = 0
                else:
                    m0 = m1 = m2 = m3 = m4 = m5 = m6 = 0.0
                    nf = 0
                    ng = 0
                    for p in range(n_p):
                        v = np.float64(x[t, e, p])
                        ok = v - v == 0.0  # False for NaN and inf: not sampled
                        vv = v if ok else 0.0
                        fin = 1.0 if ok else 0.0
                        nf += 1 if ok else 0
                        ng += 1 if vv < 0.0 else 0
                        a0 += vv * wt[0, p]
                        a1 += vv * wt[1, p]
                        a2 += vv * wt[2, p]
                        a3 += vv * wt[3, p]
                        a4 += vv * wt[4, p]
                        m0 += fin * wt[0, p]
                        m1 += fin * wt[1, p]
                        m2 += fin * wt[2, p]
                        m3 += fin * wt[3, p]
                        m4 += fin * wt[4, p]
                        if hemi:
                            a5 += vv * wt[5, p]
                            a6 += vv * wt[6, p]
                            m5 += fin * wt[5, p]
                            m6 += fin * wt[6, p]
                stats[e, 0] += nf
                stats[e, 1] += ng
                sc[0, j] = a0
                sc[1, j] = a1
                sc[2, j] = a2
                sc[3, j] = a3
                sc[4, j] = a4
                sc[5, j] = m0
                sc[6, j] = m1
                sc[7, j] = m2
                sc[8, j] = m3
                sc[9, j] = m4
                sc[10, j] = om0
                sc[11, j] = om1
                sc[12, j] = om2
                sc[13, j] = ng
                if has_s:
                    nq = 0
                    v0 = v1 = v2 = v3 = v4 = v5 = v6 = v7 = v8 = 0.0
                    for p in range(n_p):
                        q = np.float64(s[t, e, p])
                        nq += 1 if q < 0.0 else 0
                        ok = all_ok or x[t, e, p] - x[t, e, p] == 0.0
                        q2 = q * q if ok else 0.0
                        v0 += q2 * wq[0, p]
                        v1 += q2 * wq[1, p]
                        v2 += q2 * wq[2, p]
                        v3 += q2 * wq[3, p]
                        v4 += q2 * wq[4, p]
                        v5 += q2 * wq[5, p]
                        v6 += q2 * wq[6, p]
                        v7 += q2 * wq[7, p]
                        v8 += q2 * wq[8, p]
                    stats[e, 2] += nq
                    sc[14, j] = v0
                    sc[15, j] = v1
                    sc[16, j] = v2
                    sc[17, j] = v3
                    sc[18, j] = v4
                    sc[19, j] = v5
                    sc[20, j] = v6
                    sc[21, j] = v7
                    sc[22, j] = v8
                if hemi:  # losses per hemisphere of this (time, energy), written at once
                    jo = t * n_e + e
                    pops0 = (a0 if m0 > TOL_SR else nan) if om0 > TOL_SR else 0.0
                    pops1 = (a1 if m1 > TOL_SR else nan) if om1 > TOL_SR else 0.0
                    pops2 = (a2 if m2 > TOL_SR else nan) if om2 > TOL_SR else 0.0
                    total = pops0 + pops1 + pops2
                    itot = 1.0 / total if total > 0 else nan
                    e5 = om5 > TOL_SR
                    e6 = om6 > TOL_SR
                    s5 = m5 > TOL_SR
                    s6 = m6 > TOL_SR
                    pops5 = (a5 if s5 else nan) if e5 else 0.0
                    pops6 = (a6 if s6 else nan) if e6 else 0.0
                    out[hrow, jo] = pops5
                    out[hrow + 1, jo] = pops6
                    out[hrow + 2, jo] = pops5 * itot
                    out[hrow + 3, jo] = pops6 * itot
                    if has_s:
                        u9 = u10 = u11 = u12 = 0.0
                        for p in range(n_p):
                            q = np.float64(s[t, e, p])
                            ok = all_ok or x[t, e, p] - x[t, e, p] == 0.0
                            q2 = q * q if ok else 0.0
                            u9 += q2 * wq[9, p]
                            u10 += q2 * wq[10, p]
                            u11 += q2 * wq[11, p]
                            u12 += q2 * wq[12, p]
                        f5 = pops5 * itot
                        f6 = pops6 * itot
                        u3 = sc[17, j]
                        out[hrow + 4, jo] = (math.sqrt(u9) if s5 else nan) if e5 else 0.0
                        out[hrow + 5, jo] = (math.sqrt(u10) if s6 else nan) if e6 else 0.0
                        out[hrow + 6, jo] = itot * math.sqrt(
                            max(u9 - 2 * f5 * u11 + f5 * f5 * u3, 0.0))
                        out[hrow + 7, jo] = itot * math.sqrt(
                            max(u10 - 2 * f6 * u12 + f6 * f6 * u3, 0.0))
        if clean:
            continue
        # ---- pass 2: the outputs of the chunk. One short loop per group of rows, each
        # touching few arrays, so that the compiler can prove them apart and vectorise
        # every loop (one loop writing all rows at once stayed scalar: 2.5x slower)
        o = t0 * n_e
        m = (t1 - t0) * n_e
        a_0, a_1, a_2, a_3, a_4 = sc[0], sc[1], sc[2], sc[3], sc[4]
        m_0, m_1, m_2, m_3, m_4 = sc[5], sc[6], sc[7], sc[8], sc[9]
        o_0, o_1, o_2, n_g = sc[10], sc[11], sc[12], sc[13]
        # populations: 0 where the population has no solid angle, NaN where it was
        # not sampled; solid angles; coverage (sampled share of the population)
        for a_k, m_k, o_k, r_pop, r_sa, r_cov in (
                (a_0, m_0, o_0, out[0, o:o + m], out[10, o:o + m], out[7, o:o + m]),
                (a_1, m_1, o_1, out[1, o:o + m], out[11, o:o + m], out[8, o:o + m]),
                (a_2, m_2, o_2, out[2, o:o + m], out[12, o:o + m], out[9, o:o + m])):
            for j in range(m):
                has = o_k[j] > TOL_SR
                cov = m_k[j] / o_k[j]
                r_pop[j] = (a_k[j] if m_k[j] > TOL_SR else nan) if has else 0.0
                r_sa[j] = m_k[j]
                r_cov[j] = (cov if cov < 1.0 else 1.0) if has else 1.0
        r_omni = out[3, o:o + m]
        r_fill = out[13, o:o + m]
        for j in range(m):
            r_omni[j] = a_4[j] if m_4[j] > 0 else nan
            fill_ok = ((m_0[j] > TOL_SR) & (o_0[j] > TOL_SR) & (m_3[j] > TOL_SR)
                       & (a_3[j] != 0.0))
            r_fill[j] = a_0[j] * (m_3[j] / (m_0[j] * a_3[j])) if fill_ok else nan
        r_f0, r_f1, r_f2 = out[4, o:o + m], out[5, o:o + m], out[6, o:o + m]
        for j in range(m):  # fractions, from the float64 sums
            pops0 = (a_0[j] if m_0[j] > TOL_SR else nan) if o_0[j] > TOL_SR else 0.0
            pops1 = (a_1[j] if m_1[j] > TOL_SR else nan) if o_1[j] > TOL_SR else 0.0
            pops2 = (a_2[j] if m_2[j] > TOL_SR else nan) if o_2[j] > TOL_SR else 0.0
            total = pops0 + pops1 + pops2
            itot = 1.0 / total if total > 0 else nan
            r_f0[j] = pops0 * itot
            r_f1[j] = pops1 * itot
            r_f2[j] = pops2 * itot
        fl = flag[o:o + m]
        lim = 1 - 1e-6
        for j in range(m):  # flags (coverage again in float64, as in the numpy reference)
            e0 = o_0[j] > TOL_SR
            e1 = o_1[j] > TOL_SR
            e2 = o_2[j] > TOL_SR
            cov0 = min(m_0[j] / o_0[j], 1.0) if e0 else 1.0
            cov1 = min(m_1[j] / o_1[j], 1.0) if e1 else 1.0
            cov2 = min(m_2[j] / o_2[j], 1.0) if e2 else 1.0
            part = (((cov0 > 0.0) & (cov0 < lim)) | ((cov1 > 0.0) & (cov1 < lim))
                    | ((cov2 > 0.0) & (cov2 < lim)))
            fl[j] = ((1 if e0 > (m_0[j] > TOL_SR) else 0) + (2 if e1 > (m_1[j] > TOL_SR) else 0)
                     + (4 if e2 > (m_2[j] > TOL_SR) else 0) + (8 if part else 0)
                     + (16 if n_g[j] > 0.0 else 0)
                     + (0 if m_4[j] > 0.0 else 32))
        if has_s:
            for j in range(m):
                a0 = sc[0, j]
                a3 = sc[3, j]
                m0 = sc[5, j]
                m3 = sc[8, j]
                e0 = sc[10, j] > TOL_SR
                e1 = sc[11, j] > TOL_SR
                e2 = sc[12, j] > TOL_SR
                s0 = m0 > TOL_SR
                s1 = sc[6, j] > TOL_SR
                s2 = sc[7, j] > TOL_SR
                pops0 = (a0 if s0 else nan) if e0 else 0.0
                pops1 = (sc[1, j] if s1 else nan) if e1 else 0.0
                pops2 = (sc[2, j] if s2 else nan) if e2 else 0.0
                total = pops0 + pops1 + pops2
                itot = 1.0 / total if total > 0 else nan
                f0 = pops0 * itot
                f1 = pops1 * itot
                f2 = pops2 * itot
                v0 = sc[14, j]
                v1 = sc[15, j]
                v2 = sc[16, j]
                v3 = sc[17, j]
                out[15, o + j] = (math.sqrt(v0) if s0 else nan) if e0 else 0.0
                out[16, o + j] = (math.sqrt(v1) if s1 else nan) if e1 else 0.0
                out[17, o + j] = (math.sqrt(v2) if s2 else nan) if e2 else 0.0
                out[18, o + j] = math.sqrt(v3) if sc[9, j] > 0 else nan
                out[19, o + j] = itot * math.sqrt(max(v0 - 2 * f0 * sc[19, j] + f0 * f0 * v3, 0.0))
                out[20, o + j] = itot * math.sqrt(max(v1 - 2 * f1 * sc[20, j] + f1 * f1 * v3, 0.0))
                out[21, o + j] = itot * math.sqrt(max(v2 - 2 * f2 * sc[21, j] + f2 * f2 * v3, 0.0))
                # rho = a0 kf with kf = m3 / (m0 a3): d rho / d a0 = kf, d rho / d a3 =
                # -rho / a3; no division by a0, so an empty loss cone still gets its error bar
                fill_ok = s0 & e0 & (m3 > TOL_SR) & (a3 != 0.0)
                kf = m3 / (m0 * a3) if fill_ok else nan
                qf = a0 * kf / a3 if fill_ok else nan
                var = kf * kf * v0 + qf * qf * sc[18, j] - 2 * kf * qf * sc[22, j]
                out[22, o + j] = math.sqrt(max(var, 0.0)) if fill_ok else nan
        # ---- samples whose loss cone is unknown: NaN everywhere, flag 64
        for t in range(t0, t1):
            b = blc[t]
            d = dlc[t]
            if not (b == b) or not (d == d):
                for e in range(n_e):
                    for k in range(out.shape[0]):
                        out[k, t * n_e + e] = nan
                    flag[t * n_e + e] = 64


def _value_scan_py(x, fills, vmin, vmax, lo, n_neg, n_inf):
    """Per-energy NaN-ignoring minimum of the masked finite values; negative and inf counts."""
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
                if v - v != 0.0:  # +-inf that no fill value or valid range masked
                    n_inf[e] += 1
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
        # numpy's error model: every division is guarded by a select already, and no
        # zero-divisor branch is left to stop the vectoriser (NaN and inf propagate)
        opts = ({"fastmath": fastmath, "error_model": "numpy"}
                if name == "partition" else {})
        _JIT[name] = numba.njit(cache=True, nogil=True, **opts)(py)
    return _JIT[name]


_RAD = math.pi / 180.0


def _same_view(a, b):
    """Whether two arrays are the same view of the same memory (so equal, NaN included)."""
    return (a.__array_interface__["data"][0] == b.__array_interface__["data"][0]
            and a.shape == b.shape and a.strides == b.strides and a.dtype == b.dtype)


def partition_block(x, s, wpre, cos_a1, cos_a2, fold, blc, dlc, band, out, stats,
                    flag=None, cones_ns=None, hemi_row=-1):
    """Fill ``out`` (and ``flag``) with the partition outputs of one time block.

    Parameters
    ----------
    x : numpy.ndarray
        Flux (n, E, P), canonical units, NaN where missing.
    s : numpy.ndarray or None
        1-sigma errors (n, E, P).
    wpre : numpy.ndarray or None
        Precomputed weights (n, P, 7) (telescopes): precipitating,
        quasi-trapped, trapped, band outside the loss cone, whole look, lost
        north, lost south; None for fixed bins.
    cos_a1, cos_a2 : numpy.ndarray
        Cosines of the bin edges (P,), used when ``wpre`` is None.
    fold : float
        2 for folded bins, else 1.
    blc, dlc : numpy.ndarray
        Bounce and drift loss cones (n,) in degrees.
    band : float
        Width of the band outside the loss cone for the filling ratio (deg).
    out : numpy.ndarray
        Output array (n_out, >= n * E), written in place at ``[k, t * E + e]``
        (each output row contiguous; rows may be padded apart). Row 14 (the
        flag) is written only when ``flag`` is None.
    stats : numpy.ndarray
        (E, >= 3) int64 counters; columns 0-2 are incremented in place: valid
        (finite) flux values, negative flux values, negative errors (the
        validator's value checks, gathered in the same pass).
    flag : numpy.ndarray, optional
        (>= n * E,) int16 array receiving ``partition_flag``; None: the flags
        go to ``out[14]`` as numbers.
    cones_ns : tuple of numpy.ndarray, optional
        ``(loss_cone_north, loss_cone_south)`` (n,) in degrees, needed when
        ``hemi_row >= 0``.
    hemi_row : int, optional
        When >= 0, rows ``hemi_row`` to ``hemi_row + 3`` receive
        ``flux_lost_north``, ``flux_lost_south``, ``fraction_lost_north``,
        ``fraction_lost_south`` and, with errors, the next four rows their
        uncertainties.
    """
    n = x.shape[0]
    has_s = s is not None
    s_arr = s if has_s else np.zeros((1, 1, 1), dtype=x.dtype)
    use_pre = wpre is not None
    w_arr = wpre if use_pre else np.zeros((1, 1, 7))
    blc = np.asarray(blc, dtype=float)
    dlc = np.asarray(dlc, dtype=float)
    # the three edge cosines of every sample, by numpy passes made in place; the same
    # array for both cones (the dipole's) is recognised without comparing its values
    cosb = np.multiply(blc, _RAD)
    np.cos(cosb, out=cosb)
    if _same_view(dlc, blc):
        dlc, cosd = blc, cosb
    else:
        dlc = np.maximum(dlc, blc)
        cosd = np.multiply(dlc, _RAD)
        np.cos(cosd, out=cosd)
    if hemi_row >= 0:
        cos_ns = []
        for c in cones_ns:
            c = np.asarray(c, dtype=float)
            if _same_view(c, blc):  # the dipole's: one cone for every purpose
                cos_ns.append(cosb)
            else:
                cc = np.multiply(c, _RAD)
                np.cos(cc, out=cc)
                cos_ns.append(cc)
        cosn, coss = cos_ns
    else:
        cosn = coss = cosb
    coso = np.add(blc, float(band))
    np.minimum(coso, 90.0, out=coso)
    np.multiply(coso, _RAD, out=coso)
    np.cos(coso, out=coso)
    flag_arr = np.empty(n * x.shape[1], dtype=np.int16) if flag is None else flag
    args = (x, s_arr, has_s, w_arr, use_pre, np.asarray(cos_a1, dtype=float),
            np.asarray(cos_a2, dtype=float), float(fold), blc, dlc, cosb, cosd, coso, cosn,
            coss, int(hemi_row), out, flag_arr, stats, _CHUNK)
    _jitted("partition")(*args)
    if flag is None:
        out[14, : flag_arr.size] = flag_arr


def value_scan(x, fills, vmin, vmax):
    """Return the per-energy minimum of valid values (NaN if none), negative and inf counts.

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
    n_inf : numpy.ndarray
        (E,) number of infinite values that neither a fill value nor the
        valid range masked (not valid, neither in ``lo`` nor in ``n_neg``).
    """
    lo = np.full(x.shape[1], np.nan)
    n_neg = np.zeros(x.shape[1], dtype=np.int64)
    n_inf = np.zeros(x.shape[1], dtype=np.int64)
    f = np.asarray(fills, dtype=float).reshape(-1)
    _jitted("scan")(x, f, float(vmin), float(vmax), lo, n_neg, n_inf)
    return lo, n_neg, n_inf
