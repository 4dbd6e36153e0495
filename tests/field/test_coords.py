"""Frames, the Sun, magnetic coordinates and WGS-84 against outside references.

References used here:
* astropy (package index): the Sun's position (``get_sun``, transformed to the
  mean equator and equinox of date), Greenwich mean sidereal time, and WGS-84
  geodetic conversion (``EarthLocation``). Run offline with astropy's bundled
  IERS tables.
* WGS-84 defining constants a = 6378.137 km, 1/f = 298.257223563 (NIMA TR8350.2).
* Frame definitions of Hapgood (1992, Planet. Space Sci. 40, 711) and Russell
  (1971, Cosmic Electrodyn. 2, 184): the properties each frame is defined by.
* Spherical trigonometry for the geomagnetic latitude (common practice).
"""

import itertools

import astropy.units as u
import numpy as np
import pytest
import xarray as xr
from astropy.coordinates import ITRS, EarthLocation, PrecessedGeocentric, get_sun
from astropy.time import Time
from astropy.utils import iers

from beltkit.errors import FieldModelError
from beltkit.field import CenteredDipole, coords, sun
from beltkit.field.timeconv import as_datetime64, decimal_year, julian_date

iers.conf.auto_download = False  # offline: astropy's bundled IERS data

DATES = np.array(
    [
        "1961-02-14T05:00",
        "1972-06-21T12:00",
        "1986-09-23T00:30",
        "1999-12-31T23:59",
        "2003-10-29T06:11",
        "2012-03-20T18:00",
        "2020-12-21T10:02",
        "2024-05-10T16:45",
    ],
    dtype="datetime64[ns]",
)


def _astropy_times(times):
    return Time([str(t) for t in times.astype("datetime64[ms]")], scale="utc")


def test_sun_direction_matches_astropy():
    # astropy get_sun (apparent, GCRS) -> mean equator and equinox of date;
    # the Astronomical Almanac's low-precision formulas claim 0.01 deg.
    ours = sun.sun_direction_gei(DATES)
    worst = 0.0
    for i, t in enumerate(_astropy_times(DATES)):
        c = get_sun(t).transform_to(PrecessedGeocentric(equinox=t, obstime=t))
        ref = c.cartesian.xyz.value
        ref = ref / np.linalg.norm(ref)
        ang = np.degrees(np.arccos(np.clip(ours[i] @ ref, -1.0, 1.0)))
        worst = max(worst, ang)
    assert worst < 0.01
    # nudge: one hour of time error (0.04 deg of solar motion) is detected
    late = sun.sun_direction_gei(DATES + np.timedelta64(1, "h"))
    t0 = _astropy_times(DATES[:1])[0]
    c = get_sun(t0).transform_to(PrecessedGeocentric(equinox=t0, obstime=t0))
    ref = c.cartesian.xyz.value / np.linalg.norm(c.cartesian.xyz.value)
    assert np.degrees(np.arccos(late[0] @ ref)) > 0.03


def test_sun_direction_in_geo_matches_astropy_itrs():
    # end to end (ephemeris + sidereal rotation): astropy's Sun in the Earth-fixed
    # ITRS frame; polar motion (< 1e-4 deg) and nutation are below the tolerance.
    dates = DATES[2:]  # astropy's bundled polar motion starts in 1973
    ours = coords.sun_direction_geo(dates)
    for i, t in enumerate(_astropy_times(dates)):
        ref = get_sun(t).transform_to(ITRS(obstime=t)).cartesian.xyz.value
        ref = ref / np.linalg.norm(ref)
        assert np.degrees(np.arccos(np.clip(ours[i] @ ref, -1.0, 1.0))) < 0.01


def test_gmst_matches_astropy():
    # astropy Time.sidereal_time("mean", "greenwich") uses UT1; we use UTC
    # (|UT1 - UTC| < 0.9 s = 0.004 deg).
    ours = sun.gmst_deg(DATES)
    ref = _astropy_times(DATES).sidereal_time("mean", "greenwich").deg
    diff = (ours - ref + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(diff)) < 0.005


