r"""Summaries to a binned survey: mergeable statistics per cell, in memory that stays flat.

:func:`survey` bins the fractions, fluxes and diffusion outputs of loss-cone
summaries per energy onto a grid of cells (one of :data:`BINNINGS`, or any
pair of per-time summary variables), optionally in time windows, and writes
per cell and variable the count, mean, standard deviation, median,
interquartile range and any requested quantiles.

How it scales
-------------
Each summary is read in blocks of :data:`BLOCK` samples and folded into a
:class:`beltkit.aggregate.CellStats` per variable and time window: counts,
means and variances exactly (merged by the pairwise update of Chan, Golub &
LeVeque 1979), quantiles from fixed fine histograms (linear for fractions,
logarithmic for fluxes and the diffusion outputs; :func:`quantile_scales`),
whose worst-case error is derived in :mod:`beltkit.aggregate` and recorded
in the attributes of every quantile variable (``quantile_error_bound``,
``quantile_error_kind``). Memory is that of the histograms of the windows
being filled, not of the samples: it does not grow with the number or length
of the files. A window whose files are all read is reduced to its statistics
at once (its histograms are dropped).

Files are handled in groups, in this process, in ``workers`` local processes
or on a dask.distributed cluster (``scheduler``); the groups' partial
aggregates merge to the same result whatever the split (counts and
histograms bit for bit, means and standard deviations to rounding).

Resuming
--------
While it runs, the survey keeps its partial aggregate beside the output
(``<out>.partial``, written atomically at most every ``checkpoint_s``
seconds) with the SHA-256 of every summary already folded in. A rerun with
the same settings reuses it for the summaries whose checksum still matches,
and reads only the others; any other mismatch (settings changed, a folded
summary changed or dropped) starts afresh. The file is removed once the
survey is written.
"""

from __future__ import annotations

import hashlib
import json
import os
import time as _time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from ..aggregate import CellStats, Scale
from ..atomic import atomic_file
from ..errors import SurveyError
from ..io import remove_stale_temporaries, sha256, write_dataset
from .inputs import SUMMARY_SUFFIX, expand_inputs, one_line

__all__ = ["BINNINGS", "BLOCK", "PARTIAL_SUFFIX", "SURVEY_VARIABLES", "quantile_scales",
           "survey"]

#: Variables of a summary that :func:`survey` bins (those present in every summary are used).
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
#: The named binnings: two axes each (``"L-time"``: L in time windows).
BINNINGS = ("L-MLT", "lon-lat", "L-B", "L-time")
#: Samples of a summary read at a time.
BLOCK = 65536
#: Suffix of the partial aggregate kept beside the output while a survey runs.
PARTIAL_SUFFIX = ".partial"

# axis name -> (summary variable it comes from, default edges, attributes)
_AXES = {
    "L": ("L", np.arange(1.0, 8.01, 0.5), {"units": "1", "long_name": "L-shell bin centre"}),
    "mlt": ("mlt", np.arange(0.0, 24.01, 1.0),
            {"units": "h", "long_name": "magnetic local time bin centre"}),
    "lon": ("position_geo", np.arange(-180.0, 180.01, 10.0),
            {"units": "degrees_east", "standard_name": "longitude",
             "long_name": "geographic (geocentric) longitude bin centre"}),
    "lat": ("position_geo", np.arange(-90.0, 90.01, 5.0),
            {"units": "degrees_north", "standard_name": "latitude",
             "long_name": "geographic (geocentric) latitude bin centre"}),
    "b_local": ("b_local", 10.0 ** np.arange(2.0, 5.001, 0.1),
                {"units": "nT", "long_name": "local magnetic field strength bin centre"}),
}
_BINNING_AXES = {"L-MLT": ("L", "mlt"), "lon-lat": ("lon", "lat"), "L-B": ("L", "b_local"),
                 "L-time": ("L",)}
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


