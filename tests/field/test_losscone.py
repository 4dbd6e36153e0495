"""Bounce and drift loss cones, the drift-shell table and its on-disk cache."""

import numpy as np
import pytest
import xarray as xr

from beltkit import dipole
from beltkit.constants import R_E_KM
from beltkit.errors import FieldModelError, PhysicsError
from beltkit.field import IGRF, CenteredDipole, convert, drift_shell_table, loss_cones
from beltkit.field import driftshells as lc
from beltkit.field.losscone import cache_dir, loss_cones_vs_longitude

T2020 = np.datetime64("2020-01-01T00:00")
T2024 = np.datetime64("2024-01-01T00:00")
SMALL_L = np.arange(1.2, 3.61, 0.1)


@pytest.fixture(autouse=True)
def _private_cache(tmp_path, monkeypatch):
    # never touch the real home cache
    monkeypatch.setenv("BELTKIT_CACHE_DIR", str(tmp_path / "cache"))


def _mag_points(model, L, mlat_deg, mlon_deg, t=T2020):
    lam, phi = np.radians(mlat_deg), np.radians(mlon_deg)
    r = L * np.cos(lam) ** 2 * R_E_KM
    mag = np.stack([r * np.cos(lam) * np.cos(phi), r * np.cos(lam) * np.sin(phi),
                    r * np.sin(lam)], axis=-1)
    return convert(mag, t, "MAG", "GEO", model=model)


class DipolePlusUniform(CenteredDipole):
    """Centred dipole plus a uniform southward field: high-latitude lines are open."""

    name = "dipole+uniform"

    def field_geo(self, xyz_km, time):
        return super().field_geo(xyz_km, time) + np.array([0.0, 0.0, -20.0])


def test_centered_dipole_drift_equals_bounce_loss_cone():
    # in a centred dipole every longitude of a shell has the same footpoint field, so the
    # drift loss cone equals the bounce loss cone (common practice); closed forms from
    # beltkit.dipole (Roederer 1970)
    model = CenteredDipole(epoch=2020.0)
    L = np.array([1.3, 1.5, 2.0, 3.0, 3.3])
    mlat = np.array([0.0, 12.0, -20.0, 30.0, -3.0])
    xyz = _mag_points(model, L, mlat, np.array([0.0, 95.0, 200.0, 300.0, 33.0]))
    ds = loss_cones(model, xyz, T2020, l_values=SMALL_L, n_lon=24)
    np.testing.assert_allclose(ds.dlc_local, ds.blc_local, atol=1e-4)
    np.testing.assert_allclose(ds.dlc_equatorial, ds.blc_equatorial, atol=1e-4)
    np.testing.assert_allclose(ds.blc_equatorial, dipole.bounce_loss_cone(L), atol=1e-5)
    np.testing.assert_allclose(ds.blc_local, dipole.local_loss_cone(L, mlat), atol=1e-5)
    np.testing.assert_allclose(ds.loss_cone_north, ds.loss_cone_south, atol=1e-5)
    np.testing.assert_allclose(ds.L, L, rtol=3e-4)  # Hilton's fit, ~1e-4
    np.testing.assert_allclose(ds.L_foot, L, rtol=3e-4)
    np.testing.assert_allclose(ds.mlat, mlat, atol=1e-9)
    np.testing.assert_allclose(ds.b_foot_drift_min, dipole.footpoint_field(L, 100.0),
                               rtol=1e-6)
    for name in ("blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial"):
        assert ds[name].attrs["units"] == "degree" and ds[name].dims == ("sample",)
    for name in ("b_local", "b_min", "b_foot_north", "b_foot_south", "b_foot_drift_min"):
        assert ds[name].attrs["units"] == "nT"
    assert ds.mlt.attrs["units"] == "hour" and np.all((ds.mlt >= 0) & (ds.mlt < 24))


def test_dipole_table_against_closed_form():
    model = CenteredDipole(epoch=2020.0)
    tb = drift_shell_table(model, T2020, l_values=[1.5, 2.5], n_lon=12)
    assert tb.sizes == {"L": 2, "mlon": 12}
    # the shell label is Hilton's McIlwain L, 1e-4 off the dipole L, hence 1e-3 here
    ref = dipole.footpoint_field(tb.L.values, 100.0)
    np.testing.assert_allclose(tb.b_foot_north, np.broadcast_to(ref[:, None], (2, 12)),
                               rtol=1e-3)
    np.testing.assert_allclose(tb.b_foot_north, tb.b_foot_south, rtol=1e-7)
    np.testing.assert_allclose(tb.b_foot_drift_min, tb.b_foot_north.min("mlon"), rtol=1e-7)


