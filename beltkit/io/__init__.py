"""Reading flux files as they come, and writing CF-1.8 netCDF files safely.

Readers
-------
:func:`open_flux` opens a flux file lazily (dask chunks along ``time``;
:func:`open_indexed` without dask, each slab read where it is indexed) and
returns an :class:`xarray.Dataset` that follows beltkit's data conventions
(``docs/conventions.md``):

* netCDF files (netCDF-4/HDF5 or classic) through the ``netcdf4`` engine;
* NASA CDF files through :mod:`cdflib` (:mod:`beltkit.io.cdf`; ISTP metadata
  and the CDF time types);
* files whose names or layout do not follow the conventions through a
  *mapping*, a small TOML file (:mod:`beltkit.io.mapping`,
  ``docs/mapping.md``)::

      [variables]                  # beltkit name = name in the file
      time = "t_utc"
      flux = "eflux_pa"
      energy = "eflux_pa_energy"
      pitch_angle = "eflux_pa_angle"

      [time]                       # numeric time without CF units
      epoch = "1970-01-01T00:00:00"
      unit = "s"

At read time (:mod:`beltkit.io.read`) CF and ISTP fill values and valid
ranges mask samples, recorded in ``read_flag``; a quality variable is judged
by the mapping's rule; units become keV, degrees and ``cm-2 s-1 sr-1 keV-1``;
pitch-angle bin edges come from bounds, ISTP deltas or the centres; positions
in any common form become ``position_geo``; telescope count rates become flux.
:func:`suggest_mapping` writes a commented mapping from a file's metadata.

Inputs are opened read-only and never modified.

Writer
------
:func:`write_dataset` and :func:`write_stream` write CF-1.8 netCDF-4 files
atomically (:mod:`beltkit.io.write`); :func:`sha256` is the checksum recorded
in every output for its input.
"""

from ..atomic import TEMP_SUFFIX, remove_stale_temporaries, temporary_name
from ..errors import MappingError
from .cdf import open_cdf
from .mapping import MAPPING_NAMES, MAPPING_SECTIONS, apply_mapping, load_mapping
from .metadata import READ_FLAG_BITS, READ_FLAG_MEANINGS
from .read import open_flux, open_indexed
from .suggest import suggest_mapping, write_suggested_mapping
from .write import WRITE_CHUNK_CACHE_BYTES, read_attributes, sha256, write_dataset, write_stream

__all__ = [
    "MAPPING_NAMES",
    "MAPPING_SECTIONS",
    "MappingError",
    "READ_FLAG_BITS",
    "READ_FLAG_MEANINGS",
    "TEMP_SUFFIX",
    "WRITE_CHUNK_CACHE_BYTES",
    "apply_mapping",
    "load_mapping",
    "open_cdf",
    "open_flux",
    "open_indexed",
    "read_attributes",
    "remove_stale_temporaries",
    "sha256",
    "suggest_mapping",
    "temporary_name",
    "write_dataset",
    "write_stream",
    "write_suggested_mapping",
]
