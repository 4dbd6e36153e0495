r"""Vectorised field-line tracing with an adaptive Runge-Kutta scheme in arc length.

Many field lines are followed at once: every array operation acts on all the
lines that are still being integrated, and only the loop over integration
steps is a Python loop. Each line is followed from its start point in both
directions until it crosses the stop altitude (the crossing is refined by a
secant search on the length of the last step, so footpoints carry the full
accuracy of the integrator), or until it escapes beyond a maximum radius, leaves the model's outer
boundary (a model with an ``inside(xyz_km, time)`` method, such as
:class:`beltkit.field.T89`, whose validity ends at a magnetopause), or
exceeds a maximum number of steps (then it is flagged ``open``, with the
reason in ``open_reason``; it never gets a footpoint, and tracing never
hangs).

Method
------
The field-line equation :math:`d\mathbf{x}/ds = \pm \mathbf{B}/|\mathbf{B}|`
is integrated with the explicit embedded Runge-Kutta pair of Dormand & Prince
(1980, J. Comput. Appl. Math. 6, 19), fifth-order solution with a fourth-order
error estimate, first-same-as-last, with a step-size controller per line
(Hairer, Norsett & Wanner, *Solving Ordinary Differential Equations I*, 2nd
ed., 1993, sect. II.4). The local error tolerance is ``rtol`` times the
geocentric distance, and the step is also capped at ``max_step_frac`` times the
distance, so steps grow with the local scale length of the field.

The minimum of :math:`|B|` along each line (the line's magnetic equator) is
refined from the discrete minimum of the samples by successive parabolic
interpolation, each trial point being computed by an exact Runge-Kutta step
from the neighbouring sample.

The samples of :math:`\ln|B|` versus arc length are kept so that the integral
invariant :math:`I = \int \sqrt{1 - B/B_m}\,ds` between the mirror points
can be computed for any mirror field (see :func:`integral_invariant`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..constants import R_E_KM
from ..errors import PhysicsError
from .points import start_points

__all__ = ["BLOCK_LINES", "FOOT_TOLERANCE", "OPEN_REASONS", "FieldLines", "blocks",
           "integral_invariant", "time_block", "trace", "trace_lines"]

# Dormand-Prince 5(4) tableau (Dormand & Prince 1980; Hairer et al. 1993, table 5.2).
_A = (
    (),
    (1 / 5,),
    (3 / 40, 9 / 40),
    (44 / 45, -56 / 15, 32 / 9),
    (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
    (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
    (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84),
)
# difference between the 5th- and 4th-order weights (error estimate), 7 stages
_E = (71 / 57600, 0.0, -71 / 16695, 71 / 1920, -17253 / 339200, 22 / 525, -1 / 40)

_GAUSS_NODES = 64
#: Codes of ``open_reason`` (CF flag values) and their meanings.
OPEN_REASONS = {0: "closed_or_unresolved", 1: "beyond_max_radius", 2: "outside_model_boundary",
                3: "step_limit"}
#: Relative excess of a mirror field over a footpoint field still placed on the footpoint.
FOOT_TOLERANCE = 1e-7
#: Lines traced together in one batch by the high-level functions (bounds memory:
#: the samples of a batch take about 5 * 8 * 150 bytes per line).
BLOCK_LINES = 20_000


def blocks(n, size=None):
    """Yield slices that split ``range(n)`` into batches of at most `size` lines."""
    size = BLOCK_LINES if size is None else int(size)
    for i in range(0, n, size):
        yield slice(i, min(n, i + size))


def time_block(t, sl):
    """Return the times of the lines in slice `sl` (a scalar time is shared)."""
    return t[sl] if np.ndim(t) else t


def _check_time_shape(time, n):
    """Return the time argument as a scalar or a flat array of length `n`."""
    t = np.asarray(time)
    if t.ndim == 0:
        return t[()], False
    if t.size == 1:
        return t.reshape(-1)[0], False
    if t.size != n:
        raise PhysicsError(
            f"argument 'time' has {t.size} elements but there are {n} start points; "
            "give one time, or one time per start point (broadcastable to the leading "
            "dimensions of the positions)"
        )
    return t.reshape(-1), True


class _Field:
    """Unit tangent and magnitude of a model's field, for subsets of the lines."""

    def __init__(self, model, time, per_line, n_lines):
        self.model = model
        self.time = time
        self.per_line = per_line
        self.n_lines = max(int(n_lines), 1)
        self.evaluations = 0
        # optional outer boundary of the model (None: the model is valid everywhere)
        self.inside_fn = getattr(model, "inside", None)

    def inside(self, x, idx):
        """Return True where points lie inside the model's boundary (all True without one)."""
        if self.inside_fn is None:
            return np.ones(x.shape[0], dtype=bool)
        t = self.time[idx % self.n_lines] if self.per_line else self.time
        return np.asarray(self.inside_fn(x, t), dtype=bool).reshape(x.shape[0])

    def __call__(self, x, idx):
        # indices may address half-lines (line + n_lines for the southward half)
        t = self.time[idx % self.n_lines] if self.per_line else self.time
        b = np.asarray(self.model.field_geo(x, t), dtype=float)
        self.evaluations += x.shape[0]
        bmag = np.sqrt(np.einsum("...i,...i->...", b, b))
        with np.errstate(invalid="ignore", divide="ignore"):
            unit = b / bmag[:, None]
        return unit, bmag


