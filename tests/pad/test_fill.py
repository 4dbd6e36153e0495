"""The sine-power fill of unsampled solid angle (beltkit.pad.fill) against quadrature.

References used here:
* scipy.integrate.quad (package index): the integral of sin^(n+1)(alpha) over each
  unsampled piece of a population, the pieces found here by plain interval
  arithmetic (population minus the union of the sampled bins).
* The integrated flux of a gyrotropic j = A sin^n(alpha) over a pitch-angle band,
  2 pi A integral sin^n(alpha) sin(alpha) d alpha (solid angle d Omega = 2 pi sin(alpha)
  d alpha; common practice), and the Beta-function total over 0-180 deg,
  B(1/2, (n+2)/2) (scipy.special.beta; textbook).
* The populations of docs/conventions.md: precipitating [0, blc] and [180 - blc, 180],
  quasi-trapped [blc, dlc] and [180 - dlc, 180 - blc], trapped [dlc, 180 - dlc].
"""

import numpy as np
import pytest
from _flux_factory import make_ds
from scipy import integrate, special

from beltkit.pad import partition, sine_power_band_integral
from beltkit.pad.fill import unsampled_fill


def _quad_sin(a1_deg, a2_deg, n):
    """integral_{a1}^{a2} sin^(n+1) d alpha by scipy quadrature (angles in degrees)."""
    if a2_deg <= a1_deg:
        return 0.0
    val, _ = integrate.quad(lambda a: np.sin(a) ** (n + 1), np.radians(a1_deg),
                            np.radians(a2_deg), epsabs=1e-14, epsrel=1e-12)
    return val


def _populations(blc, dlc):
    d = max(dlc, blc)
    return ([(0.0, blc), (180.0 - blc, 180.0)],
            [(blc, d), (180.0 - d, 180.0 - blc)],
            [(d, 180.0 - d)])


def _unsampled_pieces(parts, sampled_bins):
    """Pieces of the population `parts` not covered by any sampled bin (interval arithmetic)."""
    points = sorted({0.0, 180.0, *(x for p in parts for x in p),
                     *(x for b in sampled_bins for x in b)})
    pieces = []
    for lo, hi in zip(points[:-1], points[1:]):
        mid = 0.5 * (lo + hi)
        inside = any(p1 <= mid <= p2 for p1, p2 in parts)
        seen = any(b1 <= mid <= b2 for b1, b2 in sampled_bins)
        if hi > lo and inside and not seen:
            pieces.append((lo, hi))
    return pieces


def _reference_fill(flux_row, amp, n, blc, dlc, edges, folded):
    """2 pi A integral of sin^(n+1) over each population's unsampled pieces, by quad."""
    sampled = [tuple(e) for e, f in zip(edges, flux_row) if np.isfinite(f)]
    if folded:
        sampled += [(180.0 - b, 180.0 - a) for a, b in sampled]
    return np.array([2 * np.pi * amp * sum(_quad_sin(a, b, n)
                                           for a, b in _unsampled_pieces(parts, sampled))
                     for parts in _populations(blc, dlc)])


@pytest.mark.parametrize("n", [-1.0, 0.0, 1.0, 2.5, 7.0])
def test_band_integral_against_quadrature(n):
    rng = np.random.default_rng(int(10 * n) + 20)
    a1 = rng.uniform(0.0, 180.0, 30)
    a2 = np.minimum(a1 + rng.uniform(0.0, 120.0, 30), 180.0)  # bands cross 90 deg too
    got = sine_power_band_integral(a1, a2, n)
    want = np.array([_quad_sin(x, y, n) for x, y in zip(a1, a2)])
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-13)
    # the whole range: B(1/2, (n+2)/2) (textbook Beta-function integral)
    assert float(sine_power_band_integral(0.0, 180.0, n)) == pytest.approx(
        special.beta(0.5, (n + 2) / 2), rel=1e-12)
    # nudge: the neighbouring index changes the integrals beyond the tolerance
    other = sine_power_band_integral(a1, a2, n + 0.1)
    assert np.max(np.abs(other - want) / np.maximum(want, 1e-300)) > 1e-3


def test_band_integral_closed_cases():
    # n = 0: integral sin = cos a1 - cos a2 (the solid angle over 2 pi); n = -1: the width
    a1, a2 = np.array([0.0, 30.0, 80.0]), np.array([20.0, 150.0, 180.0])
    np.testing.assert_allclose(sine_power_band_integral(a1, a2, 0.0),
                               np.cos(np.radians(a1)) - np.cos(np.radians(a2)), rtol=1e-13)
    np.testing.assert_allclose(sine_power_band_integral(a1, a2, -1.0),
                               np.radians(a2 - a1), rtol=1e-12)
    # broadcasting: one band, three indices
    assert sine_power_band_integral(10.0, 50.0, np.array([0.0, 1.0, 2.0])).shape == (3,)


