"""Timing, memory, row and orbit helpers shared by the benchmark suites.

The suites import it by name (``from _common import ...``): ``run.py`` puts
this folder on ``sys.path`` before it imports them, and a suite run as a
script has its own folder there.
"""

from __future__ import annotations

import statistics
import time
import tracemalloc

import numpy as np

from beltkit.constants import R_E_KM

__all__ = ["interleaved_medians", "invented_orbit_geo_km", "median_time", "median_wall_cpu",
           "row", "traced_peak_bytes"]


def median_time(func, repeats):
    """Median wall-clock seconds of ``func()`` over `repeats` runs (no warm-up)."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def median_wall_cpu(func, repeats):
    """Return the median wall-clock and process CPU seconds of `func()`, after one warm-up run.

    The warm-up takes imports, tables and page faults out of the timed runs.
    """
    func()
    wall, cpu = [], []
    for _ in range(repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        func()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(wall), statistics.median(cpu)


def interleaved_medians(funcs, repeats):
    """Median time of each function, run in turn ``repeats`` times.

    Alternating the runs (rather than timing each one in a block) keeps a
    change of the machine's speed during the benchmark (a shared virtual
    machine) from falling on one side of a ratio only.
    """
    times = [[] for _ in funcs]
    for _ in range(repeats):
        for k, func in enumerate(funcs):
            t0 = time.perf_counter()
            func()
            times[k].append(time.perf_counter() - t0)
    return [statistics.median(t) for t in times]


def traced_peak_bytes(func):
    """Peak bytes allocated through Python (tracemalloc) while ``func()`` runs."""
    tracemalloc.start()
    try:
        func()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak


def row(figure, value, unit, baseline=None, target=None, passed=None):
    """Return one result row; the ratio is value / baseline where a baseline is given."""
    ratio = value / baseline if baseline else None
    return {"figure": figure, "value": value, "unit": unit, "baseline": baseline,
            "ratio": ratio, "target": target, "passed": passed}


def invented_orbit_geo_km(n, cadence_s=60.0):
    """GEO positions (km) of an invented elliptical orbit (perigee 1.2, apogee 6.5 R_E; synthetic).

    Period 10 h, inclination 20 deg, the orbital plane fixed in GEO (a
    simplification); Kepler's equation solved by fixed-point iteration.
    """
    t = np.arange(n) * cadence_s
    period = 10.0 * 3600.0
    a = 0.5 * (1.2 + 6.5)
    e = (6.5 - 1.2) / (6.5 + 1.2)
    mean = 2 * np.pi * t / period
    ecc = mean.copy()
    for _ in range(30):  # Kepler's equation by fixed-point iteration
        ecc = mean + e * np.sin(ecc)
    nu = 2 * np.arctan2(np.sqrt(1 + e) * np.sin(ecc / 2), np.sqrt(1 - e) * np.cos(ecc / 2))
    r = a * (1 - e * np.cos(ecc)) * R_E_KM
    inc = np.radians(20.0)
    return np.stack([r * np.cos(nu), r * np.sin(nu) * np.cos(inc),
                     r * np.sin(nu) * np.sin(inc)], -1)