@pytest.fixture(scope="module")
def igrf_table(tmp_path_factory):
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("BELTKIT_CACHE_DIR", str(tmp_path_factory.mktemp("igrf_cache")))
        return drift_shell_table(IGRF(), T2024, l_values=[1.3, 1.5, 2.0], n_lon=72)


def test_igrf_drift_loss_cone_exceeds_bounce_loss_cone(igrf_table):
    # common practice: at L ~ 1.3-2 the weak field over the South Atlantic sets the drift
    # loss cone, so DLC > BLC over most longitudes, the two meeting where the footpoint
    # field is weakest
    tb = igrf_table
    b_weak = np.fmin(tb.b_foot_north, tb.b_foot_south)
    blc = np.degrees(np.arcsin(np.sqrt(tb.b_min / b_weak)))
    dlc = np.degrees(np.arcsin(np.sqrt(tb.b_min / tb.b_foot_drift_min)))
    assert np.all(dlc >= blc - 1e-9)
    frac_above = ((dlc - blc) > 0.5).mean("mlon")
    assert np.all(frac_above > 0.75)
    k = b_weak.argmin("mlon")
    np.testing.assert_allclose(dlc.isel(mlon=k), blc.isel(mlon=k), atol=0.05)
    # the weakest footpoint is southern, in the South Atlantic / South American sector
    weakest_south = (tb.b_foot_south <= tb.b_foot_north).isel(mlon=k)
    assert bool(weakest_south.all())
    glon = tb.glon_foot_south.isel(mlon=k)
    assert np.all((glon > -100.0) & (glon < 0.0))
    # magnitude: the surface minimum is ~22,000-23,000 nT in recent epochs (from memory);
    # 100 km up it is a little weaker
    assert np.all((tb.b_foot_drift_min > 19000.0) & (tb.b_foot_drift_min < 23500.0))


def test_loss_cones_vs_longitude_consistent_with_table(igrf_table):
    ds = loss_cones_vs_longitude(IGRF(), 1.5, T2024, n_lon=24)
    assert ds.sizes == {"mlon": 24}
    assert ds.blc_equatorial.attrs["units"] == "degree"
    sub = igrf_table.sel(L=1.5).isel(mlon=slice(0, 72, 3))
    np.testing.assert_allclose(ds.b_foot_north, sub.b_foot_north, rtol=1e-6)
    np.testing.assert_allclose(ds.b_foot_south, sub.b_foot_south, rtol=1e-6)
    assert np.all(ds.dlc_equatorial >= ds.blc_equatorial - 1e-9)


def test_cache_round_trip_and_key_invalidation(tmp_path, monkeypatch):
    model = CenteredDipole(epoch=2020.0)
    assert cache_dir() == tmp_path / "cache"
    first = drift_shell_table(model, T2020, l_values=[2.0, 3.0], n_lon=8)
    files = sorted((tmp_path / "cache").glob("*.nc"))
    assert len(files) == 1
    # the atomic write left no temporary file (io.temporary_name: .<name>.beltkit-<hex>.tmp)
    assert [p.name for p in (tmp_path / "cache").iterdir()] == [files[0].name]

    def no_tracing(*args, **kwargs):
        raise AssertionError("the cached table should have been loaded")

    monkeypatch.setattr(lc, "trace_lines", no_tracing)
    again = drift_shell_table(model, T2020, l_values=[2.0, 3.0], n_lon=8)
    xr.testing.assert_identical(first, again)
    monkeypatch.undo()
    monkeypatch.setenv("BELTKIT_CACHE_DIR", str(tmp_path / "cache"))
    # every ingredient of the key gives a new table
    drift_shell_table(model, T2020, 200.0, l_values=[2.0, 3.0], n_lon=8)
    drift_shell_table(model, T2020, l_values=[2.0, 3.5], n_lon=8)
    drift_shell_table(model, T2020, l_values=[2.0, 3.0], n_lon=9)
    drift_shell_table(CenteredDipole(epoch=2021.0), T2020, l_values=[2.0, 3.0], n_lon=8)
    monkeypatch.setattr(lc, "TABLE_VERSION", lc.TABLE_VERSION + 1)
    drift_shell_table(model, T2020, l_values=[2.0, 3.0], n_lon=8)
    assert len(list((tmp_path / "cache").glob("*.nc"))) == 6
    # a file whose identity does not match is rebuilt, not trusted
    monkeypatch.setattr(lc, "TABLE_VERSION", lc.TABLE_VERSION - 1)
    bad = first.copy()
    bad.attrs["cache_identity"] = "something else"
    bad["b_foot_drift_min"] = bad.b_foot_drift_min * 0 + 1.0
    bad.to_netcdf(files[0], engine="scipy")  # the cache's own format: a readable file
    rebuilt = drift_shell_table(model, T2020, l_values=[2.0, 3.0], n_lon=8)
    xr.testing.assert_allclose(rebuilt, first)


