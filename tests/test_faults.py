"""Fault campaign (issue 15): mutated inputs, a killed run, unusable output folders.

* A seeded fuzz run mutates good demo-like files the ways real archives go
  wrong (unit strings, NaN/inf/negative/huge values, transposed dimensions,
  empty time, reversed or rescaled pitch angles, dropped variables, shuffled
  time, truncated bytes) and summarises them all in one ``beltkit summarize``
  run beside good files: no traceback, every refused file named on its own
  line with its reason, the good files (and the mutations that are only bad
  samples) summarised, every input byte-identical afterwards (SHA-256, FIPS
  180-4, through hashlib).
* ``beltkit summarize`` killed with SIGKILL at several moments (before any
  output, in the middle of writing a summary, after some summaries) never
  leaves a half-written file under a final name, and a rerun ends equal to a
  clean run.
* An output folder that cannot be created or written to gives one line
  naming it, before any input is read.

The files are invented test input (tests/_flux_factory.py); the expected
outcomes are the behaviour issue 15 asks for.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, write_flux_file

from beltkit import batch
from beltkit.cli import main

N_TIME = 48
SUMMARY = ".summary.nc"


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _good(seed):
    return flux_dataset(n_time=N_TIME, n_energy=3, n_pitch=8, seed=seed)


# every mutation: (build(rng) -> Dataset or bytes, expected status, words of the reason)
# "either": summarised or refused, depending on what the reader makes of it; a summary
# must then hold the same numbers as the unmutated file (never a silently wrong number)
def _units(var, units):
    def build(rng):
        ds = _good(1)
        ds[var].attrs = {**ds[var].attrs, "units": units}
        return ds
    return build


def _values(kind):
    def build(rng):
        ds = _good(1)
        flux = ds["flux"].values
        t = rng.choice(N_TIME, 5, replace=False)
        e = rng.integers(0, 3, 5)
        p = rng.integers(0, 8, 5)
        if kind == "nan":
            flux[rng.random(flux.shape) < 0.05] = np.nan
        else:
            flux[t, e, p] = {"inf": np.inf, "negative": -3.0, "huge": 1e30}[kind]
        return ds
    return build


def _transposed(rng):
    ds = _good(1)
    return ds.transpose("pitch_angle", "time", "energy", ...)


def _empty_time(rng):
    return _good(1).isel(time=slice(0, 0))


def _reversed_pitch(rng):
    return _good(1).isel(pitch_angle=slice(None, None, -1))


def _rescaled_pitch(rng):
    ds = _good(1)
    ds["pitch_angle_bnds"] = ds["pitch_angle_bnds"] * 10.0
    return ds.assign_coords(pitch_angle=ds["pitch_angle"] * 10.0)


def _dropped(*names):
    def build(rng):
        return _good(1).drop_vars(list(names))
    return build


def _shuffled_time(rng):
    ds = _good(1)
    return ds.isel(time=rng.permutation(N_TIME))


def _glitches(rng):
    ds = _good(1)
    t = rng.choice(N_TIME, 5, replace=False)
    ds["L"].values[t[:2]] = 0.7
    ds["mlat"].values[t[2:]] = 95.0
    return ds


def _truncated(rng):
    good = _good(1)
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        path = write_flux_file(Path(d) / "x.nc", good)
        data = path.read_bytes()
    return data[: int(len(data) * rng.uniform(0.2, 0.8))]


def _garbage(rng):
    return rng.integers(0, 256, 4096, dtype=np.uint8).tobytes()


MUTATIONS = {
    "units_flux": (_units("flux", "furlong-2 s-1"), "failed", ["flux", "furlong"]),
    "units_energy": (_units("energy", "parsec"), "failed", ["energy", "parsec"]),
    "units_cdf_markup": (_units("flux", "cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N"), "ok", []),
    "values_nan": (_values("nan"), "ok", []),
    "values_inf": (_values("inf"), "ok", []),
    "values_negative": (_values("negative"), "ok", []),
    "values_huge": (_values("huge"), "ok", []),
    "transposed": (_transposed, "ok", []),
    "empty_time": (_empty_time, "failed", ["time: no samples"]),
    "reversed_pitch": (_reversed_pitch, "either", ["pitch_angle"]),
    "rescaled_pitch": (_rescaled_pitch, "failed", ["pitch_angle", "180"]),
    "dropped_flux": (_dropped("flux", "flux_err", "counts"), "failed", ["flux"]),
    "dropped_position": (_dropped("L", "mlat", "mlt"), "failed", ["position"]),
    "dropped_pitch_angle": (_dropped("pitch_angle", "pitch_angle_bnds"), "failed",
                            ["pitch_angle"]),
    "shuffled_time": (_shuffled_time, "either", ["time"]),
    "glitches": (_glitches, "ok", []),
    "truncated": (_truncated, "failed", []),
    "garbage": (_garbage, "failed", []),
}


@pytest.fixture(scope="module")
def fuzz_run(tmp_path_factory):
    """Write the corpus (seeded), summarise it in one run; return what the run left."""
    root = tmp_path_factory.mktemp("fuzz")
    inp = root / "in"
    inp.mkdir()
    rng = np.random.default_rng(15)
    for k in range(3):
        write_flux_file(inp / f"good_{k}.nc", _good(k + 1))
    for name, (build, _, _) in MUTATIONS.items():
        made = build(rng)
        if isinstance(made, bytes):
            (inp / f"{name}.nc").write_bytes(made)
        else:
            write_flux_file(inp / f"{name}.nc", made)
    # combinations of two sample-level faults, drawn with the same seed
    kinds = ["values_nan", "values_inf", "values_negative", "values_huge", "glitches"]
    combos = []
    for k in range(3):
        a, b = rng.choice(kinds, 2, replace=False)
        ds = MUTATIONS[a][0](rng)
        extra = MUTATIONS[b][0](rng)
        for var in ("flux", "L", "mlat"):  # b's faults on top of a's
            changed = ~np.isclose(extra[var].values, _good(1)[var].values, equal_nan=True)
            ds[var].values[changed] = extra[var].values[changed]
        combos.append(f"combo_{k}_{a}_{b}.nc")
        write_flux_file(inp / combos[-1], ds)
    before = {p.name: _sha256(p) for p in inp.iterdir()}
    out = root / "out"
    missing = inp / "not_there.nc"
    import contextlib
    import io

    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(["summarize", str(inp), str(missing), "--out", str(out)])
    after = {p.name: _sha256(p) for p in inp.iterdir()}
    return {"inp": inp, "out": out, "code": code, "stdout": stdout.getvalue(),
            "stderr": stderr.getvalue(), "before": before, "after": after,
            "combos": combos, "missing": missing}


def _lines_by_file(run):
    lines = {}
    for line in run["stdout"].splitlines():
        for prefix in ("ok  ", "FAILED  ", "skipped  "):
            if line.startswith(prefix):
                path = line[len(prefix):].split(" -> ")[0].split(": ")[0]
                assert Path(path).name not in lines, f"two lines for {path}"
                lines[Path(path).name] = line
    return lines


def test_fuzzed_inputs_are_named_refused_or_summarised_and_never_modified(fuzz_run):
    run = fuzz_run
    assert run["code"] == 1  # some files failed
    text = run["stdout"] + run["stderr"]
    assert "Traceback" not in text and "Error:" not in run["stderr"]
    assert run["after"] == run["before"]  # every input byte-identical
    lines = _lines_by_file(run)
    names = sorted(run["before"]) + [run["missing"].name]
    assert sorted(lines) == sorted(names)  # one line per input, the missing path included
    assert lines["not_there.nc"] == f"FAILED  {run['missing']}: no such file"
    report = [json.loads(x) for x in (run["out"] / batch.REPORT_NAME).read_text().splitlines()]
    assert sorted(Path(r["file"]).name for r in report) == sorted(names)
    status = {Path(r["file"]).name: r["status"] for r in report}
    expected = {f"good_{k}.nc": ("ok", []) for k in range(3)}
    expected.update({f"{n}.nc": (s, w) for n, (_, s, w) in MUTATIONS.items()})
    expected.update({c: ("ok", []) for c in run["combos"]})
    for name, (want, words) in expected.items():
        line = lines[name]
        got = status[name]
        assert want in (got, "either"), (name, line)
        assert line.startswith("ok  " if got == "ok" else "FAILED  "), line
        summary = run["out"] / (name[:-3] + SUMMARY)
        if got == "failed":
            reason = line.split(f"{name}: ", 1)[1]
            assert reason.strip() and "\n" not in reason, line
            assert all(w in reason for w in words), (name, words, reason)
            assert not summary.exists()
        else:
            assert summary.exists(), name
    # only summaries and the report in the output folder: no temporaries, nothing partial
    left = sorted(p.name for p in run["out"].iterdir())
    assert left == sorted([n[:-3] + SUMMARY for n, s in status.items() if s == "ok"]
                          + [batch.REPORT_NAME])


def _summary(run, name):
    with xr.open_dataset(run["out"] / (name + SUMMARY)) as ds:
        return ds.load()


def test_fuzzed_sample_faults_are_flagged_counted_and_leave_the_rest_unchanged(fuzz_run):
    run = fuzz_run
    report = {Path(r["file"]).name: r for r in
              (json.loads(x) for x in (run["out"] / batch.REPORT_NAME).read_text()
               .splitlines())}
    clean = _summary(run, "good_0")  # good_0 is the unmutated file (seed 1)
    for name, flag_name, bit in (("values_negative", "negative_flux_masked", 2048),
                                 ("glitches", "position_out_of_range", 4096),
                                 # +-inf shares the bit of values outside the valid range
                                 ("values_inf", "input_out_of_valid_range", 512)):
        got = _summary(run, name)
        n = report[f"{name}.nc"]["flagged"][flag_name]
        assert n == 5  # five faulty samples, at five different times
        assert got.attrs[f"beltkit_samples_{flag_name}"] == 5
        assert "flagged time samples: " in next(
            ln for ln in run["stdout"].splitlines() if f"{name}.nc" in ln)
        hit = (got["partition_flag"].values & bit) != 0
        assert int(hit.any(axis=1).sum()) == 5
        # every sample without the flag holds the clean file's numbers
        for var in ("flux_trapped", "fraction_precipitating", "omni_flux"):
            a, b = got[var].values, clean[var].values
            np.testing.assert_allclose(a[~hit], b[~hit], rtol=1e-6)
            if bit == 4096:  # an impossible position: no number at all
                assert np.isnan(a[hit]).all()
    # transposed dimensions and (when summarised) reversed or shuffled axes change no number
    for name in ("transposed", "reversed_pitch", "shuffled_time", "units_cdf_markup"):
        if report[f"{name}.nc"]["status"] != "ok":
            continue
        got = _summary(run, name)
        for var in ("flux_trapped", "fraction_precipitating", "blc_local"):
            np.testing.assert_allclose(got[var].values, clean[var].values, rtol=1e-6,
                                       err_msg=f"{name}: {var}")
    assert report["values_huge.nc"]["status"] == "ok"


# ---------------------------------------------------------------- killed runs


def _final_names(folder: Path):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(SUMMARY)) \
        if folder.is_dir() else []


def _temporaries(folder: Path):
    return [p for p in folder.iterdir() if p.name.endswith(".tmp")] if folder.is_dir() else []


def _same_summary(path: Path, ref: Path):
    with xr.open_dataset(path) as a, xr.open_dataset(ref) as b:
        xr.testing.assert_identical(a.drop_attrs(deep=False), b.drop_attrs(deep=False))
        for key in ("source_sha256", "beltkit_settings", "beltkit_samples_negative_flux_masked"):
            assert a.attrs.get(key) == b.attrs.get(key), key


def test_summarize_killed_at_several_moments_then_rerun_equals_a_clean_run(tmp_path):
    inp = tmp_path / "in"
    inp.mkdir()
    for k in range(4):
        ds = flux_dataset(n_time=3000, n_energy=4, n_pitch=12, seed=20 + k)
        ds["flux"].values[k * 10, 0, 0] = -1.0  # one masked sample each
        write_flux_file(inp / f"f{k}.nc", ds)
    before = {p.name: _sha256(p) for p in inp.iterdir()}
    clean = tmp_path / "clean"
    assert all(r.status == "ok" for r in batch.summarize([inp], clean, compress=False))
    out = tmp_path / "out"
    cmd = [sys.executable, "-c", "import sys; from beltkit.cli import main; sys.exit(main())",
           "summarize", str(inp), "--out", str(out), "--compression", "0"]
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    checked = set()

    def check_finals():
        # a final name always holds the whole file; a later run never rewrites a final
        # file (it is up to date), so checking each one once, after the kill, sees it
        # exactly as it was when it appeared
        for name in _final_names(out):
            if name not in checked:
                _same_summary(out / name, clean / name)
                checked.add(name)

    # moments: 0.3 s in (before any output), as soon as a temporary exists (mid-write),
    # and once two summaries are in place and the next one is being written
    moments = [("start", lambda: False), ("mid-write", lambda: bool(_temporaries(out))),
               ("later", lambda: len(_final_names(out)) >= 2 and bool(_temporaries(out)))]
    for label, ready in moments:
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                                env=env)
        t0 = time.monotonic()
        killed = False
        # the poll loop only lists the folder (a full check of a new file here would take
        # longer than a small file's temporary lives, and the moment could be missed)
        while proc.poll() is None:
            if (label == "start" and time.monotonic() - t0 > 0.3) or ready():
                os.kill(proc.pid, signal.SIGKILL)
                killed = True
                break
            time.sleep(0.001)
        proc.wait()
        assert killed or proc.returncode == 0, (label, proc.stderr.read())
        proc.stderr.close()
        check_finals()
        assert killed, f"the run ended before the moment '{label}'"
    # the rerun removes the killed writers' temporaries and finishes the rest
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    assert not _temporaries(out)
    assert _final_names(out) == _final_names(clean) == [f"f{k}{SUMMARY}" for k in range(4)]
    for name in _final_names(out):
        _same_summary(out / name, clean / name)
    assert {p.name: _sha256(p) for p in inp.iterdir()} == before


# ---------------------------------------------------------------- output folders


def test_unusable_output_folder_is_one_line_naming_it(tmp_path, capsys):
    src = write_flux_file(tmp_path / "a.nc", _good(1))
    digest = _sha256(src)
    # a folder that cannot be created (its parent is a file)
    blocker = tmp_path / "blocker"
    blocker.write_text("not a folder")
    assert main(["summarize", str(src), "--out", str(blocker / "out")]) == 1
    captured = capsys.readouterr()
    err = captured.err.strip().splitlines()
    assert err == [f"beltkit summarize: error: output folder {blocker / 'out'} cannot be "
                   "created (Not a directory); give a folder you can write to"]
    assert "Traceback" not in captured.out
    # a folder that exists but cannot be written to (root ignores the mode bits: the
    # immutable attribute, chattr(1), stops root too)
    ro = tmp_path / "readonly"
    ro.mkdir()
    ro.chmod(0o555)
    as_root = os.geteuid() == 0
    if as_root:
        subprocess.run(["chattr", "+i", str(ro)], check=True)
    try:
        assert main(["summarize", str(src), "--out", str(ro)]) == 1
    finally:
        if as_root:
            subprocess.run(["chattr", "-i", str(ro)], check=True)
        ro.chmod(0o755)
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(
        f"beltkit summarize: error: output folder {ro} is not writable (")
    assert list(ro.iterdir()) == []  # nothing written, no report
    assert _sha256(src) == digest


# ---------------------------------------------------------------- masked when read


def test_values_masked_when_read_are_flagged_counted_or_refused_with_strict(tmp_path, capsys):
    # the reader masks values above the CF valid_max and samples whose quality the
    # mapping rejects (read_flag bits 2 and 4); summarize flags and counts them, and
    # --strict refuses the file naming both (CF-1.8 section 2.5.1 for valid_max)
    ds = _good(3)
    ds["flux"].attrs["valid_max"] = np.float32(1e12)
    ds["flux"].values[[7, 8], 0, 2] = 5e13  # saturated: above valid_max
    quality = np.zeros(N_TIME, dtype="int8")
    quality[[20, 21, 22]] = 2
    ds["quality"] = ("time", quality, {"flag_values": np.array([0, 1, 2], dtype="int8"),
                                       "flag_meanings": "good fair bad"})
    src = write_flux_file(tmp_path / "masked.nc", ds)
    mapping = tmp_path / "map.toml"
    mapping.write_text("[quality]\nreject_values = [2]\n")
    assert main(["summarize", str(src), "--out", str(tmp_path / "a"), "--mapping",
                 str(mapping)]) == 0
    line = capsys.readouterr().out.splitlines()[0]
    assert line.endswith("; flagged time samples: 2 input_out_of_valid_range, "
                         "3 input_quality_rejected"), line
    with xr.open_dataset(tmp_path / "a" / ("masked" + SUMMARY)) as got:
        assert got.attrs["beltkit_samples_input_out_of_valid_range"] == 2
        assert got.attrs["beltkit_samples_input_quality_rejected"] == 3
        flag = got["partition_flag"].values
        assert (flag[[7, 8], 0] & 512).all() and not (flag[:, 1:] & 512).any()
        assert (flag[[20, 21, 22]] & 1024).all()
        assert np.isnan(got["flux_trapped"].values[[20, 21, 22]]).all()  # all bins rejected
        assert np.isfinite(got["flux_trapped"].values[[7, 8], 0]).all()  # one bin masked
    assert main(["summarize", str(src), "--out", str(tmp_path / "b"), "--mapping",
                 str(mapping), "--strict"]) == 1
    line = capsys.readouterr().out.splitlines()[0]
    assert line.startswith(f"FAILED  {src}: flux: 2 values out of valid range (masked when "
                           "read)"), line
    assert "flux: 72 values quality rejected" in line  # 3 samples x 3 energies x 8 bins
    assert not (tmp_path / "b" / ("masked" + SUMMARY)).exists()


def test_record_varying_energy_table_is_summarised_with_its_channel_energies(tmp_path):
    # an (time, channel) energy table (ISTP record-varying DEPEND_1): each sample keeps its
    # own channel energies in the summary; the diffusion outputs, which need one energy per
    # channel, refuse it in one line that says how to get there
    ds = _good(2)
    table = ds["energy"].values[None, :] * (1.0 + 0.01 * np.arange(N_TIME)[:, None])
    varying = ds.drop_vars(["energy", "energy_bnds"])
    varying["energy_table"] = (("time", "energy"), table / 1e3, {"units": "MeV"})
    src = write_flux_file(tmp_path / "varying.nc", varying)
    mapping = {"variables": {"energy": "energy_table"}}
    [r] = batch.summarize([src], tmp_path / "out", mapping=mapping)
    assert r.status == "ok", r.reason
    with xr.open_dataset(r.output) as got, xr.open_dataset(
            batch.summarize([write_flux_file(tmp_path / "fixed.nc", ds)],
                            tmp_path / "ref")[0].output) as ref:
        assert got["channel_energy"].dims == ("time", "energy")
        np.testing.assert_allclose(got["channel_energy"].values, table, rtol=1e-6)
        # the partition does not depend on the channel energies: the same numbers
        np.testing.assert_array_equal(got["flux_trapped"].values, ref["flux_trapped"].values)
    [r] = batch.summarize([src], tmp_path / "diff", mapping=mapping, diffusion=True)
    assert r.status == "failed" and r.reason.startswith(
        "channel_energy: the diffusion outputs need one energy per channel"), r.reason


def test_inspect_separates_bad_samples_from_bad_files(tmp_path, capsys):
    ds = _good(4)
    ds["L"].values[3] = 0.7
    ds["flux"].values[5, 1, 2] = -1.0
    src = write_flux_file(tmp_path / "samples.nc", ds)
    assert main(["inspect", str(src), str(tmp_path / "typo.nc")]) == 1  # the typo fails
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"ok  {src}"
    notes = [ln for ln in out if ln.startswith("    masked and flagged by summarize")]
    assert [n.split(": ", 1)[1].split(":")[0] for n in notes] == ["L", "flux"]
    assert f"FAILED  {tmp_path / 'typo.nc'}: no such file" in out
    assert out[-1] == "2 file(s) checked, 1 with problems"
