"""The ``beltkit`` command: batch conversion, survey, checks, demo and calculators.

Commands
--------
``beltkit summarize INPUT... --out DIR``
    One loss-cone summary per flux file (``DIR/<stem>.summary.nc``) and a run
    report ``DIR/run-report.jsonl``. Safe to stop and rerun: finished,
    up-to-date outputs are skipped. Example::

        beltkit summarize data/*.nc --out summaries --workers 2

    ``--field auto`` (the default) uses the IGRF at each sample's time for a
    file that carries ``position_geo`` and the centred dipole for one that
    carries only ``L`` and ``mlat``; ``--field dipole`` or ``igrf`` forces
    one model. Each summary names the model it used (``field_model``).
    ``--hemispheres`` adds the losses per hemisphere (``flux_lost_north``,
    ``flux_lost_south``, their fractions and uncertainties).
    ``--diffusion`` adds the pitch-angle diffusion outputs (``z0``,
    ``diffusion_coefficient``, ``lifetime``, intervals, regime, flags; see
    ``docs/diffusion.md``), with ``--loss-time half_bounce|quarter_bounce``,
    ``--species`` and ``--interval-sigma``::

        beltkit summarize data/*.nc --out summaries --diffusion --loss-time quarter_bounce

``beltkit psd INPUT... --mu MU... --k K... --out DIR``
    Phase-space density at fixed first and second invariants (mu in MeV/G,
    K in G^(1/2) R_E) with Roederer's L*, one ``DIR/<stem>.psd.nc`` per flux
    file, with the same safety as ``summarize`` (run report, resumable,
    ``--workers``, ``--scheduler``). ``--field auto`` uses the IGRF for files
    with ``position_geo`` (L* traced every ``--lstar-cadence``, interpolated
    in time), the centred dipole (L* = L) otherwise::

        beltkit psd data/*.nc --mu 100 300 1000 --k 0.05 0.1 --out psd --field dipole

``beltkit bin-sectors INPUT... --out DIR [--summarize DIR2]``
    Spin-sectored counts (``docs/conventions.md`` section 9) binned into
    pitch-angle files (``DIR/<stem>.pad.nc``, :func:`beltkit.pad.bin_sectors`),
    with the same safety as ``summarize`` (run report, resumable, one
    ``FAILED`` line per bad file, ``--workers``, ``--scheduler``);
    ``--summarize DIR2`` then summarizes the pitch-angle files into DIR2::

        beltkit bin-sectors raw/*.nc --out pad --edges 0 10 30 60 90 120 150 170 180
        beltkit bin-sectors raw/*.nc --out pad --summarize summaries --summary-field dipole

``beltkit survey SUMMARY... --out FILE``
    Bin summaries onto an L x MLT (or longitude x latitude, L x field strength,
    L x time, any two summary variables) grid, x time windows, in flat memory
    (resumable, ``--workers``, ``--scheduler``)::

        beltkit survey summaries --out survey.nc --l-bins 1 8 0.5 --window 1D
        beltkit survey summaries --out geo.nc --binning lon-lat --bins lat -90 90 2.5

``beltkit inspect FILE...``
    Check files against the data conventions, listing every problem::

        beltkit inspect data/day1.nc
        beltkit inspect archive/day1.cdf --suggest-mapping day1.toml   # mapping from metadata

``beltkit demo [--out DIR]``
    Write the synthetic demo mission and run the whole pipeline on it.

``beltkit motion --energy-kev E --L L --pitch-angle DEG [--species NAME]``
    Gyration, bounce and drift timescales and the mirror point in a dipole;
    a ``note:`` line (JSON: ``in_bounce_loss_cone`` and ``notes``) says when
    the pitch angle lies inside the bounce loss cone of ``--footpoint-km``
    (km above the sphere of radius R_E, :data:`beltkit.constants.R_E_KM`)::

        beltkit motion --energy-kev 1000 --L 4 --pitch-angle 45 --species electron

``beltkit losscone --L L [--mlat DEG]`` or ``--latitude .. --longitude .. --time ..``
    Bounce (and drift) loss cones at a point, either from the centred-dipole
    closed forms or at a geographic point (``--field igrf`` or ``dipole``;
    ``--time`` is required there). The two ways cannot be mixed::

        beltkit losscone --L 4.5 --mlat 20 --footpoint-km 100
        beltkit losscone --field igrf --latitude -30 --longitude -40 --time 2024-06-01T12:00

Every batch command prints one line per file (``ok``, ``skipped`` or
``FAILED  file: reason``) and exits with 0 only when every file succeeded
(1 when any failed). ``--debug`` adds tracebacks.

Exit codes: 0 success; 2 when the command line cannot be parsed or one
option's value is outside its fixed range (``--energy-kev 0``,
``--pitch-angle 200``, ``--time yesterday``; checked before anything runs);
1 when the options do not fit together (``--L`` with ``--latitude``, a
``--mlat`` inside the Earth for that ``--L``, a missing ``--time``), when no
input file matches, or when a file or computation failed. Every message names
the command-line option, not a Python argument.

When the reader of the output goes away (``beltkit motion ... | head -c 10``)
the command stops quietly: the calculators ``motion`` and ``losscone`` exit
with 0 (their answer was complete, the reader only wanted less of it); the
other commands exit with 141 (128 + SIGPIPE, as the shell reports a command
killed by a broken pipe), because their work may be unfinished.
"""

