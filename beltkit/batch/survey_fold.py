"""Survey folding: summaries' samples added to per-cell statistics, in groups, here or on workers.

A summary is read in blocks of :data:`BLOCK` samples; each sample gets its
cell (the bins of its axis values, :mod:`beltkit.batch.survey_grid`) and its
values are added to the :class:`beltkit.aggregate.CellStats` of its time
window, one per variable. Files are folded in groups; a group reduces the
windows that no other group touches (:func:`reduce_window`) and hands back
the others open, to be merged (:func:`merge_open`) by the caller. The groups
run in this process, in local processes or on a dask.distributed cluster
(:func:`run_groups`); whatever the split, the merged counts and histograms
are the same bit for bit, means and standard deviations to rounding. As in
the per-file pipeline, every netCDF call holds
:data:`beltkit.batch.pipeline.FILE_LOCK` (netCDF-C and HDF5 are not
thread-safe, and a threaded dask worker runs several groups at once).

A *spec* is the dict :func:`beltkit.batch.survey` builds once for all groups:
``axes`` (list of :class:`beltkit.batch.survey_grid.Axis`), ``names`` (the
variables), ``n_e`` (energies), ``w_ns`` (window length or None),
``win_ids`` (sorted window numbers), ``scales`` (name -> Scale),
``quantiles``, ``block`` and ``energy``.
"""

from __future__ import annotations

import os
import time as _time

import numpy as np
import xarray as xr

from ..aggregate import CellStats
from ..io import sha256
from .pipeline import FILE_LOCK
from .survey_grid import quantile_name

__all__ = ["BLOCK", "fold_group", "fold_summary", "merge_open", "reduce_window", "run_groups"]

#: Samples of a summary read at a time.
BLOCK = 65536


def _axis_values(ds, sl, ax):
    """Values of an axis for the samples `sl`: longitude, latitude (deg) from position_geo."""
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


def fold_summary(path, spec, open_stats) -> None:
    """Add one summary's samples, block by block, to `open_stats` (window -> name -> stats).

    Parameters
    ----------
    path : path
        A summary file (checked beforehand by
        :func:`beltkit.batch.survey_inputs.check_summaries`).
    spec : dict
        The survey's spec (module notes).
    open_stats : dict
        Window position (in ``spec["win_ids"]``) -> variable name ->
        :class:`~beltkit.aggregate.CellStats`; missing entries are created.
        Samples outside the grid or with non-finite axis values are dropped.
    """
    axes, names, n_e = spec["axes"], spec["names"], spec["n_e"]
    sizes = [len(a.edges) - 1 for a in axes]
    n_xy = int(np.prod(sizes))
    n_cells = n_e * n_xy
    win_ids = spec["win_ids"]
    w_ns = spec["w_ns"]
    # netCDF-C and HDF5 are not thread-safe: every call holds the process's netCDF lock (the
    # groups of a threaded dask worker run side by side); the binning runs outside it
    with FILE_LOCK:
        ds = xr.open_dataset(path, engine="netcdf4", chunks=None, cache=False)
    try:
        with FILE_LOCK:
            n = ds.sizes["time"]
            t_all = ds["time"].values.astype("datetime64[ns]").astype(np.int64)
        for a in range(0, n, spec["block"]):
            sl = slice(a, min(a + spec["block"], n))
            with FILE_LOCK:
                axis_values = [_axis_values(ds, sl, ax) for ax in axes]
            xy = np.zeros(sl.stop - sl.start, np.int64)
            ok = np.ones(xy.size, bool)
            for ax, size, v in zip(axes, sizes, axis_values):
                k = _bin(v, ax.edges)
                ok &= k >= 0
                xy = xy * size + k
            if w_ns is None:
                wpos = np.zeros(xy.size, np.int64)
            else:
                wpos = np.searchsorted(win_ids, t_all[sl] // w_ns)
            if not ok.any():
                continue
            cell = np.arange(n_e)[None, :] * n_xy + xy[:, None]  # (time, energy)
            with FILE_LOCK:
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
    finally:
        with FILE_LOCK:
            ds.close()


def reduce_window(stats, quantiles) -> dict:
    """Return a window's statistics from its aggregates: name -> statistic -> array (n_cells,).

    Parameters
    ----------
    stats : dict of str to CellStats
        The window's aggregates, one per variable.
    quantiles : sequence of float
        Quantiles wanted beside the median and IQR.

    Returns
    -------
    dict
        ``count``, ``mean``, ``std`` (ddof 1), ``median``, ``iqr``
        (:math:`Q_{0.75} - Q_{0.25}`) and one entry per quantile
        (:func:`beltkit.batch.survey_grid.quantile_name`).
    """
    out = {}
    for nm, s in stats.items():
        r = {"count": s.count.copy(), "mean": s.mean.copy(), "std": s.std(ddof=1),
             "median": s.quantile(0.5), "iqr": s.quantile(0.75) - s.quantile(0.25)}
        for q in quantiles:
            r[quantile_name(q)] = s.quantile(q)
        out[nm] = r
    return out


def fold_group(task, into=None) -> dict:
    """Fold a group of summaries; reduce the windows that no other group touches.

    With `into` (the caller's open aggregates, in this process) the samples
    are folded there directly and the caller reduces the windows.

    Parameters
    ----------
    task : dict
        ``spec``, ``files`` (list of (path, window positions)) and
        ``own_windows`` (window position -> number of files touching it, for
        the windows only this group touches).
    into : dict, optional
        Open aggregates to fold into (window -> name -> CellStats).

    Returns
    -------
    dict
        ``open`` (the windows left open; empty with `into`), ``final``
        (window -> :func:`reduce_window` result) and ``sha`` (path -> SHA-256
        of each file read).
    """
    spec = task["spec"]
    open_stats = {} if into is None else into
    final, shas = {}, {}
    left = dict(task["own_windows"]) if into is None else {}  # window -> files still to read
    for path, wins in task["files"]:
        shas[str(path)] = sha256(path)
        fold_summary(path, spec, open_stats)
        for w in wins:
            if w in left:
                left[w] -= 1
                if left[w] == 0 and w in open_stats:
                    final[w] = reduce_window(open_stats.pop(w), spec["quantiles"])
    return {"open": open_stats if into is None else {}, "final": final, "sha": shas}


def merge_open(total, part) -> None:
    """Merge the open aggregates `part` into `total` in place (window -> name -> CellStats)."""
    for w, stats in part.items():
        if w not in total:
            total[w] = stats
        else:
            for nm, s in stats.items():
                total[w][nm].absorb(s)


def run_groups(tasks, workers, scheduler, into):
    """Yield each group's result as it completes: here (into `into`), in processes, on a cluster.

    At most two groups per worker are in flight, and a result is dropped as
    soon as it is merged: the partial aggregates waiting in memory stay few.

    Parameters
    ----------
    tasks : list of dict
        The groups (:func:`fold_group`).
    workers : int
        Local worker processes (1: in this process, folding into `into`).
    scheduler : str or distributed.Client or None
        A dask.distributed scheduler address or Client (wins over `workers`).
    into : dict
        The caller's open aggregates, used when the groups run here.

    Yields
    ------
    dict
        One :func:`fold_group` result per group, in completion order.
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
                        fold_group, t, pure=False,
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
            yield fold_group(t, into)
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
                running.add(pool.submit(fold_group, queue.pop()))
            done, running = wait(running, return_when=FIRST_COMPLETED)
            for fut in done:
                res = fut.result()
                del fut
                yield res
            done = None
