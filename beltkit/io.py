"""Reading flux files and writing CF-1.8 netCDF files safely.

Readers
-------
:func:`open_flux` opens a flux file lazily (dask chunks along ``time``;
:func:`open_indexed` without dask, each slab read where it is indexed) and
returns an :class:`xarray.Dataset` that follows beltkit's data conventions:

* netCDF files (netCDF-4/HDF5 or classic) through the ``netcdf4`` engine
  (netCDF4-python, a dependency);
* NASA CDF files through :mod:`cdflib` (variables read record range by record
  range on demand, so a CDF is lazy too);
* files whose names do not follow the conventions through a *mapping*: a small
  TOML file (or a dict of the same shape) that says which variable of the file
  plays which part::

      # my-instrument.toml
      [variables]                  # beltkit name = name in the file
      time = "t_utc"
      flux = "eflux_pa"
      energy = "eflux_pa_energy"
      pitch_angle = "eflux_pa_angle"
      L = "lshell_dip"
      mlat = "mag_lat"

      [units]                      # beltkit name = UDUNITS unit (overrides the file)
      flux = "cm-2 s-1 sr-1 keV-1"
      energy = "keV"

      [dimensions]                 # beltkit dimension = dimension name in the file
      pitch_angle = "alpha_bin"

  Every key is checked (:func:`load_mapping`); an unknown section or name, a
  value that is not a string, or a variable missing from the file is refused
  with a :class:`MappingError` naming the mapping, the file and the key.

Inputs are opened read-only and never modified.

Writer
------
:func:`write_dataset` writes a CF-1.8 netCDF-4 file compressed with zlib and
chunked along ``time`` (or uncompressed and contiguous); :func:`write_stream`
writes one from consecutive slabs along ``time``. Both write into a
temporary file in the target folder
(named ``.<output name>.beltkit-<random>.tmp``, so leftovers are easy to find
and :func:`remove_stale_temporaries` can remove them) and renames it over the
target with :func:`os.replace` only once it is complete, so a reader never
sees a half-written file, even when the writing process is killed.

:func:`sha256` is the checksum recorded in every output for its input.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
import sys
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .atomic import TEMP_SUFFIX, atomic_file, remove_stale_temporaries, temporary_name
from .errors import MappingError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = [
    "MAPPING_NAMES",
    "MappingError",
    "TEMP_SUFFIX",
    "apply_mapping",
    "load_mapping",
    "open_cdf",
    "open_flux",
    "open_indexed",
    "read_attributes",
    "remove_stale_temporaries",
    "sha256",
    "temporary_name",
    "write_dataset",
    "write_stream",
]

#: Conventional names a mapping may assign (see ``docs/conventions.md``).
MAPPING_NAMES = (
    "time",
    "flux",
    "flux_err",
    "counts",
    "counts_to_flux",
    "energy",
    "energy_bnds",
    "pitch_angle",
    "pitch_angle_bnds",
    "L",
    "mlat",
    "mlt",
    "b_local",
    "position_geo",
    "look",
    "look_pitch_angle",
    "look_half_angle",
)
_MAPPING_SECTIONS = ("variables", "units", "dimensions")
_MAPPING_DIMENSIONS = ("time", "energy", "pitch_angle", "look")

#: Marker in the names of temporary files written by :func:`write_dataset`.

_CDF_MAGIC = (b"\xcd\xf3\x00\x01", b"\xcd\xf2\x60\x02", b"\x00\x00\xff\xff")


# --------------------------------------------------------------------------- checksums


def sha256(path, *, block_size: int = 1 << 20) -> str:
    """Return the SHA-256 hex digest of a file, read in blocks.

    Parameters
    ----------
    path : str or os.PathLike
        The file.
    block_size : int
        Bytes read at a time (memory use does not grow with the file).

    Returns
    -------
    str
        64 lowercase hexadecimal characters.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "x.txt"
    >>> _ = p.write_bytes(b"abc")
    >>> sha256(p)[:16]
    'ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(block_size)
            if not block:
                break
            digest.update(block)
    return digest.hexdigest()


