"""Reading a user's Kp series (beltkit.field.read_kp) for the T89 model.

References: the Kp thirds notation N-, N, N+ = N - 1/3, N, N + 1/3 (common
practice for the index); ISO 8601 for the times; netCDF written by xarray
(PyPI) in tmp_path. Every file is built here.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from beltkit.errors import FieldModelError
from beltkit.field import T89, read_kp


def _write(tmp_path, text, name="kp.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_csv_with_header_thirds_and_numbers(tmp_path):
    p = _write(tmp_path, "time,kp\n# a comment\n2027-03-08T00:00Z,2-\n"
                         "2027-03-08 03:00:00,2\n\n2027-03-08T06:00+00:00,2+\n"
                         "2027-03-08T09:00,5.333\n2027-03-08T12:00,nan\n")
    kp = read_kp(p)
    assert kp.dims == ("time",) and kp.attrs["units"] == "1" and kp.name == "kp"
    np.testing.assert_allclose(kp.values[:4], [5 / 3, 2.0, 7 / 3, 5.333], rtol=0, atol=1e-12)
    assert np.isnan(kp.values[4])
    assert kp.time.values[1] == np.datetime64("2027-03-08T03:00", "ns")
    # ready for the model: T89 levels follow the published bins (2- -> level 2, 5.333 -> 5)
    m = T89(kp=kp)
    assert m.levels(kp.time.values[:4]).tolist() == [2, 2, 2, 5]
    # nudge: a missing header is fine too, the same values come back
    q = _write(tmp_path, "2027-03-08T00:00,2-\n", "b.csv")
    assert read_kp(q).values[0] == pytest.approx(5 / 3, abs=1e-12)


@pytest.mark.parametrize(("text", "message"), [
    ("time,kp\n2027-03-08T00:00,3\n2027-03-08T03:00,30\n", "line 3: Kp 30 is outside 0-9"),
    ("2027-03-08T00:00,3\n2027-03-08T03:00,3 +\n", "line 2: Kp '3 +' is not a number"),
    ("2027-03-08T00:00,9+\n", "line 1: Kp '9+'"),
    ("2027-03-08T00:00,3\n2027-02-30T03:00,3\n", "line 2: '2027-02-30T03:00' is not an ISO"),
    ("2027-03-08T03:00,3\n2027-03-08T00:00,3\n", "line 2: time 2027-03-08T00:00 does not "
                                                  "follow"),
    ("2027-03-08T00:00,3,1\n", "line 1 has 3 column(s)"),
    ("2027-03-08T00:00+02:00,3\n", "UTC offset +02:00: give UTC times"),
    ("time,kp\n", "holds no Kp values"),
])
def test_csv_refusals_name_file_line_and_fix(tmp_path, text, message):
    p = _write(tmp_path, text)
    with pytest.raises(FieldModelError) as err:
        read_kp(p)
    msg = str(err.value)
    assert msg.startswith(str(p)) and message in msg
    assert ";" in msg  # the fix follows the problem


def test_missing_file_is_named(tmp_path):
    with pytest.raises(FileNotFoundError, match="nope.csv: no such Kp file"):
        read_kp(tmp_path / "nope.csv")


def test_netcdf_series_and_refusals(tmp_path):
    t = np.array(["2027-03-08T00:00", "2027-03-08T03:00", "2027-03-08T06:00"],
                 dtype="datetime64[ns]")
    good = tmp_path / "kp.nc"
    xr.Dataset({"Kp": ("time", [0.333, 4.0, 6.667])}, coords={"time": t}).to_netcdf(good)
    kp = read_kp(good)
    np.testing.assert_allclose(kp.values, [0.333, 4.0, 6.667])
    assert (kp.time.values == t).all() and kp.attrs["units"] == "1"
    assert T89(kp=kp).levels(t).tolist() == [0, 4, 6]
    bad = tmp_path / "x10.nc"
    xr.Dataset({"kp": ("time", [3.0, 40.0, 1.0])}, coords={"time": t}).to_netcdf(bad)
    with pytest.raises(FieldModelError, match=r"x10.nc: kp\[1\] = 40 is outside 0-9; .*Kp x 10"):
        read_kp(bad)
    none = tmp_path / "none.nc"
    xr.Dataset({"ap": ("time", [3.0, 4.0, 1.0])}, coords={"time": t}).to_netcdf(none)
    with pytest.raises(FieldModelError, match="none.nc: has no variable 'kp'"):
        read_kp(none)
    untimed = tmp_path / "untimed.nc"
    xr.Dataset({"kp": ("n", [3.0, 4.0, 1.0])}).to_netcdf(untimed)
    with pytest.raises(FieldModelError, match="no datetime coordinate"):
        read_kp(untimed)
