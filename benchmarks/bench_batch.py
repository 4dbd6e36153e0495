"""Benchmark of ``beltkit.batch.summarize`` on day-long files.

Figures (``run(quick=False)`` rows):

* total wall time of ``summarize`` over 20 files of 86,400 samples x 8
  energies x 12 pitch-angle bins (one day at 1 s; flux, flux_err and counts),
  dipole model, one worker, beside a baseline that only opens, loads and
  rewrites the same files with xarray. The ratio is the figure (target <= 1.5).
  Three rows: both sides writing zlib-compressed files at the same level
  (level 4, and summarize's default level 1; one run each), and both
  uncompressed (the two alternated seven times, medians: a 3 s run moves by
  a sixth from one to the next on a shared machine); and, informative,
  ``hemispheres=True`` (the eight per-hemisphere outputs added) at the default
  level over the default summary;
* speed-up of ``workers=2`` over one worker (target > 1);
* peak resident memory of one worker process summarizing one file
  (target < 1 GB), the high-water mark the kernel reports for that process,
  and the same for a file three times as long (streaming: target < 1.5x).

Quick mode (CI smoke test): 4 files of 8,640 samples. The first call of the
partition engine compiles its kernel; a warm-up run on one file comes first
so that the timings are of the steady state.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import xarray as xr
from _common import row

from beltkit import batch
from beltkit.io.write import DEFAULT_COMPLEVEL

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"


def _day_file(path: Path, n_time: int, seed: int) -> Path:
    """Write one synthetic day-file following the data conventions (benchmark input only)."""
    rng = np.random.default_rng(seed)
    n_e, n_a = 8, 12
    e_edges = np.geomspace(50.0, 3000.0, n_e + 1)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    a_edges = np.linspace(0.0, 180.0, n_a + 1)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    frac = np.linspace(0.0, 1.0, n_time)
    mean = (1e4 * (energy / 100.0) ** -2.0)[None, :, None] * (
        np.sin(np.radians(alpha)) ** 2)[None, None, :] * (1 + 0.5 * np.sin(6 * frac))[:, None,
                                                                                     None]
    factor = np.full(n_e, 0.5)
    counts = rng.poisson(mean / factor[None, :, None]).astype("int32")
    flux = (counts * factor[None, :, None]).astype("float32")
    err = (np.sqrt(np.maximum(counts, 1)) * factor[None, :, None]).astype("float32")
    t0 = np.datetime64("2026-06-01T00:00:00", "ns") + np.timedelta64(seed, "D")
    dims = ("time", "energy", "pitch_angle")
    ds = xr.Dataset(
        {
            "flux": (dims, flux, {"units": FLUX_UNITS}),
            "flux_err": (dims, err, {"units": FLUX_UNITS}),
            "counts": (dims, counts, {"units": "1"}),
            "counts_to_flux": ("energy", factor, {"units": FLUX_UNITS}),
            "energy_bnds": (("energy", "nv"), np.stack([e_edges[:-1], e_edges[1:]], -1)),
            "pitch_angle_bnds": (("pitch_angle", "nv"),
                                 np.stack([a_edges[:-1], a_edges[1:]], -1)),
            "L": ("time", 2.0 + 4.0 * np.abs(np.sin(3 * np.pi * frac)), {"units": "1"}),
            "mlat": ("time", 15.0 * np.sin(20 * np.pi * frac), {"units": "degree"}),
            "mlt": ("time", (24 * 4 * frac) % 24, {"units": "h"}),
        },
        coords={
            "time": t0 + (np.arange(n_time) * 1e9).astype("timedelta64[ns]"),
            "energy": ("energy", energy, {"units": "keV", "bounds": "energy_bnds"}),
            "pitch_angle": ("pitch_angle", alpha, {"units": "degree",
                                                   "bounds": "pitch_angle_bnds"}),
        },
    )
    ds.to_netcdf(path, encoding={"time": {"units": "seconds since 2000-01-01",
                                          "dtype": "float64"}})
    return path


def _baseline(files, out_dir: Path, complevel: int) -> float:
    """Open, load and rewrite each file with xarray; return total seconds."""
    out_dir.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    for f in files:
        with xr.open_dataset(f) as ds:
            ds = ds.load()
            enc = ({v: {"zlib": True, "complevel": complevel, "shuffle": True}
                    for v in ds.data_vars} if complevel else None)
            ds.to_netcdf(out_dir / Path(f).name, encoding=enc)
    return time.perf_counter() - t0


def _summarize(files, out_dir: Path, *, workers=1, compress=True, hemispheres=False) -> float:
    t0 = time.perf_counter()
    results = batch.summarize(files, out_dir, workers=workers, compress=compress,
                              overwrite=True, hemispheres=hemispheres)
    seconds = time.perf_counter() - t0
    bad = [r for r in results if r.status != "ok"]
    if bad:
        raise RuntimeError(f"summarize failed on {bad[0].input}: {bad[0].reason}")
    return seconds


def _peak_memory_mb(file: Path, out_dir: Path) -> float:
    """Peak RSS (MB) of a fresh process that summarizes one file.

    The child reports its own high-water mark (``VmHWM`` of /proc/self/status):
    ``ru_maxrss`` of a child would include the parent's size at fork time.
    """
    code = ("import sys; from beltkit import batch; "
            "r = batch.summarize([sys.argv[1]], sys.argv[2], overwrite=True); "
            "assert r[0].status == 'ok', r[0].reason; "
            "hwm = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0]; "
            "print(hwm.split()[1])")
    proc = subprocess.run([sys.executable, "-c", code, str(file), str(out_dir)],
                          capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"the memory-measurement run failed: {proc.stderr[-500:]}")
    return int(proc.stdout.split()[-1]) / 1024.0  # kB


def run(quick=False) -> list[dict]:
    """Run the batch benchmark; return the result rows."""
    n_files, n_time = (4, 8640) if quick else (20, 86400)
    work = Path(tempfile.mkdtemp(prefix="beltkit-bench-batch-"))
    try:
        (work / "in").mkdir()
        files = [_day_file(work / "in" / f"day{k:02d}.nc", n_time, k) for k in range(n_files)]
        _summarize(files[:1], work / "warm")  # compile the engine's kernel once
        rows = []
        # the runs of the baseline and of summarize alternate; the median of 7 is kept
        # for the quick uncompressed runs (a shared machine's speed drifts), one run of
        # each for the compressed ones (a minute apiece)
        # level 4 was the default before 5 December 2026 (kept for comparison with earlier
        # tables); DEFAULT_COMPLEVEL (1) is the default since
        for level, label, repeats in ((4, "zlib level 4 on both sides", 1),
                                      (DEFAULT_COMPLEVEL, f"zlib level {DEFAULT_COMPLEVEL} on "
                                       "both sides, summarize's default", 1),
                                      (0, "uncompressed", 7)):
            bases, ours_ = [], []
            for _ in range(repeats):
                bases.append(_baseline(files, work / f"base{level}", level))
                ours_.append(_summarize(files, work / f"out{level}", compress=level))
            base, ours = float(np.median(bases)), float(np.median(ours_))
            ratio = ours / base
            rows.append(row(f"summarize {n_files} files of {n_time}x8x12 vs xarray "
                            f"open-load-rewrite ({label})", ours, "s", base, "<= 1.5x",
                            ratio <= 1.5))
            if level == DEFAULT_COMPLEVEL:  # the cost of the opt-in per-hemisphere outputs
                hemi = _summarize(files, work / "hemi", compress=level, hemispheres=True)
                rows.append(row(f"summarize --hemispheres over summarize ({label}; eight more "
                                "variables per summary)", hemi, "s", ours))
        one = _summarize(files, work / "w1", workers=1)
        two = _summarize(files, work / "w2", workers=2)
        # on the quick files the pool's start-up dominates: informative only there
        rows.append(row(f"speed-up of --workers 2 over 1 ({n_files} files)", one / two, "x",
                        None, "> 1 (full size)" if quick else "> 1",
                        None if quick else one / two > 1.0))
        rows[-1]["baseline"] = one
        rows[-1]["ratio"] = one / two
        peak = _peak_memory_mb(files[0], work / "mem")
        rows.append(row(f"peak memory of one worker ({n_time}x8x12 file)", peak, "MB",
                        None, "< 1024 MB", peak < 1024.0))
        # streaming: a file three times as long must not need three times the memory
        (work / "long").mkdir()
        long_file = _day_file(work / "long" / "three_days.nc", 3 * n_time, 99)
        peak3 = _peak_memory_mb(long_file, work / "mem3")
        rows.append(row(f"peak memory, {3 * n_time}-sample file over {n_time}-sample file",
                        peak3, "MB", peak, "< 1.5x", peak3 < 1.5 * peak))
        return rows
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    import json

    quick = "--quick" in sys.argv
    for r in run(quick=quick):
        print(json.dumps(r))
