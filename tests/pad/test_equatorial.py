"""Equatorial mapping against dipole theory (first invariant, Liouville)."""

import numpy as np
import pytest
import xarray as xr
from _flux_factory import make_ds

from beltkit import dipole
from beltkit.pad import to_equatorial

EDGES_1DEG = np.linspace(0.0, 180.0, 181)
CENTRES = 0.5 * (EDGES_1DEG[:-1] + EDGES_1DEG[1:])


def _f_eq(alpha_eq_deg):
    """An invented smooth equatorial distribution (test input only)."""
    return 0.2 + np.sin(np.radians(alpha_eq_deg)) ** 3


def test_equator_and_30_degrees_see_the_same_equatorial_distribution():
    L = 4.0
    at_equator = make_ds(_f_eq(CENTRES)[None, None, :], EDGES_1DEG, L=L, mlat=0.0)
    # Liouville: the flux seen at 30 deg is the equatorial flux at the equatorial pitch angle
    # given by the dipole's own first-invariant mapping (beltkit.dipole, independent code)
    a_eq_of_local = np.asarray(dipole.equatorial_pitch_angle(CENTRES, 30.0))
    at_30 = make_ds(_f_eq(a_eq_of_local)[None, None, :], EDGES_1DEG, L=L, mlat=30.0)
    grid = np.concatenate([np.arange(1.0, 34.0, 1.0), 180 - np.arange(1.0, 34.0, 1.0)])
    a = to_equatorial(at_equator, alpha_eq_deg=grid)
    b = to_equatorial(at_30, alpha_eq_deg=grid)
    assert int(a.equatorial_flag.max()) == 0 and int(b.equatorial_flag.max()) == 0
    # both equal the distribution they came from (linear interpolation on 1-deg bins)
    np.testing.assert_allclose(a.flux_equatorial[0, 0].values, _f_eq(grid), rtol=2e-3)
    np.testing.assert_allclose(b.flux_equatorial[0, 0].values, _f_eq(grid), rtol=2e-3)
    np.testing.assert_allclose(a.flux_equatorial.values, b.flux_equatorial.values, rtol=3e-3)


def test_unreachable_equatorial_angles_are_flagged():
    # at 30 deg latitude only alpha_eq up to asin(sqrt(B_eq / B)) reach the spacecraft
    limit = float(dipole.equatorial_pitch_angle(90.0, 30.0))
    ds = make_ds(np.ones((1, 1, 180)), EDGES_1DEG, L=4.0, mlat=30.0)
    out = to_equatorial(ds, alpha_eq_deg=[limit - 0.5, limit + 0.5, 90.0, 180 - limit - 0.5])
    assert out.equatorial_flag.values[0].tolist() == [0, 1, 1, 1]
    assert np.isnan(out.flux_equatorial.values[0, 0, 1:]).all()
    assert out.flux_equatorial.values[0, 0, 0] == pytest.approx(1.0)


def test_local_angles_that_cannot_reach_the_equator():
    # a measured local field below the line's minimum: sin^2(alpha) B_min / B_loc > 1 near 90 deg
    b_eq = float(dipole.equatorial_field(4.0))
    ds = make_ds(np.ones((1, 1, 180)), EDGES_1DEG, L=4.0, mlat=0.0, b_local=0.8 * b_eq)
    out = to_equatorial(ds)
    reach = out.local_reach_flag.values[0]
    expect = np.sin(np.radians(CENTRES)) ** 2 / 0.8 > 1.0
    assert reach.astype(bool).tolist() == expect.tolist()
    assert 0 < expect.sum() < 180


def test_unsampled_local_angles_are_flagged():
    ds = make_ds(np.ones((1, 1, 6)), np.linspace(30, 150, 7), L=4.0)
    out = to_equatorial(ds, alpha_eq_deg=[10.0, 60.0])
    assert out.equatorial_flag.values[0].tolist() == [2, 0]


def test_bin_method_and_errors():
    j = np.arange(1.0, 13.0)[None, None, :]
    ds = make_ds(j, np.linspace(0, 180, 13), L=4.0, flux_err=0.1 * j)
    out = to_equatorial(ds, alpha_eq_deg=[5.0, 20.0], method="bin")
    np.testing.assert_allclose(out.flux_equatorial.values[0, 0], [1.0, 2.0])
    np.testing.assert_allclose(out.flux_equatorial_err.values[0, 0], [0.1, 0.2])
    lin = to_equatorial(ds, alpha_eq_deg=[15.0])  # half-way between the first two centres
    assert float(lin.flux_equatorial[0, 0, 0]) == pytest.approx(1.5)
    # independent bins: sigma of the mean of two = sqrt(0.1^2 + 0.2^2) / 2
    assert float(lin.flux_equatorial_err[0, 0, 0]) == pytest.approx(np.hypot(0.1, 0.2) / 2)


def test_dask_equals_eager():
    rng = np.random.default_rng(4)
    ds = make_ds(rng.uniform(1, 2, (12, 2, 18)), np.linspace(0, 180, 19),
                 L=np.linspace(2, 6, 12), mlat=np.linspace(-25, 25, 12))
    a = to_equatorial(ds, alpha_eq_deg=np.arange(2, 180, 4.0))
    b = to_equatorial(ds.chunk(time=5), alpha_eq_deg=np.arange(2, 180, 4.0))
    assert b.flux_equatorial.chunks is not None
    xr.testing.assert_allclose(a, b.compute())
