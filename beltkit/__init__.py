"""beltkit: radiation-belt pitch-angle analysis.

Place particle-detector samples on the geomagnetic field, compute bounce and
drift loss cones, split measured flux into precipitating, quasi-trapped and
trapped populations with uncertainties, map distributions to the magnetic
equator and compute gyration, bounce and drift timescales.

Subpackages and modules are imported on first use::

    import beltkit
    beltkit.dipole.bounce_loss_cone(4.0)
"""

import importlib

__version__ = "0.1.0"

_SUBMODULES = (
    "batch",
    "constants",
    "demo",
    "dipole",
    "errors",
    "field",
    "io",
    "motion",
    "pad",
    "particles",
    "plot",
)

__all__ = ["__version__", *_SUBMODULES]


def __getattr__(name):
    if name in _SUBMODULES:
        return importlib.import_module(f"{__name__}.{name}")
    raise AttributeError(f"module 'beltkit' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)


from . import accessor as _accessor  # noqa: E402,F401  (registers ds.beltkit; cheap)
