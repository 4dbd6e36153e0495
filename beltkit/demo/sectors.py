r"""The demo spectrometer as spin-sectored raw counts, with its truth (synthetic).

Everything here is **invented**, like the rest of :mod:`beltkit.demo`: the
Marram-Tern probe is given a spin, and its Fan spectrometer, instead of
pitch-angle bins, delivers raw counts in spin sectors, as a real spinning
instrument does before any pitch-angle binning.

The invented spinning spacecraft
--------------------------------
* Spin axis toward the Sun (GSE +x), one turn every 12 s; spin phase 0 is the
  projection of GSE +z onto the spin plane; 16 sectors of 22.5 deg.
* Three detector heads at 30, 90 and 150 deg from the spin axis, circular
  fields of view of 8 deg half-angle, geometric factor 1e-3 cm2 sr each.
* One spectrum every 120 s (the Tern cadence); each sector accumulates for a
  sixteenth of it (7.5 s, summed over ten spins, during which the field is
  taken as fixed). The field (``b_vector``) is the IGRF-14 centred dipole at
  the probe, given in GEO while the spin axis is in GSE, so the binning must
  rotate one into the other. Near the magnetic equator B is nearly
  perpendicular to the spin axis, so the sectors cover 0-180 deg.

Expected counts are :math:`(\bar j_k + j_{bg})\,G\,\Delta t\,\Delta E`, where
:math:`\bar j_k` is the Tern model flux (:func:`beltkit.demo.tern_flux_model`)
averaged over the look's field of view (Gauss-Legendre nodes in the cap) and
over its accumulation (the spin turns it), with the pitch angle of each ray
that of the particles moving along minus the ray; :math:`j_{bg}` is the
Tern instrument's isotropic background. Counts are Poisson draws.

Truth: ``true_flux`` (time, energy, true_pitch_angle) is the expected
measured flux (model plus background) averaged over the solid angle of each
of the Tern file's 12 pitch-angle bins: what an ideal spectrometer with those
bins would measure, the target :func:`beltkit.pad.bin_sectors` recovers
(up to the looks' band width, about 30-40 deg, which smooths sharp features
such as the loss-cone edge).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from ..field.coords import convert
from ..field.models import as_model

__all__ = ["SPIN", "bin_and_summarize", "generate_sectored", "run_sectors", "sectored_day"]

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"
#: The scenario's first day (``beltkit.demo.SCENARIO["start"]``).
START = "2027-03-08T00:00:00"

#: The invented spinning spacecraft (documentation of what `sectored_day` does).
SPIN = {
    "spin_axis_gse": (1.0, 0.0, 0.0),
    "phase_reference_gse": (0.0, 0.0, 1.0),
    "spin_period_s": 12.0,
    "n_sectors": 16,
    "detector_polar_deg": (30.0, 90.0, 150.0),
    "fov_half_angle_deg": 8.0,
    "geometric_factor_cm2_sr": 1e-3,
    "accumulation_s": 7.5,
    "background_counts_per_s": 2.5,
    "pitch_angle_edges_deg": tuple(np.linspace(0.0, 180.0, 13)),
}


def _cap(half_deg, n_theta=3, n_phi=8):
    """Rays of a circular cap around +z (unit vectors) with weights summing to 1."""
    x, w = np.polynomial.legendre.leggauss(n_theta)
    ch = np.cos(np.radians(half_deg))
    mu = 0.5 * (1 + ch) + 0.5 * (1 - ch) * x
    phi = (np.arange(n_phi) + 0.5) * 2 * np.pi / n_phi
    mu, phi = np.repeat(mu, n_phi), np.tile(phi, n_theta)
    s = np.sqrt(1 - mu**2)
    return np.stack([s * np.cos(phi), s * np.sin(phi), mu], -1), np.repeat(w, n_phi) / (
        w.sum() * n_phi)


def _rays_spin_frame(n_phase=4):
    """Rays (sector, detector, node, 3) in the spin frame (z spin axis, x phase 0)."""
    p = SPIN
    n_s = p["n_sectors"]
    width = 360.0 / n_s
    cap, cw = _cap(p["fov_half_angle_deg"])
    out = []
    for pol in p["detector_polar_deg"]:
        c, s = np.cos(np.radians(pol)), np.sin(np.radians(pol))
        tilt = np.array([[c, 0, s], [0, 1, 0], [-s, 0, c]])  # rotation about y by pol
        tilted = cap @ tilt.T
        ph = np.radians((np.arange(n_s)[:, None] + (np.arange(n_phase) + 0.5) / n_phase)
                        * width)  # (sector, phase)
        cph, sph = np.cos(ph)[..., None], np.sin(ph)[..., None]
        x = cph * tilted[None, None, :, 0] - sph * tilted[None, None, :, 1]
        y = sph * tilted[None, None, :, 0] + cph * tilted[None, None, :, 1]
        z = np.broadcast_to(tilted[None, None, :, 2], x.shape)
        out.append(np.stack([x, y, z], -1).reshape(n_s, -1, 3))  # (sector, node, 3)
    weights = np.tile(cw, n_phase) / n_phase
    return np.stack(out, 1), weights


def sectored_day(day_start="2027-03-08", *, flux_model, seed=20261201, n_times=None):
    """One day of the Marram-Tern spectrometer as spin-sectored counts, with its truth.

    Parameters
    ----------
    day_start : str or numpy.datetime64
        UTC day of the scenario (2027-03-08 to 2027-03-10).
    flux_model : callable
        :func:`beltkit.demo.tern_flux_model` (passed in, so that this module
        and :mod:`beltkit.demo`, whose :func:`~beltkit.demo.run_demo` runs
        :func:`run_sectors`, do not import each other).
    seed : int
        Seed of the Poisson counts.
    n_times : int, optional
        Keep only the first `n_times` spectra (tests).

    Returns
    -------
    xarray.Dataset
        Sectored dataset (``docs/conventions.md`` section 9): ``counts``
        (time, energy, sector, detector), ``counts_to_flux``, the spin form,
        ``b_vector`` (GEO), ``fov_half_angle``, the positions, and the truth
        ``true_flux`` (time, energy, true_pitch_angle) with
        ``true_pitch_angle_bnds``.
    """
    p = SPIN
    day = np.datetime64(day_start, "ns")
    rng = np.random.default_rng([seed, 7, int((day - np.datetime64("2027-03-08", "ns"))
                                              // np.timedelta64(1, "D"))])
    tern, flux = flux_model(day, rng, n_times)
    time = tern["time"].values
    n_t = time.size
    xyz_geo = tern["position_geo"].values.astype(float)
    model = as_model("dipole")
    b_geo = np.asarray(model.field_geo(xyz_geo, time), float)
    # spin frame (z spin axis, x phase 0) in GSE, then the field in it
    s_hat = np.array(p["spin_axis_gse"], float)
    ref = np.array(p["phase_reference_gse"], float)
    e1 = ref - ref.dot(s_hat) * s_hat
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(s_hat, e1)
    b_gse = np.asarray(convert(b_geo, time, "GEO", "GSE"), float)
    b_hat = b_gse / np.linalg.norm(b_gse, axis=-1, keepdims=True)
    b_spin = np.stack([b_hat @ e1, b_hat @ e2, b_hat @ s_hat], -1)  # (time, 3)
    rays, w = _rays_spin_frame()
    # pitch angle of the particles entering along each ray: they move along -ray
    cosa = -np.einsum("sdni,ti->tsdn", rays, b_spin)
    alpha = np.degrees(np.arccos(np.clip(cosa, -1.0, 1.0)))
    j = flux(alpha[:, None])  # (time, energy, sector, detector, node)
    mean = np.einsum("tesdn,n->tesd", j, w)
    e_bnds = tern["energy_bnds"].values
    d_e = e_bnds[:, 1] - e_bnds[:, 0]
    factor = 1.0 / (p["geometric_factor_cm2_sr"] * p["accumulation_s"] * d_e)
    bg = p["background_counts_per_s"] * p["accumulation_s"] * factor  # flux of the background
    expected = (mean + bg[None, :, None, None]) / factor[None, :, None, None]
    counts = rng.poisson(expected).astype(np.int32)
    # truth: the expected measured flux averaged over each of the 12 bins (solid angle)
    edges = np.asarray(p["pitch_angle_edges_deg"], float)
    x, wq = np.polynomial.legendre.leggauss(12)
    mu1, mu2 = np.cos(np.radians(edges[:-1])), np.cos(np.radians(edges[1:]))
    mu = 0.5 * (mu1 + mu2)[:, None] + 0.5 * (mu1 - mu2)[:, None] * x[None, :]
    nodes = np.degrees(np.arccos(np.clip(mu, -1.0, 1.0)))
    true = np.einsum("tepn,n->tep", flux(np.broadcast_to(nodes, (n_t, 1) + nodes.shape)),
                     wq) / wq.sum() + bg[None, :, None]
    n_s = p["n_sectors"]
    phase = np.arange(n_s) * 360.0 / n_s
    keep_vars = ["L", "mlat", "mlt", "b_local", "position_geo", "energy_bnds"]
    ds = xr.Dataset({
        "counts": (("time", "energy", "sector", "detector"), counts,
                   {"units": "1", "long_name": "detector counts per spectrum and sector"}),
        "counts_to_flux": ("energy", factor, {"units": FLUX_UNITS,
                                              "long_name": "flux per count"}),
        "spin_axis": ("xyz", s_hat, {"frame": "GSE", "units": "1",
                                     "long_name": "spin axis"}),
        "spin_phase_reference": ("xyz", ref, {"frame": "GSE", "units": "1",
                                              "long_name": "direction of spin phase 0"}),
        "sector_phase_bnds": (("sector", "nv"), np.stack([phase, phase + 360.0 / n_s], -1),
                              {"units": "degree",
                               "long_name": "spin phase at the start and end of each "
                                            "sector's accumulation"}),
        "detector_polar_angle": ("detector", np.array(p["detector_polar_deg"]),
                                 {"units": "degree",
                                  "long_name": "boresight angle from the spin axis"}),
        "fov_half_angle": ((), p["fov_half_angle_deg"],
                           {"units": "degree", "long_name": "field-of-view half-angle"}),
        "b_vector": (("time", "xyz"), b_geo.astype(np.float32),
                     {"units": "nT", "frame": "GEO",
                      "long_name": "magnetic field at the probe (centred dipole)"}),
        "true_flux": (("time", "energy", "true_pitch_angle"), true.astype(np.float32),
                      {"units": FLUX_UNITS,
                       "long_name": "generator truth: expected measured flux averaged over "
                                    "each pitch-angle bin"}),
        "true_pitch_angle_bnds": (("true_pitch_angle", "nv"),
                                  np.stack([edges[:-1], edges[1:]], -1), {"units": "degree"}),
        **{v: tern[v] for v in keep_vars},
    }, coords={"time": tern["time"], "energy": tern["energy"],
               "true_pitch_angle": ("true_pitch_angle", 0.5 * (edges[:-1] + edges[1:]),
                                    {"units": "degree"})})
    ds.attrs = {**tern.attrs,
                "title": tern.attrs["title"].replace("electron flux",
                                                     "spin-sectored electron counts"),
                "instrument": "Fan spectrometer, spin-sectored mode (invented)"}
    return ds


def generate_sectored(out_dir, *, flux_model, seed=20261201, n_days=1) -> list[Path]:
    """Write sectored Marram-Tern day-files (``marram_tern_sectors_synthetic_YYYYMMDD.nc``).

    Parameters
    ----------
    out_dir : str or os.PathLike
        Folder (created if missing).
    flux_model : callable
        :func:`beltkit.demo.tern_flux_model`.
    seed : int
        Seed of the Poisson counts.
    n_days : int
        Days from the scenario's start (1-3).

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from ..io import write_dataset

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    start = np.datetime64(START, "ns")
    files = []
    for k in range(int(n_days)):
        day = start + np.timedelta64(k, "D")
        tag = str(day)[:10].replace("-", "")
        files.append(write_dataset(sectored_day(day, flux_model=flux_model, seed=seed),
                                   out / f"marram_tern_sectors_synthetic_{tag}.nc",
                                   compress=True))
    return files


