"""Benchmark of the archive-scale survey: one year of one-second summaries in flat memory.

Measures, on generated summaries of 86,400 samples x 8 energies per day (a
few distinct day files, hard-linked under one name per day, so generating
them does not dominate; the survey reads every name in full):

* the wall time of ``beltkit.batch.survey`` over 365 days with 2 worker
  processes (target < 10 min on 2 cores) and with 1;
* the speed-up of ``workers=2`` over 1 (target >= 1.7);
* the peak resident memory of the surveying process and of its busiest
  worker (target < 1 GB each), from their own high-water marks;
* the peak memory of a 30-day and a 365-day survey (target: within 20 %).

``--quick`` uses day files of 8,640 samples, 36 and 12 days: a smoke test of
the machinery whose timings are informative only.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr
from _common import row

N_DISTINCT = 4


def _day_summary(path: Path, n_time: int, seed: int, day: int) -> Path:
    """Write a summary-shaped file: fractions, fluxes and a position per second."""
    from beltkit import io as bio

    rng = np.random.default_rng(seed)
    t0 = np.datetime64("2027-01-01", "ns") + np.timedelta64(day, "D")
    time = t0 + (np.arange(n_time) * (86400 // n_time) * 1e9).astype("timedelta64[ns]")
    e_edges = np.geomspace(30.0, 3000.0, 9)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    phase = np.arange(n_time) / 5400.0 * 2 * np.pi  # a 90-minute orbit
    L = (1.2 + 5.5 * np.abs(np.sin(phase))).astype("float32")
    mlt = ((np.arange(n_time) / 3600.0 + 6 * np.cos(phase / 15)) % 24).astype("float32")
    f32 = "float32"
    raw = rng.gamma(2.0, size=(3, n_time, 8)).astype(f32)
    frac = raw / raw.sum(axis=0)
    omni = (10 ** (3 + rng.normal(0, 0.7, (n_time, 8)))).astype(f32)
    te = ("time", "energy")
    flux_units = {"units": "cm-2 s-1 keV-1"}
    data = {
        "L": ("time", L, {"units": "1"}),
        "mlt": ("time", mlt, {"units": "h"}),
        "mlat": ("time", (30 * np.sin(phase)).astype(f32), {"units": "degree"}),
        "omni_flux": (te, omni, flux_units),
        "loss_cone_filling": (te, rng.uniform(0, 1.2, (n_time, 8)).astype(f32), {"units": "1"}),
        "energy_bnds": (("energy", "nv"), np.stack([e_edges[:-1], e_edges[1:]], -1),
                        {"units": "keV"}),
    }
    for k, pop in enumerate(("precipitating", "quasi_trapped", "trapped")):
        data[f"fraction_{pop}"] = (te, frac[k], {"units": "1"})
        data[f"flux_{pop}"] = (te, omni * frac[k], flux_units)
    for hemi in ("north", "south"):
        data[f"fraction_lost_{hemi}"] = (te, 0.5 * frac[0], {"units": "1"})
        data[f"flux_lost_{hemi}"] = (te, 0.5 * omni * frac[0], flux_units)
    ds = xr.Dataset(data, coords={"time": ("time", time, {"standard_name": "time"}),
                                  "energy": ("energy", energy, {"units": "keV",
                                                                "bounds": "energy_bnds"})},
                    attrs={"field_model": "dipole", "field_epoch": "2027",
                           "footpoint_altitude_km": 100.0})
    return bio.write_dataset(ds, path)


def _archive(folder: Path, n_days: int, distinct) -> list[Path]:
    """One name per day, hard links to the distinct day files (copies if links fail)."""
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for d in range(n_days):
        p = folder / f"day{d:03d}.summary.nc"
        src = distinct[d % len(distinct)]
        try:
            os.link(src, p)
        except OSError:
            shutil.copy(src, p)
        out.append(p)
    return out


_CHILD = """
import json, os, sys, threading, time
from beltkit.batch import survey