def test_cache_dir_fallbacks(monkeypatch, tmp_path):
    monkeypatch.delenv("BELTKIT_CACHE_DIR")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert cache_dir() == tmp_path / "xdg" / "beltkit"
    monkeypatch.delenv("XDG_CACHE_HOME")
    assert str(cache_dir()).endswith(".cache/beltkit")


def test_one_table_per_epoch(tmp_path):
    model = CenteredDipole()  # the dipole of each time: epochs 2020.0 and 2024.0
    xyz = _mag_points(model, np.array([2.0, 2.0]), np.zeros(2), np.zeros(2))
    ds = loss_cones(model, xyz, np.array([T2020, T2024]), l_values=np.arange(1.8, 2.21, 0.05),
                    n_lon=8)
    assert len(list((tmp_path / "cache").glob("*.nc"))) == 2
    np.testing.assert_allclose(ds.dlc_equatorial, ds.blc_equatorial, atol=1e-3)


def test_open_lines_and_nan_positions_give_nan():
    model = DipolePlusUniform(epoch=2020.0)
    xyz = _mag_points(model, np.array([40.0, 2.0]), np.array([75.0, 0.0]), np.zeros(2))
    xyz[1] = np.nan
    ds = loss_cones(model, xyz, T2020, max_radius_re=15.0)
    assert bool(ds.open[0]) and not bool(ds.open[1])
    for name in ("blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial",
                 "loss_cone_north", "loss_cone_south", "L", "b_foot_drift_min"):
        assert np.all(np.isnan(ds[name])), name


def test_dims_follow_the_input():
    model = CenteredDipole(epoch=2020.0)
    xyz = _mag_points(model, np.full((2, 2), 2.0), np.zeros((2, 2)), np.array([[0, 90.0]] * 2))
    ds = loss_cones(model, xyz, T2020, l_values=[1.8, 2.2], n_lon=8)
    assert ds.blc_local.dims == ("sample_0", "sample_1")
    da = xr.DataArray(xyz[0], dims=("time", "xyz"), coords={"time": [T2020, T2024]})
    ds = loss_cones(model, da, T2020, l_values=[1.8, 2.2], n_lon=8)
    assert ds.blc_local.dims == ("time",) and "time" in ds.coords
    ds = loss_cones(model, xyz[0], T2020, dim="record", l_values=[1.8, 2.2], n_lon=8)
    assert ds.blc_local.dims == ("record",)


def test_bad_input():
    model = CenteredDipole(epoch=2020.0)
    with pytest.raises(FieldModelError, match="xyz_km.*inside the Earth"):
        loss_cones(model, np.array([[1000.0, 0.0, 0.0]]), T2020)
    with pytest.raises(PhysicsError, match="xyz_km.*trailing axis"):
        loss_cones(model, np.array([1000.0, 0.0]), T2020)
    with pytest.raises(PhysicsError, match="l_values"):
        drift_shell_table(model, T2020, l_values=[3.0, 2.0])
    with pytest.raises(PhysicsError, match="n_lon"):
        drift_shell_table(model, T2020, l_values=[2.0], n_lon=2)
    with pytest.raises(PhysicsError, match="altitude_km"):
        drift_shell_table(model, T2020, altitude_km=-1.0)


def test_shell_reaching_the_atmosphere_has_a_90_degree_drift_loss_cone():
    # common practice: the innermost shells dip below 100 km over the South Atlantic,
    # so every particle on them is lost within one drift
    ds = loss_cones_vs_longitude(IGRF(), 1.1, T2024, n_lon=24)
    assert 1.1 < float(ds.l_grounded) < 1.2
    np.testing.assert_array_equal(ds.dlc_equatorial, 90.0)
    assert np.isnan(ds.blc_equatorial).any() and np.isfinite(ds.blc_equatorial).any()


def test_sample_on_a_grounded_shell():
    model = IGRF()
    xyz = _mag_points(model, np.array([1.1, 1.4]), np.zeros(2), np.array([150.0, 150.0]), T2024)
    ds = loss_cones(model, xyz, T2024, l_values=np.arange(1.1, 1.61, 0.05), n_lon=24)
    assert float(ds.L_foot[0]) < 1.1  # below the lowest shell that stays above 100 km
    np.testing.assert_allclose(ds.dlc_equatorial[0], 90.0)
    np.testing.assert_allclose(ds.b_foot_drift_min[0], ds.b_min[0])
    assert 0 < float(ds.blc_equatorial[1]) < float(ds.dlc_equatorial[1]) < 90.0
    # one name per quantity, UDUNITS unit strings (issue 14: no alias outputs)
    assert ds.mlat.attrs["units"] == "degree" and ds.mlt.attrs["units"] == "hour"
    assert "mlat_deg" not in ds and "mlt_hours" not in ds