# --------------------------------------------------------------------------- mapping


def load_mapping(mapping, *, source=None) -> dict:
    """Read and check a variable-name mapping.

    Parameters
    ----------
    mapping : str, os.PathLike or dict
        Path of a TOML file, or a dict with the same sections
        (``variables``, ``units``, ``dimensions``).
    source : str, optional
        Name used in error messages for a dict mapping.

    Returns
    -------
    dict
        ``{"variables": {...}, "units": {...}, "dimensions": {...}, "source": str}``,
        each section mapping a conventional name to a string.

    Raises
    ------
    MappingError
        If the file cannot be read or parsed, a section or name is unknown, or
        a value is not a non-empty string. The message names the mapping and
        the key.
    """
    if isinstance(mapping, (str, os.PathLike)):
        path = Path(mapping)
        where = str(path)
        try:
            with open(path, "rb") as fh:
                raw = tomllib.load(fh)
        except FileNotFoundError:
            raise MappingError(f"mapping file {where} does not exist") from None
        except tomllib.TOMLDecodeError as exc:
            raise MappingError(f"mapping file {where} is not valid TOML: {exc}") from None
    elif isinstance(mapping, Mapping):
        where = source or "mapping dict"
        raw = dict(mapping)
    else:
        raise MappingError(
            f"mapping must be a path to a TOML file or a dict, got {type(mapping).__name__}"
        )
    problems = []
    out = {"variables": {}, "units": {}, "dimensions": {}, "source": where}
    for section, body in raw.items():
        if section not in _MAPPING_SECTIONS:
            problems.append(
                f"unknown section [{section}] (known: {', '.join(_MAPPING_SECTIONS)})"
            )
            continue
        if not isinstance(body, Mapping):
            problems.append(f"[{section}] must be a table of name = \"string\" entries")
            continue
        allowed = _MAPPING_DIMENSIONS if section == "dimensions" else MAPPING_NAMES
        for key, value in body.items():
            if key not in allowed:
                problems.append(
                    f"[{section}] {key}: not a beltkit name (known: {', '.join(allowed)})"
                )
            elif not isinstance(value, str) or not value.strip():
                problems.append(
                    f"[{section}] {key}: value must be a non-empty string, got {value!r}"
                )
            else:
                out[section][key] = value.strip()
    targets = list(out["variables"].values())
    for name in sorted({t for t in targets if targets.count(t) > 1}):
        problems.append(f"[variables]: file variable {name!r} is assigned to several names")
    if problems:
        raise MappingError(f"mapping {where}: " + "; ".join(problems))
    return out


def apply_mapping(ds: xr.Dataset, mapping, *, source=None) -> xr.Dataset:
    """Rename a dataset's variables and dimensions and set units per a mapping.

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset as read from the file (not modified).
    mapping : str, os.PathLike or dict
        See :func:`load_mapping`.
    source : str, optional
        The file name, for error messages.

    Returns
    -------
    xarray.Dataset
        A new dataset with conventional names.

    Raises
    ------
    MappingError
        If a mapped variable or dimension is not in the dataset, or a renamed
        variable would collide with one already present.
    """
    m = mapping if isinstance(mapping, dict) and "source" in mapping else load_mapping(mapping)
    where = f"mapping {m['source']} applied to {source or 'dataset'}"
    problems = []
    var_renames = {}
    for name, in_file in m["variables"].items():
        if in_file not in ds.variables:
            problems.append(f"[variables] {name} = {in_file!r}: no such variable in the file")
        elif in_file != name:
            var_renames[in_file] = name
    dim_renames = {}
    for name, in_file in m["dimensions"].items():
        if in_file not in ds.dims:
            problems.append(f"[dimensions] {name} = {in_file!r}: no such dimension in the file")
        elif in_file != name:
            dim_renames[in_file] = name
    for name in m["units"]:
        target_known = name in m["variables"] or name in ds.variables
        if not target_known:
            problems.append(f"[units] {name}: no variable of that name in the file or mapping")
    for old, new in var_renames.items():
        if new in ds.variables and new not in var_renames:
            problems.append(
                f"[variables] {new} = {old!r}: the file already has a variable named {new!r}"
            )
    if problems:
        raise MappingError(f"{where}: " + "; ".join(problems))
    out = ds.copy()
    if dim_renames:
        out = out.rename_dims(dim_renames)
    for old, new in var_renames.items():
        if old in out.dims and out[old].dims == (old,):
            out = out.rename({old: new})  # a dimension coordinate: rename its dimension too
        else:
            out = out.rename_vars({old: new})
    for name, unit in m["units"].items():
        out.variables[name].attrs = {**out.variables[name].attrs, "units": unit}
    return out


