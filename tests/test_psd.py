"""Phase-space density at fixed invariants, passes and radial profiles (beltkit.psd).

References: f = j / p^2 (Liouville; the constant derived in beltkit.particles and
checked there against astropy.units); the dipole inverse problem (checked against
scipy quad in tests/dipole/test_dipole.py); an analytic test distribution
j = A E^-3 sin^2(alpha) whose f at given (mu, K) is computed here in closed form.
"""

import numpy as np
import pytest
import scipy.constants as sc
import xarray as xr
from _flux_factory import make_ds

from beltkit import dipole, psd
from beltkit.constants import R_E_KM
from beltkit.errors import PhysicsError
from beltkit.particles import PSD_UNITS

E0_KEV = sc.m_e * sc.c**2 / (1e3 * sc.e)  # electron rest energy from CODATA


def _analytic_dataset(L, mlat=None, n_energy=16, rel_err=0.1):
    """Equatorial samples with j = 1e7 (E/100 keV)^-3 sin^2(alpha) at bin centres (1 deg bins)."""
    n = L.size
    e_edges = np.geomspace(50.0, 3000.0, n_energy + 1)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    a_edges = np.linspace(0.0, 180.0, 181)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    j = 1e7 * (energy / 100.0)[None, :, None] ** -3 * np.sin(np.radians(alpha))[None, None, :] ** 2
    j = np.broadcast_to(j, (n, energy.size, alpha.size))
    return make_ds(j.copy(), a_edges, L=L, mlat=np.zeros(n) if mlat is None else mlat,
                   mlt=0.0, flux_err=rel_err * j, energy_edges_kev=e_edges,
                   start="2026-03-01T00:00:00")


def _expected_f(mu, k, L, constant=1e3 / (sc.c * 100)):
    # closed form: alpha_eq and E from the dipole inverse problem, j analytic, f = C j / p^2
    a, e = dipole.invariants_to_pitch_energy(mu, k, L)
    j = 1e7 * (e / 100.0) ** -3 * np.sin(np.radians(a)) ** 2
    p2 = e * (e + 2 * E0_KEV) * 1e-6  # (p c)^2 in MeV^2
    return constant * j / p2, a, e


def test_psd_at_fixed_invariants_dipole_matches_closed_form():
    L = np.linspace(3.0, 6.0, 7)
    ds = _analytic_dataset(L)
    mu = np.array([100.0, 300.0])
    k = np.array([0.05, 0.2])
    out = psd.at_fixed_invariants(ds, mu, k)
    assert out["psd"].dims == ("time", "mu", "k")
    assert out["psd"].attrs["units"] == PSD_UNITS
    ref, a, e = _expected_f(mu[None, :, None], k[None, None, :], L[:, None, None])
    inside = (out.psd_flag.values & 1) == 0
    assert inside.sum() > 10
    # 3e-3: linear interpolation of the flux between 1-degree bin centres and of ln f on
    # the 1-degree equatorial grid (curvature of ln sin^2, largest at small alpha_eq);
    # energy is exact (a power law is linear in ln-ln)
    np.testing.assert_allclose(out.psd.values[inside], ref[inside], rtol=3e-3)
    # nudge: 1% more mu (a 1% higher energy) moves f by more than the tolerance
    nudged, _, _ = _expected_f(1.01 * mu[None, :, None], k[None, None, :], L[:, None, None])
    assert np.all(np.abs(out.psd.values[inside] / nudged[inside] - 1) > 6e-3)
    np.testing.assert_allclose(out.alpha_eq.values, a[:, 0, :], rtol=1e-10)
    np.testing.assert_allclose(out.energy_at_invariants.values, e, rtol=1e-10)
    np.testing.assert_allclose(out.lstar.values, np.broadcast_to(L[:, None], (7, 2)))
    # errors: 10% on every bin, combined with the interpolation weights: between 5% and 10%
    rel = out.psd_err.values[inside] / out.psd.values[inside]
    assert np.all((rel > 0.05 - 1e-9) & (rel <= 0.1 + 1e-9))


def test_psd_flags():
    L = np.array([3.0, 6.0])
    ds = _analytic_dataset(L)
    # energy above the measured range: NaN and flag 1
    out = psd.at_fixed_invariants(ds, [1e6], [0.05])
    assert np.all(np.isnan(out.psd.values)) and np.all(out.psd_flag.values & 1)
    # very large K: small alpha_eq inside the loss cone (flag 4), value kept
    out = psd.at_fixed_invariants(ds, [50.0], [20.0])
    a = out.alpha_eq.values[:, 0]
    blc = dipole.bounce_loss_cone(L)
    assert np.all(a < blc)
    assert np.all(out.psd_flag.values[:, 0, 0] & 4)
    # a gap in the measured pitch angles: flag 2
    gap = ds.copy(deep=True)
    gap["flux"][:, :, 40:60] = np.nan  # both halves: the fold about 90 deg uses either
    gap["flux"][:, :, 120:140] = np.nan
    kk = dipole.second_invariant_k(4.0, 50.0)
    out = psd.at_fixed_invariants(gap.isel(time=[0]).assign(L=("time", [4.0], {"units": "1"})),
                                  [100.0], [kk])
    assert out.psd_flag.values[0, 0, 0] & 2 and np.isnan(out.psd.values[0, 0, 0])
    with pytest.raises(PhysicsError, match="mu_mev_per_g"):
        psd.at_fixed_invariants(ds, [-1.0], [0.1])