from __future__ import annotations

import argparse
import os
import shlex
import sys

from . import __version__
from . import argtypes as T
from .commands import COMMANDS, error_line, say
from .errors import OptionError
from .io.write import DEFAULT_COMPLEVEL

__all__ = ["build_parser", "main"]



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
    p.add_argument("--field", choices=("auto", "dipole", "igrf", "t89"), default="auto",
                   help="field model of the loss cones (Python: model=; default: auto = the "
                        "IGRF at each "
                        "sample's time for files with position_geo, the centred dipole for "
                        "files with only L and mlat; t89 = the IGRF plus Tsyganenko's 1989 "
                        "external field, with --kp or --kp-variable); each summary records "
                        "the model used")
    _kp_options(p)
    p.add_argument("--footpoint-km", type=T.footpoint_km, default=100.0, metavar="KM",
                   help=f"footpoint altitude defining the loss cones, {T.FOOTPOINT_REFERENCE} "
                        "(Python: altitude_km=; default: 100)")
    p.add_argument("--epoch", type=T.epoch_year, default=None, metavar="YEAR",
                   help="dipole epoch as a decimal year, with --field dipole (default: the "
                        "dipole of 2020.0)")
    _file_options(p)
    p.add_argument("--strict", action="store_true",
                   help="refuse a whole file for any bad sample (negative flux, impossible "
                        "position, values masked when read); default: mask and flag those "
                        "samples, count them in the report and summarise the rest")
    _worker_options(p, example="tcp://10.0.0.5:8786")
    p.add_argument("--hemispheres", action="store_true",
                   help="add the losses per hemisphere (flux_lost_north, flux_lost_south, "
                        "their fractions and uncertainties): worth it at low orbit, where the "
                        "two footpoints' loss cones differ")
    p.add_argument("--diffusion", action="store_true",
                   help="add pitch-angle diffusion outputs (z0, diffusion coefficient, "
                        "lifetime with their intervals, regime, flags) from the loss-cone "
                        "filling; see docs/diffusion.md")
    p.add_argument("--loss-time", choices=("half_bounce", "quarter_bounce"), default=None,
                   help="with --diffusion: loss time in the loss cone (default: half_bounce)")
    p.add_argument("--species", default=None, metavar="NAME",
                   help="with --diffusion: species of the flux (default: electron)")
    p.add_argument("--interval-sigma", type=T.positive_number, default=None, metavar="K",
                   help="with --diffusion: half-width of the intervals in sigmas of the "
                        "measured ratio (default: 2)")

    p = sub.add_parser("psd", parents=[common],
                       help="flux files -> phase-space density at fixed mu, K with L*",
                       description="Write the phase-space density at fixed first and second "
                                   "invariants (<stem>.psd.nc) per flux file into DIR, plus "
                                   "DIR/run-report.jsonl.")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="files, folders or glob patterns")
    p.add_argument("--mu", nargs="+", type=T.positive_number, required=True, metavar="MEV_PER_G",
                   help="first invariants mu in MeV/G")
    p.add_argument("--k", nargs="+", type=T.nonnegative_number, required=True,
                   metavar="G05_RE", help="second invariants K in G^(1/2) R_E")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--field", choices=("auto", "dipole", "igrf", "t89"), default="auto",
                   help="field model (Python: model=; default: auto = the IGRF for files with "
                        "position_geo, "
                        "the centred dipole, where L* = L, for files with only L and mlat; "
                        "t89 = the IGRF plus Tsyganenko's 1989 external field, with --kp or "
                        "--kp-variable)")
    _kp_options(p)
    p.add_argument("--lstar-cadence", type=T.duration, default="60s", metavar="DURATION",
                   help="cadence of the field-line work (K, mirror field, L*) in the IGRF, "
                        "interpolated linearly in time to the samples (default: 60s)")
    p.add_argument("--species", default="electron", metavar="NAME",
                   help="species of the flux (default: electron)")
    p.add_argument("--footpoint-km", type=T.footpoint_km, default=100.0, metavar="KM",
                   help=f"loss altitude of loss cones and drift shells, {T.FOOTPOINT_REFERENCE} "
                        "(Python: altitude_km=; default: 100)")
    _file_options(p)
    _worker_options(p)

    p = sub.add_parser("bin-sectors", parents=[common],
                       help="spin-sectored files -> pitch-angle files (optionally summarized)",
                       description="Bin spin-sectored counts into pitch-angle files "
                                   "(<stem>.pad.nc) in DIR, plus DIR/run-report.jsonl.")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="files, folders or glob patterns")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--edges", nargs="+", type=float, default=None, metavar="DEG",
                   help="pitch-angle bin edges in degree, increasing within 0-180 (default: "
                        "12 bins of 15 degree)")
    p.add_argument("--field", choices=("b_vector", "dipole", "igrf"), default="b_vector",
                   help="field direction: each file's b_vector (default), or the field model "
                        "at its position_geo (Python: model=, None for b_vector)")
    p.add_argument("--gyrotropy-level", type=T.positive_number, default=1e-3, metavar="P",
                   help="significance level of the gyrotropy flag (default: 1e-3)")
    p.add_argument("--gyrotropy-tolerance", type=T.nonnegative_number, default=0.1,
                   metavar="FRACTION",
                   help="relative difference of paired looks tolerated beyond their Poisson "
                        "errors (default: 0.1)")
    p.add_argument("--degenerate-deg", type=T.positive_number, default=10.0, metavar="DEG",
                   help="flag samples whose field lies within DEG of the spin axis "
                        "(default: 10)")
    _file_options(p)
    _worker_options(p)
    p.add_argument("--summarize", metavar="DIR2", default=None,
                   help="then summarize the pitch-angle files into DIR2 (as beltkit "
                        "summarize does)")
    p.add_argument("--summary-field", choices=("auto", "dipole", "igrf"), default="auto",
                   help="with --summarize: field model of the loss cones (Python: model= of "
                        "beltkit.batch.summarize; default: auto)")

    p = sub.add_parser("survey", parents=[common], help="summaries -> binned survey file",
                       description="Bin the summaries' fractions and integrated fluxes onto "
                                   "an L x MLT (or another binning's) grid x time windows.")
    p.add_argument("inputs", nargs="+", metavar="SUMMARY",
                   help="summary files, folders or glob patterns")
    p.add_argument("--out", required=True, metavar="FILE", help="survey file to write")
    p.add_argument("--l-bins", nargs=3, type=float, default=(1.0, 8.0, 0.5),
                   metavar=("LOW", "HIGH", "STEP"), help="L bins (default: 1 8 0.5)")
    p.add_argument("--mlt-bins", nargs=3, type=float, default=(0.0, 24.0, 1.0),
                   metavar=("LOW", "HIGH", "STEP"), help="MLT bins in hours (default: 0 24 1)")
    p.add_argument("--window", type=T.duration, default=None, metavar="DURATION",
                   help="time windows such as 1D, 6h, 27D (default: one window)")
    p.add_argument("--compression", type=T.zlib_level, default=DEFAULT_COMPLEVEL,
                   metavar="LEVEL", help=f"zlib level, 0 = none (default: {DEFAULT_COMPLEVEL})")
    p.add_argument("--binning", default="L-MLT", metavar="NAME",
                   help="L-MLT (default), lon-lat (geographic, needs position_geo in the "
                        "summaries), L-B (L and local field strength), L-time, or X,Y: two "
                        "per-time summary variables (give their --bins)")
    p.add_argument("--bins", nargs=4, action="append", default=[],
                   metavar=("AXIS", "LOW", "HIGH", "STEP"),
                   help="bins of one axis (L, mlt, lon, lat, b_local or a variable's name); "
                        "repeatable")
    p.add_argument("--quantiles", nargs="+", type=float, default=(), metavar="Q",
                   help="quantiles written beside the median and IQR, e.g. 0.1 0.9")
    p.add_argument("--bins-per-decade", type=T.positive_int, default=32, metavar="N",
                   help="histogram resolution of fluxes (quantile error 10^(1/2N)-1 "
                        "relative; default 32: 3.7%%)")
    p.add_argument("--linear-bins", type=T.positive_int, default=256, metavar="N",
                   help="histogram bins of fractions over 0-1 (error 1/(2N); default 256)")
    _worker_options(p)
    p.add_argument("--restart", action="store_true",
                   help="ignore the partial aggregate of an interrupted run (default: reuse "
                        "it for the summaries whose checksum still matches)")

    p = sub.add_parser("inspect", parents=[common], help="check files against the conventions",
                       description="List every convention problem of each file.")
    p.add_argument("inputs", nargs="+", metavar="FILE", help="files, folders or glob patterns")
    p.add_argument("--mapping", metavar="TOML", default=None, help="variable-name mapping file")
    p.add_argument("--suggest-mapping", metavar="OUT.toml", default=None,
                   help="write a mapping made from FILE's ISTP/CF metadata (guesses marked "
                        "in comments) to OUT.toml, then inspect FILE with it")

    p = sub.add_parser("demo", parents=[common], help="run the pipeline on the demo mission",
                       description="Write the synthetic demo data into DIR and run summarize, "
                                   "survey and the figures there.")
    p.add_argument("--out", default="beltkit-demo", metavar="DIR",
                   help="folder to write into (default: ./beltkit-demo)")

    p = sub.add_parser("motion", parents=[common],
                       help="gyration, bounce and drift of one particle in a dipole",
                       description="Timescales and mirror point of a particle on a dipole "
                                   "field line.")
    p.add_argument("--energy-kev", type=T.energy_kev, required=True, metavar="KEV",
                   help="kinetic energy (keV), > 0")
    p.add_argument("--L", type=T.l_shell, required=True, dest="L", metavar="L",
                   help="L-shell, >= 1")
    p.add_argument("--pitch-angle", type=T.pitch_deg, default=90.0, metavar="DEG",
                   help="equatorial pitch angle in degrees, 0-180 (default: 90)")
    p.add_argument("--footpoint-km", type=T.footpoint_km, default=100.0, metavar="KM",
                   help="altitude below which a particle is lost, for the bounce loss cone, "
                        f"{T.FOOTPOINT_REFERENCE} (default: 100)")
    p.add_argument("--species", default="electron",
                   help="electron, proton, alpha or oxygen+ (default: electron)")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")

    p = sub.add_parser("losscone", parents=[common], help="loss cones at a point",
                       description="Bounce and drift loss cones at a point: from L and "
                                   "magnetic latitude (dipole) or from a geographic position "
                                   "and time (--field igrf, or dipole).")
    p.add_argument("--field", choices=("dipole", "igrf"), default="dipole",
                   help="field model (Python: model=; default: dipole)")
    p.add_argument("--L", type=T.l_shell, dest="L", default=None, metavar="L",
                   help="L-shell (centred-dipole closed forms)")
    p.add_argument("--mlat", type=T.mlat_deg, default=None, metavar="DEG",
                   help="magnetic latitude with --L (default: 0)")
    p.add_argument("--latitude", type=T.latitude_deg, default=None, metavar="DEG",
                   help="geodetic latitude (with --longitude, --height-km, --time)")
    p.add_argument("--longitude", type=T.longitude_deg, default=None, metavar="DEG",
                   help="geographic longitude, east positive")
    p.add_argument("--height-km", type=T.height_km, default=None, metavar="KM",
                   help=f"height of the point, {T.HEIGHT_REFERENCE} (geodetic; default: "
                        f"{T.DEFAULT_HEIGHT_KM:g})")
    p.add_argument("--time", type=T.utc_time, default=None, metavar="ISO",
                   help=f"UTC time of a geographic point, e.g. {T.TIME_EXAMPLE} (required with "
                        f"--latitude/--longitude: MLT and the field epoch depend on it)")
    p.add_argument("--footpoint-km", type=T.footpoint_km, default=100.0, metavar="KM",
                   help=f"footpoint altitude defining the loss cones, {T.FOOTPOINT_REFERENCE} "
                        "(default: 100)")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    return parser


