r"""Closed forms along centred-dipole field lines: field, footpoints, mirror points, loss cones.

A dipole field line of McIlwain parameter :math:`L` is
:math:`r = L R_E \cos^2\lambda`, and along it
:math:`B = (B_0/L^3)\, \sqrt{1 + 3\sin^2\lambda}/\cos^6\lambda`
(Roederer 1970; Walt 1994).
"""

from __future__ import annotations

import numpy as np

from .._wrap import array_api, check_range
from ..constants import B0_NT, R_E_KM
from ..errors import PhysicsError
from .checks import check_b0, check_L, check_mlat, check_pitch, cube, footpoint_cos2
from .mirror import asin_deg, b_ratio, b_ratio_cos2, fold_pitch_angle, mirror_mlat_rad

__all__ = [
    "arc_length",
    "bounce_loss_cone",
    "equatorial_field",
    "equatorial_pitch_angle",
    "field_magnitude",
    "footpoint_field",
    "footpoint_mlat",
    "l_from_position",
    "local_loss_cone",
    "local_pitch_angle",
    "mirror_altitude",
    "mirror_mlat",
    "radius",
]


# ---------------------------------------------------------------- public API


@array_api("nT", long_name="equatorial magnetic field magnitude")
def equatorial_field(L, b0_nt=B0_NT):
    r"""Field magnitude at the equator of a dipole line.

    .. math:: B_{eq} = B_0 / L^3

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L (>= 1).
    b0_nt : float or array_like
        Equatorial surface field in nT (default :data:`beltkit.constants.B0_NT`).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`B_{eq}` in nT.

    Notes
    -----
    Roederer (1970); Walt (1994).

    Examples
    --------
    >>> round(equatorial_field(2.0, b0_nt=30000.0), 1)
    3750.0
    """
    return check_b0(b0_nt) / cube(check_L(L))


@array_api("nT", long_name="magnetic field magnitude")
def field_magnitude(L, mlat_deg, b0_nt=B0_NT):
    r"""Field magnitude along a dipole line.

    .. math:: B(L, \lambda) = \frac{B_0}{L^3} \frac{\sqrt{1 + 3\sin^2\lambda}}{\cos^6\lambda}

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L (>= 1).
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude in degrees, in (-90, 90).
    b0_nt : float or array_like
        Equatorial surface field in nT.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`B` in nT.

    Notes
    -----
    Roederer (1970); Walt (1994).

    Examples
    --------
    >>> round(field_magnitude(1.0, 60.0, b0_nt=30000.0) / 30000.0, 3)
    115.378
    """
    lam = np.deg2rad(check_mlat(mlat_deg))
    return check_b0(b0_nt) / cube(check_L(L)) * b_ratio(lam)


@array_api("degree", long_name="footpoint magnetic latitude")
def footpoint_mlat(L, altitude_km=100.0):
    r"""Magnetic latitude where a dipole line reaches an altitude (northern footpoint).

    .. math:: \cos^2\lambda_f = \frac{R_E + h}{L R_E}

    With ``altitude_km=0`` this is the invariant latitude.

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    altitude_km : float or array_like
        Footpoint altitude in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid (default 100 km).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\lambda_f` in degrees, in [0, 90).

    Raises
    ------
    PhysicsError
        If L < 1 or the line's apex lies below ``altitude_km``.

    Notes
    -----
    From the field-line equation :math:`r = L R_E \cos^2\lambda` (Roederer 1970).

    Examples
    --------
    >>> round(footpoint_mlat(4.0, altitude_km=0.0), 4)
    60.0
    """
    cos2 = footpoint_cos2(L, altitude_km)
    return np.rad2deg(np.arccos(np.sqrt(cos2)))


