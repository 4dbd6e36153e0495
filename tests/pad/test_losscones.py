"""Per-sample loss cones of beltkit.pad.losscones against closed forms and ppigrf.

References used here:
* The mirror-ratio loss cone, sin^2(alpha_lc) = B_here / B_foot, from the first
  adiabatic invariant (Roederer 1970, Dynamics of Geomagnetically Trapped
  Radiation; common practice), written out in this file.
* The centred dipole (Roederer 1970): field line r = L a cos^2(lambda),
  B = B0 / L^3 sqrt(1 + 3 sin^2 lambda) / cos^6 lambda, footpoint at altitude h where
  cos^2(lambda_f) = (a + h) / (L a); B0 from the IAGA IGRF-14 table as shipped by
  ppigrf (package index), epoch 2020.
* ppigrf 2.1 (package index) for the real field: its IGRF-14 coefficients of epoch
  2025 and its Schmidt-normalised Legendre functions (``get_legendre``), summed into
  the potential's gradient here (checked against ``ppigrf.igrf_gc`` in the test),
  and a field line traced with a plain fourth-order Runge-Kutta integrator written
  here to the footpoints (100 km above the sphere of radius a = 6371.2 km).
"""

import datetime as dt
import functools

import numpy as np
import ppigrf
import ppigrf.ppigrf as ppi
import pytest
import xarray as xr
from _flux_factory import make_ds

import beltkit.field.losscone as field_losscone
from beltkit.errors import ConventionError, PhysicsError
from beltkit.field import IGRF
from beltkit.field.coords import geodetic_to_geo
from beltkit.pad.conventions import check
from beltkit.pad.losscones import (
    LOW_ALTITUDE_KM,
    cone_from_fields,
    dipole_low_altitude_note,
    model_name,
    resolve_model,
    sample_loss_cones,
)

A_KM = 6371.2  # IGRF reference radius (IAGA IGRF-14)
EDGES = np.linspace(0.0, 180.0, 7)


def _asin_deg(ratio):
    return np.degrees(np.arcsin(np.sqrt(np.minimum(ratio, 1.0))))


@pytest.fixture(scope="module")
def b0_2020():
    g, h = ppi.read_shc()
    row = dt.datetime(2020, 1, 1)
    return float(np.sqrt(g.loc[row, (1, 0)] ** 2 + g.loc[row, (1, 1)] ** 2
                         + h.loc[row, (1, 1)] ** 2))


def _dipole_b(L, mlat_deg, b0):
    """B = B0 / L^3 sqrt(1 + 3 sin^2) / cos^6 (Roederer 1970)."""
    lam = np.radians(mlat_deg)
    return b0 / L**3 * np.sqrt(1 + 3 * np.sin(lam) ** 2) / np.cos(lam) ** 6


def _dipole_foot_b(L, altitude_km, b0):
    lam_f = np.degrees(np.arccos(np.sqrt((A_KM + altitude_km) / (L * A_KM))))
    return _dipole_b(L, lam_f, b0)


def _cones(ds, **kw):
    return sample_loss_cones(ds, check(ds), **kw)


# ------------------------------------------------------------------ closed forms


def test_cone_from_fields_is_the_mirror_ratio_cone():
    here = np.array([1.0, 2.0, 3.0, 5.0, np.nan])
    mirror = np.array([2.0, 8.0, 3.0, 4.0, 1.0])
    got = cone_from_fields(here, mirror)
    # sin^2 = here / mirror; above 1 (below the footpoint) the cone is 90 deg
    np.testing.assert_allclose(got[:4], [45.0, 30.0, 90.0, 90.0], rtol=1e-13)
    assert np.isnan(got[4])
    da = cone_from_fields(xr.DataArray(here, dims="time"), xr.DataArray(mirror, dims="time"))
    assert da.attrs == {"units": "degree"} and da.dims == ("time",)
    np.testing.assert_array_equal(da.values, got)


