"""Measure every speed and memory target of beltkit beside its baseline, in one run.

Usage::

    python benchmarks/run.py                 # full sizes (several minutes on 2 cores)
    python benchmarks/run.py --quick         # reduced sizes, under a minute (CI smoke test)
    python benchmarks/run.py --json out.json # also write the table as JSON

Each figure is measured as the median of several repeats beside a baseline on
the same data (a plain ``numpy.sqrt`` pass, a single weighted numpy reduction,
an xarray open-load-rewrite, or the reference IGRF library), so the ratio, not
the absolute time, is what a target constrains. The suites live beside this
file (``bench_physics.py``, ``bench_pad.py``, ``bench_batch.py``,
``bench_igrf.py``, ``bench_field.py``, ``bench_t89.py``); each has ``run(quick=False)``
returning rows with the keys ``figure, value, unit, baseline, ratio, target,
passed``.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import platform
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
SUITES = ("bench_physics", "bench_pad", "bench_batch", "bench_igrf", "bench_field", "bench_t89",
          "bench_diffusion", "bench_invariants", "bench_sectors", "bench_survey")


def _fmt(value):
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        if value == 0 or 1e-3 <= abs(value) < 1e6:
            return f"{value:.4g}"
        return f"{value:.3e}"
    return str(value)


def print_table(rows, stream=sys.stdout):
    """Print the benchmark rows as an aligned table."""
    cols = ["figure", "value", "unit", "baseline", "ratio", "target", "passed"]
    cells = [[_fmt(r.get(c)) for c in cols] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(cols)]
    line = "  ".join(c.ljust(w) for c, w in zip(cols, widths))
    print(line, file=stream)
    print("  ".join("-" * w for w in widths), file=stream)
    for row in cells:
        print("  ".join(v.ljust(w) for v, w in zip(row, widths)), file=stream)


def main(argv=None) -> int:
    """Run the benchmark suites; return 0 when every target passed."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="reduced sizes (smoke test)")
    parser.add_argument("--json", metavar="FILE", help="write the rows as JSON to FILE")
    parser.add_argument("--only", nargs="*", choices=SUITES, help="run only these suites")
    args = parser.parse_args(argv)

    sys.path.insert(0, str(HERE))
    rows = []
    failures = 0
    for name in args.only or SUITES:
        t0 = time.perf_counter()
        try:
            module = importlib.import_module(name)
            suite_rows = module.run(quick=args.quick)
        except Exception as exc:  # one suite's failure is reported, not fatal
            failures += 1
            rows.append({"figure": f"{name}: FAILED ({type(exc).__name__}: {exc})",
                         "passed": False})
            continue
        for r in suite_rows:
            r.setdefault("suite", name)
        rows.extend(suite_rows)
        print(f"[{name}] {len(suite_rows)} figure(s) in {time.perf_counter() - t0:.1f} s",
              file=sys.stderr)

    print(f"\nbeltkit benchmarks ({'quick' if args.quick else 'full'}); "
          f"{os.cpu_count()} cores, Python {platform.python_version()}, {platform.machine()}\n")
    print_table(rows)
    if args.json:
        out = Path(args.json)
        tmp = out.with_name(f".{out.name}.tmp")
        meta = {"quick": args.quick, "cores": os.cpu_count(),
                "python": platform.python_version(), "machine": platform.machine()}
        tmp.write_text(json.dumps({"meta": meta, "rows": rows}, indent=2, default=str))
        os.replace(tmp, out)
    missed = [r for r in rows if r.get("passed") is False]
    if args.quick:
        # CI checks that the harness runs, not its times.
        return 1 if failures else 0
    return 1 if (failures or missed) else 0


if __name__ == "__main__":
    raise SystemExit(main())
