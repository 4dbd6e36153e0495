r"""The steady-state distribution near the loss cone and its filling ratios (Kennel-Petschek)."""

from __future__ import annotations

import numpy as np
import scipy.special as _sp

from .._wrap import array_api, check_range
from ..errors import PhysicsError

__all__ = [
    "T_HI",
    "T_LO",
    "Z_MAX",
    "Z_MIN",
    "bessel_ratio_g",
    "bessel_terms",
    "centre_edge_ratio",
    "check_z0",
    "cone_mean_ratio",
    "log_i0",
    "log_profile",
    "loss_cone_profile",
    "two_angle_args",
    "two_angle_ratio",
]

# solver range of z0 (the ratios reach 1 and 0 to double precision beyond it)
Z_MIN, Z_MAX = 1e-8, 1e12
T_LO, T_HI = np.log(Z_MIN), np.log(Z_MAX)


# ---------------------------------------------------------------- Bessel helpers


def bessel_terms(x):
    """Return ln I0(x), ln(2 I1(x)/x) and I1(x)/I0(x) for x >= 0 (NaN kept).

    Full relative precision also as x -> 0: below x = 1 the power series
    (in s = x^2/4, ten terms, the last below 1e-16 of the sum) go through
    ``log1p``; above, the exponentially scaled Bessel functions of scipy
    (``i0e``, ``i1e``), so that large x does not overflow.
    """
    x = np.asarray(x, dtype=float)
    shape = x.shape
    x = x.ravel()
    l0 = np.full(x.shape, np.nan)
    l1 = np.full(x.shape, np.nan)
    g = np.full(x.shape, np.nan)
    small = x < 1.0
    big = x >= 1.0
    if small.any():
        xs = x[small]
        sq = xs * xs / 4.0
        t0 = np.ones_like(sq)
        t1 = np.ones_like(sq)
        s0 = np.zeros_like(sq)
        s1 = np.zeros_like(sq)
        for k in range(1, 11):
            t0 = t0 * sq / (k * k)  # I0 = sum s^k / (k!)^2
            t1 = t1 * sq / (k * (k + 1))  # 2 I1 / x = sum s^k / (k! (k+1)!)
            s0 += t0
            s1 += t1
        l0[small] = np.log1p(s0)
        l1[small] = np.log1p(s1)
        g[small] = 0.5 * xs * (1.0 + s1) / (1.0 + s0)
    if big.any():
        xb = x[big]
        e0 = _sp.i0e(xb)
        e1 = _sp.i1e(xb)
        l0[big] = xb + np.log(e0)
        l1[big] = xb + np.log(2.0 * e1 / xb)
        g[big] = e1 / e0
    return l0.reshape(shape), l1.reshape(shape), g.reshape(shape)


def log_i0(x):
    """Return ln I0(x) (see :func:`bessel_terms`)."""
    return bessel_terms(x)[0]


def bessel_ratio_g(x):
    """I1(x) / I0(x) (0 at x = 0)."""
    return bessel_terms(x)[2]


# ---------------------------------------------------------------- the profile


def check_z0(z0, name="z0"):
    """Return z0 as an array, refusing negative values."""
    return check_range(z0, name, lo=0.0, hi=np.inf,
                       hint="z0 = alpha0 / sqrt(D tau) is a non-negative number")


def _profile(u, z):
    """Return f / f(alpha0) at u = alpha / alpha0 >= 0 (unchecked kernel)."""
    u = np.asarray(u, dtype=float)
    z = np.asarray(z, dtype=float)
    l0, _, g = bessel_terms(z)  # functions of z alone: on z's own shape, before broadcasting
    inside = u < 1.0
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        zu = z * np.where(inside, u, 0.0)
        # I0(z u) / I0(z) = exp(z u - ln I0(z)) i0e(z u): no overflow for large z
        pin = np.exp(zu - l0) * _sp.i0e(zu)
        pout = 1.0 + z * g * np.log(np.where(inside, 1.0, u))
    return np.where(inside, pin, pout)