def test_round_trips_between_all_frames():
    rng = np.random.default_rng(4)
    xyz = rng.normal(size=(40, 3)) * 20000.0
    times = DATES[rng.integers(0, len(DATES), 40)]
    for a, b in itertools.permutations(coords.FRAMES, 2):
        there = coords.convert(xyz, times, a, b)
        back = coords.convert(there, times, b, a)
        np.testing.assert_allclose(back, xyz, atol=1e-8)
        # rotations keep lengths
        np.testing.assert_allclose(
            np.linalg.norm(there, axis=-1), np.linalg.norm(xyz, axis=-1), rtol=1e-12
        )
    # chained equals direct
    direct = coords.convert(xyz, times, "GSE", "SM")
    chain = coords.convert(coords.convert(xyz, times, "GSE", "GSM"), times, "GSM", "SM")
    np.testing.assert_allclose(direct, chain, atol=1e-8)


def test_frame_definitions():
    # Hapgood (1992) definitions: the dipole is +Z of MAG and SM, lies in the
    # X-Z plane of GSM with Z > 0; the Sun is +X of GSE and GSM and lies in the
    # X-Z plane of SM with X > 0.
    axis = CenteredDipole().dipole_axis_geo(DATES)
    s = coords.sun_direction_geo(DATES)
    z = [[0.0, 0.0, 1.0]] * 8
    np.testing.assert_allclose(coords.convert(axis, DATES, "GEO", "MAG"), z, atol=1e-12)
    np.testing.assert_allclose(coords.convert(axis, DATES, "GEO", "SM"), z, atol=1e-12)
    gsm_axis = coords.convert(axis, DATES, "GEO", "GSM")
    np.testing.assert_allclose(gsm_axis[:, 1], 0.0, atol=1e-12)
    assert np.all(gsm_axis[:, 2] > 0.8)  # dipole tilt at most ~33 deg
    np.testing.assert_allclose(coords.convert(s, DATES, "GEO", "GSE"), [[1, 0, 0]] * 8, atol=1e-12)
    np.testing.assert_allclose(coords.convert(s, DATES, "GEO", "GSM"), [[1, 0, 0]] * 8, atol=1e-12)
    sm_sun = coords.convert(s, DATES, "GEO", "SM")
    np.testing.assert_allclose(sm_sun[:, 1], 0.0, atol=1e-12)
    assert np.all(sm_sun[:, 0] > 0.8)
    # GSE Z is the ecliptic pole: 23.44 deg from the rotation axis (obliquity)
    zgse = coords.convert(np.array([0.0, 0.0, 1.0]), DATES, "GSE", "GEO")
    np.testing.assert_allclose(np.degrees(np.arccos(zgse[:, 2])), 23.44, atol=0.01)
    # MAG prime meridian contains the geographic south pole (Hapgood: Y = D x S)
    south = coords.convert(np.array([0.0, 0.0, -1.0]), DATES, "GEO", "MAG")
    np.testing.assert_allclose(south[:, 1], 0.0, atol=1e-12)
    assert np.all(south[:, 0] > 0)


def test_dipole_tilt_seasons():
    # Geometry (common practice): the dipole tilt angle (GSE latitude of the Sun-ward
    # tilt) is extreme, +-(obliquity + dipole colatitude) = +-(23.44 + 9.41) deg in 2020,
    # at a solstice when the northern dipole pole (72.7 W) is at noon (about 16:50 UT)
    # or midnight (04:50 UT); at the December solstice and 16:50 UT it is -23.44 + 9.41.
    dip = CenteredDipole(epoch=2020.5)

    def tilt(t):
        t = np.datetime64(t)
        return np.degrees(np.arcsin(coords.convert(dip.dipole_axis_geo(t), t, "GEO", "GSE")[0]))

    assert tilt("2020-06-20T16:50") == pytest.approx(23.44 + 9.41, abs=0.3)
    assert tilt("2020-12-21T04:50") == pytest.approx(-(23.44 + 9.41), abs=0.3)
    assert tilt("2020-12-21T16:50") == pytest.approx(-23.44 + 9.41, abs=0.3)
    assert tilt("2020-06-20T04:50") == pytest.approx(23.44 - 9.41, abs=0.3)


def test_magnetic_latitude_by_spherical_trigonometry():
    # sin(mlat) = sin(lat) sin(lat0) + cos(lat) cos(lat0) cos(lon - lon0), pole (lat0, lon0)
    rng = np.random.default_rng(9)
    n = 100
    lat = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    lon = rng.uniform(-180, 180, n)
    r = rng.uniform(6500.0, 40000.0, n)
    phi, lam = np.radians(lat), np.radians(lon)
    xyz = r[:, None] * np.stack(
        [np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], -1
    )
    ax = CenteredDipole().dipole_axis_geo(2015.0)
    lat0 = np.arcsin(ax[2])
    lon0 = np.arctan2(ax[1], ax[0])
    ref = np.degrees(
        np.arcsin(np.sin(phi) * np.sin(lat0) + np.cos(phi) * np.cos(lat0) * np.cos(lam - lon0))
    )
    mlat, mlon, r_re = coords.magnetic_coordinates(xyz, 2015.0)
    np.testing.assert_allclose(mlat, ref, atol=1e-9)
    np.testing.assert_allclose(r_re, r / 6371.2, rtol=1e-12)
    assert np.all((mlon >= 0) & (mlon < 360))


