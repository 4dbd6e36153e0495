"""Losses per hemisphere: flux_lost_north / flux_lost_south and their fractions.

Definitions (docs/conventions.md, section 5; the loss-cone definitions are common practice):
lost north is the flux at pitch angles [0, loss_cone_north] (moving along B, toward the
northern footpoint), lost south at [180 - loss_cone_south, 180], with
sin^2(loss_cone_north) = B_local / B_N and sin^2(loss_cone_south) = B_local / B_S.
"""

import datetime as dt

import numpy as np
import ppigrf
import pytest
import xarray as xr
from _flux_factory import make_ds
from _partition_reference import reference_partition
from scipy import integrate

from beltkit.constants import R_E_KM
from beltkit.field import IGRF
from beltkit.field.trace import trace_lines
from beltkit.pad import partition

EDGES_12 = np.linspace(0.0, 180.0, 13)
RAD = np.pi / 180.0


def _binned_integral(edges, j, a1_deg, a2_deg):
    """Integral of the binned flux j(alpha) 2 pi sin(alpha) over [a1, a2] by scipy quadrature."""
    def f(a):
        k = min(np.searchsorted(edges, a / RAD, side="right") - 1, len(j) - 1)
        return j[k] * 2 * np.pi * np.sin(a)

    if a2_deg <= a1_deg:
        return 0.0
    pts = [e * RAD for e in edges if a1_deg < e < a2_deg] or None
    return integrate.quad(f, a1_deg * RAD, a2_deg * RAD, points=pts, epsabs=1e-13,
                          epsrel=1e-12, limit=200)[0]


def test_centred_dipole_hemispheres_add_up_to_the_precipitating_flux():
    rng = np.random.default_rng(4)
    j = rng.uniform(1, 2, (3, 2, 12))
    j[..., 6:] += 4.0  # up- and down-going flux differ
    ds = make_ds(j, EDGES_12, L=[1.3, 1.6, 2.2], mlat=[0.0, 20.0, -15.0],
                 flux_err=0.1 * j)
    out = partition(ds, hemispheres=True)
    # centred dipole: B_N = B_S, both cones equal the bounce loss cone
    np.testing.assert_array_equal(out.loss_cone_north.values, out.blc_local.values)
    np.testing.assert_array_equal(out.loss_cone_south.values, out.blc_local.values)
    np.testing.assert_allclose((out.flux_lost_north + out.flux_lost_south).values,
                               out.flux_precipitating.values, rtol=1e-12)
    np.testing.assert_allclose((out.fraction_lost_north + out.fraction_lost_south).values,
                               out.fraction_precipitating.values, rtol=1e-12)
    # the two ranges share no bin here (the cones are below 75 deg), so their variances add
    assert (out.blc_local < 75).all()
    np.testing.assert_allclose(np.hypot(out.flux_lost_north_err, out.flux_lost_south_err).values,
                               out.flux_precipitating_err.values, rtol=1e-12)
    # each against a direct quadrature of the binned flux
    for t in range(3):
        blc = float(out.blc_local[t])
        for e in range(2):
            north = _binned_integral(EDGES_12, j[t, e], 0.0, blc)
            south = _binned_integral(EDGES_12, j[t, e], 180.0 - blc, 180.0)
            assert float(out.flux_lost_north[t, e]) == pytest.approx(north, rel=1e-9)
            assert float(out.flux_lost_south[t, e]) == pytest.approx(south, rel=1e-9)
    assert (out.flux_lost_south > 2.5 * out.flux_lost_north).all()  # nudge: not symmetric
    # CF attributes like the other populations
    assert out.flux_lost_north.attrs["units"] == out.flux_precipitating.attrs["units"]
    assert out.fraction_lost_south.attrs["units"] == "1"
    assert out.flux_lost_south.attrs["ancillary_variables"] == "flux_lost_south_err"
    assert out.fraction_lost_north_err.attrs["units"] == "1"


