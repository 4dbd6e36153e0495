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

Rooms
-----
This module is the runner: it plans the time windows and the groups of
files, folds them, checkpoints and writes. The parts it calls:

* :mod:`beltkit.batch.survey_grid`: the binned variables and their
  histogram scales, the binnings' axes and edges, the time windows;
* :mod:`beltkit.batch.survey_inputs`: the summaries listed, inspected and
  checked to agree;
* :mod:`beltkit.batch.survey_fold`: samples to per-cell statistics, in
  groups, here, in processes or on a cluster;
* :mod:`beltkit.batch.survey_checkpoint`: the partial aggregate (resuming);
* :mod:`beltkit.batch.survey_output`: the survey file's dataset.
"""

from __future__ import annotations

import time as _time
from pathlib import Path

import numpy as np

from ..errors import SurveyError
from ..io import remove_stale_temporaries, write_dataset
from .survey_checkpoint import PARTIAL_SUFFIX, read_partial, settings_fingerprint, write_partial
from .survey_fold import BLOCK, merge_open, reduce_window, run_groups
from .survey_grid import (
    BINNINGS,
    SURVEY_VARIABLES,
    quantile_scales,
    statistic_names,
    survey_axes,
    window_length_ns,
)
from .survey_inputs import check_summaries, list_summaries
from .survey_output import survey_dataset

__all__ = ["BINNINGS", "BLOCK", "PARTIAL_SUFFIX", "SURVEY_VARIABLES", "quantile_scales",
           "survey"]


def _windows(infos, w_ns):
    """Return the time windows holding samples (or one spanning them all) and each file's.

    Returns window numbers, starts and ends (ns) and, per file, the positions
    of its windows among them.
    """
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
    return win_ids, win_starts, win_ends, file_wins


def _tasks(spec, paths, file_wins, todo, workers, scheduler):
    """Split the files still to read into groups of consecutive files (the folding tasks).

    One file per group in this process (each checkpoint then holds every file
    read); elsewhere groups of up to 8, at least 4 per worker. Each task lists
    the windows that only its own files touch (the group reduces those).
    """
    touch = {}
    for k, wins in enumerate(file_wins):
        for w in wins:
            touch.setdefault(w, []).append(k)
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
    return tasks, touch


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
    axes = survey_axes(binning, edges, l_edges, mlt_edges)
    if binning == "L-time" and time_window is None:
        time_window = "1D"
    w_ns = window_length_ns(time_window)
    quantiles = tuple(float(q) for q in quantiles)
    if any(not 0 <= q <= 1 for q in quantiles):
        raise ValueError(f"quantiles must lie in [0, 1], got {quantiles}")
    infos, names = check_summaries(list_summaries(summaries), axes, w_ns)
    ref = infos[0][1]
    win_ids, win_starts, win_ends, file_wins = _windows(infos, w_ns)
    scales = quantile_scales(bins_per_decade, linear_bins)
    spec = {"axes": axes, "names": names, "n_e": ref["energy"].size, "w_ns": w_ns,
            "win_ids": win_ids, "scales": {n: scales[n] for n in names},
            "quantiles": quantiles, "block": BLOCK, "energy": ref["energy"]}

    out_file = Path(out_file)
    partial_path = out_file.with_name(out_file.name + PARTIAL_SUFFIX)
    paths = [str(p) for p, _ in infos]
    fingerprint = settings_fingerprint(spec)
    done, open_stats, final = {}, {}, {}
    remove_stale_temporaries(out_file.parent, partial_path.name)
    if resume and partial_path.exists():
        got = read_partial(partial_path, fingerprint, paths, names, statistic_names(quantiles))
        if got is not None:
            done, open_stats, final = got
    todo = [k for k, p in enumerate(paths) if p not in done]
    tasks, touch = _tasks(spec, paths, file_wins, todo, workers, scheduler)
    # windows -> how many of their files are still to read
    pending = {w: sum(1 for k in ks if paths[k] not in done) for w, ks in touch.items()}
    last = _time.monotonic()
    for res in run_groups(tasks, workers, scheduler, open_stats):
        merge_open(open_stats, res["open"])
        final.update(res["final"])
        for p, sha in res["sha"].items():
            done[p] = sha
            for w in file_wins[paths.index(p)]:
                pending[w] -= 1
        for w in [w for w in open_stats if pending.get(w, 0) == 0]:
            final[w] = reduce_window(open_stats.pop(w), quantiles)
        if _time.monotonic() - last >= checkpoint_s and len(done) < len(paths):
            write_partial(partial_path, fingerprint, done, open_stats, final)
            last = _time.monotonic()
    for w in list(open_stats):
        final[w] = reduce_window(open_stats.pop(w), quantiles)

    ds = survey_dataset(final, spec=spec, infos=infos, windows=(win_starts, win_ends),
                        binning=binning, time_window=time_window,
                        checksums={Path(p).name: done[p] for p in paths})  # input order
    if command is None:
        command = f"beltkit.batch.survey({len(infos)} file(s), {str(out_file)!r})"
    remove_stale_temporaries(out_file.parent, out_file.name)
    path = write_dataset(ds, out_file, compress=compress, history=command, time_chunk=64)
    partial_path.unlink(missing_ok=True)
    return path
