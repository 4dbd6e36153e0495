"""Sine-power fits against numpy.polyfit, scipy.optimize.curve_fit and their own statistics."""

import numpy as np
import pytest
import xarray as xr
from _flux_factory import make_ds
from scipy import optimize

from beltkit.pad import fit_sine_power

EDGES = np.linspace(0.0, 180.0, 37)
CENTRES = 0.5 * (EDGES[:-1] + EDGES[1:])
S = np.sin(np.radians(CENTRES))


def test_exact_sine_power_is_recovered():
    j = 5e4 * S**2.7
    j[:2] = j[-2:] = 1e-3  # an empty loss cone must not bias the trapped fit
    ds = make_ds(j[None, None, :], EDGES, L=4.0)
    for method in ("linear", "nonlinear"):
        out = fit_sine_power(ds, method=method)
        assert float(out.sine_index[0, 0]) == pytest.approx(2.7, rel=1e-9)
        assert float(out.sine_amplitude[0, 0]) == pytest.approx(5e4, rel=1e-9)


def test_linear_fit_matches_numpy_polyfit():
    rng = np.random.default_rng(8)
    sig = 0.05 * 1e3 * S**1.5 + 1.0
    j = 1e3 * S**1.5 + rng.normal(0, sig)
    ds = make_ds(j[None, None, :], EDGES, L=4.0, flux_err=sig[None, None, :])
    out = fit_sine_power(ds)
    use = (EDGES[:-1] >= float(out.dlc_local[0])) & (EDGES[1:] <= 180 - float(out.dlc_local[0]))
    # reference: numpy.polyfit weighted by 1 / sigma_lnj = j / sigma, unscaled covariance
    coef, cov = np.polyfit(np.log(S[use]), np.log(j[use]), 1, w=(j / sig)[use], cov="unscaled")
    assert float(out.sine_index[0, 0]) == pytest.approx(coef[0], rel=1e-10)
    assert float(out.sine_amplitude[0, 0]) == pytest.approx(np.exp(coef[1]), rel=1e-10)
    assert float(out.sine_index_err[0, 0]) == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-8)
    assert int(out.sine_dof[0, 0]) == use.sum() - 2


def test_nonlinear_fit_matches_scipy_curve_fit():
    rng = np.random.default_rng(9)
    sig = 20.0 + 0.0 * S
    j = 800 * S**3.2 + rng.normal(0, sig)
    ds = make_ds(j[None, None, :], EDGES, L=4.0, flux_err=sig[None, None, :])
    out = fit_sine_power(ds, method="nonlinear", max_iter=60, allow_negative=True)
    use = (EDGES[:-1] >= float(out.dlc_local[0])) & (EDGES[1:] <= 180 - float(out.dlc_local[0]))
    # reference: scipy.optimize.curve_fit with absolute sigma
    p, cov = optimize.curve_fit(lambda s, a, n: a * s**n, S[use], j[use], p0=[700, 3],
                                sigma=sig[use], absolute_sigma=True)
    assert float(out.sine_amplitude[0, 0]) == pytest.approx(p[0], rel=1e-6)
    assert float(out.sine_index[0, 0]) == pytest.approx(p[1], rel=1e-6)
    assert float(out.sine_amplitude_err[0, 0]) == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-4)
    assert float(out.sine_index_err[0, 0]) == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-4)
    resid = ((j[use] - p[0] * S[use] ** p[1]) / sig[use]) ** 2
    assert float(out.sine_chi2_reduced[0, 0]) == pytest.approx(resid.sum() / (use.sum() - 2),
                                                               rel=1e-6)


def test_errors_describe_the_scatter_over_many_spectra():
    # 4000 noisy spectra fitted at once: the pulls (fit - truth) / error have unit spread and
    # chi2 per degree of freedom averages 1 (least-squares statistics)
    rng = np.random.default_rng(10)
    n_t, n_e = 1000, 4
    truth = 2.0
    sig = np.broadcast_to(30.0 + 0 * S, (n_t, n_e, S.size))
    j = 1e3 * S**truth + rng.normal(0, sig)
    ds = make_ds(j, EDGES, L=4.0, flux_err=sig)
    out = fit_sine_power(ds, method="nonlinear", allow_negative=True)
    pulls = ((out.sine_index - truth) / out.sine_index_err).values.ravel()
    assert np.std(pulls) == pytest.approx(1.0, abs=0.06)
    assert abs(np.mean(pulls)) < 0.1
    assert float(out.sine_chi2_reduced.mean()) == pytest.approx(1.0, abs=0.03)


def test_dask_equals_eager():
    rng = np.random.default_rng(1)
    j = 1e3 * S**2 * rng.uniform(0.9, 1.1, (20, 2, S.size))
    ds = make_ds(j, EDGES, L=np.linspace(2, 6, 20), flux_err=0.05 * j)
    a = fit_sine_power(ds)
    b = fit_sine_power(ds.chunk(time=6))
    assert b.sine_index.chunks is not None
    xr.testing.assert_allclose(a, b.compute())
