"""Summaries to a binned survey: statistics per L x MLT (x time-window) cell and energy."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import SurveyError
from ..io import remove_stale_temporaries, sha256, write_dataset
from .inputs import SUMMARY_SUFFIX, expand_inputs, one_line

__all__ = ["SURVEY_VARIABLES", "survey"]

#: Variables of a summary that :func:`survey` bins (those present are used).
SURVEY_VARIABLES = (
    "fraction_precipitating",
    "fraction_quasi_trapped",
    "fraction_trapped",
    "flux_precipitating",
    "flux_quasi_trapped",
    "flux_trapped",
    "fraction_lost_north",
    "fraction_lost_south",
    "flux_lost_north",
    "flux_lost_south",
    "omni_flux",
    "loss_cone_filling",
    "diffusion_coefficient",
    "z0",
    "lifetime",
)
#: Survey variables that span decades: their median is the meaningful statistic.
_LOG_SPREAD = ("diffusion_coefficient", "z0", "lifetime")


def _edges(values, default, name):
    edges = np.asarray(default if values is None else values, dtype=float)
    if edges.ndim != 1 or edges.size < 2 or not np.all(np.diff(edges) > 0):
        raise ValueError(f"{name} must be at least two strictly increasing bin edges, "
                         f"got {values!r}")
    return edges


def _window_ns(time_window):
    if time_window is None:
        return None
    import pandas as pd

    try:
        w = pd.to_timedelta(time_window)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"time_window {time_window!r} is not a duration (e.g. '1D', '6h', "
                         f"'90min')") from exc
    if w <= pd.Timedelta(0):
        raise ValueError(f"time_window must be positive, got {time_window!r}")
    return int(w.value)


def _grouped_stats(cell, values, n_cells):
    """Count, mean, median, std (ddof=1), IQR per cell; NaN where a cell has too few."""
    count = np.bincount(cell, minlength=n_cells)
    total = np.bincount(cell, weights=values, minlength=n_cells)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / count
        dev2 = np.bincount(cell, weights=(values - mean[cell]) ** 2, minlength=n_cells)
        std = np.sqrt(dev2 / (count - 1))
    std[count < 2] = np.nan
    order = np.lexsort((values, cell))
    sorted_v = values[order]
    start = np.concatenate([[0], np.cumsum(count)[:-1]])

    def quantile(q):
        pos = start + (count - 1) * q
        lo = np.floor(pos).astype(np.int64)
        hi = np.ceil(pos).astype(np.int64)
        ok = count > 0
        res = np.full(n_cells, np.nan)
        frac = pos[ok] - lo[ok]
        res[ok] = sorted_v[lo[ok]] * (1 - frac) + sorted_v[hi[ok]] * frac
        return res

    median = quantile(0.5)
    iqr = quantile(0.75) - quantile(0.25)
    return count, mean, median, std, iqr


def _read_summary(path: Path, names):
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        problems = [f"has no {v}" for v in ("L", "mlt") if v not in ds.variables]
        if "energy" not in ds.dims:
            problems.append("has no energy dimension")
        if problems:
            raise ValueError(", ".join(problems) + " (is it a beltkit summary file?)")
        present = [n for n in names if n in ds.variables]
        info = {
            "time": ds["time"].values.astype("datetime64[ns]"),
            "L": ds["L"].values.astype(float),
            "mlt": ds["mlt"].values.astype(float),
            "energy": ds["energy"].values.astype(float),
            "energy_attrs": dict(ds["energy"].attrs),
            "energy_bnds": (ds["energy_bnds"].values if "energy_bnds" in ds.variables
                            else None),
            "vars": {n: ds[n].transpose("time", "energy").values.astype(float)
                     for n in present if set(ds[n].dims) == {"time", "energy"}},
            "attrs": {n: dict(ds[n].attrs) for n in present},
            "global": dict(ds.attrs),
        }
    return info


def survey(summaries, out_file, *, l_edges=None, mlt_edges=None, time_window=None,
           compress=True, command=None) -> Path:
    """Bin summaries onto an L x MLT (x time-window) grid and write the survey file.

    Parameters
    ----------
    summaries : str, path or sequence of them
        Summary files, folders (their ``*.summary.nc``) or glob patterns.
    out_file : str or path
        The survey netCDF file to write (atomically).
    l_edges : array_like, optional
        L bin edges (default 1 to 8 in steps of 0.5). Samples outside are dropped.
    mlt_edges : array_like, optional
        MLT bin edges in hours within 0-24 (default hourly).
    time_window : str or timedelta, optional
        Length of the time windows (``"1D"``, ``"6h"``; windows aligned on
        1970-01-01 UTC). None: one window spanning all samples.
    compress : bool or int
        zlib compression.
    command : str, optional
        Command line recorded in ``history``.

    Returns
    -------
    pathlib.Path
        `out_file`.

    Raises
    ------
    SurveyError
        If any summary cannot be read or does not match the others (energies,
        field model, footpoint altitude); every bad file is listed and nothing
        is written.

    Notes
    -----
    For each variable ``v`` of :data:`SURVEY_VARIABLES` present in the
    summaries, the survey holds ``v_count``, ``v_mean``, ``v_median``,
    ``v_std`` (sample standard deviation) and ``v_iqr`` (75th minus 25th
    percentile, linear interpolation), dims ``(time, energy, L, mlt)``. Only
    finite values count. The statistics are exact, so all binned values are
    held in memory at once (16 bytes per finite value).
    """
    l_edges = _edges(l_edges, np.arange(1.0, 8.01, 0.5), "l_edges")
    mlt_edges = _edges(mlt_edges, np.arange(0.0, 24.01, 1.0), "mlt_edges")
    if mlt_edges[0] < 0 or mlt_edges[-1] > 24:
        raise ValueError(f"mlt_edges must lie within 0-24 h, got {mlt_edges[0]}-{mlt_edges[-1]}")
    w_ns = _window_ns(time_window)
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
    problems, infos = [], []
    for p in files:
        try:
            infos.append((p, _read_summary(p, SURVEY_VARIABLES)))
        except Exception as exc:  # every bad file is listed, then the survey is refused
            problems.append(f"{p}: {one_line(exc)}")
    if infos:
        ref_path, ref = infos[0]
        for p, info in infos[1:]:
            if info["energy"].shape != ref["energy"].shape or not np.allclose(
                    info["energy"], ref["energy"], rtol=1e-6):
                problems.append(f"{p}: its energies differ from those of {ref_path}; survey "
                                f"files of one instrument setting at a time")
            for key in ("field_model", "footpoint_altitude_km"):
                if str(info["global"].get(key)) != str(ref["global"].get(key)):
                    fix = (" (field=\"auto\" chooses per file: survey the files of each "
                           "model apart, or summarize them all with one --field)"
                           if key == "field_model" else "")
                    problems.append(f"{p}: {key} {info['global'].get(key)!r} differs from "
                                    f"{ref['global'].get(key)!r} in {ref_path}{fix}")
        names = [n for n in SURVEY_VARIABLES if all(n in i["vars"] for _, i in infos)]
        if any(n in _LOG_SPREAD for n in names):  # D depends on these conventions
            for p, info in infos[1:]:
                for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma"):
                    if str(info["global"].get(key)) != str(ref["global"].get(key)):
                        problems.append(f"{p}: diffusion setting {key} "
                                        f"{info['global'].get(key)!r} differs from "
                                        f"{ref['global'].get(key)!r} in {ref_path}; summarize "
                                        f"them all with the same diffusion options")
        if not names:
            problems.append("the summaries share none of the variables "
                            + ", ".join(SURVEY_VARIABLES))
    if problems:
        raise SurveyError(problems)

    n_e = ref["energy"].size
    n_l, n_m = l_edges.size - 1, mlt_edges.size - 1
    all_t = np.concatenate([i["time"] for _, i in infos]).astype("int64")
    if w_ns is None:
        t_lo, t_hi = int(all_t.min()), int(all_t.max())
        win_starts = np.array([t_lo])
        win_ends = np.array([max(t_hi, t_lo + 1)])
    else:
        idx = np.unique(all_t // w_ns)
        win_starts = idx * w_ns
        win_ends = win_starts + w_ns
    n_t = win_starts.size
    n_cells = n_t * n_e * n_l * n_m
    cells = {n: [] for n in names}
    values = {n: [] for n in names}
    for _, info in infos:
        t = info["time"].astype("int64")
        it = (np.zeros(t.size, dtype=np.int64) if w_ns is None
              else np.searchsorted(win_starts, (t // w_ns) * w_ns))
        iL = np.searchsorted(l_edges, info["L"], side="right") - 1
        iL[info["L"] == l_edges[-1]] = n_l - 1
        mlt = info["mlt"]
        iM = np.searchsorted(mlt_edges, mlt, side="right") - 1
        iM[mlt == mlt_edges[-1]] = n_m - 1
        ok = (iL >= 0) & (iL < n_l) & (iM >= 0) & (iM < n_m) & np.isfinite(info["L"]) \
            & np.isfinite(mlt)
        base = ((it * n_e)[:, None] + np.arange(n_e)[None, :]) * n_l
        cell = (base + iL[:, None]) * n_m + iM[:, None]
        for n in names:
            v = info["vars"][n]
            good = ok[:, None] & np.isfinite(v)
            cells[n].append(cell[good])
            values[n].append(v[good])

    mid_l = 0.5 * (l_edges[:-1] + l_edges[1:])
    mid_m = 0.5 * (mlt_edges[:-1] + mlt_edges[1:])
    t_mid = (win_starts + (win_ends - win_starts) // 2).astype("datetime64[ns]")
    t_bnds = np.stack([win_starts, win_ends], -1).astype("datetime64[ns]")
    dims = ("time", "energy", "L", "mlt")
    shape = (n_t, n_e, n_l, n_m)
    data_vars = {
        "time_bnds": (("time", "nv"), t_bnds),
        "L_bnds": (("L", "nv"), np.stack([l_edges[:-1], l_edges[1:]], -1), {"units": "1"}),
        "mlt_bnds": (("mlt", "nv"), np.stack([mlt_edges[:-1], mlt_edges[1:]], -1),
                     {"units": "h"}),
    }
    energy_attrs = {k: v for k, v in ref["energy_attrs"].items()
                    if k in ("units", "long_name", "standard_name")}
    energy_attrs.setdefault("units", "keV")
    energy_attrs.setdefault("long_name", "kinetic energy")
    if ref["energy_bnds"] is not None and np.shape(ref["energy_bnds"]) == (n_e, 2):
        data_vars["energy_bnds"] = (("energy", "nv"), np.asarray(ref["energy_bnds"], float),
                                    {"units": energy_attrs["units"]})
        energy_attrs["bounds"] = "energy_bnds"
    methods = "time: L: mlt:"
    for n in names:
        count, mean, median, std, iqr = _grouped_stats(
            np.concatenate(cells[n]).astype(np.int64), np.concatenate(values[n]), n_cells)
        units = str(infos[0][1]["attrs"][n].get("units", "1"))
        label = infos[0][1]["attrs"][n].get("long_name", n.replace("_", " "))
        data_vars[f"{n}_count"] = (dims, count.reshape(shape).astype(np.int32),
                                   {"units": "1",
                                    "long_name": f"number of finite samples of {label}"})
        for stat, arr, text, method in (
                ("mean", mean, "mean", "mean"), ("median", median, "median", "median"),
                ("std", std, "sample standard deviation", "standard_deviation"),
                ("iqr", iqr, "interquartile range (75th - 25th percentile)", None)):
            attrs = {"units": units, "long_name": f"{text} of {label} per cell"}
            if method:
                attrs["cell_methods"] = f"{methods} {method}"
            if n in _LOG_SPREAD:
                attrs["comment"] = (
                    f"{n} spans decades within a cell: the median is the meaningful statistic "
                    "(the mean and standard deviation are dominated by the largest values); "
                    "samples where only a bound is known (diffusion_flag 2 or 4) have no value "
                    "and are not counted")
            data_vars[f"{n}_{stat}"] = (dims, arr.reshape(shape), attrs)
    coords = {
        "time": ("time", t_mid, {"standard_name": "time", "long_name": "time window centre",
                                 "bounds": "time_bnds"}),
        "energy": ("energy", ref["energy"], energy_attrs),
        "L": ("L", mid_l, {"units": "1", "long_name": "L-shell bin centre",
                           "bounds": "L_bnds"}),
        "mlt": ("mlt", mid_m, {"units": "h", "long_name": "magnetic local time bin centre",
                               "bounds": "mlt_bnds"}),
    }
    g = ref["global"]
    attrs = {
        "title": "beltkit survey: loss-cone populations binned by L, MLT and time",
        "source": ", ".join(p.name for p, _ in infos),
        "source_sha256": json.dumps({p.name: sha256(p) for p, _ in infos}),
        "beltkit_version": __version__,
        "field_model": g.get("field_model", "unknown"),
        "field_model_by_file": json.dumps({p.name: i["global"].get("field_model", "unknown")
                                           for p, i in infos}),
        "field_epoch": g.get("field_epoch", "unknown"),
        "footpoint_altitude_km": g.get("footpoint_altitude_km", np.nan),
        "time_window": "all samples" if time_window is None else str(time_window),
    }
    if any(n in _LOG_SPREAD for n in names):
        for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma",
                    "beltkit_regime_boundary"):
            if key in g:
                attrs[key] = g[key]
    noted = [(p.name, i["global"]["field_model_note"]) for p, i in infos
             if i["global"].get("field_model_note")]
    if noted:  # e.g. the centred dipole below 2,000 km: said once, with the files it concerns
        attrs["field_model_note"] = (
            f"{len(noted)} of {len(infos)} summaries (" + ", ".join(n for n, _ in noted)
            + ") hold samples below 2000 km altitude partitioned in the centred dipole, which "
            "has no quasi-trapped population there (see each summary's field_model_note)")
    ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
    if command is None:
        command = f"beltkit.batch.survey({len(infos)} file(s), {str(out_file)!r})"
    remove_stale_temporaries(Path(out_file).parent, Path(out_file).name)
    return write_dataset(ds, out_file, compress=compress, history=command, time_chunk=64)
