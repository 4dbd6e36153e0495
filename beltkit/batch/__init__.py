"""Many flux files to loss-cone summaries, and summaries to a binned survey.

:func:`summarize` turns every input flux file into one summary file
(``<stem>.summary.nc``: the outputs of :func:`beltkit.pad.partition` per time
and energy, with the position carried along) in an output folder, and appends
one JSON line per file to ``run-report.jsonl`` there. It is safe to stop and
rerun:

* inputs are opened read-only and never written;
* each output is written to a temporary file in the output folder and renamed
  into place only when complete; temporary files left by a killed run are
  removed when the next run starts;
* an output whose recorded input checksum (SHA-256) and settings match the
  present ones is skipped as up to date; any other is redone
  (``overwrite=True`` redoes all);
* one bad file is reported (status ``"failed"`` with a one-line reason) and
  the others go on, unless ``fail_fast=True``.

:func:`psd_files` does the same for phase-space density at fixed invariants,
and :func:`bin_sectored` for spin-sectored files binned into pitch-angle files
(``<stem>.pad.nc``, :func:`beltkit.pad.bin_sectors`).
:func:`survey` bins the summaries' fractions and integrated fluxes onto an
L x MLT (x time-window) grid.

The package's rooms, in the order a file meets them:

* :mod:`beltkit.batch.inputs`: file lists, output names, per-file results;
* :mod:`beltkit.batch.options`: the run's options, checked once before any
  file is read (field model, Kp, diffusion; the settings recorded per output);
* :mod:`beltkit.batch.products`: what a file becomes (summary, psd), validated once;
* :mod:`beltkit.batch.pipeline`: the one per-file pipeline (open, compute, write);
* :mod:`beltkit.batch.runners`: :func:`summarize`, :func:`psd_files` and the
  serial, process-pool and dask.distributed runners;
* :mod:`beltkit.batch.survey`: :func:`survey`, the runner, and its rooms
  :mod:`~beltkit.batch.survey_grid` (variables, scales, axes, windows),
  :mod:`~beltkit.batch.survey_inputs` (summaries listed and checked),
  :mod:`~beltkit.batch.survey_fold` (samples to cell statistics, in groups),
  :mod:`~beltkit.batch.survey_checkpoint` (resuming) and
  :mod:`~beltkit.batch.survey_output` (the survey file).
"""

from ..errors import SurveyError
from .inputs import (
    INPUT_SUFFIXES,
    PSD_SUFFIX,
    REPORT_NAME,
    SUMMARY_SUFFIX,
    FileResult,
    expand_inputs,
    one_line,
)
from .options import DIFFUSION_DEFAULTS, FIELD_CHOICES, StormField
from .products import summarize_dataset
from .runners import bin_sectored, psd_files, summarize
from .sectored import SECTORS_SUFFIX
from .survey import SURVEY_VARIABLES, survey

__all__ = [
    "DIFFUSION_DEFAULTS",
    "FIELD_CHOICES",
    "INPUT_SUFFIXES",
    "PSD_SUFFIX",
    "REPORT_NAME",
    "SECTORS_SUFFIX",
    "SUMMARY_SUFFIX",
    "SURVEY_VARIABLES",
    "FileResult",
    "StormField",
    "SurveyError",
    "bin_sectored",
    "expand_inputs",
    "one_line",
    "psd_files",
    "summarize",
    "summarize_dataset",
    "survey",
]