@pytest.mark.parametrize("altitude_km", [100.0, 500.0])
def test_dipole_cones_equal_the_closed_forms(altitude_km, b0_2020):
    rng = np.random.default_rng(int(altitude_km))
    n = 400
    L = rng.uniform(1.3, 8.0, n)
    foot = np.degrees(np.arccos(np.sqrt((A_KM + altitude_km) / (L * A_KM))))
    mlat = rng.uniform(-1.0, 1.0, n) * foot  # between the two footpoints
    ds = make_ds(np.ones((n, 1, 6)), EDGES, L=L, mlat=mlat, mlt=rng.uniform(0, 24, n))
    lc = _cones(ds, altitude_km=altitude_km)
    b_loc = _dipole_b(L, mlat, b0_2020)
    b_foot = _dipole_foot_b(L, altitude_km, b0_2020)
    b_eq = b0_2020 / L**3
    want_local = _asin_deg(b_loc / b_foot)  # sin^2 = B_local / B_foot (Roederer 1970)
    want_eq = _asin_deg(b_eq / b_foot)
    # in a centred dipole B_N = B_S = B_drift: every local cone is the same angle
    for name in ("blc_local", "dlc_local", "loss_cone_north", "loss_cone_south"):
        np.testing.assert_allclose(lc[name].values, want_local, rtol=1e-10, err_msg=name)
        assert lc[name].attrs["units"] == "degree"
    for name in ("blc_equatorial", "dlc_equatorial"):
        np.testing.assert_allclose(lc[name].values, want_eq, rtol=1e-10, err_msg=name)
    np.testing.assert_allclose(lc.b_local.values, b_loc, rtol=1e-12)
    np.testing.assert_allclose(lc.b_min.values, b_eq, rtol=1e-12)
    assert lc.b_local.attrs["units"] == "nT" and lc.mlt.attrs["units"] == "hour"
    np.testing.assert_array_equal(lc.L.values, L)
    np.testing.assert_array_equal(lc.mlt.values, ds.mlt.values)
    np.testing.assert_array_equal(lc.time.values, ds.time.values)
    # nudge: the footpoint 400 km lower or higher moves the cones well outside rtol
    other = 500.0 if altitude_km == 100.0 else 100.0
    moved = _asin_deg(b_loc / _dipole_foot_b(L, other, b0_2020))
    assert np.min(np.abs(moved - want_local) / want_local) > 1e-3


def test_dipole_cones_lazy_equal_eager():
    L = np.linspace(1.5, 7.0, 10)
    mlat = np.linspace(-25.0, 25.0, 10)
    ds = make_ds(np.ones((10, 1, 6)), EDGES, L=L, mlat=mlat)
    eager = _cones(ds)
    lazy = sample_loss_cones(ds.chunk(time=4), check(ds.chunk(time=4), check_values=False))
    assert lazy.blc_local.chunks is not None  # still lazy
    xr.testing.assert_allclose(lazy.compute(), eager, rtol=1e-12)


def test_measured_local_field_replaces_the_dipole_field(b0_2020):
    L = np.array([2.0, 4.0, 6.0])
    mlat = np.array([10.0, -20.0, 0.0])
    b_meas = np.array([4000.0, 900.0, 140.0])
    ds = make_ds(np.ones((3, 1, 6)), EDGES, L=L, mlat=mlat, b_local=b_meas)
    lc = _cones(ds)
    want = _asin_deg(b_meas / _dipole_foot_b(L, 100.0, b0_2020))
    for name in ("blc_local", "loss_cone_north", "loss_cone_south"):
        np.testing.assert_allclose(lc[name].values, want, rtol=1e-10)
    np.testing.assert_array_equal(lc.b_local.values, b_meas)
    # the equatorial cones keep the model's B_min
    np.testing.assert_allclose(lc.blc_equatorial.values,
                               _asin_deg(b0_2020 / L**3 / _dipole_foot_b(L, 100.0, b0_2020)),
                               rtol=1e-10)