# --------------------------------------------------------------------------- readers


def _is_cdf(path: Path) -> bool:
    if path.suffix.lower() == ".cdf":
        return True
    try:
        with open(path, "rb") as fh:
            head = fh.read(4)
    except OSError:
        return False
    return head in _CDF_MAGIC


def _time_chunks(ds: xr.Dataset, chunks):
    if chunks == "auto":
        return {"time": "auto"} if "time" in ds.dims else {}
    return chunks


def open_flux(path, mapping=None, chunks="auto", *, engine=None) -> xr.Dataset:
    """Open a flux file lazily, with conventional names.

    Parameters
    ----------
    path : str or os.PathLike
        A netCDF or NASA CDF file (CDF recognised by its ``.cdf`` suffix or its
        magic number).
    mapping : str, os.PathLike or dict, optional
        Variable-name mapping (:func:`load_mapping`) for files that do not use
        the conventional names.
    chunks : "auto", dict or None
        Dask chunks. ``"auto"`` chunks along ``time`` only (dask picks the
        length); a dict is passed to :meth:`xarray.Dataset.chunk` after the
        mapping (so use conventional dimension names); None loads eagerly.
    engine : str, optional
        xarray netCDF engine; default ``"netcdf4"`` (another, such as
        ``"h5netcdf"``, must be installed separately).

    Returns
    -------
    xarray.Dataset
        The dataset, its ``source`` attribute set to the file name and its
        ``encoding["source"]`` to the full path.

    Raises
    ------
    OSError
        If the file cannot be read (missing, truncated, not netCDF or CDF);
        the message names the file.
    MappingError
        If the mapping is malformed or does not fit the file.
    """
    ds = open_indexed(path, mapping, engine=engine)
    if chunks is not None:
        ds = ds.chunk(_time_chunks(ds, chunks))
    else:
        ds = ds.load()
    return ds


def open_indexed(path, mapping=None, *, engine=None) -> xr.Dataset:
    """Open a flux file with conventional names, its arrays read only where indexed.

    Like :func:`open_flux` without dask: the variables are xarray's lazily
    indexed backend arrays, so ``ds.isel(time=slice(a, b))`` followed by
    ``.values`` reads just that slab from disk. Same parameters, errors and
    attributes as :func:`open_flux`.
    """
    path = Path(path)
    if not path.is_file():
        raise OSError(f"{path}: no such file")
    try:
        if _is_cdf(path):
            ds = open_cdf(path)
        else:
            # lazily indexed arrays: a dask chunk made from them, or a slab taken with
            # isel, reads only its own slice (chunking the file's native layout would
            # read a whole contiguous variable at once)
            ds = xr.open_dataset(
                path, engine=engine or "netcdf4", chunks=None, cache=False,
                mask_and_scale=True, decode_times=True,
            )
    except (OSError, ValueError, KeyError, RuntimeError) as exc:
        detail = str(exc).replace(f": '{path}'", "").replace(f": {path}", "")
        detail = detail.replace(str(path), path.name)
        raise OSError(f"{path.name}: cannot be read as netCDF or CDF ({detail})") from exc
    if mapping is not None:
        ds = apply_mapping(ds, mapping, source=path.name)
    ds.attrs.setdefault("source", path.name)
    ds.encoding["source"] = str(path)
    return ds


# ------------------------------------------------------------------------------- CDF


