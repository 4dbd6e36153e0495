"""Partition of pitch-angle flux against spherical geometry, the Beta function, dipole theory."""

import copy

import numpy as np
import pytest
import xarray as xr
from _flux_factory import make_ds, make_telescope_ds
from _partition_reference import reference_partition
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, special

import beltkit  # noqa: F401  (registers ds.beltkit)
from beltkit import dipole
from beltkit.errors import ConventionError
from beltkit.pad import OUTPUT_NAMES, partition

EDGES_12 = np.linspace(0.0, 180.0, 13)


def _bin_mean_sine_power(edges, n):
    """Solid-angle mean of sin^n over each bin, by scipy quadrature (independent reference)."""
    out = []
    for a1, a2 in zip(edges[:-1], edges[1:]):
        r1, r2 = np.radians([a1, a2])
        num = integrate.quad(lambda a: np.sin(a) ** (n + 1), r1, r2, epsabs=1e-14)[0]
        out.append(num / (np.cos(r1) - np.cos(r2)))
    return np.array(out)


def _sine_power_integral(theta_deg, n):
    """Integral of sin^(n+1) from 0 to theta (<= 90 deg) via the regularised incomplete Beta."""
    # substitute t = sin^2: (1/2) B((n+2)/2, 1/2) I_{sin^2 theta}((n+2)/2, 1/2)
    a, b = (n + 2) / 2, 0.5
    return 0.5 * special.beta(a, b) * special.betainc(a, b, np.sin(np.radians(theta_deg)) ** 2)


@pytest.mark.parametrize("L,mlat", [(4.0, 0.0), (6.6, 0.0), (3.0, 20.0), (1.5, 0.0)])
def test_isotropic_fractions_equal_solid_angle_fractions(L, mlat):
    ds = make_ds(np.full((1, 2, 12), 5.0), EDGES_12, L=L, mlat=mlat)
    out = partition(ds)
    # the loss cone must be the dipole's own local loss cone (beltkit.dipole)
    blc = float(dipole.local_loss_cone(L, mlat))
    assert float(out.blc_local[0]) == pytest.approx(blc, rel=1e-12)
    assert float(out.blc_equatorial[0]) == pytest.approx(float(dipole.bounce_loss_cone(L)),
                                                         rel=1e-12)
    # spherical geometry: both loss cones together hold 1 - cos(alpha_LC) of the sphere
    expect = 1 - np.cos(np.radians(blc))
    np.testing.assert_allclose(out.fraction_precipitating.values, expect, rtol=1e-12)
    np.testing.assert_allclose(out.fraction_trapped.values, 1 - expect, rtol=1e-12)
    np.testing.assert_allclose(out.fraction_quasi_trapped.values, 0.0, atol=0)
    # omnidirectional flux of an isotropic j is 4 pi j
    np.testing.assert_allclose(out.omni_flux.values, 4 * np.pi * 5.0, rtol=1e-13)
    np.testing.assert_allclose(out.loss_cone_filling.values, 1.0, rtol=1e-12)
    np.testing.assert_allclose(out.coverage_precipitating.values, 1.0, rtol=1e-12)


@pytest.mark.parametrize("n", [1.0, 2.0, 3.5])
def test_sine_power_integrals_against_beta_function(n):
    L = 4.0
    blc = float(dipole.local_loss_cone(L, 0.0))
    # bin edges include the loss-cone edges, so populations are sums of whole bins
    edges = np.unique(np.concatenate([np.linspace(0, 180, 13), [blc, 180 - blc]]))
    A = 3.0e4
    j = A * _bin_mean_sine_power(edges, n)
    out = partition(make_ds(j[None, None, :], edges, L=L))
    # reference: 2 pi A integral_0^pi sin^(n+1) = 2 pi A B(1/2, (n+2)/2) (scipy.special.beta)
    omni = 2 * np.pi * A * special.beta(0.5, (n + 2) / 2)
    assert float(out.omni_flux[0, 0]) == pytest.approx(omni, rel=1e-10)
    prec = 2 * 2 * np.pi * A * _sine_power_integral(blc, n)  # both cones
    assert float(out.flux_precipitating[0, 0]) == pytest.approx(prec, rel=1e-9)
    assert float(out.flux_trapped[0, 0]) == pytest.approx(omni - prec, rel=1e-10)