def test_sample_below_the_footpoint_altitude_has_a_90_degree_cone():
    # L = 2: the 100 km footpoint is at 44.55 deg, the surface at 45 deg; at 44.8 deg the
    # sample is ~45 km up, below the loss altitude: every particle is lost (ratio > 1)
    ds = make_ds(np.ones((2, 1, 6)), EDGES, L=2.0, mlat=[44.8, 44.0])
    lc = _cones(ds)
    assert float(lc.blc_local[0]) == 90.0
    assert float(lc.blc_local[1]) < 90.0  # nudge: just above the footpoint it is not
    # a line whose apex does not reach the loss altitude is refused, with the fix
    bad = make_ds(np.ones((1, 1, 6)), EDGES, L=1.01, mlat=0.0)
    with pytest.raises(PhysicsError, match=r"needs L >= 1\.0157.*Lower altitude_km"):
        _cones(bad)


def test_declared_l_definition_on_the_dipole_path():
    ds = make_ds(np.ones((2, 1, 6)), EDGES, L=4.0, mlat=0.0)
    before = ds.copy(deep=True)
    for ok in ("dipole", "Centred_Dipole", "centered_dipole"):
        ds["L"].attrs["L_definition"] = ok
        assert float(_cones(ds).blc_local[0]) > 0
    ds["L"].attrs["L_definition"] = "mcilwain"
    with pytest.raises(ConventionError, match=r"L_definition is 'mcilwain'.*position_geo"):
        _cones(ds)
    # inputs are never modified (apart from the attribute this test set)
    ds["L"].attrs.pop("L_definition")
    xr.testing.assert_identical(ds, before)


def test_model_resolution_and_names():
    geo = make_ds(np.ones((1, 1, 6)), EDGES).drop_vars(["L", "mlat"])
    geo["position_geo"] = (("time", "xyz"), [[8000.0, 0.0, 0.0]], {"units": "km"})
    assert resolve_model(geo) == "igrf"
    assert resolve_model(make_ds(np.ones((1, 1, 6)), EDGES)) == "dipole"
    mine = IGRF(max_degree=3)
    assert resolve_model(geo, mine) is mine and resolve_model(geo, None) is None
    assert [model_name(m) for m in (None, "dipole", "igrf", mine)] == [
        "dipole", "dipole", "igrf", "igrf"]


def test_low_altitude_note_of_the_dipole():
    # altitude of a dipole sample: a (L cos^2(mlat) - 1)
    L = np.array([1.2, 1.3, 1.4, np.nan])  # 1274, 1911, 2548 km at the equator
    ds = make_ds(np.ones((4, 1, 6)), EDGES, L=np.nan_to_num(L, nan=2.0), mlat=0.0)
    ds["L"].values[3] = np.nan
    prep = check(ds, check_values=False)
    alt = A_KM * (L - 1.0)
    n_low = int(np.sum(alt < LOW_ALTITUDE_KM))
    assert n_low == 2
    note = dipole_low_altitude_note(ds, prep, "dipole")
    assert note.startswith(f"{n_low} of 3 samples lie below 2000 km altitude")
    assert "no quasi-trapped population" in note and "model='igrf'" in note
    assert dipole_low_altitude_note(ds, prep, None) == note
    assert dipole_low_altitude_note(ds, prep, "igrf") == ""  # only the dipole lacks it
    # nudge: 2,001 km is not low
    high = make_ds(np.ones((1, 1, 6)), EDGES, L=1.0 + 2001.0 / A_KM, mlat=0.0)
    assert dipole_low_altitude_note(high, check(high), "dipole") == ""
    # from GEO positions: altitude |r| - a
    geo = make_ds(np.ones((2, 1, 6)), EDGES).drop_vars(["L", "mlat"])
    geo["position_geo"] = (("time", "xyz"), [[A_KM + 1999.0, 0, 0], [0, 0, A_KM + 2001.0]],
                           {"units": "km"})
    assert dipole_low_altitude_note(geo, check(geo), "dipole").startswith("1 of 2 samples")


# ------------------------------------------------------------------ the IGRF path


