"""Per-sample problems: which samples of a file are masked, why, and how that is recorded.

beltkit refuses a file only for structural problems (no flux, wrong
dimensions, unknown units). A problem of single samples masks those samples
and keeps the rest of the file:

* flux values the reader masked (``read_flag`` from :mod:`beltkit.io`: fill,
  outside ``VALIDMIN``/``VALIDMAX`` or ``valid_range``, rejected by the
  mapping's quality rule), or that the variable's own CF attributes mask;
* negative flux values (unless ``allow_negative``) and negative
  uncertainties;
* infinite (+-inf) flux values, uncertainties or counts: they share the bit
  of values outside the valid range (:data:`INFINITE_VALUE_BIT`), since an
  infinite value lies outside every valid range;
* positions outside their physical range (:data:`POSITION_RANGES`): the
  whole time sample is then unusable (no loss cone can be computed).

One bit marks samples that are kept, not masked: a ``b_local`` given with
the data that lies below the field model's minimum along the sample's line
(:func:`local_field_below_minimum`, :data:`B_LOCAL_BELOW_MIN_BIT`); it is
counted with the others but refuses nothing, also with ``strict=True``.

Masked values are NaN inputs; the outputs they touch carry the bits of
:data:`SAMPLE_FLAGS` in ``partition_flag`` (CF ``flag_masks``), and
:func:`flag_counts` counts them per reason. With ``strict=True`` the same
problems refuse the file instead (:func:`beltkit.pad.conventions.check`).
"""

from __future__ import annotations

import numpy as np

from ..constants import R_E_KM

__all__ = [
    "POSITION_RANGES",
    "READ_FLAG_MEANINGS",
    "READ_FLAG_SHIFT",
    "SAMPLE_FLAGS",
    "COUNTED_FLAGS",
    "B_LOCAL_BELOW_MIN_BIT",
    "B_LOCAL_TOLERANCE",
    "MIN_GEOCENTRIC_KM",
    "INFINITE_VALUE_BIT",
    "flag_b_local",
    "flag_counts",
    "inside_earth",
    "local_field_below_minimum",
    "mask_positions",
    "position_mask",
    "read_flag_bits",
]

#: Bits of the reader's ``read_flag`` variable (uint8, dims of ``flux``; set by beltkit.io).
READ_FLAG_MEANINGS = {1: "fill", 2: "out_of_valid_range", 4: "quality_rejected"}
#: ``read_flag`` bit ``b`` becomes ``partition_flag`` bit ``b << READ_FLAG_SHIFT``.
READ_FLAG_SHIFT = 8
#: ``partition_flag`` bits of masked input samples (beside the partition's own bits 1-128).
SAMPLE_FLAGS = {
    256: "input_fill",
    512: "input_out_of_valid_range",
    1024: "input_quality_rejected",
    2048: "negative_flux_masked",
    4096: "position_out_of_range",
    8192: "negative_uncertainty_masked",
}
#: ``partition_flag`` bit of infinite input values (flux, uncertainty or counts): the bit of
#: values outside the valid range, where a declared ``valid_range`` or ``VALIDMAX`` puts them
#: already; with or without one, the value is masked and its outputs flagged alike.
INFINITE_VALUE_BIT = 512
#: ``partition_flag`` bit of samples whose given ``b_local`` lies below the field model's
#: ``b_min``: the field magnitude along a line is never below its minimum, so the data's
#: local field and the model disagree there (a storm-time field below an internal model's,
#: or a model that does not describe the line); the values are kept and flagged.
B_LOCAL_BELOW_MIN_BIT = 16384
#: Relative margin below ``b_min`` before a ``b_local`` is flagged (0.2 nT in 20,000 nT:
#: ``b_local`` and ``L`` stored as float32 differ from the float64 model by ~2e-7).
B_LOCAL_TOLERANCE = 1e-5
#: The bits :func:`flag_counts` counts: the masked input samples and the kept ones above.
COUNTED_FLAGS = {**SAMPLE_FLAGS, B_LOCAL_BELOW_MIN_BIT: "b_local_below_b_min"}
#: Physical range of each position variable, in the canonical unit (None: open).
#: L < 1 is inside the Earth and |mlat| > 90 deg does not exist (McIlwain's
#: and the dipole's definitions); MLT is an hour of the day; a field strength
#: is not negative.
POSITION_RANGES = {
    "L": (1.0, None),
    "mlat": (-90.0, 90.0),
    "mlt": (0.0, 24.0),
    "b_local": (0.0, None),
}
#: A GEO position closer to the centre than this (km) is inside the solid Earth: 0.99 R_E
#: lies below the polar radius (6356.8 km, WGS84; common practice).
MIN_GEOCENTRIC_KM = 0.99 * R_E_KM


