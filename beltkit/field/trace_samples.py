r"""Samples of ln|B| along each traced line, and the line's minimum of |B| (its magnetic equator).

The two half-traces of a line are merged into one row of samples sorted by
arc length :math:`s` from the northern footpoint (``s = 0``; "north" is the
end reached along :math:`\mathbf{B}`). The minimum of :math:`|B|` along the
line is refined from the discrete minimum of the samples by successive
parabolic interpolation of :math:`\ln|B|(s)`, each trial point computed by
an exact Runge-Kutta step from the neighbouring sample
(:func:`~beltkit.field.trace_step.dopri_step`), and then added to the
samples. These rows are what the integral invariant is computed on
(:mod:`~beltkit.field.trace_integral`).
"""

from __future__ import annotations

import numpy as np

from .trace_step import dopri_step

__all__ = ["assemble_samples", "insert_minimum", "pad_samples", "refine_minimum"]


def assemble_samples(half_n, half_s, n, x0, b0):
    """Merge the two half-traces into arrays sorted by arc length from the northern foot.

    Parameters
    ----------
    half_n, half_s : HalfTrace
        The northward and southward halves (:mod:`~beltkit.field.trace_ends`).
    n : int
        Number of lines.
    x0 : numpy.ndarray, shape (n, 3)
        Start points, GEO km.
    b0 : numpy.ndarray, shape (n,)
        :math:`|B|` at the start points, nT.

    Returns
    -------
    tuple of numpy.ndarray
        ``(s, lb, xs, n_samples, len_n)``: arc length from the northern
        end (km, (n, K)), ln(|B| / nT) (n, K), positions (GEO km, (n, K,
        3)), samples per row (start point included) and the arc length
        from the northern end to the start point (0 where the northern
        half has no length). Unused cells are NaN.
    """
    cnt_n = np.bincount(half_n.rec_idx, minlength=n)
    cnt_s = np.bincount(half_s.rec_idx, minlength=n)
    total = cnt_n + 1 + cnt_s
    k_max = int(total.max()) if n else 1
    s = np.full((n, k_max), np.nan)
    lb = np.full((n, k_max), np.nan)
    xs = np.full((n, k_max, 3), np.nan)
    len_n = np.where(np.isfinite(half_n.length), half_n.length, 0.0)

    def ranks(idx):
        order = np.argsort(idx, kind="stable")
        sidx = idx[order]
        first = np.searchsorted(sidx, sidx, side="left")
        rank = np.empty(idx.size, dtype=np.int64)
        rank[order] = np.arange(idx.size) - first
        return rank

    with np.errstate(divide="ignore", invalid="ignore"):
        rn = ranks(half_n.rec_idx)
        pos = cnt_n[half_n.rec_idx] - 1 - rn
        s[half_n.rec_idx, pos] = len_n[half_n.rec_idx] - half_n.rec_s
        lb[half_n.rec_idx, pos] = np.log(half_n.rec_b)
        xs[half_n.rec_idx, pos] = half_n.rec_x
        s[np.arange(n), cnt_n] = len_n
        lb[np.arange(n), cnt_n] = np.log(b0)
        xs[np.arange(n), cnt_n] = x0
        rs = ranks(half_s.rec_idx)
        pos = cnt_n[half_s.rec_idx] + 1 + rs
        s[half_s.rec_idx, pos] = len_n[half_s.rec_idx] + half_s.rec_s
        lb[half_s.rec_idx, pos] = np.log(half_s.rec_b)
        xs[half_s.rec_idx, pos] = half_s.rec_x
    return s, lb, xs, total, len_n


