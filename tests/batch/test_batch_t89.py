"""The storm-time field in batch: ``summarize(model="t89", kp=...)`` and ``--field t89``.

The T89 model itself is checked against the geopack reference implementation
in test_field_t89.py; here the batch layer must hand each file the model the
caller asked for, with Kp from a value, a series file or a variable of the file,
and record it. The reference is the library call on the same data
(``pad.partition(model=T89(kp))``).
"""

import numpy as np
import pytest
import xarray as xr

from beltkit import batch, pad
from beltkit.cli import main
from beltkit.field import T89, read_kp

DUNLIN = "data_demo/marram_dunlin_quill_synthetic_20270309.nc"

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def small_file(tmp_path_factory):
    """50 samples of the demo's low-orbit satellite within one UTC hour, with a Kp variable."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    ds = xr.open_dataset(root / DUNLIN).isel(time=slice(0, 3000, 60)).load()
    ds["kp_index"] = ("time", np.full(ds.sizes["time"], 3.0), {"units": "1",
                                                                "long_name": "Kp index"})
    path = tmp_path_factory.mktemp("t89") / "dunlin_small.nc"
    ds.to_netcdf(path)
    return path, ds


def _summary(path):
    with xr.open_dataset(path) as f:
        return f.load()


def test_summary_equals_the_library_partition_in_t89(small_file, tmp_path):
    path, ds = small_file
    res = batch.summarize([path], tmp_path / "fixed", model="t89", kp=3.0)
    assert [r.status for r in res] == ["ok"]
    out = _summary(res[0].output)
    ref = pad.partition(ds, model=T89(kp=3.0), hemispheres=True)
    for name in ("dlc_local", "blc_local", "fraction_quasi_trapped", "flux_trapped"):
        np.testing.assert_allclose(out[name].values, ref[name].values, rtol=1e-6,
                                   equal_nan=True, err_msg=name)
    assert out.attrs["field_model"] == "t89"
    assert out.attrs["field_kp"] == "3 for every sample"
    # the storm-time field gives the low-orbit sample a quasi-trapped population (IGRF-like)
    assert np.nanmax(out["fraction_quasi_trapped"].values) > 0.1
    # a rerun is up to date; another Kp redoes the file
    assert [r.status for r in batch.summarize([path], tmp_path / "fixed", model="t89",
                                              kp=3.0)] == ["skipped"]
    assert [r.status for r in batch.summarize([path], tmp_path / "fixed", model="t89",
                                              kp=3.3)] == ["ok"]


def test_kp_from_a_variable_and_from_a_series_file_match_the_value(small_file, tmp_path):
    path, _ = small_file
    csv = tmp_path / "kp.csv"
    csv.write_text("time,kp\n2027-03-09T06:00,3\n")
    series = read_kp(csv)
    fixed = _summary(batch.summarize([path], tmp_path / "a", model="t89", kp=3.0)[0].output)
    by_var = _summary(batch.summarize([path], tmp_path / "b", model="t89",
                                      kp="kp_index")[0].output)
    by_series = _summary(batch.summarize([path], tmp_path / "c", model="t89",
                                         kp=series)[0].output)
    for other in (by_var, by_series):
        np.testing.assert_array_equal(other["dlc_local"].values, fixed["dlc_local"].values)
    assert "kp_index" in by_var.attrs["field_kp"]
    assert "series of 1 values" in by_series.attrs["field_kp"]


def test_a_missing_kp_variable_fails_that_file_alone(small_file, tmp_path):
    path, _ = small_file
    res = batch.summarize([path], tmp_path / "m", model="t89", kp="no_such_kp")
    assert res[0].status == "failed" and "no_such_kp" in res[0].reason


@pytest.mark.parametrize(("argv", "needle"), [
    (["--field", "t89"], "--field t89 needs Kp"),
    (["--field", "igrf", "--kp", "3"], "apply with --field t89 only"),
    (["--field", "t89", "--kp", "12"], "Kp value 0-9"),
    (["--field", "t89", "--kp", "missing.csv"], "no such file"),
    (["--field", "t89", "--kp", "3", "--kp-variable", "kp_index"], "not both"),
])
def test_command_line_kp_mistakes_are_one_line_and_write_nothing(small_file, tmp_path, capsys,
                                                                 argv, needle):
    path, _ = small_file
    out = tmp_path / "cli"
    assert main(["summarize", str(path), "--out", str(out), *argv]) == 1
    assert needle in capsys.readouterr().err
    assert not out.exists()


def test_command_line_t89_with_a_kp_file(small_file, tmp_path, capsys):
    path, _ = small_file
    csv = tmp_path / "kp.csv"
    csv.write_text("# Kp, 3-hour values\ntime,kp\n2027-03-09T06:00,3\n")
    assert main(["summarize", str(path), "--out", str(tmp_path / "s"), "--field", "t89",
                 "--kp", str(csv)]) == 0
    out = _summary(tmp_path / "s" / "dunlin_small.summary.nc")
    assert out.attrs["field_model"] == "t89" and "series" in out.attrs["field_kp"]
