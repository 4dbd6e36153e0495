"""Shared test set-up: every test session gets its own cache folder.

beltkit caches drift-shell tables under ``$BELTKIT_CACHE_DIR``. The test
session points it (and matplotlib's config folder) at a temporary folder made
for the session, so no test reads or writes the user's real
``~/.cache/beltkit`` and every run starts from an empty cache, as a fresh
machine does. Tests that need a cache of their own still set the variable
with ``monkeypatch``.
"""

import os
import shutil
import tempfile

_SESSION_DIR = tempfile.mkdtemp(prefix="beltkit-tests-")
os.environ["BELTKIT_CACHE_DIR"] = os.path.join(_SESSION_DIR, "cache")
os.environ.setdefault("MPLBACKEND", "Agg")
os.environ["MPLCONFIGDIR"] = os.path.join(_SESSION_DIR, "matplotlib")



def pytest_sessionfinish(session, exitstatus):
    """Remove the session's cache folder."""
    shutil.rmtree(_SESSION_DIR, ignore_errors=True)
