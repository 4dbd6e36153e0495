"""Variables computed from a file's variables only where they are indexed.

The readers keep a file lazy: :func:`beltkit.io.open_indexed` returns xarray's
lazily indexed arrays, so taking a slab along ``time`` reads just that slab.
The read-time rules (fill and valid-range masks, quality rules, unit factors,
telescope conversions, a common energy axis, frame conversions) must not
break that, so each derived variable is a :class:`DerivedArray`: an xarray
backend array whose ``__getitem__`` reads the same slab of its source
variables and computes the result on it. Several outputs of one computation
(the masked flux and its ``read_flag``) share a :class:`Computation`, which
keeps the last slab's results so that reading both costs one read.
"""

from __future__ import annotations

import threading

import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

__all__ = ["Computation", "DerivedArray", "derived_variable", "read_block"]


def read_block(var: xr.Variable, index: dict) -> np.ndarray:
    """Read the slab of `var` selected by ``index`` (dim -> slice or int) as numpy."""
    sub = {d: k for d, k in index.items() if d in var.dims}
    return np.asarray(var.isel(sub).values if sub else var.values)


class Computation:
    """A slab-wise computation with several named outputs, each (dims, shape, dtype).

    Parameters
    ----------
    func : callable
        ``func(index) -> dict`` of numpy arrays, one per output, where
        ``index`` maps each output dimension to a slice (integer keys are
        given as length-one slices and dropped afterwards).
    outputs : dict
        ``name -> (dims, shape, dtype)`` of every output.
    """

    def __init__(self, func, outputs):
        self.func = func
        self.outputs = dict(outputs)
        self._lock = threading.Lock()
        self._last = (None, None)

    def block(self, name, key):
        """Return output `name` for a basic indexing key (computing the slab once)."""
        dims, shape, _ = self.outputs[name]
        index, drop = {}, []
        for axis, (d, k) in enumerate(zip(dims, key)):
            if isinstance(k, (int, np.integer)):
                k = int(k) % shape[axis]
                index[d] = slice(k, k + 1)
                drop.append(axis)
            else:
                index[d] = k
        token = tuple((d, s.start, s.stop, s.step) for d, s in sorted(index.items()))
        with self._lock:
            cached_token, cached = self._last
        if cached_token != token:
            cached = self.func(index)
            with self._lock:
                self._last = (token, cached)
        out = cached[name].copy()  # a caller may write into what it gets: the cache stays clean
        return out.reshape([n for a, n in enumerate(out.shape) if a not in drop]) if drop else out


class DerivedArray(BackendArray):
    """One output of a :class:`Computation`, indexed lazily by xarray."""

    def __init__(self, computation: Computation, name: str):
        self.computation = computation
        self.name = name
        _, self.shape, self.dtype = computation.outputs[name]
        self.shape = tuple(int(n) for n in self.shape)
        self.dtype = np.dtype(self.dtype)

    def __getitem__(self, key):
        return indexing.explicit_indexing_adapter(
            key, self.shape, indexing.IndexingSupport.BASIC, self._basic)

    def _basic(self, key):
        return self.computation.block(self.name, tuple(key))


def derived_variable(computation: Computation, name: str, attrs=None) -> xr.Variable:
    """Return output `name` of `computation` as a lazily indexed :class:`xarray.Variable`."""
    dims = computation.outputs[name][0]
    return xr.Variable(dims, indexing.LazilyIndexedArray(DerivedArray(computation, name)),
                       attrs or {})
