"""Synthetic pitch-angle data filled to the Kennel-Petschek steady state, for the diffusion tests.

Invented test input: the flux in each bin or look is the mean of
:func:`beltkit.diffusion.loss_cone_profile` over the bin's solid angle
(Gauss-Legendre quadrature), with Gaussian or Poisson noise. The datasets
themselves are built by the shared factory (tests/_flux_factory.py).
"""

import math

import numpy as np
from _flux_factory import make_ds, make_telescope_ds

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
    noisy = np.abs(flux + rng.normal(size=flux.shape) * sig)
    if counts is None:
        return make_ds(noisy, edges, L=L, mlat=mlat, flux_err=sig, energy_kev=energies,
                       start="2026-03-01")
    # Poisson counts with a fixed conversion factor (noisy and sig are not used)
    n_counts = rng.poisson(flux / counts).astype(float)
    return make_ds(n_counts * counts, edges, L=L, mlat=mlat, energy_kev=energies,
                   counts=n_counts, counts_to_flux=counts, start="2026-03-01")


def telescope_dataset(z0, L=4.5, alt=650.0, half=15.0, err=0.03, seed=1):
    """Synthetic low-orbit pair: one look along B (into the cone), one at 90 deg."""
    from beltkit import dipole

    z0 = np.asarray(z0, dtype=float)
    mlat = math.degrees(math.acos(math.sqrt((1 + alt / R_E_KM) / L)))
    looks = np.array([0.0, 90.0])
    a0 = dipole.bounce_loss_cone(L)
    b_ratio = dipole.field_magnitude(L, mlat) / dipole.equatorial_field(L)
    lo, hi = np.maximum(looks - half, 0), np.minimum(looks + half, 180)
    f = band_means(lo, hi, L, mlat, z0, a0, b_ratio, k=400)
    flux = f[:, None, :] * 1e4
    rng = np.random.default_rng(seed)
    sig = err * flux + 1.0
    return make_telescope_ds(np.abs(flux + rng.normal(size=flux.shape) * sig), looks,
                             [half, half], L=L, mlat=mlat, flux_err=sig, energy_kev=[300.0],
                             start="2026-03-02")
