r"""Pitch-angle flux engine: split measured flux into precipitating, quasi-trapped and trapped.

The data conventions (``docs/conventions.md``) are enforced by one validator,
:func:`validate`. :func:`partition` computes per-sample loss cones and the
exact solid-angle partition of the measured flux with uncertainties;
:func:`to_equatorial` maps distributions to the magnetic equator;
:func:`fit_sine_power` fits :math:`A \sin^n\alpha` to the trapped part. The same
operations are available as the xarray accessor ``ds.beltkit`` once
``beltkit`` is imported. Before all that, :func:`bin_sectors` turns
spin-sectored counts into pitch-angle bins (with :func:`look_pitch_angle`
and :func:`gyrophase` of look directions).
"""

from .conventions import FLUX_UNITS, INTEGRATED_FLUX_UNITS, flux_unit_factor, validate
from .equatorial import to_equatorial
from .fill import sine_power_band_integral
from .fit import fit_sine_power
from .geometry import (
    band_overlap_solid_angle,
    band_solid_angle,
    band_weights,
    look_bands,
    look_solid_angles,
    swept_band,
)
from .looks import gyrophase, look_pitch_angle
from .losscones import cone_from_fields
from .partition import FLAG_MEANINGS, OUTPUT_NAMES, partition
from .sectors import SECTOR_FLAG_MEANINGS, bin_sectors, sector_bands

__all__ = [
    "FLAG_MEANINGS",
    "FLUX_UNITS",
    "INTEGRATED_FLUX_UNITS",
    "OUTPUT_NAMES",
    "SECTOR_FLAG_MEANINGS",
    "band_overlap_solid_angle",
    "band_solid_angle",
    "band_weights",
    "bin_sectors",
    "cone_from_fields",
    "fit_sine_power",
    "flux_unit_factor",
    "gyrophase",
    "look_bands",
    "look_pitch_angle",
    "look_solid_angles",
    "partition",
    "sector_bands",
    "sine_power_band_integral",
    "swept_band",
    "to_equatorial",
    "validate",
]
