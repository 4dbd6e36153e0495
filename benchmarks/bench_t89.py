"""Speed of the combined IGRF + T89 field beside the reference library geopack, and tracing in it.

Run alone with ``python benchmarks/bench_t89.py [--quick]``; the harness
(``benchmarks/run.py``) imports :func:`run`.

Figures
-------
* ``T89(kp=3).field_geo`` (IGRF-14 plus the external field, GEO in and out)
  on 10^6 random points at one time; target >= 10^6 points per second on 2
  cores (issue 18). Baseline: geopack's ``t89`` (PyPI, external field only,
  one point per call, GSM) on a subset of the same points, its rate scaled
  from the subset; the ratio is ours / geopack's.
* the same with a different time for every point (information),
* the external part alone (``external_geo``, information),
* 10,000 field lines from L 1.5-8 (random magnetic longitudes, SM equator)
  traced to both footpoints in IGRF + T89 (Kp 3); target < 10 s. Baseline:
  the same lines in IGRF alone.
* ``lstar`` (24 MLTs) for 10,000 samples in IGRF + T89 with a 3-hourly Kp
  series (an invented week cycling through Kp 1-6); target < 120 s (issue
  18). The samples are built like bench_invariants.py's IGRF row: one per
  minute along an invented elliptical orbit (perigee 1.2, apogee 6.5 R_E,
  period 10 h, orbital plane fixed in GEO), local pitch angles uniform in
  40-90 deg; the default fast path of ``lstar`` (no table in T89: the
  external field turns with the dipole tilt). No baseline (the IGRF row of
  bench_invariants.py is the internal-field figure).
"""

from __future__ import annotations

import sys
import time

import numpy as np
from _common import invented_orbit_geo_km, median_time

TARGET_RATE = 1e6
TARGET_TRACE_S = 10.0
TARGET_LSTAR_S = 120.0
TIME = np.datetime64("2020-03-20T03:00")


def _points(n, seed=2026):
    """Random GEO points (km) between 1.05 and 10 R_E."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 3))
    x *= (6371.2 * rng.uniform(1.05, 10.0, n) / np.linalg.norm(x, axis=1))[:, None]
    return x


def lstar_row(quick=False, n=None):
    """Time L* for `n` orbit samples (10,000; 20 when quick) in IGRF + T89; return one row."""
    from beltkit.field import T89, lstar

    n = n or (20 if quick else 10_000)
    t = np.datetime64("2024-03-01T00:00", "ns") + np.arange(n) * np.timedelta64(60, "s")
    xyz = invented_orbit_geo_km(n)
    alpha = np.random.default_rng(5).uniform(40.0, 90.0, n)
    kp_time = t[0] + np.arange(0, n // 180 + 2) * np.timedelta64(3, "h")
    kp = 1.0 + (np.arange(kp_time.size) % 6)  # invented: Kp 1, 2, ... 6, 1, ...
    model = T89(kp=kp, kp_time=kp_time)
    lstar(model, xyz[:2], t[:2], alpha[:2])  # warm-up (numba caches)
    t0 = time.perf_counter()
    ds = lstar(model, xyz, t, alpha)
    sec = time.perf_counter() - t0
    ok = float((ds.lstar_reason.values == 0).mean())
    target = TARGET_LSTAR_S * n / 10_000
    return {"figure": f"L* IGRF + T89 (Kp series 1-6), {n:,} samples x 24 MLTs, fast path "
                      f"({ok:.0%} defined)" + (" (quick: reduced size)" if quick else ""),
            "value": sec, "unit": "s", "baseline": None, "ratio": None,
            "target": f"< {target:g} s", "passed": sec < target}


def run(quick=False):
    """Measure the T89 figures; return rows (figure, value, unit, baseline, ratio, ...)."""
    from geopack.t89 import t89 as reference_t89

    from beltkit.field import IGRF, T89, convert
    from beltkit.field.trace import trace_lines

    n = 100_000 if quick else 1_000_000
    n_ref = 2_000 if quick else 20_000
    n_lines = 1_000 if quick else 10_000
    repeats = 3
    xyz = _points(n)
    model = T89(kp=3.0)
    model.field_geo(xyz[:100], TIME)  # warm-up: numba cache load is not part of the rate

    rows = []

    def row(figure, value, unit, baseline=None, target=None, passed=None):
        ratio = None if baseline in (None, 0) else value / baseline
        rows.append({"figure": figure, "value": value, "unit": unit, "baseline": baseline,
                     "ratio": ratio, "target": target, "passed": passed})

    gsm = np.asarray(convert(xyz[:n_ref], TIME, "GEO", "GSM", model=IGRF())) / 6371.2
    ps = float(np.radians(model.tilt_deg(TIME)))

    def reference():
        for p in gsm:
            reference_t89(4, ps, p[0], p[1], p[2])

    ref_rate = n_ref / median_time(reference, 1)

    t = median_time(lambda: model.field_geo(xyz, TIME), repeats)
    row(f"IGRF + T89 field_geo ({n:.0e} points, one time; baseline geopack t89 external only)",
        n / t, "points/s", ref_rate, f">= {TARGET_RATE:.0e} points/s", n / t >= TARGET_RATE)

    t = median_time(lambda: model.external_geo(xyz, TIME), repeats)
    row(f"T89 external_geo alone ({n:.0e} points, one time)", n / t, "points/s", ref_rate)

    times = TIME + (np.arange(n) % 86_400).astype("timedelta64[s]")
    t = median_time(lambda: model.field_geo(xyz, times), 1 if not quick else repeats)
    row(f"IGRF + T89 field_geo, a time per point ({n:.0e} points)", n / t, "points/s", ref_rate)

    rng = np.random.default_rng(7)
    l_shell = rng.uniform(1.5, 8.0, n_lines)
    phi = rng.uniform(0.0, 2 * np.pi, n_lines)
    sm = np.column_stack([l_shell * np.cos(phi), l_shell * np.sin(phi), np.zeros(n_lines)])
    starts = np.asarray(convert(sm * 6371.2, TIME, "SM", "GEO", model=IGRF()))
    trace_lines(model, starts[:20], TIME)  # warm-up
    t_igrf = median_time(lambda: trace_lines(IGRF(), starts, TIME), 1)
    holder = {}

    def traced():
        holder["lines"] = trace_lines(model, starts, TIME)

    t_t89 = median_time(traced, 1)
    closed = int(np.sum(holder["lines"].closed))
    scaled = t_t89 * 10_000 / n_lines
    row(f"trace {n_lines} lines L 1.5-8 to both footpoints, IGRF + T89 Kp 3 "
        f"({closed} closed; baseline IGRF alone, s)", t_t89, "s", t_igrf,
        f"< {TARGET_TRACE_S:g} s per 10,000 lines", scaled < TARGET_TRACE_S)
    rows.append(lstar_row(quick))
    return rows


if __name__ == "__main__":
    if "--lstar-only" in sys.argv:
        print(lstar_row(quick="--quick" in sys.argv))
    else:
        for item in run(quick="--quick" in sys.argv):
            print(item)
