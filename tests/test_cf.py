"""CF-1.8 compliance of real summary and survey files, checked by the IOOS compliance checker.

What passes, and why (the one §2.4 recommendation allowed), is explained in
tests/_cf_check.py, which holds the checker helpers.
"""

import shutil
from pathlib import Path

import netCDF4
import pytest
from _cf_check import DIM_ORDER, HIGH, MEDIUM, allowed, assert_cf_clean, cf_problems
from _flux_factory import write_flux_file

from beltkit import batch
from beltkit.cli import main


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


def test_cf_checker_passes_on_a_summary(pipeline):
    summaries, _ = pipeline
    assert_cf_clean(summaries[0])


def test_cf_checker_passes_on_a_survey(pipeline):
    _, survey = pipeline
    assert_cf_clean(survey)


def test_cf_checker_passes_on_a_summary_written_in_slabs(tmp_path, monkeypatch):
    # a long file is summarized slab by slab along an unlimited time dimension
    monkeypatch.setattr(batch.products, "TIME_SLAB", 100)
    monkeypatch.setattr(batch.products, "STREAM_SLAB", 100)
    src = write_flux_file(tmp_path / "long.nc", n_time=240, seed=5)
    assert main(["summarize", str(src), "--out", str(tmp_path / "out")]) == 0
    [summary] = (tmp_path / "out").glob("*" + batch.SUMMARY_SUFFIX)
    with netCDF4.Dataset(summary) as nc:
        assert nc.dimensions["time"].isunlimited()
    assert_cf_clean(summary)


# ----------------------------------------------------------------- sensitivity ("nudge")
# The same checks on a real summary with one thing broken must fail, each for its reason.


def _broken_copy(summary: Path, tmp_path: Path, edit) -> Path:
    out = tmp_path / f"broken-{summary.name}"
    shutil.copy(summary, out)
    with netCDF4.Dataset(out, "a") as nc:
        edit(nc)
    return out


def test_checker_flags_a_unit_udunits_does_not_know(pipeline, tmp_path):
    # CF-1.8 §3.1: units must be recognised by UDUNITS; parsed here by cf-units' bundled UDUNITS-2
    summaries, _ = pipeline
    bad = _broken_copy(summaries[0], tmp_path, lambda nc: setattr(
        nc["flux_trapped"], "units", "furlongs per fortnight squared"))
    [(priority, section, msg)] = cf_problems(bad)  # this, and nothing else
    assert priority == HIGH and section.startswith("§3.1"), (section, msg)
    assert "flux_trapped" in msg and "UDUNITS" in msg


def test_checker_flags_bad_time_units_standard_name_and_missing_bounds(pipeline, tmp_path):
    summaries, _ = pipeline
    with netCDF4.Dataset(summaries[0]) as nc:
        bounds = nc["energy"].bounds

    def edit(nc):
        nc["time"].units = "seconds since the storm"  # CF-1.8 §4.4: "<unit> since <date>"
        nc["flux_trapped"].standard_name = "trapped_flux_of_beltkit"  # §3.3: not in the table
        nc.renameVariable(bounds, "renamed_bnds")  # §7.1: energy's bounds now name nothing

    problems = cf_problems(_broken_copy(summaries[0], tmp_path, edit))
    high = [(section.split()[0], msg) for priority, section, msg in problems if priority == HIGH]
    assert ("§4.4", "time does not have correct time units") in high, problems
    assert any(s == "§3.3" and "trapped_flux_of_beltkit" in m for s, m in high), problems
    assert ("references", f"energy:bounds names {bounds!r}, which is not in the file") in high
    # the checker itself sees the orphaned variable (no long_name or standard_name, §3.3)
    assert any(s == "§3.3" and "renamed_bnds" in m for s, m in high), problems


def test_only_the_left_of_time_recommendation_isallowed(tmp_path):
    # the allowance is narrow: spatiotemporal dimensions out of T, Z, Y, X order still fail
    p = tmp_path / "order.nc"
    with netCDF4.Dataset(p, "w") as nc:
        nc.Conventions = "CF-1.8"
        nc.title = "dimension-order nudge"
        nc.history = "written by a beltkit test"
        for name, units, std, vals in (("lon", "degrees_east", "longitude", [0.0, 1.0, 2.0]),
                                       ("lat", "degrees_north", "latitude", [0.0, 1.0])):
            nc.createDimension(name, len(vals))
            v = nc.createVariable(name, "f8", (name,))
            v.units, v.standard_name, v[:] = units, std, vals
        x = nc.createVariable("x", "f4", ("lon", "lat"))
        x.units, x.standard_name, x[:] = "K", "air_temperature", 1.0
    [(priority, section, msg)] = cf_problems(p)  # this, and nothing else
    assert priority == MEDIUM and section.startswith("§2.4") and DIM_ORDER.match(msg)
    assert not allowed(priority, msg)
    # the same message for an energy dimension right of time is the one allowed
    ok = msg.replace("lon (X), lat (Y)", "time (T), energy (U)")
    assert allowed(MEDIUM, ok)
