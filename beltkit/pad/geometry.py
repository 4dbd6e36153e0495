r"""Exact solid-angle geometry of pitch-angle bins and telescope looks.

Gyrotropy is assumed throughout: the directional flux depends on the pitch
angle only, so a pitch-angle band :math:`[a_1, a_2]` is a zone of the unit
sphere around the field direction with solid angle
:math:`2\pi(\cos a_1 - \cos a_2)` (spherical geometry).

A telescope look is treated like a bin: under gyrotropy it stands for the
band of pitch angles that its field of view sweeps over a gyration
(:func:`swept_band`), with its flux uniform over that band; overlapping looks
share the pitch angles they both cover (:func:`look_bands`).

The weights that the partition kernel uses come from the same geometry: the
solid angle of each bin or look inside each population's pitch-angle range
(:func:`range_weights`, :func:`telescope_weights`; the ranges are written
with the cosines of the loss-cone edges, :func:`edge_cosines`).

All functions broadcast their arguments (numpy rules), take angles in degrees
and never modify their inputs.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "band_solid_angle",
    "band_overlap_solid_angle",
    "band_weights",
    "edge_cosines",
    "look_bands",
    "look_solid_angles",
    "range_weights",
    "swept_band",
    "telescope_weights",
]

_TWO_PI = 2.0 * np.pi
#: weight columns of :func:`range_weights`: 0-2 populations, 3 the band outside the loss
#: cone, 4 the whole interval, 5 lost north, 6 lost south
_N_W = 7


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


def look_bands(look_deg, half_deg):
    r"""Split the union of the looks' swept bands into intervals, with each look's share.

    Look :math:`k` of axis pitch angle :math:`\alpha_k` and half-angle
    :math:`\theta_k` stands for the band
    :math:`[\max(0, \alpha_k - \theta_k), \min(180, \alpha_k + \theta_k)]`
    that it sweeps over a gyration, with solid angle :math:`\Omega_k`
    (:func:`swept_band`). The band edges of all looks cut :math:`[0, 180]`
    into intervals :math:`m`, each covered by a fixed set :math:`K_m` of looks.
    The flux of interval :math:`m` is taken from the looks that cover it,
    weighted by their band solid angles,

    .. math::
        j_m = \sum_{k \in K_m} c_{mk} j_k, \qquad
        c_{mk} = \frac{\Omega_k}{\sum_{k' \in K_m} \Omega_{k'}},

    so the union of the bands is counted once and no pitch angle twice
    (gyrotropy; band solid angle :math:`2\pi(\cos a_1 - \cos a_2)`, spherical
    geometry).

    Parameters
    ----------
    look_deg : array_like
        Look pitch angles (deg, 0-180), shape ``(..., K)``; NaN: the look
        samples nothing.
    half_deg : array_like
        Field-of-view half-angles (deg, > 0), broadcast against ``look_deg``.

    Returns
    -------
    a1, a2 : numpy.ndarray
        Interval edges (deg), shape ``(..., 2K - 1)``; unused intervals have
        zero width.
    share : numpy.ndarray
        :math:`c_{mk}`, shape ``(..., 2K - 1, K)``; each row sums to 1 over the
        covering looks and to 0 where no look covers the interval.

    Examples
    --------
    >>> a1, a2, c = look_bands([30.0, 50.0], [20.0, 20.0])
    >>> a1.tolist(), a2.tolist()
    ([10.0, 30.0, 50.0], [30.0, 50.0, 70.0])
    >>> c[0].tolist(), c[2].tolist()
    ([1.0, 0.0], [0.0, 1.0])
    """
    look = np.asarray(look_deg, dtype=float)
    half = np.broadcast_to(np.asarray(half_deg, dtype=float), look.shape)
    lo, hi = swept_band(look, half)
    valid = np.isfinite(lo) & np.isfinite(hi) & (hi > lo)
    lo = np.where(valid, lo, 180.0)
    hi = np.where(valid, hi, 180.0)
    pts = np.sort(np.concatenate([lo, hi], axis=-1), axis=-1)
    a1 = pts[..., :-1]
    a2 = pts[..., 1:]
    mid = 0.5 * (a1 + a2)[..., :, None]
    cover = (valid[..., None, :] & (lo[..., None, :] <= mid) & (mid < hi[..., None, :])
             & (a2 > a1)[..., :, None])
    omega = np.where(valid, band_solid_angle(lo, hi), 0.0)[..., None, :]
    weighted = np.where(cover, omega, 0.0)
    den = weighted.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(den > 0, weighted / np.where(den > 0, den, 1.0), 0.0)
    return a1, a2, share


def look_solid_angles(look_deg, half_deg, r1_deg, r2_deg):
    r"""Solid angle (sr) that each look stands for inside the pitch-angle range ``[r1, r2]``.

    .. math::
        \Omega_{kP} = \sum_m c_{mk}\, 2\pi\max\left(0,
        \cos\max(a_{1m}, r_1) - \cos\min(a_{2m}, r_2)\right)

    with the intervals :math:`[a_{1m}, a_{2m}]` and shares :math:`c_{mk}` of
    :func:`look_bands`. A range's flux is then :math:`\sum_k j_k \Omega_{kP}`
    and its measured solid angle :math:`\sum_k \Omega_{kP}`, the solid angle of
    (range :math:`\cap` union of the bands). For one look, or looks whose bands
    do not overlap, :math:`\Omega_{kP}` is simply the solid angle of (band
    :math:`\cap` range).

    Parameters
    ----------
    look_deg : array_like
        Look pitch angles (deg), shape ``(..., K)``.
    half_deg : array_like
        Field-of-view half-angles (deg), broadcast against ``look_deg``.
    r1_deg, r2_deg : array_like
        Range edges (deg), shape ``(...)`` (one range per row of looks).

    Returns
    -------
    numpy.ndarray
        Shape ``(..., K)``, sr.

    Examples
    --------
    >>> # look axis 75 deg, half-angle 15 deg: band [60, 90]; its share below 62 deg
    >>> om = look_solid_angles([75.0], [15.0], 0.0, 62.0) / band_solid_angle(60.0, 90.0)
    >>> round(float(om[0]), 4)
    0.0611
    """
    a1, a2, share = look_bands(look_deg, half_deg)
    r1 = np.asarray(r1_deg, dtype=float)[..., None]
    r2 = np.asarray(r2_deg, dtype=float)[..., None]
    ov = band_overlap_solid_angle(a1, a2, r1, r2)
    return np.einsum("...m,...mk->...k", ov, share)


def swept_band(axis_deg, half_angle_deg):
    """Pitch-angle band swept by a circular field of view over a gyration.

    Under gyrotropy the look stands for this band, with its flux uniform over
    it (as a pitch-angle bin).

    Parameters
    ----------
    axis_deg : array_like
        Pitch angle of the look direction (deg): that of the particles that
        enter the detector, 180 deg minus the angle between boresight and B.
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


