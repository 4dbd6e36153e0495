"""Which field model a partition uses: ``model="auto"``, the L definition and the low-orbit note.

References used here:
* ppigrf 2.1 (package index), an independent IGRF evaluator: the field
  magnitude at the sample proves the IGRF (not the dipole) was used.
* The solid angle of a pitch-angle zone, 2 pi (cos a1 - cos a2) (textbook):
  for isotropic flux the quasi-trapped fraction is cos(blc) - cos(dlc).
* The dipole field line r = L R_E cos^2(mlat) (textbook) for the altitude
  of a sample given by L and mlat.
"""

import datetime as dt

import numpy as np
import ppigrf
import pytest
import xarray as xr
from _flux_factory import flux_dataset

from beltkit import dipole, pad
from beltkit.constants import R_E_KM
from beltkit.errors import ConventionError
from beltkit.field.coords import geodetic_to_geo

# an exact IGRF epoch: ppigrf and beltkit need no time interpolation there
_T0 = "2025-01-01T00:00:00"


def _isotropic(n):
    """Isotropic flux (every bin 1) in pitch-angle bins covering the sphere."""
    ds = flux_dataset(n_time=n, n_pitch=36, start=_T0, cadence_s=60.0)
    ds["flux"] = xr.ones_like(ds["flux"])
    return ds.drop_vars([v for v in ("flux_err", "counts", "counts_to_flux") if v in ds])


def _low_orbit(lat, lon, height_km=650.0):
    """Isotropic flux at geodetic points at `height_km`, position in GEO only."""
    lat, lon = np.atleast_1d(lat).astype(float), np.atleast_1d(lon).astype(float)
    ds = _isotropic(lat.size).drop_vars(["L", "mlat", "mlt"])
    xyz = np.asarray(geodetic_to_geo(lat, lon, np.full(lat.size, height_km)))
    ds["position_geo"] = (("time", "xyz"), xyz, {"units": "km"})
    return ds, xyz


def test_auto_uses_the_igrf_where_the_data_carry_a_geographic_position():
    # Pacific (low L, far from the South Atlantic) and South Atlantic, 650 km
    ds, xyz = _low_orbit([10.0, -30.0], [-160.0, -40.0])
    out = pad.partition(ds)
    assert out.attrs["beltkit_field_model"] == "igrf"
    assert "beltkit_field_model_note" not in out.attrs
    # ppigrf (reference library): |B| at the samples, geocentric spherical input
    r = np.linalg.norm(xyz, axis=-1)
    colat = np.degrees(np.arccos(xyz[:, 2] / r))
    lon = np.degrees(np.arctan2(xyz[:, 1], xyz[:, 0]))
    when = dt.datetime(2025, 1, 1)
    b = [np.linalg.norm(np.ravel(ppigrf.igrf_gc(r[k], colat[k], lon[k], when)))
         for k in range(r.size)]
    np.testing.assert_allclose(out["b_local"].values, b, rtol=1e-6)
    # the centred dipole would have been more than 4 % off at both points (nudge)
    L = np.asarray(out["L"].values, float)
    lam = np.asarray(out["mlat"].values, float)
    assert np.all(np.abs(np.asarray(dipole.field_magnitude(L, lam)) / b - 1) > 0.04)
    # a non-empty quasi-trapped population, and for isotropic flux exactly its solid angle
    blc, dlc = out["blc_local"].values, out["dlc_local"].values
    assert dlc[0] > blc[0] + 10.0  # the Pacific sample drifts into the South Atlantic
    frac = out["fraction_quasi_trapped"].values
    expected = np.cos(np.radians(blc)) - np.cos(np.radians(dlc))
    # float32 flux gives float32 fractions: agreement to float32 rounding
    np.testing.assert_allclose(frac, np.broadcast_to(expected[:, None], frac.shape), atol=1e-6)
    assert frac[0, 0] > 0.1


def test_auto_uses_the_dipole_with_only_L_and_mlat_and_notes_low_orbits():
    ds = _isotropic(3)
    # r = L R_E cos^2(mlat): altitudes 1990 km, 2010 km (nudge around 2,000 km) and L = 4
    L = np.array([1 + 1990.0 / R_E_KM, 1 + 2010.0 / R_E_KM, 4.0])
    ds["L"] = ("time", L, {"units": "1"})
    ds["mlat"] = ("time", np.zeros(3), {"units": "degree"})
    out = pad.partition(ds)
    assert out.attrs["beltkit_field_model"] == "dipole"
    assert out.attrs["beltkit_field_model_note"].startswith("1 of 3 samples lie below 2000 km")
    np.testing.assert_array_equal(out["fraction_quasi_trapped"].values, 0.0)
    high = pad.partition(ds.isel(time=[1, 2]))
    assert "beltkit_field_model_note" not in high.attrs
    # an explicit model is honoured: the same file in the IGRF (position rebuilt from L, mlat, mlt)
    assert pad.partition(ds, model="igrf").attrs["beltkit_field_model"] == "igrf"


def test_a_slab_carries_the_note_its_caller_gives():
    """A file partitioned slab by slab gets the whole file's note (counted once)."""
    from beltkit.pad.partition import partition_slab

    ds = _isotropic(3)
    # r = L R_E cos^2(mlat) (textbook): altitudes 1990 km, then L = 3 and 4 (high)
    L = np.array([1 + 1990.0 / R_E_KM, 3.0, 4.0])
    ds["L"] = ("time", L, {"units": "1"})
    ds["mlat"] = ("time", np.zeros(3), {"units": "degree"})
    whole = pad.partition(ds).attrs["beltkit_field_model_note"]
    assert whole.startswith("1 of 3 samples lie below 2000 km")
    high = ds.isel(time=[1, 2])
    # a slab with no low sample carries the file's note when given it, and none of its own
    assert partition_slab(high, model_note=whole)[0].attrs["beltkit_field_model_note"] == whole
    assert "beltkit_field_model_note" not in partition_slab(high)[0].attrs
    assert "beltkit_field_model_note" not in partition_slab(ds, model_note="")[0].attrs


@pytest.mark.parametrize("declared", ["mcilwain", "McIlwain (IGRF + T89)", "roederer"])
def test_a_declared_non_dipole_L_is_refused_on_the_dipole_path(declared):
    ds = flux_dataset(n_time=5)
    ds["L"].attrs["L_definition"] = declared
    for model in ("auto", "dipole", None):
        with pytest.raises(ConventionError) as err:
            pad.partition(ds, model=model)
        text = str(err.value)
        assert f"L_definition is {declared!r}" in text
        assert "position_geo" in text and "model='igrf'" in text


def test_a_declared_dipole_L_and_other_ways_in_are_accepted():
    ds = flux_dataset(n_time=5, start=_T0)  # the epoch of the other IGRF tests: one table
    plain = pad.partition(ds)
    ds["L"].attrs["L_definition"] = "dipole"
    xr.testing.assert_identical(pad.partition(ds), plain)
    ds["L"].attrs["L_definition"] = "mcilwain"
    # a field model passed explicitly is the user's choice (the refusal names it as a way out)
    assert pad.partition(ds, model="igrf").attrs["beltkit_field_model"] == "igrf"
    # a geographic position next to the declared L: auto uses the IGRF there
    xyz = np.asarray(geodetic_to_geo(np.zeros(5), np.zeros(5), np.full(5, 20000.0)))
    ds["position_geo"] = (("time", "xyz"), xyz, {"units": "km"})
    assert pad.partition(ds).attrs["beltkit_field_model"] == "igrf"
