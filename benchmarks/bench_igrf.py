"""IGRF-14 synthesis speed beside the reference library ppigrf, on the same points and dates.

Run alone with ``python benchmarks/bench_igrf.py [--quick]``; the harness
(``benchmarks/run.py``) imports :func:`run`.

Figures
-------
* synthesis rate of the compiled (numba) engine on 10^6 random points
  (altitude 0-40,000 km), geocentric spherical in and out; target >= 10^6
  points per second (issue 6). Baseline: ppigrf ``igrf_gc`` on a subset of
  the same points at the same date, its rate scaled from the subset.
  (The numpy reference engine, formerly a row here, now lives with the tests
  as the reference the kernels are checked against; it had no target.)
* the Cartesian model call ``IGRF().field_geo`` (with the inside-Earth check),
* ``field_geo`` with a different time for every point,
* the largest difference from ppigrf over the subset and several dates (nT;
  target < 0.1 nT).
"""

from __future__ import annotations

import datetime as dt
import sys

import numpy as np
from _common import median_time

TARGET_RATE = 1e6


def _points(n, seed=2026):
    rng = np.random.default_rng(seed)
    r = 6371.2 + rng.uniform(0.0, 40000.0, n)
    colat = np.degrees(np.arccos(rng.uniform(-1.0, 1.0, n)))
    lon = rng.uniform(-180.0, 180.0, n)
    return r, colat, lon


def _ppigrf_datetime(t):
    """Datetime at which ppigrf's elapsed-time interpolation equals IGRF's decimal-year one."""
    k = min(int((t - 1900.0) // 5.0), 25)
    e0, e1 = 1900 + 5 * k, 1905 + 5 * k
    d0, d1 = dt.datetime(e0, 1, 1), dt.datetime(e1, 1, 1)
    return d0 + (t - e0) / (e1 - e0) * (d1 - d0)


def run(quick=False):
    """Measure the IGRF figures; return rows (figure, value, unit, baseline, ratio, ...)."""
    import ppigrf

    from beltkit.field import IGRF, igrf

    n = 100_000 if quick else 1_000_000
    n_ref = 5_000 if quick else 20_000
    repeats = 3
    date = 2020.5
    r, colat, lon = _points(n)
    th, ph = np.radians(colat), np.radians(lon)
    xyz = np.stack([r * np.sin(th) * np.cos(ph), r * np.sin(th) * np.sin(ph), r * np.cos(th)], -1)
    g, h = igrf.igrf_coefficients(date)

    # warm-up (numba compile or cache load) is not part of the rate
    igrf.synth_spherical(r[:100], colat[:100], lon[:100], g, h)
    igrf.synth_geo(xyz[:100], g, h)

    when = _ppigrf_datetime(date)
    t_ref = median_time(lambda: ppigrf.igrf_gc(r[:n_ref], colat[:n_ref], lon[:n_ref], when),
                        repeats)
    ref_rate = n_ref / t_ref

    rows = []

    def row(figure, value, unit, baseline=None, target=None, passed=None):
        ratio = None if baseline in (None, 0) else value / baseline
        rows.append({"figure": figure, "value": value, "unit": unit, "baseline": baseline,
                     "ratio": ratio, "target": target, "passed": passed})

    t = median_time(lambda: igrf.synth_spherical(r, colat, lon, g, h), repeats)
    rate = n / t
    row(f"IGRF synthesis, numba engine ({n:.0e} points; baseline ppigrf)", rate, "points/s",
        ref_rate, f">= {TARGET_RATE:.0e} points/s", rate >= TARGET_RATE)

    model = IGRF()
    t = median_time(lambda: model.field_geo(xyz, date), repeats)
    row(f"IGRF().field_geo, Cartesian GEO ({n:.0e} points, one time)", n / t, "points/s",
        ref_rate, f">= {TARGET_RATE:.0e} points/s", n / t >= TARGET_RATE)

    times = np.linspace(2015.0, 2029.0, n)
    t = median_time(lambda: model.field_geo(xyz, times), repeats)
    row(f"IGRF().field_geo, a time per point ({n:.0e} points)", n / t, "points/s", ref_rate)

    worst = 0.0
    for d in (1967.4, 2001.9, 2020.5, 2028.2):
        gg, hh = igrf.igrf_coefficients(d)
        ours = igrf.synth_spherical(r[:n_ref], colat[:n_ref], lon[:n_ref], gg, hh)
        ref = ppigrf.igrf_gc(r[:n_ref], colat[:n_ref], lon[:n_ref], _ppigrf_datetime(d))
        worst = max(worst, max(float(np.max(np.abs(a - b[0]))) for a, b in zip(ours, ref)))
    row(f"max |B - B_ppigrf| over {n_ref} points x 4 dates", worst, "nT", None, "< 0.1 nT",
        worst < 0.1)
    return rows


if __name__ == "__main__":
    for item in run(quick="--quick" in sys.argv):
        print(item)