def refine_minimum(field, s, lb, xs, n_samples, ok, iterations=10):
    r"""Successive parabolic interpolation of ln|B|(s) around the discrete minimum.

    Each trial point is computed by one Runge-Kutta step from the sample
    before the bracket, so the refined minimum has the integrator's accuracy.

    Parameters
    ----------
    field : LineField
        The unit field of the model (:mod:`~beltkit.field.trace_step`).
    s, lb, xs : numpy.ndarray
        Samples of :func:`assemble_samples`.
    n_samples : numpy.ndarray of int, shape (N,)
        Valid samples per row.
    ok : numpy.ndarray of bool, shape (N,)
        Rows to refine (closed lines with at least three samples).
    iterations : int, default 10
        Most parabolic steps per line; a line stops earlier once its gain
        in :math:`\ln|B|` stays below 1e-13 twice.

    Returns
    -------
    tuple of numpy.ndarray
        ``(b_min, s_min, x_min)``: minimum :math:`|B|` (nT), its arc length
        from the northern end (km) and position (GEO km); NaN where not `ok`.

    Notes
    -----
    The vertex of the parabola through :math:`(a, f_a), (b, f_b), (c, f_c)`
    is :math:`v = (a + b)/2 - d_1 / (2 c_2)` with :math:`d_1 = (f_b - f_a)/(b -
    a)` and :math:`c_2 = ((f_c - f_b)/(c - b) - d_1)/(c - a)` (Brent 1973,
    *Algorithms for Minimization without Derivatives*, ch. 5); the bracket
    keeps the lowest point in the middle.
    """
    n = s.shape[0]
    b_min = np.full(n, np.nan)
    s_min = np.full(n, np.nan)
    x_min = np.full((n, 3), np.nan)
    rows = np.flatnonzero(ok)
    if rows.size == 0:
        return b_min, s_min, x_min
    lbr = np.where(np.isfinite(lb[rows]), lb[rows], np.inf)
    k = np.argmin(lbr, axis=1)
    k = np.clip(k, 1, n_samples[rows] - 2)
    ka, kc = k - 1, k + 1
    sa, sb, sc = s[rows, ka], s[rows, k], s[rows, kc]
    fa, fb, fc = lb[rows, ka], lb[rows, k], lb[rows, kc]
    x_base = xs[rows, ka]
    # stepping from the bracket's left sample towards the south: against the field
    k1, _ = field(x_base, rows)
    best_x = xs[rows, k].copy()
    # each line iterates until its gain stays below 1e-13 twice (converged lines drop out)
    act = np.arange(rows.size)
    stall = np.zeros(rows.size, dtype=np.int8)
    for _ in range(iterations):
        a_, b_, c_ = sa[act], sb[act], sc[act]
        fa_, fb_, fc_ = fa[act], fb[act], fc[act]
        d1 = (fb_ - fa_) / (b_ - a_)
        d2 = (fc_ - fb_) / (c_ - b_)
        curv = (d2 - d1) / (c_ - a_)
        with np.errstate(divide="ignore", invalid="ignore"):
            v = 0.5 * (a_ + b_) - d1 / (2 * curv)
        width = c_ - a_
        bad = ~np.isfinite(v) | (curv <= 0)
        v = np.where(bad, 0.5 * (a_ + c_), v)
        v = np.clip(v, a_ + 1e-3 * width, c_ - 1e-3 * width)
        # avoid a trial point on top of the current best
        near = np.abs(v - b_) < 1e-6 * width
        v = np.where(near, np.where(b_ - a_ > c_ - b_, b_ - 1e-3 * width, b_ + 1e-3 * width), v)
        t = v - a_
        xv, _, _, bv = dopri_step(field, x_base[act], k1[act], t, -1.0, rows[act])
        with np.errstate(divide="ignore", invalid="ignore"):
            fv = np.log(bv)
        better = fv < fb_
        left = v < b_
        # new bracket (a, b, c) keeping the lowest point in the middle
        sa[act] = np.where(better, np.where(left, a_, b_), np.where(left, v, a_))
        fa[act] = np.where(better, np.where(left, fa_, fb_), np.where(left, fv, fa_))
        sb[act] = np.where(better, v, b_)
        fb[act] = np.where(better, fv, fb_)
        sc[act] = np.where(better, np.where(left, b_, c_), np.where(left, c_, v))
        fc[act] = np.where(better, np.where(left, fb_, fc_), np.where(left, fc_, fv))
        best_x[act] = np.where(better[:, None], xv, best_x[act])
        stall[act] = np.where(fb_ - fb[act] < 1e-13, stall[act] + 1, 0)
        act = act[stall[act] < 2]
        if act.size == 0:
            break
    best_s, best_f = sb, fb
    b_min[rows] = np.exp(best_f)
    s_min[rows] = best_s
    x_min[rows] = best_x
    return b_min, s_min, x_min


