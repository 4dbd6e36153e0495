"""Time scales of beltkit.field.timeconv against astropy's Time.

References used here:
* astropy (package index): ``Time(..., scale="utc")`` and its ``decimalyear``
  format (the fraction of the calendar year, 365 or 366 days, integer values at
  00:00 on 1 January: the convention the IAGA IGRF-14 release uses), and its
  Julian date ``jd``.
* The Julian date of J2000.0, 2451545.0 at 2000-01-01 12:00 (Meeus 1998,
  Astronomical Algorithms, ch. 7; from memory, and checked here with astropy).
* Calendar arithmetic: 2024 and 2000 are leap years, 1900 and 2100 are not
  (Gregorian rule, common practice).
"""

import datetime as dt

import numpy as np
import pytest
import xarray as xr
from astropy.time import Time

from beltkit.errors import FieldModelError
from beltkit.field.timeconv import (
    J2000_JD,
    as_datetime64,
    decimal_year,
    julian_centuries,
    julian_date,
)

# erfa warns of a "dubious year" for UTC-TAI outside its leap-second table (before 1960,
# beyond its horizon); the decimal-year and Julian-date values compared here do not use
# that offset
pytestmark = pytest.mark.filterwarnings("ignore:ERFA function:erfa.ErfaWarning")

LEAP_SECOND_DAYS = ((6, 30), (12, 31))  # the UTC days that can hold a leap second


def _off_leap_second_days(t):
    """Mask of instants not on 30 June / 31 December.

    astropy's UTC day holds a leap second on those dates; numpy ignores leap
    seconds, so the day fraction may differ by up to 1/86400 there.
    """
    day = t.astype("datetime64[D]")
    month_start = t.astype("datetime64[M]")
    month = month_start.astype("int64") % 12 + 1
    dom = (day - month_start.astype("datetime64[D]")).astype("int64") + 1
    keep = np.ones(t.shape, bool)
    for m, d in LEAP_SECOND_DAYS:
        keep &= ~((month == m) & (dom == d))
    return keep


def _random_times(seed, n, lo="1950-01-01", hi="2049-12-31"):
    """Random UTC instants (ms resolution), off the leap-second days."""
    rng = np.random.default_rng(seed)
    t0, t1 = np.datetime64(lo, "ms"), np.datetime64(hi, "ms")
    span = (t1 - t0).astype("int64")
    t = (t0 + rng.integers(0, span, n).astype("timedelta64[ms]")).astype("datetime64[ns]")
    return t[_off_leap_second_days(t)]


def _astropy(times):
    return Time(np.datetime_as_string(times, unit="ms"), scale="utc")


def test_decimal_year_matches_astropy_decimalyear():
    t = _random_times(1, 400)
    ours = decimal_year(t)
    ref = _astropy(t).decimalyear  # astropy (package index)
    # float64 decimal years resolve ~1e-12 yr (30 us); 1e-10 yr is 3 ms
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-10)
    assert ours.dtype == np.float64 and ours.shape == t.shape
    # nudge: one second of time error (3.2e-8 yr) is far outside the tolerance
    assert np.max(np.abs(decimal_year(t + np.timedelta64(1, "s")) - ref)) > 3e-8


@pytest.mark.parametrize(
    "iso, year_days",
    [
        ("2024-07-02T00:00", 366),  # leap year (common practice: divisible by 4)
        ("2023-07-02T12:00", 365),
        ("2000-12-31T23:00", 366),  # divisible by 400: leap
        ("1900-03-01T00:00", 365),  # divisible by 100, not 400: not leap
        ("2100-02-28T06:00", 365),
    ],
)
def test_leap_year_denominators(iso, year_days):
    t = np.datetime64(iso, "ns")
    year = int(iso[:4])
    elapsed_days = (t - np.datetime64(f"{year}-01-01", "ns")) / np.timedelta64(1, "D")
    want = year + elapsed_days / year_days  # the IGRF convention written out
    assert float(decimal_year(t)) == pytest.approx(want, abs=1e-12)
    assert float(decimal_year(t)) == pytest.approx(float(_astropy(np.array([t])).decimalyear[0]),
                                                   abs=1e-10)
    # nudge: the other year length would be off by far more than the tolerance
    wrong = year + elapsed_days / (731 - year_days)
    assert abs(float(decimal_year(t)) - wrong) > 1e-4


def test_new_year_instants_are_integers():
    # astropy decimalyear: integer values at 00:00 UTC on 1 January
    years = np.array([1900, 1999, 2000, 2020, 2024, 2030])
    t = np.array([f"{y}-01-01" for y in years], dtype="datetime64[ns]")
    np.testing.assert_array_equal(decimal_year(t), years.astype(float))
    np.testing.assert_array_equal(decimal_year(t), _astropy(t).decimalyear)


