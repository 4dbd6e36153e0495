r"""A synthetic demonstration scenario with ground truth, and the whole pipeline run on it.

Everything in this module is **invented**: the "Marram" mission, its two
spacecraft, their instruments, the orbits and the storm are a scenario made
up for beltkit's demonstration and tests. No real mission's data, names or
formats are used.

The scenario
------------
Three days, 2027-03-08 to 2027-03-10 (UTC), quiet at first; an invented storm
begins on 2027-03-09 at 04:30 UTC with an injection of 50-300 keV electrons
into the outer zone and a rise of pitch-angle diffusion that fills the loss
cones, decaying over the following day while MeV electrons build up.

* **Marram-Dunlin**, a small satellite in a 650 km circular orbit of 97.9 deg
  inclination, carries the **Quill** pair of electron telescopes: ``up`` looks
  at the local zenith and ``side`` horizontally across the track, both with a
  15 deg half-angle field of view, 1 s cadence, 4 energy channels
  (about 70 keV to 2.3 MeV). Each day-file holds two orbits.
* **Marram-Tern**, a probe on a near-equatorial elliptical orbit (perigee
  600 km altitude, apogee 5.8 R_E geocentric, 10 deg inclination, period 9 h)
  carries the **Fan** pitch-angle spectrometer: 8 energies 50 keV-3 MeV and 12
  pitch-angle bins of 15 deg covering 0-180 deg, one spectrum every 120 s, 10 s
  of accumulation per bin.

The flux model
--------------
At the magnetic equator the directional flux of electrons of energy E on
shell L outside the bounce loss cone (equatorial half-angle
:math:`\alpha_c`, from :func:`beltkit.dipole.bounce_loss_cone`) is

.. math::

    j(\alpha_{eq}) = A(E, L, t)\,\sin^{n}\alpha_{eq}\,
        \left[1 - (1 - F)\, e^{-(\alpha_{eq} - \alpha_c)/w}\right],
    \qquad
    j(\alpha_{eq} < \alpha_c) = A\,\sin^{n}\alpha_c\,F,

with a two-zone amplitude A (inner zone near L = 1.6, a slot at L ~ 2-3, an
outer zone near L = 4.7 that moves inward during the injection, and a soft
component peaking near L = 10 on stretched field lines), spectra
falling with energy as power laws, an index n that is larger in the slot and
smaller when diffusion is strong, an edge width :math:`w = 0.5\,\alpha_c + 1`
deg, and a loss-cone filling :math:`F = \zeta / (1 + \zeta)` set by a
dimensionless diffusion strength :math:`\zeta(E, L, MLT, t)` that rises
during the storm (strongest at L ~ 5 on the dawn side). The flux anywhere on
the field line follows from Liouville's theorem and the first invariant
(:func:`beltkit.dipole.equatorial_pitch_angle`). All invented.

Counts are Poisson with mean :math:`j\,G\,\Delta t\,\Delta E` plus an
isotropic instrument background (a fixed count rate), where j is the
instrument's expected flux (the model averaged over the pitch-angle bin or
the telescope's circular field of view), G the stated geometric factor,
:math:`\Delta t` the accumulation time and :math:`\Delta E` the channel
width; ``flux = counts / (G Δt ΔE)`` and ``flux_err = sqrt(max(counts, 1)) /
(G Δt ΔE)``.

Ground truth
------------
Every file stores ``true_fraction_precipitating``,
``true_fraction_quasi_trapped`` and ``true_fraction_trapped`` per time and
energy, with the populations defined as the pipeline defines them (common
practice): precipitating inside the bounce loss cone (mirror field above the
weaker footpoint field at 100 km), quasi-trapped between the bounce and the
drift loss cones, trapped outside the drift loss cone. In the centred dipole
every field line of a drift shell has the same footpoint field, so the two
loss cones coincide and the true quasi-trapped fraction is exactly zero:
that is a property of the centred dipole, not of the real field. In the
IGRF at low altitude the drift loss cone is much wider than the bounce loss
cone (at 650 km and L < 2.5 away from the South Atlantic nothing is stably
trapped), so :func:`run_demo` summarises Marram-Dunlin, whose files carry
``position_geo``, with ``model="auto"`` (the IGRF at each sample's time),
and its figures show a quasi-trapped population. Marram-Tern, whose truth is
the recovery target, is summarised in the centred dipole the truth is
defined in (``model="dipole"``).

* Spectrometer (Marram-Tern): the truth is what the pipeline estimates from
  the *expected* measured flux: the solid-angle-weighted share of each
  population in the bins' expected fluxes (background included), split
  exactly at the loss-cone edges, so an unbiased pipeline recovers it to
  within its Poisson uncertainty.
* Telescopes (Marram-Dunlin): two looks cannot cover the sphere, so the truth
  there is the fraction of the model's omnidirectional flux (background
  excluded) in each population at the satellite. **This truth is not a
  recovery target.** The pipeline partitions telescope data over the
  *measured* solid angle only (two 15 deg caps; every Dunlin sample carries
  the ``partial_coverage`` flag), so its fractions and ``omni_flux`` are
  shares of what the telescopes saw, a different quantity from the
  physical shares of the whole distribution; nothing in beltkit recovers the
  latter from these data, and the recovery tests use the spectrometer only.
  The Dunlin truth is kept as a reference of the model, e.g. to show how far
  the measured shares can be from the physical ones; it is the centred
  dipole's (quasi-trapped zero), while the pipeline partitions Dunlin in the
  IGRF.

Orbit geometry uses beltkit's own frames (:mod:`beltkit.field.sun`,
:mod:`beltkit.field.coords`: sidereal time, the Sun's direction, magnetic
latitude and MLT of the IGRF-14 centred dipole of the date); ``L`` (declared
``L_definition = "dipole"``) and ``mlat`` are the centred-dipole values
(:mod:`beltkit.dipole`) the model is written in. Marram-Tern's files also
carry the dipole ``b_local``; Marram-Dunlin's carry none, so that its IGRF
partition takes the IGRF's own field at the satellite.

Scattering event (Marram-Dunlin)
--------------------------------
On the storm day's first orbit, wherever 3.5 <= L <= 6.5, the telescopes
see the steady-state pitch-angle diffusion profile of Kennel & Petschek
(:func:`beltkit.diffusion.loss_cone_profile`) instead of the smooth model,
with a known :math:`z_0` (0.3 at the event's outer edge to 20 at its inner
edge, times :math:`(E/300\,\mathrm{keV})^{0.25}`). Each look's expected flux
is the edge level :math:`A\sin^n\alpha_c` times the profile averaged over the
look's swept band, uniform in local solid angle, with the local angles mapped
to the equator by :math:`\sin^2\alpha_{eq} = \sin^2\alpha\, B_{min}/B_{local}`
in the IGRF the pipeline partitions these files in (its loss cone at 100 km).
The files store ``true_z0`` and ``true_diffusion_coefficient`` (loss time half
a bounce period; NaN outside the event), the recovery target of
:func:`beltkit.diffusion.from_pitch_angle_data` (``summarize(...,
diffusion=True)``); the ``true_fraction_*`` of those samples remain the smooth
model's.
"""

from .run import demo_figures, run_demo, tern_psd_profiles
from .scenario import SCENARIO
from .spacecraft import generate, generate_coverage, tern_flux_model

__all__ = ["SCENARIO", "demo_figures", "generate", "generate_coverage", "run_demo",
           "tern_flux_model", "tern_psd_profiles"]
