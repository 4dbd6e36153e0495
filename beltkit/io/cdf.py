"""NASA CDF files read as lazy xarray datasets, ISTP metadata kept.

:func:`open_cdf` gives each CDF variable its ISTP dimensions
(``DEPEND_0`` for records, ``DEPEND_1``, ``DEPEND_2``, ... for the others) and
reads record-varying variables only where they are indexed (record range by
record range, through :mod:`cdflib`). The CDF time types become UTC
``datetime64[ns]`` through :func:`cdflib.cdfepoch.to_datetime`:

* ``CDF_EPOCH``: milliseconds since 0000-01-01T00:00:00 (proleptic Gregorian);
* ``CDF_EPOCH16``: a pair (seconds since 0000-01-01, picoseconds);
* ``CDF_TIME_TT2000``: nanoseconds of Terrestrial Time since J2000
  (2000-01-01T12:00:00 TT), leap seconds applied by cdflib's table.

(CDF User's Guide, NASA GSFC Space Physics Data Facility, section 2.4.)
The ISTP attributes are kept as they are (``FILLVAL``, ``VALIDMIN``,
``VALIDMAX``, ``SCALEMIN``, ``DELTA_PLUS_VAR``, ``LABL_PTR_1``, ...) for
:mod:`beltkit.io.metadata` to apply; ``UNITS`` becomes ``units`` and
``CATDESC``/``FIELDNAM`` become ``long_name``.

Dimension names: a record-varying variable's first dimension is its
``DEPEND_0``, else ``record`` (a time variable that others name as their
``DEPEND_0`` but has none itself names its own); dimension *i* is
named after ``DEPEND_i`` when that names a one-dimensional, non-record-varying
variable, else ``<DEPEND_i>_channel`` (a record-varying table such as an
energy per record, whose own last dimension gets the same name); without a
``DEPEND_i``, ``<name>_dim<i>``. A label variable (``LABL_PTR_i``) takes the
name of the dimension it labels.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

__all__ = ["CDF_TIME_TYPES", "CdfRecords", "cdf_time_to_datetime64", "open_cdf"]

#: CDF data types holding times.
CDF_TIME_TYPES = ("CDF_EPOCH", "CDF_EPOCH16", "CDF_TIME_TT2000")
_ISTP_NAMES = {"UNITS": "units"}


class CdfRecords(BackendArray):
    """A record-varying CDF variable, read record range by record range when indexed."""

    def __init__(self, path, name, shape, dtype):
        self.path = str(path)
        self.name = name
        self.shape = tuple(int(n) for n in shape)
        self.dtype = np.dtype(dtype)

    def __getitem__(self, key):
        return indexing.explicit_indexing_adapter(
            key, self.shape, indexing.IndexingSupport.BASIC, self._basic)

    def _basic(self, key):
        import cdflib

        key = tuple(key) + (slice(None),) * (len(self.shape) - len(key))
        first = key[0]
        if isinstance(first, (int, np.integer)):
            start = stop = int(first) % self.shape[0]
            rest = (0,) + key[1:]
        else:
            start, stop, step = first.indices(self.shape[0])
            rest = (slice(None, None, step),) + key[1:]
            stop = stop - 1 if step > 0 else stop + 1
            if step < 0:
                start, stop = stop, start
                rest = (slice(None, None, step),) + key[1:]
        n = stop - start + 1
        if n <= 0:
            return np.empty((0,) + self.shape[1:], self.dtype)[(slice(None),) + key[1:]]
        data = np.asarray(cdflib.CDF(self.path).varget(self.name, startrec=start, endrec=stop))
        data = data.reshape((n,) + self.shape[1:]).astype(self.dtype, copy=False)
        return data[rest]


def cdf_time_to_datetime64(raw, fill=None) -> np.ndarray:
    """Return CDF time values (any of :data:`CDF_TIME_TYPES`) as UTC ``datetime64[ns]``.

    Parameters
    ----------
    raw : numpy.ndarray
        ``CDF_EPOCH`` (float64 ms), ``CDF_EPOCH16`` (complex128: seconds +
        1j * picoseconds) or ``CDF_TIME_TT2000`` (int64 ns) values as cdflib
        reads them; the type follows from the dtype.
    fill : scalar, optional
        The ISTP ``FILLVAL``; those values become NaT.

    Returns
    -------
    numpy.ndarray of datetime64[ns]
        Decoded by :func:`cdflib.cdfepoch.to_datetime` (TT2000 with its
        leap-second table).
    """
    import cdflib

    raw = np.asarray(raw)
    if raw.size == 0:
        return np.empty(raw.shape, "datetime64[ns]")
    data = np.asarray(cdflib.cdfepoch.to_datetime(raw.ravel()), dtype="datetime64[ns]")
    data = data.reshape(raw.shape)
    if fill is not None:  # ISTP fill times (e.g. -1e31, the int64 minimum): NaT
        data = np.where(raw == np.asarray(fill).astype(raw.dtype), np.datetime64("NaT"), data)
    return data


def _attrs(raw: dict) -> dict:
    out = {}
    for key, value in raw.items():
        if key == "UNITS":
            out["units"] = str(value)
        elif key in ("CATDESC", "FIELDNAM"):
            out.setdefault("long_name", str(value))
            out[key] = str(value)
        elif isinstance(value, (str, int, float, np.number, np.ndarray, list)):
            out[key] = value
    return out


def open_cdf(path) -> xr.Dataset:
    """Open a NASA CDF file as a lazy dataset with its ISTP attributes.

    Parameters
    ----------
    path : str or os.PathLike
        The CDF file.

    Returns
    -------
    xarray.Dataset
        One variable per CDF variable (see the module notes for dimension
        names); record-varying variables lazily indexed, time variables as
        UTC ``datetime64[ns]``. No value is masked here: the ISTP
        ``FILLVAL``/``VALIDMIN``/``VALIDMAX`` are applied by
        :func:`beltkit.io.open_indexed`.
    """
    import cdflib

    path = Path(path)
    cdf = cdflib.CDF(str(path))
    info = cdf.cdf_info()
    names = list(info.zVariables) + list(info.rVariables)
    infos = {n: cdf.varinq(n) for n in names}
    var_attrs = {n: dict(cdf.varattsget(n) or {}) for n in names}

    def dep_dim(dep):
        v = infos.get(dep)
        if v is not None and not v.Rec_Vary and len(v.Dim_Sizes or []) == 1:
            return dep
        return f"{dep}_channel"

    dims_of = {}
    dep0_targets = {str(var_attrs[n].get("DEPEND_0")) for n in names}
    for name in names:
        v, a = infos[name], var_attrs[name]
        sizes = [int(s) for s in (v.Dim_Sizes or [])]
        is_time = v.Data_Type_Description in CDF_TIME_TYPES
        dims = []
        if v.Rec_Vary:
            dep0 = a.get("DEPEND_0")
            # without DEPEND_0 a variable is on the plain record axis; a time variable
            # names its own axis only when other variables point to it
            dims.append(str(dep0) if dep0 else (name if is_time and name in dep0_targets
                                                else "record"))
        elif len(sizes) == 1 and not a.get("DEPEND_1"):
            dims_of[name] = (name,)
            continue
        for i, _size in enumerate(sizes, start=1):
            dep = a.get(f"DEPEND_{i}")
            if dep:
                dims.append(dep_dim(str(dep)))
            elif name.endswith("_bnds") and _size == 2:
                dims.append("nv")
            else:
                dims.append(f"{name}_dim{i}")
        dims_of[name] = tuple(dims)
    # a record-varying table named by a DEPEND_i shares that dimension's name
    for name in names:
        a = var_attrs[name]
        for i in range(1, 4):
            dep = a.get(f"DEPEND_{i}")
            if dep and str(dep) in dims_of and dep_dim(str(dep)) != str(dep):
                own = list(dims_of[str(dep)])
                own[-1] = dep_dim(str(dep))
                dims_of[str(dep)] = tuple(own)
            lab = a.get(f"LABL_PTR_{i}")
            axis = i if infos[name].Rec_Vary else i - 1
            if (lab and str(lab) in dims_of and not infos[str(lab)].Rec_Vary
                    and len(dims_of[str(lab)]) == 1 and axis < len(dims_of[name])):
                dims_of[str(lab)] = (dims_of[name][axis],)
    variables = {}
    for name in names:
        v, a = infos[name], var_attrs[name]
        attrs = _attrs(a)
        dims = dims_of[name]
        nrec = int(v.Last_Rec) + 1 if v.Rec_Vary else 1
        if v.Rec_Vary and v.Last_Rec < 0:
            nrec = 0
        sizes = [int(s) for s in (v.Dim_Sizes or [])]
        shape = ((nrec,) if v.Rec_Vary else ()) + tuple(sizes)
        if v.Data_Type_Description in CDF_TIME_TYPES:
            raw = np.asarray(cdf.varget(name) if nrec else np.empty(0))
            data = cdf_time_to_datetime64(raw, a.get("FILLVAL"))
            attrs.pop("units", None)
            attrs["cdf_time_type"] = v.Data_Type_Description
            if len(dims) != data.ndim:
                dims = dims[: data.ndim] if data.ndim else ()
            variables[name] = xr.Variable(dims, data.reshape(shape[: data.ndim] or data.shape),
                                          attrs)
        elif not v.Rec_Vary or nrec == 0:
            data = np.asarray(cdf.varget(name)) if nrec else np.empty(shape)
            if data.size == int(np.prod(shape)):
                data = data.reshape(shape)
            if data.ndim != len(dims):
                dims = dims[-data.ndim:] if data.ndim else ()
            variables[name] = xr.Variable(dims, data, attrs)
        else:
            sample = np.asarray(cdf.varget(name, startrec=0, endrec=0))
            lazy = CdfRecords(path, name, shape, sample.dtype)
            variables[name] = xr.Variable(dims, indexing.LazilyIndexedArray(lazy), attrs)
    gattrs = {}
    for key, value in (cdf.globalattsget() or {}).items():
        if isinstance(value, list) and len(value) == 1:
            value = value[0]
        if isinstance(value, (str, int, float, np.number)):
            gattrs[key] = value
    coords = {n: v for n, v in variables.items() if v.dims == (n,)}
    data_vars = {n: v for n, v in variables.items() if n not in coords}
    return xr.Dataset(data_vars, coords=coords, attrs=gattrs)