def _cdf_dims(name, info, attrs, nrec, is_time):
    """Dimension names and shape of a CDF variable from its ISTP DEPEND_i attributes."""
    sizes = [int(s) for s in (info.Dim_Sizes or [])]
    dims, shape = [], []
    if info.Rec_Vary:
        dep = attrs.get("DEPEND_0")
        dims.append(str(dep) if dep else (name if is_time else "record"))
        shape.append(nrec)
    elif len(sizes) == 1 and not attrs.get("DEPEND_1"):
        return (name,), (sizes[0],)
    for i, size in enumerate(sizes, start=1):
        dep = attrs.get(f"DEPEND_{i}")
        if dep:
            dims.append(str(dep))
        elif name.endswith("_bnds") and size == 2:
            dims.append("nv")
        else:
            dims.append(f"{name}_dim{i}")
        shape.append(size)
    return tuple(dims), tuple(shape)


def open_cdf(path, *, record_chunk: int = 65536) -> xr.Dataset:
    """Open a NASA CDF file as a lazy dataset.

    Dimensions come from the ISTP ``DEPEND_0`` (records), ``DEPEND_1``, ...
    attributes; a 1-D variable with no ``DEPEND`` names its own dimension.
    ``UNITS`` becomes ``units``, ``CATDESC``/``FIELDNAM`` become ``long_name``,
    ``FILLVAL`` values of floating variables become NaN, and CDF time types
    (``CDF_EPOCH``, ``CDF_EPOCH16``, ``CDF_TIME_TT2000``) become UTC
    ``datetime64[ns]``. Record-varying variables are read on demand, one
    record range per dask chunk.

    Parameters
    ----------
    path : str or os.PathLike
        The CDF file.
    record_chunk : int
        Records per dask chunk.

    Returns
    -------
    xarray.Dataset
        The dataset (nothing is read until computed, except time variables
        and non-record-varying support data).
    """
    import cdflib
    import dask
    import dask.array as dsa

    path = Path(path)
    cdf = cdflib.CDF(str(path))
    info = cdf.cdf_info()
    names = list(info.zVariables) + list(info.rVariables)
    variables = {}
    for name in names:
        vinfo = cdf.varinq(name)
        attrs = dict(cdf.varattsget(name) or {})
        nrec = int(vinfo.Last_Rec) + 1 if vinfo.Rec_Vary else 1
        if vinfo.Rec_Vary and vinfo.Last_Rec < 0:
            nrec = 0
        dtype_desc = vinfo.Data_Type_Description
        is_time = dtype_desc in ("CDF_EPOCH", "CDF_EPOCH16", "CDF_TIME_TT2000")
        dims, shape = _cdf_dims(name, vinfo, attrs, nrec, is_time)
        out_attrs = {}
        for key, value in attrs.items():
            if key in ("DEPEND_0", "DEPEND_1", "DEPEND_2", "DEPEND_3", "FILLVAL"):
                continue
            if key == "UNITS":
                out_attrs["units"] = str(value)
            elif key in ("CATDESC", "FIELDNAM") and "long_name" not in out_attrs:
                out_attrs["long_name"] = str(value)
            elif isinstance(value, (str, int, float, np.number, np.ndarray, list)):
                out_attrs[key] = value
        fill = attrs.get("FILLVAL")
        if is_time:
            raw = cdf.varget(name)
            data = np.asarray(cdflib.cdfepoch.to_datetime(raw), dtype="datetime64[ns]")
            out_attrs.pop("units", None)
            if not dims:
                dims = (name,)
            variables[name] = xr.Variable(dims, data.reshape(shape or data.shape), out_attrs)
            continue
        if not vinfo.Rec_Vary:
            data = np.asarray(cdf.varget(name))
            data = data.reshape(shape) if shape else data.reshape(())
            if not dims and data.ndim == 1:
                dims = (name,)
            data = _fill_to_nan(data, fill)
            variables[name] = xr.Variable(dims, data, out_attrs)
            continue
        sample = np.asarray(cdf.varget(name, startrec=0, endrec=0))
        dtype = np.result_type(sample.dtype, np.float32) if fill is not None else sample.dtype
        if np.issubdtype(sample.dtype, np.floating):
            dtype = sample.dtype
        blocks = []
        for start in range(0, nrec, record_chunk):
            stop = min(nrec, start + record_chunk)
            block_shape = (stop - start, *shape[1:])
            delayed = dask.delayed(_read_cdf_records)(str(path), name, start, stop - 1,
                                                      block_shape, fill, dtype)
            blocks.append(dsa.from_delayed(delayed, shape=block_shape, dtype=dtype))
        data = dsa.concatenate(blocks, axis=0) if blocks else np.empty(shape, dtype=dtype)
        variables[name] = xr.Variable(dims, data, out_attrs)
    gattrs = {}
    for key, value in (cdf.globalattsget() or {}).items():
        if isinstance(value, list) and len(value) == 1:
            value = value[0]
        if isinstance(value, (str, int, float, np.number)):
            gattrs[key] = value
    coords = {n: v for n, v in variables.items() if v.dims == (n,)}
    data_vars = {n: v for n, v in variables.items() if n not in coords}
    ds = xr.Dataset(data_vars, coords=coords, attrs=gattrs)
    # cdflib keeps no file handle open after reading; nothing to close
    return ds


