"""The ``beltkit`` command: batch conversion, survey, checks, demo and calculators.

Commands
--------
``beltkit summarize INPUT... --out DIR``
    One loss-cone summary per flux file (``DIR/<stem>.summary.nc``) and a run
    report ``DIR/run-report.jsonl``. Safe to stop and rerun: finished,
    up-to-date outputs are skipped. Example::

        beltkit summarize data/*.nc --out summaries --workers 2

``beltkit survey SUMMARY... --out FILE``
    Bin summaries onto an L x MLT (x time-window) grid::

        beltkit survey summaries --out survey.nc --l-bins 1 8 0.5 --window 1D

``beltkit inspect FILE...``
    Check files against the data conventions, listing every problem::

        beltkit inspect data/day1.nc

``beltkit demo [--out DIR]``
    Write the synthetic demo mission and run the whole pipeline on it.

``beltkit motion --energy-kev E --L L --pitch-angle DEG [--species NAME]``
    Gyration, bounce and drift timescales and the mirror point in a dipole::

        beltkit motion --energy-kev 1000 --L 4 --pitch-angle 45 --species electron

``beltkit losscone --L L [--mlat DEG]`` or ``--field igrf --latitude .. --longitude ..``
    Bounce (and drift) loss cones at a point::

        beltkit losscone --L 4.5 --mlat 20 --footpoint-km 100

Every batch command prints one line per file (``ok``, ``skipped`` or
``FAILED  file: reason``) and exits with 0 only when every file succeeded
(1 when any failed, 2 for a usage error). ``--debug`` adds tracebacks.
"""

from __future__ import annotations

import argparse
import json
import shlex
import sys
from pathlib import Path

from . import __version__

__all__ = ["build_parser", "main"]


# ------------------------------------------------------------------------ parser


def _positive_int(text):
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a positive integer, got {text}")
    return value


def _level(text):
    value = int(text)
    if not 0 <= value <= 9:
        raise argparse.ArgumentTypeError(f"must be a zlib level 0-9, got {text}")
    return value