def _rk_step(field, x, k1, h, sign, idx):
    """One Dormand-Prince step of length `h` (per line) from `x`.

    `sign` (+1 along B, -1 against; scalar or per line) sets the direction;
    `k1` is the unit field vector at `x`. Returns the 5th-order position,
    the error-estimate vector, the unit field vector and |B| at the new
    point (first-same-as-last: they serve as the next step's first stage).
    """
    hs = (h * sign)[:, None]
    ks = [k1]
    for i in range(1, 7):
        xi = x.copy()
        for a, k in zip(_A[i], ks):
            if a != 0.0:
                xi += hs * a * k
        if i == 6:
            x_new = xi
        unit, bmag = field(xi, idx)
        ks.append(unit)
    err = np.zeros_like(x)
    for e, k in zip(_E, ks):
        if e != 0.0:
            err += hs * e * k
    return x_new, err, ks[6], bmag


@dataclass
class _Half:
    """Result of tracing in one direction from the start points."""

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


def _trace_half(field, x0, k0, b0, sign, r_stop, r_max, rtol, max_step_frac, max_steps, slack,
                b_stop=None):
    """Trace half-lines from `x0` in directions `sign` (per half-line: +1 along B, -1 against).

    Both directions of every line are integrated together, as separate
    half-lines, so that each field call serves as many points as possible.
    With `b_stop` (per half-line, nT), a half-line also ends at its second
    consecutive sample where |B| rises above ``b_stop`` (past the mirror
    point of that field): it then has no footpoint, ``length`` is the arc to
    that sample and ``b_foot`` its |B|.
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
        x_new, err, k_new, b_new = _rk_step(field, x, k1, h, sign[idx], idx)
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
    return _Half(foot, b_foot, length, is_open, reason, steps, rec_idx, rec_s, rec_b, rec_x)


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


def _split_halves(both, n):
    """Split a two-direction trace (half-lines 0..n-1 north, n..2n-1 south)."""
    out = []
    for lo in (0, n):
        sel = (both.rec_idx >= lo) & (both.rec_idx < lo + n)
        part = slice(lo, lo + n)
        out.append(_Half(both.foot[part], both.b_foot[part], both.length[part],
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
        xt, _, kt, bt = _rk_step(field, x[w], k1[w], t[w], sign[w], idx[w])
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


@dataclass
class FieldLines:
    """Traced field lines in array form (the internal result of :func:`trace_lines`).

    Arc length ``s`` runs from the northern footpoint (``s = 0``) to the
    southern one; "north" is the end reached by following the field vector
    (the field enters the Earth in the northern magnetic hemisphere).

    Attributes
    ----------
    start : ndarray (N, 3)
        Start points, GEO km.
    b_start : ndarray (N,)
        |B| at the start points, nT.
    s_start : ndarray (N,)
        Arc length from the northern footpoint to the start point, km.
    foot_north, foot_south : ndarray (N, 3)
        Footpoints (stop-altitude crossings), GEO km.
    b_foot_north, b_foot_south : ndarray (N,)
        |B| at the footpoints, nT.
    xyz_min : ndarray (N, 3)
        Point of minimum |B| along the line, GEO km.
    b_min, s_min : ndarray (N,)
        Minimum |B| (nT) and its arc length from the northern footpoint (km).
    length : ndarray (N,)
        Total arc length between the footpoints, km.
    open : ndarray (N,) of bool
        The line escaped beyond the maximum radius, left the model's outer
        boundary (or started outside it) or ran out of steps.
    s, log_b : ndarray (N, K)
        Samples of arc length (km) and ln(|B| / nT) along each line, sorted by
        ``s``; padded at the end with the line's last value.
    n_samples : ndarray (N,)
        Number of valid samples per line.
    steps : ndarray (N,)
        Accepted integration steps (both directions).
    evaluations : int
        Field evaluations used (points).
    open_reason : ndarray (N,) of int8, optional
        Why a line is open (:data:`OPEN_REASONS`; the first reason met in
        the northern half, else the southern); 0 for lines not open.
    """

    start: np.ndarray
    b_start: np.ndarray
    s_start: np.ndarray
    foot_north: np.ndarray
    foot_south: np.ndarray
    b_foot_north: np.ndarray
    b_foot_south: np.ndarray
    xyz_min: np.ndarray
    b_min: np.ndarray
    s_min: np.ndarray
    length: np.ndarray
    open: np.ndarray
    s: np.ndarray
    log_b: np.ndarray
    n_samples: np.ndarray
    steps: np.ndarray
    evaluations: int
    open_reason: np.ndarray | None = None

    @property
    def closed(self):
        """Lines that reached the stop altitude at both ends (and had a finite start)."""
        return ~self.open & np.isfinite(self.length)

    def integral_invariant(self, b_m_nt):
        """Integral invariant I (km) for mirror fields `b_m_nt`; see :func:`integral_invariant`."""
        return _integral_invariant(self, b_m_nt)


def _assemble(half_n, half_s, n, x0, b0):
    """Merge the two half-traces into arrays sorted by arc length from the northern foot."""
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


def _refine_minimum(field, s, lb, xs, n_samples, ok, iterations=10):
    """Successive parabolic interpolation of ln|B|(s) around the discrete minimum.

    Each trial point is computed by one Runge-Kutta step from the sample
    before the bracket, so the refined minimum has the integrator's accuracy.
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
        xv, _, _, bv = _rk_step(field, x_base[act], k1[act], t, -1.0, rows[act])
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


