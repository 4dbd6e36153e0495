"""One pool of worker threads per process, for passes that release the GIL.

The compiled partition kernel and numpy's elementwise loops release the
interpreter lock, so consecutive slices of a long array computed in these
threads run on every core at once. The pool is made on first use and again
after a fork (a child process inherits no threads).
"""

from __future__ import annotations

import os

__all__ = ["cores", "map_slices", "thread_pool"]

_POOL = {"pid": None, "pool": None}


def cores():
    """Return the number of cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def thread_pool():
    """Return this process's worker threads (None on a single core)."""
    n = cores()
    if n < 2:
        return None
    if _POOL["pid"] != os.getpid():
        from concurrent.futures import ThreadPoolExecutor

        _POOL["pool"] = ThreadPoolExecutor(max_workers=n, thread_name_prefix="beltkit")
        _POOL["pid"] = os.getpid()
    return _POOL["pool"]


def map_slices(func, n, block, *, parallel=True):
    """Call ``func(slice)`` on consecutive slices of ``range(n)``; return the results in order.

    Parameters
    ----------
    func : callable
        Called once per slice of at most ``block`` items.
    n : int
        Number of items.
    block : int
        Slice length (the last one may be shorter).
    parallel : bool
        Run the slices on the process's worker threads when there are several
        slices and several cores; else one after the other in this thread.

    Returns
    -------
    list
        ``func``'s return values, in slice order.
    """
    slices = [slice(s, min(s + block, n)) for s in range(0, n, block)]
    pool = thread_pool() if (parallel and len(slices) > 1) else None
    if pool is None:
        return [func(s) for s in slices]
    return list(pool.map(func, slices))
