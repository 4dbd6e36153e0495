"""Mergeable per-cell statistics against brute force (numpy over all the samples at once)."""

import numpy as np
import pytest

from beltkit.aggregate import CellStats, Scale, read_stats, write_stats

N_CELLS = 12


@pytest.fixture(scope="module")
def samples():
    rng = np.random.default_rng(7)
    n = 60_000
    cell = rng.integers(0, N_CELLS, n)
    # a flux-like quantity spanning about four decades, varying by cell, with exact zeros
    flux = 10 ** (2 + 0.2 * cell + rng.normal(0, 0.8, n))
    flux[rng.random(n) < 0.03] = 0.0
    frac = rng.beta(2, 5, n)  # a fraction in 0..1
    frac[rng.random(n) < 0.02] = 1.0
    return cell, flux, frac


def _by_cell(cell, v, fn):
    return np.array([fn(v[cell == c]) if np.any(cell == c) else np.nan
                     for c in range(N_CELLS)])


def _build(cell, v, scale, pieces=1):
    parts = []
    for idx in np.array_split(np.arange(cell.size), pieces):
        s = CellStats(N_CELLS, scale)
        s.add(cell[idx], v[idx])
        parts.append(s)
    return parts


LOG = Scale.log(1e-2, 1e10, 32)
LIN = Scale.linear(0.0, 1.0, 256)


@pytest.mark.parametrize("q", [0.05, 0.25, 0.5, 0.75, 0.97])
def test_quantiles_within_stated_bound_of_numpy(samples, q):
    # reference: numpy.quantile, default linear interpolation (Hyndman & Fan 1996 type 7)
    cell, flux, frac = samples
    (s_log,) = _build(cell, flux, LOG)
    exact = _by_cell(cell, flux, lambda x: np.quantile(x, q))
    err = np.abs(s_log.quantile(q) - exact)
    assert np.all(err <= LOG.error_bound * np.abs(exact) * (1 + 1e-9))
    (s_lin,) = _build(cell, frac, LIN)
    exact = _by_cell(cell, frac, lambda x: np.quantile(x, q))
    assert np.all(np.abs(s_lin.quantile(q) - exact) <= LIN.error_bound * (1 + 1e-9))


def test_error_bound_values():
    # derived in the module notes: log bins of ratio r give sqrt(r) - 1; linear bins h/2
    assert LOG.error_bound == pytest.approx(10 ** (1 / 64) - 1, rel=1e-9)
    assert LIN.error_bound == pytest.approx(1 / 512, rel=1e-12)


def test_bound_is_not_vacuous_and_comparison_is_sensitive(samples):
    # nudge: the observed error reaches a good part of the bound, and a quantile off by
    # 2 percentage points (0.5 vs 0.52) is caught by the same comparison
    cell, flux, _ = samples
    (s,) = _build(cell, flux, LOG)
    exact = _by_cell(cell, flux, lambda x: np.quantile(x, 0.5))
    rel = np.abs(s.quantile(0.5) / exact - 1)
    assert rel.max() > 0.2 * LOG.error_bound
    wrong = _by_cell(cell, flux, lambda x: np.quantile(x, 0.52))
    assert np.any(np.abs(s.quantile(0.5) - wrong) > LOG.error_bound * wrong)


def test_merge_of_splits_equals_one_pass(samples):
    cell, flux, _ = samples
    (one,) = _build(cell, flux, LOG)
    parts = _build(cell, flux, LOG, pieces=7)
    merged = parts[0]
    for p in parts[1:]:
        merged = merged.merge(p)
    np.testing.assert_array_equal(merged.count, one.count)  # bit-identical
    np.testing.assert_array_equal(merged.hist, one.hist)
    np.testing.assert_array_equal(merged.quantile(0.5), one.quantile(0.5))
    np.testing.assert_allclose(merged.mean, one.mean, rtol=1e-12)
    np.testing.assert_allclose(merged.std(), one.std(), rtol=1e-12)
    # and against brute force
    np.testing.assert_array_equal(one.count, np.bincount(cell, minlength=N_CELLS))
    np.testing.assert_allclose(one.mean, _by_cell(cell, flux, np.mean), rtol=1e-12)
    np.testing.assert_allclose(one.std(), _by_cell(cell, flux, lambda x: np.std(x, ddof=1)),
                               rtol=1e-12)


def test_merge_commutative_exactly_associative_to_rounding(samples):
    cell, flux, _ = samples
    a, b, c = _build(cell, flux, LOG, pieces=3)
    ab, ba = a.merge(b), b.merge(a)
    np.testing.assert_array_equal(ab.mean, ba.mean)
    np.testing.assert_array_equal(ab.m2, ba.m2)
    left, right = ab.merge(c), a.merge(b.merge(c))
    np.testing.assert_array_equal(left.hist, right.hist)
    np.testing.assert_allclose(left.mean, right.mean, rtol=1e-14)
    np.testing.assert_allclose(left.m2, right.m2, rtol=1e-12)
    assert a.count.sum() + b.count.sum() == ab.count.sum()  # inputs unchanged by merge


def test_variance_merge_is_numerically_stable():
    # Chan, Golub & LeVeque (1979): the pairwise update keeps the variance of data with a
    # large offset, where the textbook sum-of-squares formula loses every digit
    rng = np.random.default_rng(3)
    x = 1e9 + rng.normal(0.0, 1.0, 20_000)
    cell = np.zeros(x.size, np.int64)
    s = CellStats(1, Scale.log(1.0, 1e12, 8))
    for idx in np.array_split(np.arange(x.size), 40):
        s.add(cell[idx], x[idx])
    np.testing.assert_allclose(s.std()[0], np.std(x, ddof=1), rtol=1e-6)
    naive = np.sqrt((np.sum(x * x) - x.size * np.mean(x) ** 2) / (x.size - 1))
    assert abs(naive / np.std(x, ddof=1) - 1) > 1e-3  # the nudge: the naive formula fails


def test_zero_exact_and_out_of_range_is_nan():
    s = CellStats(3, Scale.log(1.0, 100.0, 10))
    s.add([0, 0, 0, 1, 1, 2, 2, 2], [0.0, 0.0, 5.0, 500.0, 600.0, np.nan, -1.0, 50.0])
    q = s.quantile(0.5)
    assert q[0] == 0.0  # exact zeros have their own bin
    assert np.isnan(q[1])  # above the scale's range: no number rather than a wrong one
    assert s.count.tolist() == [3, 2, 2]  # NaN skipped; out-of-range values still counted
    assert s.mean[1] == 550.0


def test_file_round_trip(tmp_path, samples):
    cell, flux, frac = samples
    (a,) = _build(cell, flux, LOG)
    (b,) = _build(cell, frac, LIN)
    out = write_stats(tmp_path / "agg.nc", {"flux/w0": a, "frac/w0": b}, {"note": [1, 2]})
    got, attrs = read_stats(out)
    assert attrs == {"note": [1, 2]}
    for key, ref in (("flux/w0", a), ("frac/w0", b)):
        np.testing.assert_array_equal(got[key].hist, ref.hist)
        np.testing.assert_array_equal(got[key].mean, ref.mean)
        assert got[key].scale == ref.scale
    assert [p.name for p in tmp_path.iterdir()] == ["agg.nc"]  # no temporary left


def test_refuses_mismatched_merge():
    with pytest.raises(ValueError, match="different grids or scales"):
        CellStats(2, LIN).merge(CellStats(3, LIN))
