"""``beltkit psd``: phase-space density at fixed invariants over files, with summarize's safety.

The command runs :func:`beltkit.psd.at_fixed_invariants` per file through the
batch machinery of ``summarize``; the checks here are on the command's
contract (outputs equal to the library function's, resumable by checksum and
settings, one-line failures, exit codes, CF-1.8) on copies of the demo
spectrometer's files, plus an independent check of the inverse problem with
CODATA constants from scipy.
"""

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc
import xarray as xr
from _cf_check import cf_problems

from beltkit import batch, psd
from beltkit.cli import main
from beltkit.constants import B0_NT

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
MU, K = ["100", "1000"], ["0.05", "0.2"]


@pytest.fixture
def inputs(tmp_path):
    src = sorted(DEMO.glob("marram_tern_fan_synthetic_*.nc"))[:2]
    assert len(src) == 2
    folder = tmp_path / "in"
    folder.mkdir()
    return [Path(shutil.copy(p, folder / p.name)) for p in src]


def _run(inputs, out, *extra):
    return main(["psd", *map(str, inputs), "--mu", *MU, "--k", *K, "--out", str(out),
                 "--field", "dipole", *extra])


def test_outputs_equal_the_library_and_are_cf_clean(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert _run(inputs, out) == 0
    lines = capsys.readouterr().out.splitlines()
    assert sum(line.startswith("ok  ") for line in lines) == 2
    assert lines[-1].startswith("2 file(s): 2 written, 0 skipped, 0 failed")
    for src in inputs:
        path = out / (src.name[:-3] + batch.PSD_SUFFIX)
        with xr.open_dataset(path) as got, xr.open_dataset(src) as ds:
            want = psd.at_fixed_invariants(ds, [100.0, 1000.0], [0.05, 0.2])
            for name in ("psd", "psd_err", "psd_flag", "energy_at_invariants", "alpha_eq",
                         "lstar"):
                np.testing.assert_allclose(got[name].values, want[name].values, rtol=1e-12,
                                           err_msg=name)
            assert np.isfinite(got["psd"].values).mean() > 0.2  # real values, not all NaN
            assert got.attrs["source"] == src.name
            assert got.attrs["field_model"] == "dipole"
            settings = json.loads(got.attrs["beltkit_settings"])
            assert settings["mu_mev_per_g"] == [100.0, 1000.0]
            assert settings["k_g05_re"] == [0.05, 0.2]
            # the inverse problem, checked forward with CODATA constants (scipy.constants):
            # mu = p^2 sin^2(alpha_eq) / (2 m0 B_eq), B_eq = B0 / L^3 (PHYSICS.md, dipole)
            m0c2_mev = sc.physical_constants["electron mass energy equivalent in MeV"][0]
            e_mev = got["energy_at_invariants"].isel(mu=1, k=0).values / 1e3
            p2 = e_mev * (e_mev + 2 * m0c2_mev)  # (MeV/c)^2
            b_eq_g = B0_NT * 1e-5 / ds["L"].values.astype(float) ** 3
            y2 = np.sin(np.radians(got["alpha_eq"].isel(k=0).values)) ** 2
            mu_back = p2 * y2 / (2 * m0c2_mev * b_eq_g)
            np.testing.assert_allclose(mu_back, 1000.0, rtol=1e-6)
            # nudge: a 1 % error in the energy would be seen
            assert not np.allclose(mu_back * 1.01**2, 1000.0, rtol=1e-6)
        # CF-1.8 (the compliance checker, as in test_cf.py): clean. K's unit, G^(1/2) R_E,
        # has no UDUNITS form (no fractional powers), so the file states it in the long
        # name and beltkit_units instead of a units attribute
        assert cf_problems(path) == []
        assert got["k"].attrs["beltkit_units"] == "G^(1/2) R_E" and "units" not in got["k"].attrs


def test_rerun_skips_and_changed_settings_redo(inputs, tmp_path, capsys):
    out = tmp_path / "out"
    assert _run(inputs, out) == 0
    capsys.readouterr()
    assert _run(inputs, out) == 0
    lines = capsys.readouterr().out.splitlines()
    assert sum(line.startswith("skipped  ") and line.endswith("up to date")
               for line in lines) == 2
    # other invariants: the outputs are redone (the settings are recorded)
    assert main(["psd", *map(str, inputs), "--mu", "100", "--k", *K, "--out", str(out),
                 "--field", "dipole"]) == 0
    assert "2 written" in capsys.readouterr().out.splitlines()[-1]
    # a changed input (another checksum): that file only is redone
    with xr.open_dataset(inputs[0]) as ds:
        changed = ds.load()
    changed.attrs["comment"] = "edited"
    inputs[0].unlink()
    changed.to_netcdf(inputs[0])
    assert main(["psd", *map(str, inputs), "--mu", "100", "--k", *K, "--out", str(out),
                 "--field", "dipole"]) == 0
    assert "1 written, 1 skipped" in capsys.readouterr().out.splitlines()[-1]
    report = [json.loads(x) for x in (out / batch.REPORT_NAME).read_text().splitlines()]
    assert len(report) == 8 and {r["status"] for r in report} == {"ok", "skipped"}


def test_a_bad_file_fails_on_one_line_and_the_others_go_on(inputs, tmp_path, capsys):
    bad = inputs[0].parent / "broken.nc"
    bad.write_bytes(b"not a netCDF file")
    out = tmp_path / "out"
    assert _run([bad, *inputs], out) == 1
    lines = capsys.readouterr().out.splitlines()
    failed = [line for line in lines if line.startswith("FAILED  ")]
    assert len(failed) == 1 and "broken.nc" in failed[0]
    assert sum(line.startswith("ok  ") for line in lines) == 2
    assert not (out / ("broken" + batch.PSD_SUFFIX)).exists()
    assert not [p for p in out.iterdir() if p.name.startswith(".")]  # no temporary left
    # fail-fast: the later files are not attempted, and the exit code says so
    assert _run([bad, *inputs], tmp_path / "out2", "--fail-fast") == 1
    assert "not attempted" in capsys.readouterr().out


def test_workers_give_the_same_outputs(inputs, tmp_path):
    assert _run(inputs, tmp_path / "one") == 0
    assert _run(inputs, tmp_path / "two", "--workers", "2") == 0
    for src in inputs:
        name = src.name[:-3] + batch.PSD_SUFFIX
        with xr.open_dataset(tmp_path / "one" / name) as a, \
                xr.open_dataset(tmp_path / "two" / name) as b:
            xr.testing.assert_identical(a.drop_attrs(), b.drop_attrs())


def test_usage_errors(tmp_path, capsys):
    assert main(["psd", "x.nc", "--out", str(tmp_path / "o"), "--k", "0.1"]) == 2  # no --mu
    assert main(["psd", "x.nc", "--out", str(tmp_path / "o"), "--mu", "0", "--k", "0.1"]) == 2
    assert main(["psd", "x.nc", "--out", str(tmp_path / "o"), "--mu", "1", "--k", "-1"]) == 2
    assert main(["psd", "x.nc", "--out", str(tmp_path / "o"), "--mu", "1", "--k", "0.1",
                 "--lstar-cadence", "soon"]) == 2
    capsys.readouterr()
    assert main(["psd", str(tmp_path / "none.nc"), "--out", str(tmp_path / "o"), "--mu", "1",
                 "--k", "0.1"]) == 1
    assert "no such file" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()
