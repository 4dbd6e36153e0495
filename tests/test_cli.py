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


def test_python_dash_m_runs_the_same_command():
    import subprocess
    import sys

    import beltkit

    proc = subprocess.run([sys.executable, "-m", "beltkit", "--version"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert beltkit.__version__ in proc.stdout


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


@pytest.mark.slow
def test_demo_runs_the_whole_pipeline_from_another_folder(tmp_path, monkeypatch, capsys):
    # from an unrelated working folder: nothing may be read relative to the repository;
    # the scenario's first day only (CI runs the whole three-day `beltkit demo` itself)
    import functools

    import beltkit.demo

    monkeypatch.setattr(beltkit.demo, "run_demo",
                        functools.partial(beltkit.demo.run_demo, n_days=1))
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


# ------------------------------------------------------- input checks in command-line terms


def _dipole_blc_deg(L, h_km):
    # equatorial bounce loss cone of a centred dipole, sin^2 a = cos^6 lf / sqrt(4 - 3 cos^2 lf)
    # with cos^2 lf = (R_E + h) / (L R_E) (PHYSICS.md; Roederer 1970), computed here directly
    c2 = (R_E_KM + h_km) / (L * R_E_KM)
    return math.degrees(math.asin(math.sqrt(c2**3 / math.sqrt(4 - 3 * c2))))


def test_motion_flags_a_pitch_angle_inside_the_bounce_loss_cone(capsys):
    blc = _dipole_blc_deg(4.0, 100.0)
    assert main(["motion", "--energy-kev", "100", "--L", "4", "--pitch-angle", "3"]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[0] == (
        f"note: inside the bounce loss cone ({blc:.2f} deg at --footpoint-km 100): lost "
        "within one bounce; the periods below are those of an unobstructed dipole orbit "
        "and the mirror point lies below the footpoint altitude")
    assert any(line.split()[-1] == "yes" for line in out.splitlines()
               if line.startswith("inside the bounce loss cone"))
    # the southward-moving twin (180 - 3 deg) is inside the same cone
    got = json.loads(_capture(capsys, ["motion", "--energy-kev", "100", "--L", "4",
                                       "--pitch-angle", "177", "--json"]))
    assert got["in_bounce_loss_cone"]["value"] is True
    assert got["bounce_loss_cone"]["value"] == pytest.approx(blc, rel=1e-9)
    assert "lost within one bounce" in got["notes"]["value"][0]
    # outside the cone: no note
    got = json.loads(_capture(capsys, ["motion", "--energy-kev", "100", "--L", "4",
                                       "--pitch-angle", "45", "--json"]))
    assert got["in_bounce_loss_cone"]["value"] is False and got["notes"]["value"] == []


def test_motion_footpoint_km_sets_the_loss_cone(capsys):
    got = _json(capsys, ["motion", "--energy-kev", "100", "--L", "4", "--pitch-angle", "5.4",
                         "--footpoint-km", "0", "--json"])
    # at the surface the L = 4 cone is 5.342 deg (computed by _dipole_blc_deg), so 5.4 is out
    assert got["bounce_loss_cone"] == pytest.approx(_dipole_blc_deg(4.0, 0.0), rel=1e-9)
    assert got["footpoint_altitude"] == 0.0 and got["in_bounce_loss_cone"] is False
    got = _json(capsys, ["motion", "--energy-kev", "100", "--L", "4", "--pitch-angle", "5.4",
                         "--json"])
    assert got["in_bounce_loss_cone"] is True  # the 100 km cone is 5.47 deg


def _capture(capsys, argv, code=0):
    assert main(argv) == code
    return capsys.readouterr().out


@pytest.mark.parametrize("option, value, phrase", [
    ("--energy-kev", "0", "must be a finite kinetic energy > 0 keV, got 0"),
    ("--energy-kev", "-5", "must be a finite kinetic energy > 0 keV, got -5"),
    ("--energy-kev", "nan", "must be a finite kinetic energy > 0 keV, got nan"),
    ("--energy-kev", "inf", "must be a finite kinetic energy > 0 keV, got inf"),
    ("--energy-kev", "ten", "expected a number, got 'ten'"),
    ("--L", "0.5", "must be a finite L-shell >= 1"),
    ("--L", "nan", "must be a finite L-shell >= 1"),
    ("--L", "inf", "must be a finite L-shell >= 1"),
    ("--pitch-angle", "-1", "must be a pitch angle of 0-180 degrees, got -1"),
    ("--pitch-angle", "181", "must be a pitch angle of 0-180 degrees, got 181"),
    ("--pitch-angle", "nan", "must be a pitch angle of 0-180 degrees, got nan"),
    ("--footpoint-km", "-1", "must be a finite altitude >= 0 km"),
])
def test_motion_refuses_bad_numbers_naming_the_option(capsys, option, value, phrase):
    argv = {"--energy-kev": "100", "--L": "4", "--pitch-angle": "30"}
    argv[option] = value
    assert main(["motion", *[x for kv in argv.items() for x in kv]]) == 2
    err = capsys.readouterr().err
    assert f"argument {option}: {phrase}" in err
    assert "energy_kev" not in err and "alpha_eq_deg" not in err


def test_motion_refuses_a_line_below_the_footpoint(capsys):
    assert main(["motion", "--energy-kev", "100", "--L", "1.001"]) == 1
    err = capsys.readouterr().err
    # 1 + 100 / 6371.2 = 1.0157 (the line's apex must reach the footpoint altitude)
    assert "--L 1.001: the field line's apex (6.4 km) lies below the footpoint altitude " \
           "--footpoint-km 100" in err and "give --L >= 1.0157" in err


def test_motion_unknown_species_names_the_option(capsys):
    assert main(["motion", "--energy-kev", "10", "--L", "4", "--species", "muon"]) == 1
    err = capsys.readouterr().err
    assert "--species: unknown species 'muon'; use electron, proton, alpha or oxygen+" in err
    assert "beltkit.particles" not in err


def test_losscone_refuses_a_point_inside_the_earth(capsys):
    for mlat in ("60", "-60"):
        assert main(["losscone", "--L", "2", "--mlat", mlat]) == 1
        err = capsys.readouterr().err
        # surface footpoint of L = 2: cos^2(lat) = 1/2, lat = 45 deg (analytic)
        assert f"--mlat {mlat} on --L 2 is inside the Earth" in err
        assert "the largest allowed |--mlat| for --L 2 is 45.0000 deg" in err
        assert "mlat_deg" not in err
    assert main(["losscone", "--L", "4", "--mlat", "95"]) == 2
    assert "argument --mlat: must be a magnetic latitude between -90 and 90" in \
        capsys.readouterr().err


def test_losscone_between_surface_and_footpoint_notes_every_particle_lost(capsys):
    # footpoint of L = 2 at 100 km: 44.55 deg; the surface at 45 deg; 44.8 lies between
    got = json.loads(_capture(capsys, ["losscone", "--L", "2", "--mlat", "44.8", "--json"]))
    assert got["blc_local"]["value"] == 90.0
    assert got["notes"]["value"] == ["below the footpoint altitude (--footpoint-km 100): "
                                     "every particle is lost (local loss cones 90 deg)"]
    out = _capture(capsys, ["losscone", "--L", "2", "--mlat", "44.8"])
    assert out.startswith("note: below the footpoint altitude")
    got = json.loads(_capture(capsys, ["losscone", "--L", "2", "--mlat", "40", "--json"]))
    assert got["notes"]["value"] == [] and got["blc_local"]["value"] < 90


@pytest.mark.parametrize("argv, phrase", [
    (["--L", "4", "--latitude", "10", "--longitude", "0"],
     "--L/--mlat cannot be combined with --latitude, --longitude: give either --L/--mlat "
     "for the centred dipole, or --latitude/--longitude/--height-km/--time for a "
     "geographic point"),
    (["--L", "4", "--height-km", "500"], "--L/--mlat cannot be combined with --height-km"),
    (["--L", "4", "--time", "2024-06-01"], "--L/--mlat cannot be combined with --time"),
    (["--mlat", "10", "--latitude", "10", "--longitude", "0", "--time", "2024-06-01"],
     "--mlat cannot be combined with --latitude/--longitude"),
    (["--field", "igrf", "--L", "4"], "--field igrf needs a geographic point"),
    (["--latitude", "10"], "give both --latitude and --longitude"),
    (["--field", "igrf", "--latitude", "10", "--longitude", "0"],
     "--time is required with --latitude/--longitude: MLT and the field epoch depend on it; "
     "give an ISO 8601 UTC time such as 2024-06-01T12:00"),
    (["--field", "igrf", "--latitude", "10", "--longitude", "0", "--height-km", "20",
      "--time", "2024-06-01"],
     "--height-km 20 puts the point 26.3 km above the R_E = 6371.2 km sphere, below the "
     "footpoint altitude --footpoint-km 100"),
])
def test_losscone_refuses_mixed_or_incomplete_positions(capsys, argv, phrase):
    assert main(["losscone", *argv]) == 1
    err = capsys.readouterr().err
    assert phrase in err and err.count("\n") == 1


@pytest.mark.parametrize("option, value, phrase", [
    ("--height-km", "-50",
     "argument --height-km: must be above -10 km (height above the WGS-84 ellipsoid in km)"),
    ("--time", "1800-01-01",
     "argument --time: 1800-01-01 is outside 1900-2030, the validity of the IGRF-14 "
     "coefficients"),
    ("--time", "2031-01-01", "this command does not extrapolate"),
    ("--time", "yesterday",
     "argument --time: expected an ISO 8601 UTC time such as 2024-06-01T12:00"),
    ("--time", "2024-06-01T12:00+02:00", "argument --time: give the time in UTC"),
    ("--latitude", "95", "argument --latitude: must be a geodetic latitude of -90 to 90"),
    ("--longitude", "nan", "argument --longitude: must be a finite longitude"),
])
def test_losscone_refuses_bad_geographic_values(capsys, option, value, phrase):
    argv = {"--latitude": "10", "--longitude": "0", "--time": "2024-06-01"}
    argv[option] = value
    assert main(["losscone", "--field", "igrf",
                 *[x for kv in argv.items() for x in kv]]) == 2
    err = capsys.readouterr().err
    assert phrase in err
    assert "argument 'time'" not in err and "allow_extrapolation" not in err


def test_time_accepts_a_utc_designator():
    import numpy as np

    from beltkit.argtypes import utc_time

    # ISO 8601 (common practice): a trailing Z designates UTC
    assert utc_time("2024-06-01T12:00Z") == np.datetime64("2024-06-01T12:00", "ns")
    assert utc_time("2024-06-01") == np.datetime64("2024-06-01T00:00", "ns")


def test_losscone_igrf_at_high_latitude_warns_about_internal_field_only(capsys):
    got = json.loads(_capture(capsys, ["losscone", "--field", "igrf", "--latitude", "80",
                                       "--longitude", "0", "--time", "2024-06-01", "--json"]))
    assert got["L"]["value"] > 10
    [note] = got["notes"]["value"]
    assert note.startswith(f"L = {got['L']['value']:.3g} > 10: the IGRF is an internal-field "
                           "model only; L, the drift shell and the loss cones there are not "
                           "reliable without an external-field model")
    # at 89 deg the line does not close in the IGRF: the note says so
    got = json.loads(_capture(capsys, ["losscone", "--field", "igrf", "--latitude", "89",
                                       "--longitude", "0", "--time", "2024-06-01", "--json"]))
    assert math.isnan(got["L"]["value"])
    assert "does not close in the IGRF" in got["notes"]["value"][0]
    # a low-latitude point gets no note
    got = json.loads(_capture(capsys, ["losscone", "--field", "igrf", "--latitude", "-30",
                                       "--longitude", "-40", "--time", "2024-06-01T12:00",
                                       "--json"]))
    assert got["notes"]["value"] == []


# ------------------------------------------------------------- inputs that name nothing


def test_summarize_refuses_patterns_that_match_nothing(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["summarize", "nomatch*.nc", "--out", "s3"]) == 1
    assert "no input files: 'nomatch*.nc' matched nothing" in capsys.readouterr().err
    assert not (tmp_path / "s3").exists()
    assert main(["summarize", "missing.nc", "--out", "s3"]) == 1
    err = capsys.readouterr().err
    assert "no input files: no such file or folder: missing.nc" in err and "Errno" not in err
    (tmp_path / "empty").mkdir()
    assert main(["summarize", "empty", "--out", "s3"]) == 1
    assert "no input files: folder empty holds no flux files" in capsys.readouterr().err
    # one dead input among good ones: nothing is run, the dead one is named
    write_flux_file(tmp_path / "d0.nc", n_time=10)
    assert main(["summarize", "d0.nc", "typo*.nc", "--out", "s3"]) == 1
    assert "'typo*.nc' matched nothing (nothing was run: fix or drop that input)" in \
        capsys.readouterr().err
    assert not (tmp_path / "s3").exists()


def test_survey_names_folders_without_summaries(tmp_path, capsys):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["survey", str(empty), "--out", str(tmp_path / "s.nc")]) == 1
    err = capsys.readouterr().err
    assert f"no summary files: folder {empty} holds no *.summary.nc files; run " \
           "`beltkit summarize` first" in err
    raw = tmp_path / "raw"
    raw.mkdir()
    write_flux_file(raw / "d0.nc", n_time=10)
    assert main(["survey", str(raw), "--out", str(tmp_path / "s.nc")]) == 1
    err = capsys.readouterr().err
    assert f"folder {raw} holds no *.summary.nc files (only 1 flux/data file(s))" in err
    assert "run `beltkit summarize` first" in err
    assert main(["survey", str(tmp_path / "nope"), "--out", str(tmp_path / "s.nc")]) == 1
    err = capsys.readouterr().err
    assert f"no such file or folder: {tmp_path / 'nope'}" in err and "Errno" not in err
    assert not (tmp_path / "s.nc").exists()


def test_inspect_refuses_patterns_that_match_nothing(tmp_path, capsys):
    assert main(["inspect", str(tmp_path / "x*.nc")]) == 1
    assert f"no input files: '{tmp_path / 'x*.nc'}' matched nothing" in capsys.readouterr().err


# ------------------------------------------------------------------------ broken pipe


class _ClosedPipe:
    def write(self, text):
        raise BrokenPipeError(32, "Broken pipe")

    def flush(self):
        raise BrokenPipeError(32, "Broken pipe")

    def fileno(self):
        import io

        raise io.UnsupportedOperation("no file descriptor")


def test_closed_output_pipe_is_quiet(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("sys.stdout", _ClosedPipe())
    assert main(["motion", "--energy-kev", "100", "--L", "4", "--json"]) == 0
    assert main(["losscone", "--L", "4"]) == 0
    good = write_flux_file(tmp_path / "good.nc", n_time=10)
    assert main(["inspect", str(good)]) == 141  # a batch command may have work left
    assert capsys.readouterr().err == ""


def test_closed_output_pipe_in_a_real_process():
    import os
    import subprocess
    import sys

    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader is gone before anything is written
    try:
        proc = subprocess.run([sys.executable, "-m", "beltkit.cli", "motion", "--energy-kev",
                               "100", "--L", "4", "--json"], stdout=write_end,
                              stderr=subprocess.PIPE, text=True, timeout=120)
    finally:
        os.close(write_end)
    assert proc.returncode == 0
    assert proc.stderr == ""  # neither "[Errno 32] Broken pipe" nor "Exception ignored"


def test_batch_options_are_checked_before_anything_runs(tmp_path, capsys):
    for value in ("1800", "nan"):
        assert main(["summarize", "x.nc", "--out", str(tmp_path / "o"), "--epoch", value]) == 2
        assert f"argument --epoch: must be a decimal year within 1900-2030 (the validity of " \
               f"the IGRF-14 coefficients that give the dipole), got {value}" in \
            capsys.readouterr().err
    assert not (tmp_path / "o").exists()
    assert main(["survey", str(tmp_path), "--out", "s.nc", "--window", "abc"]) == 2
    assert "argument --window: expected a duration such as 1D, 6h or 90min, got 'abc'" in \
        capsys.readouterr().err
    assert main(["survey", str(tmp_path), "--out", "s.nc", "--window", "0D"]) == 2
    assert "argument --window: must be a positive duration, got '0D'" in capsys.readouterr().err
    summaries = tmp_path / "summaries"
    summaries.mkdir()
    (summaries / "a.summary.nc").write_bytes(b"")  # the bin check comes before any reading
    assert main(["survey", str(summaries), "--out", str(tmp_path / "s.nc"), "--mlt-bins", "0",
                 "30", "1"]) == 1
    assert "--mlt-bins must lie within 0-24 h, got 0 30 1" in capsys.readouterr().err
    assert main(["survey", str(summaries), "--out", str(tmp_path / "s.nc"), "--l-bins", "1",
                 "nan", "0.5"]) == 1
    assert "--l-bins needs finite LOW < HIGH and STEP > 0" in capsys.readouterr().err


def test_losscone_explains_an_undefined_mcilwain_l(capsys):
    # In 2030 the southern end of the line through (30 N, 0 E, 650 km) is weak enough
    # that a particle mirroring at the point would mirror below the surface in the
    # south: McIlwain's I, hence L, does not exist (McIlwain 1961 defines I between
    # two mirror points above ground). The loss cones are still given.
    got = json.loads(_capture(capsys, ["losscone", "--field", "igrf", "--latitude", "30",
                                       "--longitude", "0", "--height-km", "650",
                                       "--time", "2030-01-01T00:00", "--json"]))
    assert math.isnan(got["L"]["value"])
    assert got["b_local"]["value"] > got["b_foot_south"]["value"]
    assert math.isfinite(got["blc_equatorial"]["value"])
    [note] = got["notes"]["value"]
    assert note.startswith("L is undefined here: a particle mirroring at this point would "
                           "mirror below the Earth's surface")


def test_every_altitude_option_names_its_reference_surface_and_field_its_python_name():
    # issue 14: footpoint (loss) altitudes are measured from the sphere of radius
    # 6371.2 km, the IGRF reference radius (IAGA, IGRF-14 definition); geodetic heights
    # from the WGS-84 ellipsoid (NIMA TR8350.2)
    from beltkit.cli import build_parser

    sub = next(a for a in build_parser()._actions if a.dest == "command").choices
    seen = 0
    for name, parser in sub.items():
        for action in parser._actions:
            text = " ".join((action.help or "").split())
            if "--footpoint-km" in action.option_strings:
                assert "above the sphere of radius R_E = 6371.2 km" in text, (name, text)
                seen += 1
            if "--height-km" in action.option_strings:
                assert "above the WGS-84 ellipsoid" in text, (name, text)
                seen += 1
            if "--field" in action.option_strings or "--summary-field" in action.option_strings:
                assert "model=" in text, (name, text)
                seen += 1
    assert seen == 10  # 4 --footpoint-km, 1 --height-km, 4 --field, 1 --summary-field
