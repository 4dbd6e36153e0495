"""Positions and times of field computations: one place that checks and broadcasts them.

Every field-line computation (:mod:`~beltkit.field.trace`,
:mod:`~beltkit.field.lshell`, :mod:`~beltkit.field.losscone`) takes GEO
Cartesian positions in km with a trailing axis of 3 and times that broadcast
against their leading shape; these functions check and flatten them.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._wrap import as_float_array
from ..constants import R_E_KM
from ..errors import FieldModelError, PhysicsError

__all__ = ["broadcast_time", "positions", "start_points"]


def positions(xyz_km, name="xyz_km"):
    """Return positions as floats with their leading shape, dims and coords.

    Parameters
    ----------
    xyz_km : array_like or xarray.DataArray, shape (..., 3)
        GEO Cartesian positions in km.
    name : str
        Argument name for messages.

    Returns
    -------
    tuple
        ``(values (..., 3), leading shape, leading dims or None, their coords or None)``.
    """
    dims = coords = None
    if isinstance(xyz_km, xr.DataArray):
        dims = xyz_km.dims[:-1]
        coords = {k: c for k, c in xyz_km.coords.items() if set(c.dims) <= set(dims)}
        xyz_km = xyz_km.values
    x = as_float_array(xyz_km, name)
    if x.ndim == 0 or x.shape[-1] != 3:
        raise PhysicsError(
            f"argument {name!r} must have a trailing axis of length 3 (x, y, z in GEO km); "
            f"got shape {x.shape}"
        )
    return x, x.shape[:-1], dims, coords


def broadcast_time(time, lead):
    """Return the times as a flat array matching the flattened leading shape (or a scalar).

    Parameters
    ----------
    time : scalar, array_like or xarray.DataArray
        The samples' times.
    lead : tuple
        The positions' leading shape.

    Returns
    -------
    scalar or numpy.ndarray
        One time for all points, or one per flattened point.
    """
    if isinstance(time, xr.DataArray):
        time = time.values
    t = np.asarray(time)
    if t.ndim == 0 or t.size == 1:
        return t.reshape(-1)[0] if t.ndim else t[()]
    try:
        return np.broadcast_to(t, lead).reshape(-1)
    except ValueError as exc:
        raise PhysicsError(
            f"argument 'time' of shape {t.shape} does not broadcast against the positions' "
            f"leading shape {lead}"
        ) from exc


def start_points(start_xyz_km, r_stop, name="start_xyz_km"):
    """Check the start points of field lines; return a (N, 3) float array and the leading shape.

    Parameters
    ----------
    start_xyz_km : array_like or xarray.DataArray, shape (..., 3)
        GEO Cartesian positions in km.
    r_stop : float
        Geocentric radius (km) of the stop altitude; points below it are refused.
    name : str
        Argument name for messages.

    Returns
    -------
    x : numpy.ndarray, shape (N, 3)
        The points, flattened.
    lead : tuple
        Their leading shape.

    Raises
    ------
    PhysicsError
        For non-numeric input or a trailing axis other than 3.
    FieldModelError
        For points inside the Earth or below the stop altitude.
    """
    if isinstance(start_xyz_km, xr.DataArray):
        start_xyz_km = start_xyz_km.values
    try:
        x = np.asarray(start_xyz_km, dtype=float)
    except (TypeError, ValueError) as exc:
        raise PhysicsError(
            f"argument {name!r} must be numeric GEO positions in km, got {start_xyz_km!r}"
        ) from exc
    if x.ndim == 0 or x.shape[-1] != 3:
        raise PhysicsError(
            f"argument {name!r} must have a trailing axis of length 3 (x, y, z in GEO km); "
            f"got shape {x.shape}"
        )
    lead = x.shape[:-1]
    x = x.reshape(-1, 3)
    r = np.linalg.norm(x, axis=1)
    finite = np.isfinite(r)
    inside = finite & (r < R_E_KM)
    if np.any(inside):
        i = int(np.flatnonzero(inside)[0])
        raise FieldModelError(
            f"argument {name!r} has {int(inside.sum())} point(s) inside the Earth "
            f"(first: index {i}, r = {r[i]:.1f} km < R_E = {R_E_KM} km); positions are GEO "
            "Cartesian in km, not Earth radii (multiply by beltkit.constants.R_E_KM)"
        )
    below = finite & (r < r_stop)
    if np.any(below):
        i = int(np.flatnonzero(below)[0])
        raise FieldModelError(
            f"argument {name!r} has {int(below.sum())} point(s) below the stop altitude "
            f"(first: index {i}, altitude {r[i] - R_E_KM:.1f} km < altitude_km = "
            f"{r_stop - R_E_KM:g}); lower 'altitude_km' to trace from them"
        )
    return x, lead
