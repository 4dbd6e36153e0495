"""Inputs and reporting of a batch run: file lists, output names and per-file results."""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import ConventionError

__all__ = [
    "INPUT_SUFFIXES",
    "PSD_SUFFIX",
    "REPORT_NAME",
    "SUMMARY_SUFFIX",
    "FileResult",
    "expand_inputs",
    "format_line",
    "one_line",
    "output_name",
]

#: Suffix of summary files (the input's stem goes in front).
SUMMARY_SUFFIX = ".summary.nc"
#: Suffix of phase-space density files (:func:`phase_space_density`).
PSD_SUFFIX = ".psd.nc"
#: Name of the run report written beside the outputs.
REPORT_NAME = "run-report.jsonl"
#: File name endings that a folder given as input contributes.
INPUT_SUFFIXES = (".nc", ".nc4", ".cdf", ".h5", ".hdf5")

@dataclass
class FileResult:
    """What happened to one input file.

    Attributes
    ----------
    input : str
        The input path.
    output : str or None
        The summary path (None when no output name could be formed).
    status : str
        ``"ok"`` (written), ``"skipped"`` (up to date, or not attempted after
        an earlier failure with ``fail_fast``) or ``"failed"``.
    reason : str
        One line: why it failed or was skipped; empty when ok.
    seconds : float
        Wall time spent on the file.
    flagged : dict
        Of a written summary: the number of time samples carrying each bit
        of :data:`beltkit.pad.samples.COUNTED_FLAGS` (masked input samples:
        fill, out of range, quality-rejected, negative flux or uncertainty,
        impossible position; and a given ``b_local`` below the model's
        ``b_min``, kept), by meaning; empty otherwise.
    """

    input: str
    output: str | None
    status: str
    reason: str = ""
    seconds: float = 0.0
    flagged: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Return the result as a JSON-ready dict.

        Keys ``file`` (the input), ``status``, ``reason``, ``seconds``,
        ``output`` (the summary file, or None when none exists for this input)
        and ``flagged`` (time samples per masked-sample flag, see the attribute).
        """
        has_output = self.status == "ok" or self.reason == "up to date"
        return {"file": self.input, "status": self.status, "reason": self.reason,
                "seconds": round(float(self.seconds), 3),
                "output": self.output if has_output else None,
                "flagged": dict(self.flagged)}


# ------------------------------------------------------------------------ helpers


def one_line(exc: BaseException, path=None) -> str:
    """Return an exception as one line of text (problems joined by ``; ``).

    With `path`, a leading ``"<file name>: "`` is dropped (the caller's line
    names the file already).
    """
    if isinstance(exc, ConventionError):
        text = "; ".join(exc.problems) or str(exc)
    else:
        text = str(exc) or type(exc).__name__
    text = " ".join(text.split())
    for prefix in ((str(path), Path(path).name) if path is not None else ()):
        if text.startswith(prefix + ": "):
            text = text[len(prefix) + 2:]
            break
    if isinstance(exc, (KeyError, TypeError, AttributeError, IndexError, ZeroDivisionError)):
        text = f"{type(exc).__name__}: {text}"
    return text


def expand_inputs(inputs, *, suffixes=INPUT_SUFFIXES) -> list[Path]:
    """Expand files, folders and glob patterns into a sorted, de-duplicated list of files.

    A folder contributes its files with one of `suffixes` (not hidden ones,
    not summaries or psd files); a pattern with ``*``, ``?`` or ``[`` is globbed; any other
    entry is kept as given (a missing file then fails on its own line).
    """
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    seen, out = set(), []
    for item in inputs:
        text = str(item)
        if any(ch in text for ch in "*?["):
            found = [Path(p) for p in sorted(glob.glob(text))]
        elif Path(text).is_dir():
            found = sorted(
                p for p in Path(text).iterdir()
                if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in suffixes
                and not p.name.endswith((SUMMARY_SUFFIX, PSD_SUFFIX))
            )
        else:
            found = [Path(text)]
        for p in found:
            key = os.path.abspath(p)
            if key not in seen:
                seen.add(key)
                out.append(p)
    return out


def output_name(path: Path, suffix: str = SUMMARY_SUFFIX) -> str:
    """Return the output file name of an input: its stem (without a data suffix) + `suffix`."""
    name = path.name
    for ext in (".nc4", ".nc", ".cdf", ".hdf5", ".h5"):
        if name.lower().endswith(ext):
            name = name[: -len(ext)]
            break
    else:
        name = path.stem
    return name + suffix



def format_line(r: FileResult) -> str:
    """Return the one line a run prints for a file (``ok``, ``skipped`` or ``FAILED``)."""
    if r.status == "ok":
        flagged = ", ".join(f"{n} {name}" for name, n in r.flagged.items() if n)
        tail = f"; flagged time samples: {flagged}" if flagged else ""
        return f"ok  {r.input} -> {r.output} ({r.seconds:.1f} s){tail}"
    if r.status == "skipped":
        return f"skipped  {r.input}: {r.reason}"
    return f"FAILED  {r.input}: {r.reason}"

