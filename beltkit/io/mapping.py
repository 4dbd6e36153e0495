"""The mapping: a small TOML file that says how a foreign flux file fits beltkit.

A mapping is read and checked by :func:`load_mapping` (every key, every type;
all problems reported at once) and applied to a dataset's names by
:func:`apply_mapping`. The format, with one worked example per layout, is in
``docs/mapping.md``. Sections::

    [variables]   beltkit name = variable name in the file
    [units]       beltkit name = UDUNITS unit (overrides the file's)
    [dimensions]  beltkit dimension (time, energy, pitch_angle, look) = file dimension
    [time]        epoch = "1970-01-01T00:00:00", unit = "s"   (numeric time without CF units)
    [pitch_angle] outer_edges = [0.0, 180.0] or "half_spacing"; folded = true
    [energy]      common_kev = [100.0, 300.0, ...]   (one energy axis for a record-varying table)
    [quality]     reject_values = [...], reject_bits = [...], accept_values = [...],
                  reject_meanings = [...]   (CF flag_meanings of the quality variable)
    [position]    form = "geodetic" or "cartesian"; frame = "GEO", "GSE", "GSM", "SM" or "GEI"
    [telescope]   geometric_factor = 0.01 (cm2 sr), accumulation_time_s = 1.0,
                  dead_time_s = 2e-6, efficiency = 0.9   (numbers; or variables of these names)
    [valid]       flux = [min, max]   (a valid range in the file's units, beside the file's own)

The first three sections are the original format and keep their meaning.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Mapping
from pathlib import Path

import xarray as xr

from ..errors import MappingError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = [
    "FRAMES",
    "MAPPING_NAMES",
    "MAPPING_SECTIONS",
    "apply_mapping",
    "load_mapping",
]

#: Conventional names a mapping may assign in ``[variables]`` and ``[units]``.
MAPPING_NAMES = (
    "time",
    "flux",
    "flux_err",
    "counts",
    "counts_to_flux",
    "count_rate",
    "accumulation_time",
    "geometric_factor",
    "energy_width",
    "dead_time",
    "efficiency",
    "energy",
    "energy_bnds",
    "energy_delta_plus",
    "energy_delta_minus",
    "pitch_angle",
    "pitch_angle_bnds",
    "pitch_angle_delta_plus",
    "pitch_angle_delta_minus",
    "quality",
    "L",
    "mlat",
    "mlt",
    "b_local",
    "position_geo",
    "position",
    "latitude",
    "longitude",
    "altitude",
    "look",
    "look_pitch_angle",
    "look_half_angle",
)
_STRING_SECTIONS = ("variables", "units", "dimensions")
_DIMENSIONS = ("time", "energy", "pitch_angle", "look")
#: Cartesian frames a ``[position] frame`` may name (GEI: mean equator and equinox of date).
FRAMES = ("GEO", "GSE", "GSM", "SM", "GEI")
_TIME_UNITS = ("ns", "us", "ms", "s", "min", "h", "d")


def _number(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _numbers(v):
    return isinstance(v, list) and bool(v) and all(_number(x) for x in v)


def _ints(v):
    return isinstance(v, list) and bool(v) and all(
        isinstance(x, int) and not isinstance(x, bool) for x in v)


def _strings(v):
    return isinstance(v, list) and bool(v) and all(isinstance(x, str) and x for x in v)


def _is_iso_time(v):
    import numpy as np

    try:
        np.datetime64(str(v).replace("Z", ""), "ns")
    except ValueError:
        return False
    return True


#: Section -> key -> (check, what the value must be).
_TABLES = {
    "time": {
        "epoch": (lambda v: isinstance(v, str) and _is_iso_time(v),
                  'an ISO UTC time string such as "1970-01-01T00:00:00"'),
        "unit": (lambda v: v in _TIME_UNITS, f"one of {', '.join(_TIME_UNITS)}"),
    },
    "pitch_angle": {
        "outer_edges": (lambda v: v == "half_spacing" or (
            _numbers(v) and len(v) == 2 and 0 <= v[0] < v[1] <= 180),
            '"half_spacing" or [lower, upper] in degrees within 0-180'),
        "folded": (lambda v: isinstance(v, bool), "true or false"),
    },
    "energy": {
        "common_kev": (lambda v: _numbers(v) and all(x > 0 for x in v)
                       and all(a < b for a, b in zip(v, v[1:])),
                       "a list of increasing positive energies in keV"),
    },
    "quality": {
        "reject_values": (_ints, "a list of integers"),
        "accept_values": (_ints, "a list of integers"),
        "reject_bits": (lambda v: _ints(v) and all(0 <= x < 63 for x in v),
                        "a list of bit numbers 0-62 (0 = least significant)"),
        "reject_meanings": (_strings, "a list of the quality variable's flag_meanings words"),
    },
    "position": {
        "form": (lambda v: v in ("geodetic", "cartesian"), '"geodetic" or "cartesian"'),
        "frame": (lambda v: isinstance(v, str) and v.upper() in FRAMES,
                  f"one of {', '.join(FRAMES)}"),
    },
    "telescope": {
        "geometric_factor": (lambda v: _number(v) and v > 0, "a positive number in cm2 sr"),
        "accumulation_time_s": (lambda v: _number(v) and v > 0, "a positive number of seconds"),
        "dead_time_s": (lambda v: _number(v) and v >= 0, "a non-negative number of seconds"),
        "efficiency": (lambda v: _number(v) and 0 < v <= 1, "a number in (0, 1]"),
    },
}
_VALID_NAMES = ("flux", "flux_err", "counts", "count_rate")
#: Every section a mapping may have.
MAPPING_SECTIONS = _STRING_SECTIONS + tuple(_TABLES) + ("valid",)


def _read_raw(mapping, source):
    if isinstance(mapping, (str, os.PathLike)):
        path = Path(mapping)
        where = str(path)
        try:
            with open(path, "rb") as fh:
                return tomllib.load(fh), where
        except FileNotFoundError:
            raise MappingError(f"mapping file {where} does not exist") from None
        except tomllib.TOMLDecodeError as exc:
            raise MappingError(f"mapping file {where} is not valid TOML: {exc}") from None
    if isinstance(mapping, Mapping):
        return dict(mapping), source or "mapping dict"
    raise MappingError(
        f"mapping must be a path to a TOML file or a dict, got {type(mapping).__name__}")


def load_mapping(mapping, *, source=None) -> dict:
    """Read and check a mapping.

    Parameters
    ----------
    mapping : str, os.PathLike or dict
        Path of a TOML file, or a dict with the same sections (see the module
        notes and ``docs/mapping.md``). An already checked mapping (a dict
        with a ``"source"`` key, as returned here) is returned unchanged.
    source : str, optional
        Name used in error messages for a dict mapping.

    Returns
    -------
    dict
        One entry per section of :data:`MAPPING_SECTIONS` (empty when not
        given) plus ``"source"``. ``variables``, ``units`` and ``dimensions``
        map a conventional name to a string.

    Raises
    ------
    MappingError
        If the file cannot be read or parsed, a section or key is unknown, or
        a value has the wrong type. The message names the mapping, the section
        and the key, and what the value must be.
    """
    if isinstance(mapping, Mapping) and "source" in mapping and "variables" in mapping:
        return mapping  # already checked
    raw, where = _read_raw(mapping, source)
    problems = []
    out = {s: {} for s in MAPPING_SECTIONS}
    out["source"] = where
    for section, body in raw.items():
        if section not in MAPPING_SECTIONS:
            problems.append(
                f"unknown section [{section}] (known: {', '.join(MAPPING_SECTIONS)})")
            continue
        if not isinstance(body, Mapping):
            problems.append(f"[{section}] must be a table of key = value entries")
            continue
        for key, value in body.items():
            problem = _check_entry(section, key, value)
            if problem:
                problems.append(f"[{section}] {key}: {problem}")
            else:
                out[section][key] = value.strip() if isinstance(value, str) else value
    targets = list(out["variables"].values())
    for name in sorted({t for t in targets if targets.count(t) > 1}):
        problems.append(f"[variables]: file variable {name!r} is assigned to several names")
    if out["position"].get("form") == "cartesian" and "frame" not in out["position"]:
        problems.append('[position] frame: needed with form = "cartesian" '
                        f"(one of {', '.join(FRAMES)})")
    if problems:
        raise MappingError(f"mapping {where}: " + "; ".join(problems))
    return out


def _check_entry(section, key, value):
    """Return what is wrong with one entry, or None."""
    if section in _STRING_SECTIONS:
        allowed = _DIMENSIONS if section == "dimensions" else MAPPING_NAMES
        if key not in allowed:
            return f"not a beltkit name (known: {', '.join(allowed)})"
        if not isinstance(value, str) or not value.strip():
            return f"value must be a non-empty string, got {value!r}"
        return None
    if section == "valid":
        if key not in _VALID_NAMES:
            return f"not a variable with a valid range (known: {', '.join(_VALID_NAMES)})"
        if not (_numbers(value) and len(value) == 2 and value[0] < value[1]):
            return f"value must be [min, max] in the file's units, got {value!r}"
        return None
    table = _TABLES[section]
    if key not in table:
        return f"unknown key (known: {', '.join(table)})"
    check, what = table[key]
    if not check(value):
        return f"value must be {what}, got {value!r}"
    return None


def apply_mapping(ds: xr.Dataset, mapping, *, source=None) -> xr.Dataset:
    """Rename a dataset's variables and dimensions and set units per a mapping.

    Only the ``[variables]``, ``[units]`` and ``[dimensions]`` sections act
    here; the others are read-time rules applied by :func:`beltkit.io.open_indexed`.

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
    m = load_mapping(mapping)
    where = f"{source or 'dataset'} with mapping {m['source']}"
    problems = []
    var_renames = {}
    for name, in_file in m["variables"].items():
        if in_file not in ds.variables:
            near = _near(in_file, ds.variables)
            problems.append(f"[variables] {name} = {in_file!r}: no such variable in the "
                            f"file{near}")
        elif in_file != name:
            var_renames[in_file] = name
    dim_renames = {}
    for name, in_file in m["dimensions"].items():
        if in_file not in ds.dims:
            problems.append(f"[dimensions] {name} = {in_file!r}: no such dimension in the "
                            f"file (dimensions: {', '.join(map(str, ds.dims))})")
        elif in_file != name:
            dim_renames[in_file] = name
    for name in m["units"]:
        if not (name in m["variables"] or name in ds.variables):
            problems.append(f"[units] {name}: no variable of that name in the file or mapping")
    for old, new in var_renames.items():
        if new in ds.variables and new not in var_renames:
            problems.append(
                f"[variables] {new} = {old!r}: the file already has a variable named {new!r}")
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


def _near(name, names):
    import difflib

    close = difflib.get_close_matches(name, [str(n) for n in names], n=3)
    return f" (similar: {', '.join(close)})" if close else ""
