"""The geomagnetic field: models, coordinates, field-line tracing, L and loss cones.

Field models share one small interface (:class:`FieldModel`): the field
vector in GEO Cartesian coordinates at arrays of points and times. The
centred dipole of an epoch (:class:`CenteredDipole`) is the fast default; the
International Geomagnetic Reference Field (:class:`IGRF`, IAGA IGRF-14) is the
real main field. :class:`T89` adds Tsyganenko's (1989) Kp-parameterised
external field to either.

Names are imported from their modules on first use.
"""

import importlib

from .trace import trace  # noqa: F401  (bound eagerly: the function shares its module's name)

_EXPORTS = {
    # models.py
    "FieldModel": "models",
    "CenteredDipole": "models",
    "IGRF": "models",
    "as_model": "models",
    # t89.py
    "T89": "t89",
    # kp.py
    "read_kp": "kp",
    # igrf.py
    "igrf_coefficients": "igrf",
    "igrf_field_spherical": "igrf",
    "igrf_field_cartesian": "igrf",
    # coords.py
    "convert": "coords",
    "geodetic_to_geo": "coords",
    "geo_to_geodetic": "coords",
    "magnetic_coordinates": "coords",
    "magnetic_local_time": "coords",
    "sun_direction_geo": "coords",
    # sun.py
    "sun_direction_gei": "sun",
    "decimal_year": "timeconv",
    # trace.py
    "trace": "trace",
    "integral_invariant": "trace",
    # lshell.py
    "mcilwain_l": "lshell",
    "hilton_l": "lshell",
    "dipole_l": "lshell",
    # invariants.py
    "second_invariant_k": "invariants",
    "lstar": "invariants",
    "LSTAR_REASONS": "invariants",
    # losscone.py
    "loss_cones": "losscone",
    "drift_shell_table": "driftshells",
    "loss_cones_vs_longitude": "losscone",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name):
    if name in _EXPORTS:
        module = importlib.import_module(f"{__name__}.{_EXPORTS[name]}")
        return getattr(module, name)
    raise AttributeError(f"module 'beltkit.field' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
