"""Many files through the pipeline: :func:`summarize` and :func:`psd_files`, and their runners.

Files run one after another in this process (``workers=1``, a two-stage
pipeline: file k is computed while file k - 1 is written), in parallel in
``workers`` local processes, or as tasks on an existing dask.distributed
cluster (``scheduler=`` address or Client). Each file is one task
(:func:`beltkit.batch.pipeline.process_file`), so the result does not depend
on where it ran. Every finished file appends one JSON line to
``run-report.jsonl`` in the output folder.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import sys
import tempfile
import time as _time
from pathlib import Path

import numpy as np

from .._renamed import renamed_keyword
from ..errors import OptionError
from ..io import load_mapping, remove_stale_temporaries
from .inputs import (
    PSD_SUFFIX,
    REPORT_NAME,
    SUMMARY_SUFFIX,
    FileResult,
    expand_inputs,
    format_line,
    one_line,
    output_name,
)
from .options import (
    check_field,
    diffusion_options,
    psd_settings,
    run_settings,
    storm_field,
)
from .pipeline import FILE_LOCK, digests_dropped, open_file, process_file, write_file
from .products import release_buffers
from .sectored import SECTORS_SUFFIX, sectors_settings

__all__ = ["output_folder", "bin_sectored", "psd_files", "summarize"]


def _default_command(inputs, out_dir, **options) -> str:
    shown = ", ".join(f"{k}={v!r}" for k, v in options.items())
    return f"beltkit.batch.summarize({len(inputs)} file(s), {str(out_dir)!r}, {shown})"


@renamed_keyword("field", "model")
def summarize(inputs, out_dir, *, model="auto", altitude_km=100.0, epoch=None,
              mapping=None, compress=True, overwrite=False, fail_fast=False, workers=1,
              scheduler=None, command=None, log=None, progress=None,
              debug=False, diffusion=None, kp=None, strict=False,
              hemispheres=False) -> list[FileResult]:
    """Summarize flux files into loss-cone summary files, safely and resumably.

    Parameters
    ----------
    inputs : str, path or sequence of them
        Files, folders (their ``.nc``/``.cdf`` files) or glob patterns.
    out_dir : str or path
        Output folder (created if needed); gets ``<stem>.summary.nc`` per input
        and ``run-report.jsonl``.
    model : {"auto", "dipole", "igrf", "t89"}
        Field model of the loss cones (``--field`` on the command line;
        ``field=`` is the deprecated former spelling: warns, removed in the
        next release). "t89": the IGRF plus Tsyganenko's
        (1989) external field with ``kp``. "auto" (default) chooses per file: the
        IGRF at each sample's time where the file carries ``position_geo``,
        else the centred dipole from ``L`` and ``mlat`` (an ``L`` declared
        non-dipole by its ``L_definition`` attribute is then refused). Each
        summary records the model it used in ``field_model`` (and the request
        in ``field_model_requested``); a dipole summary of samples below
        2,000 km altitude carries ``field_model_note``.
    altitude_km : float
        Footpoint altitude of the loss cones: km above the sphere of radius
        R_E = :data:`beltkit.constants.R_E_KM` (not above the ellipsoid);
        recorded in each summary as ``footpoint_altitude_km``.
    epoch : float or str, optional
        Dipole epoch override (decimal year), used for GEO positions
        (``model="dipole"`` only).
    mapping : str, path or dict, optional
        Variable-name mapping for non-conventional files (see :mod:`beltkit.io`).
    compress : bool or int
        zlib compression of the outputs (True = level 1, 0/False = none, or a
        level 1-9).
    overwrite : bool
        Redo every output even if up to date.
    fail_fast : bool
        Stop at the first failed file (files not yet started are reported as
        skipped, "not attempted").
    workers : int
        Local worker processes (1: in this process).
    scheduler : str or distributed.Client, optional
        Address of a running dask.distributed scheduler (or a Client); each
        file becomes one task there.
    command : str, optional
        Command line recorded in the outputs' ``history``.
    log : callable, optional
        Called with one line per file (``ok  in -> out (1.2 s)``,
        ``skipped  in: up to date``, ``FAILED  in: reason``).
    progress : bool, optional
        Show a tqdm progress bar on stderr (default: when stderr is a terminal).
    debug : bool
        Print the traceback of each failure to stderr.
    diffusion : bool or dict, optional
        Add the pitch-angle diffusion outputs of
        :func:`beltkit.diffusion.from_pitch_angle_data` to every summary (see
        :func:`summarize_dataset`): True for :data:`DIFFUSION_DEFAULTS`, or a
        dict with some of ``loss_time``, ``species`` and ``interval_sigma``.
        The options are part of the settings that decide whether an output is
        up to date, so changing them redoes the files.
    kp : float, xarray.DataArray or str, optional
        Kp for ``model="t89"`` (required there, refused otherwise): one value
        0-9 for every sample, a Kp series along time (e.g. from
        :func:`beltkit.field.read_kp`), or the name of a variable of each
        file that holds Kp per sample. The Kp (or the series' checksum, or
        the variable's name) is part of the settings that decide whether an
        output is up to date.
    strict : bool
        False (default): problems of single samples (negative flux or
        uncertainty, a position outside its physical range, values the reader
        masked as fill, out of the valid range or quality-rejected) mask those
        samples only; their outputs are NaN and flagged in ``partition_flag``
        (:data:`beltkit.pad.samples.SAMPLE_FLAGS`), and the number of time
        samples per flag is in each result's ``flagged``, its report line, the
        run report and the summary's ``beltkit_samples_<meaning>``
        attributes (with the count of samples whose given ``b_local`` lies
        below the model's ``b_min``: kept, flagged, never refused). True: any
        problem that masks refuses the whole file. Structural
        problems (no flux, wrong dimensions, unknown units, an unreadable
        file) refuse the file either way.
    hemispheres : bool
        Add the losses per hemisphere (``flux_lost_north``,
        ``flux_lost_south``, ``fraction_lost_north``, ``fraction_lost_south``
        and their ``_err``; see :func:`beltkit.pad.partition`) to every
        summary: eight more (time, energy) variables, worth asking for at low
        orbit, where the two footpoints' loss cones differ. Part of the
        settings that decide whether an output is up to date.

    Returns
    -------
    list of FileResult
        One per input, in input order.

    Raises
    ------
    beltkit.errors.OptionError
        If the output folder cannot be created or written to (nothing is run).
    beltkit.io.MappingError
        If the mapping file itself is malformed (nothing is run).
    ValueError
        For an unknown field model, an epoch with a model other than the
        dipole, workers < 1, or unknown diffusion options.
    """
    if workers is None or int(workers) < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    check_field(model, epoch)
    model = storm_field(model, kp)
    diffusion = diffusion_options(diffusion)
    mapping_checked, files, out_dir = _start_run(inputs, out_dir, mapping)
    settings = run_settings(model, altitude_km, epoch, mapping, compress, diffusion, strict,
                            bool(hemispheres))
    if command is None:
        extra = {} if diffusion is None else {"diffusion": diffusion}
        if hemispheres:
            extra["hemispheres"] = True
        command = _default_command(files, out_dir, model=model, altitude_km=altitude_km,
                                   epoch=epoch, overwrite=overwrite, **extra)
    return _run_batch(files, out_dir, _job(None, settings, model, epoch, mapping_checked,
                                           overwrite, command, debug),
                      suffix=SUMMARY_SUFFIX, desc="summarize", fail_fast=fail_fast,
                      workers=workers, scheduler=scheduler, log=log, progress=progress)


@renamed_keyword("field", "model")
def psd_files(inputs, out_dir, mu_mev_per_g, k_g05_re, *, model="auto", species="electron",
              lstar_cadence_s=60.0, altitude_km=100.0, mapping=None, compress=True,
              overwrite=False, fail_fast=False, workers=1, scheduler=None, command=None,
              log=None, progress=None, debug=False, kp=None) -> list[FileResult]:
    """Phase-space density at fixed invariants of flux files, safely and resumably.

    The batch form of :func:`beltkit.psd.at_fixed_invariants`: one
    ``<stem>.psd.nc`` per input in `out_dir`, with the same safety as
    :func:`summarize` (atomic outputs, one-line per-file failures, skipped
    when the output records the input's checksum and the present settings,
    ``run-report.jsonl``, local worker processes or a dask.distributed
    cluster).

    Parameters
    ----------
    inputs : str, path or sequence of them
        Files, folders or glob patterns.
    out_dir : str or path
        Output folder (created if needed).
    mu_mev_per_g, k_g05_re : float or sequence of float
        First invariants (MeV/G) and second invariants (G^(1/2) R_E).
    model : {"auto", "dipole", "igrf", "t89"}
        Field model (``field=`` is the deprecated former spelling).
        "auto": the IGRF for a file with ``position_geo``, else the centred
        dipole from ``L`` and ``mlat`` (where L* = L); "t89": the IGRF plus
        Tsyganenko's (1989) external field with ``kp``.
    species : str
        Species of the flux.
    lstar_cadence_s : float
        Cadence (s) of the field-line work (K, B_m, L*) in a field model,
        interpolated linearly in time to the samples.
    altitude_km : float
        Loss altitude of the loss cones and drift shells: km above the sphere
        of radius R_E = :data:`beltkit.constants.R_E_KM` (not above the
        ellipsoid).
    mapping, compress, overwrite, fail_fast, workers, scheduler, command, log, progress, debug, kp
        As for :func:`summarize`.

    Returns
    -------
    list of FileResult
        One per input, in input order.

    Raises
    ------
    ValueError
        For an unknown field model, invalid invariants or cadence, or workers < 1.
    """
    from ..particles import get_species

    if workers is None or int(workers) < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    check_field(model, None)
    model = storm_field(model, kp)
    mu = np.atleast_1d(np.asarray(mu_mev_per_g, dtype=float))
    k = np.atleast_1d(np.asarray(k_g05_re, dtype=float))
    if mu.ndim != 1 or k.ndim != 1 or not mu.size or not k.size:
        raise ValueError("give at least one mu (MeV/G) and one K (G^(1/2) R_E)")
    if not (np.all(np.isfinite(mu)) and np.all(mu > 0)):
        raise ValueError(f"mu must be positive numbers of MeV/G, got {mu.tolist()}")
    if not (np.all(np.isfinite(k)) and np.all(k >= 0)):
        raise ValueError(f"K must be numbers >= 0 of G^(1/2) R_E, got {k.tolist()}")
    if not (np.isfinite(lstar_cadence_s) and lstar_cadence_s > 0):
        raise ValueError(f"lstar_cadence_s must be a positive number of seconds, got "
                         f"{lstar_cadence_s!r}")
    species = get_species(species).name
    mapping_checked, files, out_dir = _start_run(inputs, out_dir, mapping)
    settings = psd_settings(mu, k, model, species, lstar_cadence_s, altitude_km, mapping,
                             compress)
    if command is None:
        command = (f"beltkit.batch.psd_files({len(files)} file(s), {str(out_dir)!r}, "
                   f"mu={mu.tolist()}, k={k.tolist()}, model={model!r})")
    return _run_batch(files, out_dir, _job("psd", settings, model, None, mapping_checked,
                                           overwrite, command, debug),
                      suffix=PSD_SUFFIX, desc="psd", fail_fast=fail_fast, workers=workers,
                      scheduler=scheduler, log=log, progress=progress)


def output_folder(out_dir: Path) -> None:
    """Create the output folder if needed and check that a file can be written there.

    Raises
    ------
    beltkit.errors.OptionError
        One line naming the folder and what is wrong, before any input is read.
    """
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OptionError(f"output folder {out_dir} cannot be created "
                          f"({exc.strerror or exc}); give a folder you can write to") from None
    try:  # a probe beside the outputs, as their temporaries will be
        fd, probe = tempfile.mkstemp(prefix=".beltkit-probe-", dir=out_dir)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise OptionError(f"output folder {out_dir} is not writable "
                          f"({exc.strerror or exc}); give a folder you can write to") from None


@renamed_keyword("field", "model")
def bin_sectored(inputs, out_dir, pitch_angle_edges_deg=tuple(range(0, 181, 15)), *,
                 model=None, gyrotropy_level=1e-3, gyrotropy_tolerance=0.1,
                 degenerate_deg=10.0, mapping=None, compress=True, overwrite=False,
                 fail_fast=False, workers=1, scheduler=None, command=None, log=None,
                 progress=None, debug=False) -> list[FileResult]:
    """Bin spin-sectored files into pitch-angle files, safely and resumably.

    The batch form of :func:`beltkit.pad.bin_sectors`: one ``<stem>.pad.nc``
    per sectored input in `out_dir`, each following the pitch-angle
    conventions (so :func:`summarize` takes them unchanged), with the safety
    of :func:`summarize`: atomic outputs, one ``FAILED`` line per bad file,
    skipped when the output records the input's checksum and the present
    settings, ``run-report.jsonl``, worker processes or a dask.distributed
    cluster. Files are read one time slab at a time.

    Parameters
    ----------
    inputs : str, path or sequence of them
        Sectored files, folders or glob patterns (``docs/conventions.md``
        section 9).
    out_dir : str or path
        Output folder (created if needed).
    pitch_angle_edges_deg : sequence of float
        Bin edges (degree; default 12 bins of 15 deg).
    model : {None, "dipole", "igrf"}
        Field model giving the field direction: None, each file's
        ``b_vector``; otherwise the model evaluated at its ``position_geo``
        (``field=`` is the deprecated former spelling).
    gyrotropy_level, gyrotropy_tolerance, degenerate_deg
        As for :func:`beltkit.pad.bin_sectors`.
    mapping, compress, overwrite, fail_fast, workers, scheduler, command, log, progress, debug
        As for :func:`summarize`.

    Returns
    -------
    list of FileResult
        One per input, in input order; chain the outputs into
        :func:`summarize` with ``summarize([r.output for r in results if
        r.status != "failed"], ...)`` (the command's ``--summarize DIR``).
    """
    if workers is None or int(workers) < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    if model not in (None, "dipole", "igrf"):
        raise ValueError(f"model must be None (b_vector), 'dipole' or 'igrf', got {model!r}")
    edges = np.asarray(pitch_angle_edges_deg, dtype=float)
    if (edges.ndim != 1 or edges.size < 2 or not np.all(np.isfinite(edges))
            or np.any(np.diff(edges) <= 0) or edges[0] < 0 or edges[-1] > 180):
        raise ValueError("pitch-angle edges must be at least two increasing numbers in "
                         f"0-180 degree, got {edges.tolist()}")
    if not 0.0 < float(gyrotropy_level) < 1.0:
        raise ValueError(f"gyrotropy_level must lie in (0, 1), got {gyrotropy_level!r}")
    mapping_checked, files, out_dir = _start_run(inputs, out_dir, mapping, probe=False)
    settings = sectors_settings(edges, model, gyrotropy_level, gyrotropy_tolerance,
                                degenerate_deg, mapping, compress)
    if command is None:
        command = (f"beltkit.batch.bin_sectored({len(files)} file(s), {str(out_dir)!r}, "
                   f"edges={edges.tolist()}, model={model!r})")
    return _run_batch(files, out_dir, _job("sectors", settings, model, None, mapping_checked,
                                           overwrite, command, debug),
                      suffix=SECTORS_SUFFIX, desc="bin-sectors", fail_fast=fail_fast,
                      workers=workers, scheduler=scheduler, log=log, progress=progress)


def _start_run(inputs, out_dir, mapping, *, probe=True):
    """Check the mapping, list the inputs and ready the output folder, before any input is read.

    Parameters
    ----------
    inputs : str, path or sequence of them
        Files, folders or glob patterns (:func:`~beltkit.batch.inputs.expand_inputs`).
    out_dir : str or path
        Output folder, created if needed.
    mapping : str, path, dict or None
        Variable-name mapping, loaded (and so checked) here.
    probe : bool
        Also check that a file can be written in `out_dir` (:func:`output_folder`);
        False only creates it.

    Returns
    -------
    mapping_checked, files, out_dir
        The loaded mapping (or None), the input files, and `out_dir` as a Path
        with stale temporaries of an interrupted run removed.
    """
    mapping_checked = load_mapping(mapping) if mapping is not None else None
    files = expand_inputs(inputs)
    out_dir = Path(out_dir)
    if probe:
        output_folder(out_dir)
    else:
        out_dir.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(out_dir)
    return mapping_checked, files, out_dir


def _job(product, settings, model, epoch, mapping_checked, overwrite, command, debug) -> dict:
    """Return what every file of a run shares in its task (product None: a summary)."""
    common = {} if product is None else {"product": product}
    common.update({"settings": settings, "model": model, "epoch": epoch,
                   "mapping": mapping_checked, "overwrite": bool(overwrite),
                   "command": command, "debug": bool(debug)})
    return common


def _run_batch(files, out_dir, common, *, suffix, desc, fail_fast, workers, scheduler, log,
               progress) -> list[FileResult]:
    """Run one per-file job (``common`` plus the file's input and output) over every file.

    Shared by :func:`summarize`, :func:`psd_files` and :func:`bin_sectored`: duplicate
    output names, the run report, the progress bar, and the sequential,
    process-pool or dask.distributed run.
    """
    tasks, results = [], {}
    by_output = {}
    for i, src in enumerate(files):
        target = out_dir / output_name(src, suffix)
        key = os.path.abspath(target)
        if key in by_output:
            results[i] = FileResult(str(src), str(target), "failed",
                                    f"its output name {target.name} is also the output of "
                                    f"{files[by_output[key]]}; rename one of the inputs")
            continue
        by_output[key] = i
        tasks.append((i, {"input": str(src), "output": str(target), **common}))
    started = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    report = out_dir / REPORT_NAME
    if progress is None:
        progress = sys.stderr.isatty()
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(files), file=sys.stderr, unit="file", desc=desc)

    def emit(r: FileResult):
        with open(report, "a", encoding="utf-8") as fh:
            fh.write(json.dumps({"run_started": started, **r.to_dict()}) + "\n")
        if log is not None:
            if bar is not None:
                bar.clear()
            log(format_line(r))
        if bar is not None:
            bar.update(1)

    for r in results.values():
        emit(r)
    stop = fail_fast and any(r.status == "failed" for r in results.values())
    try:
        if stop:
            pass
        elif scheduler is not None:
            _run_distributed(tasks, results, scheduler, fail_fast, emit)
        elif int(workers) > 1:
            _run_processes(tasks, results, int(workers), fail_fast, emit)
        else:
            _run_sequential(tasks, results, fail_fast, emit)
    finally:
        for i, task in tasks:
            if i not in results:
                r = FileResult(task["input"], task["output"], "skipped",
                               "not attempted: an earlier file failed (fail-fast)")
                results[i] = r
                emit(r)
        if bar is not None:
            bar.close()
        with FILE_LOCK:  # the reused output memory is not kept beyond the run
            release_buffers()
    return [results[i] for i in sorted(results)]


def _run_sequential(tasks, results, fail_fast, emit):
    """Run the files one after another in this process, as a two-stage pipeline.

    File k is read (under the netCDF lock) and computed while a background
    thread writes, flushes and renames file k - 1; a file is reported once its
    output is in place, in input order. Two sets of output memory alternate
    between the stages. A file longer than one slab is streamed from the
    open input by this thread, slab by slab. With ``fail_fast`` every file is
    finished before the next one starts, so that nothing follows a failure.
    """
    if fail_fast:
        for i, task in tasks:
            results[i] = r = process_file(task)
            emit(r)
            if r.status == "failed":
                break
        return
    from concurrent.futures import ThreadPoolExecutor

    from ..pad.partition import OutputBuffers

    buffers = (OutputBuffers(), OutputBuffers())
    pending = []  # at most one write in flight: (index, future)

    def settle():
        while pending:
            i, fut = pending.pop(0)
            results[i] = fut.result()
            emit(results[i])

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="beltkit-writer") as writer:
        try:
            for k, (i, task) in enumerate(tasks):
                # the next input's checksum is started once this file is computed, so that
                # the hasher works beside the writing rather than the compiled engine
                nxt = tasks[k + 1][1]["input"] if k + 1 < len(tasks) else None
                if nxt is not None and Path(nxt).is_file():
                    task = {**task, "next_input": nxt}
                r, job = open_file(task, load=True, buffers=buffers[k % 2])
                settle()  # the previous file, written meanwhile
                if job is not None and job.ds is None:  # in memory: written in the background
                    pending.append((i, writer.submit(write_file, job)))
                    continue
                if job is not None:  # longer than one slab: streamed here from the open file
                    r = write_file(job)
                results[i] = r
                emit(r)
        finally:
            try:
                settle()
            finally:
                digests_dropped()


def _run_processes(tasks, results, workers, fail_fast, emit):
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor, as_completed

    # a fresh interpreter per worker (never a fork of this threaded process);
    # forkserver starts them quickly from one clean server where available
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        ctx.set_forkserver_preload(["beltkit.batch", "beltkit.io", "beltkit.pad"])
    else:  # pragma: no cover - Windows
        ctx = mp.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
        futures = {pool.submit(process_file, task): i for i, task in tasks}
        for fut in as_completed(futures):
            i = futures[fut]
            try:
                r = fut.result()
            except Exception as exc:  # a worker died (killed, out of memory)
                task = dict(tasks)[i]
                r = FileResult(task["input"], task["output"], "failed",
                               f"worker process failed: {one_line(exc)}")
            results[i] = r
            emit(r)
            if fail_fast and r.status == "failed":
                for other in futures:
                    other.cancel()
                break


def _run_distributed(tasks, results, scheduler, fail_fast, emit):
    from distributed import Client, as_completed

    own = not isinstance(scheduler, Client)
    client = Client(scheduler) if own else scheduler
    try:
        futures = {}
        for i, task in tasks:
            fut = client.submit(process_file, task, pure=False,
                                key=f"beltkit-summarize-{i}-{os.getpid()}-{_time.time_ns()}")
            futures[fut] = i
        for fut in as_completed(list(futures)):
            i = futures[fut]
            try:
                r = fut.result()
            except Exception as exc:  # the task itself died on the cluster
                task = dict(tasks)[i]
                r = FileResult(task["input"], task["output"], "failed",
                               f"cluster task failed: {one_line(exc)}")
            results[i] = r
            emit(r)
            if fail_fast and r.status == "failed":
                client.cancel([f for f in futures if futures[f] not in results])
                break
    finally:
        if own:
            client.close()


# ------------------------------------------------------------------------- survey
