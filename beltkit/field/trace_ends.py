r"""Following each half-line to its end: footpoint crossing, escape, outer boundary, step limit.

Half-lines (one direction of a line each) are followed from their start
points with :func:`~beltkit.field.trace_step.dopri_step` under a step-size
controller per half-line, until each one

- crosses the stop radius (its footpoint; the crossing is refined by regula
  falsi on the length of the last step, so footpoints carry the full
  accuracy of the integrator),
- escapes beyond the maximum radius (open, reason 1),
- leaves the model's outer boundary (open, reason 2; models with an
  ``inside(xyz_km, time)`` method such as :class:`beltkit.field.T89`),
- runs out of steps (open, reason 3; tracing never hangs), or
- optionally, passes the mirror point of a given field.

The samples met on the way (arc length, :math:`|B|`, position) are recorded.

Method
------
The local error tolerance is ``rtol`` times the geocentric distance, and the
step is also capped at ``max_step_frac`` times the distance, so steps grow
with the local scale length of the field; the step-size controller is that of
Hairer, Norsett & Wanner (*Solving Ordinary Differential Equations I*, 2nd
ed., 1993, sect. II.4, eq. 4.13).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .trace_step import dopri_step

__all__ = ["OPEN_REASONS", "HalfTrace", "split_halves", "trace_halves"]

#: Codes of ``open_reason`` (CF flag values) and their meanings.
OPEN_REASONS = {0: "closed_or_unresolved", 1: "beyond_max_radius", 2: "outside_model_boundary",
                3: "step_limit"}


@dataclass
class HalfTrace:
    """Result of tracing half-lines in one direction each from their start points.

    Attributes
    ----------
    foot : numpy.ndarray, shape (N, 3)
        Stop-altitude crossing, GEO km (NaN if none).
    b_foot : numpy.ndarray, shape (N,)
        :math:`|B|` at the crossing (or at the last sample of a half-line
        ended by ``b_stop``), nT.
    length : numpy.ndarray, shape (N,)
        Arc length from the start to the end, km.
    open : numpy.ndarray of bool, shape (N,)
        Escaped, left the model's boundary or ran out of steps.
    reason : numpy.ndarray of int8, shape (N,)
        Code of :data:`OPEN_REASONS` (0 if not open).
    steps : numpy.ndarray, shape (N,)
        Accepted steps.
    rec_idx, rec_s, rec_b, rec_x : numpy.ndarray
        The samples, in order along each half-line: half-line index, arc
        length from the start (> 0, km), :math:`|B|` (nT) and position
        (shape (M, 3), GEO km).
    """

    foot: np.ndarray  # (N, 3) position of the stop-altitude crossing (NaN if none)
    b_foot: np.ndarray  # (N,)
    length: np.ndarray  # (N,) arc length from start to the foot
    open: np.ndarray  # (N,) bool, escaped or out of steps
    reason: np.ndarray  # (N,) int8, OPEN_REASONS code
    steps: np.ndarray  # (N,) accepted steps
    rec_idx: np.ndarray  # samples: line index
    rec_s: np.ndarray  # samples: arc length from the start (>0)
    rec_b: np.ndarray  # samples: |B|
    rec_x: np.ndarray  # samples: position (M, 3)


def trace_halves(field, x0, k0, b0, sign, r_stop, r_max, rtol, max_step_frac, max_steps, slack,
                 b_stop=None):
    r"""Trace half-lines from `x0` in directions `sign` (per half-line: +1 along B, -1 against).

    Both directions of every line are integrated together, as separate
    half-lines, so that each field call serves as many points as possible.
    With `b_stop` (per half-line, nT), a half-line also ends at its second
    consecutive sample where |B| rises above ``b_stop`` (past the mirror
    point of that field): it then has no footpoint, ``length`` is the arc to
    that sample and ``b_foot`` its |B|.

    Parameters
    ----------
    field : LineField
        The unit field of the model (:mod:`~beltkit.field.trace_step`).
    x0, k0 : numpy.ndarray, shape (N, 3)
        Start points (GEO km) and the unit field there.
    b0 : numpy.ndarray, shape (N,)
        :math:`|B|` at the start points, nT; half-lines with a non-finite
        value are not traced (all results NaN, not open).
    sign : numpy.ndarray, shape (N,)
        +1 to follow :math:`\mathbf{B}`, -1 to go against it.
    r_stop, r_max : float
        Stop radius (footpoints) and escape radius, km.
    rtol : float
        Local error tolerance relative to the geocentric distance.
    max_step_frac : float
        Largest step as a fraction of the geocentric distance.
    max_steps : int
        Accepted steps after which a half-line is open (reason 3).
    slack : float
        Depth below the stop radius that a trial step may reach, km.
    b_stop : numpy.ndarray, shape (N,), optional
        Field beyond whose mirror point a half-line ends, nT.

    Returns
    -------
    HalfTrace

    Notes
    -----
    A step is accepted when the norm of the error estimate is at most
    ``rtol * r``; the next step is :math:`h\,\min(5, \max(0.2,
    0.9\,(\mathrm{err}/\mathrm{tol})^{-1/5}))` (not above :math:`h` after a
    rejection; Hairer, Norsett & Wanner 1993, eq. II.4.13). A half-line
    crossing the stop radius is refined after the loop, all at once: the
    length :math:`t` of the last step with :math:`|\mathbf{x}(t)| =
    r_{stop}` starts from the root of a cubic Hermite arc through both ends
    of the step and follows regula falsi with the Illinois modification
    (Dowell & Jarratt 1971, BIT 11, 168), each trial an exact Runge-Kutta
    step.
    """
    n = x0.shape[0]
    foot = np.full((n, 3), np.nan)
    b_foot = np.full(n, np.nan)
    length = np.full(n, np.nan)
    is_open = np.zeros(n, dtype=bool)
    reason = np.zeros(n, dtype=np.int8)
    steps = np.zeros(n, dtype=np.int64)
    rec = []
    crossings = []

    idx = np.flatnonzero(np.isfinite(b0))
    x = x0[idx].copy()
    k1 = k0[idx].copy()
    s = np.zeros(idx.size)
    r = np.linalg.norm(x, axis=1)
    h = np.minimum(0.01 * r, 0.5 * (r - r_stop) + slack)
    if b_stop is not None:
        b_prev = b0[idx].copy()
        rising = np.zeros(idx.size, dtype=np.int8)
    tries = 0
    max_tries = 4 * max_steps
    while idx.size:
        tries += 1
        # the step may not carry the line much deeper than `slack` below the stop radius
        h = np.minimum(h, np.maximum(max_step_frac * r, 1e-3))
        h = np.minimum(h, r - r_stop + slack)
        x_new, err, k_new, b_new = dopri_step(field, x, k1, h, sign[idx], idx)
        err_norm = np.linalg.norm(err, axis=1)
        tol = rtol * r
        bad_field = ~np.isfinite(b_new) | ~np.all(np.isfinite(x_new), axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = err_norm / tol
        accept = (ratio <= 1.0) & ~bad_field
        # step-size controller (Hairer et al. 1993, eq. II.4.13), safety factor 0.9
        with np.errstate(divide="ignore", invalid="ignore"):
            fac = np.where(ratio > 0, 0.9 * ratio ** (-0.2), 5.0)
        fac = np.clip(np.nan_to_num(fac, nan=0.2), 0.2, 5.0)
        h_next = h * np.where(accept, fac, np.minimum(fac, 1.0))

        r_new = np.linalg.norm(x_new, axis=1)
        crossed = accept & (r_new < r_stop)
        escaped = accept & (r_new > r_max)
        beyond = accept & ~crossed & ~escaped
        if field.inside_fn is not None and np.any(beyond):
            # the model's outer boundary: a line leaving it is open, never given a footpoint
            b_idx = np.flatnonzero(beyond)
            beyond[b_idx] = ~field.inside(x_new[b_idx], idx[b_idx])
        else:
            beyond[:] = False
        moved = accept & ~crossed & ~escaped & ~beyond

        done = np.zeros(idx.size, dtype=bool)
        if np.any(crossed):
            # the crossing is refined after the loop, for all lines at once (one set of
            # field calls instead of a few small ones in every step that has crossings)
            c = np.flatnonzero(crossed)
            crossings.append((x[c], k1[c], h[c], r[c], x_new[c], k_new[c], idx[c], s[c]))
            steps[idx[c]] += 1
            done[c] = True
        if np.any(escaped):
            is_open[idx[escaped]] = True
            reason[idx[escaped]] = 1
            done |= escaped
        if np.any(beyond):
            is_open[idx[beyond]] = True
            reason[idx[beyond]] = 2
            done |= beyond
        if np.any(bad_field):
            # a model that cannot answer at a trial point: the line stays unresolved (NaN)
            done |= bad_field & (h <= 1e-6 * r)
        if np.any(moved):
            m = np.flatnonzero(moved)
            x[m] = x_new[m]
            k1[m] = k_new[m]
            s[m] += h[m]
            r[m] = r_new[m]
            steps[idx[m]] += 1
            rec.append((idx[m], s[m].copy(), b_new[m], x_new[m]))
            if b_stop is not None:
                up = (b_new[m] > b_stop[idx[m]]) & (b_new[m] > b_prev[m])
                rising[m] = np.where(up, rising[m] + 1, 0)
                b_prev[m] = b_new[m]
                end = m[rising[m] >= 2]
                length[idx[end]] = s[end]
                b_foot[idx[end]] = b_new[end]
                done[end] = True
        h = h_next
        # a line out of steps is open; never loop forever
        out_of_steps = ~done & (steps[idx] >= max_steps)
        if tries >= max_tries:
            out_of_steps |= ~done
        if np.any(out_of_steps):
            is_open[idx[out_of_steps]] = True
            reason[idx[out_of_steps]] = 3
            done |= out_of_steps
        keep = ~done
        idx, x, k1, s, r, h = idx[keep], x[keep], k1[keep], s[keep], r[keep], h[keep]
        if b_stop is not None:
            b_prev, rising = b_prev[keep], rising[keep]

    if crossings:
        cx, ck, ch, cr, cxn, ckn, gi, cs = (np.concatenate(q) for q in zip(*crossings))
        xf, kf, bf, tf = _refine_crossing(field, cx, ck, ch, cr, cxn, ckn, sign[gi], gi, r_stop)
        foot[gi] = xf
        b_foot[gi] = bf
        length[gi] = cs + tf
        # each line's crossing is its last record, so the per-line order is kept
        rec.append((gi, cs + tf, bf, xf))
    if rec:
        rec_idx = np.concatenate([q[0] for q in rec])
        rec_s = np.concatenate([q[1] for q in rec])
        rec_b = np.concatenate([q[2] for q in rec])
        rec_x = np.concatenate([q[3] for q in rec])
    else:
        rec_idx = np.zeros(0, dtype=np.int64)
        rec_s = rec_b = np.zeros(0)
        rec_x = np.zeros((0, 3))
    return HalfTrace(foot, b_foot, length, is_open, reason, steps, rec_idx, rec_s, rec_b, rec_x)


def _hermite_crossing(x0, k0, x1, k1, h, sign, r_stop):
    """First guess of the crossing: cubic Hermite arc between two points (no field calls).

    The cubic matches the positions and the (signed) unit tangents at both
    ends; the root of |x(t)| = r_stop in (0, h) is found by bisection
    followed by secant steps on the cubic.
    """
    d0 = k0 * sign[:, None]
    d1 = k1 * sign[:, None]
    hh = h[:, None]

    def pos(t):
        u = (t / h)[:, None]
        h00 = 2 * u**3 - 3 * u**2 + 1
        h10 = u**3 - 2 * u**2 + u
        h01 = -2 * u**3 + 3 * u**2
        h11 = u**3 - u**2
        return h00 * x0 + h10 * hh * d0 + h01 * x1 + h11 * hh * d1

    a = np.zeros(h.size)
    b = h.copy()
    for _ in range(30):
        m = 0.5 * (a + b)
        above = np.linalg.norm(pos(m), axis=1) > r_stop
        a = np.where(above, m, a)
        b = np.where(above, b, m)
    return 0.5 * (a + b)


def split_halves(both, n):
    """Split a two-direction trace (half-lines 0..n-1 north, n..2n-1 south).

    Parameters
    ----------
    both : HalfTrace
        Result of :func:`trace_halves` on ``2 n`` half-lines.
    n : int
        Number of lines.

    Returns
    -------
    list of HalfTrace
        ``[north, south]``, each indexed by line ``0 .. n-1``.
    """
    out = []
    for lo in (0, n):
        sel = (both.rec_idx >= lo) & (both.rec_idx < lo + n)
        part = slice(lo, lo + n)
        out.append(HalfTrace(both.foot[part], both.b_foot[part], both.length[part],
                             both.open[part], both.reason[part], both.steps[part],
                             both.rec_idx[sel] - lo,
                             both.rec_s[sel], both.rec_b[sel], both.rec_x[sel]))
    return out


def _refine_crossing(field, x, k1, h, r, x_new, k_new, sign, idx, r_stop, tol_km=1e-6):
    """Find the step length t in (0, h] that ends exactly on the stop radius.

    g(t) = |x(t)| - r_stop, with x(t) a full Runge-Kutta step of length t
    from the last point above the stop radius; g(0) > 0 and g(h) < 0 are
    known from the accepted step. The first trial is the root of a cubic
    Hermite arc through both ends; then regula falsi with the Illinois
    modification (Dowell & Jarratt 1971, BIT 11, 168) until |g| < `tol_km`.
    """
    ta = np.zeros(h.size)
    ga = r - r_stop
    tb = h.copy()
    gb = np.linalg.norm(x_new, axis=1) - r_stop
    side = np.zeros(h.size)
    best_t, best_x = tb.copy(), x_new.copy()
    best_k = k_new.copy()
    t = _hermite_crossing(x, k1, x_new, k_new, h, sign, r_stop)
    todo = np.ones(h.size, dtype=bool)
    best_b = np.full(h.size, np.nan)
    for it in range(12):
        if it > 0:
            with np.errstate(divide="ignore", invalid="ignore"):
                t = ta - ga * (tb - ta) / (gb - ga)
            t = np.where(np.isfinite(t), t, 0.5 * (ta + tb))
        t = np.clip(t, ta, tb)
        w = np.flatnonzero(todo)
        xt, _, kt, bt = dopri_step(field, x[w], k1[w], t[w], sign[w], idx[w])
        gt = np.full(h.size, 0.0)
        gt[w] = np.linalg.norm(xt, axis=1) - r_stop
        best_t[w], best_x[w], best_k[w], best_b[w] = t[w], xt, kt, bt
        left = gt > 0  # root lies in (t, tb]
        # Illinois: halve the retained end's value when the same end is kept twice
        ga_new = np.where(left, gt, np.where(side == -1, 0.5 * ga, ga))
        gb_new = np.where(left, np.where(side == 1, 0.5 * gb, gb), gt)
        upd = todo
        ta = np.where(upd & left, t, ta)
        tb = np.where(upd & ~left, t, tb)
        ga = np.where(upd, ga_new, ga)
        gb = np.where(upd, gb_new, gb)
        side = np.where(upd, np.where(left, 1, -1), side)
        todo = todo & (np.abs(gt) >= tol_km)
        if not np.any(todo):
            break
    return best_x, best_k, best_b, best_t

