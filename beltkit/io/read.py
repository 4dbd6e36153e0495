"""Opening a flux file: netCDF or CDF, through the mapping and the read-time rules.

:func:`open_indexed` (arrays read only where indexed) and :func:`open_flux`
(dask chunks along ``time``, or loaded) return a dataset with beltkit's
conventional names, units and layout, in this order:

1. the file is opened without decoding (netCDF through the ``netcdf4``
   engine, CDF through :func:`beltkit.io.cdf.open_cdf`);
2. the mapping's ``[variables]``, ``[dimensions]`` and ``[units]`` rename and
   re-unit (:func:`beltkit.io.mapping.apply_mapping`);
3. ``time`` is found on its dimension and decoded to UTC
   (:mod:`beltkit.io.timeaxis`);
4. fill values, valid ranges and packing of the other variables are applied
   (:mod:`beltkit.io.metadata`);
5. energies to keV, a record-varying energy table to ``channel_energy``,
   pitch angles to degrees with their bin edges (:mod:`beltkit.io.axes`);
6. positions in the declared form to ``position_geo`` (:mod:`beltkit.io.positions`);
7. flux, ``flux_err`` and ``read_flag`` by the fill, valid-range and quality
   rules, telescope conversion and common energy axis (:mod:`beltkit.io.product`).

A file that already follows the conventions passes every step unchanged.
Inputs are opened read-only and never modified.
"""

from __future__ import annotations

import inspect
from pathlib import Path

import xarray as xr

from ..errors import MappingError
from .axes import resolve_energy, resolve_pitch_angle
from .cdf import open_cdf
from .mapping import apply_mapping, load_mapping
from .metadata import decode_values
from .positions import resolve_position
from .product import resolve_flux
from .timeaxis import resolve_time

__all__ = ["is_cdf", "open_flux", "open_indexed", "open_raw"]

#: whether this xarray's open_dataset can skip the default indexes (newer releases only)
_NO_INDEX_OPTION = "create_default_indexes" in inspect.signature(xr.open_dataset).parameters
_CDF_MAGIC = (b"\xcd\xf3\x00\x01", b"\xcd\xf2\x60\x02", b"\x00\x00\xff\xff")
#: Variables the flux step reads as stored (the others are decoded in step 4).
_FLUX_INPUTS = ("flux", "flux_err", "counts", "count_rate", "quality", "time")


def is_cdf(path) -> bool:
    """Whether a file is a NASA CDF (``.cdf`` suffix or CDF magic number)."""
    path = Path(path)
    if path.suffix.lower() == ".cdf":
        return True
    try:
        with open(path, "rb") as fh:
            head = fh.read(4)
    except OSError:
        return False
    return head in _CDF_MAGIC


def open_raw(path, *, engine=None, indexes=True) -> xr.Dataset:
    """Open a netCDF or CDF file lazily with its values and attributes as stored.

    With ``indexes=False`` a netCDF file's dimension coordinates get no
    index (:func:`open_indexed` makes them once its names and time are
    final: building the index of a raw time axis that is then decoded
    and replaced is about a fifth of the opening).

    Raises
    ------
    OSError
        Missing or unreadable file; the message names the file.
    """
    path = Path(path)
    if not path.is_file():
        raise OSError(f"{path}: no such file")
    try:
        if is_cdf(path):
            return open_cdf(path)
        # lazily indexed arrays: a slab taken with isel reads only its own slice
        options = {} if indexes or not _NO_INDEX_OPTION else {"create_default_indexes": False}
        return xr.open_dataset(path, engine=engine or "netcdf4", chunks=None, cache=False,
                               mask_and_scale=False, decode_times=False,
                               decode_timedelta=False, **options)
    except (OSError, ValueError, KeyError, RuntimeError, IndexError) as exc:
        detail = str(exc).replace(f": '{path}'", "").replace(f": {path}", "")
        detail = detail.replace(str(path), path.name)
        raise OSError(f"{path.name}: cannot be read as netCDF or CDF ({detail})") from exc


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
        Mapping (:func:`beltkit.io.load_mapping`, ``docs/mapping.md``) for
        files that do not follow the conventions.
    chunks : "auto", dict or None
        Dask chunks. ``"auto"`` chunks along ``time`` only (dask picks the
        length); a dict is passed to :meth:`xarray.Dataset.chunk` after the
        mapping (so use conventional dimension names); None loads eagerly.
    engine : str, optional
        xarray netCDF engine; default ``"netcdf4"``.

    Returns
    -------
    xarray.Dataset
        The dataset, its ``source`` attribute set to the file name and its
        ``encoding["source"]`` to the full path; see :func:`open_indexed` for
        the read-time attributes.

    Raises
    ------
    OSError
        If the file cannot be read (missing, truncated, not netCDF or CDF);
        the message names the file.
    MappingError
        If the mapping is malformed or does not fit the file; the message
        names the file, the problem and the mapping key that fixes it.
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
    indexed arrays, so ``ds.isel(time=slice(a, b))`` followed by ``.values``
    reads (and masks, converts) just that slab. Same parameters and errors as
    :func:`open_flux`.

    Returns
    -------
    xarray.Dataset
        With, where the read-time rules acted: ``read_flag`` (uint8, flux's
        dims; bits 1 fill, 2 out of valid range, 4 quality rejected) and the
        attributes ``read_flag_count_fill``, ``read_flag_count_out_of_valid_range``,
        ``read_flag_count_quality_rejected``; ``pitch_angle_bnds_source``
        (``"bounds"``, ``"delta"`` or ``"centres"``) whenever there are pitch
        angles; ``channel_energy`` (time, energy) for a record-varying table.
    """
    path = Path(path)
    try:
        m = load_mapping(mapping) if mapping is not None else {}
    except MappingError as exc:  # name the data file too
        raise MappingError(f"{path.name}: {exc}") from None
    raw = open_raw(path, engine=engine, indexes=False)
    where = path.name + (f" (mapping {m['source']})" if m else "")
    ds = apply_mapping(raw, m, source=path.name) if m else raw
    ds = resolve_time(ds, m.get("time", {}), where=where)
    ds = decode_values(ds, [n for n in ds.variables if n not in _FLUX_INPUTS], where=where)
    ds = resolve_energy(ds, where=where)
    ds = resolve_pitch_angle(ds, m.get("pitch_angle", {}), where=where)
    ds = resolve_position(ds, m.get("position", {}), where=where)
    ds = resolve_flux(ds, m, where=where)
    untouched = ("counts",) if "read_flag" in ds.variables else ("flux", "flux_err", "counts")
    ds = decode_values(ds, [n for n in untouched if n in ds.variables], where=where)
    for name in [n for n in ds.dims if n in ds.coords and n not in ds.xindexes]:
        ds = ds.set_xindex(name)  # the indexes of the final dimension coordinates, once
    ds.attrs.setdefault("source", path.name)
    ds.encoding["source"] = str(path)
    return ds
