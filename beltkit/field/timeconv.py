r"""Time scales for the field models and the solar ephemeris.

Every field-model function accepts time as any of

* :class:`numpy.datetime64` (taken as UTC) or an array of them,
* :class:`datetime.datetime` (naive = UTC; aware ones are converted to UTC),
* an ISO 8601 string such as ``"2024-03-20T12:00"`` (UTC),
* a float decimal year such as ``2024.5`` (the IGRF convention, below),

or arrays / :class:`xarray.DataArray` / sequences of these. This module turns
them into the two scales that are needed:

Decimal year (IGRF convention)
    :math:`t = Y + (\tau - \tau_Y) / (\tau_{Y+1} - \tau_Y)`, where
    :math:`\tau_Y` is 00:00 UTC on 1 January of year *Y*: the fraction of the
    calendar year elapsed, with a 366-day denominator in leap years. This is
    how the IAGA IGRF-14 release and its reference programs convert a date
    to the decimal year at which the Gauss coefficients are interpolated.

Julian date (UTC) and Julian centuries from J2000.0
    :math:`JD = 2440587.5 + s / 86400`, *s* the POSIX seconds of the UTC
    instant; :math:`T = (JD - 2451545.0) / 36525`. UTC is used for both UT1
    (error below 0.9 s, 0.004 deg of Earth rotation) and TT (about 69 s in
    the 2020s, 0.0008 deg of solar longitude): far below the 0.01 deg
    precision of the low-precision solar ephemeris in :mod:`beltkit.field.sun`.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np

from ..errors import FieldModelError

__all__ = [
    "J2000_JD",
    "as_datetime64",
    "decimal_year",
    "julian_centuries",
    "julian_date",
]

#: Julian date of the J2000.0 epoch (2000-01-01 12:00 TT, used here on UTC).
J2000_JD = 2451545.0
_UNIX_EPOCH_JD = 2440587.5
_NS_PER_DAY = 86400e9


def _parse(time, name: str) -> tuple[np.ndarray, bool]:
    """Return (array, is_decimal_year) for any accepted time input.

    The array is float64 decimal years or datetime64[ns].
    """
    if hasattr(time, "dims") and hasattr(time, "values"):  # xarray.DataArray
        time = time.values
    if isinstance(time, _dt.datetime):
        time = _naive_utc(time)
    if isinstance(time, (float, int, np.floating, np.integer)) and not isinstance(time, bool):
        return np.asarray(time, dtype=float), True
    arr = np.asarray(time)
    if arr.dtype.kind in "fiu":
        return arr.astype(float), True
    if arr.dtype.kind == "M":
        return arr.astype("datetime64[ns]"), False
    if arr.dtype.kind in "OUS":
        flat = arr.ravel()
        try:
            conv = np.array(
                [
                    np.datetime64("NaT")
                    if v is None
                    else np.datetime64(_plain(v), "ns")
                    for v in flat
                ],
                dtype="datetime64[ns]",
            )
        except (TypeError, ValueError) as exc:
            raise FieldModelError(
                f"argument {name!r} must be numpy datetime64 (UTC), datetime, an ISO 8601 "
                f"string or a decimal year; could not read {time!r} ({exc})"
            ) from exc
        return conv.reshape(arr.shape), False
    raise FieldModelError(
        f"argument {name!r} must be numpy datetime64 (UTC), datetime, an ISO 8601 string "
        f"or a decimal year; got dtype {arr.dtype}"
    )


def _plain(value):
    """Return a value np.datetime64 can read: naive-UTC datetime, or ISO text without 'Z'."""
    if isinstance(value, _dt.datetime):
        return _naive_utc(value)
    if isinstance(value, str):
        text = value.strip()
        if text[-1:] in ("Z", "z"):
            text = text[:-1]
        elif text.endswith("+00:00"):
            text = text[:-6]
        return text
    return value


def _naive_utc(value: _dt.datetime) -> _dt.datetime:
    if value.tzinfo is not None:
        value = value.astimezone(_dt.timezone.utc).replace(tzinfo=None)
    return value


def decimal_year(time, name: str = "time") -> np.ndarray:
    r"""Convert times to decimal years by the IGRF convention.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like of these
        UTC instants, or decimal years (returned unchanged, as float).
    name : str
        Argument name used in error messages.

    Returns
    -------
    numpy.ndarray
        Decimal years, float64, shape of ``time``; NaT gives NaN.

    Notes
    -----
    .. math:: t = Y + \frac{\tau - \tau_Y}{\tau_{Y+1} - \tau_Y}

    with :math:`\tau_Y` the instant 00:00 UTC, 1 January of year *Y*
    (IAGA IGRF-14 convention: fraction of the calendar year, leap years
    366 days).

    Examples
    --------
    >>> float(decimal_year(np.datetime64("2024-07-02T00:00")))  # day 183 of 366
    2024.5
    """
    arr, is_year = _parse(time, name)
    if is_year:
        return arr
    nat = np.isnat(arr)
    start = arr.astype("datetime64[Y]")
    stop = start + np.timedelta64(1, "Y")
    start_ns = start.astype("datetime64[ns]")
    span = (stop.astype("datetime64[ns]") - start_ns).astype(float)
    frac = (arr - start_ns).astype(float) / np.where(nat, 1.0, span)
    year = start.astype(float) + 1970.0  # datetime64[Y] counts years since 1970
    out = np.where(nat, np.nan, year + frac)
    return np.asarray(out, dtype=float)


def as_datetime64(time, name: str = "time") -> np.ndarray:
    """Convert times to ``datetime64[ns]`` (UTC).

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like of these
        UTC instants or decimal years (inverted with the IGRF convention of
        :func:`decimal_year`).
    name : str
        Argument name used in error messages.

    Returns
    -------
    numpy.ndarray
        ``datetime64[ns]`` array of the shape of ``time``; NaN gives NaT.
    """
    arr, is_year = _parse(time, name)
    if not is_year:
        return arr
    nan = ~np.isfinite(arr)
    safe = np.where(nan, 2000.0, arr)
    year = np.floor(safe)
    start = (year - 1970.0).astype("int64").astype("datetime64[Y]")
    start_ns = start.astype("datetime64[ns]")
    span = (start + np.timedelta64(1, "Y")).astype("datetime64[ns]") - start_ns
    offset = np.round((safe - year) * span.astype(float)).astype("int64").astype("timedelta64[ns]")
    out = start_ns + offset
    out = np.where(nan, np.datetime64("NaT", "ns"), out)
    return np.asarray(out, dtype="datetime64[ns]")


def julian_date(time, name: str = "time") -> np.ndarray:
    """Julian date of UTC instants.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like of these
        UTC instants or decimal years.
    name : str
        Argument name used in error messages.

    Returns
    -------
    numpy.ndarray
        Julian date (days), float64; NaT/NaN gives NaN.

    Notes
    -----
    .. math:: JD = 2440587.5 + s / 86400

    with *s* the seconds since 1970-01-01 00:00 UTC (the Julian date of the
    POSIX epoch, e.g. Meeus 1998, *Astronomical Algorithms*, ch. 7). Leap
    seconds are ignored (numpy datetime64 does not count them).

    Examples
    --------
    >>> float(julian_date(np.datetime64("2000-01-01T12:00")))
    2451545.0
    """
    t = as_datetime64(time, name)
    nat = np.isnat(t)
    ns = t.astype("datetime64[ns]").astype("int64").astype(float)
    jd = _UNIX_EPOCH_JD + ns / _NS_PER_DAY
    return np.asarray(np.where(nat, np.nan, jd), dtype=float)


def julian_centuries(time, name: str = "time") -> np.ndarray:
    """Julian centuries of 36525 days since J2000.0 (JD 2451545.0), on UTC.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like of these
        UTC instants or decimal years.
    name : str
        Argument name used in error messages.

    Returns
    -------
    numpy.ndarray
        :math:`T = (JD - 2451545.0) / 36525`, float64.
    """
    return (julian_date(time, name) - J2000_JD) / 36525.0
