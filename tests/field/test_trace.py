"""Field-line tracing against the closed forms of the centred dipole and an outside integrator."""

import numpy as np
import pytest
import xarray as xr
from scipy.integrate import solve_ivp

from beltkit import dipole
from beltkit.constants import B0_NT, R_E_KM
from beltkit.errors import FieldModelError, PhysicsError
from beltkit.field import IGRF, CenteredDipole, trace
from beltkit.field.igrf import synth_geo
from beltkit.field.trace import integral_invariant, trace_lines

T2020 = np.datetime64("2020-01-01T00:00")


class AlignedDipole:
    """Earth-like dipole along -Z (moment towards the south), test-only."""

    name = "aligned"

    def __init__(self, b0_nt=B0_NT, uniform_nt=(0.0, 0.0, 0.0)):
        self.b0 = b0_nt
        self.uniform = np.asarray(uniform_nt, dtype=float)

    def field_geo(self, xyz_km, time):
        x = np.asarray(xyz_km, dtype=float)
        r = np.linalg.norm(x, axis=-1, keepdims=True)
        m = np.array([0.0, 0.0, -1.0])
        rh = x / r
        return self.b0 * (R_E_KM / r) ** 3 * (3 * (rh @ m)[..., None] * rh - m) + self.uniform

    def dipole_b0_nt(self, time):
        return np.asarray(self.b0)


def dipole_points(axis, L, mlat_deg, mlon_deg):
    """GEO positions on dipole shells L at dipole latitude/longitude (about `axis`)."""
    z = np.asarray(axis, dtype=float) / np.linalg.norm(axis)
    helper = [0.0, 0.0, 1.0] if abs(z[2]) < 0.9 else [1.0, 0.0, 0.0]
    e1 = np.cross(helper, z)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(z, e1)
    lam = np.radians(mlat_deg)
    phi = np.radians(mlon_deg)
    r = L * np.cos(lam) ** 2 * R_E_KM
    u = (np.cos(lam) * np.cos(phi))[..., None] * e1 + (np.cos(lam) * np.sin(phi))[..., None] * e2
    return r[..., None] * (u + np.sin(lam)[..., None] * z)


def _grid(n=60, seed=3):
    rng = np.random.default_rng(seed)
    L = rng.uniform(1.2, 7.0, n)
    lam_f = np.degrees(np.arccos(np.sqrt((R_E_KM + 100.0) / (L * R_E_KM))))
    mlat = rng.uniform(-0.9, 0.9, n) * lam_f
    mlon = rng.uniform(0.0, 360.0, n)
    return L, mlat, mlon


def test_centered_dipole_matches_closed_forms():
    # reference: closed forms of the centred dipole (beltkit.dipole; Roederer 1970, ch. 1)
    model = CenteredDipole(epoch=2020.0)
    b0 = float(model.dipole_b0_nt(T2020))
    axis = model.dipole_axis_geo(T2020)
    L, mlat, mlon = _grid()
    ds = trace(model, dipole_points(axis, L, mlat, mlon), T2020)
    assert not ds["open"].any()
    foot = dipole.footpoint_field(L, 100.0, b0_nt=b0)
    np.testing.assert_allclose(ds["b_foot_north"], foot, rtol=1e-6)
    np.testing.assert_allclose(ds["b_foot_south"], foot, rtol=1e-6)
    np.testing.assert_allclose(ds["b_min"], dipole.equatorial_field(L, b0_nt=b0), rtol=1e-6)
    length = 2 * dipole.arc_length(L, 100.0) * R_E_KM
    np.testing.assert_allclose(ds["length"], length, rtol=1e-6)
    # footpoint latitudes (north positive, south negative) about the dipole axis
    for name, sign in (("xyz_foot_north", 1.0), ("xyz_foot_south", -1.0)):
        xyz = ds[name].values
        r = np.linalg.norm(xyz, axis=1)
        np.testing.assert_allclose(r, R_E_KM + 100.0, rtol=0, atol=1e-5)  # crossing to 10 um
        lat = np.degrees(np.arcsin(xyz @ axis / r))
        np.testing.assert_allclose(lat, sign * dipole.footpoint_mlat(L, 100.0), rtol=1e-6)
    # the minimum lies on the dipole equator, half way along the line; its position
    # is fixed only to the flatness of B there (~1e-5 of L), so the check is looser
    rmin = ds["xyz_min"].values
    eq_lat = np.degrees(np.arcsin(rmin @ axis / np.linalg.norm(rmin, axis=1)))
    assert np.max(np.abs(eq_lat)) < 1e-2
    np.testing.assert_allclose(ds["s_min"], 0.5 * length, rtol=2e-4)


