"""The session check of tests/conftest.py: a test that writes outside its temporary folders fails.

A copy of the conftest runs in a throw-away repository (in tmp_path) with
three tests: one writes into the repository, one into the user's beltkit
cache folder (``$XDG_CACHE_HOME/beltkit``), one only into ``tmp_path``.
"""

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

CONFTEST = Path(__file__).resolve().with_name("conftest.py")

TESTS = {
    "repo": "from pathlib import Path\n\n\ndef test_it():\n"
            "    (Path(__file__).resolve().parents[1] / 'stray.txt').write_text('x')\n",
    "cache": "import os\nfrom pathlib import Path\n\n\ndef test_it():\n"
             "    folder = Path(os.environ['XDG_CACHE_HOME']) / 'beltkit'\n"
             "    folder.mkdir(parents=True, exist_ok=True)\n"
             "    (folder / 'stray.nc').write_text('x')\n",
    "clean": "def test_it(tmp_path):\n    (tmp_path / 'fine.txt').write_text('x')\n",
}


def _run(tmp_path, kind):
    repo = tmp_path / "repo"
    (repo / "tests").mkdir(parents=True)
    shutil.copy(CONFTEST, repo / "tests" / "conftest.py")
    (repo / "tests" / f"test_{kind}.py").write_text(TESTS[kind])
    env = {**os.environ, "XDG_CACHE_HOME": str(tmp_path / "xdg")}
    env.pop("BELTKIT_CACHE_DIR", None)
    env.pop("PYTEST_ADDOPTS", None)
    return subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-p", "no:randomly",
         "--rootdir", str(repo), "tests"],
        cwd=repo, env=env, capture_output=True, text=True, timeout=120)


@pytest.mark.parametrize("kind,name", [("repo", "stray.txt"), ("cache", "stray.nc")])
def test_a_file_written_outside_the_temporary_folders_is_an_error(tmp_path, kind, name):
    proc = _run(tmp_path, kind)
    assert proc.returncode == 1, proc.stdout + proc.stderr
    assert "1 passed, 1 error" in proc.stdout
    assert f"{name}: written by the test session" in proc.stdout


def test_a_test_writing_only_into_tmp_path_passes(tmp_path):
    proc = _run(tmp_path, "clean")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "1 passed" in proc.stdout and "error" not in proc.stdout
