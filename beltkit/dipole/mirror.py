r"""Mirror points of the centred dipole: the field ratio b(lambda) and the mirror latitude.

With the first invariant conserved, a particle of equatorial pitch angle
:math:`\alpha_{eq}` mirrors where :math:`b(\lambda_m) = 1/\sin^2\alpha_{eq}`,
:math:`b(\lambda) = \sqrt{1 + 3\sin^2\lambda}/\cos^6\lambda` (Roederer 1970).
"""

from __future__ import annotations

import numpy as np

__all__ = ["asin_deg", "b_ratio", "b_ratio_cos2", "fold_pitch_angle", "mirror_lat_sc",
           "mirror_mlat_rad", "mirror_sin2_cos2", "over_mirror_points"]


def b_ratio(mlat_rad):
    r"""Return b(lambda) = B(lambda) / B_eq on a dipole line.

    One cosine: :math:`1 + 3\sin^2\lambda = 4 - 3\cos^2\lambda`
    (:func:`b_ratio_cos2`).
    """
    c2 = np.cos(mlat_rad)
    c2 *= c2
    return b_ratio_cos2(c2)


def b_ratio_cos2(c2):
    """Return b as a function of cos^2(lambda)."""
    return np.sqrt(4.0 - 3.0 * c2) / (c2 * c2 * c2)


def fold_pitch_angle(alpha_deg):
    r"""Fold pitch angles into [0, 90] deg (unchecked kernel).

    Parameters
    ----------
    alpha_deg : numpy.ndarray
        Pitch angles in degrees, already checked to lie in [0, 180].

    Returns
    -------
    folded : numpy.ndarray
        :math:`\min(\alpha, 180^\circ - \alpha)`: a particle and its mirror image
        moving the other way along the line share mirror points and loss cones.
    upper : numpy.ndarray of bool
        Where the angle was above 90 deg.

    Examples
    --------
    >>> fold_pitch_angle(np.array([30.0, 150.0]))[0]
    array([30., 30.])
    """
    upper = alpha_deg > 90.0
    return np.where(upper, 180.0 - alpha_deg, alpha_deg), upper



def asin_deg(s2):
    """Return arcsin(sqrt(s2)) in degrees, s2 in [0, 1] (NaN kept)."""
    return np.rad2deg(np.arcsin(np.sqrt(np.clip(s2, 0.0, 1.0))))


def mirror_mlat_rad(alpha_eq_deg):
    """Return the mirror latitude (rad) of equatorial pitch angles in [0, 90] deg.

    Solves u^6 + 3 s^2 u - 4 s^2 = 0 with u = cos^2(lambda_m), s = sin^2(alpha_eq).
    Two well-conditioned branches, both by Newton's method started on the side of
    the root where the iteration is monotone (the function is convex there):

    * s < 1/2 (far from the equator): in u, from the upper bound u0 = (4 s^2)^(1/6).
    * s >= 1/2 (near the equator): in w = sin^2(lambda_m) = 1 - u, from w0 = 0, with
      the residual written without cancellation,
      g(w) = (c - w (3 - 3w + w^2)) ((1 - w)^3 + s) - 3 s^2 w, c = cos^2(alpha_eq),
      so that lambda_m keeps full relative precision as alpha_eq -> 90 deg.
    """
    a = np.asarray(alpha_eq_deg, dtype=float)
    # one sine of the smaller of alpha and 90 - alpha gives both sin^2 and cos^2
    # to full relative precision (the complement 1 - t is at least 1/2)
    low = a <= 45.0
    t = np.sin(np.deg2rad(np.where(low, a, 90.0 - a))) ** 2
    s = np.where(low, t, 1.0 - t)
    c = np.where(low, 1.0 - t, t)
    return mirror_lat_sc(s, c)


def mirror_lat_sc(s, c):
    """Return the mirror latitude (rad) from s = sin^2(alpha_eq) and c = cos^2(alpha_eq).

    Both are passed so that callers holding y = sin(alpha_eq) can give
    c = (1 - y)(1 + y) without loss of precision near the equator.
    """
    w, u = mirror_sin2_cos2(s, c)
    return np.arctan2(np.sqrt(w), np.sqrt(u))


# elements per block of the mirror-point solver (keeps its temporaries in cache)
_SOLVER_BLOCK = 1 << 15