def _insert_minimum(s, lb, n_samples, s_min, b_min, ok):
    """Add the refined minimum to the samples (or move the nearest sample onto it)."""
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




def trace_lines(
    model,
    start_xyz_km,
    time,
    altitude_km=100.0,
    *,
    rtol=1e-8,
    max_step_frac=0.1,
    max_radius_re=30.0,
    max_steps=3000,
    arg_name="start_xyz_km",
    b_stop_nt=None,
):
    """Trace field lines through start points; return the arrays (:class:`FieldLines`).

    This is the array-level engine behind :func:`trace`; it also keeps the
    samples of |B| along each line needed by :func:`integral_invariant`.
    Parameters are those of :func:`trace`; `arg_name` names the positions
    argument in error messages. With `b_stop_nt` (nT, scalar or one per
    line) each direction ends at its second consecutive sample where |B|
    rises above that field, beyond the mirror point of ``B_m <= b_stop_nt``
    (the minimum of the line is always passed first): :math:`I(B_m)` is
    then as on the full line, but such an end has no footpoint
    (``foot_*`` NaN; ``b_foot_*`` is |B| at the last sample, ``length``
    the arc between the last samples). Ends that reach the stop altitude
    first are footpoints as usual.

    Returns
    -------
    FieldLines
        Per-line results and samples (leading dimensions flattened).
    """
    altitude_km = float(altitude_km)
    if not np.isfinite(altitude_km) or altitude_km < 0:
        raise PhysicsError(
            f"argument 'altitude_km' must be a finite altitude >= 0 km, got {altitude_km}"
        )
    if not (0 < rtol < 1e-3):
        raise PhysicsError(f"argument 'rtol' must lie in (0, 1e-3), got {rtol}")
    if not (0 < max_step_frac <= 0.5):
        raise PhysicsError(f"argument 'max_step_frac' must lie in (0, 0.5], got {max_step_frac}")
    r_stop = R_E_KM + altitude_km
    r_max = float(max_radius_re) * R_E_KM
    if not r_max > r_stop:
        raise PhysicsError(
            f"argument 'max_radius_re' ({max_radius_re}) must exceed the stop radius "
            f"({r_stop / R_E_KM:.4f} R_E)"
        )
    x0, _ = start_points(start_xyz_km, r_stop, arg_name)
    n = x0.shape[0]
    t, per_line = _check_time_shape(time, n)
    field = _Field(model, t, per_line, n)
    finite = np.all(np.isfinite(x0), axis=1)
    unit0 = np.full((n, 3), np.nan)
    b0 = np.full(n, np.nan)
    if np.any(finite):
        fi = np.flatnonzero(finite)
        u, b = field(x0[fi], fi)
        unit0[fi] = u
        b0[fi] = b
    # start points outside the model's outer boundary are open at once (not traced)
    start_out = np.zeros(n, dtype=bool)
    if field.inside_fn is not None and np.any(finite):
        start_out[fi] = ~field.inside(x0[fi], fi)
    b_trace = np.where(start_out, np.nan, b0)
    # depth below the stop radius that a trial step may reach (the crossing is then refined)
    # (the field models refuse points more than ~10 km inside the WGS-84 surface)
    slack = max(min(0.5 * altitude_km, 50.0), 1.0)
    common = dict(r_stop=r_stop, r_max=r_max, rtol=rtol, max_step_frac=max_step_frac,
                  max_steps=max_steps, slack=slack)
    sign = np.concatenate([np.ones(n), -np.ones(n)])
    if b_stop_nt is not None:
        bs = np.broadcast_to(np.asarray(b_stop_nt, dtype=float), (n,))
        common["b_stop"] = np.concatenate([bs, bs])
    both = _trace_half(field, np.concatenate([x0, x0]), np.concatenate([unit0, unit0]),
                       np.concatenate([b_trace, b_trace]), sign, **common)
    north, south = _split_halves(both, n)
    for half in (north, south):
        half.open[start_out] = True
        half.reason[start_out] = 2

    s, lb, xs, n_samples, len_n = _assemble(north, south, n, x0, b0)
    is_open = north.open | south.open
    open_reason = np.where(north.reason > 0, north.reason, south.reason).astype(np.int8)
    closed = ~is_open & np.isfinite(north.length) & np.isfinite(south.length)
    b_min, s_min, x_min = _refine_minimum(field, s, lb, xs, n_samples, closed & (n_samples >= 3))
    s, lb, n_samples = _insert_minimum(s, lb, n_samples, s_min, b_min, closed)
    # pad each row with its last valid value (for row-wise searchsorted)
    last = np.take_along_axis(s, (n_samples - 1)[:, None], axis=1)[:, 0]
    last_lb = np.take_along_axis(lb, (n_samples - 1)[:, None], axis=1)[:, 0]
    cols = np.arange(s.shape[1])[None, :]
    pad = cols >= n_samples[:, None]
    s = np.where(pad, last[:, None], s)
    lb = np.where(pad, last_lb[:, None], lb)
    length = np.where(closed, north.length + south.length, np.nan)
    s_start = np.where(closed, len_n, np.nan)
    nan3 = np.full(3, np.nan)
    return FieldLines(
        start=x0,
        b_start=b0,
        s_start=s_start,
        foot_north=np.where(np.isfinite(north.b_foot)[:, None], north.foot, nan3),
        foot_south=np.where(np.isfinite(south.b_foot)[:, None], south.foot, nan3),
        b_foot_north=north.b_foot,
        b_foot_south=south.b_foot,
        xyz_min=np.where(closed[:, None], x_min, nan3),
        b_min=np.where(closed, b_min, np.nan),
        s_min=np.where(closed, s_min, np.nan),
        length=length,
        open=is_open,
        s=s,
        log_b=lb,
        n_samples=n_samples,
        steps=north.steps + south.steps,
        evaluations=field.evaluations,
        open_reason=open_reason,
    )