def test_straddling_bin_is_split_by_cap_area():
    # one bin [0, 30] straddles a ~8.6-degree loss cone (L = 3); inside: the cap 2 pi (1 - cos blc)
    edges = np.array([0.0, 30.0, 150.0, 180.0])
    flux = np.array([[[2.0, 0.0, 0.0]]])
    out = partition(make_ds(flux, edges, L=3.0))
    blc = np.radians(float(out.blc_local[0]))
    cap = 2 * np.pi * (1 - np.cos(blc))  # spherical cap area (spherical geometry)
    assert float(out.flux_precipitating[0, 0]) == pytest.approx(2.0 * cap, rel=1e-12)
    assert float(out.flux_trapped[0, 0]) == pytest.approx(
        2.0 * (2 * np.pi * (1 - np.cos(np.radians(30))) - cap), rel=1e-12)


def test_uncertainties_follow_the_jacobian():
    rng = np.random.default_rng(3)
    j = rng.uniform(1, 10, (1, 1, 12))
    s = rng.uniform(0.1, 1.0, (1, 1, 12))
    ds = make_ds(j, EDGES_12, L=2.5, flux_err=s)
    out = partition(ds)
    # independent check: numerical derivatives of the fractions with respect to each bin,
    # combined in quadrature (first-order error propagation for independent bins)
    names = ("fraction_precipitating", "fraction_trapped", "flux_precipitating",
             "loss_cone_filling")
    # all perturbations at once: time sample 2i (+h on bin i) and 2i+1 (-h on bin i)
    h = 1e-6 * j[0, 0]
    jj = np.repeat(j, 24, axis=0)
    for i in range(12):
        jj[2 * i, 0, i] += h[i]
        jj[2 * i + 1, 0, i] -= h[i]
    pert = partition(make_ds(jj, EDGES_12, L=2.5))
    for name in names:
        v = pert[name].values[:, 0]
        grads = (v[0::2] - v[1::2]) / (2 * h)
        ref = np.sqrt(np.sum((grads * s[0, 0]) ** 2))
        assert float(out[f"{name}_err"][0, 0]) == pytest.approx(ref, rel=1e-5), name


def test_poisson_errors_from_counts():
    counts = np.array([[[0, 4, 9, 16, 25, 36]]], dtype=float)
    c2f = 2.5
    ds = make_ds(counts * c2f, np.linspace(0, 180, 7), L=3.0)
    ds["counts"] = (("time", "energy", "pitch_angle"), counts, {"units": "1"})
    ds["counts_to_flux"] = ((), c2f, {"units": "cm-2 s-1 sr-1 keV-1"})
    with_counts = partition(ds)
    # the same errors given explicitly: sigma = c2f sqrt(N), with N = 0 counted as 1
    ds2 = make_ds(counts * c2f, np.linspace(0, 180, 7), L=3.0,
                  flux_err=c2f * np.sqrt(np.maximum(counts, 1)))
    explicit = partition(ds2)
    for name in ("flux_trapped_err", "fraction_precipitating_err", "omni_flux_err"):
        np.testing.assert_allclose(with_counts[name].values, explicit[name].values, rtol=1e-12)
    assert with_counts.attrs["beltkit_uncertainty_source"] == "counts"


@settings(max_examples=30, deadline=None)
@given(L=st.floats(1.3, 8.0), mlat=st.floats(-30, 30), n_bins=st.integers(3, 24),
       seed=st.integers(0, 2**31))