def quantile_scales(bins_per_decade: int = 32, linear_bins: int = 256) -> dict:
    """Return the histogram :class:`~beltkit.aggregate.Scale` of each survey variable.

    Parameters
    ----------
    bins_per_decade : int
        Resolution of the logarithmic scales (fluxes, loss-cone filling,
        diffusion coefficient, z0, lifetime): worst-case quantile error
        :math:`10^{1/(2 n)} - 1` relative (3.7 % for 32).
    linear_bins : int
        Bins over 0-1 of the fractions: worst-case error :math:`1/(2 n)`
        absolute (0.002 for 256).

    Returns
    -------
    dict of str to Scale
        Ranges: fractions 0-1; fluxes 1e-4 to 1e12 cm-2 s-1 keV-1;
        loss-cone filling 1e-6 to 1e4; diffusion coefficient 1e-12 to 1e2
        s-1; z0 1e-4 to 1e4; lifetime 1e-2 to 1e12 s. Values outside are
        counted but give NaN quantiles (never a wrong number).
    """
    log = {"loss_cone_filling": (1e-6, 1e4), "diffusion_coefficient": (1e-12, 1e2),
           "z0": (1e-4, 1e4), "lifetime": (1e-2, 1e12)}
    out = {}
    for name in SURVEY_VARIABLES:
        if name.startswith("fraction"):
            out[name] = Scale.linear(0.0, 1.0, linear_bins)
        elif name in log:
            out[name] = Scale.log(*log[name], bins_per_decade)
        else:
            out[name] = Scale.log(1e-4, 1e12, bins_per_decade)
    return out


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


@dataclass(frozen=True)
class _Axis:
    dim: str
    source: str
    edges: tuple
    attrs: tuple


def _axes(binning, edges, l_edges, mlt_edges):
    """Return the binning's axes (1 or 2) with their edges checked."""
    edges = dict(edges or {})
    if l_edges is not None:
        edges.setdefault("L", l_edges)
    if mlt_edges is not None:
        edges.setdefault("mlt", mlt_edges)
    if isinstance(binning, str):
        if binning not in _BINNING_AXES:
            raise ValueError(f"binning must be one of {', '.join(BINNINGS)} or a pair of "
                             f"summary variable names, got {binning!r}")
        names = _BINNING_AXES[binning]
    else:
        names = tuple(binning)
        if len(names) != 2 or len(set(names)) != 2:
            raise ValueError(f"a binning by variables needs two different names, got {binning!r}")
    axes = []
    for name in names:
        if name in _AXES:
            source, default, attrs = _AXES[name]
        else:
            if name not in edges:
                raise ValueError(f"give the bin edges of {name!r} (edges={{{name!r}: [...]}}, "
                                 f"or --bins {name} LOW HIGH STEP)")
            source, default, attrs = name, None, {"long_name": f"{name} bin centre"}
        e = _edges(edges.get(name), default, f"{name} edges")
        if name == "mlt" and (e[0] < 0 or e[-1] > 24):
            raise ValueError(f"mlt_edges must lie within 0-24 h, got {e[0]}-{e[-1]}")
        if name == "lon" and (e[0] < -180 or e[-1] > 360):
            raise ValueError(f"longitude edges must lie within -180..360 deg, got {e[0]}-{e[-1]}")
        if name == "lat" and (e[0] < -90 or e[-1] > 90):
            raise ValueError(f"latitude edges must lie within -90..90 deg, got {e[0]}-{e[-1]}")
        axes.append(_Axis(name, source, tuple(e.tolist()), tuple(attrs.items())))
    return axes