def test_fill_equals_quadrature_over_the_unsampled_pieces():
    edges = np.stack([np.arange(0.0, 180.0, 15.0), np.arange(15.0, 181.0, 15.0)], -1)
    n_t, n_e = 2, 3
    flux = np.ones((n_t, n_e, 12))
    flux[0, :, [0, 5, 11]] = np.nan  # loss-cone bins and one trapped bin unsampled
    flux[1, :, [1, 2, 9]] = np.nan  # the quasi-trapped bins at 15-45 and one at 135-150
    flux[1, 2, :] = np.nan  # a channel with nothing sampled
    amp = np.array([[1e3, 2e4, 5.0], [7.0, 3e2, 1e5]])
    index = np.array([[0.5, 2.0, 4.3], [1.0, 3.0, 0.0]])
    blc = np.array([20.0, 8.0])
    dlc = np.array([35.0, 40.0])
    got = unsampled_fill(flux, amp, index, blc, dlc, edges, False)
    assert got.shape == (n_t, n_e, 3)
    for t in range(n_t):
        for e in range(n_e):
            want = _reference_fill(flux[t, e], amp[t, e], index[t, e], blc[t], dlc[t], edges,
                                   False)
            np.testing.assert_allclose(got[t, e], want, rtol=1e-9, atol=1e-12 * amp[t, e],
                                       err_msg=f"sample {t}, channel {e}")
    # a channel with nothing sampled is filled with the whole fitted integral
    whole = 2 * np.pi * amp[1, 2] * special.beta(0.5, (index[1, 2] + 2) / 2)
    assert got[1, 2].sum() == pytest.approx(whole, rel=1e-12)
    # nudge: the fill depends on where the gaps are, not only how many: sample 0's gaps
    # moved by one bin change the numbers beyond the tolerance
    shifted = np.roll(flux[:1], 1, axis=-1)
    moved = unsampled_fill(shifted, amp[:1], index[:1], blc[:1], dlc[:1], edges, False)
    assert np.max(np.abs(moved[0] - got[0]) / np.abs(got[0]).max()) > 1e-3


def test_gaps_between_bins_count_as_unsampled():
    # bins with gaps (allowed by the conventions): the gaps are filled like empty bins
    edges = np.array([[0.0, 10.0], [20.0, 60.0], [70.0, 110.0], [120.0, 160.0],
                      [170.0, 180.0]])
    flux = np.ones((1, 1, 5))
    amp, index = np.array([[50.0]]), np.array([[2.0]])
    got = unsampled_fill(flux, amp, index, np.array([15.0]), np.array([15.0]), edges, False)
    want = _reference_fill(flux[0, 0], 50.0, 2.0, 15.0, 15.0, edges, False)
    np.testing.assert_allclose(got[0, 0], want, rtol=1e-9)
    # precipitating: 10-15 and 165-170; quasi-trapped empty (dlc = blc); trapped: the rest
    prec = 2 * np.pi * 50.0 * (_quad_sin(10, 15, 2.0) + _quad_sin(165, 170, 2.0))
    assert got[0, 0, 0] == pytest.approx(prec, rel=1e-9)
    assert got[0, 0, 1] == 0.0


def test_folded_bins_stand_for_their_mirror_images():
    edges = np.stack([np.arange(0.0, 90.0, 10.0), np.arange(10.0, 91.0, 10.0)], -1)
    flux = np.ones((1, 1, 9))
    flux[0, 0, [0, 4]] = np.nan  # 0-10 (and 170-180), 40-50 (and 130-140) unsampled
    amp, index = np.array([[3.0]]), np.array([[1.5]])
    blc, dlc = np.array([12.0]), np.array([25.0])
    got = unsampled_fill(flux, amp, index, blc, dlc, edges, True)
    want = _reference_fill(flux[0, 0], 3.0, 1.5, 12.0, 25.0, edges, True)
    np.testing.assert_allclose(got[0, 0], want, rtol=1e-9)
    # the same bins taken at their word (not folded) leave 90-180 unsampled: more fill
    unfolded = unsampled_fill(flux, amp, index, blc, dlc, edges, False)
    assert np.all(unfolded[0, 0] > got[0, 0])


def test_what_is_not_filled():
    edges = np.stack([np.arange(0.0, 180.0, 30.0), np.arange(30.0, 181.0, 30.0)], -1)
    full = np.ones((1, 2, 6))
    amp, index = np.array([[10.0, np.nan]]), np.array([[2.0, np.nan]])
    got = unsampled_fill(full, amp, index, np.array([10.0]), np.array([20.0]), edges, False)
    # fully sampled populations get nothing; no fit (NaN A, n) gives NaN, never a number
    np.testing.assert_array_equal(got[0, 0], [0.0, 0.0, 0.0])
    assert np.isnan(got[0, 1]).all()
    # a drift cone narrower than the bounce cone is taken as the bounce cone: nothing
    # quasi-trapped to fill
    gap = full.copy()
    gap[..., 0] = np.nan
    odd = unsampled_fill(gap, amp, index, np.array([20.0]), np.array([5.0]), edges, False)
    assert odd[0, 0, 1] == 0.0
    want = _reference_fill(gap[0, 0], 10.0, 2.0, 20.0, 20.0, edges, False)
    np.testing.assert_allclose(odd[0, 0], want, rtol=1e-9)


def test_partition_adds_the_fill_of_the_empty_loss_cone():
    # end to end: j = A sin^n at the bin centres (the fit on the trapped bins is exact),
    # loss-cone bins empty; the filled precipitating flux is the analytic cone integral
    L, n, A = 4.0, 3.0, 2e3
    edges = np.linspace(0.0, 180.0, 19)
    centres = 0.5 * (edges[:-1] + edges[1:])
    j = A * np.sin(np.radians(centres)) ** n
    j[[0, 1, -1]] = np.nan  # 0-20 and 170-180 deg unsampled
    ds = make_ds(j[None, None, :], edges, L=L)
    measured = partition(ds)
    filled = partition(ds, fill="sine_power")
    blc = float(filled.blc_local[0])
    assert blc < 10.0  # L = 4 at the equator: a cone of a few degrees
    prec = 2 * np.pi * A * 2 * _quad_sin(0.0, blc, n)  # both cones, all unsampled
    assert float(filled.flux_precipitating[0, 0]) == pytest.approx(prec, rel=1e-8)
    added = float(filled.flux_trapped[0, 0] - measured.flux_trapped[0, 0])
    want = 2 * np.pi * A * (_quad_sin(blc, 20.0, n) + _quad_sin(170.0, 180.0 - blc, n))
    assert added == pytest.approx(want, rel=1e-8)
