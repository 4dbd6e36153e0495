"""The code base passes the project's lint rules (ruff, numpy docstring convention)."""

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_passes_on_package_tests_and_benchmarks():
    ruff = shutil.which("ruff") or str(Path(sys.executable).with_name("ruff"))
    assert Path(ruff).exists(), "ruff is part of the test extra: pip install '.[test]'"
    proc = subprocess.run(
        [ruff, "check", "--no-cache", "beltkit", "tests", "benchmarks"],
        cwd=ROOT, capture_output=True, text=True,
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