@array_api("1", long_name="steady-state phase-space density over its value at the loss-cone "
                          "edge")
def loss_cone_profile(alpha_eq_deg, alpha0_deg, z0):
    r"""Steady-state pitch-angle profile near the loss cone, relative to its edge value.

    Solving

    .. math::

        \frac{1}{\alpha}\frac{d}{d\alpha}\left(\alpha D \frac{df}{d\alpha}\right)
        = \frac{f}{\tau} \;(\alpha < \alpha_0), \qquad = 0 \;(\alpha > \alpha_0)

    with :math:`x = \alpha / \sqrt{D\tau}` turns the inner equation into the
    modified Bessel equation of order 0, :math:`f'' + f'/x - f = 0`, whose
    solution regular at 0 is :math:`f = A\, I_0(x)`; outside,
    :math:`\alpha D f' = C` gives :math:`f = B + C' \ln(\alpha/\alpha_0)`.
    Continuity of :math:`f` at :math:`\alpha_0` gives :math:`B = A I_0(z_0)`, and
    continuity of the diffusive flux :math:`\alpha D f'` gives
    :math:`C' = A z_0 I_1(z_0)` (:math:`I_0' = I_1`), so with
    :math:`z_0 = \alpha_0/\sqrt{D\tau}`

    .. math::

        \frac{f(\alpha)}{f(\alpha_0)} =
        \begin{cases}
        I_0(z_0 \alpha/\alpha_0) / I_0(z_0), & \alpha < \alpha_0, \\
        1 + z_0 \dfrac{I_1(z_0)}{I_0(z_0)} \ln(\alpha/\alpha_0), & \alpha \ge \alpha_0.
        \end{cases}

    Parameters
    ----------
    alpha_eq_deg : array_like or xarray.DataArray
        Equatorial pitch angle in degrees (0-90; small angles: the equation
        is written in the small-angle limit).
    alpha0_deg : array_like or xarray.DataArray
        Equatorial loss-cone half-angle in degrees, in (0, 90).
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0` (0: strong diffusion, a flat profile).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`f(\alpha)/f(\alpha_0)`. The exponentially scaled Bessel functions
        of :mod:`scipy.special` (``i0e``, ``i1e``) keep large :math:`z_0` finite.

    Notes
    -----
    Kennel & Petschek (1966); the derivation above is checked in the tests by
    integrating the differential equation numerically (no Bessel functions).

    Examples
    --------
    >>> round(loss_cone_profile(0.0, 4.0, 0.0), 12)
    1.0
    >>> round(loss_cone_profile(8.0, 4.0, 1.0), 6)
    1.309414
    """
    a = check_range(alpha_eq_deg, "alpha_eq_deg", lo=0.0, hi=90.0,
                    hint="Equatorial pitch angles are in degrees, 0-90 (fold larger ones)")
    a0 = check_range(alpha0_deg, "alpha0_deg", lo=0.0, hi=90.0, lo_open=True, hi_open=True,
                     hint="alpha0_deg is the equatorial loss-cone half-angle in degrees")
    return _profile(a / a0, check_z0(z0))


@array_api("1", long_name="mean phase-space density in the loss cone over its edge value")
def cone_mean_ratio(z0):
    r"""Mean of the profile over the loss cone's solid angle, over its edge value.

    .. math::

        \frac{\langle f\rangle_{cone}}{f(\alpha_0)}
        = \frac{2}{\alpha_0^2}\int_0^{\alpha_0} \frac{I_0(z_0\alpha/\alpha_0)}{I_0(z_0)}
          \alpha\, d\alpha = \frac{2 I_1(z_0)}{z_0 I_0(z_0)}

    (weight :math:`\alpha\, d\alpha`, the solid angle at small angles;
    :math:`\int_0^z x I_0(x) dx = z I_1(z)`). It falls from 1 at
    :math:`z_0 = 0` (full cone) to :math:`\approx 2/z_0` for :math:`z_0 \gg 1`.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(cone_mean_ratio(1000.0) * 1000.0, 3)
    1.999
    """
    z = check_z0(z0)
    l0, l1, _ = bessel_terms(z)
    return np.exp(l1 - l0)


