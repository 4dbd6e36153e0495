"""The flux a file delivers, masked and flagged at read time (flux, flux_err, read_flag).

:func:`resolve_flux` builds the conventional flux of a dataset whose names
follow the conventions (mapping applied, time, axes and positions resolved):

1. the stored values of ``flux`` (or of ``count_rate``, or of ``counts`` with
   an accumulation time) pass their :class:`~beltkit.io.metadata.ValueRule`:
   fill and out-of-valid-range values become NaN;
2. a ``quality`` variable judged by the mapping's ``[quality]`` rule rejects
   samples (NaN);
3. count rates become flux and Poisson ``flux_err`` (:mod:`beltkit.io.telescope`);
4. flux in any differential directional unit is converted to
   ``cm-2 s-1 sr-1 keV-1``;
5. with ``[energy] common_kev`` and a record-varying ``channel_energy``, the
   flux is interpolated per record onto the common axis
   (:func:`~beltkit.io.axes.interpolate_loglog`); a common value is flagged
   with the flags of both neighbouring channels, and its error is the flux
   times the neighbours' relative errors weighted like the flux (an
   approximation that ignores their correlation).

Every masked sample is recorded in ``read_flag`` (uint8, flux's dims; CF
``flag_masks`` 1, 2, 4 meaning ``fill out_of_valid_range quality_rejected``),
and the dataset attributes ``read_flag_count_fill``,
``read_flag_count_out_of_valid_range`` and ``read_flag_count_quality_rejected``
count them. All of it is computed slab by slab where indexed (the counts by
one pass over the file when it is opened). A file whose flux needs none of
this (conventional names and units, NaN or no fill, no valid range, no
quality rule) is returned unchanged: no ``read_flag`` and no extra pass.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import MappingError
from ..units import FLUX_UNITS, conversion_factor
from .axes import interpolate_loglog
from .lazy import Computation, derived_variable, read_block
from .metadata import (
    READ_FLAG_BITS,
    READ_FLAG_MEANINGS,
    quality_rejected,
    units_factor,
    value_rule,
)
from .telescope import rate_to_flux

__all__ = ["COUNT_BLOCK", "resolve_flux"]

#: Records per block of the counting pass over ``read_flag``.
COUNT_BLOCK = 8192


def _aligned(value, index, dims, shape):
    """Return a scalar as is, or a variable's slab broadcast to (dims, shape)."""
    if not isinstance(value, xr.Variable):
        return value
    block = xr.Variable(value.dims, read_block(value, index))
    sizes = dict(zip(dims, shape))
    extra = [d for d in block.dims if d not in sizes]
    if extra:
        raise ValueError(f"dimension(s) {extra} not among the flux's {dims}")
    return block.set_dims(sizes).transpose(*dims).values


def _telescope_inputs(ds, m, where, kind):
    """Scalars or variables (with unit factors applied) of the telescope conversion."""
    tel = m.get("telescope", {})
    out = {}
    for key, unit, tkey in (("geometric_factor", "cm2 sr", "geometric_factor"),
                            ("accumulation_time", "s", "accumulation_time_s"),
                            ("dead_time", "s", "dead_time_s"),
                            ("efficiency", "1", "efficiency"),
                            ("energy_width", "keV", None)):
        if key in ds.variables:
            var = ds.variables[key]
            f = units_factor(var, unit, key, where, default="1" if key == "efficiency" else None)
            out[key] = xr.Variable(var.dims, np.asarray(var.values, float) * f) \
                if var.size < 1_000_000 else var
        elif tkey is not None and tkey in tel:
            out[key] = float(tel[tkey])
    if "geometric_factor" not in out:
        raise MappingError(f"{where}: {kind} needs a geometric factor: [telescope] "
                           f"geometric_factor = ... (cm2 sr) or [variables] geometric_factor")
    if "energy_width" not in out:
        if "energy_bnds" in ds.variables:
            b = np.asarray(ds["energy_bnds"].values, float)
            out["energy_width"] = xr.Variable(("energy",), b[:, 1] - b[:, 0])
        else:
            raise MappingError(f"{where}: {kind} needs channel widths: energy_bnds, or "
                               f"[variables] energy_width (keV)")
    if kind == "counts" and "accumulation_time" not in out:
        raise MappingError(f"{where}: counts need an accumulation time: [telescope] "
                           f"accumulation_time_s = ... or [variables] accumulation_time")
    out.setdefault("dead_time", 0.0)
    out.setdefault("efficiency", 1.0)
    return out


