"""Atomic files: write beside the target, flush to disk, rename into place.

Every file beltkit writes (summaries, surveys, psd files, the drift-shell
cache) goes through :func:`atomic_file`: the content is written to a hidden
temporary file in the target's folder (:func:`temporary_name`), flushed with
``fsync``, moved over the target with :func:`os.replace` (atomic on POSIX
file systems), and the folder is flushed. A reader therefore sees the old
file or the complete new one, never a partial file under the final name; a
writer killed half-way leaves only a temporary, which
:func:`remove_stale_temporaries` clears on the next run.
"""

from __future__ import annotations

import contextlib
import os
import secrets
from glob import escape as glob_escape
from pathlib import Path

__all__ = ["TEMP_SUFFIX", "atomic_file", "remove_stale_temporaries", "temporary_name"]

#: Suffix of the temporary files (``.<name>.beltkit-<hex>.tmp``).
TEMP_SUFFIX = ".tmp"
_TEMP_MARK = ".beltkit-"


def temporary_name(target) -> Path:
    """Return a fresh temporary path beside `target` (``.<name>.beltkit-<hex>.tmp``).

    Parameters
    ----------
    target : str or path
        The final file.

    Returns
    -------
    pathlib.Path
        A hidden name in the same folder, unique to this call.
    """
    target = Path(target)
    return target.with_name(f".{target.name}{_TEMP_MARK}{secrets.token_hex(6)}{TEMP_SUFFIX}")


def remove_stale_temporaries(folder, target_name=None) -> list[Path]:
    """Delete temporary files left in `folder` by killed writers; return what was removed.

    Only names made by :func:`temporary_name` are touched; with `target_name`,
    only the temporaries of that one output file.

    Parameters
    ----------
    folder : str or path
        The folder to clean (nothing happens if it does not exist).
    target_name : str, optional
        The final file name whose temporaries alone are removed.

    Returns
    -------
    list of pathlib.Path
        The files removed.
    """
    removed = []
    folder = Path(folder)
    if not folder.is_dir():
        return removed
    stem = glob_escape(target_name) if target_name else "*"
    for p in folder.glob(f".{stem}{_TEMP_MARK}*{TEMP_SUFFIX}"):
        try:
            p.unlink()
            removed.append(p)
        except FileNotFoundError:
            pass
    return removed


def atomic_file(path, fill, *, defer_commit=False):
    """Write `path` atomically: ``fill(tmp)`` writes a temporary file that replaces it.

    Parameters
    ----------
    path : str or path
        The final file (its folder is created if needed).
    fill : callable
        Called with the temporary path; writes the whole content there.
    defer_commit : bool
        If True, return the function that flushes and renames (it makes no
        call into the library that wrote the file), for a caller that must
        release a lock first; else do it now.

    Returns
    -------
    pathlib.Path or callable
        The final path, or the commit function with ``defer_commit``.

    Notes
    -----
    On any error the temporary file is removed and the target is left as it
    was. The folder is flushed after the rename where the file system allows.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_name(path)

    def discard():
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()

    try:
        fill(tmp)
    except BaseException:
        discard()
        raise

    def commit() -> Path:
        try:
            with open(tmp, "rb") as fh:
                os.fsync(fh.fileno())
            os.replace(tmp, path)
        except BaseException:
            discard()
            raise
        with contextlib.suppress(OSError):  # some file systems cannot fsync a folder
            dir_fd = os.open(path.parent, os.O_RDONLY)
            try:
                os.fsync(dir_fd)
            finally:
                os.close(dir_fd)
        return path

    return commit if defer_commit else commit()
