"""Shared test set-up: a cache folder per test session, and a check that no test writes elsewhere.

beltkit caches drift-shell tables under ``$BELTKIT_CACHE_DIR``. The test
session points it (and matplotlib's config folder, hypothesis's example
store, IPython's and Jupyter's runtime folders for the notebook tests) at a
temporary folder made for the session, so no test reads or writes the user's
real ``~/.cache/beltkit`` and every run starts from an empty cache, as a fresh
machine does. Tests that need a cache of their own still set the variable
with ``monkeypatch``.

Every test writes only into its temporary folders: the session lists the
files of the repository (tool caches left out: ``.git``, ``__pycache__`` with
numba's cache files, ``.pytest_cache``, ``*.egg-info``) and of the user's
beltkit cache folder before the first test and again after the last; a file
that appeared or disappeared is an error naming it.
"""

import os
import shutil
import tempfile
from pathlib import Path

import pytest

_REPO = Path(__file__).resolve().parents[1]
# the user's cache folder as beltkit finds it when $BELTKIT_CACHE_DIR is not set
_USER_CACHE = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "beltkit"

_SESSION_DIR = tempfile.mkdtemp(prefix="beltkit-tests-")
os.environ["BELTKIT_CACHE_DIR"] = os.path.join(_SESSION_DIR, "cache")
os.environ.setdefault("MPLBACKEND", "Agg")
os.environ["MPLCONFIGDIR"] = os.path.join(_SESSION_DIR, "matplotlib")
os.environ["HYPOTHESIS_STORAGE_DIRECTORY"] = os.path.join(_SESSION_DIR, "hypothesis")
os.environ["IPYTHONDIR"] = os.path.join(_SESSION_DIR, "ipython")
os.environ["JUPYTER_RUNTIME_DIR"] = os.path.join(_SESSION_DIR, "jupyter-runtime")

# tool folders, and a virtual environment kept inside the checkout (not the project's files)
_TOOL_DIRS = {".git", "__pycache__", ".pytest_cache", ".venv", "venv", ".tox", ".nox"}
_TOOL_SUFFIXES = (".pyc", ".nbi", ".nbc")  # bytecode and numba's cache index and data


def _files(folder):
    """Return the paths (relative to `folder`) of the files under it, tool caches left out."""
    found = set()
    for dirpath, dirnames, filenames in os.walk(folder):
        dirnames[:] = [d for d in dirnames if d not in _TOOL_DIRS and not d.endswith(".egg-info")]
        found.update(os.path.relpath(os.path.join(dirpath, f), folder)
                     for f in filenames if not f.endswith(_TOOL_SUFFIXES))
    return found


@pytest.fixture(scope="session", autouse=True)
def _nothing_written_outside_temporary_folders():
    """Fail the session if a test added or removed a file in the repository or the user's cache."""
    before = {folder: _files(folder) for folder in (_REPO, _USER_CACHE)}
    yield
    problems = []
    for folder, names in before.items():
        now = _files(folder)
        problems += [f"{folder / p}: written by the test session (use tmp_path)"
                     for p in sorted(now - names)]
        problems += [f"{folder / p}: removed by the test session" for p in sorted(names - now)]
    assert not problems, "\n".join(problems)


def pytest_sessionfinish(session, exitstatus):
    """Remove the session's cache folder."""
    shutil.rmtree(_SESSION_DIR, ignore_errors=True)