def _fill_to_nan(data, fill):
    if fill is None or not np.issubdtype(np.asarray(data).dtype, np.floating):
        return data
    fill_value = np.asarray(fill, dtype=data.dtype).ravel()[0]
    return np.where(data == fill_value, np.nan, data).astype(data.dtype)


def _read_cdf_records(path, name, start, stop, shape, fill, dtype):
    import cdflib

    data = np.asarray(cdflib.CDF(path).varget(name, startrec=start, endrec=stop))
    data = data.reshape(shape)
    return _fill_to_nan(data, fill).astype(dtype, copy=False)


# --------------------------------------------------------------------------- writer


def _clean_attrs(attrs: Mapping) -> dict:
    """Attributes netCDF can store: drop None, bools to int, dicts to JSON."""
    out = {}
    for key, value in attrs.items():
        if value is None:
            continue
        if isinstance(value, (bool, np.bool_)):
            out[key] = int(value)
        elif isinstance(value, (dict, list, tuple)) and not (
            isinstance(value, (list, tuple)) and all(isinstance(v, (int, float)) for v in value)
        ):
            out[key] = json.dumps(value, default=str)
        elif isinstance(value, Path):
            out[key] = str(value)
        else:
            out[key] = value
    return out


def _encoding(ds: xr.Dataset, complevel: int, time_chunk: int, chunked=None) -> dict:
    """Return the encoding: CF time, NaN fill, zlib; time chunks if compressed (or `chunked`).

    Uncompressed variables are stored contiguously (HDF5 writes them fastest)
    unless ``chunked`` is True, as an unlimited dimension requires.
    """
    if chunked is None:
        chunked = complevel > 0
    encoding = {}
    bounds_names = {v.attrs.get("bounds") for v in ds.variables.values()} - {None}
    for name, var in ds.variables.items():
        enc = {}
        is_coord = name in ds.dims or name in bounds_names
        if np.issubdtype(var.dtype, np.datetime64):
            enc.update(units="seconds since 1970-01-01 00:00:00", calendar="standard",
                       dtype="float64", _FillValue=None)
        elif np.issubdtype(var.dtype, np.floating):
            enc["_FillValue"] = None if is_coord else np.array(np.nan, dtype=var.dtype)
        elif var.dtype == bool:
            enc["dtype"] = "int8"
        if var.ndim and var.dtype.kind in "fiubM":
            if complevel > 0:
                enc.update(zlib=True, complevel=complevel, shuffle=True)
            if chunked and "time" in var.dims:
                chunks = tuple(
                    min(time_chunk, n) if d == "time" else n for d, n in zip(var.dims, var.shape)
                )
                if all(c > 0 for c in chunks):
                    enc["chunksizes"] = chunks
        encoding[name] = enc
    return encoding


