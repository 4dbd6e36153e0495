r"""Mergeable per-cell statistics: counts, means, standard deviations and histogram quantiles.

A :class:`CellStats` holds, for every cell of a fixed grid of ``n_cells``
cells, the number of finite samples, their mean, the sum of squared
deviations from the mean, and a fixed-resolution histogram on a
:class:`Scale`. Two partial aggregates of the same grid and scale merge into
the aggregate of all their samples (:meth:`CellStats.merge`): counts and
histograms add exactly, so merging is associative and commutative for them
bit for bit; means and variances combine with the pairwise update of Chan,
Golub & LeVeque (1979), commutative exactly and associative to rounding
(about 1e-16 relative). Memory does not depend on how many samples were
added: ``n_cells * (24 + 4 * n_bins)`` bytes.

Samples are added whole arrays at a time (:meth:`CellStats.add`, with
:func:`numpy.bincount`); nothing loops over samples in Python.

Quantiles
---------
The quantile :math:`q` of :math:`n` sorted values :math:`x_{(0)} \le \dots
\le x_{(n-1)}` is taken as :func:`numpy.quantile` takes it by default
(linear interpolation between order statistics, Hyndman & Fan 1996 type 7):

.. math::

    Q(q) = (1 - f)\,x_{(k)} + f\,x_{(k+1)}, \qquad k = \lfloor (n-1)q \rfloor,
    \quad f = (n-1)q - k.

The histogram knows which bin holds each order statistic; the estimate puts
each at its bin's representative value :math:`c_b` (the midpoint of a linear
bin, the geometric centre :math:`\sqrt{e_b e_{b+1}}` of a logarithmic one):
:math:`\hat Q = (1-f)\,c_{b(k)} + f\,c_{b(k+1)}`.

*Worst-case error.* On a linear scale of bin width :math:`h`, every value
of a bin lies within :math:`h/2` of its midpoint, so

.. math:: |\hat Q - Q| \le (1-f)\tfrac h2 + f\,\tfrac h2 = \tfrac h2 .

On a logarithmic scale with edge ratio :math:`r = e_{b+1}/e_b`, a value
:math:`x` of the bin satisfies :math:`c/\sqrt r \le x < c\sqrt r`, hence
:math:`|c - x| \le (\sqrt r - 1)\,x`, and for positive values

.. math:: |\hat Q - Q| \le (\sqrt r - 1)\,\big((1-f)x_{(k)} + f x_{(k+1)}\big)
    = (\sqrt r - 1)\,Q .

The bound is computed from the scale's actual edges
(:attr:`Scale.error_bound`) and is what :meth:`CellStats.attrs` records.
Values outside the scale's range are counted in the cell (count, mean and
standard deviation stay exact) but have no representative: a quantile whose
order statistics fall there is NaN, never a wrong number. A logarithmic
scale keeps exact zeros in a bin of their own (representative 0, no error).

References
----------
T. F. Chan, G. H. Golub, R. J. LeVeque, "Updating formulae and a pairwise
algorithm for computing sample variances", Stanford report STAN-CS-79-773
(1979); also in COMPSTAT 1982, 30-41.

R. J. Hyndman, Y. Fan, "Sample quantiles in statistical packages",
The American Statistician 50, 361-365 (1996).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import xarray as xr

from .atomic import atomic_file

__all__ = ["CellStats", "Scale", "read_stats", "write_stats"]

_U32_MAX = np.iinfo(np.uint32).max


@dataclass(frozen=True)
class Scale:
    """A fixed-resolution histogram scale, linear or logarithmic.

    Parameters
    ----------
    kind : {"linear", "log"}
        Equal-width bins, or bins of equal edge ratio.
    lo, hi : float
        Range covered by the bins (``0 < lo`` for ``"log"``). ``hi`` itself
        falls in the last bin.
    n : int
        Number of bins inside the range.

    Notes
    -----
    Bin layout (in value order, so cumulative counts rank the values):
    linear: ``[below lo] [n bins] [above hi]``; log: ``[negative] [zero]
    [0 < x < lo] [n bins] [above hi]``. Out-of-range bins have a NaN
    representative; a log scale's zero bin has representative 0.
    """

    kind: str
    lo: float
    hi: float
    n: int

    def __post_init__(self):
        if self.kind not in ("linear", "log"):
            raise ValueError(f"Scale kind must be 'linear' or 'log', got {self.kind!r}")
        if not (np.isfinite(self.lo) and np.isfinite(self.hi) and self.hi > self.lo):
            raise ValueError(f"Scale range must be finite with hi > lo, got {self.lo}, {self.hi}")
        if self.kind == "log" and self.lo <= 0:
            raise ValueError(f"a log Scale needs lo > 0, got {self.lo}")
        if int(self.n) != self.n or self.n < 1:
            raise ValueError(f"Scale needs a positive whole number of bins, got {self.n}")

    @classmethod
    def linear(cls, lo: float, hi: float, n: int) -> Scale:
        """Return ``n`` equal-width bins over ``[lo, hi]``."""
        return cls("linear", float(lo), float(hi), int(n))

    @classmethod
    def log(cls, lo: float, hi: float, per_decade: int) -> Scale:
        """Return ``per_decade`` bins per factor of ten over ``[lo, hi]`` (rounded up)."""
        n = int(np.ceil(round(np.log10(hi / lo) * per_decade, 9)))
        return cls("log", float(lo), float(hi), n)

    @cached_property
    def edges(self) -> np.ndarray:
        """The ``n + 1`` edges of the in-range bins."""
        if self.kind == "linear":
            return np.linspace(self.lo, self.hi, self.n + 1)
        return np.geomspace(self.lo, self.hi, self.n + 1)

    @property
    def _offset(self) -> int:
        return 1 if self.kind == "linear" else 3

    @property
    def n_bins(self) -> int:
        """Total number of bins, out-of-range bins included."""
        return self.n + self._offset + 1

    @cached_property
    def representatives(self) -> np.ndarray:
        """The value each bin stands for (NaN for out-of-range bins)."""
        e = self.edges
        inner = 0.5 * (e[:-1] + e[1:]) if self.kind == "linear" else np.sqrt(e[:-1] * e[1:])
        rep = np.full(self.n_bins, np.nan)
        rep[self._offset:self._offset + self.n] = inner
        if self.kind == "log":
            rep[1] = 0.0
        return rep

    @cached_property
    def error_bound(self) -> float:
        """Worst-case quantile error: absolute (linear) or relative (log), from the edges."""
        e = self.edges
        if self.kind == "linear":
            return float(np.max(np.diff(e)) / 2)
        c = np.sqrt(e[:-1] * e[1:])
        return float(max(np.max(e[1:] / c), np.max(c / e[:-1])) - 1.0)

    def bin_index(self, values) -> np.ndarray:
        """Return the bin of each finite value (int64; see the class notes for the layout).

        The bin is computed arithmetically and then checked against the
        edges themselves, so a value is never put beside the bin that holds it.
        """
        v = np.asarray(values, dtype=float)
        e, n = self.edges, self.n
        with np.errstate(invalid="ignore", divide="ignore"):
            if self.kind == "linear":
                x = (v - self.lo) * (n / (self.hi - self.lo))
            else:
                x = np.log10(v / self.lo) * (n / np.log10(self.hi / self.lo))
            k = np.clip(np.nan_to_num(np.floor(x), nan=0.0), 0, n - 1).astype(np.int64)
        k -= v < e[k]  # one step back or forward where rounding crossed an edge
        k += v >= e[k + 1]
        np.clip(k, 0, n - 1, out=k)
        k += 1  # 0: below lo, 1..n: in range, n+1: above hi
        k[v < self.lo] = 0
        k[v > self.hi] = n + 1
        if self.kind == "log":  # 0: negative, 1: zero, 2: 0 < v < lo, 3..n+2, n+3: above
            k += 2
            k[v == 0] = 1
            k[v < 0] = 0
        return k

    def attrs(self) -> dict:
        """Describe the scale and its error bound (netCDF attributes)."""
        kind = "absolute" if self.kind == "linear" else "relative"
        return {"quantile_scale": self.kind, "quantile_range": [self.lo, self.hi],
                "quantile_bins": self.n, "quantile_error_bound": self.error_bound,
                "quantile_error_kind": kind}


class CellStats:
    """Mergeable statistics of one variable on a fixed grid of cells.

    Parameters
    ----------
    n_cells : int
        Number of cells (flat index 0 .. n_cells-1).
    scale : Scale
        The histogram scale of the quantiles.

    Attributes
    ----------
    count : numpy.ndarray of int64
        Finite samples per cell.
    mean : numpy.ndarray of float64
        Mean per cell (NaN where empty).
    m2 : numpy.ndarray of float64
        Sum of squared deviations from the cell mean.
    hist : numpy.ndarray, shape (n_cells, scale.n_bins)
        Samples per histogram bin (uint32, int64 once a cell could exceed it).

    Examples
    --------
    >>> import numpy as np
    >>> a = CellStats(2, Scale.linear(0.0, 1.0, 100))
    >>> a.add(np.array([0, 0, 1]), np.array([0.2, 0.4, 0.9]))
    >>> b = CellStats(2, Scale.linear(0.0, 1.0, 100))
    >>> b.add(np.array([0]), np.array([0.6]))
    >>> m = a.merge(b)
    >>> m.count.tolist(), np.round(m.mean, 12).tolist()
    ([3, 1], [0.4, 0.9])
    >>> np.round(m.quantile(0.5), 3).tolist()
    [0.405, 0.905]
    """

    def __init__(self, n_cells: int, scale: Scale):
        self.n_cells = int(n_cells)
        self.scale = scale
        self.count = np.zeros(self.n_cells, np.int64)
        self.mean = np.full(self.n_cells, np.nan)
        self.m2 = np.zeros(self.n_cells)
        self.hist = np.zeros((self.n_cells, scale.n_bins), np.uint32)

    # ------------------------------------------------------------------ building
    def add(self, cell, values) -> None:
        """Add samples in place: ``values[i]`` to cell ``cell[i]`` (non-finite values skipped).

        Parameters
        ----------
        cell : array_like of int
            Flat cell index of each sample (0 .. n_cells-1).
        values : array_like of float
            The samples, same shape as `cell`.
        """
        cell = np.asarray(cell, dtype=np.int64).ravel()
        v = np.asarray(values, dtype=float).ravel()
        if cell.shape != v.shape:
            raise ValueError(f"cell and values differ in size: {cell.size} vs {v.size}")
        ok = np.isfinite(v)
        if not ok.all():
            cell, v = cell[ok], v[ok]
        if cell.size and (cell.min() < 0 or cell.max() >= self.n_cells):
            raise ValueError(f"cell indices must lie in 0..{self.n_cells - 1}")
        other = CellStats.__new__(CellStats)
        other.n_cells, other.scale = self.n_cells, self.scale
        other.count = np.bincount(cell, minlength=self.n_cells)
        with np.errstate(invalid="ignore", divide="ignore"):
            other.mean = np.bincount(cell, weights=v, minlength=self.n_cells) / other.count
            dev = v - other.mean[cell]  # two passes within the batch: no cancellation
        other.m2 = np.bincount(cell, weights=dev * dev, minlength=self.n_cells)
        nb = self.scale.n_bins
        other.hist = np.bincount(cell * nb + self.scale.bin_index(v),
                                 minlength=self.n_cells * nb).reshape(self.n_cells, nb)
        self.absorb(other)

    def _check_compatible(self, other: CellStats) -> None:
        if not isinstance(other, CellStats):
            raise TypeError(f"cannot merge CellStats with {type(other).__name__}")
        if other.n_cells != self.n_cells or other.scale != self.scale:
            raise ValueError(f"cannot merge statistics of different grids or scales: "
                             f"{self.n_cells} cells on {self.scale} vs {other.n_cells} cells "
                             f"on {other.scale}")

    def absorb(self, other: CellStats) -> None:
        """Merge `other` into this object in place (`other` is not changed).

        The in-place form of :meth:`merge` (same formulas, Chan, Golub &
        LeVeque 1979), for callers that fold many partial aggregates into one
        without a copy each time.

        Parameters
        ----------
        other : CellStats
            Statistics on the same grid and scale.

        Raises
        ------
        TypeError, ValueError
            If `other` is not a :class:`CellStats` of the same grid and scale.
        """
        self._check_compatible(other)
        na, nb = self.count, other.count
        n = na + nb
        with np.errstate(invalid="ignore", divide="ignore"):
            delta = np.nan_to_num(other.mean) - np.nan_to_num(self.mean)
            # weighted mean: the same bits whichever side is `self` (commutative)
            mean = (na * np.nan_to_num(self.mean) + nb * np.nan_to_num(other.mean)) / n
            m2 = self.m2 + other.m2 + delta * delta * (na * (nb / np.where(n > 0, n, 1)))
        self.mean = np.where(na == 0, other.mean, np.where(nb == 0, self.mean, mean))
        self.m2 = np.where(na == 0, other.m2, np.where(nb == 0, self.m2, m2))
        self.count = n
        if self.hist.dtype == np.uint32 and n.size and n.max() > _U32_MAX:
            self.hist = self.hist.astype(np.int64)  # a bin could overflow 32 bits
        self.hist += other.hist.astype(self.hist.dtype, copy=False)

    def merge(self, other: CellStats) -> CellStats:
        r"""Return the statistics of the samples of both (neither is changed).

        Parameters
        ----------
        other : CellStats
            Statistics on the same grid and scale.

        Returns
        -------
        CellStats
            Counts and histograms summed exactly; means and variances by the
            pairwise update of Chan, Golub & LeVeque (1979):

            .. math::

                n = n_a + n_b,\quad \bar x = \frac{n_a \bar x_a + n_b \bar x_b}{n},\quad
                M_2 = M_{2,a} + M_{2,b} + \delta^2 \frac{n_a n_b}{n},\quad
                \delta = \bar x_b - \bar x_a .
        """
        out = self.copy()
        out.absorb(other)
        return out

    def copy(self) -> CellStats:
        """Return an independent copy."""
        out = CellStats.__new__(CellStats)
        out.n_cells, out.scale = self.n_cells, self.scale
        out.count, out.mean = self.count.copy(), self.mean.copy()
        out.m2, out.hist = self.m2.copy(), self.hist.copy()
        return out

    # ------------------------------------------------------------------ results
    def std(self, ddof: int = 1) -> np.ndarray:
        """Return the standard deviation per cell (NaN where count <= ddof)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.count > ddof, np.sqrt(self.m2 / (self.count - ddof)), np.nan)

    def quantile(self, q: float) -> np.ndarray:
        """Estimate the quantile `q` per cell (NaN where empty or out of the scale's range).

        Parameters
        ----------
        q : float
            In [0, 1].

        Returns
        -------
        numpy.ndarray
            Within :attr:`Scale.error_bound` of :func:`numpy.quantile` of the
            cell's samples (absolute for a linear scale, relative for a log
            scale; see the module notes).
        """
        if not 0.0 <= q <= 1.0:
            raise ValueError(f"quantile q must lie in [0, 1], got {q}")
        n = self.count
        pos = np.maximum(n - 1, 0) * float(q)
        k_lo = np.floor(pos).astype(np.int64)
        f = pos - k_lo
        k_hi = np.minimum(k_lo + 1, np.maximum(n - 1, 0))
        cum = np.cumsum(self.hist, axis=1, dtype=np.int64)
        # the bin holding the order statistic of rank k: the first bin whose cumulative
        # count exceeds k
        b_lo = (cum <= k_lo[:, None]).sum(axis=1)
        b_hi = (cum <= k_hi[:, None]).sum(axis=1)
        nb = self.scale.n_bins
        rep = self.scale.representatives
        c_lo = rep[np.minimum(b_lo, nb - 1)]
        c_hi = rep[np.minimum(b_hi, nb - 1)]
        est = np.where(f > 0, (1 - f) * c_lo + f * c_hi, c_lo)
        return np.where(n > 0, est, np.nan)

    def attrs(self) -> dict:
        """Scale and quantile error bound, as netCDF attributes."""
        return self.scale.attrs()

    # ------------------------------------------------------------------ files
    def to_dataset(self, prefix: str = "") -> xr.Dataset:
        """Return the state as a dataset (``<prefix>count``, ``mean``, ``m2``, ``hist``)."""
        cell, b = f"{prefix}cell", f"{prefix}bin"
        attrs = self.scale.attrs()
        return xr.Dataset({
            f"{prefix}count": (cell, self.count),
            f"{prefix}mean": (cell, self.mean),
            f"{prefix}m2": (cell, self.m2),
            f"{prefix}hist": ((cell, b), self.hist, attrs),
        })

    @classmethod
    def from_dataset(cls, ds: xr.Dataset, prefix: str = "") -> CellStats:
        """Rebuild the state written by :meth:`to_dataset`."""
        h = ds[f"{prefix}hist"]
        a = h.attrs
        lo, hi = (float(x) for x in np.ravel(a["quantile_range"]))
        scale = Scale(str(a["quantile_scale"]), lo, hi, int(a["quantile_bins"]))
        out = cls.__new__(cls)
        out.n_cells, out.scale = int(h.shape[0]), scale
        out.count = ds[f"{prefix}count"].values.astype(np.int64)
        out.mean = ds[f"{prefix}mean"].values.astype(float)
        out.m2 = ds[f"{prefix}m2"].values.astype(float)
        out.hist = h.values
        if out.hist.shape != (out.n_cells, scale.n_bins):
            raise ValueError(f"{prefix}hist has shape {out.hist.shape}, expected "
                             f"{(out.n_cells, scale.n_bins)} for its scale")
        return out


