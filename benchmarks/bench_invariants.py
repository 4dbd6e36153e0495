"""Speed of the adiabatic-invariant coordinates and phase-space density (issue 17 targets).

Run alone with ``python benchmarks/bench_invariants.py [--quick] [--n-lstar N]``; the
harness (``benchmarks/run.py``) imports :func:`run`.

Rows (seconds, best of the repeats where repeated):

* ``beltkit.dipole.second_invariant_k``: 10^6 dipole samples x 10 equatorial pitch
  angles (target < 2 s); baseline a ``numpy.sqrt`` pass over the 10^7 outputs;
* ``beltkit.dipole.invariants_to_pitch_energy``: 10^6 distinct (mu, K, L)
  (target < 2 s); same baseline over 10^6;
* ``beltkit.field.lstar`` in IGRF: 10,000 samples of an elliptical orbit at one
  per minute (about a week), all traced together on the default fast path
  (its table of equatorial lines is built inside the timed call; target
  < 60 s); baseline the same number of single-sample calls (fast path, no
  table: one sample never builds one), extrapolated from 20 timed ones; and,
  for information, the exact path (``method="exact"``) on 200 of the samples
  with the largest relative L* difference between the two paths;
* ``beltkit.psd.at_fixed_invariants`` over one day at 1 s (86,400 samples,
  5 mu x 4 K) in the centred dipole (target < 10 s) and in IGRF with L* at
  one-minute cadence interpolated to the samples (target < 120 s).

``--quick`` shrinks the sizes for a smoke test (the targets are then not
comparable and the rows say so).
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np
from _common import invented_orbit_geo_km


def _best(func, repeats=3):
    func()
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return best


def _day_dataset(n, cadence_s=1.0, positions=False):
    """An invented spectrometer day (5 energies x 12 pitch angles), synthetic."""
    import xarray as xr

    t0 = np.datetime64("2026-03-01T00:00:00", "ns")
    time_ = t0 + (np.arange(n) * cadence_s * 1e9).astype("timedelta64[ns]")
    e_edges = np.geomspace(50.0, 3000.0, 9)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    a_edges = np.linspace(0.0, 180.0, 19)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    j = (1e6 * (energy / 100.0) ** -3)[None, :, None] * np.sin(np.radians(alpha))[None, None, :]
    flux = np.broadcast_to(j, (n, energy.size, alpha.size)).astype(np.float32)
    data = {
        "flux": (("time", "energy", "pitch_angle"), flux, {"units": "cm-2 s-1 sr-1 keV-1"}),
        "flux_err": (("time", "energy", "pitch_angle"), 0.1 * flux,
                     {"units": "cm-2 s-1 sr-1 keV-1"}),
        "energy_bnds": (("energy", "nv"), np.stack([e_edges[:-1], e_edges[1:]], -1),
                        {"units": "keV"}),
        "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([a_edges[:-1], a_edges[1:]], -1),
                             {"units": "degree"}),
    }
    if positions:
        xyz = invented_orbit_geo_km(n, cadence_s)
        data["position_geo"] = (("time", "xyz"), xyz, {"units": "km"})
    else:
        phase = np.arange(n) / n * 2 * np.pi * 2.4
        data["L"] = ("time", 4.5 + 1.5 * np.sin(phase), {"units": "1"})
        data["mlat"] = ("time", 10.0 * np.sin(3 * phase), {"units": "degree"})
        data["mlt"] = ("time", (np.arange(n) / n * 24.0) % 24, {"units": "hour"})
    return xr.Dataset(data, coords={
        "time": time_, "energy": ("energy", energy, {"units": "keV", "bounds": "energy_bnds"}),
        "pitch_angle": ("pitch_angle", alpha, {"units": "degree",
                                               "bounds": "pitch_angle_bnds"})})


def _row(figure, seconds, target, baseline=None, unit="s", note=""):
    return {"figure": figure + (f" ({note})" if note else ""), "value": float(seconds),
            "unit": unit, "baseline": None if baseline is None else float(baseline),
            "ratio": None if baseline is None else float(seconds / baseline),
            "target": f"< {target:g} s", "passed": bool(seconds < target)}


def run(quick=False, n_lstar=None):
    """Time the issue-17 rows; return the benchmark rows (see the module docstring)."""
    from beltkit import dipole, psd
    from beltkit.field import IGRF, lstar

    rows = []
    rng = np.random.default_rng(5)
    scale = 10 if quick else 1
    note = "quick: reduced size, target not comparable" if quick else ""
    # K: 10^6 samples x 10 pitch angles
    n = 10**6 // scale
    L = rng.uniform(1.5, 8.0, n)
    alphas = np.linspace(5.0, 90.0, 10)
    base = _best(lambda: np.sqrt(np.broadcast_to(L[:, None], (n, 10)) + 1.0))
    sec = _best(lambda: dipole.second_invariant_k(L[:, None], alphas))
    rows.append(_row(f"dipole K, {n:,} samples x 10 pitch angles", sec, 2.0, base, note=note))
    # inverse problem: 10^6 distinct (mu, K, L)
    k = dipole.second_invariant_k(L, rng.uniform(1.0, 90.0, n))
    mu = 10 ** rng.uniform(0.0, 4.0, n)
    base = _best(lambda: np.sqrt(L + 1.0))
    sec = _best(lambda: dipole.invariants_to_pitch_energy(mu, k, L))
    rows.append(_row(f"invariants_to_pitch_energy, {n:,} samples", sec, 2.0, base, note=note))
    # L* in IGRF: all samples together vs single-sample calls
    m = IGRF()
    n_l = n_lstar or (20 if quick else 10_000)
    xyz = invented_orbit_geo_km(n_l)
    t = np.datetime64("2024-03-01T00:00", "ns") + np.arange(n_l) * np.timedelta64(60, "s")
    a = rng.uniform(40.0, 90.0, n_l)
    lstar(m, xyz[:2], t[:2], a[:2])  # warm-up
    n_single = 5 if quick else 20
    t0 = time.perf_counter()
    for i in range(n_single):
        lstar(m, xyz[i:i + 1], t[i], a[i])
    single = (time.perf_counter() - t0) / n_single * n_l
    t0 = time.perf_counter()
    ds = lstar(m, xyz, t, a)
    sec = time.perf_counter() - t0
    ok = float((ds.lstar_reason.values == 0).mean())
    rows.append(_row(f"L* IGRF, {n_l:,} samples x 24 MLTs ({ok:.0%} defined)", sec,
                     60.0 * n_l / 10_000, single,
                     note=(note + "; " if note else "") + "fast path; baseline: single-sample "
                     f"calls, extrapolated from {n_single}"))
    # the exact path on a subset: its cost and the largest difference from the fast path
    n_x = min(n_l, 20 if quick else 200)
    t0 = time.perf_counter()
    ex = lstar(m, xyz[:n_x], t[:n_x], a[:n_x], method="exact")
    sec_x = time.perf_counter() - t0
    with np.errstate(invalid="ignore"):
        diff = float(np.nanmax(np.abs(ds.lstar.values[:n_x] / ex.lstar.values - 1)))
    rows.append({"figure": f"L* IGRF exact path, {n_x} of the samples (information; largest "
                           f"relative difference from the fast path {diff:.1e})",
                 "value": sec_x, "unit": "s", "baseline": None, "ratio": None,
                 "target": None, "passed": None})
    # at_fixed_invariants over a day, dipole and IGRF
    n_day = 86_400 // (24 if quick else 1)
    mu5 = np.geomspace(50.0, 2000.0, 5)
    k4 = np.array([0.01, 0.05, 0.1, 0.3])
    day = _day_dataset(n_day)
    sec = _best(lambda: psd.at_fixed_invariants(day, mu5, k4), repeats=1)
    rows.append(_row(f"at_fixed_invariants dipole, {n_day:,} samples x 5 mu x 4 K", sec, 10.0,
                     note=note))
    if quick:
        n_day = 600
    day = _day_dataset(n_day, positions=True)
    t0 = time.perf_counter()
    psd.at_fixed_invariants(day, mu5, k4, model=m, lstar_cadence_s=60.0)
    sec = time.perf_counter() - t0
    rows.append(_row(f"at_fixed_invariants IGRF, {n_day:,} samples x 5 mu x 4 K, L* at 60 s "
                     "(fast path) interpolated linearly in time", sec, 120.0, note=note))
    return rows


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--n-lstar", type=int, default=None)
    args = parser.parse_args(argv)
    for r in run(quick=args.quick, n_lstar=args.n_lstar):
        print(r)
    return 0


if __name__ == "__main__":
    sys.exit(main())