def test_fractions_sum_to_one_at_full_coverage(L, mlat, n_bins, seed):
    rng = np.random.default_rng(seed)
    j = rng.uniform(0.0, 100.0, (3, 2, n_bins))
    out = partition(make_ds(j, np.linspace(0, 180, n_bins + 1), L=L, mlat=mlat))
    total = out.fraction_precipitating + out.fraction_quasi_trapped + out.fraction_trapped
    full = np.isclose(out.coverage_precipitating, 1, rtol=0, atol=1e-12) & np.isclose(
        out.coverage_trapped, 1, rtol=0, atol=1e-12)
    assert bool(full.all()) and bool((out.omni_flux > 0).all())
    np.testing.assert_allclose(total.values, 1.0, rtol=1e-12)


def test_partial_and_missing_coverage_are_flagged_not_extrapolated():
    # bins only over 0-90 (no folded attribute): half of the loss cones sampled
    j = np.ones((1, 1, 6))
    out = partition(make_ds(j, np.linspace(0, 90, 7), L=3.0))
    assert float(out.coverage_precipitating[0, 0]) == pytest.approx(0.5, rel=1e-12)
    assert float(out.coverage_trapped[0, 0]) == pytest.approx(0.5, rel=1e-12)
    assert int(out.partition_flag[0, 0]) & 8
    # only 30-150 sampled: the loss cone (< 9 deg at L = 3) is unsampled -> NaN plus flag
    out = partition(make_ds(j, np.linspace(30, 150, 7), L=3.0))
    assert np.isnan(float(out.flux_precipitating[0, 0]))
    assert np.isnan(float(out.fraction_trapped[0, 0]))
    assert int(out.partition_flag[0, 0]) & 1
    assert float(out.coverage_precipitating[0, 0]) == 0.0
    # a NaN bin reduces the coverage of its population by its solid angle
    j = np.ones((1, 1, 12))
    j[0, 0, 6] = np.nan
    out = partition(make_ds(j, EDGES_12, L=3.0))
    blc = np.radians(float(out.blc_local[0]))
    missing = 2 * np.pi * (np.cos(np.radians(90)) - np.cos(np.radians(105)))
    expect = 1 - missing / (4 * np.pi * np.cos(blc))
    assert float(out.coverage_trapped[0, 0]) == pytest.approx(expect, rel=1e-12)


def test_folded_bins_equal_the_symmetric_full_range():
    rng = np.random.default_rng(5)
    half = rng.uniform(1, 10, (2, 3, 6))
    full = np.concatenate([half, half[..., ::-1]], axis=-1)
    a = partition(make_ds(half, np.linspace(0, 90, 7), L=2.0, folded=True))
    b = partition(make_ds(full, EDGES_12, L=2.0))
    for name in ("flux_precipitating", "flux_trapped", "omni_flux", "fraction_precipitating",
                 "coverage_trapped"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=1e-12)


def test_b_local_sets_the_local_cone():
    j = np.ones((1, 1, 12))
    b_dip = float(dipole.field_magnitude(4.0, 10.0))
    same = partition(make_ds(j, EDGES_12, L=4.0, mlat=10.0, b_local=b_dip))
    ref = partition(make_ds(j, EDGES_12, L=4.0, mlat=10.0))
    assert float(same.blc_local[0]) == pytest.approx(float(ref.blc_local[0]), rel=1e-12)
    big = partition(make_ds(j, EDGES_12, L=4.0, mlat=10.0, b_local=2 * b_dip))
    b_foot = float(dipole.footpoint_field(4.0))
    # mirror-ratio loss cone, sin^2 = B_local / B_foot (common practice)
    assert float(big.blc_local[0]) == pytest.approx(
        np.degrees(np.arcsin(np.sqrt(2 * b_dip / b_foot))), rel=1e-12)


