"""The ``beltkit`` command: parsing, calculators against independent formulas, inspect, demo."""

import json
import math
from pathlib import Path

import pytest
import scipy.constants as sc
from _flux_factory import flux_dataset, write_flux_file

from beltkit.cli import main
from beltkit.constants import B0_NT, R_E_KM


def _json(capsys, argv):
    assert main(argv) == 0
    return {k: v["value"] for k, v in json.loads(capsys.readouterr().out).items()}


def test_help_version_and_usage_errors(capsys):
    assert main(["--help"]) == 0
    assert "summarize" in capsys.readouterr().out
    assert main(["--version"]) == 0
    assert main([]) == 2
    assert main(["summarize"]) == 2  # INPUT and --out missing
    assert main(["summarize", "x.nc", "--out", "o", "--workers", "0"]) == 2
    assert main(["summarize", "x.nc", "--out", "o", "--compression", "11"]) == 2
    err = capsys.readouterr().err
    assert "positive integer" in err and "zlib level" in err


def test_motion_against_textbook_formulas(capsys):
    e_kev, L = 1000.0, 4.0
    got = _json(capsys, ["motion", "--energy-kev", "1000", "--L", "4", "--pitch-angle", "90",
                         "--species", "electron", "--json"])
    # relativistic kinematics with CODATA constants (scipy.constants)
    mc2_kev = sc.m_e * sc.c**2 / (sc.e * 1e3)
    gamma = 1 + e_kev / mc2_kev
    v = sc.c * math.sqrt(1 - 1 / gamma**2)
    assert got["lorentz_factor"] == pytest.approx(gamma, rel=1e-9)
    assert got["speed"] == pytest.approx(v, rel=1e-9)
    # dipole equatorial field B0/L^3 (PHYSICS.md, centred dipole)
    b_eq = B0_NT / L**3
    assert got["b_equator"] == pytest.approx(b_eq, rel=1e-12)
    # gyrofrequency f = q B / (2 pi gamma m0)
    assert got["gyrofrequency"] == pytest.approx(sc.e * b_eq * 1e-9 / (2 * math.pi * gamma
                                                                         * sc.m_e), rel=1e-9)
    assert got["gyroperiod"] * got["gyrofrequency"] == pytest.approx(1.0, rel=1e-12)
    # equatorially mirroring: bounce period 4 L R_E T(1) / v with T(1) = pi sqrt(2) / 6
    # (Hamlin et al. 1961; Schulz & Lanzerotti 1974 limit, derived analytically)
    t_b = 4 * L * R_E_KM * 1e3 * (math.pi * math.sqrt(2) / 6) / v
    assert got["bounce_period"] == pytest.approx(t_b, rel=1e-6)
    # drift: Omega = 3 L p v / (2 q B0 R_E^2) for y = 1 (Schulz & Lanzerotti 1974)
    pv = gamma * sc.m_e * v**2
    omega = 3 * L * pv / (2 * sc.e * B0_NT * 1e-9 * (R_E_KM * 1e3) ** 2)
    assert got["drift_period"] == pytest.approx(2 * math.pi / omega, rel=1e-6)
    assert got["drift_period_min"] == pytest.approx(got["drift_period"] / 60, rel=1e-12)
    assert got["drift_direction"] == "eastward"
    assert got["mirror_mlat"] == pytest.approx(0.0, abs=1e-9)