class _PpigrfField:
    """ppigrf's IGRF-14 at one epoch: its coefficients and Legendre functions."""

    def __init__(self, when):
        g, h = ppi.read_shc()
        self.keys = list(g.columns)
        self.n = np.array([k[0] for k in self.keys], float)
        self.m = np.array([k[1] for k in self.keys], float)
        self.g = g.loc[when].to_numpy(float)
        self.h = h.loc[when].to_numpy(float)

    def spherical(self, xyz):
        """(Br, Btheta, Bphi) = -grad V, V = a sum (a/r)^(n+1) P_n^m (g cos + h sin)."""
        x, y, z = np.asarray(xyz, float).T
        r = np.sqrt(x * x + y * y + z * z)
        th, ph = np.arccos(z / r), np.arctan2(y, x)
        P, dP = ppi.get_legendre(np.degrees(th), self.keys)
        q = (A_KM / r[:, None]) ** (self.n + 2)
        c, s = np.cos(self.m * ph[:, None]), np.sin(self.m * ph[:, None])
        br = np.sum((self.n + 1) * q * P * (self.g * c + self.h * s), axis=1)
        bt = -np.sum(q * dP * (self.g * c + self.h * s), axis=1)
        bp = np.sum(q * self.m * P * (self.g * s - self.h * c), axis=1) / np.sin(th)
        return br, bt, bp, th, ph

    def __call__(self, xyz):
        br, bt, bp, th, ph = self.spherical(xyz)
        bs = br * np.sin(th) + bt * np.cos(th)
        return np.stack([bs * np.cos(ph) - bp * np.sin(ph), bs * np.sin(ph) + bp * np.cos(ph),
                         br * np.cos(th) - bt * np.sin(th)], axis=-1)


def _trace_footpoints(field, start, r_stop, frac=0.1, slack_km=10.0):
    """RK4 along +B (north) and -B (south) to the sphere r_stop; footpoints and min |B|.

    Steps of ``frac`` r, shrinking to half the height above r_stop near the end; the
    crossing is interpolated linearly within the last (short) step. The minimum of |B|
    along the line is the vertex of a parabola through the three smallest samples.
    """
    n = len(start)
    x = np.concatenate([start, start]).astype(float)
    sign = np.repeat([1.0, -1.0], n)[:, None]
    done = np.zeros(2 * n, bool)
    foot = np.full((2 * n, 3), np.nan)
    path = [[(0.0, float(np.linalg.norm(field(start[i:i + 1]))))] for i in range(n)]
    s_along = np.zeros(2 * n)
    while not done.all():
        idx = np.flatnonzero(~done)
        xa, sa = x[idx], sign[idx]
        r = np.linalg.norm(xa, axis=1)
        h = np.minimum(frac * r, 0.5 * (r - r_stop) + slack_km)[:, None]

        def f(p, sa=sa):
            b = field(p)
            return sa * b / np.linalg.norm(b, axis=1, keepdims=True)

        k1 = f(xa)
        k2 = f(xa + 0.5 * h * k1)
        k3 = f(xa + 0.5 * h * k2)
        k4 = f(xa + h * k3)
        xn = xa + h * (k1 + 2 * k2 + 2 * k3 + k4) / 6.0
        rn = np.linalg.norm(xn, axis=1)
        cross = rn < r_stop
        w = ((r - r_stop) / (r - rn))[:, None]
        foot[idx[cross]] = (xa + w * (xn - xa))[cross]
        done[idx[cross]] = True
        x[idx] = xn
        s_along[idx] += h[:, 0]
        bn = np.linalg.norm(field(xn), axis=1)
        for j, i in enumerate(idx):
            path[i % n].append((float(sign[i, 0] * s_along[i]), float(bn[j])))
    b_min = np.empty(n)
    for i, pts in enumerate(path):
        s, b = np.array(sorted(pts)).T
        k = int(np.clip(np.argmin(b), 1, len(b) - 2))
        c = np.polyfit(s[k - 1:k + 2], b[k - 1:k + 2], 2)
        b_min[i] = c[2] - c[1] ** 2 / (4 * c[0])
    return foot[:n], foot[n:], b_min


