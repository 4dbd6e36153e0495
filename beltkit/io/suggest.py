"""A mapping written from a file's own metadata, with every guess marked.

:func:`suggest_mapping` reads a netCDF or CDF file's ISTP/CF metadata (no
data beyond the small axes) and returns the text of a mapping
(``docs/mapping.md``) that makes the file readable. What the metadata state
(``DEPEND_0/1/2``, CF ``units``, ``bounds``, ``DELTA_*_VAR``, a time type) is
written as a plain entry; what had to be chosen by name or by unit alone is
marked ``# GUESS: ...``; what cannot be known (the epoch of a numeric time
without units, the outer edges of an asymmetric set of pitch-angle centres) is
written as a commented-out entry with ``# NEEDED: ...``, so that reading with
the mapping as written fails with a message naming that key.
"""

from __future__ import annotations

import re

import numpy as np

from ..atomic import atomic_file
from ..units import FLUX_UNITS, conversion_factor
from .read import open_raw

__all__ = ["suggest_mapping", "write_suggested_mapping"]

_ERR_WORDS = re.compile(r"(err|unc|sigma|delta|std)", re.I)


def _units(var):
    return str(var.attrs.get("units", var.attrs.get("UNITS", "")))


def _kind(var):
    """Return what a variable's units make it: flux, energy, angle, time-of-day, length, ..."""
    u = _units(var)
    if var.dtype.kind == "M":
        return "time"
    if " since " in u:
        return "time"
    for kind, want in (("flux", FLUX_UNITS), ("energy", "keV"), ("angle", "degree"),
                       ("hours", "hour"), ("length", "km"), ("rate", "s-1")):
        if u and conversion_factor(u, want) is not None:
            return kind
    return None


def _q(s):
    return '"' + str(s).replace("\\", "\\\\").replace('"', '\\"') + '"'