def test_dask_result_equals_eager_and_stays_lazy():
    rng = np.random.default_rng(11)
    j = rng.uniform(0, 50, (40, 3, 12)).astype(np.float32)
    j[3, 1, 4] = np.nan
    err = np.sqrt(j + 1).astype(np.float32)
    ds = make_ds(j, EDGES_12, L=np.linspace(2, 6, 40), mlat=np.linspace(-10, 10, 40),
                 flux_err=err, dtype=np.float32)
    eager = partition(ds)
    lazy = partition(ds.chunk(time=7))
    assert lazy["fraction_trapped"].chunks is not None
    assert lazy["blc_local"].chunks is not None
    xr.testing.assert_allclose(eager, lazy.compute())


def test_compiled_engine_agrees_with_the_numpy_reference():
    # the plain numpy reference of tests/_partition_reference.py: the formulas of the
    # module docstring of beltkit.pad.partition written with whole-array numpy operations
    rng = np.random.default_rng(12)
    j = rng.uniform(0, 50, (30, 2, 12))
    j[2, 0, 3] = np.nan
    ds = make_ds(j, EDGES_12, L=np.linspace(1.5, 6, 30), flux_err=np.sqrt(j + 1))
    out = partition(ds)
    ref = reference_partition(ds, out)
    assert len(ref) == 23
    for name, want in ref.items():
        # atol (xarray's default): an error bar near zero keeps only its rounding (~1e-9)
        np.testing.assert_allclose(out[name].values, want, rtol=1e-12, atol=1e-8,
                                   err_msg=name)


def test_the_retired_numpy_engine_is_refused_with_where_it_went():
    ds = make_ds(np.ones((2, 1, 12)), EDGES_12)
    with pytest.raises(ValueError, match=r"engine='numpy'.*tests/_partition_reference\.py"):
        partition(ds, engine="numpy")
    with pytest.raises(ValueError, match="engine must be 'auto' or 'numba', got 'fortran'"):
        partition(ds, engine="fortran")
    xr.testing.assert_identical(partition(ds, engine="numba"), partition(ds, engine="auto"))


def test_telescope_hemispheres_reproduce_isotropic_fractions():
    # two hemispherical telescopes along +B and -B see every direction once; for isotropic
    # flux the fraction in the loss cones is 1 - cos(alpha_LC) (spherical geometry)
    ds = make_telescope_ds(np.full((2, 1, 2), 7.0), [0.0, 180.0], [90.0, 90.0], L=3.0)
    out = partition(ds)
    blc = np.radians(float(out.blc_local[0]))
    np.testing.assert_allclose(out.fraction_precipitating.values, 1 - np.cos(blc), rtol=1e-10)
    np.testing.assert_allclose(out.omni_flux.values, 4 * np.pi * 7.0, rtol=1e-12)


def test_telescope_flux_is_apportioned_by_its_swept_band():
    # gyrotropy: a look stands for the band [axis - half, axis + half] it sweeps; its share of
    # a population is the band's solid angle inside it, 2 pi (cos a1 - cos a2) (spherical
    # geometry); the two bands here do not overlap
    L = 1.4  # wide loss cone
    ds = make_telescope_ds(np.array([[[10.0, 4.0]]]), [20.0, 90.0], [15.0, 15.0], L=L)
    out = partition(ds)
    blc = np.radians(float(out.blc_local[0]))
    assert np.radians(5) < blc < np.radians(35)  # the edge lies inside the first band
    inside = 2 * np.pi * (np.cos(np.radians(5)) - np.cos(blc))
    assert float(out.flux_precipitating[0, 0]) == pytest.approx(10.0 * inside, rel=1e-12)
    assert float(out.solid_angle_precipitating[0, 0]) == pytest.approx(inside, rel=1e-12)
    # the 0-5 deg and 35-75 deg bands are never seen: coverage below 1 and flagged
    assert float(out.coverage_precipitating[0, 0]) < 1
    assert int(out.partition_flag[0, 0]) & 8