def write_stats(path, stats: dict, attrs: dict | None = None) -> Path:
    """Write named :class:`CellStats` to one netCDF file, atomically.

    Parameters
    ----------
    path : str or path
        Target file (replaced only once the new one is complete).
    stats : dict of str to CellStats
        The aggregates; keys are any text.
    attrs : dict, optional
        Global attributes (JSON-able values are stored as JSON text).

    Returns
    -------
    pathlib.Path
        `path`.
    """
    keys = list(stats)
    parts = [stats[k].to_dataset(prefix=f"s{i}_") for i, k in enumerate(keys)]
    ds = xr.merge(parts) if parts else xr.Dataset()
    ds.attrs = {"beltkit_aggregate_keys": json.dumps(keys),
                **{k: json.dumps(v) for k, v in (attrs or {}).items()}}
    enc = {v: {"zlib": True, "complevel": 1} for v in ds.data_vars}

    def fill(tmp):
        ds.to_netcdf(tmp, engine="netcdf4", encoding=enc)

    return atomic_file(path, fill)


def read_stats(path) -> tuple[dict, dict]:
    """Read what :func:`write_stats` wrote: ``(stats, attrs)``.

    Parameters
    ----------
    path : str or path
        The file.

    Returns
    -------
    tuple of (dict of str to CellStats, dict)
        The aggregates by key and the global attributes (decoded from JSON).
    """
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        ds = ds.load()
    keys = json.loads(ds.attrs["beltkit_aggregate_keys"])
    stats = {k: CellStats.from_dataset(ds, prefix=f"s{i}_") for i, k in enumerate(keys)}
    attrs = {k: json.loads(v) for k, v in ds.attrs.items() if k != "beltkit_aggregate_keys"}
    return stats, attrs
