"""IGRF-14 synthesis, time interpolation and the field models against outside references.

References used here:
* ppigrf 2.1 (package index), an independent IGRF evaluator shipping the same
  IAGA IGRF-14 SHC table; a test-only dependency that must be installed.
* The IAGA IGRF-14 coefficient table itself (doi:10.5281/zenodo.14012302),
  read directly from the shipped file by plain text parsing.
* Analytic properties of the potential field (linearity in the coefficients,
  the centred dipole's closed form).
* The plain numpy reference engine of ``tests/igrf_reference.py`` (itself
  checked against ppigrf here), for the compiled kernels.
"""

import datetime as dt
import subprocess
import sys
from pathlib import Path

import igrf_reference as ref_engine
import numpy as np
import ppigrf
import pytest

import beltkit
from beltkit.constants import R_E_KM
from beltkit.errors import FieldModelError
from beltkit.field import IGRF, CenteredDipole, FieldModel, as_model, igrf, igrf_table
from beltkit.field.coords import geodetic_to_geo
from beltkit.field.timeconv import decimal_year

SHC = Path(beltkit.__file__).parent / "field" / "data" / "igrf14coeffs.shc"


def _table_column(epoch):
    """Coefficients of one epoch straight from the IAGA table text: {(n, m): value}."""
    lines = [ln for ln in SHC.read_text().splitlines() if ln.strip() and not ln.startswith("#")]
    epochs = [float(x) for x in lines[1].split()]
    col = epochs.index(epoch)
    return {(int(p[0]), int(p[1])): float(p[2 + col]) for p in (ln.split() for ln in lines[2:])}


