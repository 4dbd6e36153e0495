r"""Geophysical coordinate frames, magnetic coordinates and the WGS-84 ellipsoid.

Frames (all geocentric, Cartesian, km or any length unit)

``"GEO"``
    Geographic: Z along the rotation axis (north), X through the Greenwich
    meridian on the equator. Earth-fixed.
``"MAG"``
    Centred-dipole ("geomagnetic") frame of the epoch: Z along the dipole
    axis towards the northern geomagnetic pole
    :math:`\hat{\mathbf D}` (:meth:`~beltkit.field.models.FieldModel.dipole_axis_geo`,
    from the IGRF-14 :math:`g_1^0, g_1^1, h_1^1` of the time),
    :math:`\hat{\mathbf Y} = \hat{\mathbf Z}_{GEO} \times \hat{\mathbf D} /
    |\cdot|`, :math:`\hat{\mathbf X} = \hat{\mathbf Y} \times \hat{\mathbf Z}`
    (so the MAG prime meridian contains the geographic south pole).
``"GSE"``
    Geocentric solar ecliptic: X towards the Sun, Z to the north ecliptic
    pole.
``"GSM"``
    Geocentric solar magnetospheric: X towards the Sun, the X-Z plane holds
    the dipole axis, Z on the side of the northern dipole pole:
    :math:`\hat{\mathbf Y} = \hat{\mathbf D} \times \hat{\mathbf S} / |\cdot|`,
    :math:`\hat{\mathbf Z} = \hat{\mathbf X} \times \hat{\mathbf Y}`.
``"SM"``
    Solar magnetic: Z along the dipole axis, the X-Z plane holds the Sun:
    :math:`\hat{\mathbf Y} = \hat{\mathbf D} \times \hat{\mathbf S} / |\cdot|`,
    :math:`\hat{\mathbf X} = \hat{\mathbf Y} \times \hat{\mathbf Z}`.

These are the definitions of Russell (1971), "Geophysical coordinate
transformations", *Cosmic Electrodynamics* 2, 184, and Hapgood (1992),
"Space physics coordinate transformations: a user guide", *Planet. Space
Sci.* 40, 711 (with the dipole from the IGRF first-degree coefficients, as
Hapgood prescribes). The Sun's direction is the Astronomical Almanac
low-precision ephemeris in GEI of date, rotated to GEO by the Greenwich mean
sidereal time (:mod:`beltkit.field.sun`). Each frame's axes are built as
unit vectors in GEO at every time, so conversions are vectorised over time.

Magnetic coordinates and local time
    Magnetic latitude and longitude are the spherical angles in MAG;
    magnetic local time is :math:`12 + \phi_{SM} / 15^\circ` (mod 24), the
    angle of the point's meridian from the anti-sunward one in the dipole
    frame (the sub-solar magnetic meridian is 12 h).

WGS-84
    Defining constants *a* = 6378.137 km, 1/*f* = 298.257223563 (NIMA
    TR8350.2, "Department of Defense World Geodetic System 1984", 3rd ed.,
    2000).
"""

from __future__ import annotations

import numpy as np

from ..errors import FieldModelError
from .earth import WGS84_A_KM, WGS84_B_KM, WGS84_F
from .models import as_model
from .sun import ecliptic_pole_gei, gmst_deg, sun_direction_gei
from .timeconv import decimal_year

__all__ = [
    "FRAMES",
    "WGS84_A_KM",
    "WGS84_F",
    "convert",
    "frame_matrix",
    "geo_to_geodetic",
    "geodetic_to_geo",
    "magnetic_coordinates",
    "magnetic_local_time",
    "sun_direction_geo",
]

FRAMES = ("GEO", "MAG", "GSE", "GSM", "SM")

_E2 = WGS84_F * (2.0 - WGS84_F)
_EP2 = _E2 / (1.0 - _E2)


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _gei_to_geo(v, theta_rad):
    """Rotate GEI-of-date vectors by the sidereal angle (Hapgood 1992, T1 = <theta, Z>)."""
    c = np.cos(theta_rad)[..., None]
    s = np.sin(theta_rad)[..., None]
    x, y, z = v[..., 0:1], v[..., 1:2], v[..., 2:3]
    return np.concatenate([c * x + s * y, -s * x + c * y, z], axis=-1)


def sun_direction_geo(time) -> np.ndarray:
    """Return the unit vector towards the Sun in GEO at the given times.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).

    Returns
    -------
    numpy.ndarray, shape ``time.shape + (3,)``
        :func:`beltkit.field.sun.sun_direction_gei` rotated by the Greenwich
        mean sidereal time.
    """
    return _gei_to_geo(sun_direction_gei(time), np.radians(gmst_deg(time)))