def test_outputs_carry_units_long_names_and_error_links():
    rng = np.random.default_rng(1)
    j = rng.uniform(1, 2, (3, 2, 12))
    out = partition(make_ds(j, EDGES_12, flux_err=0.1 * j, mlt=3.0), hemispheres=True)
    for name in OUTPUT_NAMES:
        assert name in out
        assert "long_name" in out[name].attrs
        if name != "partition_flag":
            assert "units" in out[name].attrs
    for name in ("flux_precipitating", "flux_quasi_trapped", "flux_trapped", "omni_flux"):
        assert out[name].attrs["units"] == "cm-2 s-1 keV-1"
        assert out[name].attrs["ancillary_variables"] == f"{name}_err"
        assert out[f"{name}_err"].attrs["units"] == "cm-2 s-1 keV-1"
    for name in ("fraction_trapped", "coverage_trapped", "loss_cone_filling"):
        assert out[name].attrs["units"] == "1"
    for name in ("blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial", "loss_cone_north",
                 "loss_cone_south"):
        assert out[name].dims == ("time",)
        assert out[name].attrs["units"] == "degree"
    assert out.energy.attrs["bounds"] == "energy_bnds" and "energy_bnds" in out
    assert out.energy.attrs["units"] == "keV"
    for name in ("L", "mlat", "mlt"):
        assert out[name].dims == ("time",)
    assert out.partition_flag.attrs["flag_meanings"].split()[0] == "precipitating_unsampled"


def test_refuses_invalid_data_with_every_problem_and_never_modifies_input():
    j = np.ones((3, 2, 12))
    j[0, 0, 0] = -1.0
    ds = make_ds(j, EDGES_12)
    ds["flux"].attrs["units"] = "counts s-1"
    ds = ds.drop_vars("pitch_angle_bnds")  # (energy_bnds are optional, issue 15)
    before = copy.deepcopy(ds)
    with pytest.raises(ConventionError) as err:
        partition(ds)
    text = "\n".join(err.value.problems)
    assert "flux: units 'counts s-1'" in text
    assert "pitch_angle_bnds: missing" in text
    xr.testing.assert_identical(ds, before)
    # a valid dataset is not modified either, flux values and attributes included
    good = make_ds(np.abs(j), EDGES_12, flux_err=0.1 + np.abs(j))
    before = copy.deepcopy(good)
    partition(good)
    partition(good.chunk(time=1)).compute()
    xr.testing.assert_identical(good, before)


def test_negative_flux_is_refused_or_kept_and_flagged():
    j = np.ones((2, 1, 12))
    j[1, 0, 5] = -0.5
    ds = make_ds(j, EDGES_12)
    with pytest.raises(ConventionError, match="1 negative values"):
        partition(ds)
    out = partition(ds, allow_negative=True)
    assert int(out.partition_flag[1, 0]) & 16
    assert not int(out.partition_flag[0, 0]) & 16


def test_accessor_matches_function():
    ds = make_ds(np.ones((2, 1, 12)), EDGES_12)
    xr.testing.assert_identical(ds.beltkit.partition(), partition(ds))
    assert ds.beltkit.validate() == []