@pytest.fixture(scope="module")
def igrf_case(tmp_path_factory):
    """Three samples at 2,000-3,000 km, the IGRF path of the partition, and ppigrf's lines."""
    lat = np.array([30.0, -30.0, 40.0])
    lon = np.array([10.0, -45.0, -100.0])  # Europe, the South Atlantic, North America
    pos = geodetic_to_geo(lat, lon, np.array([3000.0, 2500.0, 2000.0]))
    ds = make_ds(np.ones((3, 1, 6)), EDGES).drop_vars(["L", "mlat"])
    ds = ds.assign_coords(time=np.datetime64("2025-01-01T00:00:00", "ns")
                          + np.arange(3) * np.timedelta64(1, "s"))  # the IGRF-14 2025 epoch
    ds["position_geo"] = (("time", "xyz"), pos, {"units": "km"})
    # the drift-shell table behind dlc is built with a small grid (its default grid
    # costs ~15 s per epoch); the bounce cones compared here do not use it
    small = functools.partial(field_losscone.loss_cones,
                              l_values=np.array([1.5, 2.0, 3.0, 3.5]), n_lon=8)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(field_losscone, "loss_cones", small)
        mp.setenv("BELTKIT_CACHE_DIR", str(tmp_path_factory.mktemp("cache")))
        lc = _cones(ds, model="igrf")
    field = _PpigrfField(dt.datetime(2025, 1, 1))
    north, south, b_min = _trace_footpoints(field, pos, A_KM + 100.0)
    return {"pos": pos, "lc": lc, "field": field, "north": north, "south": south,
            "b_min": b_min}


def test_ppigrf_evaluator_is_ppigrf(igrf_case):
    # the summed gradient above reproduces ppigrf.igrf_gc at the samples
    pos = igrf_case["pos"]
    r = np.linalg.norm(pos, axis=1)
    ref = ppigrf.igrf_gc(r, np.degrees(np.arccos(pos[:, 2] / r)),
                         np.degrees(np.arctan2(pos[:, 1], pos[:, 0])), dt.datetime(2025, 1, 1))
    for a, b in zip(igrf_case["field"].spherical(pos)[:3], ref):
        np.testing.assert_allclose(a, b[0], rtol=0, atol=1e-6)


def test_igrf_cones_match_ppigrf_footpoint_fields(igrf_case):
    lc, field = igrf_case["lc"], igrf_case["field"]
    b_loc = np.linalg.norm(field(igrf_case["pos"]), axis=1)
    b_n = np.linalg.norm(field(igrf_case["north"]), axis=1)
    b_s = np.linalg.norm(field(igrf_case["south"]), axis=1)
    np.testing.assert_allclose(lc.b_local.values, b_loc, rtol=1e-6)
    # sin^2(alpha_N,S) = B_local / B_N,S; the bounce cone uses the weaker footpoint field
    cone_n, cone_s = _asin_deg(b_loc / b_n), _asin_deg(b_loc / b_s)
    # (the two tracers agree to ~1e-4 deg; a 10 km footpoint error would be ~0.02 deg)
    np.testing.assert_allclose(lc.loss_cone_north.values, cone_n, rtol=0, atol=2e-3)
    np.testing.assert_allclose(lc.loss_cone_south.values, cone_s, rtol=0, atol=2e-3)
    np.testing.assert_allclose(lc.blc_local.values, _asin_deg(b_loc / np.minimum(b_n, b_s)),
                               rtol=0, atol=2e-3)
    # the equatorial cone uses the line's minimum field
    np.testing.assert_allclose(lc.b_min.values, igrf_case["b_min"], rtol=1e-3)
    np.testing.assert_allclose(lc.blc_equatorial.values,
                               _asin_deg(igrf_case["b_min"] / np.minimum(b_n, b_s)),
                               rtol=0, atol=0.01)
    # the drift loss cone is never narrower than the bounce loss cone
    assert np.all(lc.dlc_local.values >= lc.blc_local.values - 1e-12)
    assert np.all(lc.dlc_equatorial.values >= lc.blc_equatorial.values - 1e-12)
    # nudge: the two hemispheres differ by far more than the tolerance (north and south
    # swapped would fail); over the South Atlantic the southern cone is the wider one
    assert np.min(np.abs(cone_n - cone_s)) > 0.5
    assert cone_s[1] > cone_n[1] + 5.0
    # the model's own L, mlat and mlt come out where the data have none
    assert np.all(np.isfinite(lc.L.values)) and np.all(np.isfinite(lc.mlt.values))
