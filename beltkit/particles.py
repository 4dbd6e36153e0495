r"""Particle species and relativistic kinematics from kinetic energy.

Every quantity here follows from a species' rest mass and charge (CODATA
values from :mod:`scipy.constants`) and the kinetic energy :math:`E_k` in keV:

.. math::

    \gamma = 1 + \frac{E_k}{m_0 c^2}, \qquad
    \beta = \frac{\sqrt{E_k (E_k + 2 m_0 c^2)}}{E_k + m_0 c^2}, \qquad
    p c = \sqrt{E_k (E_k + 2 m_0 c^2)}, \qquad
    p v = \frac{E_k (E_k + 2 m_0 c^2)}{E_k + m_0 c^2}.

The gyration quantities use the magnitude of the charge; the sense of gyration
and of drift is a separate matter (:func:`beltkit.motion.drift_direction`).

References
----------
J. D. Jackson, *Classical Electrodynamics*, 3rd ed. (Wiley, 1999), ch. 11-12
(relativistic kinematics, motion in a uniform magnetic field).
M. Walt, *Introduction to Geomagnetically Trapped Radiation* (Cambridge
University Press, 1994) (gyration and the first adiabatic invariant).

Examples
--------
>>> from beltkit import particles
>>> round(particles.lorentz_factor(511.0, "electron"), 4)
2.0
>>> particles.get_species("O+").name
'oxygen+'
"""

from __future__ import annotations

import types
from typing import NamedTuple

import numpy as np
import scipy.constants as _sc

from ._wrap import array_api, as_float_array, check_range
from .constants import GAUSS_PER_NT, KEV_J, MEV_J, NT
from .errors import PhysicsError
from .units import FLUX_UNITS, MU_UNITS

__all__ = [
    "PSD_CONSTANT",
    "PSD_UNITS",
    "SPECIES",
    "Species",
    "beta",
    "check_energy_kev",
    "first_invariant",
    "first_invariant_si",
    "flux_from_phase_space_density",
    "get_species",
    "gyrofrequency",
    "gyroperiod",
    "gyroradius",
    "lorentz_factor",
    "momentum",
    "phase_space_density",
    "pv",
    "speed",
]

# Atomic mass of the oxygen-16 atom in unified atomic mass units.
# From memory (Atomic Mass Evaluation AME2020: 15.994 914 619 57 u); scipy's
# CODATA table has no isotope masses. Checked in tests/test_particles.py
# against PlasmaPy's isotope table (`Particle("O-16 1+").mass`) and against
# the route 8 m_p + 8 m_n + 8 m_e - (binding energy 127.619 MeV)/c^2.
_O16_ATOM_MASS_U = 15.99491461957


class Species(NamedTuple):
    """A charged-particle species.

    Attributes
    ----------
    name : str
        Canonical name ("electron", "proton", "alpha", "oxygen+").
    mass_kg : float
        Rest mass in kg.
    charge_c : float
        Signed charge in coulombs (negative for the electron).
    rest_energy_kev : float
        Rest energy :math:`m_0 c^2` in keV.
    """

    name: str
    mass_kg: float
    charge_c: float
    rest_energy_kev: float


def _make(name, mass_kg, charge_number):
    return Species(
        name=name,
        mass_kg=float(mass_kg),
        charge_c=float(charge_number * _sc.elementary_charge),
        rest_energy_kev=float(mass_kg * _sc.speed_of_light**2 / KEV_J),
    )


#: Known species by canonical name (read-only mapping).
SPECIES = types.MappingProxyType(
    {
        "electron": _make("electron", _sc.electron_mass, -1),
        "proton": _make("proton", _sc.proton_mass, +1),
        # The bare helium-4 nucleus, CODATA "alpha particle mass".
        "alpha": _make("alpha", _sc.physical_constants["alpha particle mass"][0], +2),
        # Singly charged O-16 ion: the neutral atom's mass less one electron
        # (the 13.6 eV ionisation energy, ~1e-9 of the mass, is neglected).
        "oxygen+": _make(
            "oxygen+", _O16_ATOM_MASS_U * _sc.atomic_mass - _sc.electron_mass, +1
        ),
    }
)