@array_api("nT", long_name="footpoint magnetic field magnitude")
def footpoint_field(L, altitude_km=100.0, b0_nt=B0_NT):
    r"""Field magnitude at the footpoint of a dipole line.

    .. math:: B_f = \frac{B_0}{L^3}\frac{\sqrt{4 - 3\cos^2\lambda_f}}{\cos^6\lambda_f},
       \quad \cos^2\lambda_f = \frac{R_E + h}{L R_E}

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    altitude_km : float or array_like
        Footpoint altitude in km above the sphere of radius R_E = 6371.2 km,
        not the ellipsoid (default 100).
    b0_nt : float or array_like
        Equatorial surface field in nT.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`B_f` in nT.

    Notes
    -----
    Roederer (1970).

    Examples
    --------
    >>> round(footpoint_field(1.0, altitude_km=0.0, b0_nt=30000.0), 1)
    30000.0
    """
    cos2 = footpoint_cos2(L, altitude_km)
    return check_b0(b0_nt) / cube(np.asarray(L, dtype=float)) * b_ratio_cos2(cos2)


@array_api("R_E", long_name="field-line arc length from the equator to the footpoint")
def arc_length(L, altitude_km=100.0):
    r"""Length of a dipole line from the equator to its footpoint, in Earth radii.

    .. math::

        s = \frac{L}{2\sqrt3}\left[x\sqrt{1 + x^2} + \operatorname{asinh} x\right],
        \qquad x = \sqrt3 \sin\lambda_f

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    altitude_km : float or array_like
        Footpoint altitude in km above the sphere of radius R_E = 6371.2 km,
        not the ellipsoid (default 100).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Arc length in R_E (multiply by :data:`beltkit.constants.R_E_KM` for km).

    Notes
    -----
    Integral of :math:`ds = L \cos\lambda \sqrt{1 + 3\sin^2\lambda}\, d\lambda`
    (Roederer 1970; Walt 1994).

    Examples
    --------
    >>> round(arc_length(4.0, altitude_km=0.0), 4)
    4.5021
    """
    cos2 = footpoint_cos2(L, altitude_km)
    x = np.sqrt(3.0) * np.sqrt(1.0 - cos2)
    return np.asarray(L, dtype=float) / (2.0 * np.sqrt(3.0)) * (
        x * np.sqrt(1.0 + x * x) + np.arcsinh(x)
    )


@array_api("degree", long_name="mirror magnetic latitude")
def mirror_mlat(alpha_eq_deg):
    r"""Magnetic latitude of the mirror point of a given equatorial pitch angle.

    Solves the mirror condition
    :math:`\sin^2\alpha_{eq} = \cos^6\lambda_m / \sqrt{1 + 3\sin^2\lambda_m}`,
    which with :math:`u = \cos^2\lambda_m`, :math:`s = \sin^2\alpha_{eq}` is

    .. math:: u^6 + 3 s^2 u - 4 s^2 = 0,

    a sextic with exactly one root in (0, 1]. Newton's method on a convex,
    monotone branch (two cancellation-free formulations, one near the equator
    and one near the pole) converges to machine precision in a few vectorised
    iterations. The result does not depend on L.

    Parameters
    ----------
    alpha_eq_deg : array_like or xarray.DataArray
        Equatorial pitch angle in degrees, 0-180 (angles above 90 are folded).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\lambda_m` in degrees, in [0, 90]: 0 for 90 deg, 90 for 0 deg.

    Notes
    -----
    Roederer (1970); Walt (1994).

    Examples
    --------
    >>> mirror_mlat(90.0)
    0.0
    >>> round(mirror_mlat(10.0), 3)
    52.453
    """
    a, _ = fold_pitch_angle(check_pitch(alpha_eq_deg, "alpha_eq_deg"))
    return np.rad2deg(mirror_mlat_rad(a))


