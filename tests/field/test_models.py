"""The field-model objects of beltkit.field.models against outside references.

References used here:
* ppigrf 2.1 (package index): an independent IGRF evaluator (``igrf_gc``, geocentric
  spherical components) and its copy of the IAGA IGRF-14 coefficient table
  (``ppigrf.ppigrf.read_shc``), from which the first-degree Gauss coefficients
  g10, g11, h11 are taken here.
* The centred dipole in closed form (Roederer 1970, Dynamics of Geomagnetically
  Trapped Radiation, ch. 1): with lambda the latitude from the dipole equator,
  B_r = -2 B0 (a/r)^3 sin(lambda), B_lambda = B0 (a/r)^3 cos(lambda),
  |B| = B0 (a/r)^3 sqrt(1 + 3 sin^2(lambda)), B0 = sqrt(g10^2 + g11^2 + h11^2),
  axis towards the northern geomagnetic pole -(g11, h11, g10) / B0.
* beltkit.dipole's closed forms (themselves checked in tests/dipole/test_dipole.py).
* The IGRF time interpolation: linear in the decimal year between 5-year epochs
  (IAGA IGRF-14 release notes; common practice).
"""

import datetime as dt

import numpy as np
import ppigrf
import pytest
from ppigrf.ppigrf import read_shc

from beltkit import dipole
from beltkit.constants import B0_NT, R_E_KM
from beltkit.errors import FieldModelError
from beltkit.field import IGRF, CenteredDipole, FieldModel, as_model
from beltkit.field.models import dipole_coefficients, model_inside

A_KM = 6371.2  # IGRF reference radius (IAGA IGRF-14), retyped here as the outside value


@pytest.fixture(scope="module")
def shc():
    """ppigrf's IGRF-14 table: epoch years and the first-degree coefficients (nT)."""
    g, h = read_shc()
    years = np.array([t.year for t in g.index], float)  # rows at 1 January of each epoch
    return {"years": years, "g10": g[(1, 0)].to_numpy(float), "g11": g[(1, 1)].to_numpy(float),
            "h11": h[(1, 1)].to_numpy(float)}


def _first_degree(shc, years):
    """g10, g11, h11 linear in the decimal year between the epochs (IGRF convention)."""
    return tuple(np.interp(years, shc["years"], shc[k]) for k in ("g10", "g11", "h11"))


def _decimal_year(times):
    """Calendar decimal year written out: Y + elapsed / length of year Y."""
    t = np.asarray(times, "datetime64[ns]")
    y0 = t.astype("datetime64[Y]")
    start = y0.astype("datetime64[ns]")
    stop = (y0 + np.timedelta64(1, "Y")).astype("datetime64[ns]")
    return y0.astype(float) + 1970.0 + (t - start) / (stop - start)


