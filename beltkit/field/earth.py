r"""The Earth's surface: the WGS-84 ellipsoid and the inside-the-Earth check.

One place for the reference surface that every field computation refuses to
go below. Positions are GEO Cartesian km; a point counts as inside the Earth
when it lies more than :data:`INSIDE_EARTH_TOLERANCE_KM` below the WGS-84
ellipsoid (NIMA TR8350.2, the defining constants *a* and *f*):

.. math::

    \frac{x^2 + y^2}{(a - \delta)^2} + \frac{z^2}{(b - \delta)^2} < 1,
    \qquad b = a (1 - f).

The ellipsoid, not the 6371.2 km reference sphere of IGRF, is the surface: a
ground station near a pole sits about 14 km inside that sphere.
"""

from __future__ import annotations

import numpy as np

from ..constants import R_E_KM
from ..errors import FieldModelError

__all__ = [
    "INSIDE_EARTH_TOLERANCE_KM",
    "WGS84_A_KM",
    "WGS84_B_KM",
    "WGS84_F",
    "check_positions",
    "inside_earth",
]

#: WGS-84 semi-major axis (km), a defining constant (NIMA TR8350.2).
WGS84_A_KM = 6378.137
#: WGS-84 flattening, 1/298.257223563 (defining constant).
WGS84_F = 1.0 / 298.257223563
#: WGS-84 semi-minor axis (km), derived: a (1 - f).
WGS84_B_KM = WGS84_A_KM * (1.0 - WGS84_F)

#: Points more than this far (km) below the WGS-84 ellipsoid count as inside
#: the Earth.
INSIDE_EARTH_TOLERANCE_KM = 10.0


def inside_earth(rho2_km2, z_km) -> np.ndarray:
    r"""Whether points lie more than the tolerance below the WGS-84 ellipsoid.

    Parameters
    ----------
    rho2_km2 : array_like
        Squared distance from the rotation axis, :math:`x^2 + y^2`, in km^2.
    z_km : array_like
        Distance along the rotation axis (GEO *z*) in km.

    Returns
    -------
    numpy.ndarray of bool
        True where the point is inside; NaN compares False.

    Notes
    -----
    .. math:: \rho^2 / (a - \delta)^2 + z^2 / (b - \delta)^2 < 1

    with the WGS-84 semi-axes *a*, *b* (NIMA TR8350.2) and the tolerance
    :math:`\delta` = :data:`INSIDE_EARTH_TOLERANCE_KM`.
    """
    a = WGS84_A_KM - INSIDE_EARTH_TOLERANCE_KM
    b = WGS84_B_KM - INSIDE_EARTH_TOLERANCE_KM
    z = np.asarray(z_km, dtype=float)
    return np.asarray(rho2_km2, dtype=float) / (a * a) + z * z / (b * b) < 1.0


def check_positions(xyz_km, name: str = "xyz_km") -> np.ndarray:
    r"""Return positions as a float array ``(..., 3)``, refusing points inside the Earth.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    name : str
        Argument name for messages.

    Returns
    -------
    numpy.ndarray
        The positions as float64 (the input is not modified).

    Raises
    ------
    FieldModelError
        If the trailing axis is not 3, or a point lies more than
        :data:`INSIDE_EARTH_TOLERANCE_KM` below the WGS-84 ellipsoid
        (:func:`inside_earth`). NaN points are accepted (they give NaN fields).
    """
    if hasattr(xyz_km, "dims") and hasattr(xyz_km, "values"):
        xyz_km = xyz_km.values
    try:
        xyz = np.asarray(xyz_km, dtype=float)
    except (TypeError, ValueError) as exc:
        raise FieldModelError(f"argument {name!r} must be numeric positions in km") from exc
    if xyz.ndim == 0 or xyz.shape[-1] != 3:
        raise FieldModelError(
            f"argument {name!r} must have a trailing axis of length 3 (x, y, z in km, GEO); "
            f"got shape {xyz.shape}"
        )
    inside = inside_earth(xyz[..., 0] ** 2 + xyz[..., 1] ** 2, xyz[..., 2])
    if np.any(inside):
        r = np.sqrt(np.sum(xyz**2, axis=-1))[inside]
        raise FieldModelError(
            f"argument {name!r}: {int(inside.sum())} point(s) lie inside the Earth "
            f"(e.g. radius {r.flat[0]:.1f} km, more than {INSIDE_EARTH_TOLERANCE_KM:g} km "
            f"below the WGS-84 surface); positions must be GEO Cartesian in km "
            f"(multiply R_E values by {R_E_KM} km)"
        )
    return xyz