def suggest_mapping(path) -> str:
    """Return a commented TOML mapping for a file, built from its metadata.

    Parameters
    ----------
    path : str or os.PathLike
        A netCDF or CDF flux file (read, never modified).

    Returns
    -------
    str
        TOML text: ``[variables]``, ``[dimensions]`` and, where needed,
        ``[time]`` and ``[pitch_angle]`` entries; comments mark each guess
        (``# GUESS``) and each value the file does not give (``# NEEDED``).

    Raises
    ------
    OSError
        The file cannot be read.
    """
    ds = open_raw(path)
    from pathlib import Path

    lines = [f"# mapping suggested by beltkit from the metadata of {Path(path).name}",
             "# entries marked GUESS were chosen by name or unit alone: check them;",
             "# entries marked NEEDED are not in the file: fill them in and uncomment.", ""]
    variables, dims, notes = {}, {}, {}
    kinds = {n: _kind(v) for n, v in ds.variables.items()}
    fluxes = [n for n, k in kinds.items() if k == "flux" and ds[n].ndim >= 2]
    main = [n for n in fluxes if not _ERR_WORDS.search(str(n))]
    flux = max(main or fluxes, key=lambda n: (ds[n].ndim, ds[n].size), default=None)
    role = "flux"
    if flux is None:
        rates = [n for n, k in kinds.items() if k == "rate" and ds[n].ndim >= 2]
        flux = max(rates, key=lambda n: (ds[n].ndim, ds[n].size), default=None)
        role = "count_rate"
    if flux is None:
        lines.append("# no variable with differential-flux units (cm-2 s-1 sr-1 keV-1 or "
                     "equivalent) or count-rate units (s-1) was found;")
        lines.append("# NEEDED: [variables] flux = \"...\" and [units] flux = \"...\"")
        return "\n".join(lines) + "\n"
    variables[role] = flux
    if role == "count_rate":
        notes[role] = "GUESS: the largest variable in count-rate units (a telescope archive)"
    fv = ds[flux]
    if len(main) > 1 or (not main and len(fluxes) > 1):
        notes["flux"] = f"GUESS: the largest of {', '.join(map(str, main or fluxes))}"
    # time: DEPEND_0, else the datetime/CF-time variable on the flux's first dimension
    dep0 = fv.attrs.get("DEPEND_0")
    time = str(dep0) if dep0 in ds.variables else None
    if time is None:
        cands = [n for n, k in kinds.items() if k == "time" and ds[n].ndim == 1
                 and ds[n].dims[0] in fv.dims]
        if not cands:
            cands = [n for n in ds.variables if ds[n].ndim == 1 and ds[n].dims[0] == fv.dims[0]
                     and re.search(r"(^t$|^t_|time|epoch)", str(n), re.I)]
            if cands:
                notes["time"] = "GUESS: by name"
        time = cands[0] if cands else None
    if time is not None:
        variables["time"] = time
        tdim = ds[time].dims[0]
    else:
        notes["time"] = "NEEDED: no time variable found"
        tdim = fv.dims[0]
    # the flux's other axes, from DEPEND_i or from 1-D variables on its dimensions
    for axis, d in enumerate(fv.dims):
        if d == tdim:
            continue
        dep = fv.attrs.get(f"DEPEND_{axis}") if "DEPEND_0" in fv.attrs else None
        cand = str(dep) if dep in ds.variables else None
        if cand is None:
            on_dim = [n for n in ds.variables if d in ds[n].dims and n != flux and (
                (ds[n].ndim == 1 and kinds.get(n) in ("energy", "angle"))
                or (ds[n].ndim == 2 and kinds.get(n) == "energy" and tdim in ds[n].dims))]
            cand = on_dim[0] if on_dim else None
        if cand is None:
            continue
        kind = kinds.get(cand)
        axis_role = {"energy": "energy", "angle": "pitch_angle"}.get(kind)
        if axis_role is None or (role == "count_rate" and axis_role == "pitch_angle"):
            continue  # a telescope's other axis is its looks
        variables[axis_role] = cand
        if dep is None:
            notes[axis_role] = f"GUESS: the {kind} variable on dimension {d}"
        if d != cand and ds[cand].ndim == 1:
            dims[axis_role] = d
    telescope = _telescope_entries(ds, fv, tdim, kinds, variables, dims, notes) \
        if role == "count_rate" else []
    # uncertainty
    dplus = fv.attrs.get("DELTA_PLUS_VAR")
    errs = [n for n in fluxes if n != flux and _ERR_WORDS.search(str(n))
            and ds[n].dims == fv.dims]
    if dplus in ds.variables:
        variables["flux_err"] = str(dplus)
        notes["flux_err"] = "GUESS: the flux's DELTA_PLUS_VAR taken as its 1-sigma error"
    elif errs:
        variables["flux_err"] = errs[0]
        notes["flux_err"] = "GUESS: by name"
    # position variables by name and unit (always guesses)
    patterns = (("L", r"^(l|lshell|l_shell|lm|l_dip.*|lshell.*)$", (None, "length")),
                ("mlat", r"(mlat|mag.*lat|lat.*mag)", ("angle",)),
                ("mlt", r"(mlt|mag.*local.*time)", ("hours",)),
                ("latitude", r"^(g|geo\w*?)?_?lat(itude)?(_\w*)?$", ("angle",)),
                ("longitude", r"^(g|geo\w*?)?_?lon(gitude)?(_\w*)?$", ("angle",)),
                ("altitude", r"^(g|geo\w*?)?_?(alt|altitude|height)(_\w*)?$", ("length",)))
    for key, pat, ok in patterns:
        for n in ds.variables:
            if (re.search(pat, str(n), re.I) and kinds.get(n) in ok and ds[n].ndim == 1
                    and ds[n].dims[0] == tdim and n not in variables.values()):
                variables[key] = str(n)
                notes[key] = "GUESS: by name and unit"
                break
    lines.append("[variables]")
    for key, name in variables.items():
        note = notes.get(key)
        lines.append(f"{key} = {_q(name)}" + (f"  # {note}" if note else ""))
    if "time" not in variables:
        lines.append(f"# time = \"...\"  # {notes.get('time', 'NEEDED')}")
    if dims:
        lines += ["", "[dimensions]"]
        lines += [f"{key} = {_q(d)}" for key, d in dims.items()]
    if time is not None and ds[time].dtype.kind in "iuf" and " since " not in _units(ds[time]):
        lines += ["", "[time]",
                  f"# NEEDED: {time} is numeric without CF units; say what it counts from:",
                  '# epoch = "1970-01-01T00:00:00"', '# unit = "s"']
    lines += telescope
    for n, v in ds.variables.items():
        if "flag_meanings" in v.attrs and tdim in v.dims:
            lines += ["", f"# {n} holds quality flags ({v.attrs['flag_meanings']}); to mask "
                      "samples by them, add", f'#   quality = "{n}"   (under [variables])',
                      "#   [quality]", '#   reject_meanings = ["..."]']
            break
    if "energy" in variables and ds[variables["energy"]].ndim == 2:
        lines += ["", "# the energy table varies from record to record: it is read as",
                  "# channel_energy (time, energy); for one common axis add",
                  "# [energy]", "# common_kev = [...]"]
    vectors = [n for n, k in kinds.items() if k == "length" and ds[n].ndim == 2
               and tdim in ds[n].dims and 3 in ds[n].shape and n not in variables.values()]
    if vectors and "latitude" not in variables:
        name = str(vectors[0])
        frame = next((f for f in ("GSM", "GSE", "GEI", "GEO", "SM")
                      if re.search(rf"(^|_){f}($|_)", name, re.I)), None)
        lines[lines.index("[variables]") + 1:lines.index("[variables]") + 1] = [
            f"position = {_q(name)}  # GUESS: the (time, 3) variable in length units"]
        lines += ["", "[position]", 'form = "cartesian"']
        lines.append(f'frame = "{frame}"  # GUESS: from the name' if frame else
                     '# frame = "GSM"  # NEEDED: GEO, GSE, GSM, SM or GEI')
    if {"latitude", "longitude", "altitude"} <= set(variables):
        lines += ["", "[position]", 'form = "geodetic"  # GUESS: latitude/longitude/altitude '
                  "by name"]
    pa = variables.get("pitch_angle")
    if pa is not None and ds[pa].ndim == 1:
        pav = ds[pa]
        has_edges = str(pav.attrs.get("bounds", "")) in ds.variables or (
            pav.attrs.get("DELTA_PLUS_VAR") in ds.variables
            and pav.attrs.get("DELTA_MINUS_VAR") in ds.variables)
        if not has_edges:
            f = conversion_factor(_units(pav), "degree") or 1.0
            c = np.asarray(pav.values, float) * f
            if not (c.size > 1 and np.allclose(c + c[::-1], 180.0, atol=1e-4)):
                lines += ["", "[pitch_angle]",
                          "# NEEDED: pitch-angle centres without edges and not symmetric about "
                          "90 deg; state the outer edges:",
                          "# outer_edges = [0.0, 180.0]  # or \"half_spacing\""]
    return "\n".join(lines) + "\n"


