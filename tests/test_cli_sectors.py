"""`beltkit bin-sectors`: sectored files -> pitch-angle files, chained into `summarize`.

The command is driven through `beltkit.cli.main` on files in tmp_path (the astropy-script
pattern of STYLE.md); the reference is the same computation in Python
(`beltkit.pad.bin_sectors` then `beltkit.batch.summarize_dataset`), which the chained
summary must equal, and the batch contract of `summarize` (one FAILED line per bad file,
skipped when up to date, no temporary left behind).
"""

import numpy as np
import pytest
import xarray as xr

from beltkit import cli, demo
from beltkit.batch import summarize_dataset
from beltkit.demo import sectors as demo_sectors
from beltkit.io import write_dataset
from beltkit.pad import bin_sectors, validate

EDGES = [0.0, 10.0, 30.0, 60.0, 90.0, 120.0, 150.0, 170.0, 180.0]


@pytest.fixture(scope="module")
def sectored():
    return demo_sectors.sectored_day(flux_model=demo.tern_flux_model, n_times=40)


def test_chain_equals_python_and_batch_safety(sectored, tmp_path, capsys):
    src = tmp_path / "raw"
    good = write_dataset(sectored, src / "tern_sectors_a.nc")
    write_dataset(sectored.drop_vars("b_vector"), src / "tern_sectors_broken.nc")
    pad, sums = tmp_path / "pad", tmp_path / "sums"
    argv = ["bin-sectors", str(src), "--out", str(pad), "--edges", *map(str, EDGES),
            "--summarize", str(sums), "--summary-field", "dipole"]
    assert cli.main(argv) == 1  # one file failed
    out = capsys.readouterr().out
    assert "FAILED" in out and "tern_sectors_broken.nc" in out and "b_vector" in out
    pad_file = pad / "tern_sectors_a.pad.nc"
    summary_file = sums / "tern_sectors_a.pad.summary.nc"
    assert pad_file.is_file() and summary_file.is_file()
    assert not (pad / "tern_sectors_broken.pad.nc").exists()
    assert sorted(p.name for p in pad.iterdir()) == ["run-report.jsonl", pad_file.name]
    # the chained summary equals binning in Python and summarising
    with xr.open_dataset(good) as ds:
        binned = bin_sectors(ds, EDGES)
    ref = summarize_dataset(binned, model="dipole")
    with xr.open_dataset(summary_file) as got, xr.open_dataset(pad_file) as p:
        assert validate(p) == []
        np.testing.assert_array_equal(p["flux"].values, binned["flux"].values)
        for name in ("fraction_trapped", "flux_precipitating", "omni_flux"):
            np.testing.assert_allclose(got[name].values, ref[name].values, rtol=1e-6,
                                       equal_nan=True)
        # nudge: other bins give another summary
        other = summarize_dataset(bin_sectors(sectored, np.linspace(0, 180, 13)),
                                  model="dipole")
        assert np.nanmax(np.abs(got["flux_precipitating"].values
                                - other["flux_precipitating"].values)) > 0
    # resumable: nothing is redone
    assert cli.main(argv) == 1
    again = capsys.readouterr().out
    assert "skipped" in again and "up to date" in again


def test_bad_edges_are_refused_before_anything_runs(sectored, tmp_path, capsys):
    src = write_dataset(sectored.isel(time=slice(0, 3)), tmp_path / "raw" / "x.nc")
    code = cli.main(["bin-sectors", str(src), "--out", str(tmp_path / "pad"),
                     "--edges", "0", "90", "45"])
    assert code != 0
    assert not (tmp_path / "pad" / "x.pad.nc").exists()
    assert "edges" in capsys.readouterr().err