def mirror_sin2_cos2(s, c):
    r"""Return (sin^2, cos^2) of the mirror latitude, each to full relative precision.

    An unchecked kernel of :func:`mirror_mlat` for callers that already hold
    :math:`\sin^2\alpha_{eq}` and :math:`\cos^2\alpha_{eq}` (the bounce and
    drift integrals of :mod:`beltkit.motion`).

    Parameters
    ----------
    s, c : numpy.ndarray
        :math:`\sin^2` and :math:`\cos^2` of the equatorial pitch angle
        (folded to [0, 90] deg).

    Returns
    -------
    sin2, cos2 : numpy.ndarray
        Of the mirror latitude :math:`\lambda_m`, the root of
        :math:`\cos^6\lambda_m = s \sqrt{1 + 3 \sin^2\lambda_m}` (see
        :func:`mirror_mlat_rad` for the two Newton branches). Large arrays are
        solved in blocks of bounded size.
    """
    s, c = np.broadcast_arrays(np.asarray(s, dtype=float), np.asarray(c, dtype=float))
    if s.size <= _SOLVER_BLOCK:
        return _mirror_block(s, c)
    sf = s.ravel()
    cf = c.ravel()
    w_out = np.empty(sf.shape)
    u_out = np.empty(sf.shape)
    for i in range(0, sf.size, _SOLVER_BLOCK):
        w_out[i:i + _SOLVER_BLOCK], u_out[i:i + _SOLVER_BLOCK] = _mirror_block(
            sf[i:i + _SOLVER_BLOCK], cf[i:i + _SOLVER_BLOCK])
    return w_out.reshape(s.shape), u_out.reshape(s.shape)


def _mirror_block(s, c):
    """Solve the mirror condition for one block (see :func:`mirror_sin2_cos2`)."""
    w_out = np.full(s.shape, np.nan)
    u_out = np.full(s.shape, np.nan)
    with np.errstate(invalid="ignore"):
        far = s < 0.5
        near = s >= 0.5

    if np.any(far):
        sf = s[far]
        a = 3.0 * sf * sf
        b = 4.0 * sf * sf
        u = np.cbrt(2.0 * sf)  # (4 s^2)^(1/6), above the root: f(u0) = 3 s^2 u0 > 0
        polish = False
        for k in range(60):
            u5 = u * u
            u5 *= u5
            u5 *= u
            f = (u5 + a) * u - b
            # f' = 6 u^5 + 3 s^2; the tiny term only matters where both underflow
            # (alpha_eq < ~1e-48 deg), where u0 is already exact to double precision
            fp = 6.0 * u5 + a + 1e-300
            step = f / fp
            u -= step
            if polish:
                break
            # quadratic convergence: once the relative step is below 1e-9, one
            # more step reaches the rounding level (further steps only dither);
            # from u0 at least four steps are needed, so no check before that
            polish = k >= 3 and not np.any(np.abs(step) > 1e-9 * u)
        u = np.clip(u, 0.0, 1.0)
        u_out[far] = u
        w_out[far] = 1.0 - u

    if np.any(near):
        sn = s[near]
        cn = c[near]
        a = 3.0 * sn * sn
        w = cn * (1.0 + sn) / (6.0 + a)  # the first Newton iterate from w = 0
        polish = False
        for k in range(60):
            om = 1.0 - w
            om2 = om * om
            om3 = om2 * om
            g = (cn - w * (3.0 + w * (w - 3.0))) * (om3 + sn) - a * w
            gp = 6.0 * om3 * om2 + a  # -dg/dw > 0
            step = g / gp
            w += step
            if polish:
                break
            polish = k >= 2 and not np.any(np.abs(step) > 1e-9 * w)
        w = np.clip(w, 0.0, 1.0)
        w_out[near] = w
        u_out[near] = 1.0 - w
    return w_out, u_out


def over_mirror_points(yf, cos2, todo, tiers, chunk, block, outs):
    r"""Run a fixed-node quadrature over mirror points, tier by tier of y = sin(alpha_eq).

    The bounce-path integrals of the dipole (:math:`Y`, :math:`T`, :math:`D`)
    are integrated with fewer nodes for large :math:`y` (short paths) than
    for small ones; this loop shares that dispatch. Elements ``todo`` (flat
    indices into ``yf``) go to the first tier whose lower bound they reach,
    in blocks of at most ``chunk`` node-element products; for each block
    the mirror point (:func:`mirror_sin2_cos2`, from :math:`y^2` and
    :math:`\cos^2\alpha_{eq}` = ``cos2``) is found and ``block(w, u, key)``
    returns one value array per array of ``outs``, written at the block's
    indices.

    Parameters
    ----------
    yf, cos2 : numpy.ndarray
        Flat :math:`\sin\alpha_{eq}` and :math:`\cos^2\alpha_{eq}`.
    todo : numpy.ndarray of int
        Flat indices to compute.
    tiers : sequence of (float, object, int)
        ``(lower bound of y, rule key, nodes)`` from the largest y down.
    chunk : int
        Node-element products per block (bounds the temporaries).
    block : callable
        ``block(sin2_mirror, cos2_mirror, key) -> tuple of arrays``.
    outs : sequence of numpy.ndarray or None
        Flat output arrays (None entries are skipped).
    """
    remaining = todo
    for lower, key, n in tiers:
        here = yf[remaining] >= lower
        sel = remaining[here]
        remaining = remaining[~here]
        step = max(1, chunk // n)
        for start in range(0, sel.size, step):
            idx = sel[start:start + step]
            yb = yf[idx]
            w, u = mirror_sin2_cos2(yb * yb, cos2[idx])
            for out, values in zip(outs, block(w, u, key)):
                if out is not None:
                    out[idx] = values