def descendants(root):
    parent = {}
    for d in os.listdir('/proc'):
        if d.isdigit():
            try:
                parent[int(d)] = int(open(f'/proc/{d}/stat').read().rsplit(')', 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                pass
    out, frontier = [], [root]
    while frontier:
        p = frontier.pop()
        kids = [c for c, pp in parent.items() if pp == p]
        out += kids
        frontier += kids
    return out

def hwm_kb(pid):
    try:
        for line in open(f'/proc/{pid}/status'):
            if line.startswith('VmHWM'):
                return int(line.split()[1])
    except OSError:
        pass
    return 0

worker_peak = [0]
stop = threading.Event()
def watch():  # the workers' own high-water marks, read while they live
    while not stop.wait(0.5):
        for pid in descendants(os.getpid()):
            worker_peak[0] = max(worker_peak[0], hwm_kb(pid))
threading.Thread(target=watch, daemon=True).start()
files = json.loads(open(sys.argv[1]).read())
t = time.perf_counter()
survey(files, sys.argv[2], workers=int(sys.argv[3]), resume=False)
seconds = time.perf_counter() - t
stop.set()
print(json.dumps({"seconds": seconds, "peak_mb": hwm_kb(os.getpid()) / 1024,
                  "worker_peak_mb": worker_peak[0] / 1024}))
"""


def _measure(files, out: Path, workers: int) -> dict:
    """Survey `files` in a fresh process; return its time and peak memories."""
    listing = out.with_suffix(".json")
    listing.write_text(json.dumps([str(f) for f in files]))
    proc = subprocess.run([sys.executable, "-c", _CHILD, str(listing), str(out), str(workers)],
                          capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"the survey run failed: {proc.stderr[-800:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _load() -> str:
    try:
        return "load average {:.1f} {:.1f} {:.1f}".format(*os.getloadavg())
    except OSError:  # pragma: no cover
        return "load unknown"


def run(quick=False) -> list[dict]:
    """Run the survey benchmark; return the result rows."""
    n_time, n_year, n_month = (8640, 36, 12) if quick else (86400, 365, 30)
    work = Path(tempfile.mkdtemp(prefix="beltkit-bench-survey-"))
    try:
        distinct = [_day_summary(work / f"distinct{k}.summary.nc", n_time, 11 + k, k)
                    for k in range(N_DISTINCT)]
        year = _archive(work / "year", n_year, distinct)
        rows = []
        label = f"{n_year} days of {n_time}x8 summaries"
        two = _measure(year, work / "two.nc", 2)
        rows.append(row(f"survey {label}, workers=2 ({_load()})", two["seconds"], "s", None,
                        "< 600 s", None if quick else two["seconds"] < 600))
        one = _measure(year, work / "one.nc", 1)
        rows.append(row(f"survey {label}, workers=1", one["seconds"], "s", None, None, None))
        speed = one["seconds"] / two["seconds"]
        rows.append(row(f"speed-up of workers=2 over 1 ({label})", speed, "x", None,
                        ">= 1.7 (full size)" if quick else ">= 1.7",
                        None if quick else speed >= 1.7))
        peak = max(two["peak_mb"], two["worker_peak_mb"], one["peak_mb"])
        rows.append(row(f"peak memory of the survey or a worker ({label}; workers=2: "
                        f"parent {two['peak_mb']:.0f} MB, worker "
                        f"{two['worker_peak_mb']:.0f} MB)", peak, "MB", None, "< 1024 MB",
                        peak < 1024.0))
        month = _measure(year[:n_month], work / "month.nc", 1)
        rows.append(row(f"peak memory, {n_year}-day over {n_month}-day survey (workers=1)",
                        one["peak_mb"], "MB", month["peak_mb"], "within 20 %",
                        abs(one["peak_mb"] / month["peak_mb"] - 1) < 0.2))
        return rows
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    quick = "--quick" in sys.argv
    for r in run(quick=quick):
        print(json.dumps(r))