def _row_search(s, n_samples, q):
    """Row-wise searchsorted: index k with s[k] <= q < s[k+1], clipped to valid segments."""
    n, k_max = s.shape
    span = np.nanmax(np.abs(s)) if s.size else 1.0
    span = 2.0 * span + 1.0
    off = (np.arange(n) * span)[:, None]
    flat = (s + off).ravel()
    qq = np.where(np.isfinite(q), q, 0.0) + off
    k = np.searchsorted(flat, qq.ravel(), side="right").reshape(q.shape) - 1
    k = k - (np.arange(n) * k_max)[:, None]
    return np.clip(k, 0, np.maximum(n_samples - 2, 0)[:, None])


def _cubic_nodes(s, y, n_samples, k):
    """Four interpolation nodes around segment k (clipped inside each row)."""
    j0 = np.clip(k - 1, 0, np.maximum(n_samples - 4, 0)[:, None])
    rows = np.arange(s.shape[0])[:, None, None]
    cols = j0[..., None] + np.arange(4)
    cols = np.minimum(cols, (n_samples - 1)[:, None, None])
    return s[rows, cols], y[rows, cols]


def _lagrange(sn, yn, q):
    """Evaluate the cubic through nodes (sn, yn) (..., 4) at q (...)."""
    out = np.zeros(q.shape)
    for i in range(4):
        li = np.ones(q.shape)
        for j in range(4):
            if j != i:
                with np.errstate(divide="ignore", invalid="ignore"):
                    li = li * (q - sn[..., j]) / (sn[..., i] - sn[..., j])
        out = out + np.nan_to_num(li) * yn[..., i]
    return out