def test_sensitivity_of_the_dipole_check():
    # nudge: a shell 1e-5 away already breaks the 1e-6 agreement, so the check has teeth
    L = np.array([4.0])
    ds = trace(AlignedDipole(), dipole_points([0, 0, 1.0], L, np.array([10.0]), np.zeros(1)),
               T2020)
    good = dipole.footpoint_field(L, 100.0)
    off = dipole.footpoint_field(L * (1 + 1e-5), 100.0)
    assert abs(float(ds.b_foot_north[0]) / good[0] - 1) < 1e-6
    assert abs(float(ds.b_foot_north[0]) / off[0] - 1) > 1e-6


def test_aligned_dipole_other_altitude_and_direction():
    # northern footpoint is the end reached along B: the northern magnetic hemisphere
    L = np.array([1.5, 3.0, 6.0])
    x = dipole_points([0, 0, 1.0], L, np.array([-20.0, 5.0, 30.0]), np.array([0, 100, 250.0]))
    ds = trace(AlignedDipole(), x, T2020, altitude_km=500.0)
    assert np.all(ds.xyz_foot_north.sel(xyz="z") > 0)
    assert np.all(ds.xyz_foot_south.sel(xyz="z") < 0)
    np.testing.assert_allclose(ds.b_foot_south, dipole.footpoint_field(L, 500.0), rtol=1e-6)
    np.testing.assert_allclose(ds.s_start + 0, ds.s_start, rtol=0)  # finite
    # arc length from the north foot to a start at dipole latitude lam
    lam = np.radians([-20.0, 5.0, 30.0])
    xx = np.sqrt(3) * np.sin(lam)
    s_lam = L * R_E_KM / (2 * np.sqrt(3)) * (xx * np.sqrt(1 + xx**2) + np.arcsinh(xx))
    half = dipole.arc_length(L, 500.0) * R_E_KM
    np.testing.assert_allclose(ds.s_start, half - s_lam, rtol=1e-6)


def test_igrf_line_matches_scipy_integrator():
    # reference: scipy.integrate.solve_ivp (DOP853, tight tolerances, exact event location)
    model = IGRF()
    t = np.datetime64("2024-06-01")
    start = np.array([[1.4 * R_E_KM, 0.3 * R_E_KM, 0.2 * R_E_KM],
                      [-3.0 * R_E_KM, -2.5 * R_E_KM, 1.0 * R_E_KM]])
    ds = trace(model, start, t)
    r_stop = R_E_KM + 100.0
    g, h = model.coefficients(t)  # the raw synthesis also answers below the surface
    for i in range(start.shape[0]):
        for name, sign in (("xyz_foot_north", 1.0), ("xyz_foot_south", -1.0)):
            def rhs(s, x, sign=sign):
                b = synth_geo(x, g, h)
                return sign * b / np.linalg.norm(b)

            def hit(s, x):
                return np.linalg.norm(x) - r_stop

            hit.terminal = True
            sol = solve_ivp(rhs, (0, 20 * 6.0 * R_E_KM), start[i], method="DOP853",
                            rtol=1e-12, atol=1e-7, events=hit)
            ref = sol.y_events[0][0]
            np.testing.assert_allclose(ds[name].values[i], ref, atol=1e-3)
            b_ref = np.linalg.norm(model.field_geo(ref, t))
            key = "b_foot_north" if sign > 0 else "b_foot_south"
            np.testing.assert_allclose(float(ds[key][i]), b_ref, rtol=1e-7)