def test_magnetic_local_time():
    s = coords.sun_direction_geo(DATES)
    # sub-solar magnetic meridian: 12 h; anti-solar: 0 h (common practice)
    mlt = coords.magnetic_local_time(8000.0 * s, DATES)
    np.testing.assert_allclose(mlt, 12.0, atol=1e-9)
    mlt_night = coords.magnetic_local_time(-8000.0 * s, DATES)
    assert np.all(np.minimum(mlt_night, 24.0 - mlt_night) < 1e-9)
    # dusk (+Y of SM) is 18 h, dawn 6 h
    dusk = coords.convert(np.array([0.0, 9000.0, 1000.0]), DATES, "SM", "GEO")
    np.testing.assert_allclose(coords.magnetic_local_time(dusk, DATES), 18.0, atol=1e-9)
    dawn = coords.convert(np.array([0.0, -9000.0, -3000.0]), DATES, "SM", "GEO")
    np.testing.assert_allclose(coords.magnetic_local_time(dawn, DATES), 6.0, atol=1e-9)
    # a point on the subsolar magnetic meridian but off the equator is still noon
    noon = coords.convert(np.array([5000.0, 0.0, 4000.0]), DATES, "SM", "GEO")
    np.testing.assert_allclose(coords.magnetic_local_time(noon, DATES), 12.0, atol=1e-9)
    # the Earth turns: at fixed GEO position, MLT advances about 1 h per hour
    p = np.array([7000.0, 0.0, 0.0])
    t0 = np.datetime64("2021-04-01T00:00")
    t1 = t0 + np.timedelta64(1, "h")
    d = coords.magnetic_local_time(p, t1) - coords.magnetic_local_time(p, t0)
    assert 0.6 < (d % 24.0) < 1.4  # the tilted dipole's meridians are not uniform in GEO


