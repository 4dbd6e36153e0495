"""The low-precision Sun and Earth rotation of beltkit.field.sun against astropy.

References used here:
* astropy (package index): ``get_sun`` (geocentric apparent Sun, GCRS) transformed
  to the Earth-fixed ITRS frame, to the mean equator and equinox of date
  (``PrecessedGeocentric``) and to the mean ecliptic of date
  (``GeocentricMeanEcliptic``); ``Time.sidereal_time("mean", "greenwich")``.
  Run offline with astropy's bundled IERS tables.
* The module's stated accuracy: 0.01 deg in solar right ascension and declination
  (Astronomical Almanac, low-precision formulas) and UT1 taken equal to UTC
  (below 0.9 s, 0.004 deg of Earth rotation).
* The rotation GEI of date -> GEO by the Greenwich sidereal angle about +Z
  (Hapgood 1992, Planet. Space Sci. 40, 711, transformation T1), written out here.
* The mean obliquity of the IAU 1980 expression, erfa's ``obl80`` (package index,
  astropy's dependency).
"""

import erfa
import numpy as np
import pytest
from astropy.coordinates import (
    ITRS,
    GeocentricMeanEcliptic,
    GeocentricTrueEcliptic,
    PrecessedGeocentric,
    get_sun,
)
from astropy.time import Time
from astropy.utils import iers

from beltkit.field import sun

iers.conf.auto_download = False  # offline: astropy's bundled IERS data

# one year of dates, every 15 days at scattered hours (2025: inside the bundled IERS data)
_HOURS = np.random.default_rng(2025).integers(0, 24 * 60, 25).astype("timedelta64[m]")
DATES = (np.datetime64("2025-01-03", "m") + np.arange(25) * np.timedelta64(15, "D")
         + _HOURS).astype("datetime64[ns]")

STATED_DEG = 0.01  # the module's stated precision (Astronomical Almanac, low precision)


def _times(dates):
    return Time(np.datetime_as_string(dates, unit="s"), scale="utc")


def _unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _angle_deg(a, b):
    return np.degrees(np.arccos(np.clip(np.sum(_unit(a) * _unit(b), axis=-1), -1.0, 1.0)))


def _gei_to_geo(v, theta_deg):
    """Hapgood (1992) T1: rotation by the sidereal angle about +Z."""
    c, s = np.cos(np.radians(theta_deg)), np.sin(np.radians(theta_deg))
    return np.stack([c * v[..., 0] + s * v[..., 1], -s * v[..., 0] + c * v[..., 1], v[..., 2]],
                    axis=-1)


@pytest.fixture(scope="module")
def astropy_sun():
    t = _times(DATES)
    s = get_sun(t)  # astropy: geocentric apparent Sun (GCRS)
    itrs = s.transform_to(ITRS(obstime=t)).cartesian.xyz.value.T
    mean_of_date = s.transform_to(PrecessedGeocentric(equinox=t, obstime=t)).cartesian.xyz.value.T
    ecl = s.transform_to(GeocentricMeanEcliptic(equinox=t, obstime=t))
    return {"itrs": itrs, "mean_of_date": mean_of_date, "lon": ecl.lon.deg, "lat": ecl.lat.deg}


def test_sun_in_earth_fixed_frame_matches_astropy_itrs(astropy_sun):
    # sun_direction_gei rotated by gmst_deg vs astropy's GCRS -> ITRS. Budget: the stated
    # 0.01 deg, plus UT1 = UTC (< 0.004 deg), plus nutation/equation of the equinoxes
    # (< 0.005 deg) and polar motion (< 1e-4 deg), which the module leaves out
    ours = _gei_to_geo(sun.sun_direction_gei(DATES), sun.gmst_deg(DATES))
    err = _angle_deg(ours, astropy_sun["itrs"])
    assert err.max() < STATED_DEG + 0.004 + 0.005
    # nudge: one minute late turns the Earth by 0.25 deg under the Sun
    late = _gei_to_geo(sun.sun_direction_gei(DATES + np.timedelta64(1, "m")),
                       sun.gmst_deg(DATES + np.timedelta64(1, "m")))
    assert _angle_deg(late, astropy_sun["itrs"]).min() > 0.2


