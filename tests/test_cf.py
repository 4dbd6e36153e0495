"""The CF checker (cfchecker, CF-1.8) passes on real summary and survey files.

The checker is the reference here: the CF conventions' own compliance checker
from the package index. It needs the UDUNITS-2 C library; when that is
missing these tests FAIL with a message saying how to install it. Its tables
are given locally (-s/-a/-r) so that no download is attempted: the standard
name table ships in the compliance-checker package; the area-type and region
tables are minimal ones written here (the files use neither).
"""

import ctypes.util
import re
import subprocess
import sys
from pathlib import Path

import pytest
from _flux_factory import write_flux_file

from beltkit import batch
from beltkit.cli import main

_TABLE_HEAD = '<?xml version="1.0"?>\n<{tag}>\n  <version_number>1</version_number>\n' \
              '  <date>2026-12-01</date>\n  <entry id="{entry}"></entry>\n</{tag}>\n'


def _standard_name_table() -> Path:
    import compliance_checker

    path = Path(compliance_checker.__file__).parent / "data" / "cf-standard-name-table.xml"
    assert path.is_file(), f"the CF standard-name table is missing from {path}"
    return path


def run_cf_checker(path: Path, tmp_path: Path) -> str:
    """Run cfchecker on `path` against CF-1.8 with local tables; return its report."""
    if ctypes.util.find_library("udunits2") is None:
        pytest.fail("the CF checker needs the UDUNITS-2 C library (libudunits2), which is not "
                    "installed: apt-get install libudunits2-0 (Debian/Ubuntu)")
    area = tmp_path / "area-types.xml"
    area.write_text(_TABLE_HEAD.format(tag="standard_area_type_table", entry="all_area_types"))
    region = tmp_path / "regions.xml"
    region.write_text(_TABLE_HEAD.format(tag="standard_region_table", entry="global"))
    code = ("import sys; from cfchecker.cfchecks import main; "
            "sys.argv[0] = 'cfchecks'; sys.exit(main())")
    proc = subprocess.run(
        [sys.executable, "-c", code, "-v", "1.8", "-s", str(_standard_name_table()),
         "-a", str(area), "-r", str(region), str(path)],
        capture_output=True, text=True, timeout=120,
    )
    report = proc.stdout + proc.stderr
    assert "udunits" not in proc.stderr.lower(), report
    assert re.search(r"ERRORS detected: \d+", report), f"the CF checker did not run:\n{report}"
    return report


def _assert_clean(report):
    errors = int(re.search(r"ERRORS detected: (\d+)", report).group(1))
    warnings = int(re.search(r"WARNINGS given: (\d+)", report).group(1))
    assert (errors, warnings) == (0, 0), report


@pytest.fixture(scope="module")
def pipeline(tmp_path_factory):
    root = tmp_path_factory.mktemp("cf")
    inputs = [write_flux_file(root / f"day{k}.nc", n_time=240, seed=k,
                              start=f"2026-03-0{k + 1}T00:00:00", cadence_s=30.0)
              for k in range(2)]
    assert main(["summarize", *map(str, inputs), "--out", str(root / "out")]) == 0
    summaries = sorted((root / "out").glob("*" + batch.SUMMARY_SUFFIX))
    survey = root / "survey.nc"
    assert main(["survey", *map(str, summaries), "--out", str(survey), "--window", "1D"]) == 0
    return summaries, survey


def test_cf_checker_passes_on_a_summary(pipeline, tmp_path):
    summaries, _ = pipeline
    _assert_clean(run_cf_checker(summaries[0], tmp_path))


def test_cf_checker_passes_on_a_survey(pipeline, tmp_path):
    _, survey = pipeline
    _assert_clean(run_cf_checker(survey, tmp_path))


def test_cf_checker_detects_a_broken_file(tmp_path):
    # sensitivity: the same checker must report an error for a unit UDUNITS does not know
    import netCDF4

    p = tmp_path / "bad.nc"
    with netCDF4.Dataset(p, "w") as nc:
        nc.Conventions = "CF-1.8"
        nc.createDimension("time", 2)
        v = nc.createVariable("x", "f4", ("time",))
        v.units = "furlongs per fortnight squared"
        v[:] = [1, 2]
    report = run_cf_checker(p, tmp_path)
    assert int(re.search(r"ERRORS detected: (\d+)", report).group(1)) >= 1, report


def test_cf_checker_passes_on_a_summary_written_in_slabs(tmp_path, monkeypatch):
    # a long file is summarized slab by slab along an unlimited time dimension
    monkeypatch.setattr(batch, "_TIME_SLAB", 100)
    monkeypatch.setattr(batch, "_STREAM_SLAB", 100)
    src = write_flux_file(tmp_path / "long.nc", n_time=240, seed=5)
    assert main(["summarize", str(src), "--out", str(tmp_path / "out")]) == 0
    [summary] = (tmp_path / "out").glob("*" + batch.SUMMARY_SUFFIX)
    _assert_clean(run_cf_checker(summary, tmp_path))