def _mirror_point(s, y, n_samples, k, lo, hi):
    """Root of the local cubic of y in [lo, hi] (segment k), where y changes sign."""
    sn, yn = _cubic_nodes(s, y, n_samples, k)
    a, b = lo.copy(), hi.copy()
    fa = _lagrange(sn, yn, a)
    fb = _lagrange(sn, yn, b)
    for _ in range(40):
        with np.errstate(divide="ignore", invalid="ignore"):
            m = a - fa * (b - a) / (fb - fa)
        m = np.where(np.isfinite(m) & (m > a) & (m < b), m, 0.5 * (a + b))
        fm = _lagrange(sn, yn, m)
        same = np.sign(fm) == np.sign(fa)
        a, fa = np.where(same, m, a), np.where(same, fm, fa)
        b, fb = np.where(same, b, m), np.where(same, fb, fm)
        if np.all(np.abs(b - a) <= 1e-10 * (np.abs(a) + 1.0)) or np.all(np.abs(fm) < 1e-15):
            break
    with np.errstate(divide="ignore", invalid="ignore"):
        root = a - fa * (b - a) / (fb - fa)
    return np.where(np.isfinite(root), np.clip(root, np.minimum(a, b), np.maximum(a, b)), a)


def _integral_invariant(lines, b_m_nt):
    """Compute I for each line (and each column of `b_m_nt` broadcast as (N,) or (N, M))."""
    bm = np.asarray(b_m_nt, dtype=float)
    n = lines.b_min.shape[0]
    squeeze = bm.ndim <= 1
    if bm.ndim > 2:
        raise PhysicsError(f"argument 'b_m_nt' must have shape (N,) or (N, M); got {bm.shape}")
    bm = np.broadcast_to(bm.reshape(-1, 1) if squeeze else bm,
                         (n, 1) if squeeze else (n, bm.shape[1]))
    m = bm.shape[1]
    out = np.full((n, m), np.nan)
    for j in range(m):  # loop over requested mirror fields per line (usually 1), not lines
        out[:, j] = _invariant_one(lines, bm[:, j])
    return out[:, 0] if squeeze else out