def _outside(values, lo, hi):
    values = np.asarray(values, dtype=float)
    bad = np.zeros(values.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        if lo is not None:
            bad |= values < lo
        if hi is not None:
            bad |= values > hi
    return bad


def _geocentric_km(pos, scale):
    pos = np.asarray(pos, dtype=float) * scale
    return np.sqrt((pos * pos).sum(axis=1))


def inside_earth(position_geo, scale=1.0):
    """Return the number of GEO positions (time, 3) inside the solid Earth (NaN ignored).

    `scale` converts the values to km.
    """
    if hasattr(position_geo, "dask"):
        position_geo = position_geo.compute()
    with np.errstate(invalid="ignore"):
        return int(np.count_nonzero(_geocentric_km(position_geo, scale) < MIN_GEOCENTRIC_KM))


def position_mask(ds, scales):
    """Return the time samples whose position lies outside its physical range.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset whose structure passed the validator.
    scales : dict
        Factor to the canonical unit of each position variable
        (``Prepared.other_scale``).

    Returns
    -------
    numpy.ndarray of bool or None
        Per time sample; None when every position is in range (or there is
        no position variable). NaN positions are not out of range (their loss
        cone is unknown, flag ``loss_cone_unknown``).
    """
    names = [n for n in POSITION_RANGES if n in ds.variables and ds[n].dims == ("time",)]
    geo = ("position_geo" in ds.variables and ds["position_geo"].ndim == 2
           and ds["position_geo"].dims[0] == "time")
    arrays = [ds[n].data for n in names] + ([ds["position_geo"].data] if geo else [])
    if not arrays:
        return None
    if any(hasattr(a, "dask") for a in arrays):
        import dask

        arrays = dask.compute(*arrays)
    bad = np.zeros(ds.sizes["time"], dtype=bool)
    for name, values in zip(names, arrays):
        lo, hi = POSITION_RANGES[name]
        bad |= _outside(np.asarray(values, dtype=float) * scales.get(name, 1.0), lo, hi)
    if geo:
        with np.errstate(invalid="ignore"):
            bad |= _geocentric_km(arrays[-1], scales.get("position_geo", 1.0)) < MIN_GEOCENTRIC_KM
    return bad if bad.any() else None


def mask_positions(ds, bad):
    """Return `ds` (a new object; never modified) with the positions of `bad` samples NaN."""
    keep = ~np.asarray(bad, dtype=bool)
    new = {}
    for name in tuple(POSITION_RANGES) + ("position_geo",):
        if name in ds.variables and ds[name].dims[:1] == ("time",):
            var = ds[name]
            cond = keep.reshape((-1,) + (1,) * (var.ndim - 1))
            new[name] = var.copy(data=np.where(cond, np.asarray(var.values, dtype=float),
                                               np.nan))
    return ds.assign(new)


def read_flag_bits(read_flag):
    """Return the ``partition_flag`` bits (int16) of a (..., angle) block of ``read_flag``.

    A (time, energy) output carries a reader bit when any of its angles
    (pitch-angle bins or looks) has it.
    """
    rf = np.asarray(read_flag).astype(np.uint8, copy=False) & 7
    if rf.shape[-1] == 0:
        return np.zeros(rf.shape[:-1], dtype=np.int16)
    return np.bitwise_or.reduce(rf, axis=-1).astype(np.int16) << READ_FLAG_SHIFT


def local_field_below_minimum(ds, cones):
    r"""Return the time samples whose given ``b_local`` lies below the model's ``b_min``.

    .. math:: B_\mathrm{local} < B_\mathrm{min} (1 - \epsilon)

    with :math:`\epsilon` = :data:`B_LOCAL_TOLERANCE`. On a field line
    :math:`B \ge B_\mathrm{min}` everywhere (the equatorial minimum; common
    practice), so such a sample's local field and the field model disagree.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset; only a ``b_local`` of its own is checked (a model's
        local field is consistent with its minimum by construction).
    cones : xarray.Dataset
        Its :func:`beltkit.pad.losscones.sample_loss_cones` (``b_local``,
        ``b_min`` in nT).

    Returns
    -------
    numpy.ndarray or dask.array.Array of bool, or None
        Per time sample (NaN fields compare False); None when ``ds`` has no
        ``b_local`` or, for eager data, no sample is below.
    """
    if "b_local" not in ds.variables:
        return None
    low = (cones["b_local"] < cones["b_min"] * (1.0 - B_LOCAL_TOLERANCE)).data
    if hasattr(low, "dask"):
        return low
    low = np.asarray(low, dtype=bool)
    return low if low.any() else None


def flag_b_local(flags, ds, cones):
    """Return ``partition_flag`` (time, energy) with :data:`B_LOCAL_BELOW_MIN_BIT` set.

    On the samples of :func:`local_field_below_minimum` (`ds`, `cones`); the
    values are kept. `flags` itself is returned when no sample is below.
    """
    low = local_field_below_minimum(ds, cones)
    if low is None:
        return flags
    return flags | (low[:, None] * np.int16(B_LOCAL_BELOW_MIN_BIT)).astype(np.int16)


def flag_counts(partition_flag):
    """Count the time samples that carry each counted bit (:data:`COUNTED_FLAGS`).

    Parameters
    ----------
    partition_flag : array_like or xarray.DataArray
        Flags (time, energy) of a partition or summary.

    Returns
    -------
    dict
        ``{meaning: number of time samples with that bit at any energy}``
        for every bit of :data:`COUNTED_FLAGS` (zeros included).

    Examples
    --------
    >>> flag_counts([[0, 4096], [256, 0], [0, 0]])["position_out_of_range"]
    1
    """
    values = getattr(partition_flag, "values", partition_flag)
    f = np.asarray(values)
    if not np.issubdtype(f.dtype, np.integer):
        f = f.astype(np.int64)
    # OR of the energy columns in the flags' own dtype, one column at a time (a
    # reduction along the short last axis costs about 3x as much): no full-size copy
    if f.ndim == 2 and f.shape[1]:
        per_time = f[:, 0].astype(np.int64)
        for j in range(1, f.shape[1]):
            per_time |= f[:, j]
    else:
        per_time = np.zeros(f.shape[:1], dtype=np.int64)
    return {name: int(np.count_nonzero(per_time & bit)) for bit, name in COUNTED_FLAGS.items()}
