"""From a measured filling ratio back to z0: a vectorised, safeguarded inversion."""

from __future__ import annotations

import numpy as np

from .._wrap import array_api, as_float_array
from ..errors import PhysicsError
from .profile import (
    T_HI,
    T_LO,
    bessel_ratio_g,
    bessel_terms,
    log_profile,
    two_angle_args,
)

__all__ = [
    "RATIO_KINDS",
    "z0_from_ratio",
]

#: Ratio kinds accepted by :func:`z0_from_ratio`.
RATIO_KINDS = ("cone_mean", "centre_edge", "two_angles")


# ---------------------------------------------------------------- inversion


def _neg_log_ratio(kind, z, u1=None, u2=None):
    """Return -ln R(z) and d(-ln R)/dz for a ratio kind (unchecked kernel)."""
    l0, l1, g = bessel_terms(z)
    if kind == "cone_mean":
        # d/dz ln(2 I1 / (z I0)) = 1/g - 2/z - g; small z: -z/4 (the difference cancels)
        with np.errstate(divide="ignore", invalid="ignore"):
            dv = np.where(z < 0.05, z / 4.0, 2.0 / z + g - 1.0 / g)
        return l0 - l1, dv
    if kind == "centre_edge":
        return l0, g
    v = log_profile(u2, z, l0, g) - log_profile(u1, z, l0, g)
    k = z * g
    dk = z * (1.0 - g * g)

    def dlogp(u):
        inside = u < 1.0
        lu = np.log(np.where(inside, 1.0, u))
        gu = bessel_ratio_g(z * np.where(inside, u, 0.0))
        return np.where(inside, u * gu - g, dk * lu / (1.0 + k * lu))

    return v, dlogp(u2) - dlogp(u1)


def _q(kind, t, u1=None, u2=None):
    """Return q = ln(-ln R) as a function of t = ln z, with dq/dt (increasing in t)."""
    z = np.exp(t)
    v, dv = _neg_log_ratio(kind, z, u1, u2)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.log(v)
        dq = z * dv / v
        # small z: -ln R ~ c z^2 for every kind, so q ~ 2 t + const
        dq = np.where((z < 1e-3) | ~np.isfinite(dq) | (dq <= 0), 2.0, dq)
    return q, dq


_TABLES = {}


def _table(kind):
    """Return (q, t, dt/dq) on a grid of t = ln z for the closed-form kinds."""
    if kind not in _TABLES:
        t = np.linspace(T_LO, T_HI, 4001)
        q, dq = _q(kind, t)
        _TABLES[kind] = (q, t, 1.0 / dq)
    return _TABLES[kind]


def _guess(kind, y):
    """Return the initial t for q(t) = y: cubic Hermite interpolation of the tabulated inverse."""
    q, t, dtdq = _table(kind)
    yc = np.clip(y, q[0], q[-1])
    i = np.clip(np.searchsorted(q, yc) - 1, 0, q.size - 2)
    h = q[i + 1] - q[i]
    s = (yc - q[i]) / h
    s2 = s * s
    s3 = s2 * s
    return ((2 * s3 - 3 * s2 + 1) * t[i] + (s3 - 2 * s2 + s) * h * dtdq[i]
            + (-2 * s3 + 3 * s2) * t[i + 1] + (s3 - s2) * h * dtdq[i + 1])


