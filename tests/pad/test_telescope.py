"""Telescope looks: one band geometry, checked against an independent numerical integration.

The reference is written here from the definition (gyrotropy; docs/conventions.md, section 5):
a look of pitch angle alpha_L and half-angle theta stands for the band
[max(0, alpha_L - theta), min(180, alpha_L + theta)] that it sweeps over a gyration, with its
flux uniform over the band; at a pitch angle covered by several looks the flux is the mean of
theirs weighted by their band solid angles. A population's flux is then
integral over (population and union of bands) of j(alpha) 2 pi sin(alpha) d alpha, computed
with scipy.integrate.quad (spherical geometry: d Omega = 2 pi sin(alpha) d alpha).
"""

import numpy as np
import pytest
from _flux_factory import make_telescope_ds
from _partition_reference import reference_partition
from scipy import integrate

from beltkit.pad import look_solid_angles, partition

RAD = np.pi / 180.0


def _bands(axis, half):
    return np.maximum(axis - half, 0.0), np.minimum(axis + half, 180.0)


def _band_mean(lo, hi, n):
    """Band average of sin^n(alpha) over solid angle (what a look of that band measures)."""
    num = integrate.quad(lambda a: np.sin(a) ** (n + 1), lo * RAD, hi * RAD, epsabs=0,
                         epsrel=1e-13)[0]
    return num / (np.cos(lo * RAD) - np.cos(hi * RAD))


def _reference(axis, half, j_look, ranges):
    """(flux, solid angle) of the union of ``ranges`` (deg) by quadrature over pitch angle."""
    lo, hi = _bands(np.asarray(axis, float), np.asarray(half, float))
    omega = 2 * np.pi * (np.cos(lo * RAD) - np.cos(hi * RAD))

    def covering(a_deg):
        return (lo <= a_deg) & (a_deg <= hi)

    def j(a):
        c = covering(a / RAD)
        return float(np.sum(omega[c] * j_look[c]) / np.sum(omega[c])) if c.any() else 0.0

    def seen(a):
        return 1.0 if covering(a / RAD).any() else 0.0

    pts = sorted(set(np.concatenate([lo, hi]).tolist()))
    flux = sa = 0.0
    for r1, r2 in ranges:
        if r2 <= r1:
            continue
        inner = [p * RAD for p in pts if r1 < p < r2] or None
        kw = {"points": inner, "limit": 200, "epsabs": 1e-13, "epsrel": 1e-12}
        flux += integrate.quad(lambda a: j(a) * 2 * np.pi * np.sin(a), r1 * RAD, r2 * RAD,
                               **kw)[0]
        sa += integrate.quad(lambda a: seen(a) * 2 * np.pi * np.sin(a), r1 * RAD, r2 * RAD,
                             **kw)[0]
    return flux, sa


def _populations(blc):
    return {"precipitating": [(0.0, blc), (180.0 - blc, 180.0)],
            "trapped": [(blc, 180.0 - blc)]}


LOOK_SETS = {
    # a look straddling the loss-cone edge on each side, one crossing 90 deg
    "straddle_and_cross_90": ([0.0, 0.0, 85.0, 0.0], [15.0, 15.0, 20.0, 15.0]),
    # overlapping looks, one nested inside another, and a gap
    "overlapping": ([0.0, 0.0, 60.0, 100.0, 95.0, 150.0], [20.0, 25.0, 30.0, 30.0, 10.0, 20.0]),
}


def _loss_cone(L):
    ds = make_telescope_ds(np.ones((1, 1, 1)), [90.0], [10.0], L=L)
    return float(partition(ds).blc_local[0])


@pytest.mark.parametrize("n", [0, 2, 5])  # isotropic and sin^n flux
@pytest.mark.parametrize("case", sorted(LOOK_SETS))
def test_populations_match_an_independent_band_integration(case, n):
    L = 1.3  # a wide loss cone at the equator of a centred dipole
    blc = _loss_cone(L)
    axis, half = (np.array(v, float) for v in LOOK_SETS[case])
    if case == "straddle_and_cross_90":  # edges placed relative to the loss cone
        axis[0], axis[1], axis[3] = blc + 13.0, 180.0 - blc - 7.0, 170.0
    else:
        axis[0], axis[1] = blc - 5.0, blc + 3.0
    lo, hi = _bands(axis, half)
    j_look = np.array([_band_mean(a, b, n) for a, b in zip(lo, hi)]) * 1e3
    ds = make_telescope_ds(j_look[None, None, :], axis, half, L=L)
    out = partition(ds, hemispheres=True)
    assert float(out.blc_local[0]) == pytest.approx(blc, rel=1e-14)
    ref = {p: _reference(axis, half, j_look, r) for p, r in _populations(blc).items()}
    total = ref["precipitating"][0] + ref["trapped"][0]
    for pop, (flux, sa) in ref.items():
        assert float(out[f"flux_{pop}"][0, 0]) == pytest.approx(flux, rel=1e-6), pop
        assert float(out[f"fraction_{pop}"][0, 0]) == pytest.approx(flux / total, rel=1e-6), pop
        assert float(out[f"solid_angle_{pop}"][0, 0]) == pytest.approx(sa, rel=1e-6), pop
    full_prec = 4 * np.pi * (1 - np.cos(blc * RAD))
    assert float(out.coverage_precipitating[0, 0]) == pytest.approx(
        ref["precipitating"][1] / full_prec, rel=1e-6)
    omni, _ = _reference(axis, half, j_look, [(0.0, 180.0)])
    assert float(out.omni_flux[0, 0]) == pytest.approx(omni, rel=1e-6)
    # per hemisphere (centred dipole: both cones equal the bounce loss cone)
    north, _ = _reference(axis, half, j_look, [(0.0, blc)])
    south, _ = _reference(axis, half, j_look, [(180.0 - blc, 180.0)])
    assert float(out.flux_lost_north[0, 0]) == pytest.approx(north, rel=1e-6)
    assert float(out.flux_lost_south[0, 0]) == pytest.approx(south, rel=1e-6)