def insert_minimum(s, lb, n_samples, s_min, b_min, ok):
    """Add the refined minimum to the samples (or move the nearest sample onto it).

    Parameters
    ----------
    s, lb : numpy.ndarray, shape (N, K)
        Arc length (km) and ln(|B| / nT) samples.
    n_samples : numpy.ndarray of int, shape (N,)
        Valid samples per row.
    s_min, b_min : numpy.ndarray, shape (N,)
        The refined minimum (:func:`refine_minimum`).
    ok : numpy.ndarray of bool, shape (N,)
        Rows that take the minimum (closed lines).

    Returns
    -------
    tuple of numpy.ndarray
        ``(s, lb, n_samples)`` with one more column; a sample closer to the
        minimum than 1e-3 of the local spacing is moved onto it, otherwise
        the minimum is inserted in order.
    """
    n, k_max = s.shape
    s_new = np.concatenate([s, np.full((n, 1), np.nan)], axis=1)
    lb_new = np.concatenate([lb, np.full((n, 1), np.nan)], axis=1)
    rows = np.flatnonzero(ok & np.isfinite(s_min))
    if rows.size == 0:
        return s_new, lb_new, n_samples
    sr = s[rows]
    cols = np.arange(k_max)[None, :]
    valid = cols < n_samples[rows, None]
    dist = np.where(valid, np.abs(sr - s_min[rows, None]), np.inf)
    k_near = np.argmin(dist, axis=1)
    d_near = dist[np.arange(rows.size), k_near]
    gaps = np.abs(np.diff(sr, axis=1, append=sr[:, -1:]))
    ar = np.arange(rows.size)
    spacing = np.maximum(gaps[ar, k_near], gaps[ar, np.maximum(k_near - 1, 0)])
    move = d_near < 1e-3 * spacing
    mr = rows[move]
    s_new[mr, k_near[move]] = s_min[mr]
    lb_new[mr, k_near[move]] = np.log(b_min[mr])
    ir = rows[~move]
    if ir.size:
        # place the minimum after the last sample below it and shift the rest right
        k_ins = np.sum(valid[~move] & (sr[~move] < s_min[ir, None]), axis=1)
        c = np.arange(k_max + 1)[None, :]
        src = np.where(c < k_ins[:, None], c, c - 1)
        src = np.clip(src, 0, k_max - 1)
        s_sh = np.take_along_axis(s[ir], src, axis=1)
        lb_sh = np.take_along_axis(lb[ir], src, axis=1)
        at = c == k_ins[:, None]
        s_sh = np.where(at, s_min[ir, None], s_sh)
        lb_sh = np.where(at, np.log(b_min[ir])[:, None], lb_sh)
        beyond = c >= (n_samples[ir] + 1)[:, None]
        s_new[ir] = np.where(beyond, np.nan, s_sh)
        lb_new[ir] = np.where(beyond, np.nan, lb_sh)
        n_samples = n_samples.copy()
        n_samples[ir] += 1
    return s_new, lb_new, n_samples


def pad_samples(s, lb, n_samples):
    """Pad each row after its last valid sample with that sample's values.

    Row-wise searches (``searchsorted`` on the flattened rows) then see
    sorted rows.

    Parameters
    ----------
    s, lb : numpy.ndarray, shape (N, K)
        Arc length (km) and ln(|B| / nT) samples; NaN after the valid ones.
    n_samples : numpy.ndarray of int, shape (N,)
        Number of valid samples per row (at least 1).

    Returns
    -------
    tuple of numpy.ndarray
        The padded ``(s, lb)``.
    """
    last = np.take_along_axis(s, (n_samples - 1)[:, None], axis=1)[:, 0]
    last_lb = np.take_along_axis(lb, (n_samples - 1)[:, None], axis=1)[:, 0]
    cols = np.arange(s.shape[1])[None, :]
    pad = cols >= n_samples[:, None]
    s = np.where(pad, last[:, None], s)
    lb = np.where(pad, last_lb[:, None], lb)
    return s, lb