def bin_and_summarize(ds):
    """Bin a sectored day into the Tern's 12 bins and partition it in the centred dipole.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`sectored_day`.

    Returns
    -------
    binned, summary : xarray.Dataset
        :func:`beltkit.pad.bin_sectors` output and its
        :func:`beltkit.pad.partition` (``model="dipole"``, the truth's field).
    """
    from ..pad import bin_sectors, partition

    binned = bin_sectors(ds, np.asarray(SPIN["pitch_angle_edges_deg"]))
    return binned, partition(binned, model="dipole")


def run_sectors(out_dir, *, flux_model, seed=20261201) -> list[Path]:
    """Write day 1 as sectored counts, bin it and draw its figure (the demo's sectored step).

    Writes ``sectors/marram_tern_sectors_synthetic_20270308.nc``, its
    pitch-angle file ``sectors/pad/<stem>.pad.nc`` (with ``run-report.jsonl``)
    through :func:`beltkit.batch.bin_sectored` into the Tern file's 12 bins,
    and ``figures/tern_sector_coverage.png`` (:func:`beltkit.plot.sector_coverage`
    at the first sample after 03:00 UTC, 500 keV). :func:`beltkit.demo.run_demo`
    runs it.

    Parameters
    ----------
    out_dir : str or os.PathLike
        The demo's output folder.
    flux_model : callable
        :func:`beltkit.demo.tern_flux_model`.
    seed : int
        Seed of the Poisson counts.

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from .. import batch, plot

    out = Path(out_dir)
    data = generate_sectored(out / "sectors", flux_model=flux_model, seed=seed, n_days=1)
    done = batch.bin_sectored(data, out / "sectors" / "pad",
                              np.asarray(SPIN["pitch_angle_edges_deg"]), overwrite=True)
    bad = [r for r in done if r.status == "failed"]
    if bad:
        raise RuntimeError("demo sector binning failed: " + "; ".join(
            f"{r.input}: {r.reason}" for r in bad))
    pad = [Path(r.output) for r in done]
    figures = out / "figures"
    figures.mkdir(parents=True, exist_ok=True)
    png = figures / "tern_sector_coverage.png"
    with xr.open_dataset(data[0]) as ds, xr.open_dataset(pad[0]) as binned:
        fig = plot.sector_coverage(ds, binned, time=np.datetime64("2027-03-08T03:00", "ns"),
                                   energy=500.0)
        fig.savefig(png, dpi=110)
    return [*data, *pad, out / "sectors" / "pad" / "run-report.jsonl", png]
