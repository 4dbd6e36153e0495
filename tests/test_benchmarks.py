"""The benchmark harness runs end to end (its times are judged in benchmarks/, not here)."""

import importlib.util
import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _suites():
    """The suite list of benchmarks/run.py (one list, read from the harness itself)."""
    spec = importlib.util.spec_from_file_location("bench_run", ROOT / "benchmarks" / "run.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.SUITES


SUITES = _suites()


@pytest.mark.slow
def test_quick_benchmark_runs_every_suite(tmp_path):
    out = tmp_path / "bench.json"
    proc = subprocess.run(
        [sys.executable, str(ROOT / "benchmarks" / "run.py"), "--quick", "--json", str(out)],
        cwd=tmp_path, capture_output=True, text=True, timeout=600,
    )
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    rows = json.loads(out.read_text())["rows"]
    assert {r["suite"] for r in rows} == set(SUITES)
    assert not [r for r in rows if "FAILED" in str(r["figure"])]
    # every row that names a target carries a measured value and a verdict or a note
    for r in rows:
        if r.get("target") not in (None, "-", "information"):
            assert isinstance(r["value"], (int, float)), r
    assert "figure" in proc.stdout and "ratio" in proc.stdout