@array_api("1", long_name="phase-space density at the loss-cone centre over its edge value")
def centre_edge_ratio(z0):
    r"""Profile at the centre of the loss cone over its edge value.

    .. math:: \frac{f(0)}{f(\alpha_0)} = \frac{1}{I_0(z_0)}

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(centre_edge_ratio(2.0), 6)
    0.438676
    """
    return np.exp(-log_i0(check_z0(z0)))


def two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg):
    """Check the loss cone and the two measuring angles (deg) of a two-angle ratio."""
    a0 = check_range(alpha0_deg, "alpha0_deg", lo=0.0, hi=90.0, lo_open=True, hi_open=True,
                     hint="alpha0_deg is the equatorial loss-cone half-angle in degrees")
    a1 = check_range(alpha1_deg, "alpha1_deg", lo=0.0, hi=90.0,
                     hint="Equatorial pitch angles are in degrees, 0-90")
    a2 = check_range(alpha2_deg, "alpha2_deg", lo=0.0, hi=90.0,
                     hint="Equatorial pitch angles are in degrees, 0-90")
    with np.errstate(invalid="ignore"):
        bad = a1 >= a2
    if np.any(bad):
        raise PhysicsError("argument 'alpha1_deg' must be smaller than 'alpha2_deg' (the ratio "
                           "is f(alpha1)/f(alpha2) <= 1); swap the two angles and invert "
                           "1/ratio instead")
    return a1 / a0, a2 / a0


def log_profile(u, z, l0z=None, gz=None):
    """Return ln f(u)/f(alpha0), accurate for small z (u = alpha/alpha0)."""
    if l0z is None:
        l0z, _, gz = bessel_terms(z)
    inside = u < 1.0
    lin = log_i0(z * np.where(inside, u, 0.0)) - l0z
    lout = np.log1p(z * gz * np.log(np.where(inside, 1.0, u)))
    return np.where(inside, lin, lout)


@array_api("1", long_name="ratio of the steady-state phase-space density at two equatorial "
                          "pitch angles")
def two_angle_ratio(z0, alpha0_deg, alpha1_deg, alpha2_deg):
    r"""Ratio of the profile at two equatorial pitch angles, :math:`f(\alpha_1)/f(\alpha_2)`.

    .. math:: R = \frac{f(\alpha_1)}{f(\alpha_2)}, \qquad \alpha_1 < \alpha_2,

    with :math:`f` of :func:`loss_cone_profile`; for example a telescope
    looking into the cone (:math:`\alpha_1`) and one seeing the locally
    mirroring particles (:math:`\alpha_2`), each mapped to the equator. It falls
    from 1 at :math:`z_0 = 0` to 0 as :math:`z_0 \to \infty` when
    :math:`\alpha_1 < \alpha_0`, or to :math:`\ln(\alpha_1/\alpha_0)/\ln(\alpha_2/\alpha_0)`
    when both angles are outside the cone.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.
    alpha0_deg : array_like or xarray.DataArray
        Equatorial loss cone in degrees.
    alpha1_deg, alpha2_deg : array_like or xarray.DataArray
        Equatorial pitch angles in degrees, ``alpha1_deg < alpha2_deg``.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(two_angle_ratio(1.0, 4.0, 0.0, 4.0), 6) == round(centre_edge_ratio(1.0), 6)
    True
    """
    u1, u2 = two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg)
    z = check_z0(z0)
    return np.exp(log_profile(u1, z) - log_profile(u2, z))