#: Bytes of HDF5 chunk cache per variable while writing. The library default
#: (64 MiB per variable) holds the dirty chunks of a whole file in memory; the
#: writer fills chunks in time order, so a few chunks per variable suffice.
WRITE_CHUNK_CACHE_BYTES = 1 << 20


@contextlib.contextmanager
def _small_chunk_cache():
    import netCDF4

    old = netCDF4.get_chunk_cache()
    netCDF4.set_chunk_cache(WRITE_CHUNK_CACHE_BYTES, old[1], old[2])
    try:
        yield
    finally:
        netCDF4.set_chunk_cache(*old)


def _complevel(compress) -> int:
    if compress is True:
        return 4
    if compress is False or compress is None:
        return 0
    complevel = int(compress)
    if not 0 <= complevel <= 9:
        raise ValueError(f"compress must be a zlib level 0-9, got {compress!r}")
    return complevel


def _prepared(ds: xr.Dataset, complevel: int, history, attrs, time_chunk: int, chunked=None):
    """Return a shallow copy of `ds` with the written attributes, and its encoding."""
    out = ds.copy()
    gattrs = _clean_attrs({**out.attrs, **(attrs or {})})
    gattrs["Conventions"] = "CF-1.8"
    gattrs.setdefault("beltkit_version", __version__)
    if history:
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        old = gattrs.get("history")
        gattrs["history"] = f"{stamp} {history}" + (f"\n{old}" if old else "")
    out.attrs = gattrs
    for var in out.variables.values():
        var.attrs = _clean_attrs(var.attrs)
        # encodings inherited from an input file (chunk sizes, fill values) do not apply
        var.encoding = {}
    return out, _encoding(out, complevel, time_chunk, chunked)


def _atomic_write(path: Path, fill, late_attrs=None, *, defer_commit=False):
    """Write a netCDF file atomically (:func:`beltkit.atomic.atomic_file`).

    ``fill(tmp)`` writes the temporary file (with a small HDF5 chunk cache);
    the late attributes are then added to it. With ``defer_commit`` the
    function that flushes and renames (no netCDF call) is returned, for the
    caller to run once it has released its netCDF lock.
    """

    def write(tmp):
        with _small_chunk_cache():
            fill(tmp)
        if late_attrs is not None:
            extra = _clean_attrs(late_attrs())
            if extra:
                import netCDF4

                with netCDF4.Dataset(tmp, "a") as nc:
                    nc.setncatts(extra)

    return atomic_file(path, write, defer_commit=defer_commit)