def test_fitted_fill_adds_the_sine_power_integral_of_the_gap():
    L, n, A = 4.0, 2.5, 1e3
    edges = np.linspace(0, 180, 37)
    centres = 0.5 * (edges[:-1] + edges[1:])
    j = A * np.sin(np.radians(centres)) ** n  # exact sin^n at the centres: the fit is exact
    j[14:22] = np.nan  # 70-110 deg unsampled
    ds = make_ds(j[None, None, :], edges, L=L)
    measured = partition(ds)
    filled = partition(ds, fill="sine_power")
    # reference: 2 pi A integral_70^110 sin^(n+1) by the regularised incomplete Beta function
    gap = 2 * 2 * np.pi * A * (_sine_power_integral(90.0, n) - _sine_power_integral(70.0, n))
    added = float(filled.flux_trapped[0, 0] - measured.flux_trapped[0, 0])
    assert added == pytest.approx(gap, rel=1e-9)
    assert float(filled.flux_precipitating[0, 0]) == float(measured.flux_precipitating[0, 0])
    assert int(filled.partition_flag[0, 0]) & 128 and not int(measured.partition_flag[0, 0]) & 128
    total = float(filled.flux_precipitating[0, 0] + filled.flux_trapped[0, 0])
    assert float(filled.fraction_trapped[0, 0]) == pytest.approx(
        float(filled.flux_trapped[0, 0]) / total, rel=1e-12)
    assert float(filled.coverage_trapped[0, 0]) == float(measured.coverage_trapped[0, 0])
    # lazily the same
    xr.testing.assert_allclose(filled, partition(ds.chunk(time=1), fill="sine_power").compute())


def test_accessor_checks_on_construction_and_returns_new_objects():
    # energy channel edges are optional (issue 15); missing pitch-angle edges are not
    ds = make_ds(np.ones((2, 1, 12)), EDGES_12).drop_vars("pitch_angle_bnds")
    assert any(p.startswith("pitch_angle_bnds: missing") for p in ds.beltkit.problems)
    with pytest.raises(ConventionError):
        ds.beltkit.partition()
    good = make_ds(np.ones((2, 1, 12)), EDGES_12)
    before = copy.deepcopy(good)
    out = good.beltkit.partition()
    eq = good.beltkit.to_equatorial(alpha_eq_deg=[30.0])
    fit = good.beltkit.fit_sine_power()
    assert out is not good and eq is not good and fit is not good
    assert float(fit.sine_index[0, 0]) == pytest.approx(0.0, abs=1e-12)  # isotropic: n = 0
    xr.testing.assert_identical(good, before)


def test_empty_loss_cone_keeps_a_finite_filling_error():
    # Regression: a low-orbit telescope that counts nothing inside the loss cone
    # while the flux just outside is non-zero made the compiled kernel divide by
    # zero. The filling ratio is then exactly 0 and its first-order error is the
    # limit of the error as the loss-cone flux goes to 0 (continuity of the
    # propagated variance, standard first-order error propagation).
    def run(inside):
        flux = np.full((1, 1, 12), 100.0)
        flux[..., 0] = flux[..., -1] = inside
        ds = make_ds(flux, EDGES_12, L=4.0, flux_err=np.full_like(flux, 10.0))
        return partition(ds)

    empty, tiny = run(0.0), run(1e-9)
    assert empty.loss_cone_filling.values.item() == 0.0
    err = empty.loss_cone_filling_err.values.item()
    assert np.isfinite(err) and err > 0
    np.testing.assert_allclose(err, tiny.loss_cone_filling_err.values.item(), rtol=1e-6)