def test_dataset_layout_and_attributes():
    x = dipole_points([0, 0, 1.0], np.array([2.0, 3.0]), np.zeros(2), np.zeros(2))
    ds = trace(AlignedDipole(), x, T2020, samples=True)
    assert ds.sizes["line"] == 2 and ds.sizes["xyz"] == 3
    for name in ("b_foot_north", "b_foot_south", "b_min"):
        assert ds[name].attrs["units"] == "nT" and ds[name].attrs["long_name"]
    for name in ("xyz_foot_north", "xyz_foot_south", "xyz_min"):
        assert ds[name].dims == ("line", "xyz") and ds[name].attrs["units"] == "km"
    assert ds["length"].attrs["units"] == "km"
    assert ds["open"].dtype == bool
    # samples along the line: I for equatorially mirroring particles is 0
    np.testing.assert_allclose(integral_invariant(ds, ds.b_min.values), 0.0, atol=1e-9)


def test_open_lines_flagged_without_hanging():
    # dipole plus a uniform southward field: high-latitude lines escape (open)
    model = AlignedDipole(uniform_nt=(0.0, 0.0, -20.0))
    x = dipole_points([0, 0, 1.0], np.array([40.0, 3.0]), np.array([75.0, 0.0]), np.zeros(2))
    ds = trace(model, x, T2020, max_radius_re=15.0)
    assert bool(ds.open[0]) and not bool(ds.open[1])
    assert np.isnan(ds.b_min[0]) and np.isnan(ds.length[0])
    assert np.isfinite(ds.b_min[1])
    # a step budget that is too small flags the line open instead of looping
    ds = trace(AlignedDipole(), x[1:], T2020, max_steps=3)
    assert bool(ds.open[0]) and np.isnan(ds.b_min[0])


def test_nan_positions_give_nan():
    x = dipole_points([0, 0, 1.0], np.array([2.0, 3.0]), np.zeros(2), np.zeros(2))
    x[0, 1] = np.nan
    ds = trace(AlignedDipole(), x, T2020)
    assert np.isnan(ds.b_foot_north[0]) and np.isnan(ds.b_min[0]) and not bool(ds.open[0])
    assert np.isfinite(ds.b_foot_north[1])


def test_bad_input_errors_name_the_argument():
    with pytest.raises(FieldModelError, match="start_xyz_km.*inside the Earth"):
        trace(AlignedDipole(), [[3000.0, 0.0, 0.0]], T2020)
    with pytest.raises(FieldModelError, match="below the stop altitude"):
        trace(AlignedDipole(), [[R_E_KM + 50.0, 0.0, 0.0]], T2020)
    with pytest.raises(PhysicsError, match="start_xyz_km.*trailing axis"):
        trace(AlignedDipole(), [[3.0, 0.0]], T2020)
    with pytest.raises(PhysicsError, match="altitude_km"):
        trace(AlignedDipole(), [[3 * R_E_KM, 0.0, 0.0]], T2020, altitude_km=-5.0)
    with pytest.raises(PhysicsError, match="time"):
        trace(AlignedDipole(), np.full((3, 3), 2 * R_E_KM), np.array([T2020, T2020]))


def test_inputs_not_modified_and_dataarray_accepted():
    x = dipole_points([0, 0, 1.0], np.array([2.0, 2.5]), np.zeros(2), np.zeros(2))
    keep = x.copy()
    da = xr.DataArray(x, dims=("time", "xyz"), attrs={"units": "km"})
    ds = trace(AlignedDipole(), da, T2020)
    np.testing.assert_array_equal(x, keep)
    lines = trace_lines(AlignedDipole(), x, T2020)
    np.testing.assert_allclose(ds.b_min, lines.b_min)


def test_one_time_per_line():
    # the dipole of each line's own time (IGRF-14 g10, g11, h11 change between epochs)
    model = CenteredDipole()
    times = np.array([T2020, np.datetime64("2025-01-01")])
    x = np.full((2, 3), 2.0 * R_E_KM / np.sqrt(3))
    ds = trace(model, x, times)
    for i, t in enumerate(times):
        single = trace(model, x[i:i + 1], t)
        np.testing.assert_allclose(ds.b_foot_north[i], single.b_foot_north[0], rtol=1e-12)
    assert abs(float(ds.b_min[0] / ds.b_min[1]) - 1) > 1e-4