def _kp_options(p):
    """Add the Kp options of ``--field t89`` to a batch command's parser."""
    p.add_argument("--kp", default=None, metavar="VALUE|FILE",
                   help="with --field t89: one Kp value (0-9) for every sample, or a Kp time "
                        "series file (CSV of time,kp or netCDF with a kp variable; see "
                        "beltkit.field.read_kp)")
    p.add_argument("--kp-variable", default=None, metavar="NAME",
                   help="with --field t89: the variable of each flux file that holds Kp per "
                        "sample")



def _file_options(p):
    """Add the per-file options of a batch command (mapping, compression, rerun, failures)."""
    p.add_argument("--mapping", metavar="TOML", default=None,
                   help="variable-name mapping file for files with other names")
    p.add_argument("--compression", type=T.zlib_level, default=DEFAULT_COMPLEVEL,
                   metavar="LEVEL",
                   help=f"zlib level of the outputs, 0 = none (default: {DEFAULT_COMPLEVEL})")
    p.add_argument("--overwrite", action="store_true", help="redo outputs even if up to date")
    p.add_argument("--fail-fast", action="store_true", help="stop at the first failed file")


def _worker_options(p, example=None):
    """Add ``--workers`` and ``--scheduler`` to a batch command's parser.

    `example`, when given, is a scheduler address that the help shows.
    """
    p.add_argument("--workers", type=T.positive_int, default=1, metavar="N",
                   help="local worker processes (default: 1)")
    scheduler_help = "address of a running dask.distributed scheduler"
    if example is not None:
        scheduler_help += f", e.g. {example}"
    p.add_argument("--scheduler", metavar="ADDRESS", default=None, help=scheduler_help)