@array_api("km", long_name="mirror point altitude")
def mirror_altitude(L, alpha_eq_deg):
    r"""Altitude of the mirror point above the reference sphere.

    .. math:: h_m = R_E (L \cos^2\lambda_m - 1)

    Negative values mean the particle would mirror below the surface of the
    reference sphere: it is in the loss cone.

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L (>= 1).
    alpha_eq_deg : array_like or xarray.DataArray
        Equatorial pitch angle in degrees, 0-180.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Mirror altitude in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.

    Notes
    -----
    Field-line equation (Roederer 1970) at the mirror latitude
    (:func:`mirror_mlat`).

    Examples
    --------
    >>> round(mirror_altitude(2.0, 90.0), 1)
    6371.2
    """
    L = check_L(L)
    a, _ = fold_pitch_angle(check_pitch(alpha_eq_deg, "alpha_eq_deg"))
    lam = mirror_mlat_rad(a)
    return R_E_KM * (L * np.cos(lam) ** 2 - 1.0)


@array_api("degree", long_name="local pitch angle")
def local_pitch_angle(alpha_eq_deg, mlat_deg):
    r"""Map an equatorial pitch angle to a latitude along the same dipole line.

    .. math:: \sin^2\alpha = \sin^2\alpha_{eq}\, \frac{B(\lambda)}{B_{eq}}

    Parameters
    ----------
    alpha_eq_deg : array_like or xarray.DataArray
        Equatorial pitch angle in degrees, 0-180.
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude in degrees, in (-90, 90).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Local pitch angle in degrees, on the same side of 90 as the input. NaN
        where the particle mirrors before it reaches ``mlat_deg``
        (:math:`\sin^2\alpha_{eq}\, b(\lambda) > 1`): no such particle is there.

    Notes
    -----
    Conservation of the first invariant in a static field (Roederer 1970;
    Walt 1994).

    Examples
    --------
    >>> round(local_pitch_angle(30.0, 20.0), 3)
    40.514
    """
    a, upper = fold_pitch_angle(check_pitch(alpha_eq_deg, "alpha_eq_deg"))
    lam = np.deg2rad(check_mlat(mlat_deg))
    s2 = np.sin(np.deg2rad(a)) ** 2 * b_ratio(lam)
    with np.errstate(invalid="ignore"):
        out = np.where(s2 > 1.0, np.nan, asin_deg(s2))
    return np.where(upper, 180.0 - out, out)


@array_api("degree", long_name="equatorial pitch angle")
def equatorial_pitch_angle(alpha_local_deg, mlat_deg):
    r"""Map a local pitch angle at a latitude to the equator of its dipole line.

    .. math:: \sin^2\alpha_{eq} = \sin^2\alpha\, \frac{B_{eq}}{B(\lambda)}

    Parameters
    ----------
    alpha_local_deg : array_like or xarray.DataArray
        Local pitch angle in degrees, 0-180.
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude of the measurement in degrees, in (-90, 90).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Equatorial pitch angle in degrees, on the same side of 90 as the input.

    Notes
    -----
    Conservation of the first invariant (Roederer 1970; Walt 1994).

    Examples
    --------
    >>> round(equatorial_pitch_angle(90.0, 20.0), 3)
    50.323
    """
    a, upper = fold_pitch_angle(check_pitch(alpha_local_deg, "alpha_local_deg"))
    lam = np.deg2rad(check_mlat(mlat_deg))
    out = asin_deg(np.sin(np.deg2rad(a)) ** 2 / b_ratio(lam))
    return np.where(upper, 180.0 - out, out)


@array_api("degree", long_name="equatorial bounce loss cone")
def bounce_loss_cone(L, altitude_km=100.0):
    r"""Equatorial bounce loss cone of a dipole line (mirror-ratio condition).

    .. math:: \sin^2\alpha_{LC} = \frac{B_{eq}}{B_f}
       = \frac{\cos^6\lambda_f}{\sqrt{4 - 3\cos^2\lambda_f}}

    Particles with smaller equatorial pitch angles mirror below ``altitude_km``
    and are lost within a bounce (common practice).

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    altitude_km : float or array_like
        Altitude at which particles are taken as lost, in km above the sphere
        of radius R_E = 6371.2 km, not the ellipsoid (default 100).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Loss-cone half angle in degrees, in (0, 90].

    Notes
    -----
    Roederer (1970); Walt (1994).

    Examples
    --------
    >>> round(bounce_loss_cone(4.0, altitude_km=0.0), 3)
    5.342
    """
    cos2 = footpoint_cos2(L, altitude_km)
    return asin_deg(1.0 / b_ratio_cos2(cos2))