def test_as_datetime64_inverts_the_decimal_year():
    rng = np.random.default_rng(7)
    years = rng.uniform(1960.0, 2040.0, 300)
    ours = as_datetime64(years)
    assert ours.dtype == np.dtype("datetime64[ns]") and ours.shape == years.shape
    keep = _off_leap_second_days(ours)
    # astropy's forward decimalyear of the returned instants gives the years back
    # (astropy's own inverse is not used: in years with a leap second it is off by
    # up to 1 s from its forward conversion). A decimal year near 2000 resolves
    # ~1e-12 yr (14 us) in float64.
    ref = _astropy(ours[keep]).decimalyear
    np.testing.assert_allclose(ref, years[keep], rtol=0, atol=1e-10)
    # nudge: a 365-day year in a leap year misplaces mid-year by 12 hours
    mid = as_datetime64(2024.5)
    assert mid == np.datetime64("2024-07-02T00:00", "ns")
    assert (np.datetime64("2024-07-02T12:00", "ns") - mid) == np.timedelta64(12, "h")


def test_julian_date_matches_astropy():
    t = _random_times(3, 300)
    ref = _astropy(t)
    ref_jd = (ref.jd1 - 2451545.0) + ref.jd2  # split to keep the precision of astropy's jd
    ours = julian_date(t) - 2451545.0
    # float64 JD near 2.45e6 resolves 5e-10 day (40 us)
    np.testing.assert_allclose(ours, ref_jd, rtol=0, atol=2e-9)
    # J2000.0 (Meeus 1998, from memory; astropy agrees)
    assert float(julian_date(np.datetime64("2000-01-01T12:00"))) == J2000_JD
    assert Time("2000-01-01T12:00:00", scale="utc").jd == J2000_JD
    # centuries of 36525 days
    np.testing.assert_allclose(julian_centuries(t), ref_jd / 36525.0, rtol=0, atol=1e-13)
    # nudge: one second is 1.16e-5 day, far outside the tolerance
    assert np.max(np.abs(julian_date(t + np.timedelta64(1, "s")) - 2451545.0 - ref_jd)) > 1e-5


def test_accepted_spellings_agree():
    # every accepted form of the same instant gives the same decimal year (astropy as the value)
    want = float(Time("2024-03-20T03:06:00", scale="utc").decimalyear)
    forms = [
        np.datetime64("2024-03-20T03:06"),
        "2024-03-20T03:06",
        "2024-03-20T03:06Z",
        "2024-03-20T03:06:00+00:00",
        dt.datetime(2024, 3, 20, 3, 6),
        dt.datetime(2024, 3, 20, 5, 6, tzinfo=dt.timezone(dt.timedelta(hours=2))),
        xr.DataArray(np.array(["2024-03-20T03:06"], dtype="datetime64[ns]"), dims="time"),
    ]
    for f in forms:
        assert np.ravel(decimal_year(f))[0] == pytest.approx(want, abs=1e-10), f
    # decimal years pass through unchanged (as float)
    assert decimal_year(2024.25) == 2024.25 and decimal_year(2024).dtype == np.float64
    np.testing.assert_array_equal(decimal_year([2020.0, 2021.5]), [2020.0, 2021.5])
    # a list of strings keeps its shape
    assert decimal_year([["2020-01-01", "2021-01-01"]]).tolist() == [[2020.0, 2021.0]]


def test_missing_times_are_nan_and_nat():
    t = np.array(["2024-01-01", "NaT"], dtype="datetime64[ns]")
    out = decimal_year(t)
    assert out[0] == 2024.0 and np.isnan(out[1])
    assert np.isnan(decimal_year([None, "2020-01-01"])[0])
    back = as_datetime64(np.array([2020.0, np.nan]))
    assert back[0] == np.datetime64("2020-01-01", "ns") and np.isnat(back[1])
    assert np.isnan(julian_date(t)[1])


@pytest.mark.parametrize(
    "bad, match",
    [
        ("yesterday", r"argument 'when'.*ISO 8601.*could not read"),
        (np.array([True, False]), r"argument 'when'.*got dtype bool"),
        (np.array([1 + 2j]), r"argument 'when'.*got dtype complex"),
        (np.array([np.timedelta64(5, "D")]), r"argument 'when'.*got dtype timedelta64"),
        (["2020-01-01", 3.5], r"argument 'when'"),
    ],
)
def test_refusals_name_the_argument(bad, match):
    for fn in (decimal_year, as_datetime64, julian_date):
        with pytest.raises(FieldModelError, match=match):
            fn(bad, "when")