def _check_frame(frame, name):
    key = str(frame).strip().upper()
    if key not in FRAMES:
        raise FieldModelError(
            f"argument {name!r}: unknown frame {frame!r}; use one of {', '.join(FRAMES)}"
        )
    return key


def frame_matrix(frame: str, time, *, model=None) -> np.ndarray:
    """Rotation matrix from GEO to ``frame`` at the given times.

    Parameters
    ----------
    frame : {"GEO", "MAG", "GSE", "GSM", "SM"}
        Target frame.
    time : datetime64, datetime, str, float or array_like
        UTC instants (or decimal years).
    model : FieldModel, str or None
        Source of the dipole axis for MAG, GSM and SM; None is the centred
        dipole of IGRF-14 at each time (:class:`~beltkit.field.CenteredDipole`).

    Returns
    -------
    numpy.ndarray, shape ``time.shape + (3, 3)``
        Rows are the frame's unit axes in GEO, so ``v_frame = M @ v_geo``
        and ``v_geo = M.T @ v_frame``.
    """
    frame = _check_frame(frame, "frame")
    t = np.asarray(decimal_year(time), float)
    if frame == "GEO":
        return np.broadcast_to(np.eye(3), t.shape + (3, 3)).copy()
    if frame in ("MAG", "GSM", "SM"):
        dip = np.asarray(as_model(model).dipole_axis_geo(time), float)
        dip = np.broadcast_to(dip, t.shape + (3,))
    if frame == "MAG":
        zg = np.broadcast_to(np.array([0.0, 0.0, 1.0]), dip.shape)
        y = _unit(np.cross(zg, dip))
        x = np.cross(y, dip)
        return np.stack([x, y, dip], axis=-2)
    sun = sun_direction_geo(time)
    if frame == "GSE":
        pole = _gei_to_geo(ecliptic_pole_gei(time), np.radians(gmst_deg(time)))
        return np.stack([sun, np.cross(pole, sun), pole], axis=-2)
    y = _unit(np.cross(dip, sun))
    if frame == "GSM":
        return np.stack([sun, y, np.cross(sun, y)], axis=-2)
    return np.stack([np.cross(y, dip), y, dip], axis=-2)  # SM


def _as_xyz(xyz, name):
    if hasattr(xyz, "dims") and hasattr(xyz, "values"):
        arr = np.asarray(xyz.values, dtype=float)
    else:
        try:
            arr = np.asarray(xyz, dtype=float)
        except (TypeError, ValueError) as exc:
            raise FieldModelError(f"argument {name!r} must be numeric") from exc
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise FieldModelError(
            f"argument {name!r} must have a trailing axis of length 3 (x, y, z); "
            f"got shape {arr.shape}"
        )
    return arr


def _is_dataarray(v):
    return hasattr(v, "dims") and hasattr(v, "values") and hasattr(v, "attrs")


def _wrap_like(template, values, units, long_name=None, drop_last=False):
    """Return ``values`` as a DataArray shaped like ``template`` (xarray input) or as is."""
    if not _is_dataarray(template) or values.shape[: template.ndim - drop_last] != (
        template.shape[: template.ndim - drop_last]
    ):
        return values
    import xarray as xr

    dims = template.dims[:-1] if drop_last else template.dims
    coords = {k: v for k, v in template.coords.items() if set(v.dims) <= set(dims)}
    out = xr.DataArray(values, dims=dims, coords=coords)
    out.attrs["units"] = units
    if long_name:
        out.attrs["long_name"] = long_name
    return out


def convert(xyz, time, frm: str, to: str, *, model=None):
    r"""Convert Cartesian vectors between GEO, MAG, GSE, GSM and SM.

    Parameters
    ----------
    xyz : array_like or xarray.DataArray, shape (..., 3)
        Positions (or any vectors, e.g. field vectors) in frame ``frm``.
    time : datetime64, datetime, str, float or array_like
        UTC instants, broadcast against ``xyz[..., 0]``.
    frm, to : {"GEO", "MAG", "GSE", "GSM", "SM"}
        Source and target frame.
    model : FieldModel, str or None
        Source of the dipole axis (MAG, GSM, SM); None = the IGRF-14
        centred dipole of each time.

    Returns
    -------
    numpy.ndarray or xarray.DataArray, shape (..., 3)
        The vectors in frame ``to`` (same length unit). A DataArray input
        gives a DataArray with its dims, coords and ``units``.

    Raises
    ------
    FieldModelError
        Unknown frame names, a trailing axis other than 3, times outside
        IGRF-14 (frames that need the dipole).

    Notes
    -----
    :math:`\mathbf v_{to} = M_{to}\, M_{frm}^{T}\, \mathbf v_{frm}` with
    :math:`M` the GEO-to-frame rotations of :func:`frame_matrix`
    (Hapgood 1992; Russell 1971). NaN vectors stay NaN.

    Examples
    --------
    >>> import numpy as np
    >>> p = convert(np.array([7000.0, 0.0, 0.0]), "2024-01-01", "GEO", "GSM")
    >>> back = convert(p, "2024-01-01", "GSM", "GEO")
    >>> bool(np.allclose(back, [7000.0, 0.0, 0.0]))
    True
    """
    v = _as_xyz(xyz, "xyz")
    frm = _check_frame(frm, "frm")
    to = _check_frame(to, "to")
    if frm == to:
        return _wrap_like(xyz, v.copy(), _units_of(xyz))
    t = np.asarray(decimal_year(time), float)
    lead = np.broadcast_shapes(v.shape[:-1], t.shape)
    if frm == "GEO":
        geo = v
    else:
        m = frame_matrix(frm, time, model=model)
        geo = np.einsum("...ji,...j->...i", m, v)
    if to == "GEO":
        out = geo
    else:
        m = frame_matrix(to, time, model=model)
        out = np.einsum("...ij,...j->...i", m, geo)
    out = np.broadcast_to(out, lead + (3,)).copy()
    return _wrap_like(xyz, out, _units_of(xyz))


