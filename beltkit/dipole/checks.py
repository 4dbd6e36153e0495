"""Argument checks of the dipole functions, and the footpoint of a dipole line."""

from __future__ import annotations

import numpy as np

from .._wrap import check_range
from ..constants import R_E_KM
from ..errors import PhysicsError

__all__ = ["check_L", "check_altitude", "check_b0", "check_mlat", "check_pitch",
           "check_sine_pitch", "cube", "footpoint_cos2"]


def check_L(L):
    """Return L as an array, refusing L < 1."""
    return check_range(L, "L", lo=1.0, hi=np.inf, hi_open=True,
                       hint="L is the equatorial distance of the field line in Earth radii")


def check_mlat(mlat_deg, name="mlat_deg"):
    """Return magnetic latitudes (deg), refusing the poles and beyond."""
    return check_range(mlat_deg, name, lo=-90.0, hi=90.0, lo_open=True, hi_open=True,
                       hint="Magnetic latitude is in degrees; the poles are excluded")


def check_pitch(alpha_deg, name):
    """Return pitch angles (deg), refusing values outside 0-180."""
    return check_range(alpha_deg, name, lo=0.0, hi=180.0,
                       hint="Pitch angles are in degrees, 0-180")


def check_sine_pitch(y):
    """Return y = sin(alpha_eq) as an array, refusing values outside 0-1."""
    return check_range(y, "y", lo=0.0, hi=1.0,
                       hint="y is sin(alpha_eq), the sine of the equatorial pitch angle")


def check_b0(b0_nt):
    """Return the dipole surface field (nT), refusing values <= 0."""
    return check_range(b0_nt, "b0_nt", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                       hint="b0_nt is the dipole's equatorial surface field in nT")


def check_altitude(altitude_km):
    """Return altitudes (km above the R_E sphere), refusing the centre side."""
    return check_range(altitude_km, "altitude_km", lo=-R_E_KM, lo_open=True, hi=np.inf,
                       hi_open=True,
                       hint="Altitude is in km above the reference sphere R_E = 6371.2 km")


def footpoint_cos2(L, altitude_km=100.0):
    r"""Return cos^2 of the footpoint latitude of field lines, checking they reach the altitude.

    A checked kernel of :func:`footpoint_mlat` for callers that need the
    square cosine (loss cones from field ratios) on plain arrays.

    Parameters
    ----------
    L : array_like
        L-shell (>= 1).
    altitude_km : array_like
        Footpoint altitude above the reference sphere R_E = 6371.2 km.

    Returns
    -------
    numpy.ndarray
        :math:`\cos^2\lambda_f = (R_E + h) / (L R_E)` (field line
        :math:`r = L R_E \cos^2\lambda` of the centred dipole, common practice).

    Raises
    ------
    PhysicsError
        If L < 1, or a line's apex lies below the altitude (L < 1 + h / R_E).
    """
    L = check_L(L)
    h = check_altitude(altitude_km)
    rf = 1.0 + h / R_E_KM
    cos2 = rf / L
    with np.errstate(invalid="ignore"):
        bad = cos2 > 1.0
    if np.any(bad):
        Lb, hb = np.broadcast_arrays(L, h)
        i = np.flatnonzero(np.broadcast_to(bad, Lb.shape))[0]
        raise PhysicsError(
            f"argument 'L' must be at least 1 + altitude_km / R_E so that the field line "
            f"reaches the footpoint altitude; got L={Lb.flat[i]:g} with "
            f"altitude_km={hb.flat[i]:g} (needs L >= {1.0 + hb.flat[i] / R_E_KM:.6g}). "
            "Lower altitude_km or drop samples on lines whose apex is below it"
        )
    return cos2


# ---------------------------------------------------------------- kernels


def cube(x):
    """Return x^3 by two multiplications (a pow call costs twice as much)."""
    return x * x * x