def resolve_flux(ds: xr.Dataset, m: dict, *, where: str) -> xr.Dataset:
    """Return `ds` with flux, flux_err and read_flag built by the read-time rules.

    Parameters
    ----------
    ds : xarray.Dataset
        Conventional names, time/axes/positions resolved.
    m : dict
        The checked mapping (:func:`beltkit.io.load_mapping`), or ``{}``.
    where : str
        File and mapping, for messages.

    Raises
    ------
    MappingError
        A quality rule without a quality variable (or the reverse), a
        telescope archive missing its geometric factor, widths or time, a
        common energy axis without a record-varying table.
    """
    qrule = m.get("quality", {})
    common = m.get("energy", {}).get("common_kev")
    valid = m.get("valid", {})
    if "flux" in ds.variables:
        kind = "flux"
    elif "count_rate" in ds.variables:
        kind = "count_rate"
    elif "counts" in ds.variables and ("geometric_factor" in ds.variables
                                       or "geometric_factor" in m.get("telescope", {})):
        kind = "counts"
    else:
        return ds
    if m.get("telescope") and kind == "flux":
        raise MappingError(f"{where}: [telescope] is given but the file is read as flux; "
                           f"map the rates with [variables] count_rate = \"...\" or remove "
                           f"[telescope]")
    for key in valid:
        if key not in (kind, "flux_err"):
            raise MappingError(f"{where}: [valid] {key}: the flux is read from {kind} here, so "
                               f"this range would not be applied; remove it or give "
                               f"[valid] {kind}")
    if qrule and "quality" not in ds.variables:
        raise MappingError(f"{where}: [quality] rule given but no quality variable; name it "
                           f"with [variables] quality = \"...\"")
    if "quality" in m.get("variables", {}) and not qrule:
        raise MappingError(f"{where}: a quality variable is mapped but no rule says what to "
                           f"reject; add [quality] reject_values, reject_bits, accept_values "
                           f"or reject_meanings")
    if common is not None and "channel_energy" not in ds.variables:
        raise MappingError(f"{where}: [energy] common_kev is for a record-varying energy "
                           f"table, but energy does not vary with time here; remove it")
    main = ds.variables[kind]
    rule = value_rule(main, kind, valid=valid.get(kind), where=where)
    err = ds.variables.get("flux_err") if kind == "flux" else None
    err_rule = value_rule(err, "flux_err", valid=valid.get("flux_err"), where=where) \
        if err is not None else None
    if (kind == "flux" and rule.trivial and not qrule and common is None
            and (err_rule is None or err_rule.trivial)):
        return ds
    order = [d for d in ("time", "energy") if d in main.dims]
    dims = tuple(order + [d for d in main.dims if d not in order])
    main = main.transpose(*dims)
    if err is not None:
        err = err.transpose(*[d for d in dims if d in err.dims])
    tel = _telescope_inputs(ds, m, where, kind) if kind != "flux" else None
    if kind == "flux":
        unit_f = conversion_factor(str(main.attrs.get("units", "")), FLUX_UNITS)
        err_f = conversion_factor(str(err.attrs.get("units", main.attrs.get("units", ""))),
                                  FLUX_UNITS) if err is not None else None
    else:
        unit_f = units_factor(main, "s-1" if kind == "count_rate" else "1", kind, where,
                         default=None)
        err_f = None
    quality = ds.variables.get("quality") if qrule else None
    ce = ds.variables.get("channel_energy") if common is not None else None
    target = np.asarray(common, float) if common is not None else None
    shape = tuple(target.size if (d == "energy" and target is not None) else main.sizes[d]
                  for d in dims)
    fdtype = np.float32 if (main.dtype == np.float32 and kind == "flux") else np.float64
    make_err = err is not None or (tel is not None and "accumulation_time" in tel)

    def func(index):
        raw_index = dict(index)
        if target is not None:
            raw_index["energy"] = slice(None)
        raw = read_block(main, raw_index)
        raw_shape = raw.shape
        values, fill, bad = rule.apply(raw, np.float64, raw_index, dims)
        rejected = np.zeros(raw_shape, bool)
        if quality is not None:
            q = read_block(quality, raw_index)
            rej = quality_rejected(q, quality.attrs, qrule, where=where)
            rejected = _aligned(xr.Variable(quality.dims, rej), {}, dims, raw_shape)
        e = None
        if kind == "flux":
            if unit_f is not None:
                values = values * unit_f
            if err is not None:
                e, _, _ = err_rule.apply(read_block(err, raw_index), np.float64, raw_index,
                                         err.dims)
                e = _aligned(xr.Variable(err.dims, e), {}, dims, raw_shape)
                if err_f is not None:
                    e = e * err_f
        else:
            t = {k: _aligned(v, raw_index, dims, raw_shape) for k, v in tel.items()}
            rate = values * unit_f
            if kind == "counts":
                rate = rate / t["accumulation_time"]
            values, e, saturated = rate_to_flux(
                rate, t["geometric_factor"], t["energy_width"],
                accumulation_time_s=t.get("accumulation_time"),
                dead_time_s=t["dead_time"], efficiency=t["efficiency"])
            bad |= np.broadcast_to(saturated, raw_shape) & ~fill
        flag = (fill * READ_FLAG_BITS["fill"] | bad * READ_FLAG_BITS["out_of_valid_range"]
                | rejected * READ_FLAG_BITS["quality_rejected"]).astype(np.uint8)
        values = np.where(flag > 0, np.nan, values)
        if e is not None:
            e = np.where(flag > 0, np.nan, e)
        if target is not None:
            energies = read_block(ce, {"time": raw_index["time"]})
            if e is not None:
                with np.errstate(divide="ignore", invalid="ignore"):
                    rel = e / values
            values, lo, hi, w = interpolate_loglog(energies, values, target)
            extra = (1,) * (values.ndim - 2)
            klo, khi = lo.reshape(lo.shape + extra), hi.reshape(hi.shape + extra)
            ww = w.reshape(w.shape + extra)
            f_lo = np.take_along_axis(flag, klo, axis=1)
            f_hi = np.take_along_axis(flag, khi, axis=1)
            flag = np.where(np.isfinite(ww), f_lo | f_hi, 0).astype(np.uint8)
            if e is not None:
                rel_c = ((1 - ww) * np.take_along_axis(rel, klo, axis=1)
                         + ww * np.take_along_axis(rel, khi, axis=1))
                e = values * rel_c
            sel = (slice(None), index["energy"])
            values, flag = values[sel], flag[sel]
            if e is not None:
                e = e[sel]
        out = {"flux": values.astype(fdtype), "read_flag": flag}
        if make_err:
            out["flux_err"] = (e if e is not None else np.full(values.shape, np.nan)).astype(
                fdtype)
        return out

    outputs = {"flux": (dims, shape, fdtype), "read_flag": (dims, shape, np.uint8)}
    if make_err:
        outputs["flux_err"] = (dims, shape, fdtype)
    comp = Computation(func, outputs)
    keep = {k: v for k, v in ds.variables[kind].attrs.items()
            if k not in ("_FillValue", "missing_value", "valid_range", "valid_min",
                         "valid_max", "scale_factor", "add_offset", "FILLVAL", "VALIDMIN",
                         "VALIDMAX", "units", "DEPEND_0", "DEPEND_1", "DEPEND_2", "DEPEND_3")}
    units = FLUX_UNITS if (kind != "flux" or unit_f is not None) else main.attrs.get("units")
    flux_attrs = {**keep, "units": units}
    if kind != "flux":
        flux_attrs["long_name"] = "differential directional flux"
        flux_attrs["beltkit_flux_source"] = f"{kind} (telescope conversion at read time)"
    replaced = (kind, "flux_err", "quality")
    if kind != "flux":  # the telescope inputs are now in flux and flux_err
        replaced += ("count_rate", "counts", "accumulation_time", "geometric_factor",
                     "energy_width", "dead_time", "efficiency")
    drop = [n for n in replaced if n in ds.variables and n not in ds.dims]
    if target is not None:
        drop += [n for n in ("channel_energy", "channel_energy_bnds", "energy_bnds")
                 if n in ds.variables]
    ds = ds.drop_vars(drop)
    if target is not None:
        ds = ds.assign_coords(energy=xr.Variable(("energy",), target, {
            "units": "keV", "long_name": "kinetic energy (common axis, interpolated)"}))
    ds["flux"] = derived_variable(comp, "flux", flux_attrs)
    if make_err:
        ds["flux_err"] = derived_variable(comp, "flux_err", {
            "units": units, "long_name": "flux uncertainty (1 sigma)"})
    ds["read_flag"] = derived_variable(comp, "read_flag", {
        "long_name": "samples masked when the file was read",
        "flag_masks": np.array(list(READ_FLAG_BITS.values()), dtype=np.uint8),
        "flag_meanings": READ_FLAG_MEANINGS})
    ds.attrs.update(_count_flags(ds["read_flag"].variable))
    return ds


def _count_flags(flag: xr.Variable) -> dict:
    counts = dict.fromkeys(READ_FLAG_BITS, 0)
    n = flag.shape[0]
    for start in range(0, n, COUNT_BLOCK):
        block = np.asarray(flag[start:start + COUNT_BLOCK].values)
        for name, bit in READ_FLAG_BITS.items():
            counts[name] += int(np.count_nonzero(block & bit))
    return {f"read_flag_count_{k}": v for k, v in counts.items()}