def edge_cosines(blc, dlc, outer, lcn, lcs):
    """Return the cosines of the loss-cone edges (degree): bounce, drift, band, north, south."""
    return tuple(np.cos(np.radians(np.asarray(a, dtype=float)))
                 for a in (blc, dlc, outer, lcn, lcs))


def range_weights(cos_a1, cos_a2, cos_edges, folded):
    r"""Solid angles (n, P, 7) of pitch-angle intervals inside each population's range.

    Interval :math:`[a_1, a_2]` (given by its cosines, (P,) or (n, P)) inside the
    range :math:`[r_1, r_2]` has the zone solid angle
    :math:`2\pi\max(0, \cos\max(a_1, r_1) - \cos\min(a_2, r_2))` (spherical
    geometry). Columns: precipitating :math:`[0, \alpha_B] \cup [180 - \alpha_B,
    180]`, quasi-trapped, trapped :math:`[\alpha_D, 180 - \alpha_D]`, the band
    :math:`[\alpha_B, \alpha_o]` outside the loss cone (both sides), the whole
    interval, lost north :math:`[0, \alpha_N]`, lost south :math:`[180 -
    \alpha_S, 180]`. ``cos_edges`` is :func:`edge_cosines` per sample, each
    (n,). A folded bin also stands for its mirror image :math:`[180 - a_2,
    180 - a_1]`.
    """
    cb, cd, co, cn, cs = (c[:, None] for c in cos_edges)  # cosines of the edges, (n, 1)

    def cum(c):  # solid angle of each interval below the pitch angle arccos(c)
        return _TWO_PI * (cos_a1 - np.clip(c, cos_a2, cos_a1))

    full = _TWO_PI * (cos_a1 - cos_a2)
    c_b, c_d, c_o = cum(cb), cum(cd), cum(co)
    c_bm, c_dm, c_om = cum(-cb), cum(-cd), cum(-co)
    c_n, c_sm = cum(cn), cum(-cs)
    w = np.empty(np.broadcast_shapes(c_b.shape, np.shape(full)) + (_N_W,))
    w[..., 0] = c_b + full - c_bm
    w[..., 1] = c_d - c_b + c_bm - c_dm
    w[..., 2] = c_dm - c_d
    w[..., 3] = c_o - c_b + c_bm - c_om
    w[..., 4] = full
    w[..., 5] = c_n
    w[..., 6] = full - c_sm
    if folded:  # each folded bin also stands for its mirror image [180 - a2, 180 - a1]
        w[..., :5] *= 2.0  # the populations are symmetric
        w[..., 5] += full - cum(-cn)  # mirror image below lcn
        w[..., 6] += cum(cs)  # mirror image above 180 - lcs
    np.maximum(w, 0.0, out=w)
    return w


def telescope_weights(look_deg, half_deg, cos_edges):
    """Weights (n, K, 7) of telescope looks in each population: the union of their bands.

    Each elementary interval of the union (:func:`look_bands`) is split among
    the populations like a bin (:func:`range_weights`), and its solid angles
    are shared among the looks that cover it in proportion to their band
    solid angles. A NaN look samples nothing.
    """
    a1, a2, share = look_bands(look_deg, half_deg)  # (n, M), (n, M), (n, M, K)
    wm = range_weights(np.cos(np.radians(a1)), np.cos(np.radians(a2)), cos_edges, False)
    return np.einsum("nmk,nmp->nkp", share, wm)