def _ppigrf_datetime(t):
    """The datetime at which ppigrf's interpolation equals IGRF's at decimal year t.

    ppigrf interpolates linearly in *elapsed time* between the epochs'
    1 January dates, while the IGRF prescription is linear in the *decimal
    year*. Both are linear on each 5-year interval, so the same fraction of
    the interval gives the same coefficients.
    """
    k = min(int((t - 1900.0) // 5.0), 25)
    e0, e1 = 1900 + 5 * k, 1905 + 5 * k
    d0, d1 = dt.datetime(e0, 1, 1), dt.datetime(e1, 1, 1)
    return d0 + (t - e0) / (e1 - e0) * (d1 - d0)


def _random_points(rng, n):
    r = R_E_KM + rng.uniform(0.0, 40000.0, n)  # altitudes 0-40,000 km
    colat = np.degrees(np.arccos(rng.uniform(-1.0, 1.0, n)))
    lon = rng.uniform(-180.0, 180.0, n)
    return r, colat, lon


DATES = [1965.0, 1977.3, 1993.81, 2004.5, 2017.2, 2021.66, 2025.0, 2029.4]


@pytest.mark.parametrize("t", DATES)
def test_spherical_components_match_ppigrf(t):
    # ppigrf.igrf_gc (reference library): (Br, Btheta, Bphi), outer product over dates.
    rng = np.random.default_rng(int(t * 100))
    r, colat, lon = _random_points(rng, 2000)
    ref = ppigrf.igrf_gc(r, colat, lon, _ppigrf_datetime(t))
    g, h = igrf.igrf_coefficients(t)
    # the compiled engine and the numpy reference of tests/igrf_reference.py
    for synth in (igrf.synth_spherical, ref_engine.synth_spherical):
        ours = synth(r, colat, lon, g, h)
        for a, b in zip(ours, ref):
            assert np.max(np.abs(a - b[0])) < 0.1  # issue 6: better than 0.1 nT
    ours = igrf.igrf_field_spherical(r, colat, lon, t)
    for a, b in zip(ours, ref):
        assert np.max(np.abs(a - b[0])) < 0.1


def test_exact_epoch_dates_agree_with_ppigrf_without_mapping():
    # On 1 January of an epoch year both interpolation conventions coincide.
    rng = np.random.default_rng(3)
    r, colat, lon = _random_points(rng, 500)
    for year in (1970, 2000, 2020):
        ref = ppigrf.igrf_gc(r, colat, lon, dt.datetime(year, 1, 1))
        ours = igrf.igrf_field_spherical(r, colat, lon, np.datetime64(f"{year}-01-01"))
        for a, b in zip(ours, ref):
            assert np.max(np.abs(a - b[0])) < 0.1


def test_cartesian_model_matches_ppigrf():
    # IGRF().field_geo rotated from ppigrf's spherical components.
    rng = np.random.default_rng(11)
    r, colat, lon = _random_points(rng, 1500)
    th, ph = np.radians(colat), np.radians(lon)
    xyz = np.stack([r * np.sin(th) * np.cos(ph), r * np.sin(th) * np.sin(ph), r * np.cos(th)], -1)
    t = 2012.37
    br, bt, bp = (c[0] for c in ppigrf.igrf_gc(r, colat, lon, _ppigrf_datetime(t)))
    ref = np.stack(
        [
            (br * np.sin(th) + bt * np.cos(th)) * np.cos(ph) - bp * np.sin(ph),
            (br * np.sin(th) + bt * np.cos(th)) * np.sin(ph) + bp * np.cos(ph),
            br * np.cos(th) - bt * np.sin(th),
        ],
        -1,
    )
    assert np.max(np.abs(IGRF().field_geo(xyz, t) - ref)) < 0.1


def test_geodetic_inputs_match_ppigrf_geodetic_evaluator():
    # ppigrf.igrf(lon, lat, h, date): geodetic (WGS-84) east, north, up components.
    rng = np.random.default_rng(5)
    lat = rng.uniform(-89.0, 89.0, 300)
    lon = rng.uniform(-180.0, 180.0, 300)
    alt = rng.uniform(0.0, 2000.0, 300)
    be, bn, bu = (c[0] for c in ppigrf.igrf(lon, lat, alt, dt.datetime(2020, 1, 1)))
    b = IGRF().field_geo(geodetic_to_geo(lat, lon, alt), 2020.0)
    phi, lam = np.radians(lat), np.radians(lon)
    east = np.stack([-np.sin(lam), np.cos(lam), 0 * lam], -1)
    north = np.stack([-np.sin(phi) * np.cos(lam), -np.sin(phi) * np.sin(lam), np.cos(phi)], -1)
    up = np.stack([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], -1)
    # ppigrf's own geodetic conversion is its approximation; 1 nT is far below any
    # error in latitude handling (a 0.2 deg latitude mistake would give ~100 nT).
    assert np.max(np.abs(np.sum(b * east, -1) - be)) < 1.0
    assert np.max(np.abs(np.sum(b * north, -1) - bn)) < 1.0
    assert np.max(np.abs(np.sum(b * up, -1) - bu)) < 1.0


def test_published_dipole_coefficients_2020_and_2025():
    # IAGA IGRF-14 table: g10, g11, h11 at 2020.0 and 2025.0.
    for epoch in (2020.0, 2025.0):
        col = _table_column(epoch)
        g, h = igrf.igrf_coefficients(epoch)
        assert g[1, 0] == col[(1, 0)]
        assert g[1, 1] == col[(1, 1)]
        assert h[1, 1] == col[(1, -1)]
    # the printed values themselves (IGRF-14 release, from memory; equal to the table):
    g, h = igrf.igrf_coefficients(2025.0)
    assert (g[1, 0], g[1, 1], h[1, 1]) == (-29350.0, -1410.3, 4545.5)
    g, h = igrf.igrf_coefficients(2020.0)
    assert (g[1, 0], g[1, 1], h[1, 1]) == (-29403.41, -1451.37, 4653.35)


def test_whole_table_is_read():
    tab = igrf.igrf_table()
    assert tab.nmax == 13
    assert tab.valid_range == (1900.0, 2030.0)
    assert len(tab.epochs) == 27
    col = _table_column(1995.0)
    g, h = igrf.igrf_coefficients(1995.0)
    for (n, m), v in col.items():
        assert (g[n, m] if m >= 0 else h[n, -m]) == v
    # degree 11-13 are zero before 2000 in the standard table
    assert np.all(g[11:] == 0) and np.all(h[11:] == 0)


def test_mid_epoch_is_average_of_neighbours():
    # IGRF prescription: linear in time between 5-year epochs.
    g15, h15 = igrf.igrf_coefficients(2015.0)
    g20, h20 = igrf.igrf_coefficients(2020.0)
    g, h = igrf.igrf_coefficients(2017.5)
    np.testing.assert_allclose(g, 0.5 * (g15 + g20), rtol=0, atol=1e-9)
    np.testing.assert_allclose(h, 0.5 * (h15 + h20), rtol=0, atol=1e-9)
    xyz = np.array([[7000.0, -2000.0, 3000.0], [0.0, 9000.0, -12000.0]])
    b = IGRF().field_geo(xyz, 2017.5)
    avg = 0.5 * (IGRF().field_geo(xyz, 2015.0) + IGRF().field_geo(xyz, 2020.0))
    np.testing.assert_allclose(b, avg, rtol=0, atol=1e-8)


def test_secular_variation_after_2025():
    # 2025-2030: g(t) = g(2025) + (t - 2025) * SV, with SV = (g2030 - g2025) / 5 in the table.
    c25, c30 = _table_column(2025.0), _table_column(2030.0)
    g, h = igrf.igrf_coefficients(2027.25)
    for (n, m) in [(1, 0), (1, 1), (2, 1), (5, 3)]:
        assert g[n, m] == pytest.approx(c25[(n, m)] + 2.25 * (c30[(n, m)] - c25[(n, m)]) / 5.0)
        if m > 0:
            sv = (c30[(n, -m)] - c25[(n, -m)]) / 5.0
            assert h[n, m] == pytest.approx(c25[(n, -m)] + 2.25 * sv)
    assert h[1, 0] == 0.0


def test_times_outside_table_are_refused_unless_allowed():
    xyz = np.array([7000.0, 0.0, 0.0])
    for bad in (1899.9, 2030.01, "2031-01-01"):
        with pytest.raises(FieldModelError, match="1900.0-2030.0"):
            IGRF().field_geo(xyz, bad)
        with pytest.raises(FieldModelError, match="1900.0-2030.0"):
            igrf.igrf_coefficients(bad)
    # explicit extrapolation continues the last linear piece
    g30, _ = igrf.igrf_coefficients(2030.0)
    g25, _ = igrf.igrf_coefficients(2025.0)
    g31, _ = igrf.igrf_coefficients(2031.0, allow_extrapolation=True)
    np.testing.assert_allclose(g31, g30 + (g30 - g25) / 5.0, atol=1e-9)
    assert np.all(np.isfinite(IGRF(allow_extrapolation=True).field_geo(xyz, 2031.0)))


def test_south_atlantic_minimum():
    # Common practice, from memory: the surface-field minimum of the South Atlantic
    # Anomaly lies near 26 S, 55 W with roughly 22,000-23,000 nT in recent epochs
    # (it drifts westward). Grid search on the WGS-84 surface.
    lat = np.arange(-60.0, 10.01, 0.5)
    lon = np.arange(-110.0, 20.01, 0.5)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    xyz = geodetic_to_geo(la, lo, 0.0)
    for epoch in (2000.0, 2010.0, 2020.0, 2025.0):
        b = np.linalg.norm(IGRF().field_geo(xyz, epoch), axis=-1)
        i = np.unravel_index(np.argmin(b), b.shape)
        assert -30.0 <= la[i] <= -22.0
        assert -65.0 <= lo[i] <= -50.0
        assert 22000.0 <= b[i] <= 23000.0


def test_poles_are_finite_and_continuous():
    # B_phi at the poles: the limit along the given meridian (no 1/sin(theta) blow-up).
    lon = np.array([0.0, 37.0, -120.0, 180.0])
    for pole, near in ((0.0, 1e-7), (180.0, 180.0 - 1e-7)):
        at = igrf.igrf_field_spherical(7000.0, np.full(4, pole), lon, 2020.0)
        nb = igrf.igrf_field_spherical(7000.0, np.full(4, near), lon, 2020.0)
        for a, b in zip(at, nb):
            assert np.all(np.isfinite(a))
            np.testing.assert_allclose(a, b, atol=1e-6)
    # ppigrf (reference) a little off the pole, where its 1/sin(theta) is harmless
    ref = ppigrf.igrf_gc(7000.0, 1e-3, lon, dt.datetime(2020, 1, 1))
    ours = igrf.igrf_field_spherical(7000.0, 1e-3, lon, 2020.0)
    for a, b in zip(ours, ref):
        np.testing.assert_allclose(a, b[0], atol=0.1)
    # Cartesian on the axis equals the limit approached from off the axis
    axis = IGRF().field_geo(np.array([0.0, 0.0, 7000.0]), 2020.0)
    off = IGRF().field_geo(np.array([1e-6, 0.0, 7000.0]), 2020.0)
    np.testing.assert_allclose(axis, off, atol=1e-5)


def test_numba_kernel_equals_numpy_reference():
    rng = np.random.default_rng(8)
    xyz = rng.normal(size=(5000, 3))
    xyz *= (R_E_KM + rng.uniform(0, 40000, 5000) / 1.0)[:, None] / np.linalg.norm(xyz, axis=1)[
        :, None
    ]
    g, h = igrf.igrf_coefficients(2008.8)
    np.testing.assert_allclose(igrf.synth_geo(xyz, g, h), ref_engine.synth_geo(xyz, g, h),
                               rtol=1e-11, atol=1e-8)
    # per-point times: the kernel forms each point's coefficients from the linear
    # pieces of igrf_table.time_interpolation; the reference groups points by table
    # interval and combines B(g_k) + (t - T_k) B(gdot_k) (linearity in the coefficients)
    times = np.linspace(1950.0, 2029.9, 5000)
    np.testing.assert_allclose(igrf.igrf_field_cartesian(xyz, times),
                               ref_engine.field_cartesian(xyz, times), rtol=1e-11, atol=1e-8)
    r = np.linalg.norm(xyz, axis=1)
    colat = np.degrees(np.arccos(xyz[:, 2] / r))
    lon = np.degrees(np.arctan2(xyz[:, 1], xyz[:, 0]))
    for a, b in zip(igrf.igrf_field_spherical(r, colat, lon, times, max_degree=9),
                    ref_engine.field_spherical(r, colat, lon, times, max_degree=9)):
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-8)
    for deg in (1, 2, 7):
        m = IGRF(max_degree=deg)
        gg, hh = m.coefficients(2008.8)
        np.testing.assert_allclose(igrf.synth_geo(xyz, gg, hh), ref_engine.synth_geo(xyz, gg, hh),
                                   rtol=1e-11, atol=1e-8)
        np.testing.assert_allclose(igrf.igrf_field_cartesian(xyz, times, max_degree=deg),
                                   ref_engine.field_cartesian(xyz, times, max_degree=deg),
                                   rtol=1e-11, atol=1e-8)


def test_one_time_rule_for_every_path():
    # The per-point-time kernels and the one-time path (coefficients_at + synth_geo /
    # synth_spherical) use the same linear pieces (IGRF prescription, linear in the
    # decimal year); times on and next to epochs, the 2025-2030 secular variation,
    # the 2030.0 end and a truncated model.
    times = np.array([1900.0, 1952.7, 1999.999, 2000.0, 2000.001, 2012.3, 2024.99, 2025.0,
                      2027.6, 2030.0])
    rng = np.random.default_rng(17)
    r, colat, lon = _random_points(rng, times.size)
    th, ph = np.radians(colat), np.radians(lon)
    xyz = np.stack([r * np.sin(th) * np.cos(ph), r * np.sin(th) * np.sin(ph), r * np.cos(th)], -1)
    for deg in (13, 6):
        per_point = igrf.igrf_field_cartesian(xyz, times, max_degree=deg)
        sph = igrf.igrf_field_spherical(r, colat, lon, times, max_degree=deg)
        interp = igrf_table.time_interpolation(times, max_degree=deg)
        g_all, h_all = interp.coefficients()
        for i, t in enumerate(times):
            g, h, nmax = igrf.coefficients_at(t, deg)
            np.testing.assert_array_equal(g_all[i], g)
            np.testing.assert_array_equal(h_all[i], h)
            np.testing.assert_allclose(per_point[i], igrf.synth_geo(xyz[i], g, h, nmax=nmax),
                                       rtol=1e-12, atol=1e-9)
            one = igrf.synth_spherical(r[i], colat[i], lon[i], g, h)
            np.testing.assert_allclose([c[i] for c in sph], one, rtol=1e-12, atol=1e-9)
    # nudge: 0.001 yr (9 h) of secular variation already breaks the 1e-9 nT agreement
    g, h, nmax = igrf.coefficients_at(2012.301)
    assert np.max(np.abs(per_point[5] - igrf.synth_geo(xyz[5], g, h, nmax=nmax))) > 1e-6
    # a single coefficient of the pieces, against the table text (IAGA IGRF-14 columns)
    c20, c25 = _table_column(2020.0), _table_column(2025.0)
    g10, h11 = igrf_table.time_interpolation(2023.0).coefficients(1, 0)[0], \
        igrf_table.time_interpolation(2023.0).coefficients(1, 1)[1]
    assert g10 == pytest.approx(c20[(1, 0)] + 0.6 * (c25[(1, 0)] - c20[(1, 0)]), abs=1e-9)
    assert h11 == pytest.approx(c20[(1, -1)] + 0.6 * (c25[(1, -1)] - c20[(1, -1)]), abs=1e-9)
    with pytest.raises(FieldModelError, match="not in the model"):
        igrf_table.time_interpolation(2023.0, max_degree=3).coefficients(4, 0)


def test_max_degree_checked_once_for_every_path():
    for bad in (0, 14):
        with pytest.raises(FieldModelError, match="max_degree' must be 1-13"):
            igrf.igrf_coefficients(2020.0, max_degree=bad)
        with pytest.raises(FieldModelError, match="max_degree' must be 1-13"):
            igrf.igrf_field_cartesian(np.array([7000.0, 0.0, 0.0]), 2020.0, max_degree=bad)
        with pytest.raises(FieldModelError, match="max_degree' must be 1-13"):
            igrf.igrf_field_spherical(7000.0, 45.0, 0.0, 2020.0, max_degree=bad)


def test_backend_keyword_is_deprecated():
    # one release of grace for the former engine switch (issue 14)
    xyz = np.array([[7000.0, 100.0, -200.0], [0.0, 8000.0, 3000.0]])
    g, h = igrf.igrf_coefficients(2020.0)
    plain = igrf.synth_geo(xyz, g, h)
    with pytest.warns(DeprecationWarning, match="backend"):
        np.testing.assert_array_equal(igrf.synth_geo(xyz, g, h, backend="numba"), plain)
    with pytest.warns(DeprecationWarning, match="backend"):
        igrf.synth_spherical(7000.0, 45.0, 10.0, g, h, backend="numba")
    with pytest.warns(DeprecationWarning, match="backend"):
        np.testing.assert_array_equal(
            igrf.igrf_field_cartesian(xyz, 2020.0, backend="numba"),
            igrf.igrf_field_cartesian(xyz, 2020.0),
        )
    with pytest.warns(DeprecationWarning, match="backend"):
        igrf.igrf_field_spherical(7000.0, 45.0, 10.0, 2020.0, backend="numba")
    with pytest.raises(FieldModelError, match="backend='numpy' is no longer available"):
        igrf.synth_geo(xyz, g, h, backend="numpy")
    with pytest.raises(FieldModelError, match="backend='numpy' is no longer available"):
        igrf.igrf_field_spherical(7000.0, 45.0, 10.0, 2020.0, backend="numpy")
    with pytest.raises(FieldModelError, match="only None or 'numba'"):
        igrf.igrf_field_cartesian(xyz, 2020.0, backend="fortran")
    with pytest.warns(DeprecationWarning, match="DEFAULT_BACKEND"):
        assert igrf.DEFAULT_BACKEND == "numba"


def test_importing_igrf_does_not_load_the_pad_engine():
    code = ("import sys, beltkit.field.igrf; "
            "print(sorted(m for m in sys.modules if m.startswith('beltkit')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert "beltkit.field.igrf_table" in out and "beltkit.field.igrf_kernels" in out
    assert "beltkit.pad" not in out


def test_per_point_times_are_elementwise():
    # one time per point (not ppigrf's outer product)
    xyz = np.array([[7000.0, 0.0, 0.0], [0.0, -8000.0, 2000.0], [5000.0, 5000.0, 5000.0]])
    times = np.array(["1971-05-01", "2003-02-11", "2026-09-30"], dtype="datetime64[ns]")
    b = IGRF().field_geo(xyz, times)
    assert b.shape == (3, 3)
    for i in range(3):
        np.testing.assert_allclose(b[i], IGRF().field_geo(xyz[i], times[i]), atol=1e-8)
    br, bt, bp = igrf.igrf_field_spherical([7000.0, 8000.0], [30.0, 100.0], [10.0, 200.0],
                                           [1980.2, 2022.9])
    cases = [(7000.0, 30.0, 10.0, 1980.2), (8000.0, 100.0, 200.0, 2022.9)]
    for i, (r, c, lo, t) in enumerate(cases):
        one = igrf.igrf_field_spherical(r, c, lo, t)
        assert br[i] == pytest.approx(one[0], abs=1e-8)
        assert bt[i] == pytest.approx(one[1], abs=1e-8)
        assert bp[i] == pytest.approx(one[2], abs=1e-8)
    # a time per line broadcast against a (lines, samples) grid of points
    grid = np.broadcast_to(xyz[:, None, :], (3, 4, 3))
    b2 = IGRF().field_geo(grid, times[:, None])
    np.testing.assert_allclose(b2[:, 2], b, atol=1e-8)


def test_time_input_forms_agree():
    xyz = np.array([6900.0, 1200.0, -3000.0])
    ref = IGRF().field_geo(xyz, decimal_year(np.datetime64("2019-08-14T06:00")))
    for t in (np.datetime64("2019-08-14T06:00"), "2019-08-14T06:00", dt.datetime(2019, 8, 14, 6),
              dt.datetime(2019, 8, 14, 8, tzinfo=dt.timezone(dt.timedelta(hours=2)))):
        np.testing.assert_allclose(IGRF().field_geo(xyz, t), ref, atol=1e-9)
    # IGRF decimal-year convention: fraction of the calendar year (leap year 366 days)
    assert decimal_year(np.datetime64("2024-07-02")) == 2024.5
    assert decimal_year(np.datetime64("2023-07-02T12:00")) == 2023.5


def test_nan_positions_and_times_give_nan():
    xyz = np.array([[7000.0, 0.0, 0.0], [np.nan, 0.0, 0.0], [0.0, 0.0, 9000.0]])
    for model in (IGRF(), CenteredDipole()):
        b = model.field_geo(xyz, 2020.0)
        assert np.all(np.isnan(b[1]))
        assert np.all(np.isfinite(b[[0, 2]]))
    b = IGRF().field_geo(xyz[[0, 2]], np.array([2020.0, np.nan]))
    assert np.all(np.isfinite(b[0])) and np.all(np.isnan(b[1]))
    br, bt, bp = igrf.igrf_field_spherical(np.nan, 45.0, 0.0, 2020.0)
    assert np.isnan(br) and np.isnan(bt) and np.isnan(bp)


def test_points_inside_the_earth_are_refused():
    for model in (IGRF(), CenteredDipole()):
        with pytest.raises(FieldModelError, match="xyz_km"):
            model.field_geo(np.array([1000.0, 0.0, 0.0]), 2020.0)  # 1000 km from the centre
        with pytest.raises(FieldModelError, match="xyz_km"):
            model.field_geo(np.array([[1.1, 0.0, 0.0]]), 2020.0)  # R_E units by mistake
        with pytest.raises(FieldModelError, match="trailing axis"):
            model.field_geo(np.array([7000.0, 0.0]), 2020.0)
    with pytest.raises(FieldModelError, match="r_km"):
        igrf.igrf_field_spherical(1.5, 45.0, 0.0, 2020.0)
    with pytest.raises(FieldModelError, match="colat_deg"):
        igrf.igrf_field_spherical(7000.0, -10.0, 0.0, 2020.0)
    # a ground station near the South Pole (inside the 6371.2 km sphere, on the ellipsoid)
    pole_station = geodetic_to_geo(-89.99, 0.0, 2.8)
    assert np.linalg.norm(pole_station) < R_E_KM
    assert np.all(np.isfinite(IGRF().field_geo(pole_station, 2020.0)))


def test_centered_dipole_is_the_degree_one_field():
    # V = a^3 (d . r) / r^3 is the n = 1 part of the IGRF potential.
    rng = np.random.default_rng(2)
    xyz = rng.normal(size=(200, 3)) * 9000.0
    xyz = xyz[np.linalg.norm(xyz, axis=1) > 7000.0]
    for t in (1950.0, 2020.0, 2027.0):
        np.testing.assert_allclose(
            CenteredDipole().field_geo(xyz, t), IGRF(max_degree=1).field_geo(xyz, t), atol=1e-8
        )
    # frozen epoch ignores the evaluation time
    frozen = CenteredDipole(epoch=2020.0)
    np.testing.assert_allclose(
        frozen.field_geo(xyz, 1950.0), CenteredDipole().field_geo(xyz, 2020.0)
    )


def test_dipole_axis_b0_and_equatorial_field():
    col = _table_column(2020.0)
    g10, g11, h11 = col[(1, 0)], col[(1, 1)], col[(1, -1)]
    b0 = np.sqrt(g10**2 + g11**2 + h11**2)
    m = CenteredDipole()
    assert m.dipole_b0_nt(2020.0) == pytest.approx(b0, rel=1e-12)
    assert IGRF().dipole_b0_nt(2020.0) == pytest.approx(b0, rel=1e-12)
    axis = m.dipole_axis_geo(2020.0)
    # northern dipole pole: colatitude arccos(-g10/B0), longitude atan2(-h11, -g11)
    # (Hapgood 1992, sect. 3.3; common practice): about 80.6 N, 72.7 W in 2020
    lat = np.degrees(np.arcsin(axis[2]))
    lon = np.degrees(np.arctan2(axis[1], axis[0]))
    assert lat == pytest.approx(90.0 - np.degrees(np.arccos(-g10 / b0)), abs=1e-10)
    assert lon == pytest.approx(np.degrees(np.arctan2(-h11, -g11)), abs=1e-10)
    assert 80.0 < lat < 81.0 and -73.5 < lon < -72.0
    # textbook dipole: |B| = B0 (a/r)^3 on the magnetic equator, 2 B0 (a/r)^3 on the axis
    perp = np.cross(axis, [0.0, 0.0, 1.0])
    perp /= np.linalg.norm(perp)
    for r in (R_E_KM, 3 * R_E_KM):
        assert np.linalg.norm(m.field_geo(r * perp, 2020.0)) == pytest.approx(
            b0 * (R_E_KM / r) ** 3, rel=1e-12
        )
        b_ax = m.field_geo(r * axis, 2020.0)
        assert np.linalg.norm(b_ax) == pytest.approx(2 * b0 * (R_E_KM / r) ** 3, rel=1e-12)
        assert np.dot(b_ax, axis) < 0  # field points down (into the Earth) at the northern pole


def test_model_protocol_and_as_model():
    for m in (IGRF(), CenteredDipole(), CenteredDipole(epoch="2015-06-01")):
        assert isinstance(m, FieldModel)
        assert isinstance(m.name, str)
        key = m.epoch_key(np.datetime64("2021-03-01"))
        assert isinstance(key, str) and m.name.split("@")[0][:4] in key
        hash(key)
    assert isinstance(as_model(None), CenteredDipole)
    assert isinstance(as_model("dipole"), CenteredDipole)
    assert isinstance(as_model("IGRF"), IGRF)
    m = IGRF(max_degree=5)
    assert as_model(m) is m
    with pytest.raises(FieldModelError, match="unknown field model"):
        as_model("t89")
    with pytest.raises(FieldModelError, match="model"):
        as_model(3.0)
    with pytest.raises(FieldModelError, match="max_degree"):
        IGRF(max_degree=14)
    # keys separate models and epochs
    assert IGRF().epoch_key(2020.0) != CenteredDipole().epoch_key(2020.0)
    assert IGRF().epoch_key(2020.0) != IGRF().epoch_key(2021.0)
    assert IGRF().epoch_key(2020.0) != IGRF(max_degree=10).epoch_key(2020.0)
    frozen = CenteredDipole(epoch=2020.0)
    assert frozen.epoch_key(1990.0) == frozen.epoch_key(2025.0)


def test_malformed_table_names_the_file(tmp_path):
    bad = tmp_path / "broken.shc"
    bad.write_text("# comment\n1 2 2 2 1\n2000.0 2005.0\n1 0 -29000 -29100\n")
    with pytest.raises(FieldModelError, match="broken.shc"):
        igrf.load_shc(bad)
    with pytest.raises(FieldModelError, match="missing.shc"):
        igrf.load_shc(tmp_path / "missing.shc")


def test_spherical_dataarray_in_dataarray_out():
    import xarray as xr

    r = xr.DataArray([7000.0, 9000.0], dims="sample", attrs={"units": "km"})
    colat = xr.DataArray([30.0, 120.0], dims="sample", attrs={"units": "deg"})
    br, bt, bp = igrf.igrf_field_spherical(r, colat, 15.0, 2021.0)
    assert br.dims == ("sample",) and br.attrs["units"] == "nT" and bp.name == "b_phi"
    ref = igrf.igrf_field_spherical(r.values, colat.values, 15.0, 2021.0)
    np.testing.assert_allclose(bt.values, ref[1])
    # metres are converted by the unit check
    br_m, _, _ = igrf.igrf_field_spherical((r * 1e3).assign_attrs(units="m"), colat, 15.0, 2021.0)
    np.testing.assert_allclose(br_m.values, br.values)


def test_inputs_not_modified():
    xyz = np.array([[7000.0, 100.0, -200.0]])
    keep = xyz.copy()
    IGRF().field_geo(xyz, 2020.0)
    CenteredDipole().field_geo(xyz, 2020.0)
    np.testing.assert_array_equal(xyz, keep)


def test_ppigrf_comparison_is_sensitive():
    # nudge: a 0.05-year (18-day) time error must already break the 0.1 nT agreement
    rng = np.random.default_rng(21)
    r, colat, lon = _random_points(rng, 2000)
    r = R_E_KM + (r - R_E_KM) * 0.02  # low altitudes, where secular variation is largest
    ref = ppigrf.igrf_gc(r, colat, lon, _ppigrf_datetime(2010.3))
    g, h = igrf.igrf_coefficients(2010.35)
    ours = igrf.synth_spherical(r, colat, lon, g, h)
    assert max(np.max(np.abs(a - b[0])) for a, b in zip(ours, ref)) > 0.1
