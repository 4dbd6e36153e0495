r"""Pitch-angle diffusion rates and lifetimes from the filling of the loss cone.

Near the bounce loss cone :math:`\alpha_0` (equatorial pitch angle, small
angles), the bounce-averaged pitch-angle diffusion equation in steady state,
with particles inside the cone lost after a time :math:`\tau` and none lost
outside it, is (Kennel & Petschek 1966)

.. math::

    \frac{1}{\alpha}\frac{d}{d\alpha}\left(\alpha D \frac{df}{d\alpha}\right)
    = \begin{cases} f/\tau, & \alpha < \alpha_0 \\ 0, & \alpha > \alpha_0 \end{cases}

with :math:`D` the diffusion coefficient at the loss-cone edge (taken constant
across the narrow region). Its solution, regular at :math:`\alpha = 0`, with
:math:`f` and the diffusive flux :math:`\alpha D\, df/d\alpha` continuous at
:math:`\alpha_0`, depends on the single parameter
:math:`z_0 = \alpha_0 / \sqrt{D\tau}` (:func:`loss_cone_profile`). A measured
filling of the cone gives :math:`z_0` (:func:`z0_from_ratio`), hence

.. math:: D = \frac{\alpha_0^2}{z_0^2\, \tau}

(:func:`pitch_angle_diffusion`); :math:`z_0 < 1` is strong diffusion (the cone
is nearly full), :math:`z_0 > 1` weak diffusion (common practice).

Conventions (see ``docs/diffusion.md``):

* :math:`\alpha_0` is the equatorial bounce loss cone (feet at ``altitude_km``,
  100 km by default) and :math:`\tau` is half the bounce period of a particle
  at the loss-cone edge (``loss_time="half_bounce"``): with that choice the
  strong-diffusion limit reproduces the emptying time of an isotropic flux tube
  through both feet, :func:`strong_diffusion_lifetime` (derived there). Some
  authors take a quarter bounce period (``loss_time="quarter_bounce"``), which
  doubles :math:`D` for the same data. The choice is written into every output.
* The data-level :func:`from_pitch_angle_data` inverts a ratio of two measured
  mean fluxes, each modelled as the solid-angle average of the profile over the
  pitch angles the bins or the telescope's swept field-of-view band really
  cover, mapped to the equator by the first invariant.

References
----------
C. F. Kennel and H. E. Petschek, "Limit on stably trapped particle fluxes",
J. Geophys. Res. 71, 1 (1966).
M. Schulz and L. J. Lanzerotti, *Particle Diffusion in the Radiation Belts*
(Springer, 1974).

Examples
--------
>>> from beltkit import diffusion
>>> round(diffusion.cone_mean_ratio(1e-6), 6)
1.0
>>> z = diffusion.z0_from_ratio(diffusion.centre_edge_ratio(3.0), "centre_edge")
>>> round(z, 12)
3.0
"""

from .inversion import RATIO_KINDS, z0_from_ratio
from .measured import FLAG_MEANINGS, from_pitch_angle_data
from .profile import centre_edge_ratio, cone_mean_ratio, loss_cone_profile, two_angle_ratio
from .rates import (
    LOSS_TIMES,
    REGIME_MEANINGS,
    diffusion_regime,
    pitch_angle_diffusion,
    strong_diffusion_lifetime,
)

__all__ = [
    "FLAG_MEANINGS",
    "LOSS_TIMES",
    "RATIO_KINDS",
    "REGIME_MEANINGS",
    "centre_edge_ratio",
    "cone_mean_ratio",
    "diffusion_regime",
    "from_pitch_angle_data",
    "loss_cone_profile",
    "pitch_angle_diffusion",
    "strong_diffusion_lifetime",
    "two_angle_ratio",
    "z0_from_ratio",
]
