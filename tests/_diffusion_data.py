"""Synthetic pitch-angle data filled to the Kennel-Petschek steady state, for the diffusion tests.

Invented test input: the flux in each bin or look is the mean of
:func:`beltkit.diffusion.loss_cone_profile` over the bin's solid angle
(Gauss-Legendre quadrature), with Gaussian or Poisson noise.
"""

import math

import numpy as np
import xarray as xr

from beltkit import diffusion
from beltkit.constants import R_E_KM

__all__ = ["band_means", "bins_dataset", "telescope_dataset"]


def band_means(lo_deg, hi_deg, L, mlat, z0, a0_deg, b_ratio, k=120):
    """Mean profile over local bands (uniform in cos, i.e. in solid angle), Gauss-Legendre."""
    x, w = np.polynomial.legendre.leggauss(k)
    c = 0.5 * (x + 1)
    ca1, ca2 = np.cos(np.radians(lo_deg)), np.cos(np.radians(hi_deg))
    cc = ca1[..., None] + (ca2 - ca1)[..., None] * c
    al = np.degrees(np.arccos(cc))
    al = np.minimum(al, 180 - al)
    aeq = np.degrees(np.arcsin(np.minimum(np.sin(np.radians(al)) / np.sqrt(b_ratio), 1)))
    f = diffusion.loss_cone_profile(aeq[None], a0_deg, np.asarray(z0)[:, None, None])
    return (f * w).sum(-1) / 2


def bins_dataset(z0, L=4.5, mlat=0.0, energies=(300.0, 600.0), err=0.02, seed=0,
                  edges=None, counts=None):
    from beltkit import dipole

    z0 = np.asarray(z0, dtype=float)
    n = z0.shape[0]
    if edges is None:  # 1 deg bins near both loss cones, 10 deg elsewhere
        edges = np.concatenate([np.arange(0, 20, 1.0), np.arange(20, 160, 10.0),
                                np.arange(160, 181, 1.0)])
    e1, e2 = edges[:-1], edges[1:]
    a0 = dipole.bounce_loss_cone(L)
    b_ratio = dipole.field_magnitude(L, mlat) / dipole.equatorial_field(L)
    f = band_means(e1, e2, L, mlat, z0, a0, b_ratio)
    flux = np.repeat(f[:, None, :], len(energies), 1) * 1e4
    rng = np.random.default_rng(seed)
    sig = err * flux + 1.0
    data = {"flux": (("time", "energy", "pitch_angle"),
                     np.abs(flux + rng.normal(size=flux.shape) * sig),
                     {"units": "cm-2 s-1 sr-1 keV-1"}),
            "flux_err": (("time", "energy", "pitch_angle"), sig,
                         {"units": "cm-2 s-1 sr-1 keV-1"})}
    if counts is not None:  # Poisson counts with a fixed conversion factor
        lam = flux / counts
        n_counts = rng.poisson(lam).astype(float)
        data = {"flux": (("time", "energy", "pitch_angle"), n_counts * counts,
                         {"units": "cm-2 s-1 sr-1 keV-1"}),
                "counts": (("time", "energy", "pitch_angle"), n_counts, {"units": "1"}),
                "counts_to_flux": ((), counts, {"units": "cm-2 s-1 sr-1 keV-1"})}
    t = np.datetime64("2026-03-01", "ns") + np.arange(n) * np.timedelta64(1, "s")
    return xr.Dataset(
        {**data,
         "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([e1, e2], 1)),
         "energy_bnds": (("energy", "nv"), [[e * 0.9, e * 1.1] for e in energies]),
         "L": ("time", np.full(n, L), {"units": "1"}),
         "mlat": ("time", np.full(n, mlat), {"units": "degree"})},
        coords={"time": t, "energy": ("energy", list(energies), {"units": "keV"}),
                "pitch_angle": ("pitch_angle", 0.5 * (e1 + e2), {"units": "degree"})})


def telescope_dataset(z0, L=4.5, alt=650.0, half=15.0, err=0.03, seed=1):
    """Synthetic low-orbit pair: one look along B (into the cone), one at 90 deg."""
    from beltkit import dipole

    z0 = np.asarray(z0, dtype=float)
    n = z0.shape[0]
    mlat = math.degrees(math.acos(math.sqrt((1 + alt / R_E_KM) / L)))
    looks = np.array([0.0, 90.0])
    a0 = dipole.bounce_loss_cone(L)
    b_ratio = dipole.field_magnitude(L, mlat) / dipole.equatorial_field(L)
    lo, hi = np.maximum(looks - half, 0), np.minimum(looks + half, 180)
    f = band_means(lo, hi, L, mlat, z0, a0, b_ratio, k=400)
    flux = f[:, None, :] * 1e4
    rng = np.random.default_rng(seed)
    sig = err * flux + 1.0
    t = np.datetime64("2026-03-02", "ns") + np.arange(n) * np.timedelta64(1, "s")
    return xr.Dataset(
        {"flux": (("time", "energy", "look"), np.abs(flux + rng.normal(size=flux.shape) * sig),
                  {"units": "cm-2 s-1 sr-1 keV-1"}),
         "flux_err": (("time", "energy", "look"), sig, {"units": "cm-2 s-1 sr-1 keV-1"}),
         "look_pitch_angle": (("time", "look"), np.tile(looks, (n, 1)), {"units": "degree"}),
         "look_half_angle": (("look",), [half, half], {"units": "degree"}),
         "energy_bnds": (("energy", "nv"), [[270.0, 330.0]]),
         "L": ("time", np.full(n, L), {"units": "1"}),
         "mlat": ("time", np.full(n, mlat), {"units": "degree"})},
        coords={"time": t, "energy": ("energy", [300.0], {"units": "keV"})})
