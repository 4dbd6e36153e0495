r"""Exact solid-angle geometry of pitch-angle bins and telescope fields of view.

Gyrotropy is assumed throughout: the directional flux depends on the pitch
angle only, so a pitch-angle band :math:`[a_1, a_2]` is a zone of the unit
sphere around the field direction with solid angle
:math:`2\pi(\cos a_1 - \cos a_2)` (spherical geometry).

All functions broadcast their arguments (numpy rules), take angles in degrees
and never modify their inputs.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "band_solid_angle",
    "band_overlap_solid_angle",
    "band_weights",
    "cap_intersection_area",
    "fov_fraction_below",
    "fov_fraction",
    "swept_band",
]

_TWO_PI = 2.0 * np.pi


def band_solid_angle(a1_deg, a2_deg):
    r"""Solid angle (sr) of the pitch-angle band ``[a1, a2]``.

    .. math:: \Omega = 2\pi (\cos a_1 - \cos a_2)

    (area of a spherical zone; spherical geometry).

    Parameters
    ----------
    a1_deg, a2_deg : array_like
        Band edges in degrees, ``0 <= a1 <= a2 <= 180``.

    Returns
    -------
    numpy.ndarray
        Solid angle in sr.

    Examples
    --------
    >>> round(float(band_solid_angle(0.0, 180.0)), 6) == round(4 * np.pi, 6)
    True
    """
    a1 = np.radians(np.asarray(a1_deg, dtype=float))
    a2 = np.radians(np.asarray(a2_deg, dtype=float))
    return _TWO_PI * (np.cos(a1) - np.cos(a2))


def band_overlap_solid_angle(a1_deg, a2_deg, r1_deg, r2_deg):
    r"""Solid angle (sr) of the part of band ``[a1, a2]`` inside range ``[r1, r2]``.

    .. math::
        \Omega = 2\pi\,\max\left(0,
        \cos\max(a_1, r_1) - \cos\min(a_2, r_2)\right)

    Parameters
    ----------
    a1_deg, a2_deg : array_like
        Bin edges (deg).
    r1_deg, r2_deg : array_like
        Population range (deg).

    Returns
    -------
    numpy.ndarray
        Overlap solid angle in sr (zero when the two do not overlap).
    """
    lo = np.maximum(np.asarray(a1_deg, dtype=float), np.asarray(r1_deg, dtype=float))
    hi = np.minimum(np.asarray(a2_deg, dtype=float), np.asarray(r2_deg, dtype=float))
    return _TWO_PI * np.maximum(np.cos(np.radians(lo)) - np.cos(np.radians(hi)), 0.0)


def band_weights(a1_deg, a2_deg, r1_deg, r2_deg):
    r"""Solid-angle fraction of bin ``[a1, a2]`` that lies inside range ``[r1, r2]``.

    .. math::
        w = \frac{\cos\max(a_1, r_1) - \cos\min(a_2, r_2)}{\cos a_1 - \cos a_2}

    clipped at zero for disjoint intervals. A range edge inside the bin splits
    it exactly by solid angle instead of rounding it to a whole bin.

    Parameters
    ----------
    a1_deg, a2_deg : array_like
        Bin edges (deg), ``a1 < a2``.
    r1_deg, r2_deg : array_like
        Range edges (deg).

    Returns
    -------
    numpy.ndarray
        Weight in [0, 1]; NaN for a zero-width bin.

    Examples
    --------
    >>> round(float(band_weights(0.0, 90.0, 0.0, 60.0)), 12)
    0.5
    """
    full = band_solid_angle(a1_deg, a2_deg)
    part = band_overlap_solid_angle(a1_deg, a2_deg, r1_deg, r2_deg)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(full > 0, part / np.where(full > 0, full, 1.0), np.nan)


def cap_intersection_area(r1_deg, r2_deg, d_deg):
    r"""Area (sr) of the intersection of two spherical caps.

    Caps of angular radii ``r1`` and ``r2`` (each at most 90 deg) whose
    centres are ``d`` apart (0-180 deg). For partial overlap
    (:math:`|r_1 - r_2| < d < r_1 + r_2`)

    .. math::
        A = 2\left[\pi - \arccos\frac{\cos d - \cos r_1\cos r_2}
        {\sin r_1 \sin r_2}
        - \cos r_1 \arccos\frac{\cos r_2 - \cos d \cos r_1}{\sin d \sin r_1}
        - \cos r_2 \arccos\frac{\cos r_1 - \cos d \cos r_2}{\sin d \sin r_2}
        \right]

    (Gauss-Bonnet applied to the lens bounded by two small circles; the form
    of Tovchigrechko & Vakser 2001, Protein Sci. 10, 1572, from memory, and
    verified in the tests against direct 2-D quadrature with
    ``scipy.integrate``). Disjoint caps give 0; a cap inside the other gives
    the smaller cap's area :math:`2\pi(1 - \cos r)`.

    Parameters
    ----------
    r1_deg, r2_deg : array_like
        Cap angular radii (deg), in [0, 90].
    d_deg : array_like
        Angular distance between the centres (deg), in [0, 180].

    Returns
    -------
    numpy.ndarray
        Intersection area in sr.
    """
    r1 = np.radians(np.asarray(r1_deg, dtype=float))
    r2 = np.radians(np.asarray(r2_deg, dtype=float))
    d = np.radians(np.asarray(d_deg, dtype=float))
    r1, r2, d = np.broadcast_arrays(r1, r2, d)
    c1, c2, cd = np.cos(r1), np.cos(r2), np.cos(d)
    s1, s2, sd = np.sin(r1), np.sin(r2), np.sin(d)
    partial = (d > np.abs(r1 - r2)) & (d < r1 + r2)
    # safe denominators outside the partial-overlap branch
    s12 = np.where(partial, s1 * s2, 1.0)
    sd1 = np.where(partial, sd * s1, 1.0)
    sd2 = np.where(partial, sd * s2, 1.0)
    t0 = np.arccos(np.clip((cd - c1 * c2) / s12, -1.0, 1.0))
    t1 = np.arccos(np.clip((c2 - cd * c1) / sd1, -1.0, 1.0))
    t2 = np.arccos(np.clip((c1 - cd * c2) / sd2, -1.0, 1.0))
    lens = 2.0 * (np.pi - t0 - c1 * t1 - c2 * t2)
    smaller = _TWO_PI * (1.0 - np.maximum(c1, c2))
    inside = d <= np.abs(r1 - r2)
    out = np.where(partial, lens, np.where(inside, smaller, 0.0))
    out = np.where(np.isnan(r1) | np.isnan(r2) | np.isnan(d), np.nan, out)
    return np.clip(out, 0.0, None)


def fov_fraction_below(axis_deg, half_angle_deg, r_deg):
    r"""Fraction of a circular field of view with pitch angle below ``r``.

    The field of view is a spherical cap of half-angle ``delta`` (<= 90 deg)
    around a look direction at pitch angle ``theta0``. The set of directions
    with pitch angle below ``r`` is the cap of radius ``r`` around the field
    direction, so the fraction is the two caps' intersection area over the
    field of view's area :math:`2\pi(1 - \cos\delta)`. For ``r > 90`` the
    complement cap around the anti-field direction (radius ``180 - r``,
    distance ``180 - theta0``) is used, which keeps every cap at most a
    hemisphere.

    Parameters
    ----------
    axis_deg : array_like
        Pitch angle of the field-of-view axis (deg, 0-180).
    half_angle_deg : array_like
        Field-of-view half-angle (deg, 0 < delta <= 90).
    r_deg : array_like
        Pitch-angle threshold (deg, 0-180).

    Returns
    -------
    numpy.ndarray
        Fraction in [0, 1].
    """
    axis = np.asarray(axis_deg, dtype=float)
    delta = np.asarray(half_angle_deg, dtype=float)
    r = np.asarray(r_deg, dtype=float)
    cap = _TWO_PI * (1.0 - np.cos(np.radians(delta)))
    low = cap_intersection_area(np.minimum(r, 90.0), delta, axis) / cap
    high = 1.0 - cap_intersection_area(np.clip(180.0 - r, 0.0, 90.0), delta, 180.0 - axis) / cap
    return np.clip(np.where(r <= 90.0, low, high), 0.0, 1.0)


def fov_fraction(axis_deg, half_angle_deg, r1_deg, r2_deg):
    r"""Fraction of a circular field of view inside the pitch-angle range ``[r1, r2]``.

    .. math:: f = F(r_2) - F(r_1)

    with :math:`F` from :func:`fov_fraction_below` (exact cap geometry; no
    Monte Carlo).

    Parameters
    ----------
    axis_deg : array_like
        Pitch angle of the look direction (deg).
    half_angle_deg : array_like
        Field-of-view half-angle (deg, <= 90).
    r1_deg, r2_deg : array_like
        Range edges (deg), ``r1 <= r2``.

    Returns
    -------
    numpy.ndarray
        Fraction in [0, 1].

    Examples
    --------
    >>> round(float(fov_fraction(90.0, 20.0, 0.0, 90.0)), 12)
    0.5
    """
    return np.clip(
        fov_fraction_below(axis_deg, half_angle_deg, r2_deg)
        - fov_fraction_below(axis_deg, half_angle_deg, r1_deg),
        0.0,
        1.0,
    )


def swept_band(axis_deg, half_angle_deg):
    """Pitch-angle band swept by a circular field of view over a gyration.

    Parameters
    ----------
    axis_deg : array_like
        Pitch angle of the look direction (deg).
    half_angle_deg : array_like
        Field-of-view half-angle (deg).

    Returns
    -------
    lo, hi : numpy.ndarray
        ``max(theta0 - delta, 0)`` and ``min(theta0 + delta, 180)`` (deg).
    """
    axis = np.asarray(axis_deg, dtype=float)
    delta = np.asarray(half_angle_deg, dtype=float)
    return np.maximum(axis - delta, 0.0), np.minimum(axis + delta, 180.0)