_ALIASES = {
    "electron": "electron", "electrons": "electron", "e": "electron", "e-": "electron",
    "proton": "proton", "protons": "proton", "p": "proton", "p+": "proton", "h+": "proton",
    "alpha": "alpha", "alphas": "alpha", "he++": "alpha", "he2+": "alpha",
    "alpha particle": "alpha",
    "oxygen+": "oxygen+", "o+": "oxygen+", "o1+": "oxygen+", "oxygen": "oxygen+",
}


def get_species(name) -> Species:
    """Return the :class:`Species` for a name or alias.

    Parameters
    ----------
    name : str or Species
        A canonical name ("electron", "proton", "alpha", "oxygen+") or an alias
        ("e-", "p+", "H+", "He++", "O+"; case-insensitive). A :class:`Species`
        is returned unchanged, so user-defined species can be passed anywhere.

    Returns
    -------
    Species

    Raises
    ------
    PhysicsError
        If the name is unknown; the message lists the known names.

    Examples
    --------
    >>> get_species("p+").name
    'proton'
    """
    if isinstance(name, Species):
        return name
    key = str(name).strip().lower()
    if key in _ALIASES:
        return SPECIES[_ALIASES[key]]
    known = ", ".join(repr(k) for k in SPECIES)
    aliases = ", ".join(repr(k) for k in sorted(_ALIASES) if k not in SPECIES)
    raise PhysicsError(
        f"argument 'species' is {name!r}, which is not a known species; "
        f"use one of {known} (aliases: {aliases}) or pass a beltkit.particles.Species"
    )


def check_energy_kev(energy_kev):
    """Return kinetic energies (keV) as an array, refusing negative or infinite values."""
    return check_range(energy_kev, "energy_kev", lo=0.0, hi=np.inf, hi_open=True,
                       hint="Kinetic energy is in keV, finite and not negative")


def _pitch(pitch_angle_deg):
    return check_range(pitch_angle_deg, "pitch_angle_deg", lo=0.0, hi=180.0,
                       hint="Pitch angles are in degrees, 0-180")


def _field(b_nt):
    return check_range(b_nt, "b_nt", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                       hint="The field magnitude is in nT and must be positive")


def _pc_kev(e, e0):
    """Return p c in keV for kinetic energy `e` and rest energy `e0` (keV)."""
    return np.sqrt(e * (e + 2.0 * e0))