def _ppigrf_date(t):
    """The datetime at which ppigrf's interpolation equals the IGRF's at decimal year t.

    ppigrf interpolates linearly in elapsed time between the 1 January dates of the
    epochs; IGRF is linear in the decimal year. Both are linear on each 5-year piece,
    so the same fraction of the piece gives the same coefficients.
    """
    e0 = 1900 + 5 * min(int((t - 1900.0) // 5.0), 25)
    d0, d1 = dt.datetime(e0, 1, 1), dt.datetime(e0 + 5, 1, 1)
    return d0 + (t - e0) / 5.0 * (d1 - d0)


def _ppigrf_geo(xyz, t, max_degree=13):
    """ppigrf's field at GEO points (km), rotated from (Br, Btheta, Bphi) to Cartesian."""
    x, y, z = xyz[:, 0], xyz[:, 1], xyz[:, 2]
    r = np.sqrt(x * x + y * y + z * z)
    th = np.arccos(z / r)
    ph = np.arctan2(y, x)
    br, bt, bp = (c[0] for c in ppigrf.igrf_gc(r, np.degrees(th), np.degrees(ph),
                                               _ppigrf_date(t), max_degree=max_degree))
    bs = br * np.sin(th) + bt * np.cos(th)  # cylindrical radial part
    return np.stack([bs * np.cos(ph) - bp * np.sin(ph), bs * np.sin(ph) + bp * np.cos(ph),
                     br * np.cos(th) - bt * np.sin(th)], axis=-1)


def _random_points(rng, n, r_min_km=A_KM + 50.0, r_max_km=8.0 * A_KM):
    u = rng.normal(size=(n, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    return u * rng.uniform(r_min_km, r_max_km, n)[:, None]


def test_igrf_at_random_points_and_per_sample_times_matches_ppigrf():
    rng = np.random.default_rng(14)
    years = np.sort(rng.uniform(1950.0, 2029.9, 5))
    xyz = _random_points(rng, 5 * 40)
    times = np.repeat(years, 40)  # a different time per block of samples: the per-sample path
    ours = IGRF().field_geo(xyz, times)
    ref = np.concatenate([_ppigrf_geo(xyz[k * 40:(k + 1) * 40], t) for k, t in enumerate(years)])
    err = np.abs(ours - ref)
    assert err.max() < 0.1  # nT; ppigrf and beltkit share the IAGA table, not the code
    # nudge: half a year of secular variation (tens of nT near the surface) is seen
    shifted = IGRF().field_geo(xyz, times + 0.5)
    assert np.abs(shifted - ref).max() > 5.0


def test_igrf_one_time_and_datetime_inputs_match_ppigrf():
    rng = np.random.default_rng(3)
    xyz = _random_points(rng, 300)
    when = np.datetime64("2023-08-17T06:00")
    t = float(_decimal_year(when))
    ref = _ppigrf_geo(xyz, t)
    for spelling in (when, "2023-08-17T06:00", dt.datetime(2023, 8, 17, 6), t):
        np.testing.assert_allclose(IGRF().field_geo(xyz, spelling), ref, rtol=0, atol=0.1)
    # the same time repeated per sample takes the one-time path: identical numbers
    np.testing.assert_array_equal(IGRF().field_geo(xyz, np.full(300, t)),
                                  IGRF().field_geo(xyz, t))
    # a shape (3,) point gives a (3,) field
    assert IGRF().field_geo(xyz[0], t).shape == (3,)


@pytest.mark.parametrize("degree", [1, 2, 6])
def test_truncated_igrf_matches_ppigrf_truncation(degree):
    rng = np.random.default_rng(degree)
    xyz = _random_points(rng, 200)
    ref = _ppigrf_geo(xyz, 2017.4, max_degree=degree)
    got = IGRF(max_degree=degree).field_geo(xyz, 2017.4)
    np.testing.assert_allclose(got, ref, rtol=0, atol=0.05)
    # nudge: one degree more changes the field by far more than the tolerance
    more = IGRF(max_degree=degree + 1).field_geo(xyz, 2017.4)
    assert np.abs(more - ref).max() > 10.0


def test_dipole_coefficients_b0_and_axis_from_the_iagatable(shc):
    rng = np.random.default_rng(1)
    years = rng.uniform(1900.0, 2030.0, 50)
    g10, g11, h11 = _first_degree(shc, years)
    got = dipole_coefficients(years)
    for a, b in zip(got, (g10, g11, h11)):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-9)
    b0 = np.sqrt(g10**2 + g11**2 + h11**2)
    for model in (CenteredDipole(), IGRF()):
        np.testing.assert_allclose(model.dipole_b0_nt(years), b0, rtol=1e-12)
        axis = model.dipole_axis_geo(years)
        np.testing.assert_allclose(axis, -np.stack([g11, h11, g10], -1) / b0[:, None],
                                   rtol=0, atol=1e-12)
    # 2020: the northern geomagnetic pole near 80.6 N, 72.7 W (from memory; the table's
    # own numbers above are the check that matters)
    ax = CenteredDipole().dipole_axis_geo(2020.0)
    assert np.degrees(np.arcsin(ax[2])) == pytest.approx(80.6, abs=0.1)
    assert np.degrees(np.arctan2(ax[1], ax[0])) == pytest.approx(-72.7, abs=0.1)
    # the package's default B0 is the 2020 dipole of the same table
    i2020 = int(np.flatnonzero(shc["years"] == 2020.0)[0])
    assert B0_NT == pytest.approx(float(np.sqrt(shc["g10"][i2020] ** 2 + shc["g11"][i2020] ** 2
                                                + shc["h11"][i2020] ** 2)), rel=1e-12)
    assert R_E_KM == A_KM


def test_centred_dipole_against_the_closed_form(shc):
    rng = np.random.default_rng(2)
    xyz = _random_points(rng, 500, r_max_km=10.0 * A_KM)
    years = rng.uniform(1990.0, 2029.0, 500)
    g10, g11, h11 = _first_degree(shc, years)
    b0 = np.sqrt(g10**2 + g11**2 + h11**2)
    axis = -np.stack([g11, h11, g10], -1) / b0[:, None]
    r = np.linalg.norm(xyz, axis=1)
    rhat = xyz / r[:, None]
    sin_lat = np.sum(rhat * axis, axis=1)  # magnetic latitude from the dipole equator
    cos_lat = np.sqrt(1.0 - sin_lat**2)
    scale = b0 * (A_KM / r) ** 3
    b = CenteredDipole().field_geo(xyz, years)
    # |B| = B0 (a/r)^3 sqrt(1 + 3 sin^2 lat) (Roederer 1970)
    np.testing.assert_allclose(np.linalg.norm(b, axis=1), scale * np.sqrt(1 + 3 * sin_lat**2),
                               rtol=1e-12)
    # components: radial -2 B0 (a/r)^3 sin(lat); northward (towards the axis) B0 (a/r)^3 cos(lat)
    north = axis - sin_lat[:, None] * rhat
    north /= np.linalg.norm(north, axis=1, keepdims=True)
    np.testing.assert_allclose(np.sum(b * rhat, 1), -2 * scale * sin_lat, rtol=1e-10,
                               atol=1e-9 * scale.max())
    np.testing.assert_allclose(np.sum(b * north, 1), scale * cos_lat, rtol=1e-10,
                               atol=1e-9 * scale.max())
    # and the degree-1 IGRF is the same field (the dipole is the n = 1 potential)
    np.testing.assert_allclose(IGRF(max_degree=1).field_geo(xyz, years), b, rtol=1e-10,
                               atol=1e-9)


def test_centred_dipole_equals_beltkit_dipole_on_field_lines():
    # on the line r = L a cos^2(mlat) of the 2020 dipole, |B| is beltkit.dipole's
    # B0/L^3 sqrt(1 + 3 sin^2)/cos^6 with its default B0 (the 2020 dipole)
    model = CenteredDipole(epoch=2020.0)
    axis = model.dipole_axis_geo(2020.0)
    e1 = np.cross(axis, [0.0, 0.0, 1.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(axis, e1)
    rng = np.random.default_rng(5)
    L = rng.uniform(1.2, 8.0, 200)
    foot = np.degrees(np.arccos(np.sqrt(1.05 / L)))  # stay above the surface
    mlat = rng.uniform(-1.0, 1.0, 200) * foot
    mlon = rng.uniform(0.0, 2 * np.pi, 200)
    lam = np.radians(mlat)
    r = L * A_KM * np.cos(lam) ** 2
    xyz = r[:, None] * (np.cos(lam)[:, None] * (np.cos(mlon)[:, None] * e1
                                                + np.sin(mlon)[:, None] * e2)
                        + np.sin(lam)[:, None] * axis)
    got = np.linalg.norm(model.field_geo(xyz, "2027-01-01"), axis=1)  # frozen: time ignored
    np.testing.assert_allclose(got, dipole.field_magnitude(L, mlat), rtol=1e-12)
    # nudge: the dipole of 2027 (not frozen) is weaker by ~0.1 %, outside the tolerance
    live = np.linalg.norm(CenteredDipole().field_geo(xyz, "2027-01-01"), axis=1)
    assert np.max(np.abs(live / got - 1.0)) > 5e-4


def test_frozen_and_live_epochs_and_cache_keys():
    frozen = CenteredDipole(epoch="2020-01-01")
    assert frozen.epoch == 2020.0 and repr(frozen) == "CenteredDipole(epoch=2020.0)"
    x = np.array([[2 * A_KM, 0.0, 0.0], [0.0, 0.0, 3 * A_KM]])
    np.testing.assert_array_equal(frozen.field_geo(x, 2029.0), frozen.field_geo(x, 1990.0))
    np.testing.assert_array_equal(frozen.dipole_axis_geo(1990.0),
                                  CenteredDipole().dipole_axis_geo(2020.0))
    assert frozen.epoch_key("2029-06-01") == "dipole@2020.0"
    live = CenteredDipole()
    assert live.epoch_key(2024.53) == "dipole@2024.5"
    assert list(live.epoch_key([2024.53, 2024.57])) == ["dipole@2024.5", "dipole@2024.6"]
    assert IGRF(max_degree=10).epoch_key(2024.53) == "igrf14-n10@2024.5"
    assert live.cache_epoch(2024.53) == pytest.approx(2024.5)


def test_nan_points_and_times_give_nan_fields():
    x = np.array([[np.nan, 0.0, 0.0], [7000.0, 0.0, 0.0]])
    for model in (CenteredDipole(), IGRF()):
        b = model.field_geo(x, 2020.0)
        assert np.isnan(b[0]).all() and np.isfinite(b[1]).all()
        assert np.isnan(model.field_geo(x[1], np.datetime64("NaT"))).all()
    np.testing.assert_array_equal(model_inside(IGRF(), x, 2020.0), [False, True])


@pytest.mark.parametrize("model", [CenteredDipole(), IGRF()])
def test_refusals(model):
    # R_E units given as km put the point inside the Earth: refused with the fix
    with pytest.raises(FieldModelError, match=r"inside the Earth.*multiply R_E values by 6371.2"):
        model.field_geo(np.array([1.5, 0.0, 0.0]), 2020.0)
    # outside IGRF-14's 1900-2030 only on request
    with pytest.raises(FieldModelError, match=r"1899\.5.*allow_extrapolation=True"):
        model.field_geo(np.array([7000.0, 0.0, 0.0]), 1899.5)
    with pytest.raises(FieldModelError, match=r"argument 'time'"):
        model.field_geo(np.array([7000.0, 0.0, 0.0]), "not a time")
    far = type(model)(allow_extrapolation=True).field_geo(np.array([7000.0, 0.0, 0.0]), 2031.0)
    assert np.isfinite(far).all()


def test_constructor_refusals():
    for bad in (0, 14, 2.5):
        with pytest.raises(FieldModelError, match=r"'max_degree' must be an integer 1-13"):
            IGRF(max_degree=bad)
    for bad in ([2020.0, 2021.0], np.nan):
        with pytest.raises(FieldModelError, match=r"'epoch' must be one finite time"):
            CenteredDipole(epoch=bad)
    with pytest.raises(FieldModelError, match=r"1800\.0000 is outside"):
        CenteredDipole(epoch=1800.0)


def test_as_model():
    assert isinstance(as_model(None), CenteredDipole) and as_model(None).epoch is None
    for name in ("dipole", " Centred_Dipole ", "centered_dipole"):
        assert isinstance(as_model(name), CenteredDipole)
    for name in ("igrf", "IGRF-14", "igrf14"):
        m = as_model(name)
        assert isinstance(m, IGRF) and m.max_degree == 13
    mine = IGRF(max_degree=5)
    assert as_model(mine) is mine and isinstance(mine, FieldModel)
    with pytest.raises(FieldModelError, match=r"unknown field model 't96'.*'dipole', 'igrf'"):
        as_model("t96")
    with pytest.raises(FieldModelError, match=r"must be None, 'dipole', 'igrf' or a FieldModel.*"
                                              r"got object"):
        as_model(object())


def test_a_frozen_dipole_keeps_the_shape_of_the_times():
    # the docstrings promise (..., 3) axes and B0 per time for frozen and live dipoles alike
    # (found by the mirror tests: a frozen model returned one axis for many times)
    t = np.array([1990.0, 2029.0])
    frozen, live = CenteredDipole(epoch=2020.0), CenteredDipole()
    assert frozen.dipole_axis_geo(t).shape == live.dipole_axis_geo(t).shape == (2, 3)
    assert np.shape(frozen.dipole_b0_nt(t)) == (2,)
    np.testing.assert_array_equal(frozen.dipole_axis_geo(t)[0], frozen.dipole_axis_geo(t)[1])
