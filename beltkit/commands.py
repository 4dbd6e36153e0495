"""What each ``beltkit`` command does with its parsed options.

One function per command (:data:`COMMANDS`), called by :func:`beltkit.cli.main`
with the parsed options and the command line as typed (recorded in the
outputs' ``history``); each returns the exit code. Options that do not fit
together raise :class:`beltkit.errors.OptionError`.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

from .calc import check_species, losscone_text, motion_text
from .errors import OptionError

__all__ = ["COMMANDS", "error_line", "say"]


def say(line, stream=None):
    """Print one line to standard output (or `stream`) at once."""
    print(line, file=stream or sys.stdout, flush=True)


def _print(text) -> int:
    say(text)
    return 0


def error_line(message, args) -> int:
    """Print ``beltkit COMMAND: error: MESSAGE`` on one line to standard error; return 1."""
    say(f"beltkit {args.command}: error: {' '.join(str(message).split())}", sys.stderr)
    return 1



def _is_pattern(text: str) -> bool:
    return any(ch in text for ch in "*?[")


def _expand_flux_inputs(inputs) -> list:
    """Expand the inputs as :func:`beltkit.batch.expand_inputs` does, refusing dead ones.

    Every pattern that matched nothing and folder without flux files is
    named; nothing is run (and no output folder is created) then. A missing
    file path among inputs that name files is kept: it fails on its own line
    (``FAILED``) while the other files run. Inputs that name no file at all
    are refused.
    """
    from .batch import INPUT_SUFFIXES, expand_inputs

    files, dead, missing = [], [], []
    for item in inputs:
        text = str(item)
        found = expand_inputs([text])
        if _is_pattern(text):
            if not found:
                dead.append(f"{text!r} matched nothing")
        elif Path(text).is_dir():
            if not found:
                dead.append(f"folder {text} holds no flux files "
                            f"({', '.join('*' + x for x in INPUT_SUFFIXES)}; summaries "
                            f"excluded)")
        elif not Path(text).exists():
            missing.append(f"no such file or folder: {text}")
        files += found
    if dead or (missing and len(missing) == len(files)):
        if len(missing) == len(files):
            raise OptionError("no input files: " + "; ".join(dead + missing))
        raise OptionError("; ".join(dead) + " (nothing was run: fix or drop "
                       + ("that input)" if len(dead) == 1 else "those inputs)"))
    return files


def _check_survey_inputs(inputs) -> None:
    """Refuse survey inputs that name nothing, before :func:`beltkit.batch.survey` runs."""
    from .batch import SUMMARY_SUFFIX, expand_inputs

    dead, n_found = [], 0
    for item in inputs:
        text = str(item)
        if _is_pattern(text):
            found = len(expand_inputs([text]))
            if not found:
                dead.append(f"{text!r} matched nothing")
        elif Path(text).is_dir():
            found = len(list(Path(text).glob("*" + SUMMARY_SUFFIX)))
            if not found:
                raw = expand_inputs([text])
                has = f" (only {len(raw)} flux/data file(s))" if raw else ""
                dead.append(f"folder {text} holds no *{SUMMARY_SUFFIX} files{has}")
        elif not Path(text).exists():
            found = 0
            dead.append(f"no such file or folder: {text}")
        else:
            found = 1
        n_found += found
    if dead:
        if not n_found:
            raise OptionError("no summary files: " + "; ".join(dead)
                              + "; run `beltkit summarize` first to make them")
        raise OptionError("; ".join(dead) + " (nothing was surveyed: fix or drop "
                          + ("that input)" if len(dead) == 1 else "those inputs)"))


# ---------------------------------------------------------------------- commands


def _diffusion_args(args):
    """Return the ``diffusion`` argument of summarize from --diffusion and its options."""
    given = {"loss_time": args.loss_time, "interval_sigma": args.interval_sigma,
             "species": args.species}
    given = {k: v for k, v in given.items() if v is not None}
    if not args.diffusion:
        if given:
            flags = ", ".join("--" + k.replace("_", "-") for k in given)
            one = len(given) == 1
            raise OptionError(f"{flags} only appl{'ies' if one else 'y'} with --diffusion: add "
                              f"--diffusion, or drop {'it' if one else 'them'}")
        return None
    if "species" in given:
        given["species"] = check_species(given["species"]).name
    return given or True


def _kp_args(args):
    """Return the ``kp`` argument of a batch command from --kp / --kp-variable."""
    if args.kp is not None and args.kp_variable is not None:
        raise OptionError("give --kp or --kp-variable, not both")
    if args.field != "t89":
        if args.kp is not None or args.kp_variable is not None:
            raise OptionError("--kp and --kp-variable apply with --field t89 only: add "
                              "--field t89, or drop them")
        return None
    if args.kp_variable is not None:
        return args.kp_variable
    if args.kp is None:
        raise OptionError("--field t89 needs Kp: give --kp VALUE (0-9), --kp FILE (a Kp time "
                          "series) or --kp-variable NAME (a Kp variable of the files)")
    try:
        value = float(args.kp)
    except ValueError:
        value = None
    if value is not None:
        if not (math.isfinite(value) and 0.0 <= value <= 9.0):
            raise OptionError(f"--kp must be a Kp value 0-9 or a file, got {args.kp}")
        return value
    if not Path(args.kp).is_file():
        raise OptionError(f"--kp {args.kp}: no such file (give a Kp value 0-9 or a Kp series "
                          "file)")
    from .errors import FieldModelError
    from .field.kp import read_kp

    try:
        return read_kp(args.kp)
    except FieldModelError as exc:
        raise OptionError(str(exc)) from None


def _cmd_summarize(args, command) -> int:
    from .batch import summarize

    diffusion = _diffusion_args(args)
    kp = _kp_args(args)
    _expand_flux_inputs(args.inputs)  # before summarize creates the output folder
    results = summarize(
        args.inputs, args.out, model=args.field, altitude_km=args.footpoint_km,
        epoch=args.epoch, mapping=args.mapping, compress=args.compression,
        overwrite=args.overwrite, fail_fast=args.fail_fast, workers=args.workers,
        scheduler=args.scheduler, command=command, log=say, debug=args.debug,
        diffusion=diffusion, kp=kp, strict=args.strict, hemispheres=args.hemispheres,
    )
    return _batch_exit(results, args, "summarize")


def _batch_exit(results, args, name) -> int:
    """Print the run's totals; return the exit code of a batch command."""
    n_ok = sum(r.status == "ok" for r in results)
    n_skip = sum(r.status == "skipped" for r in results)
    n_bad = sum(r.status == "failed" for r in results)
    say(f"{len(results)} file(s): {n_ok} written, {n_skip} skipped, {n_bad} failed; "
         f"report in {Path(args.out) / 'run-report.jsonl'}")
    if not results:
        say(f"beltkit {name}: no input files found", sys.stderr)
        return 1
    not_attempted = any(r.status == "skipped" and r.reason.startswith("not attempted")
                        for r in results)
    return 1 if n_bad or not_attempted else 0