def test_value_checks_counted_slab_by_slab_in_the_engine_pass_equal_the_validator():
    # batch runs partition a file slab by slab and leave the value checks to the engine's
    # own pass (the file is read once); summed over the slabs they must name exactly the
    # validator's problems
    from beltkit.pad.conventions import validate
    from beltkit.pad.partition import partition_slab

    rng = np.random.default_rng(5)
    j = rng.uniform(1, 50, (40, 3, 12))
    j[3, 0, 2] = -1.0  # negatives in three different slabs
    j[17, 2, 7] = -2.0
    j[39, 0, 0] = -0.5
    j[:, 1, :] = np.nan  # a dead channel
    err = np.sqrt(np.abs(j) + 1)
    err[25, 2, 3] = -0.1
    ds = make_ds(j, EDGES_12, flux_err=err)
    want = validate(ds)
    assert len(want) == 3 and "3 negative values" in want[1]
    slabs = [partition_slab(ds.isel(time=slice(a, a + 16)), defer_value_check=True)[1]
             for a in range(0, 40, 16)]
    summed = sum(p[0] for p in slabs)
    # valid values, negative values, negative errors, infinite values, infinite errors per
    # energy (numpy's count)
    np.testing.assert_array_equal(summed, [np.isfinite(j).sum(axis=(0, 2)),
                                           (j < 0).sum(axis=(0, 2)),
                                           (err < 0).sum(axis=(0, 2)), [0, 0, 0], [0, 0, 0]])
    with pytest.raises(ConventionError) as exc:
        slabs[0][1](summed)
    assert exc.value.problems == want
    # good data: nothing raised, and the same outputs as the public function
    good = make_ds(np.abs(np.nan_to_num(j, nan=3.0)), EDGES_12, flux_err=np.abs(err))
    out, (totals, verify) = partition_slab(good, defer_value_check=True)
    verify(totals)
    xr.testing.assert_allclose(out, partition(good), rtol=0, atol=0)
    with_hemi = partition_slab(good, defer_value_check=True, hemispheres=True)[0]
    xr.testing.assert_allclose(with_hemi, partition(good, hemispheres=True), rtol=0, atol=0)
    # the public function keeps checking before it returns, eager or dask
    with pytest.raises(ConventionError, match="3 negative values"):
        partition(ds.chunk(time=7))
    with pytest.raises(ConventionError, match="3 negative values"):
        partition(ds)
    # deferring is for eager slabs: dask data are checked by the validator
    with pytest.raises(ValueError, match="for eager data"):
        partition_slab(good.chunk(time=7), defer_value_check=True)


@pytest.mark.parametrize("errors", [None, "flux_err"])
@pytest.mark.parametrize("dtype,rtol", [(np.float64, 1e-12), (np.float32, 1e-6)])
def test_compiled_engine_agrees_with_the_reference_on_clean_and_unclean_chunks(dtype, rtol,
                                                                             errors):
    # the compiled engine takes a fused path for chunks of samples whose flux values are all
    # finite and non-negative (and errors non-negative) and a general one otherwise: 900
    # samples span several of its chunks, some clean and some with a missing value, a
    # negative value, an unknown L or a negative or missing error; the plain numpy
    # reference of tests/_partition_reference.py treats every sample alike
    from beltkit.pad.partition import partition_slab

    rng = np.random.default_rng(21)
    n = 900
    j = rng.uniform(0.5, 80.0, (n, 3, 12)).astype(dtype)
    j[300, 1, 4] = np.nan
    j[610, 2, 0] = -3.0
    L = np.linspace(1.3, 7.5, n)
    L[800] = np.nan
    extra = {}
    if errors == "flux_err":
        err = (0.1 * np.abs(j) + 0.2).astype(dtype)
        err[450, 0, 7] = -0.1  # a negative error in a chunk of its own
        err[460, 1, 2] = np.nan
        extra["flux_err"] = err
    ds = make_ds(j, EDGES_12, L=L, mlat=25.0 * np.sin(np.linspace(0.0, 9.0, n)), dtype=dtype,
                 **extra)
    assert ds.flux.dtype == dtype
    # the value checks are left to the caller (a negative error is refused otherwise)
    fast, (counts, verify) = partition_slab(ds, allow_negative=True, defer_value_check=True,
                                            hemispheres=True)
    ref = reference_partition(ds, fast)
    assert fast.flux_trapped.dtype == dtype
    assert len(ref) == (31 if errors else 19)
    for name, want in ref.items():
        assert want.dtype == dtype, name
        # atol (xarray's default): an error bar near zero keeps only its rounding
        np.testing.assert_allclose(fast[name].values, want, rtol=rtol, atol=1e-8,
                                   err_msg=name)
    np.testing.assert_array_equal(fast.partition_flag, ref["partition_flag"])
    assert fast.partition_flag.values[800].tolist() == [64, 64, 64]  # loss cone unknown
    assert fast.coverage_trapped.values[300, 1] < 1  # a missing bin: partial coverage
    np.testing.assert_array_equal(counts[0], np.isfinite(j).sum(axis=(0, 2)))
    np.testing.assert_array_equal(counts[1], (j < 0).sum(axis=(0, 2)))
    if errors:
        np.testing.assert_array_equal(counts[2], (err < 0).sum(axis=(0, 2)))
        assert np.isnan(fast.flux_trapped_err.values[460, 1])  # a missing error propagates
        assert np.isfinite(fast.flux_trapped_err.values[461, 1])
        with pytest.raises(ConventionError, match="negative uncertainties"):
            verify(counts)
    else:
        verify(counts)
    # dask data give the same outputs (the validator checks their values first)
    lazy = partition_slab(ds.chunk(time=400), allow_negative=True, strict=False)[0]
    xr.testing.assert_allclose(lazy.compute(), partition_slab(ds, allow_negative=True,
                                                              strict=False)[0], rtol=rtol)


