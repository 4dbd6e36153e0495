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
``position_geo``, with ``field="auto"`` (the IGRF at each sample's time),
and its figures show a quasi-trapped population. Marram-Tern, whose truth is
the recovery target, is summarised in the centred dipole the truth is
defined in (``field="dipole"``).

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

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__, dipole
from .constants import R_E_KM

__all__ = ["SCENARIO", "demo_figures", "generate", "generate_coverage", "run_demo",
           "tern_flux_model", "tern_psd_profiles"]

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"

#: The invented scenario's parameters (documentation of what `generate` does).
SCENARIO = {
    "mission": "Marram (invented, synthetic)",
    "start": "2027-03-08T00:00:00",
    "n_days": 3,
    "storm_onset": "2027-03-09T04:30:00",
    # Marram-Dunlin: circular low orbit. The period follows Kepler's third law
    # for a = R_E + 650 km (tests check it against astropy's GM_earth).
    "dunlin": {
        "altitude_km": 650.0,
        "inclination_deg": 97.9,
        "period_s": 5855.0,
        "ascending_node_local_time_h": 21.5,
        "first_orbit_utc_h": 6.0,
        "orbits_per_day": 2,
        "cadence_s": 1.0,
        "energy_edges_kev": (50.0, 120.0, 300.0, 800.0, 2300.0),
        "half_angle_deg": 15.0,
        "geometric_factor_cm2_sr": 1e-2,
        "accumulation_s": 1.0,
        "background_counts_per_s": 0.5,
        # scattering event: on the storm day's first orbit, wherever 3.5 <= L <= 6.5, the
        # looks see the steady-state diffusion profile with a known z0 (truth: true_z0)
        "event_day": "2027-03-09",
        "event_l_range": (3.5, 6.5),
        "event_z0_range": (0.3, 20.0),
        "event_z0_energy_exponent": 0.25,
    },
    # Marram-Tern: elliptical near-equatorial orbit, apogee 5.8 R_E geocentric.
    "tern": {
        "perigee_altitude_km": 600.0,
        "apogee_re": 5.8,
        "inclination_deg": 10.0,
        "period_s": 32391.0,
        "apogee_local_time_h": 4.0,
        "cadence_s": 120.0,
        "n_energy": 8,
        "energy_range_kev": (50.0, 3000.0),
        "n_pitch": 12,
        "geometric_factor_cm2_sr": 1e-3,
        "accumulation_s": 10.0,
        "background_counts_per_s": 2.5,
        # a local source of relativistic electrons near L* = 4.75 that grows during the
        # recovery (only in the spectrometer's flux): f at fixed mu and K gets a peak there
        # (truth: true_local_source_factor, the flux multiplier at each sample and energy)
        "source_lstar": 4.75,
        "source_width": 0.3,
        "source_gain": 15.0,
        "source_growth_h": 20.0,
        "source_energy_kev": 300.0,
        # the demo's phase-space density product (beltkit psd, centred dipole, L* = L)
        "psd_mu_mev_per_g": (300.0, 1000.0),
        "psd_k_g05_re": (0.05,),
    },
}


# --------------------------------------------------------------------------- geometry
def _gei_to_geo(xyz, time):
    """Rotate GEI vectors into GEO about the common z axis by the sidereal angle."""
    from .field.sun import gmst_deg

    theta = np.radians(gmst_deg(time))
    c, s = np.cos(theta), np.sin(theta)
    x, y, z = xyz[..., 0], xyz[..., 1], xyz[..., 2]
    return np.stack([c * x + s * y, -s * x + c * y, z], axis=-1)


def _magnetic(xyz_geo_km, time):
    """Return MAG-frame position (km), magnetic latitude (deg), MLT (h) and r (R_E)."""
    from .field.coords import convert, magnetic_coordinates, magnetic_local_time

    mlat, _, r_re = magnetic_coordinates(xyz_geo_km, time)
    mlt = magnetic_local_time(xyz_geo_km, time)
    xyz_mag = np.asarray(convert(xyz_geo_km, time, "GEO", "MAG"), float)
    return xyz_mag, np.asarray(mlat, float), np.asarray(mlt, float), np.asarray(r_re, float)


def _orbit_gei(time, t0, *, a_km, ecc, inc_deg, raan_rad, argp_rad, period_s):
    """Keplerian positions (GEI km) and velocities' directions at `time`."""
    mean_anom = 2 * np.pi * ((time - t0) / np.timedelta64(1, "s")) / period_s
    ecc_anom = mean_anom.copy()
    for _ in range(12):  # Newton iterations on Kepler's equation E - e sin E = M
        ecc_anom = ecc_anom - (ecc_anom - ecc * np.sin(ecc_anom) - mean_anom) / (
            1 - ecc * np.cos(ecc_anom))
    p = a_km * (np.cos(ecc_anom) - ecc)
    q = a_km * np.sqrt(1 - ecc**2) * np.sin(ecc_anom)
    dp = -np.sin(ecc_anom)
    dq = np.sqrt(1 - ecc**2) * np.cos(ecc_anom)
    inc = np.radians(inc_deg)
    co, so = np.cos(raan_rad), np.sin(raan_rad)
    cw, sw = np.cos(argp_rad), np.sin(argp_rad)
    ci, si = np.cos(inc), np.sin(inc)
    p_hat = np.array([co * cw - so * sw * ci, so * cw + co * sw * ci, sw * si])
    q_hat = np.array([-co * sw - so * cw * ci, -so * sw + co * cw * ci, cw * si])
    pos = p[:, None] * p_hat + q[:, None] * q_hat
    vel = dp[:, None] * p_hat + dq[:, None] * q_hat
    normal = np.cross(p_hat, q_hat)
    return pos, vel / np.linalg.norm(vel, axis=-1, keepdims=True), normal


def _sun_right_ascension(time):
    from .field.sun import sun_direction_gei

    s = sun_direction_gei(time)
    return np.arctan2(s[..., 1], s[..., 0])


# --------------------------------------------------------------------------- flux model
def _f32(values):
    """Round to float32 (the stored precision) so truth and files use identical positions."""
    return np.asarray(values, dtype=np.float32).astype(float)


def _hours(time, ref):
    return (time - ref) / np.timedelta64(3600, "s")


def _storm_profiles(time):
    """Injection, diffusion and build-up profiles (0-1) of the invented storm."""
    dt_h = _hours(time, np.datetime64(SCENARIO["storm_onset"], "ns"))
    after = np.clip(dt_h, 0.0, None)
    on = (dt_h > 0).astype(float)
    rise = 1.0 - np.exp(-after / 0.5)
    injection = on * rise * np.exp(-after / 10.0)
    diffusion = on * rise * np.exp(-after / 14.0)
    buildup = on * (1.0 - np.exp(-after / 20.0))
    return injection, diffusion, buildup


def _local_source(energy_kev, L, time):
    r"""Flux multiplier (time, energy) of the spectrometer's growing local source.

    .. math::

        1 + G\,(1 - e^{-\Delta t/\tau})\,
        e^{-(L - L_s)^2 / (2 w^2)}\,\frac{E}{E + E_s}

    after the storm onset (:math:`\Delta t > 0`), 1 before it; in the centred
    dipole :math:`L^* = L`, and a factor that does not depend on pitch angle
    multiplies f at every (mu, K) alike. Invented.
    """
    p = SCENARIO["tern"]
    dt_h = _hours(time, np.datetime64(SCENARIO["storm_onset"], "ns"))
    growth = np.where(dt_h > 0, 1.0 - np.exp(-np.clip(dt_h, 0.0, None) / p["source_growth_h"]),
                      0.0)
    shape = np.exp(-0.5 * ((np.asarray(L, float) - p["source_lstar"]) / p["source_width"]) ** 2)
    E = np.asarray(energy_kev, float)[None, :]
    return 1.0 + p["source_gain"] * (growth * shape)[:, None] * E / (E + p["source_energy_kev"])


def _belt(energy_kev, L, mlt, time):
    """Amplitude A, index n and filling F on (time, energy) grids; and the BLC (time,)."""
    E = np.asarray(energy_kev, float)[None, :]
    Lc = L[:, None]
    inj, dif, bld = (p[:, None] for p in _storm_profiles(time))
    inner = 4e5 * np.exp(-0.5 * ((Lc - 1.6) / 0.28) ** 2) * (E / 100.0) ** -2.6 * np.exp(
        -E / 1500.0)
    centre = 4.7 - 0.9 * inj
    width = np.where(Lc < centre, 0.55 + 0.25 * inj, 1.1)
    outer = 2e6 * (E / 100.0) ** -2.1 * np.exp(-0.5 * ((Lc - centre) / width) ** 2)
    outer = outer * (1.0 + 6.0 * inj * np.exp(-E / 200.0)) * (
        1.0 + 2.0 * bld * (E / 1000.0) ** 0.7)
    boundary = np.exp(-((np.clip(Lc - 7.0, 0.0, None) / 2.0) ** 2))
    # soft electrons of the stretched night-side and high-latitude field lines
    sheet = 3e4 * (E / 100.0) ** -3.0 * np.exp(-0.5 * ((Lc - 10.0) / 3.0) ** 2) * (
        1.0 + 2.0 * inj)
    amplitude = (inner + outer) * boundary + sheet
    dawn = 1.0 + 0.7 * np.cos(2 * np.pi * (mlt[:, None] - 7.0) / 24.0)
    zeta = 0.1 + 3.0 * dif * np.exp(-0.5 * ((Lc - 5.0) / 1.3) ** 2) * dawn * (E / 200.0) ** -0.3
    # stretched field lines beyond L ~ 7 scatter strongly: an isotropic boundary
    zeta = zeta + 30.0 * np.clip((Lc - 6.5) / 2.0, 0.0, None) ** 2
    index = (1.0 + 1.4 * np.exp(-0.5 * ((Lc - 2.6) / 0.7) ** 2)
             + 0.4 * (E / 1000.0) ** 0.5) / (1.0 + 0.4 * zeta)
    filling = zeta / (1.0 + zeta)
    blc = np.asarray(dipole.bounce_loss_cone(L, altitude_km=100.0), float)
    return amplitude, index, filling, blc


def _model_flux(alpha_local_deg, mlat, amplitude, index, filling, blc):
    """Directional flux at local pitch angles (time, energy, *nodes) on the field line.

    `alpha_local_deg` has shape (time, 1, ...); `amplitude`, `index`, `filling`
    (time, energy); `mlat`, `blc` (time,).
    """
    extra = alpha_local_deg.ndim - 2
    expand = (slice(None), slice(None)) + (None,) * extra
    folded = np.where(alpha_local_deg > 90.0, 180.0 - alpha_local_deg, alpha_local_deg)
    mlat_b = mlat.reshape((-1,) + (1,) * (alpha_local_deg.ndim - 1))
    alpha_eq = np.asarray(dipole.equatorial_pitch_angle(folded, mlat_b), float)
    c = blc.reshape(mlat_b.shape)
    width = 0.5 * c + 1.0
    A, n, F = amplitude[expand], index[expand], filling[expand]
    sin_c = np.sin(np.radians(c))
    outside = np.sin(np.radians(alpha_eq)) ** n * (
        1.0 - (1.0 - F) * np.exp(-(alpha_eq - c) / width))
    inside = sin_c**n * F
    return A * np.where(alpha_eq >= c, outside, inside)


def _energy_grid(lo, hi, n):
    ratio = (hi / lo) ** (1.0 / (n - 1))
    centres = lo * ratio ** np.arange(n)
    edges = np.concatenate([[lo / np.sqrt(ratio)], centres * np.sqrt(ratio)])
    return centres, np.stack([edges[:-1], edges[1:]], axis=-1)


def _overlap(a1, a2, r1, r2):
    """Solid-angle fraction of the pitch-angle band [a1, a2] inside [r1, r2] (degrees)."""
    lo = np.maximum(a1, r1)
    hi = np.minimum(a2, r2)
    cos = np.cos(np.radians([a1, a2]))
    part = np.where(hi > lo, np.cos(np.radians(lo)) - np.cos(np.radians(hi)), 0.0)
    return part / (cos[0] - cos[1])


def _counts_to_flux(rng, mean_flux, factor, background_flux):
    """Poisson counts of mean (flux + background) / factor; flux and its error."""
    expected = (mean_flux + background_flux) / factor
    counts = rng.poisson(expected)
    flux = counts * factor
    flux_err = np.sqrt(np.maximum(counts, 1)) * factor
    return counts, flux, flux_err


def _common_attrs(name, instrument, day, comment):
    return {
        "title": f"SYNTHETIC DATA: invented {name} {instrument} electron flux, {day}",
        "comment": ("Synthetic, invented scenario generated by beltkit.demo for demonstration "
                    "and tests; not a real mission or measurement. " + comment),
        "source": f"beltkit {__version__} beltkit.demo.generate",
        "mission": "Marram (invented)",
        "spacecraft": name,
        "instrument": instrument,
        "references": "beltkit documentation, demo scenario",
    }


def _position_vars(time, xyz_geo, mlat, mlt, L, b_local=None):
    f32 = "float32"
    out = {
        "L": ("time", L.astype(f32), {"units": "1", "long_name": "dipole L-shell",
                                      "L_definition": "dipole"}),
        "mlat": ("time", mlat.astype(f32),
                 {"units": "degree", "long_name": "magnetic latitude (dipole)"}),
        "mlt": ("time", mlt.astype(f32), {"units": "hour", "long_name": "magnetic local time"}),
        "position_geo": (("time", "xyz"), xyz_geo.astype(f32),
                         {"units": "km", "long_name": "spacecraft position, GEO Cartesian"}),
    }
    if b_local is not None:
        out["b_local"] = ("time", b_local.astype(f32),
                          {"units": "nT",
                           "long_name": "field magnitude at the spacecraft (dipole)"})
    return out


def _truth_vars(dims, prec, quasi, trapped, filling, index, comment):
    attrs = {"units": "1", "comment": comment}
    return {
        "true_fraction_precipitating": (
            dims, prec.astype("float32"),
            {**attrs, "long_name": "generator truth: precipitating fraction"}),
        "true_fraction_quasi_trapped": (
            dims, quasi.astype("float32"),
            {**attrs, "long_name": "generator truth: quasi-trapped fraction"}),
        "true_fraction_trapped": (
            dims, trapped.astype("float32"),
            {**attrs, "long_name": "generator truth: trapped fraction"}),
        "true_loss_cone_filling": (
            dims, filling.astype("float32"),
            {"units": "1", "long_name": "generator parameter: loss-cone filling F"}),
        "true_sine_index": (
            dims, index.astype("float32"),
            {"units": "1", "long_name": "generator parameter: index n of the equatorial "
                                        "sin^n shape outside the loss cone"}),
    }


# --------------------------------------------------------------------------- spacecraft
def _tern_day(day_start, rng):
    p = SCENARIO["tern"]
    t_start = np.datetime64(SCENARIO["start"], "ns")
    n = int(round(86_400 / p["cadence_s"]))
    time = day_start + (np.arange(n) * p["cadence_s"] * 1e9).astype("timedelta64[ns]")
    r_p = R_E_KM + p["perigee_altitude_km"]
    r_a = p["apogee_re"] * R_E_KM
    a, ecc = 0.5 * (r_p + r_a), (r_a - r_p) / (r_a + r_p)
    # apogee towards the chosen local time at the scenario's start (orbit fixed in space)
    ra_sun = _sun_right_ascension(t_start)
    argp_apogee = ra_sun + np.radians((p["apogee_local_time_h"] - 12.0) * 15.0)
    pos, _, _ = _orbit_gei(time, t_start, a_km=a, ecc=ecc, inc_deg=p["inclination_deg"],
                           raan_rad=0.0, argp_rad=argp_apogee + np.pi,
                           period_s=p["period_s"])
    xyz_geo = _gei_to_geo(pos, time)
    _, mlat, mlt, r_re = _magnetic(xyz_geo, time)
    L, mlat, mlt = (_f32(v) for v in (dipole.l_from_position(r_re, mlat), mlat, mlt))
    b_local = np.asarray(dipole.field_magnitude(L, mlat), float)

    energy, e_bnds = _energy_grid(*p["energy_range_kev"], p["n_energy"])
    a_edges = np.linspace(0.0, 180.0, p["n_pitch"] + 1)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    A, n_idx, F, blc = _belt(energy, L, mlt, time)
    source = _local_source(energy, L, time)
    A = A * source

    # expected bin flux: solid-angle average over each bin (Gauss-Legendre in cos alpha)
    x, w = np.polynomial.legendre.leggauss(12)
    mu1, mu2 = np.cos(np.radians(a_edges[:-1])), np.cos(np.radians(a_edges[1:]))
    mu = 0.5 * (mu1 + mu2)[:, None] + 0.5 * (mu1 - mu2)[:, None] * x[None, :]
    nodes = np.degrees(np.arccos(np.clip(mu, -1.0, 1.0)))  # (pitch, node)
    j = _model_flux(nodes[None, None], mlat, A, n_idx, F, blc)  # (time, energy, pitch, node)
    mean_flux = np.einsum("tepn,n->tep", j, w) / w.sum()

    d_e = e_bnds[:, 1] - e_bnds[:, 0]
    factor = 1.0 / (p["geometric_factor_cm2_sr"] * p["accumulation_s"] * d_e)  # flux per count
    bg_flux = p["background_counts_per_s"] * p["accumulation_s"] * factor
    factor_b = factor[None, :, None]
    counts, flux, flux_err = _counts_to_flux(rng, mean_flux, factor_b, bg_flux[None, :, None])

    # truth: the populations' shares of the expected measured flux, split exactly in the bins
    llc = np.asarray(dipole.local_loss_cone(L, mlat, altitude_km=100.0), float)  # (time,)
    a1, a2 = a_edges[:-1][None, :], a_edges[1:][None, :]
    in_cone = (_overlap(a1, a2, 0.0, llc[:, None])
               + _overlap(a1, a2, 180.0 - llc[:, None], 180.0))  # (time, pitch)
    omega = 2 * np.pi * (mu1 - mu2)
    expected = (mean_flux + bg_flux[None, :, None]) * omega
    total = expected.sum(axis=-1)
    prec = (expected * in_cone[:, None, :]).sum(axis=-1) / total
    quasi = np.zeros_like(prec)
    trapped = 1.0 - prec

    comment = ("Populations as in beltkit.pad.partition with the centred dipole at 100 km: "
               "the solid-angle-weighted share of the expected measured flux (instrument "
               "background included) in each population, each pitch-angle bin split exactly at "
               "the loss-cone edge. Bounce and drift loss cones coincide in a dipole, so the "
               "true quasi-trapped fraction is 0.")
    data_vars = {
        "flux": (("time", "energy", "pitch_angle"), flux.astype("float32"),
                 {"units": FLUX_UNITS, "long_name": "differential directional electron flux",
                  "ancillary_variables": "flux_err"}),
        "flux_err": (("time", "energy", "pitch_angle"), flux_err.astype("float32"),
                     {"units": FLUX_UNITS, "long_name": "flux uncertainty (1 sigma, Poisson)"}),
        "counts": (("time", "energy", "pitch_angle"), counts.astype("int32"),
                   {"units": "1", "long_name": "detector counts per sample and bin"}),
        "energy_bnds": (("energy", "nv"), e_bnds, {"units": "keV"}),
        "pitch_angle_bnds": (("pitch_angle", "nv"),
                             np.stack([a_edges[:-1], a_edges[1:]], -1), {"units": "degree"}),
        **_response_vars(factor, p, per="bin", accumulated="bin"),
        **_position_vars(time, xyz_geo, mlat, mlt, L, b_local),
        **_truth_vars(("time", "energy"), prec, quasi, trapped, F, n_idx, comment),
        "true_local_source_factor": (
            ("time", "energy"), source.astype("float32"),
            {"units": "1", "long_name": "true flux multiplier of the local source",
             "comment": ("Invented local source (beltkit.demo._local_source): the model flux "
                         "is multiplied by this factor at every pitch angle, so the phase-space "
                         "density at fixed mu and K is too; it peaks at L* = L = "
                         f"{p['source_lstar']} (dipole) and grows after the storm onset.")}),
    }
    day = str(day_start)[:10]
    ds = xr.Dataset(
        data_vars,
        coords={
            **_time_energy_coords(time, energy),
            "pitch_angle": ("pitch_angle", alpha, {"units": "degree",
                                                   "long_name": "local pitch angle",
                                                   "bounds": "pitch_angle_bnds"}),
        },
        attrs=_common_attrs("Marram-Tern", "Fan pitch-angle spectrometer", day,
                            _FLUX_FROM_COUNTS),
    )
    return ds


def tern_flux_model(day_start, rng, n_times=None):
    """Return one Marram-Tern day-file and its model flux at any local pitch angle.

    The hook of :mod:`beltkit.demo_sectors` (the spectrometer as spin-sectored
    counts): the day's dataset as :func:`generate` writes it, and a function
    ``flux(alpha_local_deg)`` of an array shaped ``(time, 1, ...)`` giving the
    model's directional flux (cm-2 s-1 sr-1 keV-1, background excluded) with
    shape ``(time, energy, ...)``, at the file's own (float32) positions;
    `n_times` keeps the day's first spectra only.
    """
    ds = _tern_day(np.datetime64(day_start, "ns"), rng)
    if n_times is not None:
        ds = ds.isel(time=slice(0, int(n_times)))
    time = ds["time"].values
    energy = ds["energy"].values
    L, mlat, mlt = (ds[v].values.astype(float) for v in ("L", "mlat", "mlt"))
    A, n_idx, F, blc = _belt(energy, L, mlt, time)
    A = A * _local_source(energy, L, time)

    def flux(alpha_local_deg):
        return _model_flux(np.asarray(alpha_local_deg, float), mlat, A, n_idx, F, blc)

    return ds, flux


_FLUX_FROM_COUNTS = ("Flux = counts / (geometric_factor * accumulation_time * channel "
                     "width); flux_err = sqrt(max(counts, 1)) likewise.")


_EVENT_COMMENT = (
    "Scattering event on the storm day's first orbit at 3.5 <= L <= 6.5: each look's expected "
    "flux is the edge level A sin^n(alpha_c) times the mean, over its swept band (uniform in "
    "local solid angle), of the Kennel-Petschek steady-state profile "
    "(beltkit.diffusion.loss_cone_profile) with this z0, local angles mapped to the equator "
    "with the IGRF B_min/B_local and loss cone (100 km) that the pipeline uses; D = alpha0^2 "
    "/ (z0^2 tau), tau half the dipole bounce period at the loss-cone edge. The "
    "true_fraction_* of these samples remain those of the smooth model.")


def _response_vars(factor, p, *, per, accumulated):
    """Return the instrument-response variables shared by both instruments' files."""
    return {
        "counts_to_flux": ("energy", factor, {"units": FLUX_UNITS,
                                              "long_name": "flux per count (flux = "
                                                           "counts_to_flux * counts)"}),
        "geometric_factor": ((), p["geometric_factor_cm2_sr"],
                             {"units": "cm2 sr", "long_name": f"geometric factor per {per}"}),
        "accumulation_time": ((), p["accumulation_s"],
                              {"units": "s",
                               "long_name": f"accumulation time per {accumulated}"}),
    }


def _time_energy_coords(time, energy):
    """Return the time and energy coordinates shared by both instruments' files."""
    return {
        "time": ("time", time, {"standard_name": "time", "long_name": "time (UTC)"}),
        "energy": ("energy", energy, {"units": "keV", "long_name": "electron kinetic energy",
                                      "bounds": "energy_bnds"}),
    }


def _cap_nodes(half_angle_deg, n_theta=4, n_phi=12):
    """Quadrature of a circular cap: polar angles, azimuths and weights (sum 1)."""
    x, w = np.polynomial.legendre.leggauss(n_theta)
    cos_h = np.cos(np.radians(half_angle_deg))
    mu = 0.5 * (1 + cos_h) + 0.5 * (1 - cos_h) * x
    phi = (np.arange(n_phi) + 0.5) * 2 * np.pi / n_phi
    theta = np.arccos(mu)
    weights = np.repeat(w, n_phi) / (w.sum() * n_phi)
    return np.repeat(theta, n_phi), np.tile(phi, n_theta), weights


def _event_cones(time, xyz_geo, mlat, mlt, L, look_pa, half_deg, energy, e_bnds):
    """Loss cones of the pipeline (IGRF, 100 km) at the event samples.

    The partition of the files (``field="auto"``: IGRF at each sample's time)
    is run on the event samples' positions and looks, so that the profile is
    mapped with the very loss cones and field ratio the pipeline uses.
    """
    from .pad import partition

    n = time.size
    probe = xr.Dataset(
        {"flux": (("time", "energy", "look"), np.ones((n, energy.size, 2), "float32"),
                  {"units": FLUX_UNITS}),
         "energy_bnds": (("energy", "nv"), e_bnds, {"units": "keV"}),
         "look_pitch_angle": (("time", "look"), look_pa.astype("float32"),
                              {"units": "degree"}),
         "look_half_angle": ("look", np.full(2, half_deg), {"units": "degree"}),
         **_position_vars(time, xyz_geo, mlat, mlt, L)},
        coords={"time": time, "energy": ("energy", energy, {"units": "keV"})})
    out = partition(probe, model="igrf", altitude_km=100.0)
    return {k: np.asarray(out[k].values, float)
            for k in ("blc_equatorial", "blc_local", "b_local", "b_min", "L")}


def _scattering_event(L, energy, look_pa, cones, p):
    """z0 and D of the event, and the looks' band means of the diffusion profile.

    z0 = z_lo (z_hi / z_lo)^s (E / 300 keV)^k with s = (L_top - L) / (L_top - L_bottom)
    (strong diffusion at the event's outer edge, weak at its inner edge). Each
    look's expected flux is the edge level times the mean of
    :func:`beltkit.diffusion.loss_cone_profile` over its swept band, uniform in
    local solid angle, the local angles mapped to the equator by
    sin^2 alpha_eq = sin^2 alpha B_min / B_local (IGRF, as the pipeline maps them);
    D = alpha0^2 / (z0^2 tau) with tau half the dipole bounce period at the
    loss-cone edge (as :func:`beltkit.diffusion.from_pitch_angle_data` takes it).
    """
    from . import motion
    from .diffusion import LOSS_TIMES, loss_cone_profile
    from .pad import swept_band

    l_lo, l_hi = p["event_l_range"]
    z_lo, z_hi = p["event_z0_range"]
    s = np.clip((l_hi - L) / (l_hi - l_lo), 0.0, 1.0)
    z0 = (z_lo * (z_hi / z_lo) ** s)[:, None] * (energy[None, :] / 300.0) ** p[
        "event_z0_energy_exponent"]
    a0 = cones["blc_equatorial"]
    tau = LOSS_TIMES["half_bounce"] * np.asarray(
        motion.bounce_period(energy[None, :], cones["L"][:, None], a0[:, None], "electron"))
    d_true = np.radians(a0)[:, None] ** 2 / (z0 * z0 * tau)
    # band means: Gauss-Legendre in cos(alpha) over each look's swept band
    a1, a2 = swept_band(look_pa.astype("float32").astype(float), p["half_angle_deg"])
    x, w = np.polynomial.legendre.leggauss(96)
    c1, c2 = np.cos(np.radians(a1))[..., None], np.cos(np.radians(a2))[..., None]
    mu = 0.5 * (c1 + c2) + 0.5 * (c1 - c2) * x  # (time, look, node)
    local = np.degrees(np.arccos(np.clip(mu, -1.0, 1.0)))
    local = np.minimum(local, 180.0 - local)
    ratio = (cones["b_min"] / cones["b_local"])[:, None, None]
    a_eq = np.degrees(np.arcsin(np.minimum(np.sin(np.radians(local)) * np.sqrt(ratio), 1.0)))
    prof = loss_cone_profile(a_eq[:, None], a0[:, None, None, None],
                             z0[:, :, None, None])  # (time, energy, look, node)
    band_mean = (prof * w).sum(-1) / w.sum()
    return z0, d_true, band_mean


def _dunlin_day(day_start, rng, orbits=None, cadence_s=None):
    p = SCENARIO["dunlin"]
    orbits = p["orbits_per_day"] if orbits is None else orbits
    cadence_s = p["cadence_s"] if cadence_s is None else cadence_s
    t_start = np.datetime64(SCENARIO["start"], "ns")
    first = day_start + np.timedelta64(int(p["first_orbit_utc_h"] * 3600), "s")
    n = int(round(orbits * p["period_s"] / cadence_s))
    time = first + (np.arange(n) * cadence_s * 1e9).astype("timedelta64[ns]")
    ra_sun = _sun_right_ascension(t_start)
    raan = ra_sun + np.radians((p["ascending_node_local_time_h"] - 12.0) * 15.0)
    pos, vel, normal = _orbit_gei(time, t_start, a_km=R_E_KM + p["altitude_km"], ecc=0.0,
                                  inc_deg=p["inclination_deg"], raan_rad=raan, argp_rad=0.0,
                                  period_s=p["period_s"])
    xyz_geo = _gei_to_geo(pos, time)
    normal_geo = _gei_to_geo(np.broadcast_to(normal, pos.shape), time)
    xyz_mag, mlat, mlt, r_re = _magnetic(xyz_geo, time)
    L, mlat, mlt = (_f32(v) for v in (dipole.l_from_position(r_re, mlat), mlat, mlt))

    # field direction of the dipole (moment along -z_MAG): b ~ z - 3 (z.r) r
    from .field.coords import convert

    r_hat = xyz_mag / np.linalg.norm(xyz_mag, axis=-1, keepdims=True)
    b_vec = np.array([0.0, 0.0, 1.0]) - 3 * r_hat[:, 2:3] * r_hat
    b_hat = b_vec / np.linalg.norm(b_vec, axis=-1, keepdims=True)
    side_mag = np.asarray(convert(normal_geo, time, "GEO", "MAG"), float)
    side_mag = side_mag - (side_mag * r_hat).sum(-1, keepdims=True) * r_hat
    side_mag /= np.linalg.norm(side_mag, axis=-1, keepdims=True)
    looks = np.stack([r_hat, side_mag], axis=1)  # (time, look, 3): up, side
    # pitch angle of the particles entering a telescope: velocity = -look direction
    look_pa = np.degrees(np.arccos(np.clip(-(looks * b_hat[:, None, :]).sum(-1), -1, 1)))

    e_bnds = np.asarray(p["energy_edges_kev"])
    e_bnds = np.stack([e_bnds[:-1], e_bnds[1:]], axis=-1)
    energy = np.sqrt(e_bnds[:, 0] * e_bnds[:, 1])
    A, n_idx, F, blc = _belt(energy, L, mlt, time)

    # expected telescope flux: average of the model over the circular field of view
    theta, phi, wts = _cap_nodes(p["half_angle_deg"])
    a0 = np.radians(look_pa)[..., None]  # (time, look, 1)
    cos_node = np.cos(a0) * np.cos(theta) + np.sin(a0) * np.sin(theta) * np.cos(phi)
    nodes = np.degrees(np.arccos(np.clip(cos_node, -1.0, 1.0)))  # (time, look, node)
    j = _model_flux(nodes[:, None], mlat, A, n_idx, F, blc)  # (time, energy, look, node)
    mean_flux = (j * wts).sum(-1)

    # the scattering event: the looks see the diffusion profile at the edge level A sin^n(alpha_c)
    true_z0 = np.full(A.shape, np.nan)
    true_d = np.full(A.shape, np.nan)
    if str(day_start)[:10] == p["event_day"]:
        l_lo, l_hi = p["event_l_range"]
        sel = np.flatnonzero((time < first + np.timedelta64(int(p["period_s"]), "s"))
                             & (L >= l_lo) & (L <= l_hi))
        cones = _event_cones(time[sel], xyz_geo[sel], mlat[sel], mlt[sel], L[sel],
                             look_pa[sel], p["half_angle_deg"], energy, e_bnds)
        z0, d_true, band_mean = _scattering_event(L[sel], energy, look_pa[sel], cones, p)
        edge = A[sel] * np.sin(np.radians(blc[sel]))[:, None] ** n_idx[sel]
        mean_flux[sel] = edge[..., None] * band_mean
        true_z0[sel], true_d[sel] = z0, d_true

    d_e = e_bnds[:, 1] - e_bnds[:, 0]
    factor = 1.0 / (p["geometric_factor_cm2_sr"] * p["accumulation_s"] * d_e)
    bg_flux = p["background_counts_per_s"] * p["accumulation_s"] * factor
    counts, flux, flux_err = _counts_to_flux(rng, mean_flux, factor[None, :, None],
                                             bg_flux[None, :, None])

    # truth: shares of the model's omnidirectional flux (fine quadrature, both hemispheres)
    llc = np.asarray(dipole.local_loss_cone(L, mlat, altitude_km=100.0), float)
    x, w = np.polynomial.legendre.leggauss(32)
    cos_c = np.cos(np.radians(llc))[:, None]
    mu_in = 0.5 * (1 + cos_c) + 0.5 * (1 - cos_c) * x  # (time, node) inside the cone
    mu_out = 0.5 * cos_c + 0.5 * cos_c * x  # between 90 deg and the cone edge
    j_in = _model_flux(np.degrees(np.arccos(mu_in))[:, None], mlat, A, n_idx, F, blc)
    j_out = _model_flux(np.degrees(np.arccos(mu_out))[:, None], mlat, A, n_idx, F, blc)
    flux_in = (j_in * w).sum(-1) * 0.5 * (1 - cos_c)
    flux_out = (j_out * w).sum(-1) * 0.5 * cos_c
    with np.errstate(invalid="ignore", divide="ignore"):
        prec = flux_in / (flux_in + flux_out)
    quasi = np.where(np.isfinite(prec), 0.0, np.nan)
    trapped = 1.0 - prec

    comment = ("Populations as in beltkit.pad.partition with the centred dipole at 100 km, as "
               "shares of the model's omnidirectional flux at the satellite (instrument "
               "background excluded); two telescopes cannot sample the whole sphere. Bounce "
               "and drift loss cones coincide in a dipole, so the true quasi-trapped fraction "
               "is 0; the real field's (IGRF) drift loss cone is wider at this altitude, and "
               "the demo partitions these files in the IGRF.")
    look = np.array(["up", "side"])
    data_vars = {
        "flux": (("time", "energy", "look"), flux.astype("float32"),
                 {"units": FLUX_UNITS, "long_name": "differential directional electron flux",
                  "ancillary_variables": "flux_err"}),
        "flux_err": (("time", "energy", "look"), flux_err.astype("float32"),
                     {"units": FLUX_UNITS, "long_name": "flux uncertainty (1 sigma, Poisson)"}),
        "counts": (("time", "energy", "look"), counts.astype("int32"),
                   {"units": "1", "long_name": "detector counts per sample"}),
        "energy_bnds": (("energy", "nv"), e_bnds, {"units": "keV"}),
        "look_pitch_angle": (("time", "look"), look_pa.astype("float32"),
                             {"units": "degree",
                              "long_name": "pitch angle of the electrons entering the "
                                           "telescope along its axis"}),
        "look_half_angle": ("look", np.full(2, p["half_angle_deg"]),
                            {"units": "degree", "long_name": "field-of-view half-angle"}),
        **_response_vars(factor, p, per="telescope", accumulated="sample"),
        # no b_local: the field at the satellite is left to the model it is partitioned in
        **_position_vars(time, xyz_geo, mlat, mlt, L),
        **_truth_vars(("time", "energy"), prec, quasi, trapped, F, n_idx, comment),
        "true_z0": (("time", "energy"), true_z0.astype("float32"), {
            "units": "1", "long_name": "generator truth: loss-cone parameter z0 = alpha0 / "
                                       "sqrt(D tau) of the scattering event (NaN outside it)",
            "comment": _EVENT_COMMENT}),
        "true_diffusion_coefficient": (("time", "energy"), true_d.astype("float32"), {
            "units": "s-1",
            "long_name": "generator truth: pitch-angle diffusion coefficient at the loss-cone "
                         "edge of the scattering event, loss time half a bounce period (NaN "
                         "outside it)",
            "comment": _EVENT_COMMENT}),
    }
    day = str(day_start)[:10]
    ds = xr.Dataset(
        data_vars,
        coords={
            **_time_energy_coords(time, energy),
            "look": ("look", look, {"long_name": "telescope: up = local zenith, "
                                                 "side = horizontal, across the track"}),
        },
        attrs=_common_attrs("Marram-Dunlin", "Quill electron telescope pair", day,
                            _FLUX_FROM_COUNTS),
    )
    return ds


# --------------------------------------------------------------------------- public API
def generate_coverage(out_dir, *, seed=20261201, orbits=15, cadence_s=10.0) -> Path:
    """Write one Marram-Dunlin file of many consecutive orbits, for geographic maps.

    The day-files of :func:`generate` hold two orbits a day, whose ground
    tracks cover two bands of longitude; a map over the globe needs the
    orbits of a whole day. This file holds `orbits` consecutive orbits from
    the scenario's first (quiet) day at 06:00 UTC, one sample every
    `cadence_s` seconds (each still accumulated over 1 s), with the same
    model, instrument and truth as the day-files. Synthetic, like them.

    Parameters
    ----------
    out_dir : str or os.PathLike
        Folder for the file (created if missing).
    seed : int
        Seed of the Poisson counts.
    orbits : int
        Consecutive orbits (15 is about one day: the ground track then
        crosses every longitude).
    cadence_s : float
        Time between samples in seconds.

    Returns
    -------
    pathlib.Path
        ``marram_dunlin_quill_synthetic_coverage_YYYYMMDD.nc``.
    """
    from .io import write_dataset

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    day_start = np.datetime64(SCENARIO["start"], "ns")
    ds = _dunlin_day(day_start, np.random.default_rng([seed, 7]), orbits=int(orbits),
                     cadence_s=float(cadence_s))
    ds.attrs["comment"] = (f"{ds.attrs.get('comment', '')} {int(orbits)} consecutive "
                           f"orbits, one sample every {float(cadence_s):g} s, for geographic "
                           "maps.").strip()
    tag = str(day_start)[:10].replace("-", "")
    return write_dataset(ds, out / f"marram_dunlin_quill_synthetic_coverage_{tag}.nc",
                         compress=True)


def generate(out_dir, *, seed=20261201, n_days=None,
             spacecraft=("tern", "dunlin")) -> list[Path]:
    """Write the synthetic Marram scenario as day-files of netCDF.

    Parameters
    ----------
    out_dir : str or os.PathLike
        Folder for the files (created if missing).
    seed : int
        Seed of the Poisson counts; the same seed gives the same data values.
    n_days : int, optional
        Number of days from the scenario's start (default 3, the whole storm).
    spacecraft : sequence of {"tern", "dunlin"}
        Which spacecraft to write.

    Returns
    -------
    list of pathlib.Path
        The files written, ``marram_tern_fan_synthetic_YYYYMMDD.nc`` and
        ``marram_dunlin_quill_synthetic_YYYYMMDD.nc``, in time order per
        spacecraft.

    Notes
    -----
    Every file carries the ground truth (``true_fraction_*``) of the samples;
    see the module docstring for the model and the truth's definition.

    Examples
    --------
    >>> import tempfile, xarray as xr
    >>> files = generate(tempfile.mkdtemp(), n_days=1, spacecraft=("tern",))
    >>> ds = xr.open_dataset(files[0])
    >>> dict(ds.sizes)["pitch_angle"], ds.attrs["title"].startswith("SYNTHETIC")
    (12, True)
    """
    from .io import write_dataset

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    n_days = SCENARIO["n_days"] if n_days is None else int(n_days)
    if not 1 <= n_days <= SCENARIO["n_days"]:
        raise ValueError(f"n_days must be 1-{SCENARIO['n_days']}, got {n_days}")
    unknown = set(spacecraft) - {"tern", "dunlin"}
    if unknown:
        raise ValueError(f"unknown spacecraft {sorted(unknown)}; choose from 'tern', 'dunlin'")
    start = np.datetime64(SCENARIO["start"], "ns")
    builders = {"tern": (_tern_day, "marram_tern_fan"),
                "dunlin": (_dunlin_day, "marram_dunlin_quill")}
    written = []
    for k, name in enumerate(("tern", "dunlin")):
        if name not in spacecraft:
            continue
        build, stem = builders[name]
        for day in range(n_days):
            rng = np.random.default_rng([seed, k, day])
            day_start = start + np.timedelta64(day, "D")
            ds = build(day_start, rng)
            tag = str(day_start)[:10].replace("-", "")
            path = out / f"{stem}_synthetic_{tag}.nc"
            written.append(write_dataset(ds, path, compress=True))
    return written


_DIPOLE_QUASI_NOTE = ("quasi-trapped fraction: zero in every cell (centred dipole: the drift "
                      "loss cone equals the bounce loss cone), so no panel is drawn for it")


def _partial(summaries, craft):
    """Whether any summary of `craft` comes from data covering part of the sphere."""
    from .plot import partial_coverage

    flags = []
    for path in summaries:
        if f"_{craft}_" in Path(path).name:
            with xr.open_dataset(path) as s:
                flags.append(partial_coverage(s))
    return any(flags)


def _caption(pairs, craft, partial):
    """Figure note naming how much of the sphere the instrument sees (from a data file)."""
    if not partial:
        return ""
    for name, (data, _) in pairs.items():
        if f"_{craft}_" in name:
            with xr.open_dataset(data) as ds:
                if "look_half_angle" in ds:
                    half = np.asarray(ds["look_half_angle"].values, float)
                    return (f"{ds.attrs.get('spacecraft', craft)}: {half.size} telescopes of "
                            f"{float(half.max()):g}° half-angle. The files' true_fraction_* "
                            "(shares of the whole distribution) are a different quantity, "
                            "not recovered by the pipeline.")
    return ""


def _all_zero(survey, quantity, e_kev):
    """Whether a survey quantity is zero in every cell with data at the energy."""
    sv = xr.load_dataset(survey) if not isinstance(survey, xr.Dataset) else survey
    if f"{quantity}_mean" not in sv:
        return False
    v = np.asarray(sv[f"{quantity}_mean"].sel(energy=e_kev, method="nearest").values, float)
    v = v[np.isfinite(v)]
    return v.size > 0 and not np.any(v != 0)


def _survey_l_time(survey, e_kev, partial):
    """L-time maps: precipitating fraction, quasi-trapped (unless zero) and flux."""
    from matplotlib.figure import Figure

    from . import plot

    quantities = ["fraction_precipitating", "fraction_quasi_trapped", "omni_flux"]
    zero_quasi = _all_zero(survey, "fraction_quasi_trapped", e_kev)
    if zero_quasi:
        quantities.remove("fraction_quasi_trapped")
    fig = Figure(figsize=(9.0, 2.9 * len(quantities) + 0.6), layout="constrained")
    axes = fig.subplots(len(quantities), 1, sharex=True)
    for ax, quantity in zip(axes, quantities):
        plot.survey_map(survey, quantity, energy=e_kev, kind="L-time", ax=ax, partial=partial)
    for ax in axes[:-1]:
        ax.set_xlabel("")
    if zero_quasi:
        fig.supxlabel(_DIPOLE_QUASI_NOTE, fontsize="small")
    return fig


def _survey_dials(survey, e_kev, partial, caption=""):
    """L-MLT dials of the precipitating and (unless zero) quasi-trapped fractions."""
    from matplotlib.figure import Figure

    from . import plot

    quantities = ["fraction_precipitating"]
    zero_quasi = _all_zero(survey, "fraction_quasi_trapped", e_kev)
    if not zero_quasi:
        quantities.append("fraction_quasi_trapped")
    fig = Figure(figsize=(7.0 * len(quantities), 7.6), layout="constrained")
    axes = []
    for k, quantity in enumerate(quantities):
        ax = fig.add_subplot(1, len(quantities), k + 1, projection="polar")
        plot.survey_map(survey, quantity, energy=e_kev, kind="L-MLT", ax=ax, partial=partial)
        axes.append(ax)
    notes = [n for n in (_DIPOLE_QUASI_NOTE if zero_quasi else "", caption) if n]
    if notes:
        import textwrap

        fig.supxlabel("\n".join(textwrap.fill(n, 95 * len(quantities)) for n in notes),
                      fontsize="small")
    return fig


def demo_figures(data_files, summaries, surveys, fig_dir, psd_files=()) -> list[Path]:
    """Draw the demonstration figures as PNG files.

    Quantities from partially covered data (the Dunlin telescopes) are
    labelled as shares of the measured solid angle, detected from the
    summaries' coverage (:func:`beltkit.plot.partial_coverage`), not from the
    spacecraft's name; fractions beyond L = 10 (:data:`beltkit.plot.L_VALID_MAX`)
    are greyed out.

    Parameters
    ----------
    data_files : sequence of path
        The synthetic day-files from :func:`generate`.
    summaries : sequence of path
        Their summaries (same order).
    surveys : dict of str to path
        Survey files keyed by spacecraft (``"tern"``, ``"dunlin"``).
    fig_dir : str or os.PathLike
        Folder for the PNG files.
    psd_files : sequence of path, optional
        Marram-Tern's phase-space density files (:func:`beltkit.batch.psd_files`):
        their radial profiles at mu = 1000 MeV/G (``tern_psd_profiles.png``).

    Returns
    -------
    list of pathlib.Path
        The PNG files written.
    """
    from . import plot

    fig_dir = Path(fig_dir)
    fig_dir.mkdir(parents=True, exist_ok=True)
    pairs = {Path(d).name: (Path(d), Path(s)) for d, s in zip(data_files, summaries)}
    storm_day = SCENARIO["storm_onset"][:10].replace("-", "")
    written = []

    def save(fig, name):
        path = fig_dir / name
        tmp = fig_dir / f".{name}.tmp.png"
        fig.savefig(tmp, dpi=120)
        tmp.replace(path)
        written.append(path)

    tern = pairs.get(f"marram_tern_fan_synthetic_{storm_day}.nc")
    if tern is not None:
        with xr.open_dataset(tern[0]) as ds, xr.open_dataset(tern[1]) as summary:
            ds, summary = ds.load(), summary.load()
        save(plot.pitch_angle_distribution(ds, summary, "2027-03-09T07:00",
                                           energies=[50, 160, 520, 1700, 3000]),
             "tern_pitch_angle_distribution.png")
        save(plot.spectrogram(ds, summary, energy=300.0), "tern_spectrogram.png")
    dunlin = pairs.get(f"marram_dunlin_quill_synthetic_{storm_day}.nc")
    if dunlin is not None:
        with xr.open_dataset(dunlin[0]) as ds, xr.open_dataset(dunlin[1]) as summary:
            ds, summary = ds.load(), summary.load()
        save(plot.spectrogram(ds, summary, energy=300.0), "dunlin_spectrogram.png")
        if "z0" in summary.variables and "true_z0" in ds.variables:
            event = np.flatnonzero(np.isfinite(ds["true_z0"].values).any(axis=1))
            if event.size:  # the scattering event: D against L, and one sample's profile
                res = summary.isel(time=event)
                # the profile of a sample near the regime boundary (z0 ~ 1): both looks'
                # points stand clear of the panel's lower edge
                z0 = res["z0"].sel(energy=190.0, method="nearest").values
                pick = res["time"].values[np.nanargmin(np.abs(np.log(z0)))]
                fig = plot.diffusion_overview(res, ds.isel(time=event), energy=190.0,
                                              time=pick)
                ax = fig.axes[1]  # the profile rises to the right: its legend goes top left
                size = ax.get_legend().get_texts()[0].get_fontsize()
                ax.legend(loc="upper left", fontsize=size)
                save(fig, "dunlin_diffusion.png")
    for craft, e_kev in (("tern", 160.0), ("dunlin", 190.0)):
        if craft not in surveys:
            continue
        partial = _partial(summaries, craft)
        if craft == "tern":
            save(_survey_l_time(surveys[craft], e_kev, partial), f"{craft}_survey_L_time.png")
        save(_survey_dials(surveys[craft], e_kev, partial, _caption(pairs, craft, partial)),
             f"{craft}_survey_L_MLT.png")
    save(plot.loss_cone_longitude(1.5, SCENARIO["storm_onset"], n_lon=48),
         "loss_cones_vs_longitude.png")
    if psd_files:
        save(plot.psd_radial_profiles(tern_psd_profiles(psd_files)), "tern_psd_profiles.png")
    return written


def tern_psd_profiles(psd_files, mu_mev_per_g=1000.0):
    """Radial profiles of Marram-Tern's phase-space density files, per pass.

    Parameters
    ----------
    psd_files : sequence of path
        The day-files' outputs of :func:`beltkit.batch.psd_files`.
    mu_mev_per_g : float
        First invariant of the profiles (the first K of the files).

    Returns
    -------
    xarray.Dataset
        :func:`beltkit.psd.radial_profiles` in L* bins 0.25 wide from 2.5 to 6.
    """
    from . import psd

    parts = []
    for path in sorted(psd_files):
        with xr.open_dataset(path) as one:
            parts.append(one.load())
    combined = xr.concat(parts, "time", data_vars="minimal", coords="minimal",
                         compat="override")
    return psd.radial_profiles(combined, mu_mev_per_g, float(combined["k"][0]),
                               lstar_bins=np.arange(2.5, 6.01, 0.25))


def _dunlin_geographic(out: Path) -> list[Path]:
    """Map a day of Dunlin orbits (summarized in the IGRF) by longitude and latitude.

    At 650 km the IGRF's drift loss cone leaves stably trapped electrons only
    where the field is weakest along their drift, over the South Atlantic: the
    map of the trapped flux shows it. Writes ``coverage/`` (the data file and
    its summary), ``survey_dunlin_geo.nc`` and ``figures/dunlin_survey_geo.png``.
    """
    from . import batch, plot

    cover = generate_coverage(out / "coverage", cadence_s=20.0)  # ~7 samples per cell
    [done] = batch.summarize([cover], out / "coverage", field="auto", overwrite=True)
    if done.status == "failed":
        raise RuntimeError(f"demo coverage summary failed: {done.input}: {done.reason}")
    geo = Path(batch.survey([done.output], out / "survey_dunlin_geo.nc", binning="lon-lat",
                            edges={"lon": np.arange(-180.0, 180.1, 20.0),
                                   "lat": np.arange(-90.0, 90.1, 10.0)}))
    fig = plot.survey_cells(geo, "flux_trapped", partial=True)
    fig_dir = out / "figures"
    fig_dir.mkdir(parents=True, exist_ok=True)
    png = fig_dir / "dunlin_survey_geo.png"
    tmp = fig_dir / ".dunlin_survey_geo.png.tmp.png"
    fig.savefig(tmp, dpi=120)
    tmp.replace(png)
    return [cover, Path(done.output), geo, png]


def run_demo(out_dir, *, n_days=None) -> list[Path]:
    """Generate the scenario, run the pipeline on it and draw the figures.

    Writes into `out_dir`: the synthetic day-files (``data/``), one loss-cone
    summary per file (``summaries/``, :func:`beltkit.batch.summarize`: Tern in
    the centred dipole its truth is defined in, Dunlin with ``field="auto"``,
    i.e. the IGRF at each sample's time, and with the pitch-angle diffusion
    outputs, ``diffusion=True``), one survey per spacecraft
    (``survey_tern.nc``, hourly windows, and ``survey_dunlin.nc``, daily windows;
    :func:`beltkit.batch.survey`), Marram-Tern's phase-space density at fixed mu
    and K (``psd/``, :func:`beltkit.batch.psd_files` in the centred dipole),
    PNG figures (``figures/``, :func:`demo_figures`, with the radial profiles of f),
    and Dunlin's geographic map: a day of orbits (``coverage/``,
    :func:`generate_coverage`) surveyed by longitude and latitude
    (``survey_dunlin_geo.nc``, ``figures/dunlin_survey_geo.png``), where the
    South Atlantic shows in the trapped flux.

    Parameters
    ----------
    out_dir : str or os.PathLike
        Target folder (created if missing).
    n_days : int, optional
        Days of the scenario to use (default all 3; the storm begins on day 2).

    Returns
    -------
    list of pathlib.Path
        Every file written.
    """
    from . import batch

    out = Path(out_dir)
    data_files = generate(out / "data", n_days=n_days)
    results = []
    # Tern's truth (the recovery target) is defined in the centred dipole; Dunlin's files
    # carry position_geo, so field="auto" partitions them in the IGRF at each sample's time
    # Dunlin's summaries add the pitch-angle diffusion outputs (its scattering event)
    for craft, field, diff in (("tern", "dipole", None), ("dunlin", "auto", True)):
        files = [d for d in data_files if f"_{craft}_" in Path(d).name]
        if files:
            results += batch.summarize(files, out / "summaries", field=field, overwrite=True,
                                       diffusion=diff)
    order = {str(d): k for k, d in enumerate(data_files)}
    results.sort(key=lambda r: order.get(r.input, len(order)))
    bad = [r for r in results if r.status == "failed"]
    if bad:
        raise RuntimeError("demo summaries failed: " + "; ".join(
            f"{r.input}: {r.reason}" for r in bad))
    summaries = [Path(r.output) for r in results]
    surveys = {}
    # Dunlin's bins reach L = 12 so that the survey maps show (grey) where data
    # beyond beltkit.plot.L_VALID_MAX = 10 were left out
    for craft, window, l_top, l_step in (("tern", "1h", 7.0, 0.25), ("dunlin", "1D", 12.0, 0.5)):
        files = [s for s in summaries if f"_{craft}_" in s.name]
        if files:
            surveys[craft] = Path(batch.survey(files, out / f"survey_{craft}.nc",
                                               l_edges=np.arange(1.0, l_top + 0.01, l_step),
                                               time_window=window))
    tern = [d for d in data_files if "_tern_" in Path(d).name]
    psd_out = []
    if tern:
        p = SCENARIO["tern"]
        done = batch.psd_files(tern, out / "psd", p["psd_mu_mev_per_g"], p["psd_k_g05_re"],
                               field="dipole", overwrite=True)
        bad = [r for r in done if r.status == "failed"]
        if bad:
            raise RuntimeError("demo phase-space density failed: " + "; ".join(
                f"{r.input}: {r.reason}" for r in bad))
        psd_out = [Path(r.output) for r in done]
    geo_out = _dunlin_geographic(out) if any("_dunlin_" in Path(d).name
                                             for d in data_files) else []
    figures = demo_figures(data_files, summaries, surveys, out / "figures", psd_files=psd_out)
    from .demo_sectors import run_sectors  # the spectrometer as spin-sectored counts, binned

    figures += run_sectors(out, flux_model=tern_flux_model)
    report = sorted(p for folder in ("summaries", "psd") if (out / folder).is_dir()
                    for p in (out / folder).iterdir()
                    if p.is_file() and not p.name.endswith(".nc"))
    return [*data_files, *summaries, *psd_out, *report, *surveys.values(), *figures, *geo_out]