def write_dataset(ds: xr.Dataset, path, *, compress=True, history=None, attrs=None,
                  time_chunk: int = 4096, late_attrs=None) -> Path:
    """Write a dataset as a CF-1.8 netCDF-4 file, atomically.

    The data are written to a temporary file in the target folder, flushed to
    disk, then renamed over `path`; on any error the temporary file is removed
    and the target is left as it was. Dask-backed data are computed chunk by
    chunk while writing, with a small HDF5 chunk cache
    (:data:`WRITE_CHUNK_CACHE_BYTES` per variable), so memory does not grow
    with the length of the file.

    Parameters
    ----------
    ds : xarray.Dataset
        What to write (not modified).
    path : str or os.PathLike
        Target file.
    compress : bool or int
        zlib compression: True (level 4), False or 0 (none), or a level 1-9.
    history : str, optional
        One line for the global ``history`` attribute (a UTC time stamp is put
        in front); existing history is kept below it.
    attrs : dict, optional
        Extra global attributes (override those of `ds`).
    time_chunk : int
        Chunk length along ``time`` in the file.
    late_attrs : callable, optional
        Called after the data are written; the global attributes it returns
        are added before the file is flushed and renamed (e.g. a checksum of
        the input computed meanwhile in another thread).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    path = Path(path)
    out, encoding = _prepared(ds, _complevel(compress), history, attrs, time_chunk)

    def fill(tmp):
        out.to_netcdf(tmp, mode="w", format="NETCDF4", engine="netcdf4", encoding=encoding)

    return _atomic_write(path, fill, late_attrs)


def write_stream(slabs, path, *, count=None, compress=True, history=None, attrs=None,
                 time_chunk: int = 4096, finish=None, late_attrs=None, defer_commit=False):
    """Write datasets that follow one another in time as one CF-1.8 netCDF-4 file, atomically.

    The streaming counterpart of :func:`write_dataset` for data made piece by
    piece (a long file summarized one time slab at a time, so that memory
    does not grow with its length): the first slab creates the file, with
    ``time`` as its unlimited dimension and the encoding :func:`write_dataset`
    would give it, and each later slab is encoded the same way
    (:func:`xarray.conventions.encode_cf_variable`) and appended along
    ``time``. Variables without a ``time`` dimension come from the first slab.
    A single slab (``count=1``) is written as :func:`write_dataset` would,
    with a fixed ``time`` dimension. Same temporary file, flush and rename as
    :func:`write_dataset`.

    Parameters
    ----------
    slabs : iterable of xarray.Dataset
        Consecutive pieces along ``time``, each with the variables of the
        first (not modified); consumed once, while writing.
    path : str or os.PathLike
        Target file.
    count : int, optional
        Number of slabs, when known; 1 gives the file a fixed ``time``
        dimension (stored contiguously when uncompressed, the fastest to write).
    compress, history, attrs, time_chunk, late_attrs
        As for :func:`write_dataset` (``attrs`` and ``history`` are taken with
        the first slab's global attributes).
    finish : callable, optional
        Called once every slab is written; if it raises, the temporary file is
        removed and nothing is renamed into place (e.g. value checks summed
        over the slabs).
    defer_commit : bool
        Return, instead of running, the function that flushes the temporary
        file and renames it into place (it makes no netCDF call, so a caller
        holding a netCDF lock can release it first, or run it in another
        thread while it goes on with the next file).

    Returns
    -------
    pathlib.Path or callable
        The written file, or with ``defer_commit`` the function that puts it
        in place and returns its path (and removes the temporary on failure).
    """
    path = Path(path)
    complevel = _complevel(compress)

    def fill(tmp):
        import netCDF4

        pieces = iter(slabs)
        try:
            first = next(pieces)
        except StopIteration:
            raise ValueError(f"{path.name}: nothing to write (no slabs)") from None
        unlimited = ["time"] if ("time" in first.dims and count != 1) else None
        out, encoding = _prepared(first, complevel, history, attrs, time_chunk,
                                  chunked=True if unlimited else None)
        out.to_netcdf(tmp, mode="w", format="NETCDF4", engine="netcdf4", encoding=encoding,
                      unlimited_dims=unlimited)
        del out, first
        if unlimited is None:
            if next(pieces, None) is not None:
                raise ValueError(f"{path.name}: more slabs than the count of 1 given")
            if finish is not None:
                finish()
            return
        with netCDF4.Dataset(tmp, "a") as nc:
            nc.set_auto_maskandscale(False)  # the values are encoded by xarray below
            start = len(nc.dimensions["time"])
            for slab in pieces:
                n = slab.sizes.get("time", 0)
                for name, var in slab.variables.items():
                    if "time" not in var.dims:
                        continue
                    var = var.copy(deep=False)
                    var.attrs = {}
                    var.encoding = dict(encoding.get(name, {}))
                    raw = np.asarray(xr.conventions.encode_cf_variable(var, name=name).values)
                    where = tuple(slice(start, start + n) if d == "time" else slice(None)
                                  for d in var.dims)
                    nc.variables[name][where] = raw
                start += n
        if finish is not None:
            finish()

    return _atomic_write(path, fill, late_attrs, defer_commit=defer_commit)


def read_attributes(path) -> dict:
    """Return the global attributes of a netCDF file without reading its data.

    Returns an empty dict when the file cannot be opened (missing or damaged).
    """
    try:
        import netCDF4

        with netCDF4.Dataset(path, "r") as nc:
            return {k: nc.getncattr(k) for k in nc.ncattrs()}
    except (OSError, RuntimeError, ImportError):
        return {}
