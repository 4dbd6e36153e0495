"""The field-model path of the partition (beltkit.field.loss_cones) vs dipole closed forms."""

import numpy as np
import pytest
from _flux_factory import make_ds

from beltkit import dipole
from beltkit.constants import R_E_KM
from beltkit.field import CenteredDipole, convert
from beltkit.pad import partition, to_equatorial

EDGES = np.linspace(0.0, 180.0, 13)
L = np.array([2.0, 3.0, 4.0, 6.0])
MLAT = np.array([0.0, 10.0, -20.0, 30.0])
MLT = np.array([0.0, 6.0, 12.0, 18.0])


def test_traced_centred_dipole_matches_the_closed_forms():
    ds = make_ds(np.ones((4, 1, 12)), EDGES, L=L, mlat=MLAT, mlt=MLT)
    closed = partition(ds)
    traced = partition(ds, model=CenteredDipole())
    for name in ("blc_local", "dlc_local", "blc_equatorial", "loss_cone_north",
                 "loss_cone_south"):
        np.testing.assert_allclose(traced[name].values, closed[name].values, rtol=1e-6,
                                   err_msg=name)
    np.testing.assert_allclose(traced.fraction_precipitating.values,
                               closed.fraction_precipitating.values, rtol=1e-6)
    assert traced.attrs["beltkit_field_model"] == CenteredDipole().name


def test_geographic_position_gets_l_and_cones_from_the_model():
    time = np.datetime64("2026-06-01T00:00:00", "ns") + np.arange(4) * np.timedelta64(1, "s")
    model = CenteredDipole()
    # positions on dipole lines in SM coordinates (r = L cos^2 lambda), converted to GEO
    r = np.asarray(dipole.radius(L, MLAT)) * R_E_KM
    lam, phi = np.radians(MLAT), np.radians((MLT - 12.0) * 15.0)
    sm = np.stack([r * np.cos(lam) * np.cos(phi), r * np.cos(lam) * np.sin(phi),
                   r * np.sin(lam)], axis=-1)
    geo = np.asarray(convert(sm, time, "SM", "GEO", model=model))
    ds = make_ds(np.ones((4, 1, 12)), EDGES, L=L, mlat=MLAT).drop_vars(["L", "mlat"])
    ds["position_geo"] = (("time", "xyz"), geo, {"units": "km"})
    out = partition(ds, model=model)
    # dipole closed forms (beltkit.dipole) for the same field lines
    np.testing.assert_allclose(out.blc_local.values, dipole.local_loss_cone(L, MLAT), rtol=1e-6)
    np.testing.assert_allclose(out.blc_equatorial.values, dipole.bounce_loss_cone(L), rtol=1e-6)
    np.testing.assert_allclose(out.L.values, L, rtol=1e-3)  # McIlwain L = dipole L in a dipole
    np.testing.assert_allclose(out.mlat.values, MLAT, atol=1e-6)


def test_igrf_drift_loss_cone_gives_a_quasi_trapped_population():
    # low L: the drift loss cone exceeds the bounce loss cone (common practice), so isotropic
    # flux has a quasi-trapped fraction equal to the solid-angle fraction between the cones,
    # cos(alpha_B) - cos(alpha_D) (spherical geometry)
    ds = make_ds(np.ones((3, 1, 12)), EDGES, L=[1.4, 1.6, 2.0], mlat=[0.0, 5.0, -5.0],
                 mlt=[3.0, 9.0, 20.0])
    out = partition(ds, model="igrf")
    blc, dlc = np.radians(out.blc_local.values), np.radians(out.dlc_local.values)
    assert (dlc > blc).all()
    np.testing.assert_allclose(out.fraction_quasi_trapped.values[:, 0],
                               np.cos(blc) - np.cos(dlc), rtol=1e-12)
    np.testing.assert_allclose(out.blc_local.values,
                               np.maximum(out.loss_cone_north, out.loss_cone_south).values,
                               rtol=1e-12)
    # the equatorial mapping uses the same model's B_min / B_local
    eq = to_equatorial(ds, model="igrf", alpha_eq_deg=[10.0, 45.0])
    assert np.all(eq.b_min.values <= eq.b_local.values * (1 + 1e-9))
    assert float(eq.flux_equatorial[0, 0, 0]) == pytest.approx(1.0)