def _solve(kind, y, u1=None, u2=None):
    """Solve q(t) = y for t by bracketed (safeguarded) Newton steps, vectorised.

    ``y`` = ln(-ln r) for ratios r in (0, 1). Returns z (NaN outside the reach
    [1e-8, 1e12] of the solver). Newton converges quadratically, so a step
    below 1e-10 in t leaves an error far below rounding after it is taken.
    """
    y = np.asarray(y, dtype=float)
    shape = y.shape
    y = y.ravel()
    t = np.full(y.shape, np.nan)
    if kind in ("cone_mean", "centre_edge"):
        q, _, _ = _table(kind)
        ok = np.isfinite(y) & (y > q[0]) & (y < q[-1])
        t0 = _guess(kind, y)
    else:
        u1 = np.broadcast_to(u1, shape).ravel()
        u2 = np.broadcast_to(u2, shape).ravel()
        q_lo, _ = _q(kind, np.full(y.shape, T_LO), u1, u2)
        q_hi, _ = _q(kind, np.full(y.shape, T_HI), u1, u2)
        ok = np.isfinite(y) & (y > q_lo) & (y < q_hi)
        if u1.size and np.all(u1 == u1[0]) and np.all(u2 == u2[0]):
            # one pair of angles for all: a table of its own gives a close start
            tt = np.linspace(T_LO, T_HI, 4001)
            qq, dq = _q(kind, tt, np.full(tt.shape, u1[0]), np.full(tt.shape, u2[0]))
            _TABLES["two_angles"] = (qq, tt, 1.0 / dq)
            t0 = np.clip(_guess("two_angles", y), T_LO, T_HI)
        else:  # start from the centre-to-edge inversion (the same small-z law)
            t0 = np.clip(_guess("centre_edge", y), T_LO + 1.0, T_HI - 1.0)
    idx = np.flatnonzero(ok)
    tc = t0[idx]
    lo = np.full(idx.size, T_LO)
    hi = np.full(idx.size, T_HI)
    yc = y[idx]
    a1 = None if u1 is None else u1[idx]
    a2 = None if u2 is None else u2[idx]
    for _ in range(200):
        if idx.size == 0:
            break
        qv, dq = _q(kind, tc, a1, a2)
        f = qv - yc
        hi = np.where(f > 0, tc, hi)
        lo = np.where(f <= 0, tc, lo)
        step = f / dq
        tn = tc - step
        scale = np.maximum(1.0, np.abs(tc))
        done = (np.abs(step) <= 1e-10 * scale) | (f == 0) | (hi - lo <= 1e-14 * scale)
        bad = ~done & ~((tn > lo) & (tn < hi))
        tn = np.where(bad, 0.5 * (lo + hi), tn)
        t[idx[done]] = tn[done]
        keep = ~done
        if keep.all():
            tc = tn
            continue
        idx, tc, lo, hi, yc = idx[keep], tn[keep], lo[keep], hi[keep], yc[keep]
        if a1 is not None:
            a1, a2 = a1[keep], a2[keep]
    return np.exp(t).reshape(shape)


@array_api("1", long_name="loss-cone parameter z0 = alpha0 / sqrt(D tau)")
def z0_from_ratio(ratio, kind, alpha0_deg=None, alpha1_deg=None, alpha2_deg=None):
    r"""Invert a loss-cone filling ratio for :math:`z_0`.

    Each ratio is a monotone decreasing function of :math:`z_0` from 1 at
    :math:`z_0 = 0`: :func:`cone_mean_ratio` (``"cone_mean"``),
    :func:`centre_edge_ratio` (``"centre_edge"``) and :func:`two_angle_ratio`
    (``"two_angles"``, which needs the three angles). With
    :math:`q = \ln(-\ln R)` and :math:`t = \ln z_0`, :math:`q(t)` is increasing
    and nearly linear in both limits (:math:`-\ln R \propto z_0^2` for small
    :math:`z_0`); it is solved element by element by Newton steps kept inside a
    shrinking bracket (bisection when a step leaves it), all elements at once,
    started from a tabulated inverse. No loop runs over the samples.

    Parameters
    ----------
    ratio : array_like or xarray.DataArray
        Measured ratio(s).
    kind : {"cone_mean", "centre_edge", "two_angles"}
        Which ratio it is.
    alpha0_deg, alpha1_deg, alpha2_deg : array_like or xarray.DataArray, optional
        Loss cone and the two equatorial pitch angles (degrees,
        ``alpha1_deg < alpha2_deg``) for ``"two_angles"``.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`z_0`; NaN where the ratio is outside (0, 1), where it lies below
        the ratio's limit for :math:`z_0 \to \infty` (two angles both outside
        the cone), or beyond the solver's reach :math:`[10^{-8}, 10^{12}]`.

    Raises
    ------
    PhysicsError
        For an unknown ``kind`` or missing angles.

    Notes
    -----
    Round trips :math:`z_0 \to R \to z_0` agree to better than 1e-9 (relative)
    for :math:`0.01 \le z_0 \le 50` (tests). Kennel & Petschek (1966).

    Examples
    --------
    >>> from beltkit.diffusion import cone_mean_ratio
    >>> round(z0_from_ratio(cone_mean_ratio(0.5), "cone_mean"), 12)
    0.5
    """
    if kind not in RATIO_KINDS:
        raise PhysicsError(f"argument 'kind' must be one of {', '.join(RATIO_KINDS)}; got "
                           f"{kind!r}")
    r = as_float_array(ratio, "ratio")
    u1 = u2 = None
    if kind == "two_angles":
        if alpha0_deg is None or alpha1_deg is None or alpha2_deg is None:
            raise PhysicsError("kind='two_angles' needs alpha0_deg, alpha1_deg and alpha2_deg "
                               "(equatorial loss cone and the two pitch angles, degrees)")
        u1, u2 = two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg)
        shape = np.broadcast_shapes(r.shape, np.shape(u1), np.shape(u2))
        r = np.broadcast_to(r, shape)
        u1, u2 = np.broadcast_to(u1, shape), np.broadcast_to(u2, shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = (r > 0) & (r < 1)
        y = np.where(inside, np.log(-np.log(np.where(inside, r, 0.5))), np.nan)
    return _solve(kind, y, u1, u2)


