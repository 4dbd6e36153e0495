"""beltkit.batch: survey binning (against plain numpy per cell) and summarize's machinery."""

import json
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, summary_like_dataset, write_flux_file

from beltkit import batch
from beltkit import io as bio


def _write_summaries(tmp_path, n=2, **kwargs):
    paths = []
    for k in range(n):
        ds = summary_like_dataset(seed=10 + k, start=f"2026-03-01T0{2 * k}:00:00", **kwargs)
        paths.append(bio.write_dataset(ds, tmp_path / f"s{k}{batch.SUMMARY_SUFFIX}"))
    return paths


def test_survey_statistics_equal_numpy_per_cell(tmp_path):
    paths = _write_summaries(tmp_path, n=2)
    l_edges = np.array([1.0, 3.0, 5.0, 8.0])
    mlt_edges = np.arange(0.0, 24.01, 6.0)
    out = batch.survey(paths, tmp_path / "survey.nc", l_edges=l_edges, mlt_edges=mlt_edges,
                       time_window="3h")
    sv = xr.open_dataset(out)
    src = xr.concat([xr.open_dataset(p) for p in paths], dim="time", data_vars="all",
                    coords="different", compat="equals", join="outer")
    # samples 00:00-03:19 and 02:00-05:19 UTC; 3 h windows aligned on 1970-01-01
    assert sv.sizes["time"] == 2
    np.testing.assert_array_equal(sv["time_bnds"].values[1], np.array(
        ["2026-03-01T03:00", "2026-03-01T06:00"], dtype="datetime64[ns]"))
    np.testing.assert_array_equal(sv["L_bnds"].values[:, 0], l_edges[:-1])
    np.testing.assert_array_equal(sv["mlt_bnds"].values[:, 1], mlt_edges[1:])
    t = src["time"].values
    win = (t.astype("int64") // (3 * 3600 * 10**9))
    win = win - win.min()
    checked = 0
    for name in ("fraction_trapped", "omni_flux"):
        vals = src[name].values
        for it in range(2):
            for ie in range(src.sizes["energy"]):
                for il in range(3):
                    for im in range(4):
                        sel = ((win == it) & (src["L"].values >= l_edges[il])
                               & (src["L"].values < l_edges[il + 1])
                               & (src["mlt"].values >= mlt_edges[im])
                               & (src["mlt"].values < mlt_edges[im + 1]))
                        v = vals[sel, ie]
                        v = v[np.isfinite(v)]
                        cell = dict(time=it, energy=ie, L=il, mlt=im)
                        assert int(sv[f"{name}_count"][cell]) == v.size
                        if v.size == 0:
                            assert np.isnan(float(sv[f"{name}_mean"][cell]))
                            continue
                        np.testing.assert_allclose(float(sv[f"{name}_mean"][cell]), v.mean(),
                                                   rtol=1e-12)
                        # quantiles come from fixed histograms: within the bound the file
                        # states (absolute for fractions, relative for fluxes; IQR twice it)
                        bound = sv[f"{name}_median"].attrs["quantile_error_bound"]
                        rel = sv[f"{name}_median"].attrs["quantile_error_kind"] == "relative"
                        med = np.median(v)
                        assert abs(float(sv[f"{name}_median"][cell]) - med) <= bound * (
                            abs(med) if rel else 1) * (1 + 1e-9)
                        q75, q25 = np.percentile(v, [75, 25])
                        assert abs(float(sv[f"{name}_iqr"][cell]) - (q75 - q25)) <= 2 * bound * (
                            q75 if rel else 1) * (1 + 1e-9)
                        if v.size > 1:
                            np.testing.assert_allclose(float(sv[f"{name}_std"][cell]),
                                                       v.std(ddof=1), rtol=1e-9)
                        checked += 1
    assert checked > 20
    # total count = finite samples inside the grid
    inside = (src["L"] >= 1) & (src["L"] < 8)
    assert int(sv["fraction_trapped_count"].sum()) == int(
        np.isfinite(src["fraction_trapped"].where(inside)).sum())
    assert sv["fraction_trapped_mean"].attrs["cell_methods"] == "time: L: mlt: mean"
    assert sv["fraction_trapped_mean"].dims == ("time", "energy", "L", "mlt")
    assert sv.attrs["Conventions"] == "CF-1.8"
    assert set(json.loads(sv.attrs["source_sha256"])) == {p.name for p in paths}
    sv.close()
    src.close()


def test_survey_without_window_is_one_window_over_all_samples(tmp_path):
    paths = _write_summaries(tmp_path, n=2)
    sv = xr.open_dataset(batch.survey(paths, tmp_path / "sv.nc"))
    assert sv.sizes["time"] == 1
    lo, hi = sv["time_bnds"].values[0]
    assert lo == np.datetime64("2026-03-01T00:00:00") and hi >= np.datetime64(
        "2026-03-01T05:19:00")
    # default grid: L 1-8 by 0.5, MLT hourly
    assert sv.sizes["L"] == 14 and sv.sizes["mlt"] == 24
    sv.close()


def test_survey_refuses_mismatched_summaries_and_writes_nothing(tmp_path):
    good = _write_summaries(tmp_path, n=1)[0]
    other = bio.write_dataset(summary_like_dataset(n_energy=4),
                              tmp_path / "four.summary.nc")
    igrf = bio.write_dataset(summary_like_dataset(field_model="igrf"),
                             tmp_path / "igrf.summary.nc")
    junk = tmp_path / "junk.summary.nc"
    junk.write_bytes(b"garbage")
    with pytest.raises(batch.SurveyError) as err:
        batch.survey([good, other, igrf, junk], tmp_path / "sv.nc")
    text = str(err.value)
    assert "four.summary.nc: its energies differ" in text
    assert "igrf.summary.nc: field_model 'igrf' differs" in text
    assert "survey the files of each model apart" in text  # the way out with model="auto"
    assert "junk.summary.nc" in text
    assert len(err.value.problems) == 3
    assert not (tmp_path / "sv.nc").exists()


def test_expand_inputs_folders_globs_and_duplicates(tmp_path):
    for name in ("b.nc", "a.cdf", ".hidden.nc", "a.summary.nc", "notes.txt"):
        (tmp_path / name).write_bytes(b"")
    got = batch.expand_inputs([tmp_path, str(tmp_path / "*.nc"), tmp_path / "b.nc"])
    assert [p.name for p in got] == ["a.cdf", "b.nc", "a.summary.nc"]


def test_one_line_joins_convention_problems():
    from beltkit.errors import ConventionError

    exc = ConventionError(["flux: missing 'units'", "L: missing"], source="x.nc")
    assert batch.one_line(exc) == "flux: missing 'units'; L: missing"


def test_duplicate_output_names_fail_without_running(tmp_path):
    (tmp_path / "d1").mkdir()
    (tmp_path / "d2").mkdir()
    a = write_flux_file(tmp_path / "d1" / "day.nc", n_time=10)
    b = write_flux_file(tmp_path / "d2" / "day.nc", flux_dataset(n_time=10))
    results = batch.summarize([a, b], tmp_path / "out", fail_fast=True)
    assert [r.status for r in results][1] == "failed"
    assert "also the output of" in results[1].reason


# ------------------------------------------------------------------ summarize end to end

from beltkit.cli import main  # noqa: E402

CONTRACT_OUTPUTS = (
    "blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial", "loss_cone_north",
    "loss_cone_south", "flux_precipitating", "flux_quasi_trapped", "flux_trapped",
    "omni_flux", "fraction_precipitating", "fraction_quasi_trapped", "fraction_trapped",
    "coverage_precipitating", "coverage_quasi_trapped", "coverage_trapped",
    "loss_cone_filling", "flux_precipitating_err", "fraction_trapped_err", "L", "mlat", "mlt",
)


def _bad_files(folder):
    """One file per kind of bad input; returns {name: expected words in the reason}."""
    good = write_flux_file(folder / "tmp-good.nc", n_time=60)
    (folder / "truncated.nc").write_bytes(good.read_bytes()[:1500])
    good.unlink()
    ds = flux_dataset(n_time=60)
    no_units = ds.copy()
    no_units["flux"].attrs = {k: v for k, v in ds["flux"].attrs.items() if k != "units"}
    write_flux_file(folder / "no_units.nc", no_units)
    wrong = ds.copy()
    wrong["flux"].attrs = {**ds["flux"].attrs, "units": "counts s-1"}
    write_flux_file(folder / "wrong_unit.nc", wrong)
    wide = ds.copy()
    wide["pitch_angle_bnds"] = ds["pitch_angle_bnds"] * 1.2
    wide["pitch_angle"] = ds["pitch_angle"] * 1.2
    write_flux_file(folder / "over_180.nc", wide)
    write_flux_file(folder / "no_position.nc", ds.drop_vars(["L", "mlat", "mlt"]))
    return {
        "truncated.nc": ["truncated.nc"],
        "no_units.nc": ["flux", "units"],
        "wrong_unit.nc": ["flux", "counts s-1"],
        "over_180.nc": ["pitch_angle", "180"],
        "no_position.nc": ["position"],
    }


def _digests(folder):
    return {p.name: bio.sha256(p) for p in sorted(folder.iterdir()) if p.is_file()}


def test_summarize_good_and_bad_files(tmp_path, capsys):
    inp = tmp_path / "in"
    inp.mkdir()
    write_flux_file(inp / "good1.nc", n_time=100, seed=1)
    write_flux_file(inp / "good2.nc", n_time=80, seed=2)
    expected = _bad_files(inp)
    before = _digests(inp)
    out = tmp_path / "out"
    code = main(["summarize", str(inp), "--out", str(out)])
    lines = capsys.readouterr().out.splitlines()
    assert code == 1
    assert _digests(inp) == before  # inputs byte-identical
    for name in ("good1", "good2"):
        line = next(x for x in lines if f"{name}.nc" in x)
        assert line.startswith("ok  ") and f"{name}.summary.nc" in line
        ds = xr.open_dataset(out / f"{name}.summary.nc")
        for var in CONTRACT_OUTPUTS:
            assert var in ds.variables, var
        assert ds.attrs["Conventions"] == "CF-1.8"
        assert ds.attrs["source"] == f"{name}.nc"
        assert ds.attrs["source_sha256"] == before[f"{name}.nc"]
        assert ds.attrs["field_model"] == "dipole"
        assert ds.attrs["footpoint_altitude_km"] == 100.0
        assert f"beltkit summarize {inp} --out {out}" in ds.attrs["history"]
        assert ds.attrs["beltkit_version"]
        assert "field_epoch" in ds.attrs
        ds.close()
    for name, words in expected.items():
        line = next(x for x in lines if name in x)
        assert line.startswith(f"FAILED  {inp / name}: "), line
        for w in words:
            assert w in line, (w, line)
        assert "Traceback" not in line and line.count(name) == 1
        assert not (out / name.replace(".nc", ".summary.nc")).exists()
    report = [json.loads(x) for x in (out / batch.REPORT_NAME).read_text().splitlines()]
    assert sorted(r["status"] for r in report) == ["failed"] * 5 + ["ok"] * 2
    assert all(list(r)[1:] == ["file", "status", "reason", "seconds", "output", "flagged"]
               for r in report)
    assert {r["output"] for r in report if r["status"] == "failed"} == {None}
    assert {Path(r["output"]).name for r in report if r["status"] == "ok"} == {
        "good1.summary.nc", "good2.summary.nc"}
    assert sorted(p.name for p in out.iterdir()) == [
        "good1.summary.nc", "good2.summary.nc", "run-report.jsonl"]


def test_summary_values_equal_partition_of_the_dataset(tmp_path):
    from beltkit.pad import partition

    ds = flux_dataset(n_time=150, seed=7)
    src = write_flux_file(tmp_path / "x.nc", ds)
    [r] = batch.summarize([src], tmp_path / "out", altitude_km=300.0)
    assert r.status == "ok", r.reason
    got = xr.open_dataset(r.output)
    want = partition(bio.open_flux(src, chunks=None), model="dipole", altitude_km=300.0)
    for name in ("fraction_precipitating", "flux_trapped", "blc_local", "fraction_trapped_err"):
        xr.testing.assert_allclose(got[name], want[name].compute())
    # fractions sum to one where every population was fully sampled (common practice)
    full = (got["coverage_precipitating"] == 1) & (got["coverage_trapped"] == 1) & (
        got["coverage_quasi_trapped"] == 1)
    total = (got["fraction_precipitating"] + got["fraction_quasi_trapped"]
             + got["fraction_trapped"]).where(full)
    assert int(full.sum()) > 0
    np.testing.assert_allclose(total.values[full.values], 1.0, rtol=1e-5)
    got.close()


def test_rerun_skips_up_to_date_and_redoes_changed(tmp_path, capsys):
    inp = tmp_path / "in"
    inp.mkdir()
    a = write_flux_file(inp / "a.nc", n_time=50, seed=1)
    write_flux_file(inp / "b.nc", n_time=50, seed=2)
    out = tmp_path / "out"
    assert main(["summarize", str(inp), "--out", str(out)]) == 0
    capsys.readouterr()
    assert main(["summarize", str(inp), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert f"skipped  {inp / 'a.nc'}: up to date" in text and text.count("up to date") == 2
    # a changed input is redone, the other still skipped
    write_flux_file(a, n_time=50, seed=99)
    assert main(["summarize", str(inp), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert f"ok  {a}" in text and text.count("up to date") == 1
    assert xr.open_dataset(out / "a.summary.nc").attrs["source_sha256"] == bio.sha256(a)
    # changed settings redo everything; --overwrite too
    assert main(["summarize", str(inp), "--out", str(out), "--footpoint-km", "200"]) == 0
    assert capsys.readouterr().out.count("ok  ") == 2
    assert main(["summarize", str(inp), "--out", str(out), "--footpoint-km", "200",
                 "--overwrite"]) == 0
    assert capsys.readouterr().out.count("ok  ") == 2


def test_run_interrupted_inside_the_writer_resumes(tmp_path, monkeypatch, capsys):
    inp = tmp_path / "in"
    inp.mkdir()
    for k in range(3):
        write_flux_file(inp / f"f{k}.nc", n_time=40, seed=k)
    out = tmp_path / "out"
    original = xr.Dataset.to_netcdf
    calls = []

    def dies_on_second(self, path, *args, **kwargs):
        calls.append(path)
        if len(calls) == 2:
            original(self, path, *args, **kwargs)  # the temporary file is fully written...
            raise KeyboardInterrupt  # ...and the run is stopped before the rename
        return original(self, path, *args, **kwargs)

    monkeypatch.setattr(xr.Dataset, "to_netcdf", dies_on_second)
    with pytest.raises(KeyboardInterrupt):
        batch.summarize([inp], out)
    monkeypatch.setattr(xr.Dataset, "to_netcdf", original)
    assert sorted(p.name for p in out.iterdir()) == ["f0.summary.nc", "run-report.jsonl"]
    capsys.readouterr()
    assert main(["summarize", str(inp), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert text.count("up to date") == 1 and text.count("ok  ") == 2


def test_fail_fast_stops_after_first_failure(tmp_path, capsys):
    inp = tmp_path / "in"
    inp.mkdir()
    (inp / "a_bad.nc").write_bytes(b"nonsense")
    write_flux_file(inp / "b_good.nc", n_time=20)
    code = main(["summarize", str(inp), "--out", str(tmp_path / "out"), "--fail-fast"])
    text = capsys.readouterr().out
    assert code == 1
    assert f"FAILED  {inp / 'a_bad.nc'}" in text
    assert f"skipped  {inp / 'b_good.nc'}: not attempted" in text
    assert not (tmp_path / "out" / "b_good.summary.nc").exists()


def test_cdf_input_gives_the_same_summary_as_netcdf(tmp_path):
    from _flux_factory import write_flux_cdf

    ds = flux_dataset(n_time=70, seed=4)
    (tmp_path / "nc").mkdir()
    (tmp_path / "cdf").mkdir()
    nc = write_flux_file(tmp_path / "nc" / "day.nc", ds)
    cdf = write_flux_cdf(tmp_path / "cdf" / "day.cdf", ds)
    [r1] = batch.summarize([nc], tmp_path / "o1")
    [r2] = batch.summarize([cdf], tmp_path / "o2")
    assert (r1.status, r2.status) == ("ok", "ok"), (r1.reason, r2.reason)
    a, b = xr.open_dataset(r1.output), xr.open_dataset(r2.output)
    xr.testing.assert_allclose(a, b)
    a.close()
    b.close()


def test_mapping_file_through_the_command(tmp_path, capsys):
    ds = flux_dataset(n_time=30)
    odd = ds.rename_vars({"flux": "eflux_pa", "L": "lshell_dip"}).rename({"energy": "E_chan"})
    odd["eflux_pa"].attrs.pop("units")
    src = tmp_path / "odd.nc"
    odd.to_netcdf(src)
    m = tmp_path / "names.toml"
    m.write_text('[variables]\nflux = "eflux_pa"\nL = "lshell_dip"\nenergy = "E_chan"\n'
                 '[units]\nflux = "cm-2 s-1 sr-1 keV-1"\n')
    assert main(["summarize", str(src), "--out", str(tmp_path / "o"), "--mapping", str(m)]) == 0
    assert (tmp_path / "o" / "odd.summary.nc").exists()
    # a broken mapping stops the run before any file, with one line naming the key
    m.write_text('[variables]\nfluxes = "eflux_pa"\n')
    assert main(["summarize", str(src), "--out", str(tmp_path / "o2"), "--mapping",
                 str(m)]) == 1
    err = capsys.readouterr().err
    assert "names.toml" in err and "fluxes" in err and "Traceback" not in err


def test_progress_bar_only_on_a_terminal(tmp_path, capsys):
    src = write_flux_file(tmp_path / "a.nc", n_time=20)
    main(["summarize", str(src), "--out", str(tmp_path / "o")])
    captured = capsys.readouterr()
    assert "file/s" not in captured.err and "%|" not in captured.err
    lines = batch.summarize([src], tmp_path / "o2", progress=True, log=lambda s: None)
    assert lines[0].status == "ok"
    assert "summarize: 100%" in capsys.readouterr().err


def test_worker_processes_give_the_local_result(tmp_path):
    inp = tmp_path / "in"
    inp.mkdir()
    for k in range(3):
        write_flux_file(inp / f"f{k}.nc", n_time=60, seed=k)
    (inp / "zz_bad.nc").write_bytes(b"x")
    local = batch.summarize([inp], tmp_path / "local")
    pool = batch.summarize([inp], tmp_path / "pool", workers=2)
    assert [r.status for r in pool] == ["ok", "ok", "ok", "failed"], [r.reason for r in pool]
    assert [r.reason for r in pool] == [r.reason for r in local]
    for r in local[:3]:
        name = Path(r.output).name
        a = xr.open_dataset(r.output)
        b = xr.open_dataset(tmp_path / "pool" / name)
        xr.testing.assert_identical(a.drop_attrs(), b.drop_attrs())
        a.close()
        b.close()


@pytest.fixture
def local_cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                      dashboard_address=None) as cluster:
        yield cluster


def test_distributed_scheduler_equals_local(tmp_path, local_cluster):
    inp = tmp_path / "in"
    inp.mkdir()
    for k in range(3):
        write_flux_file(inp / f"f{k}.nc", n_time=60, seed=k)
    (inp / "zz_bad.nc").write_bytes(b"x")
    local = batch.summarize([inp], tmp_path / "local")
    code = main(["summarize", str(inp), "--out", str(tmp_path / "dist"), "--scheduler",
                 local_cluster.scheduler_address])
    assert code == 1  # the bad file
    report = [json.loads(x) for x in (tmp_path / "dist" / batch.REPORT_NAME).read_text()
              .splitlines()]
    assert sorted(r["status"] for r in report) == ["failed", "ok", "ok", "ok"]
    for r in local[:3]:
        name = Path(r.output).name
        a = xr.open_dataset(r.output)
        b = xr.open_dataset(tmp_path / "dist" / name)
        xr.testing.assert_identical(a.drop_attrs(), b.drop_attrs())
        a.close()
        b.close()


def test_sigkill_while_writing_leaves_no_partial_output(tmp_path):
    import os
    import signal
    import subprocess
    import sys
    import time

    inp = tmp_path / "in"
    inp.mkdir()
    write_flux_file(inp / "a_big.nc", n_time=120_000, seed=1)
    write_flux_file(inp / "b_small.nc", n_time=50, seed=2)
    out = tmp_path / "out"
    code = "import sys; from beltkit.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.Popen([sys.executable, "-c", code, "summarize", str(inp), "--out",
                             str(out)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    temps = []
    while time.monotonic() < deadline and proc.poll() is None:
        temps = list(out.glob(".*.beltkit-*.tmp")) if out.is_dir() else []
        if temps:
            break
        time.sleep(0.002)
    assert temps, "the writer's temporary file never appeared (did the run finish too fast?)"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert proc.returncode == -signal.SIGKILL
    assert not (out / "a_big.summary.nc").exists()  # killed while writing: no partial output
    assert not (out / "b_small.summary.nc").exists()  # never started
    assert list(out.glob(".*.beltkit-*.tmp"))  # the stale temporary file is still there
    results = batch.summarize([inp], out)
    assert [r.status for r in results] == ["ok", "ok"]
    assert not list(out.glob(".*.tmp"))  # removed by the rerun
    with xr.open_dataset(out / "a_big.summary.nc") as ds:
        assert ds.sizes["time"] == 120_000
        assert np.isfinite(ds["fraction_trapped"].values).mean() > 0.9


def test_survey_records_each_file_model_and_the_low_altitude_note(tmp_path):
    # r = L cos^2(mlat) R_E (dipole field line, textbook): L <= 1.2 lies below 1,300 km;
    # L >= 3 above 12,000 km
    low = write_flux_file(tmp_path / "low.nc", flux_dataset(n_time=40, l_range=(1.1, 1.2)))
    high = write_flux_file(tmp_path / "high.nc", flux_dataset(n_time=40))
    results = batch.summarize([low, high], tmp_path / "s")  # model="auto": the dipole here
    with xr.open_dataset(results[0].output) as a, xr.open_dataset(results[1].output) as b:
        assert a.attrs["field_model"] == b.attrs["field_model"] == "dipole"
        assert a.attrs["field_model_note"].startswith("40 of 40 samples lie below 2000 km")
        assert "field_model_note" not in b.attrs
    sv = batch.survey([r.output for r in results], tmp_path / "sv.nc")
    with xr.open_dataset(sv) as ds:
        names = [Path(r.output).name for r in results]
        assert json.loads(ds.attrs["field_model_by_file"]) == dict.fromkeys(names, "dipole")
        assert ds.attrs["field_model_note"].startswith(f"1 of 2 summaries ({names[0]})")


def test_epoch_override_is_recorded_and_part_of_the_settings(tmp_path):
    src = write_flux_file(tmp_path / "e.nc", n_time=30)
    [r] = batch.summarize([src], tmp_path / "o")
    with xr.open_dataset(r.output) as ds:
        assert ds.attrs["field_epoch"].startswith("2020")
    [r] = batch.summarize([src], tmp_path / "o", model="dipole", epoch=2015.5)
    assert r.status == "ok"  # other settings: redone, not skipped
    with xr.open_dataset(r.output) as ds:
        assert ds.attrs["field_epoch"] == "2015.5 (fixed by the caller)"
        assert json.loads(ds.attrs["beltkit_settings"])["epoch"] == "2015.5"
    [r] = batch.summarize([src], tmp_path / "o", model="dipole", epoch=2015.5)
    assert (r.status, r.reason) == ("skipped", "up to date")
    with pytest.raises(ValueError, match="use --field dipole"):  # auto: no epoch override
        batch.summarize([src], tmp_path / "o", epoch=2015.5)


def test_geographic_positions_with_igrf_and_with_a_fixed_dipole_epoch(tmp_path, capsys):
    from beltkit import field

    n = 12
    ds = flux_dataset(n_time=n).drop_vars(["L", "mlat", "mlt"])
    xyz = np.asarray(field.geodetic_to_geo(np.linspace(-50, 50, n), np.linspace(0, 60, n),
                                           np.full(n, 650.0)))
    ds["position_geo"] = (("time", "xyz"), xyz, {"units": "km"})
    src = write_flux_file(tmp_path / "leo.nc", ds)
    assert main(["summarize", str(src), "--out", str(tmp_path / "igrf"), "--field",
                 "igrf"]) == 0
    assert main(["summarize", str(src), "--out", str(tmp_path / "dip"), "--field", "dipole",
                 "--epoch", "2015.0"]) == 0
    # the default --field auto: a file with position_geo gets the IGRF
    assert main(["summarize", str(src), "--out", str(tmp_path / "auto")]) == 0
    assert main(["summarize", str(src), "--out", str(tmp_path / "bad"), "--field", "igrf",
                 "--epoch", "2015"]) == 1
    assert "epoch override applies to the dipole model only" in capsys.readouterr().err
    assert not (tmp_path / "bad").exists()
    with xr.open_dataset(tmp_path / "igrf" / "leo.summary.nc") as a, \
            xr.open_dataset(tmp_path / "dip" / "leo.summary.nc") as b:
        assert (a.attrs["field_model"], a.attrs["field_epoch"]) == ("igrf",
                                                                     "time of each sample")
        assert b.attrs["field_epoch"] == "2015.0 (fixed by the caller)"
        assert b.attrs["field_model"] == "dipole"
        # 650 km in the dipole: the note that nothing can be quasi-trapped there
        assert "no quasi-trapped population" in b.attrs["field_model_note"]
        assert "field_model_note" not in a.attrs
        with xr.open_dataset(tmp_path / "auto" / "leo.summary.nc") as c:
            assert (c.attrs["field_model"], c.attrs["field_model_requested"]) == ("igrf",
                                                                                  "auto")
            np.testing.assert_array_equal(c["dlc_local"].values, a["dlc_local"].values)
        for s in (a, b):  # the survey needs L and MLT, derived from the GEO position
            assert np.isfinite(s["L"].values).all() and np.isfinite(s["mlt"].values).all()
            assert ((s["blc_local"] > 0) & (s["blc_local"] <= 90)).all()


def test_value_problems_found_in_the_single_pass_are_all_listed(tmp_path, monkeypatch):
    # summarize checks the flux values while it writes the summary (no separate scan of
    # the file first): a refused file still names every problem, exactly as the validator
    # does, and leaves neither an output nor a temporary file
    from beltkit.pad import validate

    monkeypatch.setattr(batch.products, "TIME_SLAB", 16)  # several slabs: the counts are summed
    monkeypatch.setattr(batch.products, "STREAM_SLAB", 16)
    inp = tmp_path / "in"
    inp.mkdir()
    ds = flux_dataset(n_time=100, seed=3)
    bad = ds.copy(deep=True)
    bad["flux"][5, 0, 2] = -1.0
    bad["flux"][40, 0, 0] = -0.5
    bad["flux"][77, 1, 4] = -2.0
    bad["flux"][:, 2, :] = np.nan
    bad["flux_err"][90, 3, 1] = -0.1
    write_flux_file(inp / "bad_values.nc", bad)
    write_flux_file(inp / "good.nc", ds)
    want = validate(bio.open_flux(inp / "bad_values.nc", chunks=None))
    assert len(want) == 3 and "3 negative values" in want[1]
    # (strict: negative values refuse the file; by default they are masked and flagged)
    results = {Path(r.input).name: r for r in batch.summarize([inp], tmp_path / "out",
                                                               strict=True)}
    assert results["good.nc"].status == "ok", results["good.nc"].reason
    r = results["bad_values.nc"]
    assert r.status == "failed"
    assert r.reason == "; ".join(want)
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "good.summary.nc", "run-report.jsonl"]
    # the checksum recorded after the data is that of the input
    with xr.open_dataset(tmp_path / "out" / "good.summary.nc") as got:
        assert got.attrs["source_sha256"] == bio.sha256(inp / "good.nc")


def test_summary_streamed_in_slabs_equals_one_slab(tmp_path, monkeypatch):
    # a file longer than one slab is summarized slab by slab and appended along an unlimited
    # time dimension; the file read back must equal the one written in one piece (values,
    # encodings of time and fill values, attributes) for compressed and plain outputs
    import netCDF4

    src = write_flux_file(tmp_path / "long.nc", flux_dataset(n_time=130, seed=11))
    for compress in (True, False):
        whole = tmp_path / f"whole{compress}"
        [r1] = batch.summarize([src], whole, compress=compress)
        monkeypatch.setattr(batch.products, "TIME_SLAB", 32)  # 5 slabs, the last one short
        monkeypatch.setattr(batch.products, "STREAM_SLAB", 32)
        sliced = tmp_path / f"sliced{compress}"
        [r2] = batch.summarize([src], sliced, compress=compress)
        monkeypatch.undo()
        assert r1.status == r2.status == "ok", (r1.reason, r2.reason)
        with xr.open_dataset(r1.output) as a, xr.open_dataset(r2.output) as b:
            assert a.sizes == b.sizes and a.sizes["time"] == 130
            # values and variable attributes; of the global ones only the history differs
            xr.testing.assert_identical(a.drop_attrs(deep=False), b.drop_attrs(deep=False))
            assert {k: v for k, v in a.attrs.items() if k != "history"} == {
                k: v for k, v in b.attrs.items() if k != "history"}
            assert a["time"].encoding["units"] == b["time"].encoding["units"]
        with netCDF4.Dataset(r1.output) as n1, netCDF4.Dataset(r2.output) as n2:
            assert not n1.dimensions["time"].isunlimited()  # one slab: a fixed dimension
            assert n2.dimensions["time"].isunlimited()
            v1, v2 = n1["flux_trapped"], n2["flux_trapped"]
            assert v1.filters()["zlib"] is v2.filters()["zlib"] is compress
            assert (v1.chunking() == "contiguous") is (not compress)
            assert v1.getncattr("_FillValue") is not None and np.isnan(v2.getncattr("_FillValue"))


def test_pipelined_run_reports_in_order_and_equals_one_file_at_a_time(tmp_path, monkeypatch):
    # one process: file k is read and computed while file k - 1 is written; the results,
    # the report and the outputs must be those of files run strictly one after another
    # (--fail-fast runs them so), with a refused file and a streamed long file among them
    inp = tmp_path / "in"
    inp.mkdir()
    write_flux_file(inp / "a.nc", flux_dataset(n_time=60, seed=1))
    bad = flux_dataset(n_time=60, seed=2)
    bad["flux"][3, 0, 0] = -1.0
    write_flux_file(inp / "b_bad.nc", bad)
    write_flux_file(inp / "c.nc", flux_dataset(n_time=60, seed=3))
    write_flux_file(inp / "d_long.nc", flux_dataset(n_time=90, seed=4))
    write_flux_file(inp / "e.nc", flux_dataset(n_time=60, seed=5))
    monkeypatch.setattr(batch.products, "TIME_SLAB", 64)  # d_long is streamed in slabs
    monkeypatch.setattr(batch.products, "STREAM_SLAB", 32)
    lines = []
    piped = batch.summarize([inp], tmp_path / "piped", log=lines.append, strict=True)
    names = [Path(r.input).name for r in piped]
    assert names == ["a.nc", "b_bad.nc", "c.nc", "d_long.nc", "e.nc"]
    assert [r.status for r in piped] == ["ok", "failed", "ok", "ok", "ok"]
    assert "negative" in piped[1].reason
    assert [ln.split()[0] for ln in lines] == ["ok", "FAILED", "ok", "ok", "ok"]
    report = [json.loads(ln) for ln in (tmp_path / "piped" / "run-report.jsonl").open()]
    assert [Path(r["file"]).name for r in report] == names
    # the same files one at a time (no pipeline) give identical summaries
    for r in piped:
        if r.status != "ok":
            continue
        [one] = batch.summarize([r.input], tmp_path / "one", fail_fast=True, strict=True)
        assert one.status == "ok", one.reason
        with xr.open_dataset(r.output) as a, xr.open_dataset(one.output) as b:
            xr.testing.assert_identical(a.drop_attrs(deep=False), b.drop_attrs(deep=False))
            assert a.attrs["source_sha256"] == b.attrs["source_sha256"] == bio.sha256(r.input)
    assert sorted(p.name for p in (tmp_path / "piped").iterdir()) == [
        "a.summary.nc", "c.summary.nc", "d_long.summary.nc", "e.summary.nc",
        "run-report.jsonl"]


@pytest.mark.parametrize("diffusion", [False, True])
@pytest.mark.parametrize("workers_path", ["pipelined", "streamed", "fail_fast"])
def test_each_input_is_validated_exactly_once(tmp_path, monkeypatch, diffusion, workers_path):
    # issue 14: one validation per file and run, whichever path the file takes (the
    # two-stage pipeline of a file of one slab, the slab-by-slab stream of a longer one,
    # the one-file-at-a-time path of fail_fast), with or without the diffusion outputs
    from beltkit.pad import conventions

    calls = []
    inner = conventions._inspect

    def counting(ds, *args, **kwargs):
        calls.append(ds.sizes.get("time"))
        return inner(ds, *args, **kwargs)

    monkeypatch.setattr(conventions, "_inspect", counting)
    if workers_path == "streamed":
        monkeypatch.setattr(batch.products, "TIME_SLAB", 16)
        monkeypatch.setattr(batch.products, "STREAM_SLAB", 16)
    inp = tmp_path / "in"
    inp.mkdir()
    for k in range(3):
        write_flux_file(inp / f"day{k}.nc", flux_dataset(n_time=60, seed=20 + k))
    results = batch.summarize([inp], tmp_path / "out", diffusion=diffusion,
                              fail_fast=workers_path == "fail_fast")
    assert [r.status for r in results] == ["ok"] * 3, [r.reason for r in results]
    assert calls == [60, 60, 60]  # each whole file once, never a slab
    # a second run finds them up to date without validating anything
    calls.clear()
    again = batch.summarize([inp], tmp_path / "out", diffusion=diffusion)
    assert [r.reason for r in again] == ["up to date"] * 3 and calls == []
