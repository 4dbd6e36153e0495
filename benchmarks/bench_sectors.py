"""Sector binning speed and memory: one day at 1 s, beside one weighted numpy reduction.

Figures:

* time of ``beltkit.pad.bin_sectors`` on one day at 1 s cadence, (time=86,400,
  energy=8, sector=16, detector=2) int32 counts in the spin form with a
  b_vector, into 12 pitch-angle bins (flux, errors, counts, look counts,
  gyrotropy statistic, flags), over the time of one weighted numpy reduction
  over the same counts array (``np.einsum("tesd,sd->te", counts, w)``, and also
  ``(counts * w).sum((-2, -1))``), the runs alternated and the median of 5
  taken -- target ratio <= 3;
* peak memory allocated during the binning (tracemalloc) over the counts
  array's size -- target < 2.5;
* the same for a day and a half: the peak over the input size stays the same
  (the input is read in blocks of time; target: ratio of the two peak/input
  ratios < 1.1).

Run ``python benchmarks/bench_sectors.py [--quick]`` or through ``benchmarks/run.py``.
"""

from __future__ import annotations

import os
import sys

import numpy as np
import xarray as xr
from _common import interleaved_medians, traced_peak_bytes

from beltkit.pad import bin_sectors

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"
EDGES = np.linspace(0.0, 180.0, 13)


def _dataset(n_t, n_e=8, n_s=16, n_d=2, seed=0):
    rng = np.random.default_rng(seed)
    counts = rng.poisson(40.0, (n_t, n_e, n_s, n_d)).astype(np.int32)
    phase = np.arange(n_s) * 360.0 / n_s
    az = np.radians(np.arange(n_t) * 0.05)
    b = np.stack([0.8 * np.cos(az), 0.8 * np.sin(az), np.full(n_t, 0.6)], -1) * 300.0
    e = 50.0 * 1.6 ** np.arange(n_e)
    time_ = np.datetime64("2027-03-08", "ns") + np.arange(n_t).astype("timedelta64[s]")
    return xr.Dataset({
        "counts": (("time", "energy", "sector", "detector"), counts, {"units": "1"}),
        "counts_to_flux": (("energy",), 1.0 / e, {"units": FLUX_UNITS}),
        "energy_bnds": (("energy", "nv"), np.stack([0.9 * e, 1.1 * e], -1), {"units": "keV"}),
        "spin_axis": (("xyz",), [0.0, 0.0, 1.0], {"frame": "GSE"}),
        "spin_phase_reference": (("xyz",), [1.0, 0.0, 0.0], {"frame": "GSE"}),
        "sector_phase_bnds": (("sector", "nv"), np.stack([phase, phase + 360.0 / n_s], -1),
                              {"units": "degree"}),
        "detector_polar_angle": (("detector",), [60.0, 120.0][:n_d], {"units": "degree"}),
        "fov_half_angle": (("detector",), [10.0, 10.0][:n_d], {"units": "degree"}),
        "b_vector": (("time", "xyz"), b, {"units": "nT", "frame": "GSE"}),
        "L": ("time", np.linspace(2.0, 6.0, n_t), {"units": "1"}),
        "mlat": ("time", np.zeros(n_t), {"units": "degree"}),
    }, coords={"time": time_, "energy": ("energy", e, {"units": "keV",
                                                          "bounds": "energy_bnds"})})


def run(quick=False):
    """Return the benchmark rows (figure, value, unit, baseline, ratio, target, passed)."""
    n_t = 8_640 if quick else 86_400
    ds = _dataset(n_t)
    counts = ds["counts"].values
    w = np.linspace(0.5, 1.5, 32).astype(np.float32).reshape(16, 2)
    bin_sectors(_dataset(16), EDGES)  # compile / load the numba kernel outside the timing
    t_einsum, t_mulsum, t_bin = interleaved_medians(
        [lambda: np.einsum("tesd,sd->te", counts, w), lambda: (counts * w).sum((-2, -1)),
         lambda: bin_sectors(ds, EDGES)], 5)
    peak = traced_peak_bytes(lambda: bin_sectors(ds, EDGES))
    size = f"{n_t:,} x 8 x 16 x 2 int32"
    rows = [
        {"figure": f"bin_sectors {size} vs einsum reduction", "value": t_bin, "unit": "s",
         "baseline": t_einsum, "ratio": t_bin / t_einsum, "target": "ratio <= 3",
         "passed": t_bin / t_einsum <= 3},
        {"figure": f"bin_sectors {size} vs (counts*w).sum", "value": t_bin, "unit": "s",
         "baseline": t_mulsum, "ratio": t_bin / t_mulsum, "target": "ratio <= 3",
         "passed": t_bin / t_mulsum <= 3},
        {"figure": f"bin_sectors {size} peak memory / input", "value": peak / 2**20,
         "unit": "MiB", "baseline": counts.nbytes / 2**20, "ratio": peak / counts.nbytes,
         "target": "ratio < 2.5", "passed": peak / counts.nbytes < 2.5},
    ]
    ds = counts = None
    longer = _dataset(n_t * 3 // 2)
    peak_long = traced_peak_bytes(lambda: bin_sectors(longer, EDGES))
    ratio_long = peak_long / longer["counts"].nbytes
    rows.append({"figure": "bin_sectors 1.5x longer: (peak / input) over the day's",
                 "value": ratio_long, "unit": "1", "baseline": peak / (n_t * 8 * 16 * 2 * 4),
                 "ratio": ratio_long / (peak / (n_t * 8 * 16 * 2 * 4)),
                 "target": "ratio < 1.1",
                 "passed": ratio_long / (peak / (n_t * 8 * 16 * 2 * 4)) < 1.1})
    return rows


if __name__ == "__main__":
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from run import print_table

    print_table(run(quick="--quick" in sys.argv))
