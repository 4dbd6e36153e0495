"""Rows of a partition block computed again: looks without a value, masked bad values.

Two cases make single (time, energy) rows differ from the block's fast path:
overlapping telescope looks where some look has no value at that energy (the
union of bands changes), and rows holding a negative flux value or a negative
uncertainty that are masked rather than refused (``strict=False``,
:mod:`beltkit.pad.samples`). Both are rare; they are partitioned again one
row at a time with the compiled kernel (:mod:`beltkit.pad._kernels`), each
row a sample of its own with one energy. Also here: the flag bits of masked
input samples (reader bits, fill and valid-range hits, positions).
"""

from __future__ import annotations

import numpy as np

from . import _kernels
from .geometry import edge_cosines, telescope_weights
from .outputs import hemisphere_row, n_outputs
from .samples import read_flag_bits

__all__ = [
    "mask_bad_rows",
    "or_bits",
    "overlap_rows",
    "repartition_rows",
    "rows_kernel",
    "sample_bits",
]


def overlap_rows(x, look, half):
    """(time, energy) indices where overlapping looks lack a value at that energy.

    There the union of the bands (and every look's share of it) differs from
    the sample's full set of looks, so those rows are partitioned again with
    the looks that have a value.
    """
    look = np.asarray(look, dtype=float)
    lo = np.maximum(look - half, 0.0)
    hi = np.minimum(look + half, 180.0)
    ok = np.isfinite(lo) & np.isfinite(hi) & (hi > lo)
    pair = (ok[:, :, None] & ok[:, None, :] & (lo[:, :, None] < hi[:, None, :])
            & (lo[:, None, :] < hi[:, :, None]))
    k = look.shape[1]
    pair &= ~np.eye(k, dtype=bool)
    overlapping = pair.any(axis=(1, 2))
    if not overlapping.any():
        return None
    missing = (~np.isfinite(x) & ok[:, None, :]).any(axis=2) & overlapping[:, None]
    if not missing.any():
        return None
    return np.nonzero(missing)


def repartition_rows(rows, x, s, cones, look, geom, opts):
    """Return the outputs (n_out, r) of ``rows``, each with only the looks that have a value."""
    ti, ei = rows
    return rows_kernel(x[ti, ei], None if s is None else s[ti, ei], ti, cones, look, geom,
                       opts)


def rows_kernel(xs, ss, ti, cones, look, geom, opts):
    """Partition single (time, energy) rows ``xs`` (r, angle) of the samples ``ti``.

    Returns the outputs (n_out, r), the flags (row 14) as numbers.
    """
    r = xs.shape[0]
    hemi = opts["hemispheres"]
    with_err = ss is not None
    blc, dlc, lcn, lcs = (np.asarray(c, dtype=float)[ti] for c in cones)
    x = np.ascontiguousarray(xs[:, None, :])
    s = None if ss is None else np.ascontiguousarray(ss[:, None, :])
    wpre = None
    fold = 1.0
    cos_a1 = cos_a2 = np.zeros(x.shape[2])
    if geom["kind"] == "telescope":  # each row with only the looks that have a value
        lk = np.where(np.isfinite(xs), np.asarray(look, dtype=float)[ti], np.nan)
        outer = np.minimum(blc + opts["band_deg"], 90.0)
        wpre = telescope_weights(lk, geom["half"],
                                 edge_cosines(blc, np.maximum(dlc, blc), outer, lcn, lcs))
    else:
        cos_a1, cos_a2 = geom["cos_a1"], geom["cos_a2"]
        fold = 2.0 if geom["folded"] else 1.0
    out = np.empty((n_outputs(with_err, hemi), r), dtype=x.dtype)
    stats = np.zeros((1, 3), dtype=np.int64)  # the rows' values were counted by the block
    _kernels.partition_block(x, s, wpre, cos_a1, cos_a2, fold, blc, dlc, opts["band_deg"],
                             out, stats, cones_ns=(lcn, lcs) if hemi else None,
                             hemi_row=hemisphere_row(with_err, hemi))
    return out


def mask_bad_rows(x, s, cones, look, geom, opts, o2, fl, n_data, err_bad, err_grew):
    """Partition again, with their bad values masked, the rows holding negative values.

    Negative flux values (``opts["mask_negative"]``: not strict, not
    allow_negative) and negative uncertainties (``opts["mask_err"]``) become
    NaN in their row, which is partitioned again on the remaining values; the
    rows get flag bits 2048 and 8192 (:data:`beltkit.pad.samples.SAMPLE_FLAGS`).
    ``o2`` (n_out, >= n * E) and ``fl`` (n * E) are the block's outputs and
    flags, written in place. Rows are rare: the common case costs one pass
    over the flags.
    """
    n, n_e = x.shape[:2]
    m = n * n_e
    flv = fl[:m] if np.issubdtype(fl.dtype, np.integer) else fl[:m].astype(np.int64)
    neg = (flv & 16) != 0 if opts.get("mask_negative") else None
    err = None
    if opts.get("mask_err") and s is not None:
        err = np.zeros(m, dtype=bool)
        if err_bad is not None:
            err |= err_bad.reshape(-1)
        if err_grew:
            err |= (s < 0).any(axis=-1).reshape(-1)
    bad = neg if err is None else (err if neg is None else neg | err)
    if bad is None or not bad.any():
        return
    idx = np.flatnonzero(bad)
    ti, ei = np.divmod(idx, n_e)
    xs = x[ti, ei]
    if neg is not None:
        xs = np.where(xs < 0, xs.dtype.type(np.nan), xs)
    ss = None
    if s is not None:
        ss = s[ti, ei]
        if err is not None:
            ss = np.where(ss < 0, ss.dtype.type(np.nan), ss)
    sub = rows_kernel(xs, ss, ti, cones, look, geom, opts)
    o2[:n_data, idx] = sub[:n_data]
    bits = sub[14].astype(np.int16)
    if neg is not None:
        bits |= np.where(neg[idx] & ~np.isnan(sub[14]), 2048, 0).astype(np.int16)
    if err is not None:
        bits |= np.where(err[idx], 8192, 0).astype(np.int16)
    fl[idx] = bits


def sample_bits(flux_blk, rf_blk, pos_blk, prep, n, n_e):
    """Return the (n * E,) int16 bits of masked input samples of a block, or None."""
    bits = None
    if prep.flux_mask.masks_values:
        fill, outside = prep.flux_mask.hits(flux_blk)
        bits = (np.where(fill.any(axis=-1), 256, 0)
                | np.where(outside.any(axis=-1), 512, 0)).astype(np.int16)
    if rf_blk is not None:
        rb = read_flag_bits(rf_blk)
        bits = rb if bits is None else bits | rb
    if pos_blk is not None:
        pb = np.broadcast_to(np.where(np.asarray(pos_blk, dtype=bool), 4096, 0)[:, None],
                             (n, n_e)).astype(np.int16)
        bits = pb if bits is None else bits | pb
    return None if bits is None else bits.reshape(-1)


def or_bits(fl, bits):
    """OR the sample bits into the flags (int16 array or a float output row)."""
    if bits is None:
        return
    m = bits.size
    if np.issubdtype(fl.dtype, np.integer):
        fl[:m] |= bits
    else:
        fl[:m] = fl[:m].astype(np.int64) | bits