def test_folded_bins_lose_the_same_flux_at_both_ends():
    # folded data stand for both directions: with equal cones, each end gets half of the
    # precipitating flux
    j = np.linspace(1, 6, 6)[None, None, :]
    out = partition(make_ds(j, np.linspace(0, 90, 7), L=1.5, folded=True), hemispheres=True)
    np.testing.assert_allclose(out.flux_lost_north.values, out.flux_lost_south.values,
                               rtol=1e-12)
    np.testing.assert_allclose(out.flux_lost_north.values, 0.5 * out.flux_precipitating.values,
                               rtol=1e-12)
    full = make_ds(np.concatenate([j, j[..., ::-1]], axis=-1), EDGES_12, L=1.5)
    np.testing.assert_allclose(out.flux_lost_north.values,
                               partition(full, hemispheres=True).flux_lost_north.values,
                               rtol=1e-12)


def test_hemisphere_uncertainties_follow_the_jacobian():
    # independent check: numerical derivatives with respect to each bin, combined in
    # quadrature (first-order error propagation for independent bins), as for the populations
    rng = np.random.default_rng(8)
    j = rng.uniform(1, 10, (1, 1, 12))
    s = rng.uniform(0.1, 1.0, (1, 1, 12))
    L, mlat = 1.35, 12.0  # cones of about 50 deg: edges inside bins
    out = partition(make_ds(j, EDGES_12, L=L, mlat=mlat, flux_err=s), hemispheres=True)
    h = 1e-6 * j[0, 0]
    jj = np.repeat(j, 24, axis=0)
    for i in range(12):
        jj[2 * i, 0, i] += h[i]
        jj[2 * i + 1, 0, i] -= h[i]
    pert = partition(make_ds(jj, EDGES_12, L=L, mlat=mlat), hemispheres=True)
    for name in ("flux_lost_north", "flux_lost_south", "fraction_lost_north",
                 "fraction_lost_south"):
        v = pert[name].values[:, 0]
        grads = (v[0::2] - v[1::2]) / (2 * h)
        ref = np.sqrt(np.sum((grads * s[0, 0]) ** 2))
        assert ref > 0
        assert float(out[f"{name}_err"][0, 0]) == pytest.approx(ref, rel=1e-5), name


def _igrf_cartesian(x_km, date):
    """IGRF field (nT) in GEO Cartesian at x (km), from ppigrf's geocentric components."""
    r = np.linalg.norm(x_km)
    theta = np.arccos(x_km[2] / r)
    phi = np.arctan2(x_km[1], x_km[0])
    br, bt, bp = (float(np.ravel(c)[0]) for c in ppigrf.igrf_gc(
        r, np.degrees(theta), np.degrees(phi), date))
    st, ct, sp, cp = np.sin(theta), np.cos(theta), np.sin(phi), np.cos(phi)
    r_hat = np.array([st * cp, st * sp, ct])
    t_hat = np.array([ct * cp, ct * sp, -st])
    p_hat = np.array([-sp, cp, 0.0])
    return br * r_hat + bt * t_hat + bp * p_hat