@array_api("degree", long_name="local bounce loss cone")
def local_loss_cone(L, mlat_deg, altitude_km=100.0):
    r"""Bounce loss cone at a latitude along a dipole line.

    .. math:: \sin^2\alpha_{LC}(\lambda) = \frac{B(\lambda)}{B_f}

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude in degrees, in (-90, 90).
    altitude_km : float or array_like
        Altitude at which particles are taken as lost, in km above the sphere
        of radius R_E = 6371.2 km, not the ellipsoid (default 100).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Local loss-cone half angle in degrees; 90 at and beyond the footpoint
        latitude (every particle there is lost).

    Notes
    -----
    Mirror-ratio condition with first-invariant mapping (Roederer 1970;
    Walt 1994). Common practice.

    Examples
    --------
    >>> round(local_loss_cone(4.0, 0.0, altitude_km=0.0), 3)
    5.342
    """
    cos2 = footpoint_cos2(L, altitude_km)
    lam = np.deg2rad(check_mlat(mlat_deg))
    _check_above_surface(L, lam)
    return asin_deg(b_ratio(lam) / b_ratio_cos2(cos2))


def _check_above_surface(L, lam):
    """Refuse points of a dipole line that lie inside the Earth (r = L cos^2 lambda < 1)."""
    L = np.asarray(L, dtype=float)
    r = L * np.cos(lam) ** 2
    inside = r < 1.0 - 1e-12  # NaN compares False
    if np.any(inside):
        Lb, lamb, rb = np.broadcast_arrays(L, lam, r)
        i = np.flatnonzero(np.ravel(inside))[0]
        L0, lam0, r0 = Lb.ravel()[i], lamb.ravel()[i], rb.ravel()[i]
        limit = np.degrees(np.arccos(np.sqrt(1.0 / L0)))
        raise PhysicsError(
            f"argument 'mlat_deg' = {np.degrees(lam0):g} on L = {L0:g} is inside the Earth "
            f"(r = {r0:.4g} R_E); |mlat_deg| must not exceed the surface footpoint latitude "
            f"{limit:.4g} deg of that line"
        )


@array_api("R_E", long_name="geocentric distance")
def radius(L, mlat_deg):
    r"""Geocentric distance of a point on a dipole line, in Earth radii.

    .. math:: r = L \cos^2\lambda

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L (>= 1).
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude in degrees, in (-90, 90).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Distance in R_E.

    Notes
    -----
    Roederer (1970).

    Examples
    --------
    >>> round(radius(4.0, 60.0), 6)
    1.0
    """
    lam = np.deg2rad(check_mlat(mlat_deg))
    return check_L(L) * np.cos(lam) ** 2


@array_api("1", long_name="dipole L")
def l_from_position(r_re, mlat_deg):
    r"""Dipole L of the line through a point.

    .. math:: L = \frac{r}{\cos^2\lambda}

    Parameters
    ----------
    r_re : array_like or xarray.DataArray
        Geocentric distance in Earth radii (> 0).
    mlat_deg : array_like or xarray.DataArray
        Magnetic latitude in degrees, in (-90, 90).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        L (dimensionless; below 1 for points inside the reference sphere near
        the equator).

    Notes
    -----
    Inverse of the field-line equation (Roederer 1970).

    Examples
    --------
    >>> round(l_from_position(1.0, 60.0), 6)
    4.0
    """
    r = check_range(r_re, "r_re", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                    hint="r_re is the geocentric distance in Earth radii")
    lam = np.deg2rad(check_mlat(mlat_deg))
    return r / np.cos(lam) ** 2