def test_eager_dipole_loss_cones_equal_the_dipole_module():
    # the eager path computes the per-sample dipole cones in one compiled pass; the public
    # closed forms of beltkit.dipole (checked against textbook limits in
    # tests/dipole/test_dipole.py) are the reference
    from beltkit.constants import R_E_KM
    from beltkit.pad.conventions import check
    from beltkit.pad.losscones import sample_loss_cones

    rng = np.random.default_rng(4)
    n = 300_000  # several slices of the worker threads
    L = rng.uniform(1.1, 9.0, n)
    # latitudes on each line between the equator and the 250 km footpoint
    foot = np.degrees(np.arccos(np.sqrt((1 + 250.0 / R_E_KM) / L)))
    mlat = rng.uniform(-1.0, 1.0, n) * foot
    L[7] = np.nan
    mlat[11] = np.nan
    ds = make_ds(np.ones((n, 1, 12)), EDGES_12, L=L, mlat=mlat)
    lc = sample_loss_cones(ds, check(ds, check_values=False), altitude_km=250.0)
    ok = np.isfinite(L) & np.isfinite(mlat)
    want_blc = dipole.local_loss_cone(L[ok], mlat[ok], altitude_km=250.0)
    np.testing.assert_allclose(lc.blc_local.values[ok], want_blc, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(lc.blc_equatorial.values[ok],
                               dipole.bounce_loss_cone(L[ok], altitude_km=250.0), rtol=1e-12)
    np.testing.assert_allclose(lc.b_local.values[ok], dipole.field_magnitude(L[ok], mlat[ok]),
                               rtol=1e-12)
    np.testing.assert_allclose(lc.b_min.values[ok], dipole.equatorial_field(L[ok]), rtol=1e-12)
    assert np.isnan(lc.blc_local.values[[7, 11]]).all()  # NaN positions stay unknown
    assert np.isnan(lc.blc_equatorial.values[7]) and np.isfinite(lc.blc_equatorial.values[11])
    # a measured local field replaces the model's in the local cone (sin^2 = B_loc / B_foot)
    b_meas = 1.1 * dipole.field_magnitude(L[ok][:1000], mlat[ok][:1000])
    ds_b = make_ds(np.ones((1000, 1, 12)), EDGES_12, L=L[ok][:1000], mlat=mlat[ok][:1000],
                   b_local=b_meas)
    lc_b = sample_loss_cones(ds_b, check(ds_b, check_values=False), altitude_km=250.0)
    b_foot = dipole.footpoint_field(L[ok][:1000], altitude_km=250.0)
    want = np.degrees(np.arcsin(np.sqrt(np.clip(b_meas / b_foot, 0, 1))))
    np.testing.assert_allclose(lc_b.blc_local.values, want, rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(lc_b.b_local.values, b_meas)
