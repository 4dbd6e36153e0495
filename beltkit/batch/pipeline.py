"""The per-file pipeline of a batch run: open and validate once, compute, write atomically.

Every input file goes through the same two steps:

1. :func:`open_file` checks the path, skips an up-to-date output (its recorded
   input checksum and settings match), opens the file once and makes its
   product (:mod:`beltkit.batch.products`), validating it once. With
   ``load=True`` a file of up to one slab is read into memory and computed at
   once, without the netCDF lock, so that the previous file can be written
   meanwhile (the sequential runner's two-stage pipeline).
2. :func:`write_file` writes the product to a temporary file beside the
   output, streaming the slabs of a long file from the open input, and
   renames it into place (:func:`beltkit.io.write_stream`).

:func:`process_file` runs both steps; worker processes and dask tasks run it.
The netCDF-C and HDF5 libraries are not thread-safe, so every netCDF call of
a process is made under one lock (:data:`FILE_LOCK`), and dask computations
inside it run with the synchronous scheduler.
"""

from __future__ import annotations

import contextlib
import os
import threading
import time as _time
from dataclasses import dataclass
from pathlib import Path

from ..io import open_indexed, read_attributes, sha256, write_stream
from .inputs import FileResult, one_line
from .options import settings_text
from .products import Product, psd_product, summary_product
from .sectored import sectors_product

__all__ = [
    "FILE_LOCK",
    "FileJob",
    "digests_dropped",
    "open_file",
    "process_file",
    "single_threaded",
    "write_file",
]

#: The lock of every netCDF call in this process (one file at a time).
FILE_LOCK = threading.Lock()

_sync_lock = threading.Lock()
_sync_depth = 0
_sync_saved = None


@contextlib.contextmanager
def single_threaded():
    """Run dask computations in this block with the synchronous scheduler.

    Safe when several threads of one process (a threaded dask.distributed
    worker) enter at once: the setting is made by the first and undone by
    the last.
    """
    import dask

    global _sync_depth, _sync_saved
    with _sync_lock:
        if _sync_depth == 0:
            _sync_saved = dask.config.set(scheduler="synchronous")
        _sync_depth += 1
    try:
        yield
    finally:
        with _sync_lock:
            _sync_depth -= 1
            if _sync_depth == 0:
                _sync_saved.__exit__(None, None, None)
                _sync_saved = None


_HASHER = {"pid": None, "pool": None}


def _hasher():
    """One background thread per process for input checksums (made again after a fork)."""
    if _HASHER["pid"] != os.getpid():
        from concurrent.futures import ThreadPoolExecutor

        _HASHER["pool"] = ThreadPoolExecutor(max_workers=1, thread_name_prefix="beltkit-sha256")
        _HASHER["pid"] = os.getpid()
        _HASHER["ahead"] = {}
    return _HASHER["pool"]


def _digest(src: Path):
    """Return a future of the input's SHA-256 (the one started ahead, if any)."""
    pool = _hasher()
    fut = _HASHER["ahead"].pop(str(src), None)
    return fut if fut is not None else pool.submit(sha256, src)


def _digest_ahead(src) -> None:
    """Start the checksum of the next input, which the hasher reads while this one is written.

    The checksum (about 0.1 s of CPU per 100 MB) then overlaps the single-threaded
    netCDF writing of the file before instead of the next file's compute.
    """
    pool = _hasher()
    if str(src) not in _HASHER["ahead"]:
        _HASHER["ahead"][str(src)] = pool.submit(sha256, src)


def digests_dropped() -> None:
    """Forget the checksums started ahead for files that will not be processed."""
    if _HASHER["pid"] == os.getpid():
        for fut in _HASHER["ahead"].values():
            fut.cancel()
        _HASHER["ahead"].clear()


def _up_to_date(task: dict, digest) -> bool:
    """Whether the task's output records its input's checksum and the present settings."""
    out = Path(task["output"])
    if task["overwrite"] or not out.exists():
        return False
    attrs = read_attributes(out)
    return (attrs.get("source_sha256") == digest.result()
            and attrs.get("beltkit_settings") == settings_text(task["settings"]))


