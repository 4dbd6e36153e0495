"""The time axis: found on whatever dimension it lives, decoded to UTC, never guessed.

:func:`resolve_time` makes ``time`` a UTC ``datetime64[ns]`` coordinate on a
dimension named ``time``:

* the variable ``time`` (after the mapping's ``[variables] time = ...``) may
  live on any one dimension (``record``, ``Epoch``, ``n_samples``, ...): that
  dimension is renamed ``time`` in every variable;
* a numeric time is decoded from its CF ``units`` (``"seconds since
  1970-01-01"``, CF-1.8 section 4.4, through xarray's CF decoder), or from the
  mapping's ``[time] epoch`` and ``[time] unit``
  (value x unit after epoch);
* a numeric time with neither is refused with a message that names those
  mapping keys: a number of unknown unit is never read as nanoseconds or
  years.

CDF time types arrive already decoded (:mod:`beltkit.io.cdf`).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import MappingError

__all__ = ["TIME_UNIT_NS", "resolve_time"]

#: Nanoseconds per ``[time] unit`` of a mapping.
TIME_UNIT_NS = {"ns": 1, "us": 1_000, "ms": 1_000_000, "s": 1_000_000_000,
                "min": 60_000_000_000, "h": 3_600_000_000_000, "d": 86_400_000_000_000}


def _decode(var: xr.Variable, rule: dict, where: str) -> np.ndarray:
    values = np.asarray(var.values)
    if values.dtype.kind == "M":
        return values.astype("datetime64[ns]")
    if values.dtype.kind not in "iuf":
        raise MappingError(f"{where}: the time variable holds {values.dtype} values, not "
                           f"times; name a time variable with [variables] time = \"...\"")
    units = str(var.attrs.get("units", ""))
    fills = [np.asarray(var.attrs[k]).ravel() for k in ("_FillValue", "missing_value", "FILLVAL")
             if k in var.attrs]
    if fills:  # fill times become NaT (the validator names them), never a 1970 date
        values = np.where(np.isin(values, np.concatenate(fills)), np.nan, values)
    if "epoch" in rule or "unit" in rule:
        if not ("epoch" in rule and "unit" in rule):
            raise MappingError(f"{where}: [time] needs both epoch and unit (for example "
                               f"epoch = \"1970-01-01T00:00:00\", unit = \"s\")")
        epoch = np.datetime64(str(rule["epoch"]).replace("Z", ""), "ns")
        scaled = values.astype(np.float64) * TIME_UNIT_NS[rule["unit"]]
        bad = ~np.isfinite(scaled)
        offset = np.where(bad, 0, np.round(scaled)).astype(np.int64)
        out = epoch + offset.astype("timedelta64[ns]")
        out[bad] = np.datetime64("NaT")
        return out
    if " since " in units:
        calendar = var.attrs.get("calendar", "standard")
        try:
            out = xr.coding.times.decode_cf_datetime(values, units, calendar)
        except (ValueError, OverflowError, TypeError) as exc:
            raise MappingError(
                f"{where}: time units {units!r} cannot be decoded ({exc}); give the epoch "
                f"and unit in the mapping: [time] epoch = \"...\", unit = \"s\"") from None
        return np.asarray(out).astype("datetime64[ns]")
    raise MappingError(
        f"{where}: time is numeric with no CF units (units = {units!r}); beltkit does not "
        f"guess its epoch: add to the mapping [time] epoch = \"1970-01-01T00:00:00\" and "
        f"unit = \"s\" (or ms, us, ns, min, h, d), or give the variable CF units such as "
        f"\"seconds since 1970-01-01 00:00:00\"")


def resolve_time(ds: xr.Dataset, rule: dict, *, where: str) -> xr.Dataset:
    """Return `ds` with ``time`` a UTC datetime64 coordinate on the ``time`` dimension.

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset with conventional names (mapping applied), time not decoded.
    rule : dict
        The mapping's ``[time]`` table (``epoch``, ``unit``), possibly empty.
    where : str
        File and mapping, for messages.

    Raises
    ------
    MappingError
        No time variable, a time variable with more than one dimension, or a
        numeric time without CF units or a mapping rule.
    """
    if "time" not in ds.variables:
        if "time" in ds.dims:
            raise MappingError(f"{where}: the dimension time has no time variable; name it "
                               f"with [variables] time = \"...\"")
        return ds  # the validator reports the missing time
    var = ds.variables["time"]
    if var.ndim != 1:
        raise MappingError(f"{where}: the time variable has dimensions {var.dims}; it must "
                           f"have one; name a 1-D time with [variables] time = \"...\"")
    dim = var.dims[0]
    if dim != "time" and "time" in ds.dims:
        raise MappingError(f"{where}: time lives on dimension {dim!r} but the file also has a "
                           f"dimension 'time'; say which is the sample axis with "
                           f"[dimensions] time = \"{dim}\"")
    decoded = _decode(var, rule, where)
    ds = ds.drop_vars("time")
    if dim != "time" and dim in ds.dims:
        ds = ds.rename_dims({dim: "time"})
    attrs = {k: v for k, v in var.attrs.items()
             if k not in ("units", "calendar", "_FillValue", "FILLVAL", "VALIDMIN", "VALIDMAX",
                          "valid_min", "valid_max", "valid_range", "cdf_time_type")}
    attrs.setdefault("long_name", "time (UTC)")
    attrs.setdefault("standard_name", "time")
    return ds.assign_coords(time=xr.Variable(("time",), decoded, attrs))