def test_sun_in_mean_equator_of_date_within_stated_precision(astropy_sun):
    # the module's GEI frame is the (mean) equator and equinox of date
    ours = sun.sun_direction_gei(DATES)
    assert ours.shape == (DATES.size, 3)
    np.testing.assert_allclose(np.linalg.norm(ours, axis=-1), 1.0, rtol=1e-14)
    err = _angle_deg(ours, astropy_sun["mean_of_date"])
    assert err.max() < STATED_DEG
    # right ascension and declination separately (the stated precision is per coordinate)
    ra = np.degrees(np.arctan2(ours[:, 1], ours[:, 0]))
    dec = np.degrees(np.arcsin(ours[:, 2]))
    ref = _unit(astropy_sun["mean_of_date"])
    ra_ref = np.degrees(np.arctan2(ref[:, 1], ref[:, 0]))
    dec_ref = np.degrees(np.arcsin(ref[:, 2]))
    assert np.max(np.abs((ra - ra_ref + 180.0) % 360.0 - 180.0)) < STATED_DEG * 1.1
    assert np.max(np.abs(dec - dec_ref)) < STATED_DEG
    # nudge: one hour late moves the Sun 0.04 deg along the ecliptic
    late = sun.sun_direction_gei(DATES + np.timedelta64(1, "h"))
    assert _angle_deg(late, astropy_sun["mean_of_date"]).min() > 0.03


def test_ecliptic_longitude_and_pole(astropy_sun):
    lam = sun.sun_ecliptic_longitude_deg(DATES)
    assert np.all((lam >= 0.0) & (lam < 360.0))
    # mean ecliptic and equinox of date; the true equinox differs by nutation (< 0.005 deg)
    d = (lam - astropy_sun["lon"] + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(d)) < STATED_DEG
    assert np.max(np.abs(astropy_sun["lat"])) < 3e-4  # the Sun's latitude is tiny (beta = 0)
    # the ecliptic pole is perpendicular to the Sun (beta = 0 in these formulas) ...
    pole = sun.ecliptic_pole_gei(DATES)
    np.testing.assert_allclose(np.sum(pole * sun.sun_direction_gei(DATES), -1), 0.0, atol=1e-15)
    # ... and at the obliquity from the equator's pole
    eps = np.degrees(np.arccos(pole[:, 2]))
    np.testing.assert_allclose(eps, sun.obliquity_deg(DATES), rtol=0, atol=1e-10)


def test_obliquity_against_iau_1980():
    t = _times(DATES)
    ref = np.degrees(erfa.obl80(t.tt.jd1, t.tt.jd2))  # erfa: IAU 1980 mean obliquity
    ours = sun.obliquity_deg(DATES)
    # 23.439 - 4e-7 n is the almanac's linear form: within 0.001 deg this century
    assert np.max(np.abs(ours - ref)) < 1e-3
    # nudge: the J2000 value alone (no secular term) is off by ~0.0035 deg in 2025
    assert np.max(np.abs(23.439 - ref)) > 2e-3


def test_gmst_matches_astropy_iau1982():
    t = _times(DATES)
    # astropy's IAU 1982 GMST uses UT1 from the IERS tables; the module uses UTC for
    # UT1 (|UT1 - UTC| < 0.9 s, i.e. < 0.0038 deg)
    ref = t.sidereal_time("mean", "greenwich", model="IAU1982").deg
    ours = sun.gmst_deg(DATES)
    d = (ours - ref + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(d)) < 0.0038
    assert np.all((ours >= 0.0) & (ours < 360.0))
    # the same with astropy's UT1 replaced by UTC is exact to the expression's rounding
    t_ut1_utc = Time(t.utc.jd1, t.utc.jd2, format="jd", scale="ut1")
    ref_utc = t_ut1_utc.sidereal_time("mean", "greenwich", model="IAU1982").deg
    assert np.max(np.abs((ours - ref_utc + 180.0) % 360.0 - 180.0)) < 1e-6
    # nudge: ten seconds of Earth rotation is 0.042 deg
    late = sun.gmst_deg(DATES + np.timedelta64(10, "s"))
    assert np.min(np.abs((late - ref_utc + 180.0) % 360.0 - 180.0)) > 0.04


def test_equinox_example_and_missing_times():
    # the March 2024 equinox: astropy's apparent ecliptic longitude of the Sun is ~0 at
    # 03:06 UTC (the Sun moves 0.04 deg per hour)
    t = Time("2024-03-20T03:06:00", scale="utc")
    lon = get_sun(t).transform_to(GeocentricTrueEcliptic(equinox=t, obstime=t)).lon.wrap_at("180d")
    assert abs(lon.deg) < 0.01
    s = sun.sun_direction_gei("2024-03-20T03:06")
    assert abs(s[2]) < 1e-3 and s[0] > 0.9999
    out = sun.sun_direction_gei(np.array(["2025-01-01", "NaT"], dtype="datetime64[ns]"))
    assert np.all(np.isfinite(out[0])) and np.all(np.isnan(out[1]))
    assert np.isnan(sun.gmst_deg(np.datetime64("NaT")))