def _epoch(text):
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"must be a decimal year such as 2024.5, got {text!r}") from None


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser of the ``beltkit`` command."""
    parser = argparse.ArgumentParser(
        prog="beltkit",
        description="Radiation-belt pitch-angle analysis: batch loss-cone summaries, "
                    "surveys, file checks, a demo and physics calculators.",
    )
    parser.add_argument("--version", action="version", version=f"beltkit {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true",
                        help="print tracebacks of failures")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("summarize", parents=[common],
                       help="flux files -> loss-cone summary files",
                       description="Write one loss-cone summary (<stem>.summary.nc) per flux "
                                   "file into DIR, plus DIR/run-report.jsonl.")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="files, folders or glob patterns")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--field", choices=("dipole", "igrf"), default="dipole",
                   help="field model of the loss cones (default: dipole)")
    p.add_argument("--footpoint-km", type=float, default=100.0, metavar="KM",
                   help="footpoint altitude defining the loss cones (default: 100)")
    p.add_argument("--epoch", type=_epoch, default=None, metavar="YEAR",
                   help="dipole epoch as a decimal year (default: the dipole of 2020.0)")
    p.add_argument("--mapping", metavar="TOML", default=None,
                   help="variable-name mapping file for files with other names")
    p.add_argument("--compression", type=_level, default=4, metavar="LEVEL",
                   help="zlib level of the outputs, 0 = none (default: 4)")
    p.add_argument("--overwrite", action="store_true", help="redo outputs even if up to date")
    p.add_argument("--fail-fast", action="store_true", help="stop at the first failed file")
    p.add_argument("--workers", type=_positive_int, default=1, metavar="N",
                   help="local worker processes (default: 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="address of a running dask.distributed scheduler, e.g. "
                        "tcp://10.0.0.5:8786")

    p = sub.add_parser("survey", parents=[common], help="summaries -> L x MLT survey file",
                       description="Bin the summaries' fractions and integrated fluxes onto "
                                   "an L x MLT (x time-window) grid.")
    p.add_argument("inputs", nargs="+", metavar="SUMMARY",
                   help="summary files, folders or glob patterns")
    p.add_argument("--out", required=True, metavar="FILE", help="survey file to write")
    p.add_argument("--l-bins", nargs=3, type=float, default=(1.0, 8.0, 0.5),
                   metavar=("LOW", "HIGH", "STEP"), help="L bins (default: 1 8 0.5)")
    p.add_argument("--mlt-bins", nargs=3, type=float, default=(0.0, 24.0, 1.0),
                   metavar=("LOW", "HIGH", "STEP"), help="MLT bins in hours (default: 0 24 1)")
    p.add_argument("--window", default=None, metavar="DURATION",
                   help="time windows such as 1D, 6h, 27D (default: one window)")
    p.add_argument("--compression", type=_level, default=4, metavar="LEVEL",
                   help="zlib level, 0 = none (default: 4)")

    p = sub.add_parser("inspect", parents=[common], help="check files against the conventions",
                       description="List every convention problem of each file.")
    p.add_argument("inputs", nargs="+", metavar="FILE", help="files, folders or glob patterns")
    p.add_argument("--mapping", metavar="TOML", default=None, help="variable-name mapping file")

    p = sub.add_parser("demo", parents=[common], help="run the pipeline on the demo mission",
                       description="Write the synthetic demo data into DIR and run summarize, "
                                   "survey and the figures there.")
    p.add_argument("--out", default="beltkit-demo", metavar="DIR",
                   help="folder to write into (default: ./beltkit-demo)")

    p = sub.add_parser("motion", parents=[common],
                       help="gyration, bounce and drift of one particle in a dipole",
                       description="Timescales and mirror point of a particle on a dipole "
                                   "field line.")
    p.add_argument("--energy-kev", type=float, required=True, metavar="KEV",
                   help="kinetic energy (keV)")
    p.add_argument("--L", type=float, required=True, dest="L", metavar="L", help="L-shell")
    p.add_argument("--pitch-angle", type=float, default=90.0, metavar="DEG",
                   help="equatorial pitch angle in degrees (default: 90)")
    p.add_argument("--species", default="electron",
                   help="electron, proton, alpha or oxygen+ (default: electron)")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")

    p = sub.add_parser("losscone", parents=[common], help="loss cones at a point",
                       description="Bounce and drift loss cones at a point: from L and "
                                   "magnetic latitude (dipole) or from a geographic position "
                                   "and time (--field igrf, or dipole).")
    p.add_argument("--field", choices=("dipole", "igrf"), default="dipole",
                   help="field model (default: dipole)")
    p.add_argument("--L", type=float, dest="L", default=None, metavar="L",
                   help="L-shell (dipole closed forms)")
    p.add_argument("--mlat", type=float, default=0.0, metavar="DEG",
                   help="magnetic latitude with --L (default: 0)")
    p.add_argument("--latitude", type=float, default=None, metavar="DEG",
                   help="geodetic latitude (with --longitude, --height-km, --time)")
    p.add_argument("--longitude", type=float, default=None, metavar="DEG",
                   help="geographic longitude, east positive")
    p.add_argument("--height-km", type=float, default=650.0, metavar="KM",
                   help="height above the ellipsoid (default: 650)")
    p.add_argument("--time", default="2025-01-01T00:00:00", metavar="ISO",
                   help="UTC time for the field model (default: 2025-01-01T00:00:00)")
    p.add_argument("--footpoint-km", type=float, default=100.0, metavar="KM",
                   help="footpoint altitude defining the loss cones (default: 100)")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    return parser


# ----------------------------------------------------------------------- helpers


def _say(line, stream=None):
    print(line, file=stream or sys.stdout, flush=True)


def _error(message, args) -> int:
    _say(f"beltkit {args.command}: error: {' '.join(str(message).split())}", sys.stderr)
    return 1


def _table(rows, as_json: bool) -> str:
    """Rows of (key, label, value, unit) as an aligned table or a JSON object."""
    if as_json:
        return json.dumps({key: {"value": value, "unit": unit}
                           for key, _, value, unit in rows}, indent=2)
    cells = [(label, _number(value), unit) for _, label, value, unit in rows]
    w0 = max(len(c[0]) for c in cells)
    w1 = max(len(c[1]) for c in cells)
    return "\n".join(f"{a.ljust(w0)}  {b.rjust(w1)}  {c}".rstrip() for a, b, c in cells)


def _number(value) -> str:
    if isinstance(value, str):
        return value
    if value != value:  # NaN
        return "nan"
    if value == 0 or 1e-3 <= abs(value) < 1e6:
        return f"{value:.6g}"
    return f"{value:.4e}"


# ---------------------------------------------------------------------- commands


def _cmd_summarize(args, command) -> int:
    from .batch import summarize

    results = summarize(
        args.inputs, args.out, field=args.field, altitude_km=args.footpoint_km,
        epoch=args.epoch, mapping=args.mapping, compress=args.compression,
        overwrite=args.overwrite, fail_fast=args.fail_fast, workers=args.workers,
        scheduler=args.scheduler, command=command, log=_say, debug=args.debug,
    )
    n_ok = sum(r.status == "ok" for r in results)
    n_skip = sum(r.status == "skipped" for r in results)
    n_bad = sum(r.status == "failed" for r in results)
    _say(f"{len(results)} file(s): {n_ok} written, {n_skip} skipped, {n_bad} failed; "
         f"report in {Path(args.out) / 'run-report.jsonl'}")
    if not results:
        _say("beltkit summarize: no input files found", sys.stderr)
        return 1
    not_attempted = any(r.status == "skipped" and r.reason.startswith("not attempted")
                        for r in results)
    return 1 if n_bad or not_attempted else 0


def _cmd_survey(args, command) -> int:
    import numpy as np

    from .batch import SurveyError, survey

    def edges(lo, hi, step, what):
        if step <= 0 or hi <= lo:
            raise ValueError(f"--{what}-bins needs LOW < HIGH and STEP > 0, got "
                             f"{lo:g} {hi:g} {step:g}")
        n = int(round((hi - lo) / step))
        return lo + step * np.arange(n + 1)

    try:
        path = survey(args.inputs, args.out, l_edges=edges(*args.l_bins, "l"),
                      mlt_edges=edges(*args.mlt_bins, "mlt"), time_window=args.window,
                      compress=args.compression, command=command)
    except SurveyError as exc:
        for line in exc.problems:
            _say(f"FAILED  {line}")
        _say(f"no survey written ({len(exc.problems)} problem(s))")
        return 1
    _say(f"ok  survey -> {path}")
    return 0


def _cmd_inspect(args, command) -> int:
    from .batch import _pad_function, expand_inputs, one_line
    from .io import open_flux

    files = expand_inputs(args.inputs)
    if not files:
        _say("beltkit inspect: no input files found", sys.stderr)
        return 1
    bad = 0
    for path in files:
        try:
            with open_flux(path, mapping=args.mapping) as ds:
                problems = _pad_function("validate")(ds)
        except Exception as exc:  # unreadable file: one line, then the next file
            if args.debug:
                import traceback

                traceback.print_exc()
            bad += 1
            _say(f"FAILED  {path}: {one_line(exc, path)}")
            continue
        if problems:
            bad += 1
            _say(f"BAD  {path}: {len(problems)} problem(s)")
            for problem in problems:
                _say(f"    - {problem}")
        else:
            _say(f"ok  {path}")
    _say(f"{len(files)} file(s) checked, {bad} with problems")
    return 1 if bad else 0


def _cmd_demo(args, command) -> int:
    from .demo import run_demo

    out = Path(args.out)
    written = run_demo(out)
    for p in written:
        _say(f"wrote  {p}")
    _say(f"demo written to {out.resolve()} ({len(written)} file(s))")
    return 0


def _cmd_motion(args, command) -> int:
    from . import dipole, motion, particles

    sp = particles.get_species(args.species)
    e, L, a = args.energy_kev, args.L, args.pitch_angle
    b_eq = dipole.equatorial_field(L)
    lam_m = dipole.mirror_mlat(a)
    t_drift = motion.drift_period(e, L, a, species=sp.name)
    rows = [
        ("species", "species", sp.name, ""),
        ("energy", "kinetic energy", e, "keV"),
        ("L", "L-shell", L, ""),
        ("pitch_angle", "equatorial pitch angle", a, "degree"),
        ("lorentz_factor", "Lorentz factor", particles.lorentz_factor(e, species=sp.name), ""),
        ("speed", "speed", particles.speed(e, species=sp.name), "m/s"),
        ("b_equator", "equatorial field", b_eq, "nT"),
        ("gyrofrequency", "gyrofrequency at the equator",
         particles.gyrofrequency(b_eq, e, species=sp.name), "Hz"),
        ("gyroperiod", "gyroperiod at the equator",
         particles.gyroperiod(b_eq, e, species=sp.name), "s"),
        ("gyroradius", "gyroradius at the equator",
         particles.gyroradius(b_eq, e, a, species=sp.name), "km"),
        ("bounce_period", "bounce period", motion.bounce_period(e, L, a, species=sp.name), "s"),
        ("drift_period", "drift period", t_drift, "s"),
        ("drift_period_min", "drift period", t_drift / 60.0, "min"),
        ("drift_direction", "drift direction", motion.drift_direction(sp.name), ""),
        ("mirror_mlat", "mirror latitude", lam_m, "degree"),
        ("mirror_altitude", "mirror altitude", dipole.mirror_altitude(L, a), "km"),
        ("first_invariant", "first invariant",
         particles.first_invariant(e, a, b_eq, species=sp.name), "MeV/G"),
        ("bounce_loss_cone", "equatorial bounce loss cone (100 km)",
         dipole.bounce_loss_cone(L), "degree"),
    ]
    rows = [(k, lab, float(v) if not isinstance(v, str) else v, u) for k, lab, v, u in rows]
    _say(_table(rows, args.json))
    return 0


def _cmd_losscone(args, command) -> int:
    h = args.footpoint_km
    if args.latitude is None and args.longitude is None:
        if args.field != "dipole" or args.L is None:
            raise ValueError("give --L (and --mlat) for the dipole closed forms, or "
                             "--latitude and --longitude (with --height-km, --time) for a "
                             "point in geographic coordinates")
        from . import dipole

        L, lam = args.L, args.mlat
        rows = [
            ("L", "L-shell", L, ""),
            ("mlat", "magnetic latitude", lam, "degree"),
            ("footpoint_altitude", "footpoint altitude", h, "km"),
            ("b_local", "field at the point", dipole.field_magnitude(L, lam), "nT"),
            ("b_foot", "footpoint field", dipole.footpoint_field(L, h), "nT"),
            ("footpoint_mlat", "footpoint magnetic latitude", dipole.footpoint_mlat(L, h),
             "degree"),
            ("blc_local", "local bounce loss cone", dipole.local_loss_cone(L, lam, h), "degree"),
            ("blc_equatorial", "equatorial bounce loss cone", dipole.bounce_loss_cone(L, h),
             "degree"),
            ("dlc_local", "local drift loss cone (= bounce, centred dipole)",
             dipole.local_loss_cone(L, lam, h), "degree"),
            ("dlc_equatorial", "equatorial drift loss cone (= bounce, centred dipole)",
             dipole.bounce_loss_cone(L, h), "degree"),
        ]
    else:
        if args.latitude is None or args.longitude is None:
            raise ValueError("give both --latitude and --longitude")
        import numpy as np

        from . import field

        model = field.as_model(args.field)
        xyz = np.asarray(field.geodetic_to_geo(args.latitude, args.longitude, args.height_km),
                         dtype=float).reshape(1, 3)
        t = np.array([np.datetime64(args.time, "ns")])
        res = field.loss_cones(model, xyz, t, altitude_km=h)
        names = [
            ("L", "L-shell", ""), ("mlat_deg", "magnetic latitude", "degree"),
            ("mlt_hours", "magnetic local time", "h"), ("b_local", "field at the point", "nT"),
            ("b_min", "minimum field on the line", "nT"),
            ("b_foot_north", "northern footpoint field", "nT"),
            ("b_foot_south", "southern footpoint field", "nT"),
            ("b_foot_drift_min", "weakest footpoint field on the drift shell", "nT"),
            ("blc_local", "local bounce loss cone", "degree"),
            ("dlc_local", "local drift loss cone", "degree"),
            ("blc_equatorial", "equatorial bounce loss cone", "degree"),
            ("dlc_equatorial", "equatorial drift loss cone", "degree"),
        ]
        rows = [("model", "field model", model.name, ""),
                ("time", "time (UTC)", str(args.time), ""),
                ("latitude", "geodetic latitude", args.latitude, "degree"),
                ("longitude", "longitude", args.longitude, "degree"),
                ("height", "height", args.height_km, "km"),
                ("footpoint_altitude", "footpoint altitude", h, "km")]
        for key, label, unit in names:
            if key in res.variables:
                rows.append((key, label, float(np.asarray(res[key].values).ravel()[0]), unit))
    rows = [(k, lab, float(v) if not isinstance(v, str) else v, u) for k, lab, v, u in rows]
    _say(_table(rows, args.json))
    return 0


_COMMANDS = {
    "summarize": _cmd_summarize,
    "survey": _cmd_survey,
    "inspect": _cmd_inspect,
    "demo": _cmd_demo,
    "motion": _cmd_motion,
    "losscone": _cmd_losscone,
}


def main(argv=None) -> int:
    """Run the ``beltkit`` command line; return the exit code.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        0 when everything succeeded, 1 when any file or computation failed,
        2 for a usage error.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits on --help, --version and usage errors
        return int(exc.code or 0)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    command = "beltkit " + shlex.join(argv)
    try:
        return _COMMANDS[args.command](args, command)
    except KeyboardInterrupt:
        _say(f"beltkit {args.command}: interrupted", sys.stderr)
        return 130
    except Exception as exc:  # one line for the user; the traceback only with --debug
        if getattr(args, "debug", False):
            raise
        return _error(exc, args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
