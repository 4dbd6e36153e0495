r"""The Marram spacecraft's day-files: Tern's spectrometer and Dunlin's telescopes, with truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from .. import dipole
from ..constants import R_E_KM
from ..units import FLUX_UNITS
from .scenario import (
    SCENARIO,
    belt_flux,
    common_attrs,
    counts_to_flux,
    energy_grid,
    f32,
    gei_to_geo,
    local_source,
    magnetic,
    model_flux,
    orbit_gei,
    overlap,
    position_vars,
    sun_right_ascension,
    truth_vars,
)

__all__ = [
    "generate",
    "generate_coverage",
    "tern_flux_model",
]


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
    ra_sun = sun_right_ascension(t_start)
    argp_apogee = ra_sun + np.radians((p["apogee_local_time_h"] - 12.0) * 15.0)
    pos, _, _ = orbit_gei(time, t_start, a_km=a, ecc=ecc, inc_deg=p["inclination_deg"],
                           raan_rad=0.0, argp_rad=argp_apogee + np.pi,
                           period_s=p["period_s"])
    xyz_geo = gei_to_geo(pos, time)
    _, mlat, mlt, r_re = magnetic(xyz_geo, time)
    L, mlat, mlt = (f32(v) for v in (dipole.l_from_position(r_re, mlat), mlat, mlt))
    b_local = np.asarray(dipole.field_magnitude(L, mlat), float)

    energy, e_bnds = energy_grid(*p["energy_range_kev"], p["n_energy"])
    a_edges = np.linspace(0.0, 180.0, p["n_pitch"] + 1)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    A, n_idx, F, blc = belt_flux(energy, L, mlt, time)
    source = local_source(energy, L, time)
    A = A * source

    # expected bin flux: solid-angle average over each bin (Gauss-Legendre in cos alpha)
    x, w = np.polynomial.legendre.leggauss(12)
    mu1, mu2 = np.cos(np.radians(a_edges[:-1])), np.cos(np.radians(a_edges[1:]))
    mu = 0.5 * (mu1 + mu2)[:, None] + 0.5 * (mu1 - mu2)[:, None] * x[None, :]
    nodes = np.degrees(np.arccos(np.clip(mu, -1.0, 1.0)))  # (pitch, node)
    j = model_flux(nodes[None, None], mlat, A, n_idx, F, blc)  # (time, energy, pitch, node)
    mean_flux = np.einsum("tepn,n->tep", j, w) / w.sum()

    d_e = e_bnds[:, 1] - e_bnds[:, 0]
    factor = 1.0 / (p["geometric_factor_cm2_sr"] * p["accumulation_s"] * d_e)  # flux per count
    bg_flux = p["background_counts_per_s"] * p["accumulation_s"] * factor
    factor_b = factor[None, :, None]
    counts, flux, flux_err = counts_to_flux(rng, mean_flux, factor_b, bg_flux[None, :, None])

    # truth: the populations' shares of the expected measured flux, split exactly in the bins
    llc = np.asarray(dipole.local_loss_cone(L, mlat, altitude_km=100.0), float)  # (time,)
    a1, a2 = a_edges[:-1][None, :], a_edges[1:][None, :]
    in_cone = (overlap(a1, a2, 0.0, llc[:, None])
               + overlap(a1, a2, 180.0 - llc[:, None], 180.0))  # (time, pitch)
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
        **position_vars(time, xyz_geo, mlat, mlt, L, b_local),
        **truth_vars(("time", "energy"), prec, quasi, trapped, F, n_idx, comment),
        "true_local_source_factor": (
            ("time", "energy"), source.astype("float32"),
            {"units": "1", "long_name": "true flux multiplier of the local source",
             "comment": ("Invented local source (beltkit.demo.scenario.local_source): the "
                         "model flux is multiplied by this factor at every pitch angle, so the "
                         "phase-space density at fixed mu and K is too; it peaks at L* = L = "
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
        attrs=common_attrs("Marram-Tern", "Fan pitch-angle spectrometer", day,
                            _FLUX_FROM_COUNTS),
    )
    return ds


def tern_flux_model(day_start, rng, n_times=None):
    """Return one Marram-Tern day-file and its model flux at any local pitch angle.

    The hook of :mod:`beltkit.demo.sectors` (the spectrometer as spin-sectored
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
    A, n_idx, F, blc = belt_flux(energy, L, mlt, time)
    A = A * local_source(energy, L, time)

    def flux(alpha_local_deg):
        return model_flux(np.asarray(alpha_local_deg, float), mlat, A, n_idx, F, blc)

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

    The partition of the files (``model="auto"``: IGRF at each sample's time)
    is run on the event samples' positions and looks, so that the profile is
    mapped with the very loss cones and field ratio the pipeline uses.
    """
    from ..pad import partition

    n = time.size
    probe = xr.Dataset(
        {"flux": (("time", "energy", "look"), np.ones((n, energy.size, 2), "float32"),
                  {"units": FLUX_UNITS}),
         "energy_bnds": (("energy", "nv"), e_bnds, {"units": "keV"}),
         "look_pitch_angle": (("time", "look"), look_pa.astype("float32"),
                              {"units": "degree"}),
         "look_half_angle": ("look", np.full(2, half_deg), {"units": "degree"}),
         **position_vars(time, xyz_geo, mlat, mlt, L)},
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
    from .. import motion
    from ..diffusion import LOSS_TIMES, loss_cone_profile
    from ..pad import swept_band

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
    ra_sun = sun_right_ascension(t_start)
    raan = ra_sun + np.radians((p["ascending_node_local_time_h"] - 12.0) * 15.0)
    pos, vel, normal = orbit_gei(time, t_start, a_km=R_E_KM + p["altitude_km"], ecc=0.0,
                                  inc_deg=p["inclination_deg"], raan_rad=raan, argp_rad=0.0,
                                  period_s=p["period_s"])
    xyz_geo = gei_to_geo(pos, time)
    normal_geo = gei_to_geo(np.broadcast_to(normal, pos.shape), time)
    xyz_mag, mlat, mlt, r_re = magnetic(xyz_geo, time)
    L, mlat, mlt = (f32(v) for v in (dipole.l_from_position(r_re, mlat), mlat, mlt))

    # field direction of the dipole (moment along -z_MAG): b ~ z - 3 (z.r) r
    from ..field.coords import convert

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
    A, n_idx, F, blc = belt_flux(energy, L, mlt, time)

    # expected telescope flux: average of the model over the circular field of view
    theta, phi, wts = _cap_nodes(p["half_angle_deg"])
    a0 = np.radians(look_pa)[..., None]  # (time, look, 1)
    cos_node = np.cos(a0) * np.cos(theta) + np.sin(a0) * np.sin(theta) * np.cos(phi)
    nodes = np.degrees(np.arccos(np.clip(cos_node, -1.0, 1.0)))  # (time, look, node)
    j = model_flux(nodes[:, None], mlat, A, n_idx, F, blc)  # (time, energy, look, node)
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
    counts, flux, flux_err = counts_to_flux(rng, mean_flux, factor[None, :, None],
                                             bg_flux[None, :, None])

    # truth: shares of the model's omnidirectional flux (fine quadrature, both hemispheres)
    llc = np.asarray(dipole.local_loss_cone(L, mlat, altitude_km=100.0), float)
    x, w = np.polynomial.legendre.leggauss(32)
    cos_c = np.cos(np.radians(llc))[:, None]
    mu_in = 0.5 * (1 + cos_c) + 0.5 * (1 - cos_c) * x  # (time, node) inside the cone
    mu_out = 0.5 * cos_c + 0.5 * cos_c * x  # between 90 deg and the cone edge
    j_in = model_flux(np.degrees(np.arccos(mu_in))[:, None], mlat, A, n_idx, F, blc)
    j_out = model_flux(np.degrees(np.arccos(mu_out))[:, None], mlat, A, n_idx, F, blc)
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
        **position_vars(time, xyz_geo, mlat, mlt, L),
        **truth_vars(("time", "energy"), prec, quasi, trapped, F, n_idx, comment),
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
        attrs=common_attrs("Marram-Dunlin", "Quill electron telescope pair", day,
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
    from ..io import write_dataset

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
    from ..io import write_dataset

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
