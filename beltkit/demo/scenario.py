r"""The invented Marram scenario: its storm, orbits and flux model (see :mod:`beltkit.demo`)."""

from __future__ import annotations

import numpy as np

from .. import __version__, dipole

__all__ = [
    "SCENARIO",
    "belt_flux",
    "common_attrs",
    "counts_to_flux",
    "energy_grid",
    "f32",
    "gei_to_geo",
    "local_source",
    "magnetic",
    "model_flux",
    "orbit_gei",
    "overlap",
    "position_vars",
    "sun_right_ascension",
    "truth_vars",
]

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
def gei_to_geo(xyz, time):
    """Rotate GEI vectors into GEO about the common z axis by the sidereal angle."""
    from ..field.sun import gmst_deg

    theta = np.radians(gmst_deg(time))
    c, s = np.cos(theta), np.sin(theta)
    x, y, z = xyz[..., 0], xyz[..., 1], xyz[..., 2]
    return np.stack([c * x + s * y, -s * x + c * y, z], axis=-1)


def magnetic(xyz_geo_km, time):
    """Return MAG-frame position (km), magnetic latitude (deg), MLT (h) and r (R_E)."""
    from ..field.coords import convert, magnetic_coordinates, magnetic_local_time

    mlat, _, r_re = magnetic_coordinates(xyz_geo_km, time)
    mlt = magnetic_local_time(xyz_geo_km, time)
    xyz_mag = np.asarray(convert(xyz_geo_km, time, "GEO", "MAG"), float)
    return xyz_mag, np.asarray(mlat, float), np.asarray(mlt, float), np.asarray(r_re, float)


def orbit_gei(time, t0, *, a_km, ecc, inc_deg, raan_rad, argp_rad, period_s):
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


def sun_right_ascension(time):
    """Return the Sun's right ascension (rad) at the times (for the orbits' local times)."""
    from ..field.sun import sun_direction_gei

    s = sun_direction_gei(time)
    return np.arctan2(s[..., 1], s[..., 0])


# --------------------------------------------------------------------------- flux model
def f32(values):
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


def local_source(energy_kev, L, time):
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


def belt_flux(energy_kev, L, mlt, time):
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


def model_flux(alpha_local_deg, mlat, amplitude, index, filling, blc):
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


def energy_grid(lo, hi, n):
    """Return n log-spaced channel centres from lo to hi keV and their edges."""
    ratio = (hi / lo) ** (1.0 / (n - 1))
    centres = lo * ratio ** np.arange(n)
    edges = np.concatenate([[lo / np.sqrt(ratio)], centres * np.sqrt(ratio)])
    return centres, np.stack([edges[:-1], edges[1:]], axis=-1)


def overlap(a1, a2, r1, r2):
    """Solid-angle fraction of the pitch-angle band [a1, a2] inside [r1, r2] (degrees)."""
    lo = np.maximum(a1, r1)
    hi = np.minimum(a2, r2)
    cos = np.cos(np.radians([a1, a2]))
    part = np.where(hi > lo, np.cos(np.radians(lo)) - np.cos(np.radians(hi)), 0.0)
    return part / (cos[0] - cos[1])


def counts_to_flux(rng, mean_flux, factor, background_flux):
    """Poisson counts of mean (flux + background) / factor; flux and its error."""
    expected = (mean_flux + background_flux) / factor
    counts = rng.poisson(expected)
    flux = counts * factor
    flux_err = np.sqrt(np.maximum(counts, 1)) * factor
    return counts, flux, flux_err


def common_attrs(name, instrument, day, comment):
    """Return a day-file's global attributes (CF-1.8, synthetic-data notice)."""
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


def position_vars(time, xyz_geo, mlat, mlt, L, b_local=None):
    """Return the position variables of a day-file (GEO position, mlat, mlt, L, B)."""
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


def truth_vars(dims, prec, quasi, trapped, filling, index, comment):
    """Return the ground-truth variables of a day-file (true fractions, filling, index)."""
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
