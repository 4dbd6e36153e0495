"""Partition speed and memory on 10^6 x 8 x 12 float32, beside a single weighted numpy reduction.

Figures:

* time of ``beltkit.pad.partition`` on (time=10^6, energy=8, pitch_angle=12) float32
  flux (dipole loss cones from L and mlat), over the time of one weighted numpy reduction
  over pitch angle of the same array (``np.einsum("tep,p->te", flux, w)``, and also
  ``(flux * w).sum(-1)``), the runs alternated and the median of 9 taken -- target
  ratio <= 3;
* peak memory allocated during the partition (tracemalloc) over the input array's size --
  target < 2.5;
* the same with ``flux_err`` (errors propagated) for information;
* a dask-chunked netCDF file partitioned and written out chunk by chunk: the peak memory
  for a file 4 times longer stays the same (target: ratio < 1.5).

Run ``python benchmarks/bench_pad.py [--quick]`` or through ``benchmarks/run.py``.
"""

from __future__ import annotations

import os
import sys
import tempfile

import numpy as np
import xarray as xr
from _common import interleaved_medians, median_time, traced_peak_bytes

from beltkit.pad import partition

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"


def _dataset(n_t, n_e=8, n_p=12, *, with_err=False, seed=0):
    rng = np.random.default_rng(seed)
    edges = np.linspace(0.0, 180.0, n_p + 1)
    flux = rng.random((n_t, n_e, n_p), dtype=np.float32)
    data = {
        "flux": (("time", "energy", "pitch_angle"), flux, {"units": FLUX_UNITS}),
        "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([edges[:-1], edges[1:]], 1)),
        "energy_bnds": (("energy", "nv"), np.stack([np.arange(n_e) + 1.0,
                                                    np.arange(n_e) + 2.0], 1)),
        "L": ("time", np.linspace(1.5, 7.0, n_t), {"units": "1"}),
        "mlat": ("time", 20.0 * np.sin(np.linspace(0, 40 * np.pi, n_t)), {"units": "degree"}),
    }
    if with_err:
        data["flux_err"] = (("time", "energy", "pitch_angle"),
                            (0.1 * flux + np.float32(0.01)), {"units": FLUX_UNITS})
    time_ = np.datetime64("2026-01-01", "ns") + np.arange(n_t).astype("timedelta64[s]")
    return xr.Dataset(data, coords={
        "time": time_, "energy": ("energy", np.arange(n_e) + 1.5, {"units": "keV"}),
        "pitch_angle": ("pitch_angle", 0.5 * (edges[:-1] + edges[1:]), {"units": "degree"})})


def _dask_peak(path, n_t, chunk):
    """Peak traced memory of partitioning a chunked file and writing the result chunk-wise."""
    import dask

    _dataset(n_t).to_netcdf(path)
    out_path = path + ".out.nc"

    def work():
        with xr.open_dataset(path, chunks={"time": chunk}) as ds:
            out = partition(ds)
            keep = ["flux_precipitating", "flux_trapped", "fraction_precipitating",
                    "fraction_trapped", "coverage_precipitating", "blc_local"]
            out[keep].to_netcdf(out_path)

    with dask.config.set(scheduler="synchronous"):
        work()  # warm-up (file cache, kernels)
        peak = traced_peak_bytes(work)
    os.remove(out_path)
    return peak


def run(quick=False):
    """Return the benchmark rows (figure, value, unit, baseline, ratio, target, passed)."""
    n_t = 100_000 if quick else 1_000_000
    repeats = 9
    ds = _dataset(n_t)
    flux = ds["flux"].values
    w = np.linspace(0.5, 1.5, flux.shape[-1]).astype(np.float32)
    partition(_dataset(64))  # compile / load the numba kernel outside the timing
    partition(_dataset(64, with_err=True))
    t_einsum, t_mulsum, t_part = interleaved_medians(
        [lambda: np.einsum("tep,p->te", flux, w), lambda: (flux * w).sum(-1),
         lambda: partition(ds)], repeats)
    peak = traced_peak_bytes(lambda: partition(ds))
    size = f"{n_t:.0e} x 8 x 12 float32"
    rows = [
        {"figure": f"partition {size} vs einsum reduction", "value": t_part, "unit": "s",
         "baseline": t_einsum, "ratio": t_part / t_einsum, "target": "ratio <= 3",
         "passed": t_part / t_einsum <= 3},
        {"figure": f"partition {size} vs (flux*w).sum(-1)", "value": t_part, "unit": "s",
         "baseline": t_mulsum, "ratio": t_part / t_mulsum, "target": "ratio <= 3",
         "passed": t_part / t_mulsum <= 3},
        {"figure": f"partition {size} peak memory / input", "value": peak / 2**20,
         "unit": "MiB", "baseline": flux.nbytes / 2**20, "ratio": peak / flux.nbytes,
         "target": "ratio < 2.5", "passed": peak / flux.nbytes < 2.5},
    ]
    ds_err = _dataset(n_t, with_err=True)
    t_err = median_time(lambda: partition(ds_err), 5)
    peak_err = traced_peak_bytes(lambda: partition(ds_err))
    in_bytes = flux.nbytes * 2
    rows.append({"figure": f"partition with flux_err {size} vs einsum", "value": t_err,
                 "unit": "s", "baseline": t_einsum, "ratio": t_err / t_einsum,
                 "target": "information", "passed": None})
    rows.append({"figure": "partition with flux_err peak memory / (flux + flux_err)",
                 "value": peak_err / 2**20, "unit": "MiB", "baseline": in_bytes / 2**20,
                 "ratio": peak_err / in_bytes, "target": "ratio < 2.5",
                 "passed": peak_err / in_bytes < 2.5})
    ds = ds_err = flux = None  # free the big arrays before the dask part
    n_short = 20_000 if quick else 200_000
    chunk = 10_000 if quick else 50_000
    with tempfile.TemporaryDirectory() as tmp:
        p1 = _dask_peak(os.path.join(tmp, "short.nc"), n_short, chunk)
        p2 = _dask_peak(os.path.join(tmp, "long.nc"), 4 * n_short, chunk)
    rows.append({"figure": f"dask file {4 * n_short:.0e} vs {n_short:.0e} samples, "
                           f"chunks of {chunk}: peak memory", "value": p2 / 2**20, "unit": "MiB",
                 "baseline": p1 / 2**20, "ratio": p2 / p1, "target": "ratio < 1.5",
                 "passed": p2 / p1 < 1.5})
    return rows


if __name__ == "__main__":
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from run import print_table

    print_table(run(quick="--quick" in sys.argv))
