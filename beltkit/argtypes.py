"""Command-line value types: each checks one option's value before anything runs.

Every type is an :mod:`argparse` ``type=`` callable: it returns the parsed
value or raises :class:`argparse.ArgumentTypeError` with a message that
says what a valid value is (argparse then names the option and exits with 2).
"""

from __future__ import annotations

import argparse
import math
import re

from .constants import R_E_KM

__all__ = [
    "DEFAULT_HEIGHT_KM",
    "FOOTPOINT_REFERENCE",
    "HEIGHT_REFERENCE",
    "TIME_EXAMPLE",
    "duration",
    "energy_kev",
    "epoch_year",
    "footpoint_km",
    "height_km",
    "l_shell",
    "latitude_deg",
    "longitude_deg",
    "mlat_deg",
    "nonnegative_number",
    "number_arg",
    "pitch_deg",
    "positive_int",
    "positive_number",
    "utc_time",
    "zlib_level",
]

#: An example of the UTC time format the options take.
TIME_EXAMPLE = "2024-06-01T12:00"
#: Height of a geographic point when ``--height-km`` is not given (km above the WGS-84 ellipsoid).
DEFAULT_HEIGHT_KM = 650.0
#: What a footpoint (loss) altitude is measured from, as the help texts say it.
FOOTPOINT_REFERENCE = f"km above the sphere of radius R_E = {R_E_KM:g} km, not the ellipsoid"
#: What a geodetic height is measured from, as the help texts say it.
HEIGHT_REFERENCE = "km above the WGS-84 ellipsoid"


def number_arg(text) -> float:
    """Return `text` as a float, or refuse it as not a number."""
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None


def _checked_type(name, ok, requirement, doc, convert=number_arg):
    """Make a type: ``convert(text)`` where ``ok(value)`` holds, else "must be <requirement>"."""

    def parse(text):
        value = convert(text)
        if not ok(value):
            raise argparse.ArgumentTypeError(f"must be {requirement}, got {text}")
        return value

    parse.__name__ = parse.__qualname__ = name
    parse.__doc__ = doc
    return parse


positive_int = _checked_type("positive_int", lambda v: v >= 1, "a positive integer",
                             "A whole number >= 1 (worker counts).", convert=int)
zlib_level = _checked_type("zlib_level", lambda v: 0 <= v <= 9, "a zlib level 0-9",
                           "A zlib compression level 0-9.", convert=int)
positive_number = _checked_type("positive_number", lambda v: math.isfinite(v) and v > 0,
                               "a finite number > 0", "A finite number > 0.")
nonnegative_number = _checked_type("nonnegative_number", lambda v: v >= 0, ">= 0",
                                  "A number >= 0.")
energy_kev = _checked_type("energy_kev", lambda v: math.isfinite(v) and v > 0,
                          "a finite kinetic energy > 0 keV", "A kinetic energy in keV (> 0).")
l_shell = _checked_type("l_shell", lambda v: math.isfinite(v) and v >= 1,
                       "a finite L-shell >= 1 (the equatorial distance of the field line in "
                       "Earth radii)", "An L-shell (>= 1).")
pitch_deg = _checked_type("pitch_deg", lambda v: 0 <= v <= 180,
                         "a pitch angle of 0-180 degrees", "A pitch angle in degrees (0-180).")
mlat_deg = _checked_type("mlat_deg", lambda v: -90 < v < 90,
                        "a magnetic latitude between -90 and 90 degrees (poles excluded)",
                        "A magnetic latitude in degrees, poles excluded.")
latitude_deg = _checked_type("latitude_deg", lambda v: -90 <= v <= 90,
                            "a geodetic latitude of -90 to 90 degrees",
                            "A geodetic latitude in degrees (-90 to 90).")
longitude_deg = _checked_type("longitude_deg", math.isfinite,
                             "a finite longitude in degrees, east positive",
                             "A longitude in degrees, east positive.")
footpoint_km = _checked_type("footpoint_km", lambda v: math.isfinite(v) and v >= 0,
                            f"a finite altitude >= 0 km (above the R_E = {R_E_KM:g} km sphere)",
                            f"A footpoint (loss) altitude in {FOOTPOINT_REFERENCE} "
                            "(beltkit.constants.R_E_KM).")


def height_km(text):
    """Return a point's height in km above the WGS-84 ellipsoid (not far below the surface)."""
    from .field.earth import INSIDE_EARTH_TOLERANCE_KM

    value = number_arg(text)
    if not (math.isfinite(value) and value > -INSIDE_EARTH_TOLERANCE_KM):
        raise argparse.ArgumentTypeError(
            f"must be above -{INSIDE_EARTH_TOLERANCE_KM:g} km (height above the WGS-84 "
            f"ellipsoid in km), got {text}")
    return value


def utc_time(text):
    """Parse an ISO 8601 UTC time within the IGRF-14 validity into datetime64[ns]."""
    import warnings

    import numpy as np

    from .field.igrf import igrf_table
    from .field.timeconv import decimal_year

    plain = text.strip()
    for suffix in ("Z", "z", "+00:00", "+0000"):
        if plain.endswith(suffix) and "T" in plain.upper():
            plain = plain[: -len(suffix)]
            break
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            value = np.datetime64(plain, "ns")
    except (ValueError, TypeError, UserWarning, OverflowError):
        value = np.datetime64("NaT")
    if "T" in plain.upper() and re.search(r"[+-]\d\d:?\d\d$", plain):
        raise argparse.ArgumentTypeError(
            f"give the time in UTC, without an offset (or with a trailing Z), such as "
            f"{TIME_EXAMPLE}; got {text!r}")
    if np.isnat(value) or not plain[:1].isdigit():
        raise argparse.ArgumentTypeError(
            f"expected an ISO 8601 UTC time such as {TIME_EXAMPLE}, got {text!r}")
    lo, hi = igrf_table().valid_range
    year = float(decimal_year(value))
    if not lo <= year <= hi:
        raise argparse.ArgumentTypeError(
            f"{text} is outside {lo:.0f}-{hi:.0f}, the validity of the IGRF-14 coefficients "
            f"(which also give the dipole axis); this command does not extrapolate the field "
            f"model beyond it")
    return value


def epoch_year(text):
    """Return a dipole epoch as a decimal year within the IGRF-14 validity."""
    from .field.igrf import igrf_table

    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"must be a decimal year such as 2024.5, got {text!r}") from None
    lo, hi = igrf_table().valid_range
    if not lo <= value <= hi:  # also refuses nan
        raise argparse.ArgumentTypeError(
            f"must be a decimal year within {lo:.0f}-{hi:.0f} (the validity of the IGRF-14 "
            f"coefficients that give the dipole), got {text}")
    return value


def duration(text):
    """Check a survey time window such as 1D or 6h (parsed later the same way by pandas)."""
    import pandas as pd

    try:
        ok = pd.to_timedelta(text) > pd.Timedelta(0)
    except (ValueError, TypeError):
        ok = None
    if ok is None:
        raise argparse.ArgumentTypeError(
            f"expected a duration such as 1D, 6h or 90min, got {text!r}")
    if not ok:
        raise argparse.ArgumentTypeError(f"must be a positive duration, got {text!r}")
    return text