@pytest.mark.slow  # the IGRF partition builds a drift-shell table (about 10-20 s)
def test_off_equator_igrf_hemispheres_match_an_independent_calculation():
    # independent calculation: the field magnitudes at the sample and at both footpoints
    # from ppigrf's IGRF (a reference implementation from PyPI), at the footpoints of the
    # line traced by beltkit.field.trace.trace_lines (100 km above the IGRF reference
    # sphere; "north" is the end reached by following B); then the populations by scipy
    # quadrature. Epoch 2015.0: a definitive (DGRF) model in both IGRF-13 and IGRF-14.
    date = dt.datetime(2015, 1, 1)
    t0 = np.datetime64("2015-01-01T00:00:00", "ns")
    lat, lon, alt = np.radians(-12.0), np.radians(-40.0), 1800.0  # south of the equator over
    r = R_E_KM + alt                                                # the South Atlantic
    x0 = r * np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])
    lines = trace_lines(IGRF(), x0[None, :], t0)
    foot_n, foot_s = lines.foot_north[0], lines.foot_south[0]
    assert np.linalg.norm(foot_n) == pytest.approx(R_E_KM + 100.0, abs=1e-3)
    assert foot_n[2] > foot_s[2]  # following B ends in the north
    b_loc = float(np.linalg.norm(_igrf_cartesian(x0, date)))
    b_n = float(np.linalg.norm(_igrf_cartesian(foot_n, date)))
    b_s = float(np.linalg.norm(_igrf_cartesian(foot_s, date)))
    # the footpoint is on the line: the field there points into the Earth in the north
    assert float(_igrf_cartesian(foot_n, date) @ foot_n) < 0 < float(
        _igrf_cartesian(foot_s, date) @ foot_s)
    lc_n = np.degrees(np.arcsin(np.sqrt(b_loc / b_n)))
    lc_s = np.degrees(np.arcsin(np.sqrt(b_loc / b_s)))
    assert lc_s > lc_n + 2.0  # the weak southern footpoint: the cones differ clearly

    rng = np.random.default_rng(2)
    j = rng.uniform(1, 10, (1, 2, 12))
    ds = make_ds(j, EDGES_12).drop_vars(["L", "mlat"])
    ds = ds.assign_coords(time=[t0])
    ds["position_geo"] = (("time", "xyz"), x0[None, :], {"units": "km"})
    out = partition(ds, model="igrf", hemispheres=True)
    assert float(out.loss_cone_north[0]) == pytest.approx(lc_n, abs=2e-3)
    assert float(out.loss_cone_south[0]) == pytest.approx(lc_s, abs=2e-3)
    assert float(out.blc_local[0]) == pytest.approx(max(lc_n, lc_s), abs=2e-3)
    for e in range(2):
        north = _binned_integral(EDGES_12, j[0, e], 0.0, lc_n)
        south = _binned_integral(EDGES_12, j[0, e], 180.0 - lc_s, 180.0)
        total = _binned_integral(EDGES_12, j[0, e], 0.0, 180.0)
        assert float(out.flux_lost_north[0, e]) == pytest.approx(north, rel=1e-4)
        assert float(out.flux_lost_south[0, e]) == pytest.approx(south, rel=1e-4)
        assert float(out.fraction_lost_north[0, e]) == pytest.approx(north / total, rel=1e-4)
        assert float(out.fraction_lost_south[0, e]) == pytest.approx(south / total, rel=1e-4)
        # unequal cones: the two losses are less than the precipitating flux, the rest being
        # the pitch angles [lc_n, blc] lost at the other end within the same bounce
        gap = _binned_integral(EDGES_12, j[0, e], lc_n, lc_s)
        assert float(out.flux_precipitating[0, e] - out.flux_lost_north[0, e]
                     - out.flux_lost_south[0, e]) == pytest.approx(gap, rel=1e-3)


def test_hemispheres_on_request_change_nothing_else():
    rng = np.random.default_rng(6)
    j = rng.uniform(1, 10, (5, 2, 12))
    j[1, 0, 3] = np.nan  # the general path of the compiled kernel too
    ds = make_ds(j, EDGES_12, L=np.linspace(1.3, 3, 5), flux_err=0.1 * j)
    full = partition(ds, hemispheres=True)
    lean = partition(ds)  # the default leaves them out
    hemi = [n for n in full.data_vars if "_lost_" in n]
    assert len(hemi) == 8 and not [n for n in lean.data_vars if "_lost_" in n]
    xr.testing.assert_identical(full.drop_vars(hemi), lean)
    # the sample with a missing bin still splits exactly (direct quadrature, bin 3 unsampled)
    blc = float(full.blc_local[1])
    jj = np.where(np.isnan(j[1, 0]), 0.0, j[1, 0])
    assert float(full.flux_lost_north[1, 0]) == pytest.approx(
        _binned_integral(EDGES_12, jj, 0.0, blc), rel=1e-9)


@pytest.mark.parametrize("folded", [False, True])
def test_compiled_engine_agrees_with_the_numpy_reference_on_the_hemisphere_outputs(folded):
    # the compiled kernel (fused and general paths) against the plain numpy reference of
    # tests/_partition_reference.py (the formulas of docs/conventions.md, section 5)
    rng = np.random.default_rng(9)
    edges = np.linspace(0, 90 if folded else 180, 10)
    j = rng.uniform(1, 10, (50, 3, 9))
    j[5, 1, 2] = j[20, :, 0] = np.nan
    ds = make_ds(j, edges, L=np.linspace(1.25, 6, 50), mlat=np.linspace(-35, 35, 50),
                 flux_err=0.1 * j, folded=folded)
    a = partition(ds, hemispheres=True)
    b = reference_partition(ds, a)
    for name in [n for n in a.data_vars if "_lost_" in n]:
        # atol: an error bar that cancels to zero keeps only its rounding (~1e-10)
        np.testing.assert_allclose(a[name].values, b[name], rtol=1e-11, atol=1e-8,
                                   err_msg=name)
