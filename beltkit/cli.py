"""The ``beltkit`` command (filled in by the batch, demo and calculator commands)."""

import argparse
import sys

from . import __version__

__all__ = ["main"]


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser of the ``beltkit`` command."""
    parser = argparse.ArgumentParser(prog="beltkit", description=__doc__)
    parser.add_argument("--version", action="version", version=f"beltkit {__version__}")
    parser.add_subparsers(dest="command", metavar="COMMAND")
    return parser


def main(argv=None) -> int:
    """Run the command line; return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    return 0
