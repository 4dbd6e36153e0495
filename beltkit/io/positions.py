r"""Spacecraft positions in any common form, converted to GEO Cartesian km.

The mapping declares the form (``[position] form``):

``"geodetic"``
    ``latitude``, ``longitude`` (degrees, any angle unit) and ``altitude``
    (km, any length unit) above the WGS-84 ellipsoid, converted by
    :func:`beltkit.field.coords.geodetic_to_geo` (NIMA TR8350.2).
``"cartesian"``
    ``position`` (time, 3) in the frame ``[position] frame``: GEO, GSE, GSM or
    SM, converted by :func:`beltkit.field.coords.convert` (Hapgood 1992), or
    GEI, the geocentric equatorial inertial frame of the mean equator and
    equinox of date, turned to GEO about Z by the Greenwich mean sidereal
    time :math:`\theta` (Hapgood 1992, transformation T1):

    .. math:: x_{GEO} = x\cos\theta + y\sin\theta,\quad
              y_{GEO} = -x\sin\theta + y\cos\theta,\quad z_{GEO} = z

    Lengths in km or Earth radii (``R_E``, ``Re``, ``R!IE!N``: 6371.2 km).

The result is ``position_geo`` (time, xyz) in km, computed slab by slab
where it is indexed; the source variables are dropped.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import MappingError
from .lazy import Computation, derived_variable, read_block
from .metadata import units_factor

__all__ = ["gei_to_geo", "resolve_position"]


def gei_to_geo(xyz, time):
    """Rotate GEI-of-date vectors (..., 3) to GEO by the Greenwich mean sidereal time."""
    from ..field.sun import gmst_deg

    theta = np.radians(np.asarray(gmst_deg(time), float))
    v = np.asarray(xyz, float)
    c, s = np.cos(theta), np.sin(theta)
    return np.stack([c * v[..., 0] + s * v[..., 1], -s * v[..., 0] + c * v[..., 1],
                     v[..., 2]], axis=-1)


def resolve_position(ds: xr.Dataset, rule: dict, *, where: str) -> xr.Dataset:
    """Return `ds` with ``position_geo`` made from the declared position form.

    Parameters
    ----------
    ds : xarray.Dataset
        Conventional names, time decoded.
    rule : dict
        The mapping's ``[position]`` table (``form``, ``frame``).
    where : str
        File and mapping, for messages.

    Raises
    ------
    MappingError
        Missing or unit-less components, a vector without a length-3
        dimension, or a ``position`` without a declared form and frame.
    """
    form = rule.get("form")
    geodetic = all(n in ds.variables for n in ("latitude", "longitude", "altitude"))
    if form is None and geodetic and "position_geo" not in ds.variables:
        form = "geodetic"
    if form is None:
        if "position" in ds.variables:
            raise MappingError(f"{where}: a 'position' vector is mapped but its frame is not "
                               f"declared; add [position] form = \"cartesian\" and frame = "
                               f"\"GSM\" (or GEO, GSE, SM, GEI)")
        return ds
    if "time" not in ds.dims:
        return ds
    n = ds.sizes["time"]
    time = ds["time"].values
    if form == "geodetic":
        names = ("latitude", "longitude", "altitude")
        missing = [k for k in names if k not in ds.variables]
        if missing:
            raise MappingError(f"{where}: [position] form = \"geodetic\" needs "
                               + ", ".join(f"[variables] {k}" for k in missing))
        f_lat = units_factor(ds[names[0]], "degree", "latitude", where)
        f_lon = units_factor(ds[names[1]], "degree", "longitude", where)
        f_alt = units_factor(ds[names[2]], "km", "altitude", where)
        srcs = [ds.variables[k] for k in names]

        def func(index):
            from ..field.coords import geodetic_to_geo

            lat, lon, alt = (read_block(v, index).astype(float) for v in srcs)
            xyz = geodetic_to_geo(lat * f_lat, lon * f_lon, alt * f_alt)
            return {"p": np.asarray(xyz, float)}

        drop = list(names)
        how = "WGS-84 geodetic latitude, longitude and altitude"
    else:
        frame = str(rule["frame"]).upper()
        if "position" not in ds.variables:
            raise MappingError(f"{where}: [position] form = \"cartesian\" needs the vector: "
                               f"[variables] position = \"...\" (time, 3)")
        pos = ds.variables["position"]
        comp = [d for d in pos.dims if d != "time" and pos.sizes[d] == 3]
        if pos.ndim != 2 or "time" not in pos.dims or not comp:
            raise MappingError(f"{where}: position has dims {pos.dims}; it must be (time, 3)")
        pos = pos.transpose("time", comp[0])
        f = units_factor(pos, "km", "position", where)

        def func(index):
            from ..field.coords import convert

            v = read_block(pos, {"time": index["time"]}).astype(float) * f
            t = time[index["time"]]
            if frame == "GEO":
                out = v
            elif frame == "GEI":
                out = gei_to_geo(v, t)
            else:
                out = np.asarray(convert(v, t, frame, "GEO"))
            return {"p": out[:, index["xyz"]]}

        drop = ["position"]
        how = f"Cartesian {frame}"
    computation = Computation(
        lambda index: _select(func, index), {"p": (("time", "xyz"), (n, 3), np.float64)})
    attrs = {"units": "km", "long_name": "position in GEO (geographic Cartesian)",
             "beltkit_position_source": how}
    ds = ds.drop_vars(drop)
    ds["position_geo"] = derived_variable(computation, "p", attrs)
    return ds


def _select(func, index):
    out = func({"time": index["time"], "xyz": slice(None)})
    return {"p": out["p"][:, index["xyz"]] if out["p"].shape[-1] == 3 else out["p"]}