def _units_of(xyz):
    return xyz.attrs.get("units", "km") if _is_dataarray(xyz) else "km"


def magnetic_coordinates(xyz_geo_km, time, *, model=None):
    r"""Magnetic (centred-dipole) latitude, longitude and radius of GEO points.

    Parameters
    ----------
    xyz_geo_km : array_like or xarray.DataArray, shape (..., 3)
        GEO Cartesian positions in km.
    time : datetime64, datetime, str, float or array_like
        UTC instants, broadcast against the points.
    model : FieldModel, str or None
        Source of the dipole axis; None = IGRF-14 centred dipole of the time.

    Returns
    -------
    mlat_deg : ndarray or DataArray
        Magnetic latitude, -90 to 90 deg.
    mlon_deg : ndarray or DataArray
        Magnetic longitude, 0 to 360 deg east of the MAG prime meridian
        (the one through the geographic south pole).
    r_re : ndarray or DataArray
        Geocentric distance in Earth radii (6371.2 km).

    Notes
    -----
    Spherical angles of the MAG-frame vector (Hapgood 1992):
    :math:`\lambda_m = \arcsin(z_{MAG}/r)`,
    :math:`\phi_m = \operatorname{atan2}(y_{MAG}, x_{MAG})`.
    """
    from ..constants import R_E_KM

    mag = np.asarray(convert(_as_xyz(xyz_geo_km, "xyz_geo_km"), time, "GEO", "MAG", model=model))
    r = np.linalg.norm(mag, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mlat = np.degrees(np.arcsin(np.clip(mag[..., 2] / r, -1.0, 1.0)))
    mlon = np.mod(np.degrees(np.arctan2(mag[..., 1], mag[..., 0])), 360.0)
    return (
        _wrap_like(xyz_geo_km, mlat, "degrees_north", "magnetic latitude", drop_last=True),
        _wrap_like(xyz_geo_km, mlon, "degrees_east", "magnetic longitude", drop_last=True),
        _wrap_like(xyz_geo_km, r / R_E_KM, "R_E", "geocentric distance", drop_last=True),
    )


def magnetic_local_time(xyz_geo_km, time, *, model=None):
    r"""Magnetic local time of GEO points (hours, 0-24).

    Parameters
    ----------
    xyz_geo_km : array_like or xarray.DataArray, shape (..., 3)
        GEO Cartesian positions in km.
    time : datetime64, datetime, str, float or array_like
        UTC instants, broadcast against the points.
    model : FieldModel, str or None
        Source of the dipole axis; None = IGRF-14 centred dipole of the time.

    Returns
    -------
    ndarray or DataArray
        :math:`MLT = (12 + \operatorname{atan2}(y_{SM}, x_{SM}) \cdot 12/\pi)
        \bmod 24` hours: 12 on the sub-solar magnetic meridian, 0 on the
        anti-sunward one (common practice; the SM frame of Hapgood 1992).
    """
    sm = np.asarray(convert(_as_xyz(xyz_geo_km, "xyz_geo_km"), time, "GEO", "SM", model=model))
    mlt = np.mod(12.0 + np.degrees(np.arctan2(sm[..., 1], sm[..., 0])) / 15.0, 24.0)
    return _wrap_like(xyz_geo_km, mlt, "hour", "magnetic local time", drop_last=True)


def geodetic_to_geo(lat_deg, lon_deg, alt_km):
    r"""WGS-84 geodetic latitude, longitude and height to GEO Cartesian km.

    Parameters
    ----------
    lat_deg, lon_deg : array_like
        Geodetic latitude (-90 to 90) and east longitude, degrees.
    alt_km : array_like
        Height above the WGS-84 ellipsoid, km.

    Returns
    -------
    numpy.ndarray or xarray.DataArray, shape (..., 3)
        GEO x, y, z in km (broadcast shape of the inputs + 3); a DataArray
        (new last dim ``xyz``, ``units`` km) when an input is a DataArray.

    Notes
    -----
    .. math::

        N = \frac{a}{\sqrt{1 - e^2 \sin^2\varphi}}, \quad
        x = (N + h)\cos\varphi\cos\lambda, \quad
        y = (N + h)\cos\varphi\sin\lambda, \quad
        z = \left(N (1 - e^2) + h\right)\sin\varphi,

    :math:`e^2 = f (2 - f)` (NIMA TR8350.2, WGS-84).

    Examples
    --------
    >>> geodetic_to_geo(0.0, 0.0, 0.0).tolist()
    [6378.137, 0.0, 0.0]
    """
    if any(_is_dataarray(v) for v in (lat_deg, lon_deg, alt_km)):
        import xarray as xr

        lat_da, lon_da, alt_da = xr.broadcast(
            *(v if _is_dataarray(v) else xr.DataArray(v) for v in (lat_deg, lon_deg, alt_km))
        )
        xyz = geodetic_to_geo(lat_da.values, lon_da.values, alt_da.values)
        out = xr.DataArray(xyz, dims=lat_da.dims + ("xyz",), coords=lat_da.coords)
        out.attrs = {"units": "km", "long_name": "GEO Cartesian position"}
        return out
    lat, lon, h = np.broadcast_arrays(
        np.asarray(lat_deg, float), np.asarray(lon_deg, float), np.asarray(alt_km, float)
    )
    bad = np.abs(lat) > 90.0
    if np.any(bad):
        raise FieldModelError(
            f"argument 'lat_deg' must lie in [-90, 90] degrees; got {lat[bad].flat[0]:g}"
        )
    phi = np.radians(lat)
    lam = np.radians(lon)
    sphi = np.sin(phi)
    cphi = np.cos(phi)
    n = WGS84_A_KM / np.sqrt(1.0 - _E2 * sphi * sphi)
    return np.stack(
        [(n + h) * cphi * np.cos(lam), (n + h) * cphi * np.sin(lam), (n * (1.0 - _E2) + h) * sphi],
        axis=-1,
    )


def geo_to_geodetic(xyz_km):
    r"""GEO Cartesian km to WGS-84 geodetic latitude, longitude and height.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO positions in km.

    Returns
    -------
    lat_deg, lon_deg, alt_km : ndarray or xarray.DataArray
        Geodetic latitude and east longitude (deg, longitude in (-180, 180])
        and height above the ellipsoid (km); DataArrays with ``units`` for a
        DataArray input.

    Notes
    -----
    Bowring's (1976, *Survey Review* 23, 323) parametric-latitude iteration,

    .. math::

        \tan\varphi = \frac{z + e'^2 b \sin^3\beta}{p - e^2 a \cos^3\beta},
        \qquad \tan\beta = (1 - f) \tan\varphi,

    started from :math:`\tan\beta = z / ((1 - f) p)` and repeated four
    times (each step multiplies the error by far less than 1e-3 outside
    the deep interior), then
    :math:`h = p\cos\varphi + z\sin\varphi - a\sqrt{1 - e^2\sin^2\varphi}`,
    which holds at all latitudes including the poles. Accurate to well
    below a millimetre from the surface to beyond geostationary orbit.
    """
    v = _as_xyz(xyz_km, "xyz_km")
    x, y, z = v[..., 0], v[..., 1], v[..., 2]
    p = np.hypot(x, y)
    beta = np.arctan2(z, (1.0 - WGS84_F) * p)
    for _ in range(4):
        sb = np.sin(beta)
        cb = np.cos(beta)
        phi = np.arctan2(z + _EP2 * WGS84_B_KM * sb**3, p - _E2 * WGS84_A_KM * cb**3)
        beta = np.arctan2((1.0 - WGS84_F) * np.sin(phi), np.cos(phi))
    sphi = np.sin(phi)
    h = p * np.cos(phi) + z * sphi - WGS84_A_KM * np.sqrt(1.0 - _E2 * sphi * sphi)
    lon = np.degrees(np.arctan2(y, x))
    return (
        _wrap_like(xyz_km, np.degrees(phi), "degrees_north", "geodetic latitude", drop_last=True),
        _wrap_like(xyz_km, lon, "degrees_east", "longitude", drop_last=True),
        _wrap_like(xyz_km, h, "km", "height above the WGS-84 ellipsoid", drop_last=True),
    )
