r"""Closed forms of the centred dipole field and of pitch-angle mapping along its lines.

A dipole field line of McIlwain parameter :math:`L` is
:math:`r = L R_E \cos^2\lambda` (:math:`\lambda` the magnetic latitude,
:math:`R_E` = 6371.2 km, the IGRF reference radius), and along it

.. math::

    B(L, \lambda) = \frac{B_0}{L^3}\, b(\lambda), \qquad
    b(\lambda) = \frac{\sqrt{1 + 3 \sin^2\lambda}}{\cos^6\lambda}.

With the first adiabatic invariant conserved and the energy constant,
:math:`\sin^2\alpha / B` is the same everywhere along the line, which gives
the mirror points, the mapping of pitch angles between latitudes, and the
mirror-ratio loss cones.

The default ``b0_nt`` everywhere is :data:`beltkit.constants.B0_NT`, the
IGRF-14 epoch-2020 dipole term :math:`\sqrt{g_{10}^2 + g_{11}^2 + h_{11}^2}`.

Latitudes are magnetic latitudes in degrees, in (-90, 90); the dipole is
symmetric about the equator, so the functions that return a latitude return
the northern (positive) one. Pitch angles are in degrees, 0-180; where the
physics is symmetric an angle above 90 is treated as its supplement and the
returned angle keeps the caller's side of 90.

The package's rooms: :mod:`~beltkit.dipole.checks` (argument checks,
footpoints), :mod:`~beltkit.dipole.mirror` (the field ratio and mirror
points), :mod:`~beltkit.dipole.lines` (closed forms along a line) and
:mod:`~beltkit.dipole.invariants` (the second invariant and the inverse
problem).

References
----------
J. G. Roederer, *Dynamics of Geomagnetically Trapped Radiation*
(Springer, 1970).
M. Walt, *Introduction to Geomagnetically Trapped Radiation* (Cambridge
University Press, 1994).

Examples
--------
>>> from beltkit import dipole
>>> round(dipole.bounce_loss_cone(6.6), 2)
2.52
>>> round(dipole.mirror_mlat(45.0), 3)
23.132
"""

from .checks import footpoint_cos2
from .invariants import (
    invariants_to_pitch_energy,
    second_invariant_integral,
    second_invariant_k,
    y_integral_kernel,
)
from .lines import (
    arc_length,
    bounce_loss_cone,
    equatorial_field,
    equatorial_pitch_angle,
    field_magnitude,
    footpoint_field,
    footpoint_mlat,
    l_from_position,
    local_loss_cone,
    local_pitch_angle,
    mirror_altitude,
    mirror_mlat,
    radius,
)
from .mirror import fold_pitch_angle, mirror_sin2_cos2

__all__ = [
    "arc_length",
    "bounce_loss_cone",
    "equatorial_field",
    "equatorial_pitch_angle",
    "field_magnitude",
    "footpoint_cos2",
    "footpoint_field",
    "footpoint_mlat",
    "invariants_to_pitch_energy",
    "l_from_position",
    "local_loss_cone",
    "local_pitch_angle",
    "mirror_altitude",
    "mirror_mlat",
    "mirror_sin2_cos2",
    "fold_pitch_angle",
    "radius",
    "second_invariant_integral",
    "second_invariant_k",
    "y_integral_kernel",
]