def _cmd_psd(args, command) -> int:
    import pandas as pd

    from .batch import psd_files

    species = check_species(args.species).name
    kp = _kp_args(args)
    _expand_flux_inputs(args.inputs)  # before psd_files creates the output folder
    results = psd_files(
        args.inputs, args.out, args.mu, args.k, model=args.field, species=species,
        lstar_cadence_s=pd.to_timedelta(args.lstar_cadence).total_seconds(),
        altitude_km=args.footpoint_km, mapping=args.mapping, compress=args.compression,
        overwrite=args.overwrite, fail_fast=args.fail_fast, workers=args.workers,
        scheduler=args.scheduler, command=command, log=say, debug=args.debug, kp=kp,
    )
    return _batch_exit(results, args, "psd")


def _cmd_bin_sectors(args, command) -> int:
    import argparse as _argparse

    from .batch import bin_sectored, summarize

    _expand_flux_inputs(args.inputs)  # before bin_sectored creates the output folder
    edges = args.edges if args.edges is not None else [15.0 * k for k in range(13)]
    if not 0.0 < args.gyrotropy_level < 1.0:
        raise OptionError(f"--gyrotropy-level must lie in (0, 1), got {args.gyrotropy_level}")
    try:
        results = bin_sectored(
            args.inputs, args.out, edges,
            model=None if args.field == "b_vector" else args.field,
            gyrotropy_level=args.gyrotropy_level,
            gyrotropy_tolerance=args.gyrotropy_tolerance,
            degenerate_deg=args.degenerate_deg, mapping=args.mapping,
            compress=args.compression, overwrite=args.overwrite, fail_fast=args.fail_fast,
            workers=args.workers, scheduler=args.scheduler, command=command, log=say,
            debug=args.debug)
    except ValueError as exc:
        raise OptionError(f"--edges: {exc}" if "edges" in str(exc) else str(exc)) from None
    code = _batch_exit(results, args, "bin-sectors")
    if args.summarize is None:
        return code
    ready = [r.output for r in results if r.status in ("ok", "skipped")
             and not r.reason.startswith("not attempted")]
    if not ready:
        say("beltkit bin-sectors: no pitch-angle file to summarize", sys.stderr)
        return 1
    summaries = summarize(
        ready, args.summarize, model=args.summary_field, compress=args.compression,
        overwrite=args.overwrite, fail_fast=args.fail_fast, workers=args.workers,
        scheduler=args.scheduler, command=command, log=say, debug=args.debug)
    chained = _argparse.Namespace(out=args.summarize)
    return max(code, _batch_exit(summaries, chained, "bin-sectors --summarize"))