def _invariant_one(lines, bm):
    n = bm.size
    result = np.full(n, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_bm = np.log(bm)
    b_min = lines.b_min
    ok = lines.closed & np.isfinite(log_bm) & (bm > 0) & np.isfinite(b_min)
    # mirror field at (or within rounding of) the minimum: I = 0
    eq = ok & (bm <= b_min * (1 + 1e-12)) & (bm >= b_min * (1 - 1e-9))
    result[eq] = 0.0
    # mirror fields at most FOOT_TOLERANCE above a footpoint field mirror on the footpoint
    with np.errstate(invalid="ignore"):
        reach = ((bm <= lines.b_foot_north * (1 + FOOT_TOLERANCE))
                 & (bm <= lines.b_foot_south * (1 + FOOT_TOLERANCE)))
    # a cubic through the samples needs four of them
    work = ok & ~eq & (bm > b_min) & reach & (lines.n_samples >= 4)
    rows = np.flatnonzero(work)
    if rows.size == 0:
        return result
    s = lines.s[rows]
    y = lines.log_b[rows] - log_bm[rows, None]
    ns = lines.n_samples[rows]
    # footpoints within the tolerance below B_m count as the mirror points
    ar = np.arange(rows.size)
    for end in (np.zeros(rows.size, dtype=np.int64), ns - 1):
        y_end = y[ar, end]
        y[ar, end] = np.where((y_end < 0) & (y_end > -FOOT_TOLERANCE), 0.0, y_end)
    smin = lines.s_min[rows]
    k_max = s.shape[1]
    cols = np.arange(k_max)[None, :]
    valid = cols < ns[:, None]
    # north mirror: last sample before the minimum with B >= B_m
    mask_n = valid & (s < smin[:, None]) & (y >= 0)
    kn = np.where(mask_n, cols, -1).max(axis=1)
    # south mirror: first sample after the minimum with B >= B_m
    mask_s = valid & (s > smin[:, None]) & (y >= 0)
    ks = np.where(mask_s, cols, k_max).min(axis=1)
    good = (kn >= 0) & (ks < ns)
    kn = np.clip(kn, 0, k_max - 2)
    ks = np.clip(ks, 1, k_max - 1)
    r_ = np.arange(rows.size)
    lo_n = s[r_, kn]
    hi_n = np.minimum(s[r_, kn + 1], smin)
    s1 = _mirror_point(s, y, ns, kn[:, None], lo_n[:, None], hi_n[:, None])[:, 0]
    lo_s = np.maximum(s[r_, ks - 1], smin)
    hi_s = s[r_, ks]
    s2 = _mirror_point(s, y, ns, (ks - 1)[:, None], lo_s[:, None], hi_s[:, None])[:, 0]
    # exact quadrature in theta, s = c + d sin(theta): the square-root edges become smooth
    xg, wg = np.polynomial.legendre.leggauss(_GAUSS_NODES)
    theta = 0.5 * np.pi * xg
    w = 0.5 * np.pi * wg
    c = 0.5 * (s1 + s2)
    d = 0.5 * (s2 - s1)
    q = c[:, None] + d[:, None] * np.sin(theta)[None, :]
    k = _row_search(s, ns, q)
    sn, yn = _cubic_nodes(s, y, ns, k)
    yq = _lagrange(sn, yn, q)
    with np.errstate(invalid="ignore", over="ignore"):
        f = np.sqrt(np.clip(-np.expm1(yq), 0.0, None))
    integral = (f * np.cos(theta)[None, :] * w[None, :]).sum(axis=1) * d
    result[rows] = np.where(good, integral, np.nan)
    return result


def integral_invariant(lines, b_m_nt):
    r"""Integral invariant :math:`I` between the mirror points of mirror field :math:`B_m`.

    Parameters
    ----------
    lines : FieldLines or xarray.Dataset
        Output of :func:`trace_lines`, or of :func:`trace` called with
        ``samples=True``.
    b_m_nt : array_like
        Mirror field(s) in nT, shape ``(N,)`` (one per line) or ``(N, M)``.

    Returns
    -------
    numpy.ndarray
        :math:`I` in km, same shape as ``b_m_nt``; 0 for :math:`B_m = B_{min}`,
        NaN for open lines, for :math:`B_m < B_{min}` and for mirror points
        below the stop altitude (:math:`B_m` above a footpoint field).

    Notes
    -----
    .. math::

        I = \int_{s_1}^{s_2} \sqrt{1 - B(s)/B_m}\,ds

    (Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 3;
    McIlwain 1961, J. Geophys. Res. 66, 3681). The mirror points
    :math:`s_{1,2}` nearest the field minimum are found as roots of a local
    cubic interpolant of :math:`\ln B(s)` through the samples. With
    :math:`s = c + d \sin\theta` the square-root behaviour at both mirror
    points becomes a smooth integrand in :math:`\theta`, which is integrated
    by 64-point Gauss-Legendre quadrature on the same interpolant.
    """
    if isinstance(lines, xr.Dataset):
        lines = _lines_from_dataset(lines)
    return _integral_invariant(lines, b_m_nt)


def _lines_from_dataset(ds):
    if "sample_s" not in ds:
        raise PhysicsError(
            "argument 'lines' is a Dataset without samples; call beltkit.field.trace(..., "
            "samples=True)"
        )
    s = ds["sample_s"].values
    lb = np.log(ds["sample_b"].values)
    ns = ds["n_samples"].values.astype(np.int64)
    nan = np.full(ds.sizes["line"], np.nan)
    return FieldLines(
        start=ds["xyz_start"].values, b_start=ds["b_start"].values, s_start=ds["s_start"].values,
        foot_north=ds["xyz_foot_north"].values, foot_south=ds["xyz_foot_south"].values,
        b_foot_north=ds["b_foot_north"].values, b_foot_south=ds["b_foot_south"].values,
        xyz_min=ds["xyz_min"].values, b_min=ds["b_min"].values, s_min=ds["s_min"].values,
        length=ds["length"].values, open=ds["open"].values.astype(bool), s=s, log_b=lb,
        n_samples=ns, steps=nan, evaluations=0,
        open_reason=ds["open_reason"].values if "open_reason" in ds else None,
    )


def trace(
    model,
    start_xyz_km,
    time,
    altitude_km=100.0,
    *,
    rtol=1e-8,
    max_step_frac=0.1,
    max_radius_re=30.0,
    max_steps=3000,
    samples=False,
):
    r"""Trace field lines through many start points to both footpoints.

    Parameters
    ----------
    model : FieldModel
        Any object with ``field_geo(xyz_km, time)`` returning the GEO
        Cartesian field in nT (trailing axis 3), e.g.
        :class:`beltkit.field.IGRF` or :class:`beltkit.field.CenteredDipole`.
    start_xyz_km : array_like, shape (..., 3)
        Start points, GEO Cartesian km. Leading dimensions are flattened into
        the ``line`` dimension (row-major order). NaN rows give NaN results.
    time : numpy.datetime64 or array_like
        One time, or one per start point (UTC).
    altitude_km : float, default 100
        Stop altitude above the reference sphere :math:`R_E` = 6371.2 km.
    rtol : float, default 1e-8
        Local error tolerance per step, relative to the geocentric distance.
    max_step_frac : float, default 0.1
        Largest step as a fraction of the geocentric distance (also keeps the
        samples of :math:`|B|` dense enough for the integral invariant).
    max_radius_re : float, default 30
        A line reaching beyond this radius (R_E) is flagged open. A model
        with an outer boundary (``model.inside(xyz_km, time)``, e.g.
        :class:`beltkit.field.T89`) also stops lines that leave it, or start
        outside it: they are open, never given a footpoint.
    max_steps : int, default 3000
        A line needing more steps in one direction is flagged open.
    samples : bool, default False
        Also return the samples of arc length and :math:`|B|` along each line
        (dimension ``point``), for :func:`integral_invariant`.

    Returns
    -------
    xarray.Dataset
        Dimension ``line`` (and ``xyz``): ``b_foot_north``, ``b_foot_south``,
        ``b_min``, ``b_start`` (nT); ``xyz_foot_north``, ``xyz_foot_south``,
        ``xyz_min``, ``xyz_start`` (GEO km); ``length``, ``s_min``,
        ``s_start`` (km, arc length from the northern footpoint); ``open``
        (bool); ``open_reason`` (:data:`OPEN_REASONS`: 1 beyond
        ``max_radius_re``, 2 outside the model's boundary, 3 step limit);
        ``steps``. NaN for open lines (``open`` True) and NaN start
        points (``open`` False).

    Raises
    ------
    FieldModelError
        If a start point lies inside the Earth or below the stop altitude.
    PhysicsError
        If the arguments have the wrong shape or values.

    Notes
    -----
    Integrates :math:`d\mathbf{x}/ds = \pm\mathbf{B}/B` with the Dormand &
    Prince (1980) 5(4) pair and per-line step control (Hairer, Norsett &
    Wanner 1993); stop-altitude crossings are refined by regula falsi on the
    last step's length and the minimum of :math:`B` by successive parabolic
    interpolation with exact Runge-Kutta steps. "North" is the end reached
    along :math:`\mathbf{B}` (the field points into the Earth in the northern
    magnetic hemisphere).

    Examples
    --------
    >>> import numpy as np
    >>> from beltkit.field import CenteredDipole, trace
    >>> ds = trace(CenteredDipole(epoch=2020.0), [[3 * 6371.2, 0.0, 0.0]],
    ...            np.datetime64("2020-01-01"))
    >>> bool(ds.open[0])
    False
    """
    opts = dict(rtol=rtol, max_step_frac=max_step_frac, max_radius_re=max_radius_re,
                max_steps=max_steps)
    if samples:
        lines = trace_lines(model, start_xyz_km, time, altitude_km, **opts)
        return lines_to_dataset(lines, altitude_km, samples=True)
    x, _ = start_points(start_xyz_km, R_E_KM + float(altitude_km))
    t, _ = _check_time_shape(time, x.shape[0])
    parts = [trace_lines(model, x[sl], time_block(t, sl), altitude_km, **opts)
             for sl in blocks(x.shape[0])]
    return lines_to_dataset(_concat_lines(parts), altitude_km, samples=False)


def _concat_lines(parts):
    """Concatenate the per-line results of several batches (samples dropped)."""
    if len(parts) == 1:
        return parts[0]
    fields = {}
    for name in ("start", "b_start", "s_start", "foot_north", "foot_south", "b_foot_north",
                 "b_foot_south", "xyz_min", "b_min", "s_min", "length", "open", "n_samples",
                 "steps"):
        fields[name] = np.concatenate([getattr(p, name) for p in parts])
    n = fields["b_min"].size
    fields["open_reason"] = np.concatenate([_reasons(p) for p in parts])
    return FieldLines(s=np.zeros((n, 0)), log_b=np.zeros((n, 0)),
                      evaluations=sum(p.evaluations for p in parts), **fields)


def _reasons(lines):
    """``open_reason`` of a :class:`FieldLines` (3, step limit, for open lines without one)."""
    if lines.open_reason is not None:
        return np.asarray(lines.open_reason, dtype=np.int8)
    return np.where(lines.open, 3, 0).astype(np.int8)


def lines_to_dataset(lines, altitude_km=100.0, samples=False):
    """Wrap :class:`FieldLines` into an :class:`xarray.Dataset` (dimension ``line``).

    Parameters
    ----------
    lines : FieldLines
        Result of :func:`trace_lines`.
    altitude_km : float
        Stop altitude used (stored as an attribute).
    samples : bool
        Include the samples along each line.

    Returns
    -------
    xarray.Dataset
        See :func:`trace`.
    """
    def v(data, units, long_name, dims=("line",)):
        return xr.Variable(dims, data, {"units": units, "long_name": long_name})

    xyz = ("line", "xyz")
    data = {
        "b_foot_north": v(lines.b_foot_north, "nT", "field magnitude at the northern footpoint"),
        "b_foot_south": v(lines.b_foot_south, "nT", "field magnitude at the southern footpoint"),
        "b_min": v(lines.b_min, "nT", "minimum field magnitude along the field line"),
        "b_start": v(lines.b_start, "nT", "field magnitude at the start point"),
        "xyz_foot_north": v(lines.foot_north, "km", "northern footpoint, GEO Cartesian", xyz),
        "xyz_foot_south": v(lines.foot_south, "km", "southern footpoint, GEO Cartesian", xyz),
        "xyz_min": v(lines.xyz_min, "km", "point of minimum field magnitude, GEO Cartesian", xyz),
        "xyz_start": v(lines.start, "km", "start point, GEO Cartesian", xyz),
        "length": v(lines.length, "km", "field-line arc length between the footpoints"),
        "s_min": v(lines.s_min, "km", "arc length from the northern footpoint to the minimum"),
        "s_start": v(lines.s_start, "km", "arc length from the northern footpoint to the start"),
        "open": xr.Variable(("line",), lines.open,
                            {"long_name": "line escaped, left the model's outer boundary or "
                                          "exceeded the step limit (no footpoint)"}),
        "open_reason": xr.Variable(
            ("line",), _reasons(lines),
            {"long_name": "why the field line is open",
             "flag_values": np.array(sorted(OPEN_REASONS), dtype=np.int8),
             "flag_meanings": " ".join(OPEN_REASONS[k] for k in sorted(OPEN_REASONS))}),
        "steps": xr.Variable(("line",), lines.steps, {"units": "1",
                                                     "long_name": "accepted integration steps"}),
    }
    if samples:
        pad = np.arange(lines.s.shape[1])[None, :] >= lines.n_samples[:, None]
        data["sample_s"] = v(np.where(pad, np.nan, lines.s), "km",
                             "arc length from the northern footpoint", ("line", "point"))
        data["sample_b"] = v(np.where(pad, np.nan, np.exp(lines.log_b)), "nT",
                             "field magnitude along the line", ("line", "point"))
        data["n_samples"] = xr.Variable(("line",), lines.n_samples, {"units": "1"})
    ds = xr.Dataset(data, coords={"xyz": ["x", "y", "z"]})
    ds.attrs["altitude_km"] = float(altitude_km)
    ds.attrs["frame"] = "GEO"
    return ds