def _telescope_entries(ds, fv, tdim, kinds, variables, dims, notes):
    """Find the look geometry and geometric factor of a count-rate archive; return lines."""
    known = {variables.get("energy")}
    edim = ds[variables["energy"]].dims[-1] if "energy" in variables else None
    look = next((d for d in fv.dims if d not in (tdim, edim)), None)
    lines = ["", "[telescope]"]
    if look is not None:
        if look != "look":
            dims["look"] = look
        for n, v in ds.variables.items():
            if kinds.get(n) != "angle" or n in known:
                continue
            if v.dims == (tdim, look) and "look_pitch_angle" not in variables:
                variables["look_pitch_angle"] = str(n)
                notes["look_pitch_angle"] = "GUESS: the (time, look) angle"
            elif v.dims == (look,) and "look_half_angle" not in variables:
                variables["look_half_angle"] = str(n)
                notes["look_half_angle"] = "GUESS: the per-look angle taken as half-angle"
    gf = [n for n in ds.variables if _units(ds[n]) and n != fv.name
          and conversion_factor(_units(ds[n]), "cm2 sr") is not None]
    if gf:
        variables["geometric_factor"] = str(gf[0])
        notes["geometric_factor"] = "GUESS: the variable in cm2 sr"
    else:
        lines.append("# geometric_factor = 0.01  # NEEDED: cm2 sr")
    lines.append("# accumulation_time_s = 1.0  # for Poisson errors; dead_time_s, efficiency "
                 "if known")
    return lines


def write_suggested_mapping(path, out):
    """Write :func:`suggest_mapping`'s text for `path` to `out` atomically; return `out`.

    Raises
    ------
    OSError
        The input cannot be read, or `out` cannot be written (the message
        names the file).
    """
    text = suggest_mapping(path)

    def fill(tmp):
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)

    try:
        return atomic_file(out, fill)
    except OSError as exc:
        raise OSError(f"{out}: cannot write the mapping ({exc.strerror or exc})") from exc