def _cmd_survey(args, command) -> int:
    import numpy as np

    from .batch import SurveyError, survey

    def edges(lo, hi, step, what):
        if not (step > 0 and hi > lo) or not all(map(math.isfinite, (lo, hi, step))):
            flag = f"--{what}-bins" if what in ("l", "mlt") else f"--bins {what}"
            raise ValueError(f"{flag} needs finite LOW < HIGH and STEP > 0, got "
                             f"{lo:g} {hi:g} {step:g}")
        if what == "mlt" and (lo < 0 or hi > 24):
            raise ValueError(f"--mlt-bins must lie within 0-24 h, got {lo:g} {hi:g} {step:g}")
        n = int(round((hi - lo) / step))
        return lo + step * np.arange(n + 1)

    _check_survey_inputs(args.inputs)
    binning = args.binning
    if "," in binning:
        binning = tuple(b.strip() for b in binning.split(","))
    axis_edges = {}
    for axis, *numbers in args.bins:
        try:
            lo, hi, step = (float(x) for x in numbers)
        except ValueError as exc:
            raise ValueError(f"--bins {axis} needs numbers LOW HIGH STEP, got "
                             f"{' '.join(numbers)}") from exc
        axis_edges[axis] = edges(lo, hi, step, axis)
    try:
        path = survey(args.inputs, args.out, binning=binning,
                      l_edges=edges(*args.l_bins, "l"), mlt_edges=edges(*args.mlt_bins, "mlt"),
                      edges=axis_edges, time_window=args.window, quantiles=args.quantiles,
                      bins_per_decade=args.bins_per_decade, linear_bins=args.linear_bins,
                      workers=args.workers, scheduler=args.scheduler,
                      resume=not args.restart, compress=args.compression, command=command)
    except SurveyError as exc:
        for line in exc.problems:
            say(f"FAILED  {line}")
        say(f"no survey written ({len(exc.problems)} problem(s))")
        return 1
    say(f"ok  survey -> {path}")
    return 0


def _cmd_inspect(args, command) -> int:
    from .batch import one_line
    from .io import open_flux
    from .pad.conventions import validate

    files = _expand_flux_inputs(args.inputs)
    if args.suggest_mapping:
        from .io import write_suggested_mapping

        if len(files) != 1:
            raise OptionError(f"--suggest-mapping takes exactly one FILE, got {len(files)}")
        try:
            written = write_suggested_mapping(files[0], args.suggest_mapping)
        except OSError as exc:
            say(f"FAILED  {files[0]}: {one_line(exc, files[0])}")
            return 1
        say(f"wrote  {written} (check the lines marked GUESS and NEEDED)")
        if args.mapping is None:
            args.mapping = str(written)
    bad = 0
    for path in files:
        try:
            with open_flux(path, mapping=args.mapping) as ds:
                # per-sample problems (masked and flagged by summarize, refused with
                # --strict) are listed apart from the structural ones that refuse the file
                every = validate(ds)  # strict: both kinds, one pass over the values
                problems = validate(ds, strict=False, check_values=False) if every else []
                if every and not problems:  # only bad samples: is any valid value left?
                    problems = validate(ds, strict=False)
                per_sample = [p for p in every if p not in problems]
                edges = ds.attrs.get("pitch_angle_bnds_source")
                masked = {k[len("read_flag_count_"):].replace("_", " "): int(v)
                          for k, v in ds.attrs.items() if k.startswith("read_flag_count_")}
        except Exception as exc:  # unreadable file: one line, then the next file
            if args.debug:
                import traceback

                traceback.print_exc()
            bad += 1
            say(f"FAILED  {path}: {one_line(exc, path)}")
            continue
        if problems:
            bad += 1
            say(f"BAD  {path}: {len(problems)} problem(s)")
            for problem in problems:
                say(f"    - {problem}")
        else:
            say(f"ok  {path}")
        for problem in per_sample:
            say(f"    masked and flagged by summarize (refused with --strict): {problem}")
        if edges:
            say(f"    pitch-angle bin edges from: {edges}")
        if masked:
            say("    masked when read: " + ", ".join(f"{n} {k}" for k, n in masked.items()))
    say(f"{len(files)} file(s) checked, {bad} with problems")
    return 1 if bad else 0


def _cmd_demo(args, command) -> int:
    from .demo import run_demo

    out = Path(args.out)
    written = run_demo(out)
    for p in written:
        say(f"wrote  {p}")
    say(f"demo written to {out.resolve()} ({len(written)} file(s))")
    return 0



COMMANDS = {
    "summarize": _cmd_summarize,
    "psd": _cmd_psd,
    "bin-sectors": _cmd_bin_sectors,
    "survey": _cmd_survey,
    "inspect": _cmd_inspect,
    "demo": _cmd_demo,
    "motion": lambda args, command: _print(motion_text(args)),
    "losscone": lambda args, command: _print(losscone_text(args)),
}