def test_the_edge_straddling_look_of_the_issue_uses_its_band_share():
    # look axis 75 deg, half-angle 15 deg, loss-cone edge 62 deg: the band [60, 90] has the
    # share (cos 60 - cos 62) / (cos 60 - cos 90) = 0.0611 below the edge (spherical zone
    # areas); its field-of-view cap would have given about 0.027
    share = look_solid_angles([75.0], [15.0], 0.0, 62.0)[0] / (
        2 * np.pi * (np.cos(60 * RAD) - np.cos(90 * RAD)))
    assert share == pytest.approx((np.cos(60 * RAD) - np.cos(62 * RAD)) / 0.5, rel=1e-13)
    assert share == pytest.approx(0.0611, abs=5e-5)
    # nudge: one degree more of edge moves the share well beyond the tolerance above
    share63 = look_solid_angles([75.0], [15.0], 0.0, 63.0)[0] / (2 * np.pi * 0.5)
    assert abs(share63 - share) > 1e-2


def test_a_pitch_angle_seen_by_two_looks_is_counted_once():
    # two identical looks: the union is one band, each look gets half of it (equal band
    # solid angles), and an isotropic flux gives the band's solid angle times the flux
    one = partition(make_telescope_ds(np.full((1, 1, 1), 3.0), [90.0], [20.0], L=3.0))
    two = partition(make_telescope_ds(np.full((1, 1, 2), 3.0), [90.0, 90.0], [20.0, 20.0],
                                      L=3.0))
    for name in ("flux_trapped", "solid_angle_trapped", "omni_flux", "coverage_trapped"):
        assert float(two[name][0, 0]) == pytest.approx(float(one[name][0, 0]), rel=1e-13), name
    band = 2 * np.pi * (np.cos(70 * RAD) - np.cos(110 * RAD))
    assert float(two.omni_flux[0, 0]) == pytest.approx(3.0 * band, rel=1e-13)


def test_a_look_without_a_value_leaves_the_union_to_the_others():
    # overlapping looks; at energy 0 the second look has no value: that energy is partitioned
    # with the first and third looks alone (the union of their bands), energy 1 with all three
    axis, half = [20.0, 35.0, 120.0], [20.0, 20.0, 30.0]
    flux = np.array([[[5.0, np.nan, 2.0], [5.0, 9.0, 2.0]]])
    err = np.array([[[0.5, np.nan, 0.2], [0.5, 0.9, 0.2]]])
    ds = make_telescope_ds(flux, axis, half, L=1.5)
    ds["flux_err"] = (("time", "energy", "look"), err, {"units": ds.flux.attrs["units"]})
    out = partition(ds, hemispheres=True)
    keep = [0, 2]
    ds_two = make_telescope_ds(flux[:, :1, keep], np.array(axis)[keep], np.array(half)[keep],
                               L=1.5)
    ds_two["flux_err"] = (("time", "energy", "look"), err[:, :1, keep],
                          {"units": ds.flux.attrs["units"]})
    two = partition(ds_two, hemispheres=True)
    ds_all = make_telescope_ds(flux[:, 1:], axis, half, L=1.5)
    ds_all["flux_err"] = (("time", "energy", "look"), err[:, 1:],
                          {"units": ds.flux.attrs["units"]})
    full = partition(ds_all, hemispheres=True)
    for name in ("flux_precipitating", "flux_trapped", "solid_angle_precipitating",
                 "coverage_trapped", "fraction_precipitating", "fraction_precipitating_err",
                 "flux_lost_north", "flux_lost_north_err", "partition_flag"):
        assert float(out[name][0, 0]) == pytest.approx(float(two[name][0, 0]), rel=1e-12), name
        assert float(out[name][0, 1]) == pytest.approx(float(full[name][0, 0]), rel=1e-12), name
    # the reference integration of the same case
    blc = float(out.blc_local[0])
    ref, _ = _reference(np.array(axis)[keep], np.array(half)[keep], np.array([5.0, 2.0]),
                        [(0.0, blc), (180.0 - blc, 180.0)])
    assert float(out.flux_precipitating[0, 0]) == pytest.approx(ref, rel=1e-6)


def test_compiled_engine_agrees_with_the_numpy_reference_on_overlapping_looks_with_errors():
    # the plain numpy reference of tests/_partition_reference.py (the formulas of
    # docs/conventions.md, section 5); the missing values send their rows to the compiled
    # kernel one row at a time (looks without a value leave the union to the others)
    rng = np.random.default_rng(11)
    n_t, n_k = 40, 6
    look = rng.uniform(0, 180, (n_t, n_k))
    flux = rng.uniform(1, 10, (n_t, 3, n_k))
    flux[3, 1, 2] = flux[17, 0, :2] = flux[30, 2, 5] = np.nan
    ds = make_telescope_ds(flux, look, rng.uniform(5, 40, n_k), L=np.linspace(1.3, 5, n_t),
                           mlat=np.linspace(-30, 30, n_t))
    ds["look_pitch_angle"] = (("time", "look"), look, {"units": "degree"})
    ds["flux_err"] = (("time", "energy", "look"), 0.1 * flux, {"units": ds.flux.attrs["units"]})
    a = partition(ds, hemispheres=True)
    b = reference_partition(ds, a)
    assert len(b) == 31
    for name, want in b.items():
        # atol: an error bar that cancels to ~1e-10 keeps only its rounding
        np.testing.assert_allclose(a[name].values, want, rtol=1e-11, atol=1e-8, err_msg=name)
