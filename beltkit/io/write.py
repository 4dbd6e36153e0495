"""Writing CF-1.8 netCDF files atomically, and file checksums.

:func:`write_dataset` writes a CF-1.8 netCDF-4 file compressed with zlib and
chunked along ``time`` (or uncompressed and contiguous); :func:`write_stream`
writes one from consecutive slabs along ``time``. Both write into a
temporary file in the target folder through :func:`beltkit.atomic.atomic_file`
(named ``.<output name>.beltkit-<random>.tmp``, so leftovers are easy to find
and :func:`beltkit.atomic.remove_stale_temporaries` can remove them) and rename
it over the target with :func:`os.replace` only once it is complete, so a
reader never sees a half-written file, even when the writing process is killed.

:func:`sha256` is the checksum recorded in every output for its input;
:func:`read_attributes` reads the global attributes of a written file.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from ..atomic import atomic_file

__all__ = [
    "DEFAULT_COMPLEVEL",
    "compress_level",
    "WRITE_CHUNK_CACHE_BYTES",
    "read_attributes",
    "sha256",
    "write_dataset",
    "write_stream",
]


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


#: zlib level of ``compress=True`` and of the commands' ``--compression`` default.
#: Outputs are float32 with the byte shuffle filter, whose noisy low mantissa bytes
#: no zlib level squeezes: level 1 writes a day's summary within about 1 % of level
#: 4's size (demo: 633,874 against 627,888 bytes) in about a third of the time
#: (0.57 s against 2.02 s), so higher levels cost time for nothing.
DEFAULT_COMPLEVEL = 1

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


def compress_level(compress) -> int:
    """Return the zlib level that a ``compress`` argument means.

    Parameters
    ----------
    compress : bool, int or None
        True (:data:`DEFAULT_COMPLEVEL`), False, None or 0 (no compression),
        or a level 0-9.

    Returns
    -------
    int
        The level, 0-9.

    Raises
    ------
    ValueError
        For a level outside 0-9.

    Examples
    --------
    >>> compress_level(True), compress_level(False), compress_level(6)
    (1, 0, 6)
    """
    if compress is True:
        return DEFAULT_COMPLEVEL
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
        zlib compression: True (level :data:`DEFAULT_COMPLEVEL`, 1), False or 0
        (none), or a level 1-9.
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
    out, encoding = _prepared(ds, compress_level(compress), history, attrs, time_chunk)

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
    complevel = compress_level(compress)

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
