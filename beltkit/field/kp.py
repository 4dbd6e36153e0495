r"""Read a Kp time series that the user supplies (beltkit never downloads one).

The result feeds :class:`beltkit.field.T89` directly: ``T89(kp=read_kp(path))``.

Accepted files
--------------
* **CSV** (any suffix but ``.nc``/``.nc4``/``.cdf``... is read as text): one
  sample per line, ``time,kp``. The time is ISO 8601 UTC
  (``2027-03-08T03:00``, ``2027-03-08 03:00:00``, a trailing ``Z`` or
  ``+00:00`` allowed; other offsets refused). Kp is a number on the 0-9
  scale (``2.333``) or in the thirds notation of the index (``2-``, ``2``,
  ``2+``: 2- = 1.667, 2+ = 2.333, common practice), or ``nan`` for a
  missing value. A first line that is not a sample (e.g. ``time,kp``) is
  taken as a header; blank lines and lines starting with ``#`` are skipped.
  Times must increase.
* **netCDF**: a variable ``kp`` (or ``Kp``/``KP``) on one time dimension
  whose coordinate decodes to datetimes.

Any other content is refused with one line naming the file, the problem
(and, for CSV, the line number) and the fix.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import FieldModelError
from .t89 import KP_MAX

__all__ = ["read_kp"]

_NETCDF_SUFFIXES = {".nc", ".nc4", ".netcdf", ".h5", ".hdf5"}
_THIRDS = re.compile(r"^([0-9])([+-]?)$")
_OFFSET = re.compile(r"(Z|[+-]\d\d:?\d\d)$")


def _parse_kp(text):
    """Kp from text: a number, 'N-', 'N', 'N+' (thirds) or 'nan'; None if unparseable."""
    t = text.strip()
    m = _THIRDS.match(t)
    if m:
        v = float(m.group(1)) + {"": 0.0, "+": 1.0 / 3.0, "-": -1.0 / 3.0}[m.group(2)]
        return v if 0.0 <= v <= KP_MAX else None
    try:
        return float(t)
    except ValueError:
        return None


def _parse_time(text):
    """datetime64[ns] from ISO 8601 UTC text, or a reason string."""
    t = text.strip()
    m = _OFFSET.search(t) if "T" in t or " " in t else None
    if m:
        off = m.group(1)
        if off not in ("Z", "+00:00", "+0000", "-00:00"):
            return f"time {t!r} has the UTC offset {off}: give UTC times"
        t = t[: m.start()]
    try:
        return np.datetime64(t.replace(" ", "T"), "ns")
    except ValueError:
        return f"{t!r} is not an ISO 8601 time"


def _refuse(path, problem, fix):
    raise FieldModelError(f"{path}: {problem}; {fix}")


def _read_csv(path):
    times, values = [], []
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        _refuse(path, "is not a text (CSV) file",
                "give a CSV of 'time,kp' lines or a netCDF file named *.nc")
    first = True
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        cells = [c.strip() for c in line.split(",")]
        header = first and not any(ch.isdigit() for ch in cells[0])  # e.g. "time,kp"
        first = False
        if header:
            continue
        if len(cells) != 2:
            _refuse(path, f"line {number} has {len(cells)} column(s) ({line!r})",
                    "write one 'time,kp' pair per line")
        t = _parse_time(cells[0])
        if isinstance(t, str):
            _refuse(path, f"line {number}: {t}", "write times as ISO 8601 UTC, e.g. "
                    "2027-03-08T03:00")
        v = _parse_kp(cells[1])
        if v is None:
            _refuse(path, f"line {number}: Kp {cells[1]!r} is not a number 0-9 nor a thirds "
                    "value such as 2-, 2, 2+", "write Kp on its 0-9 scale")
        if not np.isnan(v) and not 0.0 <= v <= KP_MAX:
            _refuse(path, f"line {number}: Kp {v:g} is outside 0-9",
                    "write Kp on its 0-9 scale (divide values coded as Kp x 10 by 10)")
        if times and t <= times[-1]:
            _refuse(path, f"line {number}: time {cells[0]} does not follow the previous "
                    f"one ({times[-1]})", "sort the lines by time and remove duplicates")
        times.append(t)
        values.append(v)
    return np.array(times, dtype="datetime64[ns]"), np.array(values, dtype=float)


def _read_netcdf(path):
    try:
        ds = xr.open_dataset(path)
    except (OSError, ValueError) as exc:
        _refuse(path, f"cannot be read as netCDF ({exc})", "give a netCDF file or a CSV of "
                "'time,kp' lines")
    with ds:
        name = next((n for n in ("kp", "Kp", "KP") if n in ds.variables), None)
        if name is None:
            _refuse(path, "has no variable 'kp'", "name the Kp variable 'kp' (on a time "
                    "dimension)")
        da = ds[name].load()
    if da.ndim != 1:
        _refuse(path, f"variable {name!r} has dimensions {da.dims}",
                "give Kp on one time dimension")
    dim = da.dims[0]
    if dim not in da.coords or np.asarray(da[dim]).dtype.kind != "M":
        _refuse(path, f"the dimension {dim!r} of {name!r} has no datetime coordinate",
                "add a time coordinate with CF units such as 'hours since 2027-03-08'")
    times = np.asarray(da[dim].values, dtype="datetime64[ns]")
    values = np.asarray(da.values, dtype=float)
    if np.any(np.isnat(times)):
        _refuse(path, f"{dim!r} holds missing times", "give a time for every Kp value")
    with np.errstate(invalid="ignore"):
        bad = (values < 0) | (values > KP_MAX)
    if np.any(bad):
        i = int(np.flatnonzero(bad)[0])
        _refuse(path, f"{name}[{i}] = {values[i]:g} is outside 0-9",
                "store Kp on its 0-9 scale (divide values coded as Kp x 10 by 10)")
    if np.any(np.diff(times) <= np.timedelta64(0, "ns")):
        i = int(np.flatnonzero(np.diff(times) <= np.timedelta64(0, "ns"))[0]) + 1
        _refuse(path, f"{dim}[{i}] does not follow the previous time",
                "sort by time and remove duplicates")
    return times, values


def read_kp(path) -> xr.DataArray:
    r"""Read a Kp series from a CSV or netCDF file given by the user.

    Parameters
    ----------
    path : str or pathlib.Path
        A CSV of ``time,kp`` lines (ISO 8601 UTC; Kp as a number 0-9 or in
        thirds, ``2-``/``2``/``2+``; optional header) or a netCDF file
        (``*.nc``) with a variable ``kp`` on a time dimension.

    Returns
    -------
    xarray.DataArray
        1-D along ``time`` (datetime64[ns], increasing), name ``kp``,
        ``units`` "1", ready for ``T89(kp=...)`` (each value holds until the
        next one, at most 3 hours).

    Raises
    ------
    FileNotFoundError
        If the file does not exist.
    FieldModelError
        For content that is not a Kp series, naming the file, the problem
        (the line for CSV) and the fix.

    Notes
    -----
    The thirds notation: :math:`N- = N - 1/3`, :math:`N+ = N + 1/3`
    (common practice for the Kp index; 0- and 9+ do not exist).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "kp.csv"
    >>> _ = p.write_text("time,kp\n2027-03-08T00:00,2-\n2027-03-08T03:00,4+\n")
    >>> read_kp(p).values.round(3).tolist()
    [1.667, 4.333]
    """
    path = Path(path)
    if not path.is_file():
        raise FileNotFoundError(f"{path}: no such Kp file; give the path of a CSV or netCDF "
                                "file of Kp against time (beltkit downloads nothing)")
    if path.suffix.lower() in _NETCDF_SUFFIXES:
        times, values = _read_netcdf(path)
    else:
        times, values = _read_csv(path)
    if times.size == 0:
        _refuse(path, "holds no Kp values", "give at least one 'time,kp' line")
    return xr.DataArray(values, dims="time", coords={"time": times}, name="kp",
                        attrs={"units": "1", "long_name": "planetary geomagnetic index Kp",
                               "source": str(path)})
