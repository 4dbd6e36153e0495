"""Survey inputs: the summaries listed, their headers read and checked to agree.

Only headers and time spans are read here (not the data), so that a survey
refuses bad or mismatched summaries in seconds, listing every problem at
once (:class:`beltkit.errors.SurveyError`), before the long binning starts.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import SurveyError
from .inputs import SUMMARY_SUFFIX, expand_inputs, one_line
from .survey_grid import LOG_SPREAD, SURVEY_VARIABLES

__all__ = ["check_summaries", "inspect_summary", "list_summaries"]

# how to get a binning variable a summary lacks
_FIXES = {
    "L": "summarize flux files that carry L, or position_geo with --field igrf",
    "mlt": "summarize flux files that carry mlt, or position_geo with --field igrf (the "
           "model then supplies MLT)",
    "position_geo": "summarize the flux files again (--overwrite) if they carry a geographic "
                    "position (position_geo, GEO km): summaries keep it since this version",
    "b_local": "summarize with a field model (--field igrf or --field dipole), which records "
               "the local field strength b_local",
}



def _shown(value):
    """Show a header attribute as a user reads it (``200.0``, not its numpy repr)."""
    if isinstance(value, np.generic):
        value = value.item()
    return repr(value)

def list_summaries(summaries) -> list:
    """Return the summary files named by paths, folders (their summaries) or glob patterns.

    Parameters
    ----------
    summaries : str, path or sequence of them
        Files or glob patterns (:func:`beltkit.batch.expand_inputs`), or
        folders, whose ``*.summary.nc`` files are taken in name order.

    Returns
    -------
    list of pathlib.Path

    Raises
    ------
    SurveyError
        If no summary is found.
    """
    if isinstance(summaries, (str, os.PathLike)):
        summaries = [summaries]
    files = []
    for item in summaries:
        if Path(str(item)).is_dir():
            files += sorted(Path(str(item)).glob("*" + SUMMARY_SUFFIX))
        else:
            files += expand_inputs([item])
    if not files:
        raise SurveyError(["no summary files given (or the folder holds none)"])
    return files


def inspect_summary(path: Path, axes, w_ns) -> dict:
    """Read a summary's header and time span (not its data); raise with what it lacks.

    Only the first and last time and the time windows holding samples are
    kept, so that the list of summaries costs memory per file, not per sample.

    Parameters
    ----------
    path : pathlib.Path
        A summary file.
    axes : list of beltkit.batch.survey_grid.Axis
        The binning's axes; each one's source variable must be per time.
    w_ns : int or None
        Time-window length (ns), or None for one window.

    Returns
    -------
    dict
        ``t_range`` (first, last time in ns, or None), ``wins`` (window
        numbers ``t // w_ns`` holding samples), ``energy``,
        ``energy_attrs``, ``energy_bnds``, ``vars`` (survey variables per time
        and energy), ``attrs`` (their attributes) and ``global`` (the file's).

    Raises
    ------
    ValueError
        If the file has no time and energy dimensions or lacks a binning
        variable (the message says how to get it).
    """
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        if "energy" not in ds.dims or "time" not in ds.dims:
            raise ValueError("has no time and energy dimensions (is it a beltkit summary "
                             "file?)")
        missing = []
        for ax in axes:
            src = ax.source
            ok = src in ds.variables and (ds[src].dims == ("time",) or (
                src == "position_geo" and ds[src].dims[0] == "time" and ds[src].ndim == 2))
            if not ok and src not in missing:
                missing.append(src)
        if missing:
            raise ValueError("; ".join(
                f"has no {m} for the {'/'.join(a.dim for a in axes)} binning: "
                + _FIXES.get(m, f"add {m} per time to the summaries") for m in missing))
        t = ds["time"].values.astype("datetime64[ns]").astype(np.int64)
        return {
            "t_range": (int(t.min()), int(t.max())) if t.size else None,
            "wins": np.unique(t // w_ns) if (w_ns is not None and t.size) else None,
            "energy": ds["energy"].values.astype(float),
            "energy_attrs": dict(ds["energy"].attrs),
            "energy_bnds": (ds["energy_bnds"].values if "energy_bnds" in ds.variables
                            else None),
            "vars": [n for n in SURVEY_VARIABLES
                     if n in ds.variables and set(ds[n].dims) == {"time", "energy"}],
            "attrs": {n: dict(ds[n].attrs) for n in SURVEY_VARIABLES if n in ds.variables},
            "global": dict(ds.attrs),
        }


def check_summaries(files, axes, w_ns) -> tuple:
    """Inspect every summary and check that they can be surveyed together.

    Parameters
    ----------
    files : list of pathlib.Path
        The summaries (:func:`list_summaries`).
    axes : list of beltkit.batch.survey_grid.Axis
        The binning's axes.
    w_ns : int or None
        Time-window length (ns), or None.

    Returns
    -------
    infos : list of (pathlib.Path, dict)
        Each file with its :func:`inspect_summary` result, in input order.
    names : list of str
        The survey variables present in every summary.

    Raises
    ------
    SurveyError
        Listing every file that cannot be read, lacks a binning variable or
        does not match the first one (energies, field model, footpoint
        altitude, diffusion settings when diffusion outputs are binned).
    """
    problems, infos = [], []
    for p in files:
        try:
            infos.append((p, inspect_summary(p, axes, w_ns)))
        except Exception as exc:  # every bad file is listed, then the survey is refused
            problems.append(f"{p}: {one_line(exc)}")
    names = []
    if infos:
        ref_path, ref = infos[0]
        for p, info in infos[1:]:
            if info["energy"].shape != ref["energy"].shape or not np.allclose(
                    info["energy"], ref["energy"], rtol=1e-6):
                problems.append(f"{p}: its energies differ from those of {ref_path}; survey "
                                f"files of one instrument setting at a time")
            for key in ("field_model", "footpoint_altitude_km"):
                if str(info["global"].get(key)) != str(ref["global"].get(key)):
                    fix = (" (model=\"auto\", --field auto, chooses per file: survey the "
                           "files of each model apart, or summarize them all with one --field)"
                           if key == "field_model" else "")
                    problems.append(f"{p}: {key} {_shown(info['global'].get(key))} differs from "
                                    f"{_shown(ref['global'].get(key))} in {ref_path}{fix}")
        names = [n for n in SURVEY_VARIABLES if all(n in i["vars"] for _, i in infos)]
        if any(n in LOG_SPREAD for n in names):  # D depends on these conventions
            for p, info in infos[1:]:
                for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma"):
                    if str(info["global"].get(key)) != str(ref["global"].get(key)):
                        problems.append(f"{p}: diffusion setting {key} "
                                        f"{_shown(info['global'].get(key))} differs from "
                                        f"{_shown(ref['global'].get(key))} in {ref_path}; "
                                        f"summarize them all with the same diffusion options")
        if not names:
            problems.append("the summaries share none of the variables "
                            + ", ".join(SURVEY_VARIABLES))
    if problems:
        raise SurveyError(problems)
    return infos, names
