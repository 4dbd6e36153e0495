"""The public boundary shared by every physics function (beltkit._wrap)."""

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr

from beltkit._wrap import array_api, check_range
from beltkit.errors import PhysicsError


@array_api(units="keV", long_name="twice the energy")
def _double(energy_kev, factor=2.0):
    return np.asarray(energy_kev) * factor


@array_api(units=("nT", "degree"), long_name=("field", "angle"))
def _pair(b_nt, angle_deg):
    return np.asarray(b_nt) + 0 * np.asarray(angle_deg), np.asarray(angle_deg) + 0 * b_nt


def test_scalar_in_float_out():
    out = _double(3.0)
    assert isinstance(out, float) and out == 6.0


def test_array_broadcasting():
    out = _double(np.array([[1.0], [2.0]]), factor=np.array([1.0, 10.0]))
    np.testing.assert_array_equal(out, [[1.0, 10.0], [2.0, 20.0]])


def test_dataarray_in_dataarray_out_with_units():
    da = xr.DataArray([1.0, 2.0], dims="time", coords={"time": [0, 1]}, attrs={"units": "keV"})
    out = _double(da)
    assert isinstance(out, xr.DataArray)
    assert out.dims == ("time",) and list(out.time.values) == [0, 1]
    assert out.attrs == {"units": "keV", "long_name": "twice the energy"}
    np.testing.assert_array_equal(out.values, [2.0, 4.0])


def test_known_units_are_converted_and_input_untouched():
    # 1 MeV = 1000 keV (SI prefixes).
    da = xr.DataArray([1.0, 2.0], dims="time", attrs={"units": "MeV"})
    out = _double(da)
    np.testing.assert_allclose(out.values, [2000.0, 4000.0])
    assert da.attrs["units"] == "MeV" and da.values[0] == 1.0


def test_unknown_units_are_refused_naming_the_argument():
    da = xr.DataArray([1.0], dims="time", attrs={"units": "furlong"})
    with pytest.raises(PhysicsError, match="energy_kev"):
        _double(da)


def test_dask_stays_lazy():
    da = xr.DataArray(dsa.ones(10, chunks=5), dims="time", attrs={"units": "keV"})
    out = _double(da)
    assert isinstance(out.data, dsa.Array)
    np.testing.assert_array_equal(out.compute().values, np.full(10, 2.0))


def test_tuple_outputs_get_their_own_units():
    b = xr.DataArray([1.0], dims="x", attrs={"units": "nT"})
    out_b, out_a = _pair(b, 5.0)
    assert out_b.attrs["units"] == "nT" and out_a.attrs["units"] == "degree"
    assert out_a.attrs["long_name"] == "angle"


def test_check_range_ignores_nan_and_names_argument():
    check_range([1.0, np.nan, 3.0], "L", lo=1.0)
    with pytest.raises(PhysicsError, match=r"'L' must lie in \[1, inf\]; got 0.5"):
        check_range([np.nan, 0.5], "L", lo=1.0)
    with pytest.raises(PhysicsError, match="2 more"):
        check_range([-1.0, -2.0, -3.0], "energy_kev", lo=0.0)
    with pytest.raises(PhysicsError, match="numeric"):
        check_range("abc", "energy_kev", lo=0.0)
