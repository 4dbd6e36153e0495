r"""The integral invariant I between the mirror points of sampled field lines.

For a mirror field :math:`B_m`, :math:`I = \int_{s_1}^{s_2}\sqrt{1 -
B(s)/B_m}\,ds` between the mirror points :math:`s_{1,2}` on either side of the
line's minimum of :math:`|B|` (Roederer 1970, *Dynamics of Geomagnetically
Trapped Radiation*, ch. 3; McIlwain 1961, J. Geophys. Res. 66, 3681),
computed on the rows of samples of :math:`\ln|B|` versus arc length that
tracing keeps (:mod:`~beltkit.field.trace_samples`).
"""

from __future__ import annotations

import numpy as np

from ..errors import PhysicsError

__all__ = ["FOOT_TOLERANCE", "integral_invariant_of_lines", "mirror_rows"]

_GAUSS_NODES = 64
#: Relative excess of a mirror field over a footpoint field still placed on the footpoint.
FOOT_TOLERANCE = 1e-7


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


def integral_invariant_of_lines(lines, b_m_nt):
    r"""Integral invariant :math:`I` (km) of sampled lines for mirror fields `b_m_nt`.

    Parameters
    ----------
    lines : FieldLines
        Traced lines with their samples (:class:`~beltkit.field.fieldlines.FieldLines`;
        any object with the same attributes and ``closed`` will do).
    b_m_nt : array_like
        Mirror field(s) in nT, shape ``(N,)`` (one per line) or ``(N, M)``;
        a scalar is shared by all lines.

    Returns
    -------
    numpy.ndarray
        :math:`I` in km, shape ``(N,)`` or ``(N, M)``; 0 for :math:`B_m =
        B_{min}`, NaN for open lines, for :math:`B_m < B_{min}` and for mirror
        points below the stop altitude (:math:`B_m` more than
        :data:`FOOT_TOLERANCE` above a footpoint field).

    Raises
    ------
    PhysicsError
        If `b_m_nt` has more than two dimensions.

    Notes
    -----
    .. math::

        I = \int_{s_1}^{s_2} \sqrt{1 - B(s)/B_m}\,ds

    (Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 3;
    McIlwain 1961, J. Geophys. Res. 66, 3681). The mirror points
    :math:`s_{1,2}` nearest the field minimum are roots of a local cubic
    (Lagrange) interpolant of :math:`\ln B(s)` through four samples, found
    by regula falsi with bisection safeguard. With :math:`s = c + d
    \sin\theta` (:math:`c, d` the midpoint and half-width of
    :math:`[s_1, s_2]`) the square-root behaviour at both mirror points
    becomes a smooth integrand in :math:`\theta`, integrated by 64-point
    Gauss-Legendre quadrature on the same interpolant.
    """
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


def mirror_rows(lines, bm):
    r"""Sort lines by what their mirror field makes of :math:`I`: zero, to compute, or NaN.

    Parameters
    ----------
    lines : FieldLines
        Sampled field lines (``closed``, ``b_min``, ``b_foot_north``,
        ``b_foot_south``, ``n_samples``).
    bm : ndarray (N,)
        Mirror field per line, nT.

    Returns
    -------
    log_bm : ndarray (N,)
        :math:`\ln B_m` (NaN or -inf where :math:`B_m \le 0`).
    at_minimum : ndarray of bool (N,)
        Closed lines whose :math:`B_m` equals :math:`B_{min}` within rounding
        (:math:`B_{min}(1 - 10^{-9}) \le B_m \le B_{min}(1 + 10^{-12})`):
        :math:`I = 0` there.
    work : ndarray of bool (N,)
        Closed lines with :math:`B_{min} < B_m`, :math:`B_m` at most
        ``FOOT_TOLERANCE`` (relative) above both footpoint fields (the
        mirror points lie on the line) and the four samples a cubic needs.
        The other lines have no :math:`I` (NaN).

    Notes
    -----
    A particle mirrors where :math:`B(s) = B_m`; between :math:`B_{min}` and
    the footpoint fields such points exist on both sides of the minimum
    (Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 3).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        log_bm = np.log(bm)
        b_min = lines.b_min
        ok = lines.closed & np.isfinite(log_bm) & (bm > 0) & np.isfinite(b_min)
        # mirror field at (or within rounding of) the minimum: I = 0
        at_minimum = ok & (bm <= b_min * (1 + 1e-12)) & (bm >= b_min * (1 - 1e-9))
        # mirror fields at most FOOT_TOLERANCE above a footpoint field mirror on the footpoint
        reach = ((bm <= lines.b_foot_north * (1 + FOOT_TOLERANCE))
                 & (bm <= lines.b_foot_south * (1 + FOOT_TOLERANCE)))
        # a cubic through the samples needs four of them
        work = ok & ~at_minimum & (bm > b_min) & reach & (lines.n_samples >= 4)
    return log_bm, at_minimum, work


def _invariant_one(lines, bm):
    """Compute I of each line for one mirror field per line, `bm` (N,)."""
    n = bm.size
    result = np.full(n, np.nan)
    log_bm, eq, work = mirror_rows(lines, bm)
    result[eq] = 0.0
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
