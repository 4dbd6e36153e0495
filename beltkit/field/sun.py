r"""The Sun's direction and the Earth's rotation angle, low precision.

The solar-wind-oriented frames (GSE, GSM, SM) need the direction of the Sun
and the rotation of the Earth at each time. Both come from published
low-precision formulas, ample for magnetospheric coordinates:

Sun
    The Astronomical Almanac's low-precision solar coordinates (section C,
    "Low precision formulas for the Sun"; also published by the U.S. Naval
    Observatory as "Approximate solar coordinates"), stated precision
    0.01 deg in right ascension and declination for 1950-2050. With
    :math:`n = JD - 2451545.0`:

    .. math::

        L &= 280.460^\circ + 0.9856474^\circ\,n
             \quad \text{(mean longitude, aberration included)}\\
        g &= 357.528^\circ + 0.9856003^\circ\,n \quad \text{(mean anomaly)}\\
        \lambda &= L + 1.915^\circ \sin g + 0.020^\circ \sin 2g, \qquad \beta = 0\\
        \varepsilon &= 23.439^\circ - 0.0000004^\circ\,n

    The unit vector in GEI is
    :math:`(\cos\lambda,\; \cos\varepsilon\sin\lambda,\; \sin\varepsilon\sin\lambda)`.
    The frame is the geocentric equatorial frame *of date*: equator and
    (mean) equinox of date; nutation (below 0.005 deg) is ignored, as the
    formulas do.

Earth rotation
    Greenwich mean sidereal time (IAU 1982 expression, Aoki et al. 1982,
    *Astron. Astrophys.* 105, 359; Meeus 1998, *Astronomical Algorithms*,
    eq. 12.4), with UTC used for UT1:

    .. math::

        \theta_0 = 280.46061837^\circ + 360.98564736629^\circ (JD - 2451545.0)
                   + 0.000387933^\circ T^2 - T^3 / 38710000^\circ

    GEI of date -> GEO is the rotation by :math:`\theta_0` about +Z (Hapgood
    1992, *Planet. Space Sci.* 40, 711, transformation T1).
"""

from __future__ import annotations

import numpy as np

from .timeconv import J2000_JD, julian_date

__all__ = [
    "ecliptic_pole_gei",
    "gmst_deg",
    "obliquity_deg",
    "sun_direction_gei",
    "sun_ecliptic_longitude_deg",
]


def _days(time):
    return julian_date(time) - J2000_JD


def sun_ecliptic_longitude_deg(time) -> np.ndarray:
    r"""Apparent ecliptic longitude of the Sun (deg, equinox of date), low precision.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).

    Returns
    -------
    numpy.ndarray
        :math:`\lambda` in degrees, in [0, 360).

    Notes
    -----
    Astronomical Almanac low-precision formulas (module notes), 0.01 deg,
    1950-2050.
    """
    n = _days(time)
    L = 280.460 + 0.9856474 * n
    g = np.radians(357.528 + 0.9856003 * n)
    lam = L + 1.915 * np.sin(g) + 0.020 * np.sin(2.0 * g)
    return np.mod(lam, 360.0)


def obliquity_deg(time) -> np.ndarray:
    r"""Mean obliquity of the ecliptic, :math:`23.439^\circ - 4\times10^{-7}\,n` (deg).

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).

    Returns
    -------
    numpy.ndarray
        :math:`\varepsilon` in degrees (Astronomical Almanac, low precision).
    """
    return 23.439 - 0.0000004 * _days(time)


def sun_direction_gei(time) -> np.ndarray:
    r"""Return the unit vector from the Earth's centre to the Sun in GEI of date.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).

    Returns
    -------
    numpy.ndarray, shape ``time.shape + (3,)``
        :math:`(\cos\lambda, \cos\varepsilon\sin\lambda,
        \sin\varepsilon\sin\lambda)`; NaN for NaT.

    Notes
    -----
    Astronomical Almanac low-precision solar coordinates (module notes):
    geocentric, apparent (aberration included), referred to the equator and
    mean equinox of date; precision about 0.01 deg for 1950-2050.

    Examples
    --------
    >>> s = sun_direction_gei("2024-03-20T03:06")  # near the March equinox
    >>> bool(abs(s[2]) < 1e-3 and s[0] > 0.9999)
    True
    """
    lam = np.radians(sun_ecliptic_longitude_deg(time))
    eps = np.radians(obliquity_deg(time))
    sl = np.sin(lam)
    return np.stack([np.cos(lam), np.cos(eps) * sl, np.sin(eps) * sl], axis=-1)


def ecliptic_pole_gei(time) -> np.ndarray:
    r"""Return the north ecliptic pole in GEI of date.

    The unit vector is :math:`(0, -\sin\varepsilon, \cos\varepsilon)`.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).

    Returns
    -------
    numpy.ndarray, shape ``time.shape + (3,)``
        The pole; it is perpendicular to :func:`sun_direction_gei` (the Sun
        has zero ecliptic latitude in these formulas).
    """
    eps = np.radians(obliquity_deg(time))
    return np.stack([np.zeros_like(eps), -np.sin(eps), np.cos(eps)], axis=-1)


def gmst_deg(time) -> np.ndarray:
    r"""Greenwich mean sidereal time as an angle (deg, in [0, 360)).

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (UT1 is taken equal to UTC), or decimal years.

    Returns
    -------
    numpy.ndarray
        :math:`\theta_0` in degrees.

    Notes
    -----
    IAU 1982 expression (Aoki et al. 1982; Meeus 1998, eq. 12.4):
    :math:`\theta_0 = 280.46061837 + 360.98564736629\,d + 0.000387933\,T^2
    - T^3/38710000` with *d* days and *T* Julian centuries from J2000.0.
    """
    d = _days(time)
    T = d / 36525.0
    # split the large linear term to keep precision: 360.98564736629 d = 360 d + 0.98564736629 d
    theta = 280.46061837 + 0.98564736629 * d + 360.0 * np.mod(d, 1.0)
    theta = theta + 0.000387933 * T * T - T * T * T / 38710000.0
    return np.mod(theta, 360.0)