def test_motion_prints_an_aligned_table(capsys):
    assert main(["motion", "--energy-kev", "500", "--L", "5", "--pitch-angle", "30",
                 "--species", "proton"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["species", "proton"]
    units = {line.rsplit(None, 1)[-1] for line in lines if "period" in line}
    assert units == {"s", "min"}
    assert any("westward" in line for line in lines)
    # the value column ends at the same position on every numeric line
    ends = {len(line.rstrip().rsplit("  ", 1)[0].rstrip()) for line in lines
            if line.rstrip().endswith(("s", "km", "nT", "Hz")) and "direction" not in line}
    assert len(ends) == 1


def test_motion_bad_species_is_one_line(capsys):
    assert main(["motion", "--energy-kev", "10", "--L", "4", "--species", "muon"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "muon" in err and "Traceback" not in err


def test_losscone_dipole_against_closed_forms(capsys):
    L, lam, h = 4.5, 20.0, 100.0
    got = _json(capsys, ["losscone", "--L", "4.5", "--mlat", "20", "--footpoint-km", "100",
                         "--json"])

    def b(lat_deg):  # dipole magnitude (PHYSICS.md): B0/L^3 sqrt(1+3 sin^2)/cos^6
        s, c = math.sin(math.radians(lat_deg)), math.cos(math.radians(lat_deg))
        return B0_NT / L**3 * math.sqrt(1 + 3 * s * s) / c**6

    lam_f = math.degrees(math.acos(math.sqrt((R_E_KM + h) / (L * R_E_KM))))
    b_f = b(lam_f)
    assert got["footpoint_mlat"] == pytest.approx(lam_f, rel=1e-10)
    assert got["b_foot"] == pytest.approx(b_f, rel=1e-10)
    assert got["b_local"] == pytest.approx(b(lam), rel=1e-10)
    # sin^2(alpha_LC) = B_here / B_foot (common practice)
    assert got["blc_local"] == pytest.approx(math.degrees(math.asin(math.sqrt(b(lam) / b_f))),
                                             rel=1e-9)
    assert got["blc_equatorial"] == pytest.approx(
        math.degrees(math.asin(math.sqrt(b(0) / b_f))), rel=1e-9)
    assert got["dlc_equatorial"] == got["blc_equatorial"]


def test_losscone_needs_a_position(capsys):
    assert main(["losscone"]) == 1
    assert "give --L" in capsys.readouterr().err


def test_losscone_igrf_goes_through_the_field_package(capsys):
    got = _json(capsys, ["losscone", "--field", "igrf", "--latitude", "-30", "--longitude",
                         "-40", "--height-km", "650", "--time", "2024-06-01T12:00", "--json"])
    assert got["model"] == "igrf"
    # over the South Atlantic the southern footpoint field is the weaker one, so the
    # bounce loss cone there is set by it (common practice); both cones lie in 0-90 deg
    assert 0 < got["blc_equatorial"] <= got["dlc_equatorial"] <= 90
    assert got["b_foot_south"] < got["b_foot_north"]


def test_inspect_lists_every_problem(tmp_path, capsys):
    good = write_flux_file(tmp_path / "good.nc", n_time=20)
    ds = flux_dataset(n_time=20)
    ds["flux"].attrs.pop("units")
    bad = write_flux_file(tmp_path / "bad.nc", ds.drop_vars(["L", "mlat", "mlt"]))
    junk = tmp_path / "junk.nc"
    junk.write_bytes(b"no")
    assert main(["inspect", str(good)]) == 0
    assert f"ok  {good}" in capsys.readouterr().out
    assert main(["inspect", str(tmp_path)]) == 1
    out = capsys.readouterr().out
    assert f"BAD  {bad}: " in out
    problems = [line for line in out.splitlines() if line.startswith("    - ")]
    assert any("units" in p for p in problems) and any("position" in p for p in problems)
    assert f"FAILED  {junk}: " in out
    assert "3 file(s) checked, 2 with problems" in out


def test_demo_command_calls_run_demo(tmp_path, monkeypatch, capsys):
    import beltkit.demo

    seen = []

    def fake_run_demo(out_dir):
        seen.append(out_dir)
        out_dir.mkdir(parents=True)
        p = out_dir / "figure.png"
        p.write_bytes(b"png")
        return [p]

    monkeypatch.setattr(beltkit.demo, "run_demo", fake_run_demo)
    monkeypatch.chdir(tmp_path)
    assert main(["demo"]) == 0
    assert seen == [type(seen[0])("beltkit-demo")]
    out = capsys.readouterr().out
    assert "wrote  beltkit-demo/figure.png" in out
    assert str(tmp_path / "beltkit-demo") in out


def test_summarize_workers_and_report_counts(tmp_path, capsys):
    for k in range(2):
        write_flux_file(tmp_path / f"d{k}.nc", n_time=30, seed=k)
    assert main(["summarize", str(tmp_path / "d*.nc"), "--out", str(tmp_path / "o"),
                 "--compression", "0"]) == 0
    out = capsys.readouterr().out
    assert "2 file(s): 2 written, 0 skipped, 0 failed" in out
    import netCDF4

    with netCDF4.Dataset(tmp_path / "o" / "d0.summary.nc") as nc:
        assert nc["fraction_trapped"].filters()["zlib"] is False


def test_demo_runs_the_whole_pipeline_from_another_folder(tmp_path, monkeypatch, capsys):
    # from an unrelated working folder: nothing may be read relative to the repository
    monkeypatch.chdir(tmp_path)
    assert main(["demo", "--out", "demo"]) == 0
    out = capsys.readouterr().out
    written = [line.split("  ", 1)[1] for line in out.splitlines() if line.startswith("wrote  ")]
    assert written and all((tmp_path / p).exists() for p in written)
    names = {Path(p).name for p in written}
    assert any(n.endswith(".summary.nc") for n in names)
    assert any(n.endswith(".png") for n in names)
    assert "run-report.jsonl" in names
    report_path = next(p for p in written if p.endswith("run-report.jsonl"))
    report = (tmp_path / report_path).read_text().splitlines()
    assert report and all(json.loads(x)["status"] == "ok" for x in report)