def test_psd_lazy_over_dask_chunks():
    ds = _analytic_dataset(np.linspace(3.0, 6.0, 40))
    eager = psd.at_fixed_invariants(ds, [100.0, 300.0], [0.05, 0.2])
    lazy = psd.at_fixed_invariants(ds.chunk(time=10), [100.0, 300.0], [0.05, 0.2])
    assert lazy["psd"].chunks is not None
    xr.testing.assert_allclose(lazy.compute(), eager)


def test_psd_igrf_coarse_lstar_matches_direct():
    # With a field model the pitch angle carrying K and L* come from the traced lines at
    # a coarse cadence (interpolated in time); at a node sample they equal the direct
    # computation: K along the sample's line at the implied local pitch angle
    # (beltkit.field.second_invariant_k) and beltkit.field.lstar of that sample.
    from beltkit.field import IGRF, lstar, second_invariant_k
    from beltkit.field.trace import trace_lines

    n = 11
    ds = _analytic_dataset(np.full(n, 4.0), n_energy=6).drop_vars(["L", "mlat", "mlt"])
    th = np.linspace(0.0, 0.02, n)
    r = 4.2 * R_E_KM
    pos = np.stack([r * np.cos(th), r * np.sin(th), np.full(n, 0.05 * r)], -1)
    ds = ds.assign(position_geo=(("time", "xyz"), pos, {"units": "km"}))
    m = IGRF()
    k = 0.1
    out = psd.at_fixed_invariants(ds, [200.0], [k], model=m, lstar_cadence_s=10.0)
    assert "interpolated linearly in time" in out.attrs["beltkit_lstar_method"]
    i = 10  # a node (every 10 s)
    t = ds.time.values[i]
    lines = trace_lines(m, pos[i:i + 1], t)
    a_eq = float(out.alpha_eq.values[i, 0])
    s_loc = np.sin(np.radians(a_eq)) * np.sqrt(lines.b_start[0] / lines.b_min[0])
    a_loc = np.degrees(np.arcsin(s_loc))
    assert float(second_invariant_k(m, pos[i], t, a_loc)) == pytest.approx(k, rel=1e-4)
    direct = lstar(m, pos[i:i + 1], t, a_loc)
    assert float(out.lstar.values[i, 0]) == pytest.approx(float(direct.lstar[0]), rel=1e-5)
    assert np.all(np.isfinite(out.lstar.values))


def _orbit_dataset():
    # three passes: L 3 -> 6 -> 3 -> 6 (triangle wave), 1-minute cadence
    up = np.linspace(3, 6, 60)
    L = np.concatenate([up, up[::-1][1:], up[1:]])
    ds = _analytic_dataset(L, n_energy=8)
    return ds.assign_coords(time=ds.time.values[0] + np.arange(L.size) * np.timedelta64(60, "s"))


def test_passes_and_radial_profiles():
    ds = _orbit_dataset()
    out = psd.at_fixed_invariants(ds, [100.0], [0.1])
    p = psd.passes(out)
    assert p.sizes["pass"] == 3
    assert list(p.direction.values) == [1, -1, 1]
    assert p.attrs["radial_coordinate"] == "lstar"
    prof = psd.radial_profiles(out, lstar_bins=np.arange(3.0, 6.01, 0.5))
    assert prof.psd.dims == ("pass", "lstar")
    assert prof.psd.attrs["units"] == PSD_UNITS
    # the same static distribution on every pass: identical profiles, f rising with L
    # (fixed mu: lower energy farther out, j ~ E^-3)
    np.testing.assert_allclose(prof.psd.values[0], prof.psd.values[1], rtol=0.05)
    assert np.all(np.diff(prof.psd.values[0]) > 0)
    assert np.all(prof.n_samples.values > 0)


def test_psd_radial_profiles_figure():
    from beltkit.plot import psd_radial_profiles

    ds = _orbit_dataset()
    prof = psd.radial_profiles(psd.at_fixed_invariants(ds, [100.0], [0.1]))
    fig = psd_radial_profiles(prof)
    ax = fig.axes[0]
    assert len(ax.lines) == prof.sizes["pass"]
    assert ax.get_yscale() == "log"
    assert [ln.get_linestyle() for ln in ax.lines] == ["-", "--", "-"]


def test_psd_output_cf_units_and_netcdf(tmp_path):
    # CF: every data variable carries a UDUNITS-parseable unit or flag attributes (the
    # CF conventions, sect. 3.1 and 3.5); the dataset writes to netCDF and reads back
    from beltkit.units import parse_units

    out = psd.at_fixed_invariants(_analytic_dataset(np.linspace(3.0, 6.0, 5), n_energy=6),
                                  [100.0, 300.0], [0.05, 0.2])
    for name, var in {**out.data_vars, **out.coords}.items():
        if "flag_masks" in var.attrs or name == "time":
            continue
        assert parse_units(var.attrs["units"]) is not None, name
    path = tmp_path / "psd.nc"
    out.to_netcdf(path)
    back = xr.open_dataset(path)
    xr.testing.assert_allclose(back.psd, out.psd)
    assert back.psd.attrs["units"] == PSD_UNITS