@array_api("1", long_name="Lorentz factor")
def lorentz_factor(energy_kev, species="electron"):
    r"""Lorentz factor from kinetic energy.

    .. math:: \gamma = 1 + E_k / (m_0 c^2)

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species (see :func:`get_species`).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\gamma` (dimensionless).

    Notes
    -----
    Special relativity, e.g. Jackson (1999) ch. 11.

    Examples
    --------
    >>> round(lorentz_factor(1000.0, "proton"), 6)
    1.001066
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    return 1.0 + e / sp.rest_energy_kev


@array_api("1", long_name="speed over speed of light")
def beta(energy_kev, species="electron"):
    r"""Speed in units of the speed of light.

    .. math:: \beta = \frac{\sqrt{E_k (E_k + 2 m_0 c^2)}}{E_k + m_0 c^2}

    This form keeps full relative precision at low energy (no
    :math:`1 - 1/\gamma^2` cancellation).

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\beta = v/c` in [0, 1).

    Notes
    -----
    Jackson (1999) ch. 11.

    Examples
    --------
    >>> round(beta(1000.0, "electron"), 4)
    0.9411
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    return _pc_kev(e, sp.rest_energy_kev) / (e + sp.rest_energy_kev)


@array_api("m s-1", long_name="particle speed")
def speed(energy_kev, species="electron"):
    r"""Particle speed from kinetic energy.

    .. math:: v = \beta c

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Speed in m/s.

    Notes
    -----
    Jackson (1999) ch. 11; ``c`` from :mod:`scipy.constants`.

    Examples
    --------
    >>> f"{speed(1.0, 'proton'):.4e}"
    '4.3769e+05'
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    return _pc_kev(e, sp.rest_energy_kev) / (e + sp.rest_energy_kev) * _sc.speed_of_light


@array_api("kg m s-1", long_name="particle momentum")
def momentum(energy_kev, species="electron"):
    r"""Relativistic momentum from kinetic energy.

    .. math:: p = \frac{\sqrt{E_k (E_k + 2 m_0 c^2)}}{c}

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Momentum in kg m/s.

    Notes
    -----
    Jackson (1999) ch. 11.

    Examples
    --------
    >>> f"{momentum(1000.0, 'electron'):.4e}"
    '7.5994e-22'
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    return _pc_kev(e, sp.rest_energy_kev) * KEV_J / _sc.speed_of_light


@array_api("keV", long_name="momentum times speed")
def pv(energy_kev, species="electron"):
    r"""Momentum times speed, the energy that sets gradient-curvature drifts.

    .. math:: p v = \gamma m_0 v^2 = \frac{E_k (E_k + 2 m_0 c^2)}{E_k + m_0 c^2}

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`p v` in keV (``2 E_k`` non-relativistically, ``E_k`` ultra-relativistically).

    Notes
    -----
    Schulz & Lanzerotti (1974), *Particle Diffusion in the Radiation Belts*, ch. 1.

    Examples
    --------
    >>> round(pv(511.0, "electron"), 1)
    766.5
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    return e * (e + 2.0 * sp.rest_energy_kev) / (e + sp.rest_energy_kev)


def _gyrofrequency(b_nt, energy_kev, sp):
    e = check_energy_kev(energy_kev)
    b = _field(b_nt)
    gamma = 1.0 + e / sp.rest_energy_kev
    return abs(sp.charge_c) * b * NT / (2.0 * np.pi * gamma * sp.mass_kg)


@array_api("Hz", long_name="relativistic gyrofrequency")
def gyrofrequency(b_nt, energy_kev, species="electron"):
    r"""Relativistic gyrofrequency (cycles per second).

    .. math:: f_g = \frac{|q| B}{2 \pi \gamma m_0}

    Parameters
    ----------
    b_nt : array_like or xarray.DataArray
        Field magnitude in nT (> 0).
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Gyrofrequency in Hz (not rad/s).

    Notes
    -----
    Jackson (1999) ch. 12; Walt (1994).

    Examples
    --------
    >>> round(gyrofrequency(1000.0, 0.0, "electron"), 1)
    27992.5
    """
    return _gyrofrequency(b_nt, energy_kev, get_species(species))


@array_api("s", long_name="gyroperiod")
def gyroperiod(b_nt, energy_kev, species="electron"):
    r"""Relativistic gyroperiod.

    .. math:: \tau_g = \frac{2 \pi \gamma m_0}{|q| B}

    Parameters
    ----------
    b_nt : array_like or xarray.DataArray
        Field magnitude in nT (> 0).
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Gyroperiod in s.

    Notes
    -----
    Jackson (1999) ch. 12.

    Examples
    --------
    >>> f"{gyroperiod(100.0, 1000.0, 'proton'):.4f}"
    '0.6566'
    """
    return 1.0 / _gyrofrequency(b_nt, energy_kev, get_species(species))


@array_api("km", long_name="gyroradius")
def gyroradius(b_nt, energy_kev, pitch_angle_deg=90.0, species="electron"):
    r"""Relativistic gyroradius.

    .. math:: r_g = \frac{p \sin\alpha}{|q| B}

    Parameters
    ----------
    b_nt : array_like or xarray.DataArray
        Field magnitude in nT (> 0).
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    pitch_angle_deg : array_like or xarray.DataArray
        Local pitch angle in degrees, 0-180 (default 90).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Gyroradius in km.

    Notes
    -----
    Jackson (1999) ch. 12; Walt (1994).

    Examples
    --------
    >>> round(gyroradius(100.0, 1000.0, 90.0, "electron"), 2)
    47.43
    """
    sp = get_species(species)
    e = check_energy_kev(energy_kev)
    b = _field(b_nt)
    a = _pitch(pitch_angle_deg)
    p = _pc_kev(e, sp.rest_energy_kev) * KEV_J / _sc.speed_of_light
    return p * np.sin(np.deg2rad(a)) / (abs(sp.charge_c) * b * NT) / 1e3


def _mu_mev_per_gauss(energy_kev, pitch_angle_deg, b_nt, sp):
    e = check_energy_kev(energy_kev)
    a = _pitch(pitch_angle_deg)
    b = _field(b_nt)
    pc_mev = _pc_kev(e, sp.rest_energy_kev) * 1e-3
    pperp2 = (pc_mev * np.sin(np.deg2rad(a))) ** 2
    return pperp2 / (2.0 * sp.rest_energy_kev * 1e-3 * b * GAUSS_PER_NT)


@array_api(MU_UNITS, long_name="first adiabatic invariant")
def first_invariant(energy_kev, pitch_angle_deg, b_nt, species="electron"):
    r"""Relativistic first adiabatic invariant in MeV/G, the unit the trade quotes.

    .. math:: \mu = \frac{p_\perp^2}{2 m_0 B} = \frac{(p c)^2 \sin^2\alpha}{2\, m_0 c^2\, B}

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    pitch_angle_deg : array_like or xarray.DataArray
        Local pitch angle in degrees, 0-180.
    b_nt : array_like or xarray.DataArray
        Local field magnitude in nT (> 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\mu` in MeV/G.

    Notes
    -----
    Walt (1994); Roederer (1970), *Dynamics of Geomagnetically Trapped
    Radiation*, ch. 1. Same quantity as :func:`first_invariant_si`, in other units.

    Examples
    --------
    >>> round(first_invariant(1000.0, 90.0, 100.0, "electron"), 1)
    1978.5
    """
    return _mu_mev_per_gauss(energy_kev, pitch_angle_deg, b_nt, get_species(species))


@array_api("J T-1", long_name="first adiabatic invariant")
def first_invariant_si(energy_kev, pitch_angle_deg, b_nt, species="electron"):
    r"""Relativistic first adiabatic invariant in SI units (J/T).

    .. math:: \mu = \frac{p_\perp^2}{2 m_0 B}

    Parameters
    ----------
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    pitch_angle_deg : array_like or xarray.DataArray
        Local pitch angle in degrees, 0-180.
    b_nt : array_like or xarray.DataArray
        Local field magnitude in nT (> 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\mu` in J/T (1 MeV/G = 1.602e-9 J/T).

    Notes
    -----
    Walt (1994).

    Examples
    --------
    >>> f"{first_invariant_si(1000.0, 90.0, 100.0, 'electron'):.4e}"
    '3.1699e-06'
    """
    mu = _mu_mev_per_gauss(energy_kev, pitch_angle_deg, b_nt, get_species(species))
    return mu * MEV_J / 1e-4  # MeV -> J, per gauss -> per tesla (1 G = 1e-4 T)


#: Factor C of f = C j / p^2: f in (c/(cm MeV))^3 from j in cm-2 s-1 sr-1 keV-1 and p
#: in MeV/c. Derived (see :func:`phase_space_density`): 10^3 keV per MeV over the
#: speed of light in cm/s, 1e3 / 2.99792458e10 = 3.33564e-8 (the often-quoted
#: 3.325e-8 is a rounding, from memory).
PSD_CONSTANT = _sc.kilo / (_sc.speed_of_light / _sc.centi)

#: UDUNITS spelling of the trade's phase-space density unit (c/(cm MeV))^3.
PSD_UNITS = "(299792458 m s-1)3 cm-3 MeV-3"


def _p2_mev2(energy_kev, sp):
    """Return (p c)^2 in MeV^2."""
    e = check_energy_kev(energy_kev)
    return e * (e + 2.0 * sp.rest_energy_kev) * 1e-6


@array_api(PSD_UNITS, long_name="phase-space density", name="psd")
def phase_space_density(flux, energy_kev, species="electron"):
    r"""Phase-space density from differential directional flux, in the trade's unit.

    .. math:: f = C\,\frac{j}{p^2}, \qquad C = \frac{10^3}{c\,[\mathrm{cm\,s^{-1}}]}
        = 3.3356 \times 10^{-8}

    with :math:`j` in cm-2 s-1 sr-1 keV-1, :math:`p` in MeV/c and :math:`f`
    in :math:`(c/(\mathrm{cm\,MeV}))^3`.

    Parameters
    ----------
    flux : array_like or xarray.DataArray
        Differential directional flux :math:`j` in cm-2 s-1 sr-1 keV-1
        (a DataArray in another spelling of a directional differential flux,
        e.g. per MeV, is converted; any other unit is refused).
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (> 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`f` in :math:`(c/(\mathrm{cm\,MeV}))^3`, units attribute
        :data:`PSD_UNITS` (the same unit in the UDUNITS grammar). NaN propagates.

    Notes
    -----
    Derivation. The particles crossing an area :math:`dA` in time :math:`dt`
    with momentum in :math:`d^3p = p^2\,dp\,d\Omega` number
    :math:`f\,v\,p^2\,dp\,d\Omega\,dA\,dt`; the flux counts them as
    :math:`j\,dE\,d\Omega\,dA\,dt`. With :math:`dE = v\,dp` (from
    :math:`E^2 = p^2c^2 + m_0^2c^4`) this gives :math:`j = p^2 f`
    (Liouville; e.g. Schulz & Lanzerotti 1974, ch. 1; Roederer 1970). In
    the trade's units, 1 keV^-1 = 10^3 MeV^-1 and
    :math:`\mathrm{cm^{-2}\,s^{-1}\,MeV^{-1}}\,(\mathrm{MeV}/c)^{-2}
    = c^2\,\mathrm{cm^{-2}\,s^{-1}\,MeV^{-3}}
    = (c^3\,\mathrm{cm^{-3}\,MeV^{-3}}) / (c\,[\mathrm{cm\,s^{-1}}])`,
    so :math:`C = 10^3 / 2.99792458\times10^{10} = 3.33564\times10^{-8}`
    (:data:`PSD_CONSTANT`, computed from :mod:`scipy.constants`; the
    3.325e-8 quoted in places is a rounding of it).

    Examples
    --------
    >>> f"{phase_space_density(1.0, 1000.0, 'electron'):.5e}"
    '1.64968e-08'
    """
    sp = get_species(species)
    j = as_float_array(flux, "flux")
    with np.errstate(divide="ignore", invalid="ignore"):
        return PSD_CONSTANT * j / _p2_mev2(energy_kev, sp)


@array_api(FLUX_UNITS, long_name="differential directional flux", name="flux")
def flux_from_phase_space_density(psd, energy_kev, species="electron"):
    r"""Differential directional flux from phase-space density (inverse of the above).

    .. math:: j = \frac{p^2 f}{C}, \qquad C = 10^3 / c\,[\mathrm{cm\,s^{-1}}]

    Parameters
    ----------
    psd : array_like or xarray.DataArray
        Phase-space density :math:`f` in :math:`(c/(\mathrm{cm\,MeV}))^3`.
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (>= 0).
    species : str or Species
        Particle species.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`j` in cm-2 s-1 sr-1 keV-1.

    Notes
    -----
    See :func:`phase_space_density` for the derivation of :math:`C`.

    Examples
    --------
    >>> round(flux_from_phase_space_density(phase_space_density(5.0, 300.0), 300.0), 12)
    5.0
    """
    sp = get_species(species)
    f = as_float_array(psd, "psd")
    return f * _p2_mev2(energy_kev, sp) / PSD_CONSTANT
