"""Smoke test of a plain install (``python -m pip install .``, no extras) through the real field.

Run by ``.ci/run`` in a virtual environment that has beltkit and its runtime
dependencies only. With a fresh, empty cache folder it runs

1. ``beltkit losscone --field igrf --latitude -30 --longitude -40 --height-km 650
   --time 2024-06-01T12:00`` (the table, then again as ``--json``, which reads the
   drift-shell table the first run cached),
2. ``beltkit.pad.partition(ds, model="igrf")`` on a demo file from ``data_demo/``,
3. ``beltkit summarize --field igrf`` on the same demo file into a temporary folder,

and checks that each succeeds with real values. Exit code 0 when all hold.

Usage: ``python .ci/plain_smoke.py [DATA_DEMO_FOLDER]`` (default: ``data_demo`` beside ``.ci``).
"""

import importlib.util
import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

LOSSCONE_ARGS = ["losscone", "--field", "igrf", "--latitude", "-30", "--longitude", "-40",
                 "--height-km", "650", "--time", "2024-06-01T12:00"]
CONES = ("blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial")


def fail(message):
    """Print one FAILED line and exit 1."""
    print(f"plain smoke: FAILED: {message}", file=sys.stderr)
    sys.exit(1)


def check(condition, message):
    """Fail with `message` unless `condition`."""
    if not condition:
        fail(message)


def run(cmd, env, *, show=True):
    """Run a command, print (or not) its output, fail on a non-zero exit; return stdout."""
    print("plain smoke: $ " + " ".join(cmd), flush=True)
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
    if show:
        print(proc.stdout, end="")
    if proc.returncode != 0:
        fail(f"exit code {proc.returncode}:\n{proc.stderr}")
    return proc.stdout


def cache_tables(cache):
    """Return the drift-shell tables in the cache folder (fail on leftover temporaries)."""
    tables = sorted(cache.glob("driftshell_*.nc"))
    leftovers = [p.name for p in cache.iterdir() if p.name.startswith(".")]
    check(not leftovers, f"temporary files left in the cache folder: {leftovers}")
    return tables


def smallest_demo_file(folder):
    """Return the demo file with the fewest time samples (robust to renamed demo files)."""
    import netCDF4

    files = sorted(folder.glob("*.nc"))
    check(files, f"no demo files in {folder}")

    def n_time(path):
        with netCDF4.Dataset(path) as nc:
            return len(nc.dimensions["time"])

    return min(files, key=n_time)


def main():
    """Run the three IGRF paths; exit 1 at the first that fails."""
    root = Path(__file__).resolve().parent.parent
    demo = Path(sys.argv[1]) if len(sys.argv) > 1 else root / "data_demo"

    # a plain install: none of the test extra's packages is importable
    extras = [m for m in ("pytest", "h5netcdf", "compliance_checker", "ppigrf")
              if importlib.util.find_spec(m) is not None]
    check(not extras, f"not a plain install: {extras} importable")
    beltkit_cmd = shutil.which("beltkit", path=str(Path(sys.executable).parent))
    check(beltkit_cmd is not None, "the beltkit command is not installed beside this Python")

    work = Path(tempfile.mkdtemp(prefix="beltkit-plain-smoke-"))
    try:
        cache = work / "cache"
        os.environ["BELTKIT_CACHE_DIR"] = str(cache)  # fresh and empty
        os.environ.setdefault("MPLBACKEND", "Agg")
        env = dict(os.environ)

        # 1. one point in the IGRF (South Atlantic, 650 km)
        table = run([beltkit_cmd, *LOSSCONE_ARGS], env)
        check("local bounce loss cone" in table, "losscone printed no loss cones")
        check(len(cache_tables(cache)) == 1, "losscone cached no drift-shell table")
        res = json.loads(run([beltkit_cmd, *LOSSCONE_ARGS, "--json"], env, show=False))
        check(res["model"]["value"] == "igrf", f"model {res['model']['value']!r}, not igrf")
        cones = {k: res[k]["value"] for k in CONES}
        check(all(isinstance(v, float) and 0.0 < v <= 90.0 for v in cones.values()),
              f"loss cones not in (0, 90] deg: {cones}")
        # a mirror point nearer the Earth than the equator has the wider cone; the drift
        # loss cone is at least the bounce loss cone (common practice)
        check(cones["blc_equatorial"] < cones["blc_local"] <= cones["dlc_local"],
              f"loss cones out of order: {cones}")
        check(1.0 < res["L"]["value"] < 3.0, f"L = {res['L']['value']} at 650 km, 30 S")
        print(f"plain smoke: losscone ok (local bounce {cones['blc_local']:.2f} deg, "
              f"drift {cones['dlc_local']:.2f} deg, L {res['L']['value']:.3f})")

        import numpy as np

        import beltkit.io
        import beltkit.pad

        # the installed package, not the source tree
        check(root not in Path(beltkit.io.__file__).resolve().parents,
              f"beltkit imported from the source tree ({beltkit.io.__file__})")

        # 2. partition a demo file in the IGRF
        src = smallest_demo_file(demo)
        ds = beltkit.io.open_flux(src)
        out = beltkit.pad.partition(ds, model="igrf").compute()
        check(out.attrs.get("beltkit_field_model") == "igrf",
              f"partition used {out.attrs.get('beltkit_field_model')!r}, not igrf")
        blc = out["blc_local"].values
        check(np.isfinite(blc).all() and (blc > 0).all() and (blc <= 90).all(),
              "partition: local bounce loss cones not all finite in (0, 90] deg")
        frac = sum(out[f"fraction_{p}"] for p in ("precipitating", "quasi_trapped", "trapped"))
        ok = np.isfinite(frac.values)
        check(ok.mean() > 0.9 and np.allclose(frac.values[ok], 1.0, atol=1e-6),
              "partition: population fractions are not finite or do not add up to 1")
        print(f"plain smoke: partition ok on {src.name} ({blc.size} samples, local bounce "
              f"loss cone {blc.min():.1f}-{blc.max():.1f} deg)")

        # 3. summarize the same file in the IGRF
        outdir = work / "summaries"
        run([beltkit_cmd, "summarize", "--field", "igrf", str(src), "--out", str(outdir)], env)
        summaries = sorted(outdir.glob("*.summary.nc"))
        check(len(summaries) == 1, f"summarize wrote {[p.name for p in summaries]}")
        import xarray as xr

        with xr.open_dataset(summaries[0]) as summary:
            model = summary.attrs.get("beltkit_field_model", summary.attrs.get("field_model"))
            check(model == "igrf", f"the summary records the model {model!r}, not igrf")
            for name in CONES:
                v = summary[name].values
                good = np.isfinite(v)
                check(good.mean() > 0.9 and ((v[good] > 0) & (v[good] <= 90)).all(),
                      f"summary {name}: finite share {good.mean():.3f} or values out of range")
            check(np.isfinite(summary["blc_local"].values).all(),
                  "summary: local bounce loss cones not all finite")
        print(f"plain smoke: summarize ok ({summaries[0].name})")
        check(len(cache_tables(cache)) >= 2, "the demo file cached no drift-shell table")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print("plain smoke: all IGRF paths work after a plain install")


if __name__ == "__main__":
    main()