@dataclass
class FileJob:
    """One file between :func:`open_file` and :func:`write_file`.

    Attributes
    ----------
    task : dict
        The file's task (input, output, settings, ...).
    product : Product
        What is written.
    digest : concurrent.futures.Future
        The input's SHA-256, computed in a background thread.
    ds : xarray.Dataset or None
        The open input while the product's slabs stream from it; None once
        the product is in memory and the file closed.
    t0 : float
        When the file's work began (``time.perf_counter``).
    """

    task: dict
    product: Product
    digest: object
    ds: object
    t0: float


def _failed(task, exc, t0) -> FileResult:
    if task.get("debug"):
        import traceback

        traceback.print_exc()
    src = Path(task["input"])
    return FileResult(str(src), task["output"], "failed", one_line(exc, src),
                      _time.perf_counter() - t0)


def _close(ds) -> None:
    if ds is not None:
        with FILE_LOCK:
            ds.close()


def open_file(task: dict, *, load=False, buffers=None):
    """First step of a file: check, open and validate it once, and make its product.

    Returns ``(result, job)``: a final :class:`FileResult` (skipped or
    failed) and None, or None and the :class:`FileJob` for
    :func:`write_file`. With ``load``, a summary of up to one slab is read
    under the netCDF lock and then computed without it (into ``buffers``,
    the caller's output memory); the input is then closed (``job.ds`` None).
    """
    t0 = _time.perf_counter()
    src = Path(task["input"])
    digest = ds = None
    try:
        if not src.is_file():
            raise FileNotFoundError(f"{src}: no such file")
        # the checksum is read in another thread while the file is summarized (hashlib
        # and file reads release the GIL); it is needed before only to skip a file
        digest = _digest(src)
        with FILE_LOCK, single_threaded():
            if _up_to_date(task, digest):
                digest.cancel()
                return FileResult(str(src), task["output"], "skipped", "up to date",
                                  _time.perf_counter() - t0), None
            ds = open_indexed(src, mapping=task["mapping"])
            if task.get("product") == "psd":
                product = psd_product(ds, src, task)
            elif task.get("product") == "sectors":
                product = sectors_product(ds, src, task)
            else:
                nxt = task.get("next_input")
                product = summary_product(
                    ds, src, task, load=load, buffers=buffers,
                    # the next input's checksum is read while this summary is written
                    computed=(lambda: _digest_ahead(Path(nxt))) if nxt else None)
            if product.loaded:
                ds.close()
                ds = None
        if product.loaded:
            product.compute()  # the compiled engine on every core; the lock is free
        return None, FileJob(task, product, digest, ds, t0)
    except Exception as exc:  # one file's failure is reported, never fatal to the run
        _close(ds)
        if digest is not None:
            digest.cancel()
        return _failed(task, exc, t0), None


def write_file(job: FileJob) -> FileResult:
    """Second step of a file: write its product atomically, then rename it into place.

    A product whose value checks fail leaves no output (the temporary file
    is removed); the flush and rename run outside the netCDF lock.
    """
    task, digest, product = job.task, job.digest, job.product
    src, out, settings = Path(task["input"]), Path(task["output"]), task["settings"]
    try:
        with FILE_LOCK, single_threaded():
            # the checksum, if already known, goes in with the other attributes;
            # otherwise it is added once the data are written; so are the counts of
            # flagged samples of a summary (known once every slab is computed)
            known = digest.done() and digest.exception() is None
            attrs = product.attrs_of(digest.result() if known else "")
            counted = product.flagged is None or product.loaded
            if counted:
                attrs.update(product.flag_attrs())

            def late():
                extra = {} if known else {"source_sha256": digest.result()}
                return extra if counted else {**extra, **product.flag_attrs()}

            commit = write_stream(
                product.slabs, out, count=product.count, compress=settings["compress"],
                history=task["command"], attrs=attrs, finish=product.finish,
                late_attrs=None if known and counted else late, defer_commit=True)
        commit()  # flush and rename: no netCDF call, outside the lock
        return FileResult(str(src), str(out), "ok", "", _time.perf_counter() - job.t0,
                          dict(product.flagged or {}))
    except Exception as exc:  # one file's failure is reported, never fatal to the run
        return _failed(task, exc, job.t0)
    finally:
        _close(job.ds)
        digest.cancel()


def process_file(task: dict) -> FileResult:
    """Run one file through the pipeline (in this process, a worker process or a dask worker).

    Files are processed one at a time per process (see :data:`FILE_LOCK`);
    run dask.distributed workers with one thread each, more processes for speed.
    """
    result, job = open_file(task)
    return result if job is None else write_file(job)