def _inspect(path: Path, axes, w_ns) -> dict:
    """Read a summary's header and time span (not its data); raise with what it lacks.

    Only the first and last time and the time windows holding samples are
    kept, so that the list of summaries costs memory per file, not per sample.
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


def _axis_values(ds, sl, ax):
    if ax.source == "position_geo":
        xyz = np.asarray(ds["position_geo"][sl].values, float)
        if ax.dim == "lon":
            return np.degrees(np.arctan2(xyz[:, 1], xyz[:, 0]))
        r = np.sqrt((xyz * xyz).sum(-1))
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.degrees(np.arcsin(xyz[:, 2] / r))
    return np.asarray(ds[ax.source][sl].values, float)


def _bin(values, edges):
    """Bin index of each value (-1 outside; the last edge belongs to the last bin)."""
    e = np.asarray(edges)
    k = np.searchsorted(e, values, side="right") - 1
    k[values == e[-1]] = e.size - 2
    k[~np.isfinite(values) | (k >= e.size - 1)] = -1
    return k


def _fold_file(path, spec, open_stats) -> None:
    """Add one summary's samples, block by block, to ``open_stats`` (window -> name -> stats)."""
    axes, names, n_e = spec["axes"], spec["names"], spec["n_e"]
    sizes = [len(a.edges) - 1 for a in axes]
    n_xy = int(np.prod(sizes))
    n_cells = n_e * n_xy
    win_ids = spec["win_ids"]
    w_ns = spec["w_ns"]
    with xr.open_dataset(path, engine="netcdf4", chunks=None, cache=False) as ds:
        n = ds.sizes["time"]
        t_all = ds["time"].values.astype("datetime64[ns]").astype(np.int64)
        for a in range(0, n, spec["block"]):
            sl = slice(a, min(a + spec["block"], n))
            xy = np.zeros(sl.stop - sl.start, np.int64)
            ok = np.ones(xy.size, bool)
            for ax, size in zip(axes, sizes):
                k = _bin(_axis_values(ds, sl, ax), ax.edges)
                ok &= k >= 0
                xy = xy * size + k
            if w_ns is None:
                wpos = np.zeros(xy.size, np.int64)
            else:
                wpos = np.searchsorted(win_ids, t_all[sl] // w_ns)
            if not ok.any():
                continue
            cell = np.arange(n_e)[None, :] * n_xy + xy[:, None]  # (time, energy)
            values = {nm: ds[nm][sl].transpose("time", "energy").values for nm in names}
            for w in np.unique(wpos[ok]).tolist():
                m = ok & (wpos == w)
                stats = open_stats.get(w)
                if stats is None:
                    stats = open_stats[w] = {nm: CellStats(n_cells, spec["scales"][nm])
                                             for nm in names}
                c = cell[m]
                for nm in names:
                    stats[nm].add(c, values[nm][m])


def _reduce(stats, quantiles) -> dict:
    """Return a window's statistics from its aggregates: name -> stat -> array (n_cells,)."""
    out = {}
    for nm, s in stats.items():
        r = {"count": s.count.copy(), "mean": s.mean.copy(), "std": s.std(ddof=1),
             "median": s.quantile(0.5), "iqr": s.quantile(0.75) - s.quantile(0.25)}
        for q in quantiles:
            r[_q_name(q)] = s.quantile(q)
        out[nm] = r
    return out


def _q_name(q) -> str:
    return f"q{round(float(q) * 100, 4):g}".replace(".", "_")


def _survey_group(task, into=None) -> dict:
    """Fold a group of summaries; reduce the windows that no other group touches.

    With `into` (the caller's open aggregates, in this process) the samples
    are folded there directly and the caller reduces the windows.
    """
    spec = task["spec"]
    open_stats = {} if into is None else into
    final, shas = {}, {}
    left = dict(task["own_windows"]) if into is None else {}  # window -> files still to read
    for path, wins in task["files"]:
        shas[str(path)] = sha256(path)
        _fold_file(path, spec, open_stats)
        for w in wins:
            if w in left:
                left[w] -= 1
                if left[w] == 0 and w in open_stats:
                    final[w] = _reduce(open_stats.pop(w), spec["quantiles"])
    return {"open": open_stats if into is None else {}, "final": final, "sha": shas}


def _merge_open(total, part) -> None:
    for w, stats in part.items():
        if w not in total:
            total[w] = stats
        else:
            for nm, s in stats.items():
                total[w][nm]._absorb(s)


def _run_groups(tasks, workers, scheduler, into):
    """Yield each group's result as it completes: here (into `into`), in processes, on a cluster.

    At most two groups per worker are in flight, and a result is dropped as
    soon as it is merged: the partial aggregates waiting in memory stay few.
    """
    if scheduler is not None:
        from distributed import Client, wait

        own = not isinstance(scheduler, Client)
        client = Client(scheduler) if own else scheduler
        try:
            n_slots = 2 * max(len(client.scheduler_info().get("workers", {})), 1)
            queue = list(enumerate(tasks))[::-1]
            running = set()
            while queue or running:
                while queue and len(running) < n_slots:
                    i, t = queue.pop()
                    running.add(client.submit(
                        _survey_group, t, pure=False,
                        key=f"beltkit-survey-{i}-{os.getpid()}-{_time.time_ns()}"))
                done, running = wait(running, return_when="FIRST_COMPLETED")
                for fut in done:
                    res = fut.result()
                    fut.release()
                    yield res
        finally:
            if own:
                client.close()
        return
    if workers <= 1:
        for t in tasks:
            yield _survey_group(t, into)
        return
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    # fresh interpreters (never a fork of a threaded process), as the summarize runners do
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        ctx.set_forkserver_preload(["beltkit.batch", "beltkit.aggregate"])
    else:  # pragma: no cover - Windows
        ctx = mp.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
        queue = list(tasks)[::-1]
        running = set()
        while queue or running:
            while queue and len(running) < 2 * workers:
                running.add(pool.submit(_survey_group, queue.pop()))
            done, running = wait(running, return_when=FIRST_COMPLETED)
            for fut in done:
                res = fut.result()
                del fut
                yield res
            done = None


def _fingerprint(spec, files_windows) -> str:
    text = json.dumps({
        "axes": [[a.dim, a.source, list(a.edges)] for a in spec["axes"]],
        "names": spec["names"], "w_ns": spec["w_ns"], "win_ids": spec["win_ids"].tolist(),
        "energy": spec["energy"].tolist(), "quantiles": list(spec["quantiles"]),
        "scales": {n: [s.kind, s.lo, s.hi, s.n] for n, s in spec["scales"].items()},
        "beltkit_version": __version__,
    }, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _write_partial(path, fingerprint, done, open_stats, final, n_windows, n_cells):
    parts, keys = [], []
    for w, stats in open_stats.items():
        for nm, s in stats.items():
            parts.append(s.to_dataset(prefix=f"s{len(keys)}_"))
            keys.append([int(w), nm])
    fin = sorted(final)
    if fin:  # reduced windows: one (window, cell) array per variable and statistic
        for nm, r in final[fin[0]].items():
            for stat in r:
                parts.append(xr.Dataset({f"f_{nm}_{stat}": (
                    ("final_window", "final_cell"), np.stack([final[w][nm][stat] for w in fin]))}))
    ds = xr.merge(parts) if parts else xr.Dataset()
    ds.attrs = {"beltkit_survey_fingerprint": fingerprint, "done": json.dumps(done),
                "open_keys": json.dumps(keys), "final_windows": json.dumps([int(w) for w in fin])}

    def fill(tmp):
        ds.to_netcdf(tmp, engine="netcdf4",
                     encoding={v: {"zlib": True, "complevel": 1} for v in ds.data_vars})

    atomic_file(path, fill)


def _read_partial(path, fingerprint, files, names, stat_names):
    """Reuse a partial aggregate whose settings and folded inputs' checksums still match."""
    try:
        with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
            if ds.attrs.get("beltkit_survey_fingerprint") != fingerprint:
                return None
            done = json.loads(ds.attrs["done"])
            current = {str(p) for p in files}
            if any(p not in current or sha256(p) != sha for p, sha in done.items()):
                return None
            ds = ds.load()
            open_stats = {}
            for i, (w, nm) in enumerate(json.loads(ds.attrs["open_keys"])):
                open_stats.setdefault(w, {})[nm] = CellStats.from_dataset(ds, prefix=f"s{i}_")
            final = {}
            for j, w in enumerate(json.loads(ds.attrs["final_windows"])):
                final[w] = {nm: {st: ds[f"f_{nm}_{st}"].values[j] for st in stat_names}
                            for nm in names}
    except (OSError, KeyError, ValueError):  # unreadable or foreign: start afresh
        return None
    return done, open_stats, final


def survey(summaries, out_file, *, binning="L-MLT", l_edges=None, mlt_edges=None, edges=None,
           time_window=None, quantiles=(), bins_per_decade=32, linear_bins=256, workers=1,
           scheduler=None, resume=True, checkpoint_s=30.0, compress=True,
           command=None) -> Path:
    """Bin summaries onto a grid of cells (x time windows) and write the survey file.

    Parameters
    ----------
    summaries : str, path or sequence of them
        Summary files, folders (their ``*.summary.nc``) or glob patterns.
    out_file : str or path
        The survey netCDF file to write (atomically).
    binning : str or pair of str
        ``"L-MLT"`` (default), ``"lon-lat"`` (geographic, geocentric
        longitude and latitude of each sample's own position, from the
        summaries' ``position_geo``), ``"L-B"`` (L and the local field
        strength ``b_local``), ``"L-time"`` (L in time windows, daily unless
        `time_window` says otherwise), or two names of per-time summary
        variables (then give their edges in `edges`).
    l_edges, mlt_edges : array_like, optional
        L bin edges (default 1 to 8 by 0.5) and MLT edges in hours within
        0-24 (default hourly). Samples outside the grid are dropped.
    edges : dict, optional
        Bin edges by axis name (``"L"``, ``"mlt"``, ``"lon"`` (default -180
        to 180 by 10 deg), ``"lat"`` (-90 to 90 by 5 deg), ``"b_local"``
        (1e2 to 1e5 nT, 10 per decade) or a variable's name).
    time_window : str or timedelta, optional
        Length of the time windows (``"1D"``, ``"6h"``; aligned on 1970-01-01
        UTC). None: one window spanning all samples (``"1D"`` for ``"L-time"``).
    quantiles : sequence of float
        Quantiles written beside the median and IQR (``v_q5`` for 0.05...).
    bins_per_decade, linear_bins : int
        Histogram resolution (:func:`quantile_scales`).
    workers : int
        Local worker processes.
    scheduler : str or distributed.Client, optional
        A dask.distributed scheduler address (or Client) to run the groups on.
    resume : bool
        Reuse a matching partial aggregate left beside the output by an
        interrupted run (see the module notes); False starts afresh.
    checkpoint_s : float
        Least time between two writes of the partial aggregate.
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
        If any summary cannot be read, lacks a binning variable (the message
        names it and how to get it) or does not match the others (energies,
        field model, footpoint altitude, diffusion settings); every bad file
        is listed and nothing is written.

    Notes
    -----
    For each variable ``v`` of :data:`SURVEY_VARIABLES` present in every
    summary, the survey holds ``v_count``, ``v_mean``, ``v_std`` (sample
    standard deviation), ``v_median``, ``v_iqr`` (75th minus 25th
    percentile) and ``v_q..`` per requested quantile, dims ``(time, energy,
    <axis 1>, <axis 2>)``. Only finite values count. Count, mean and
    standard deviation are exact; quantiles come from fixed histograms and
    lie within ``quantile_error_bound`` of the exact ones (absolute for
    fractions, relative for the others; twice that for the IQR).
    """
    axes = _axes(binning, edges, l_edges, mlt_edges)
    if binning == "L-time" and time_window is None:
        time_window = "1D"
    w_ns = _window_ns(time_window)
    quantiles = tuple(float(q) for q in quantiles)
    if any(not 0 <= q <= 1 for q in quantiles):
        raise ValueError(f"quantiles must lie in [0, 1], got {quantiles}")
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
            infos.append((p, _inspect(p, axes, w_ns)))
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

    # time windows: those holding samples (or one spanning them all)
    n_e = ref["energy"].size
    spans = [i["t_range"] for _, i in infos if i["t_range"] is not None]
    if not spans:
        raise SurveyError(["the summaries hold no samples"])
    if w_ns is None:
        t_lo, t_hi = min(a for a, _ in spans), max(b for _, b in spans)
        win_ids = np.array([0])
        win_starts, win_ends = np.array([t_lo]), np.array([max(t_hi, t_lo + 1)])
        file_wins = [[0] if i["t_range"] is not None else [] for _, i in infos]
    else:
        per_file = [i["wins"] if i["wins"] is not None else np.zeros(0, np.int64)
                    for _, i in infos]
        win_ids = np.unique(np.concatenate(per_file))
        win_starts = win_ids * w_ns
        win_ends = win_starts + w_ns
        file_wins = [np.searchsorted(win_ids, f).tolist() for f in per_file]
    scales = quantile_scales(bins_per_decade, linear_bins)
    spec = {"axes": axes, "names": names, "n_e": n_e, "w_ns": w_ns, "win_ids": win_ids,
            "scales": {n: scales[n] for n in names}, "quantiles": quantiles, "block": BLOCK,
            "energy": ref["energy"]}
    sizes = [len(a.edges) - 1 for a in axes]
    n_cells = n_e * int(np.prod(sizes))
    n_w = win_ids.size
    stat_names = ["count", "mean", "std", "median", "iqr", *map(_q_name, quantiles)]

    out_file = Path(out_file)
    partial_path = out_file.with_name(out_file.name + PARTIAL_SUFFIX)
    paths = [str(p) for p, _ in infos]
    fingerprint = _fingerprint(spec, file_wins)
    done, open_stats, final = {}, {}, {}
    remove_stale_temporaries(out_file.parent, partial_path.name)
    if resume and partial_path.exists():
        got = _read_partial(partial_path, fingerprint, paths, names, stat_names)
        if got is not None:
            done, open_stats, final = got
    # windows -> how many files touch them; files still to read, in groups of consecutive files
    todo = [k for k, p in enumerate(paths) if p not in done]
    touch = {}
    for k, wins in enumerate(file_wins):
        for w in wins:
            touch.setdefault(w, []).append(k)
    pending = {w: sum(1 for k in ks if paths[k] not in done) for w, ks in touch.items()}
    # one file per group in this process (each checkpoint holds every file read); groups of
    # up to 8 elsewhere, at least 4 per worker
    n_par = max(int(workers), 1) if scheduler is None else 8
    size = max(1, min(8, -(-len(todo) // (4 * n_par)))) if n_par > 1 or scheduler else 1
    groups = [todo[i:i + size] for i in range(0, len(todo), size)]
    tasks = []
    for g in groups:
        gset = set(g)
        own = {w: len(touch[w]) for k in g for w in file_wins[k]
               if all(j in gset for j in touch[w])}
        tasks.append({"spec": spec, "files": [(paths[k], file_wins[k]) for k in g],
                      "own_windows": own})
    last = _time.monotonic()
    for res in _run_groups(tasks, workers, scheduler, open_stats):
        _merge_open(open_stats, res["open"])
        final.update(res["final"])
        for p, sha in res["sha"].items():
            done[p] = sha
            for w in file_wins[paths.index(p)]:
                pending[w] -= 1
        for w in [w for w in open_stats if pending.get(w, 0) == 0]:
            final[w] = _reduce(open_stats.pop(w), quantiles)
        if _time.monotonic() - last >= checkpoint_s and len(done) < len(paths):
            _write_partial(partial_path, fingerprint, done, open_stats, final, n_w, n_cells)
            last = _time.monotonic()
    for w in list(open_stats):
        final[w] = _reduce(open_stats.pop(w), quantiles)

    # ----------------------------------------------------------------- the output file
    dims = ("time", "energy", *(a.dim for a in axes))
    shape = (n_w, n_e, *sizes)
    t_mid = (win_starts + (win_ends - win_starts) // 2).astype("datetime64[ns]")
    t_bnds = np.stack([win_starts, win_ends], -1).astype("datetime64[ns]")
    data_vars = {"time_bnds": (("time", "nv"), t_bnds)}
    coords = {"time": ("time", t_mid, {"standard_name": "time",
                                       "long_name": "time window centre",
                                       "bounds": "time_bnds"})}
    for ax in axes:
        e = np.asarray(ax.edges)
        attrs = dict(ax.attrs)
        if ax.dim not in _AXES:
            src_attrs = _var_attrs(infos[0][0], ax.source)
            attrs.setdefault("units", src_attrs.get("units", "1"))
        attrs["bounds"] = f"{ax.dim}_bnds"
        mid = np.sqrt(e[:-1] * e[1:]) if ax.dim == "b_local" else 0.5 * (e[:-1] + e[1:])
        coords[ax.dim] = (ax.dim, mid, attrs)
        data_vars[f"{ax.dim}_bnds"] = ((ax.dim, "nv"), np.stack([e[:-1], e[1:]], -1),
                                       {"units": attrs.get("units", "1")})
    energy_attrs = {k: v for k, v in ref["energy_attrs"].items()
                    if k in ("units", "long_name", "standard_name")}
    energy_attrs.setdefault("units", "keV")
    energy_attrs.setdefault("long_name", "kinetic energy")
    if ref["energy_bnds"] is not None and np.shape(ref["energy_bnds"]) == (n_e, 2):
        data_vars["energy_bnds"] = (("energy", "nv"), np.asarray(ref["energy_bnds"], float),
                                    {"units": energy_attrs["units"]})
        energy_attrs["bounds"] = "energy_bnds"
    coords["energy"] = ("energy", ref["energy"], energy_attrs)
    methods = "time: " + " ".join(f"{a.dim}:" for a in axes)
    for n in names:
        stack = {}
        for st in stat_names:
            arr = np.full((n_w, n_cells), 0 if st == "count" else np.nan,
                          np.int64 if st == "count" else float)
            for w, r in final.items():
                arr[int(w)] = r[n][st]
            stack[st] = arr.reshape(shape)
        units = str(ref["attrs"][n].get("units", "1"))
        label = ref["attrs"][n].get("long_name", n.replace("_", " "))
        scale = spec["scales"][n]
        bound = {"quantile_error_bound": scale.error_bound,
                 "quantile_error_kind": "absolute" if scale.kind == "linear" else "relative",
                 "quantile_method": (f"{scale.kind} histogram of {scale.n} bins over "
                                     f"{scale.lo:g}-{scale.hi:g} {units}; the estimate lies "
                                     f"within quantile_error_bound of the exact quantile "
                                     f"(numpy.quantile, linear interpolation); NaN where the "
                                     f"quantile falls outside that range")}
        data_vars[f"{n}_count"] = (dims, stack["count"].astype(np.int32),
                                   {"units": "1",
                                    "long_name": f"number of finite samples of {label}"})
        texts = [("mean", "mean", "mean"), ("median", "median", "median"),
                 ("std", "sample standard deviation", "standard_deviation"),
                 ("iqr", "interquartile range (75th - 25th percentile)", None)]
        texts += [(_q_name(q), f"{q:g} quantile", None) for q in quantiles]
        for stat, text, method in texts:
            attrs = {"units": units, "long_name": f"{text} of {label} per cell"}
            if method:
                attrs["cell_methods"] = f"{methods} {method}"
            if stat not in ("mean", "std"):
                attrs.update(bound)
                if stat == "iqr":
                    attrs["quantile_error_bound"] = 2 * scale.error_bound
                    if scale.kind == "log":
                        attrs["quantile_error_kind"] = "relative to the 75th percentile"
            if n in _LOG_SPREAD:
                attrs["comment"] = (
                    f"{n} spans decades within a cell: the median is the meaningful statistic "
                    "(the mean and standard deviation are dominated by the largest values); "
                    "samples where only a bound is known (diffusion_flag 2 or 4) have no value "
                    "and are not counted")
            data_vars[f"{n}_{stat}"] = (dims, stack[stat], attrs)
    g = ref["global"]
    where = " and ".join(a.dim for a in axes)
    attrs = {
        "title": f"beltkit survey: loss-cone populations binned by {where} and time",
        "source": ", ".join(p.name for p, _ in infos),
        "source_sha256": json.dumps({Path(p).name: done[p] for p in paths}),  # input order
        "beltkit_version": __version__,
        "binning": binning if isinstance(binning, str) else " x ".join(binning),
        "field_model": g.get("field_model", "unknown"),
        "field_model_by_file": json.dumps({p.name: i["global"].get("field_model", "unknown")
                                           for p, i in infos}),
        "field_epoch": g.get("field_epoch", "unknown"),
        "footpoint_altitude_km": g.get("footpoint_altitude_km", np.nan),
        "time_window": "all samples" if time_window is None else str(time_window),
        "quantile_error_bound": json.dumps({n: spec["scales"][n].error_bound for n in names}),
        "quantile_note": ("medians, IQRs and quantiles come from fixed fine histograms "
                          "(beltkit.aggregate); each variable's quantile_error_bound attribute "
                          "gives the worst-case difference from the exact value"),
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
    remove_stale_temporaries(out_file.parent, out_file.name)
    path = write_dataset(ds, out_file, compress=compress, history=command, time_chunk=64)
    partial_path.unlink(missing_ok=True)
    return path


def _var_attrs(path, name) -> dict:
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        return dict(ds[name].attrs)
