"""Field-line tracing and drift-shell table speed (issue 6 targets), with accuracy beside it.

Run alone with ``python benchmarks/bench_field.py [--quick]``; the harness
(``benchmarks/run.py``) imports :func:`run`.

Figures
-------
* 10,000 IGRF-14 field lines from L = 1.2-7 (start points on the dipole
  equator at random magnetic longitudes) traced to both 100 km footpoints
  with beltkit's vectorised Dormand-Prince tracer; target < 30 s. Baseline:
  scipy's ``solve_ivp`` (DOP853, one line at a time, event-located
  footpoints, the same IGRF model), timed on a few lines and scaled.
* field evaluations and integration steps per line (the tracer's share of
  the cost; the field synthesis rate is ``bench_igrf``'s figure),
* the largest relative footpoint and B_min error in a centred dipole
  against the closed forms (target < 1e-6),
* the drift-shell table (L = 1.1-8 step 0.05, 72 magnetic longitudes, IGRF)
  built from scratch (target < 60 s) and loaded from the cache (target
  < 0.5 s). The cache lives in a temporary folder for the run.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time

import numpy as np

TRACE_TARGET_S = 30.0
BUILD_TARGET_S = 60.0
LOAD_TARGET_S = 0.5


def _start_points(model, t, n, seed=6):
    from beltkit.constants import R_E_KM
    from beltkit.field import convert

    rng = np.random.default_rng(seed)
    L = rng.uniform(1.2, 7.0, n)
    phi = rng.uniform(0.0, 2 * np.pi, n)
    mag = np.stack([L * np.cos(phi), L * np.sin(phi), np.zeros(n)], axis=-1) * R_E_KM
    return np.asarray(convert(mag, t, "MAG", "GEO", model=model)), L


def _scipy_lines(model, t, starts, r_stop):
    from scipy.integrate import solve_ivp

    from beltkit.constants import R_E_KM
    from beltkit.field.igrf import synth_geo

    g, h = model.coefficients(t)  # the raw synthesis, which also answers below the surface

    def hit(s, x):
        return np.linalg.norm(x) - r_stop

    hit.terminal = True
    for x0 in starts:
        for sign in (1.0, -1.0):
            def rhs(s, x, sign=sign):
                b = synth_geo(x, g, h)
                return sign * b / np.linalg.norm(b)

            solve_ivp(rhs, (0.0, 30 * 7 * R_E_KM), x0, method="DOP853", rtol=1e-9,
                      atol=1e-6, events=hit)


def run(quick=False):
    """Measure the tracing and drift-shell figures; return the rows."""
    from beltkit import dipole
    from beltkit.constants import R_E_KM
    from beltkit.field import IGRF, CenteredDipole, drift_shell_table
    from beltkit.field.trace import trace_lines

    rows = []

    def row(figure, value, unit, baseline=None, target=None, passed=None):
        ratio = None if baseline in (None, 0) else value / baseline
        rows.append({"figure": figure, "value": value, "unit": unit, "baseline": baseline,
                     "ratio": ratio, "target": target, "passed": passed})

    t = np.datetime64("2024-06-01")
    model = IGRF()
    n = 1_000 if quick else 10_000
    starts, _ = _start_points(model, t, n)
    trace_lines(model, starts[:20], t)  # warm-up: numba compilation / cache load
    t0 = time.perf_counter()
    lines = trace_lines(model, starts, t)
    t_trace = time.perf_counter() - t0

    n_ref = 4 if quick else 10
    _scipy_lines(model, t, starts[-1:], R_E_KM + 100.0)  # warm-up of the one-point path
    t0 = time.perf_counter()
    _scipy_lines(model, t, starts[:n_ref], R_E_KM + 100.0)
    t_ref = (time.perf_counter() - t0) / n_ref * n
    target = TRACE_TARGET_S * n / 10_000
    row(f"trace {n} IGRF lines, L 1.2-7, both 100 km feet (baseline scipy DOP853 per line, "
        f"scaled from {n_ref})", t_trace, "s", t_ref, f"< {target:g} s", t_trace < target)
    row("  field evaluations per line (both directions, refinements included)",
        lines.evaluations / n, "points/line")
    row("  accepted Runge-Kutta steps per line (both directions)", float(lines.steps.mean()),
        "steps/line")
    row("  open or unresolved lines", float((~lines.closed).sum()), "lines", None, "0",
        bool(lines.closed.all()))

    # accuracy in a centred dipole against the closed forms (beltkit.dipole)
    dip = CenteredDipole(epoch=2020.0)
    b0 = float(dip.dipole_b0_nt(t))
    ds_starts, L = _start_points(dip, t, 500 if quick else 2000, seed=7)
    dl = trace_lines(dip, ds_starts, t)
    err = max(np.max(np.abs(dl.b_foot_north / dipole.footpoint_field(L, 100.0, b0_nt=b0) - 1)),
              np.max(np.abs(dl.b_foot_south / dipole.footpoint_field(L, 100.0, b0_nt=b0) - 1)),
              np.max(np.abs(dl.b_min / dipole.equatorial_field(L, b0_nt=b0) - 1)))
    row("centred dipole: max relative error of B_foot and B_min vs closed forms", float(err),
        "1", None, "< 1e-6", bool(err < 1e-6))

    if quick:
        l_values, n_lon = np.arange(1.1, 3.0001, 0.1), 24
    else:
        l_values, n_lon = np.arange(1.1, 8.0001, 0.05), 72
    old = os.environ.get("BELTKIT_CACHE_DIR")
    with tempfile.TemporaryDirectory() as tmp:
        os.environ["BELTKIT_CACHE_DIR"] = tmp
        try:
            t0 = time.perf_counter()
            drift_shell_table(model, t, 100.0, l_values, n_lon)
            t_build = time.perf_counter() - t0
            loads = []
            for _ in range(5):
                t0 = time.perf_counter()
                drift_shell_table(model, t, 100.0, l_values, n_lon)
                loads.append(time.perf_counter() - t0)
            t_load = float(np.median(loads))
        finally:
            if old is None:
                os.environ.pop("BELTKIT_CACHE_DIR", None)
            else:
                os.environ["BELTKIT_CACHE_DIR"] = old
    label = f"L {l_values[0]:.2f}-{l_values[-1]:.2f} ({l_values.size}), {n_lon} longitudes"
    row(f"drift-shell table build, IGRF, {label}", t_build, "s", None,
        f"< {BUILD_TARGET_S:g} s", t_build < BUILD_TARGET_S)
    row("drift-shell table cached load (baseline: build)", t_load, "s", t_build,
        f"< {LOAD_TARGET_S:g} s", t_load < LOAD_TARGET_S)
    return rows


if __name__ == "__main__":
    for item in run(quick="--quick" in sys.argv):
        print(item)