def test_geodetic_known_cases():
    # WGS-84: a = 6378.137 km on the equator, b = a (1 - f) = 6356.752314 km at the poles
    a = 6378.137
    b = a * (1.0 - 1.0 / 298.257223563)
    assert b == pytest.approx(6356.752314245, abs=1e-9)  # published derived constant
    np.testing.assert_allclose(coords.geodetic_to_geo(0.0, 0.0, 0.0), [a, 0, 0], atol=1e-12)
    np.testing.assert_allclose(coords.geodetic_to_geo(0.0, 90.0, 10.0), [0, a + 10, 0], atol=1e-9)
    np.testing.assert_allclose(coords.geodetic_to_geo(90.0, 0.0, 0.0), [0, 0, b], atol=1e-9)
    np.testing.assert_allclose(coords.geodetic_to_geo(-90.0, 0.0, 5.0), [0, 0, -b - 5], atol=1e-9)
    lat, lon, h = coords.geo_to_geodetic(np.array([[0.0, 0.0, b + 100.0], [-a, 0.0, 0.0]]))
    np.testing.assert_allclose(lat, [90.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(h, [100.0, 0.0], atol=1e-9)
    assert lon[1] == pytest.approx(180.0)
    with pytest.raises(FieldModelError, match="lat_deg"):
        coords.geodetic_to_geo(91.0, 0.0, 0.0)


def test_geodetic_against_astropy_and_round_trip():
    rng = np.random.default_rng(12)
    n = 500
    lat = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    lon = rng.uniform(-180, 180, n)
    alt = np.concatenate([rng.uniform(-1.0, 10.0, n // 2), rng.uniform(10.0, 40000.0, n - n // 2)])
    lat[:3] = [90.0, -90.0, 0.0]
    xyz = coords.geodetic_to_geo(lat, lon, alt)
    # astropy EarthLocation (WGS84 ellipsoid, reference library)
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, alt * u.km, ellipsoid="WGS84")
    ref = np.stack([loc.x.to_value(u.km), loc.y.to_value(u.km), loc.z.to_value(u.km)], -1)
    np.testing.assert_allclose(xyz, ref, atol=1e-6)  # 1 mm
    la2, lo2, h2 = coords.geo_to_geodetic(xyz)
    np.testing.assert_allclose(h2, alt, atol=1e-6)  # mm
    # 1e-8 deg of latitude is ~1 mm on the surface
    np.testing.assert_allclose(la2, lat, atol=1e-8)
    ok = np.abs(lat) < 90
    dlon = (lo2 - lon + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(dlon[ok], 0.0, atol=1e-9)
    # inverse against astropy's too
    geo = EarthLocation.from_geocentric(ref[:, 0] * u.km, ref[:, 1] * u.km, ref[:, 2] * u.km)
    gd = geo.to_geodetic("WGS84")
    np.testing.assert_allclose(h2, gd.height.to_value(u.km), atol=1e-6)


def test_vectorised_time_and_point_broadcast():
    xyz = np.array([7000.0, 1000.0, -500.0])
    out = coords.convert(xyz, DATES, "GEO", "GSM")
    assert out.shape == (8, 3)
    for i in range(8):
        np.testing.assert_allclose(out[i], coords.convert(xyz, DATES[i], "GEO", "GSM"), atol=1e-9)
    grid = np.broadcast_to(xyz, (8, 5, 3))
    out2 = coords.convert(grid, DATES[:, None], "GEO", "SM")
    assert out2.shape == (8, 5, 3)


def test_dataarray_in_dataarray_out():
    xyz = xr.DataArray(
        np.array([[7000.0, 0.0, 100.0], [0.0, 8000.0, -2000.0]]),
        dims=("sample", "xyz"),
        coords={"sample": [10, 20]},
        attrs={"units": "km"},
    )
    out = coords.convert(xyz, "2022-02-02", "GEO", "GSE")
    assert isinstance(out, xr.DataArray)
    assert out.dims == ("sample", "xyz") and out.attrs["units"] == "km"
    assert list(out["sample"].values) == [10, 20]
    mlat, mlon, r = coords.magnetic_coordinates(xyz, "2022-02-02")
    assert mlat.dims == ("sample",) and mlat.attrs["units"] == "degrees_north"
    assert r.attrs["units"] == "R_E"
    mlt = coords.magnetic_local_time(xyz, "2022-02-02")
    assert mlt.attrs["units"] == "hour"
    lat, lon, h = coords.geo_to_geodetic(xyz)
    assert lat.dims == ("sample",) and h.attrs["units"] == "km"
    back = coords.geodetic_to_geo(lat, lon, h)
    assert back.dims == ("sample", "xyz") and back.attrs["units"] == "km"
    np.testing.assert_allclose(back.values, xyz.values, atol=1e-6)


def test_bad_frames_and_nan():
    with pytest.raises(FieldModelError, match="'to'"):
        coords.convert(np.zeros(3), 2020.0, "GEO", "HEEQ")
    with pytest.raises(FieldModelError, match="'frm'"):
        coords.convert(np.zeros(3), 2020.0, "gsx", "GEO")
    with pytest.raises(FieldModelError, match="trailing axis"):
        coords.convert(np.zeros(2), 2020.0, "GEO", "SM")
    out = coords.convert(np.array([[np.nan, 0, 0], [7000.0, 0, 0]]), 2020.0, "GEO", "SM")
    assert np.all(np.isnan(out[0])) and np.all(np.isfinite(out[1]))
    mlat, mlon, r = coords.magnetic_coordinates(np.array([np.nan, 0.0, 0.0]), 2020.0)
    assert np.isnan(mlat) and np.isnan(r)
    # frames use the IGRF dipole, so they share its validity
    with pytest.raises(FieldModelError, match="1900.0-2030.0"):
        coords.convert(np.ones(3), "2035-01-01", "GEO", "MAG")


def test_time_scales():
    # J2000.0 = JD 2451545.0 (2000-01-01 12:00), POSIX epoch = JD 2440587.5
    assert julian_date(np.datetime64("2000-01-01T12:00")) == 2451545.0
    assert julian_date("1970-01-01") == 2440587.5
    # decimal year round trip (IGRF convention)
    years = np.array([1900.0, 1965.123, 2000.5, 2024.99999, 2030.0])
    np.testing.assert_allclose(decimal_year(as_datetime64(years)), years, atol=1e-12)
    assert np.isnan(decimal_year(np.datetime64("NaT")))
    # ISO strings with an explicit UTC designator
    assert decimal_year("2021-01-01T00:00:00Z") == 2021.0
