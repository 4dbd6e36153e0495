"""Figures of pitch-angle data, loss-cone summaries, surveys and field models.

Every function draws with matplotlib's object interface (no pyplot state,
so it runs headless under any backend), returns the
:class:`matplotlib.figure.Figure` it drew on, and takes an ``ax`` (or
``axes``) to draw into an existing figure. Flux colour scales are
logarithmic; colour maps are perceptually uniform and readable in greyscale
and by colour-blind readers (``viridis``, ``cividis``); lines differ by style
and marker as well as by colour; every axis and colour bar names its quantity
and unit (fractions are dimensionless and carry no unit suffix).

Data that sample only part of the sphere (telescopes, or a spectrometer with
gaps) are partitioned over the *measured* solid angle only: their fractions
and fluxes are shares of what was seen, not of the whole distribution. The
figures detect this from the data (:func:`partial_coverage`: a ``coverage_*``
below 1 or the ``partial_coverage`` bit 8 of ``partition_flag``), label such
quantities "of the measured flux" / "over the measured solid angle" and say so
in a note. Samples on field lines beyond ``L_VALID_MAX`` (L > 10: outside the
outer belt, on open or strongly stretched field lines that neither a centred
dipole nor an internal field describes) are greyed out of the fraction panels
and survey maps.

Inputs follow beltkit's conventions: a flux dataset (``flux`` on ``time``,
``energy`` and ``pitch_angle`` or ``look``), its summary from
:func:`beltkit.pad.partition` or :func:`beltkit.batch.summarize`, a survey
file from :func:`beltkit.batch.survey`, and the per-longitude loss cones of
:func:`beltkit.field.loss_cones_vs_longitude`.

The package's rooms: :mod:`~beltkit.plot.style` (shared conventions),
:mod:`~beltkit.plot.distributions` (pitch-angle distributions and
spectrograms), :mod:`~beltkit.plot.surveys`, :mod:`~beltkit.plot.fields`,
:mod:`~beltkit.plot.diffusion` and :mod:`~beltkit.plot.sectors`.

Examples
--------
>>> import tempfile, beltkit.demo, beltkit.pad, xarray as xr
>>> path = beltkit.demo.generate(tempfile.mkdtemp(), n_days=1, spacecraft=("tern",))[0]
>>> ds = xr.open_dataset(path)
>>> fig = pitch_angle_distribution(ds, beltkit.pad.partition(ds), "2027-03-08T03:00")
>>> fig.axes[0].get_xlabel()
'local pitch angle (degree)'
"""

from .diffusion import diffusion_overview
from .distributions import energy_time, pitch_angle_distribution, pitch_angle_time, spectrogram
from .fields import field_model_comparison, loss_cone_longitude, psd_radial_profiles
from .sectors import sector_coverage
from .style import FLUX_LABEL, L_VALID_MAX, MIN_CONE_WIDTH_DEG, PARTIAL_NOTE, partial_coverage
from .surveys import survey_cells, survey_map

__all__ = [
    "FLUX_LABEL",
    "L_VALID_MAX",
    "MIN_CONE_WIDTH_DEG",
    "PARTIAL_NOTE",
    "diffusion_overview",
    "energy_time",
    "field_model_comparison",
    "loss_cone_longitude",
    "partial_coverage",
    "pitch_angle_distribution",
    "pitch_angle_time",
    "psd_radial_profiles",
    "sector_coverage",
    "spectrogram",
    "survey_cells",
    "survey_map",
]
