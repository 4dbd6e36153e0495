"""Speed of the loss-cone inversion of beltkit.diffusion (issue 20 target).

Run alone with ``python benchmarks/bench_diffusion.py [--quick] [--repeats R]``;
the harness (``benchmarks/run.py``) imports :func:`run`.

Figures (wall-clock seconds, median of the repeats):

* ``diffusion.z0_from_ratio(kind="cone_mean")`` on one day at one-second
  cadence, 86,400 samples x 8 energies (691,200 ratios, z0 log-uniform in
  0.01-50): target under 2 s (issue 20), vectorised, no loop over samples;
* the same with ``kind="two_angles"`` (per-element angles; no target, for
  information);
* ``diffusion.from_pitch_angle_data`` on a synthetic day of binned data
  (86,400 x 8 x 36 bins, dipole): the whole data path (loss cones, band
  response tables, inversion, D, lifetimes); no target, for information.

``--quick`` uses a tenth of a day (the times are then not comparable with the
target, which is stated for one day). The baseline of every row is
``numpy.log`` over the same number of elements.
"""

from __future__ import annotations

import argparse
import sys

import numpy as np
from _common import median_wall_cpu

N_DAY = 86_400
N_ENERGY = 8


def _day_dataset(n):
    """A synthetic (labelled) day of binned flux with a steady-state loss cone, L 3-6."""
    import xarray as xr

    from beltkit import diffusion

    rng = np.random.default_rng(4)
    edges = np.concatenate([np.arange(0, 20, 2.0), np.arange(20, 160, 10.0),
                            np.arange(160, 181, 2.0)])
    centres = 0.5 * (edges[:-1] + edges[1:])
    L = rng.uniform(3.0, 6.0, n)
    z0 = np.exp(rng.uniform(np.log(0.1), np.log(30.0), n))
    from beltkit import dipole

    a0 = dipole.bounce_loss_cone(L)
    folded = np.minimum(centres, 180 - centres)
    f = diffusion.loss_cone_profile(np.minimum(folded[None, :], 89.0), a0[:, None], z0[:, None])
    flux = np.repeat(f[:, None, :].astype(np.float32), N_ENERGY, axis=1) * 1e3
    energy = np.geomspace(100.0, 3000.0, N_ENERGY)
    t = np.datetime64("2026-01-01", "ns") + np.arange(n) * np.timedelta64(1, "s")
    return xr.Dataset(
        {"flux": (("time", "energy", "pitch_angle"), flux, {"units": "cm-2 s-1 sr-1 keV-1"}),
         "flux_err": (("time", "energy", "pitch_angle"), 0.05 * flux,
                      {"units": "cm-2 s-1 sr-1 keV-1"}),
         "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([edges[:-1], edges[1:]], 1)),
         "energy_bnds": (("energy", "nv"), np.stack([energy * 0.9, energy * 1.1], 1)),
         "L": ("time", L, {"units": "1"}), "mlat": ("time", np.zeros(n), {"units": "degree"})},
        coords={"time": t, "energy": ("energy", energy, {"units": "keV"}),
                "pitch_angle": ("pitch_angle", centres, {"units": "degree"})},
        attrs={"title": "synthetic benchmark day (invented data)"})


def run(repeats=3, quick=False):
    """Time the inversions; return the benchmark rows.

    Parameters
    ----------
    repeats : int
        Timed repeats per figure; the median is reported.
    quick : bool
        A tenth of a day, one repeat (smoke test for CI; no verdicts).

    Returns
    -------
    list of dict
        Rows with keys ``figure, value, unit, baseline, ratio, target, passed``
        (``value`` and ``baseline`` in seconds; ``ratio`` = value / baseline),
        plus ``cpu_seconds``.
    """
    from beltkit import diffusion

    n = N_DAY // 10 if quick else N_DAY
    if quick:
        repeats = 1
    rng = np.random.default_rng(3)
    size = n * N_ENERGY
    z0 = np.exp(rng.uniform(np.log(0.01), np.log(50.0), size)).reshape(n, N_ENERGY)
    r_cone = diffusion.cone_mean_ratio(z0)
    r_two = diffusion.two_angle_ratio(z0, 4.0, 1.0, 6.0)
    t_base, _ = median_wall_cpu(lambda: np.log(r_cone), repeats)
    rows = []
    what = f"{n} x {N_ENERGY}"
    cases = [
        (f'diffusion.z0_from_ratio(kind="cone_mean") over {what}',
         lambda: diffusion.z0_from_ratio(r_cone, "cone_mean"), 2.0),
        (f'diffusion.z0_from_ratio(kind="two_angles") over {what}',
         lambda: diffusion.z0_from_ratio(r_two, "two_angles", 4.0, 1.0, 6.0), None),
    ]
    ds = _day_dataset(n)
    cases.append((f"diffusion.from_pitch_angle_data, {what} x {ds.sizes['pitch_angle']} bins",
                  lambda: diffusion.from_pitch_angle_data(ds), None))
    for name, func, target in cases:
        seconds, cpu = median_wall_cpu(func, repeats)
        rows.append({
            "figure": f"{name} (CPU {cpu:.3f} s)",
            "value": seconds,
            "unit": "s",
            "baseline": t_base,
            "ratio": seconds / t_base,
            "target": f"< {target:g} s per day" if target else "information",
            "passed": None if (quick or target is None) else bool(seconds < target),
            "cpu_seconds": cpu,
        })
    return rows


def main(argv=None) -> int:
    """Print the figures; return 0 when every target passed."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args(argv)
    rows = run(repeats=args.repeats, quick=args.quick)
    for r in rows:
        print(f"{r['figure']:<80} {r['value']:>8.3f} {r['unit']}  ratio {r['ratio']:.1f}  "
              f"target {r['target']}  passed {r['passed']}")
    return 0 if all(r["passed"] is not False for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