_CALCULATORS = ("motion", "losscone")


def _quiet_stdout() -> None:
    """Point standard output at the null device after its reader went away.

    So the interpreter's final flush cannot fail again (the standard recipe
    for a closed pipe).
    """
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):
        return
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, fd)
    finally:
        os.close(devnull)


def main(argv=None) -> int:
    """Run the ``beltkit`` command line; return the exit code.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        0 when everything succeeded; 1 when any file or computation failed,
        no input matched or the options do not fit together; 2 when the
        command line cannot be parsed or an option's value is out of range;
        130 when interrupted; after a closed output pipe 0 for ``motion`` and
        ``losscone`` and 141 for the other commands.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    command_name = None
    try:
        parser = build_parser()
        try:
            args = parser.parse_args(argv)
        except SystemExit as exc:  # argparse exits on --help, --version and usage errors
            return int(exc.code or 0)
        if args.command is None:
            parser.print_help(sys.stderr)
            return 2
        command_name = args.command
        command = "beltkit " + shlex.join(argv)
        try:
            return COMMANDS[args.command](args, command)
        except KeyboardInterrupt:
            say(f"beltkit {args.command}: interrupted", sys.stderr)
            return 130
        except BrokenPipeError:
            raise
        except OptionError as exc:  # the user's input, not a fault: never a traceback
            return error_line(exc, args)
        except Exception as exc:  # one line for the user; the traceback only with --debug
            if getattr(args, "debug", False):
                raise
            return error_line(exc, args)
    except BrokenPipeError:
        _quiet_stdout()
        return 0 if command_name in _CALCULATORS or command_name is None else 141


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
