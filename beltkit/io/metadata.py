"""ISTP and CF value attributes: fill values, valid ranges, packing, quality flags, units.

A :class:`ValueRule` collects what a variable's attributes say about its
values, and :meth:`ValueRule.apply` turns a slab of stored values into
physical values with the samples that must not be used marked:

* **fill**: CF ``_FillValue`` and ``missing_value`` (compared with the stored,
  packed values; CF-1.8 section 2.5.1) and ISTP ``FILLVAL``;
* **out of valid range**: CF ``valid_range`` or ``valid_min``/``valid_max``
  (in packed units, CF-1.8 section 2.5.1), ISTP ``VALIDMIN``/``VALIDMAX``
  (in the variable's own units; a scalar or one value per element of the
  non-record dimensions), and a ``[valid]`` range of the mapping (in the
  file's physical units);
* **packing**: CF ``scale_factor`` and ``add_offset``: value = stored x
  scale_factor + add_offset.

A quality variable is judged by :func:`quality_rejected` with the mapping's
``[quality]`` rule: listed values, set bits, or the CF ``flag_values`` /
``flag_masks`` of the named ``flag_meanings``.

:func:`units_factor` converts a variable's ``units`` attribute into the
units the conventions ask for, naming the ``[units]`` entry that fixes it
when they are missing or do not convert.

The attributes that were applied are removed from the variable (they no
longer describe its values) and kept in its ``encoding["beltkit_read"]``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import MappingError
from ..units import conversion_factor
from .lazy import Computation, derived_variable, read_block

__all__ = [
    "READ_FLAG_BITS",
    "READ_FLAG_MEANINGS",
    "VALUE_ATTRIBUTES",
    "ValueRule",
    "decode_values",
    "quality_rejected",
    "units_factor",
    "value_rule",
]

#: Attributes describing stored values, removed once applied.
VALUE_ATTRIBUTES = ("_FillValue", "missing_value", "valid_range", "valid_min", "valid_max",
                    "scale_factor", "add_offset", "FILLVAL", "VALIDMIN", "VALIDMAX")
#: Bits of ``read_flag``: fill, out of valid range, rejected by the quality rule.
READ_FLAG_BITS = {"fill": 1, "out_of_valid_range": 2, "quality_rejected": 4}
#: CF ``flag_meanings`` of ``read_flag``.
READ_FLAG_MEANINGS = " ".join(READ_FLAG_BITS)


def _scalar_list(value):
    arr = np.atleast_1d(np.asarray(value))
    return [v for v in arr.ravel().tolist() if not (isinstance(v, float) and np.isnan(v))]


@dataclass
class ValueRule:
    """What a variable's attributes say about its stored values."""

    name: str
    fills: list = field(default_factory=list)
    packed_lo: object = None
    packed_hi: object = None
    scale: float = 1.0
    offset: float = 0.0
    lo: object = None
    hi: object = None

    @property
    def trivial(self) -> bool:
        """True when the stored values are the physical values with nothing to mask."""
        return (not self.fills and self.packed_lo is None and self.packed_hi is None
                and self.scale == 1.0 and self.offset == 0.0 and self.lo is None
                and self.hi is None)

    def apply(self, raw, dtype=None, index=None, dims=None):
        """Return (values, fill mask, out-of-range mask) of a slab of stored values.

        Masked values are NaN in ``values`` (float, at least float32; ``dtype``
        forces one). ``index`` is the slab's selection (dim -> slice) and
        ``dims`` the slab's dimension names (default: the variable's own),
        needed when a limit varies along a dimension.
        """
        raw = np.asarray(raw)
        fill = np.zeros(raw.shape, bool)
        for f in self.fills:
            fill |= raw == np.asarray(f).astype(raw.dtype)
        bad = np.zeros(raw.shape, bool)
        if self.packed_lo is not None:
            bad |= raw < self.packed_lo
        if self.packed_hi is not None:
            bad |= raw > self.packed_hi
        if dtype is None:
            dtype = raw.dtype if raw.dtype.kind == "f" else np.float64
            if self.scale != 1.0 or self.offset != 0.0:
                dtype = np.result_type(dtype, np.asarray(self.scale).dtype, np.float32)
        values = raw.astype(dtype, copy=True)
        if self.scale != 1.0:
            values *= self.scale
        if self.offset != 0.0:
            values += self.offset
        with np.errstate(invalid="ignore"):
            if self.lo is not None:
                bad |= values < _limit(self.lo, index, dims)
            if self.hi is not None:
                bad |= values > _limit(self.hi, index, dims)
        bad &= ~fill
        values[fill | bad] = np.nan
        return values, fill, bad


def _limit(limit, index, dims):
    """Return a limit as a number, or its slab shaped to broadcast against `dims`."""
    if not isinstance(limit, xr.Variable):
        return limit
    block = read_block(limit, index or {})
    if dims is None:
        return block  # the limit's dims are the trailing dims of the values
    order = [d for d in dims if d in limit.dims]
    arr = np.transpose(block, [limit.dims.index(d) for d in order])
    return arr.reshape([arr.shape[order.index(d)] if d in order else 1 for d in dims])


def value_rule(var: xr.Variable, name: str, *, valid=None, where: str = "") -> ValueRule:
    """Return the :class:`ValueRule` of a variable from its CF and ISTP attributes.

    Parameters
    ----------
    var : xarray.Variable
        The variable as stored (not decoded).
    name : str
        Its name, for messages.
    valid : (float, float), optional
        A valid range from the mapping's ``[valid]`` table, in physical units.
    where : str
        The file, for messages.

    Raises
    ------
    MappingError
        If an ISTP ``VALIDMIN``/``VALIDMAX`` has a shape that fits none of the
        variable's non-record dimensions.
    """
    a = var.attrs
    rule = ValueRule(name)
    rule.fills = _scalar_list(a["_FillValue"]) if "_FillValue" in a else []
    if "missing_value" in a:
        rule.fills += _scalar_list(a["missing_value"])
    if "FILLVAL" in a:
        rule.fills += _scalar_list(a["FILLVAL"])
    if var.dtype.kind == "f":
        rule.fills = [f for f in rule.fills if np.isfinite(f)]
    if "valid_range" in a:
        lo, hi = np.asarray(a["valid_range"]).ravel()[:2]
        rule.packed_lo, rule.packed_hi = lo, hi
    if "valid_min" in a:
        rule.packed_lo = np.asarray(a["valid_min"]).ravel()[0]
    if "valid_max" in a:
        rule.packed_hi = np.asarray(a["valid_max"]).ravel()[0]
    rule.scale = float(np.asarray(a.get("scale_factor", 1.0)).ravel()[0])
    rule.offset = float(np.asarray(a.get("add_offset", 0.0)).ravel()[0])
    rule.lo = _istp_limit(var, a.get("VALIDMIN"), "VALIDMIN", name, where)
    rule.hi = _istp_limit(var, a.get("VALIDMAX"), "VALIDMAX", name, where)
    if valid is not None:
        rule.lo = valid[0] if rule.lo is None else np.maximum(rule.lo, valid[0])
        rule.hi = valid[1] if rule.hi is None else np.minimum(rule.hi, valid[1])
        if isinstance(rule.lo, xr.Variable) or isinstance(rule.hi, xr.Variable):
            raise MappingError(f"{where}: [valid] {name}: the file gives a per-channel "
                               f"VALIDMIN/VALIDMAX; remove the mapping's range")
    if var.dtype.kind == "M":
        return ValueRule(name)
    return rule


def _istp_limit(var, value, key, name, where):
    if value is None:
        return None
    arr = np.asarray(value, dtype=float)
    if arr.size == 1:
        return float(arr.ravel()[0])
    if arr.ndim < var.ndim and tuple(var.shape[-arr.ndim:]) == arr.shape:
        return xr.Variable(var.dims[-arr.ndim:], arr)
    raise MappingError(
        f"{where}: {name} has {key} of shape {arr.shape}, which fits none of its dimensions "
        f"{dict(zip(var.dims, var.shape))}; give the valid range in the mapping "
        f"([valid] {name} = [min, max]) or fix the attribute")


def strip_value_attributes(var: xr.Variable, rule: ValueRule) -> dict:
    """Return `var`'s attributes without those :class:`ValueRule` applied."""
    return {k: v for k, v in var.attrs.items() if k not in VALUE_ATTRIBUTES}


def decode_values(ds: xr.Dataset, names, *, where: str = "") -> xr.Dataset:
    """Apply each named numeric variable's value rule: masked values become NaN.

    Small variables (no dimension longer than 100,000) are decoded at once;
    larger ones lazily, slab by slab.
    """
    out, stripped = {}, {}
    for name in names:
        var = ds.variables[name]
        if var.dtype.kind not in "iuf":
            continue
        if " since " in str(var.attrs.get("units", "")):  # another CF time: xarray's decoder
            out[name] = xr.conventions.decode_cf_variable(name, var, decode_timedelta=False)
            continue
        rule = value_rule(var, name, where=where)
        attrs = strip_value_attributes(var, rule)
        if rule.trivial:
            if attrs != var.attrs:
                stripped[name] = attrs
            continue
        if var.size <= 100_000:
            values, _, _ = rule.apply(var.values, index={})
            new = xr.Variable(var.dims, values, attrs)
        else:
            dtype = np.result_type(var.dtype, np.float32) if var.dtype.kind == "f" \
                else np.dtype("float64")

            def func(index, var=var, rule=rule, dtype=dtype):
                return {"v": rule.apply(read_block(var, index), dtype, index, var.dims)[0]}

            comp = Computation(func, {"v": (var.dims, var.shape, dtype)})
            new = derived_variable(comp, "v", attrs)
        new.encoding = {"beltkit_read": {k: v for k, v in var.attrs.items()
                                         if k in VALUE_ATTRIBUTES}}
        out[name] = new
    if stripped:  # attributes only: on a shallow copy, without rebuilding the dataset
        ds = ds.copy(deep=False)
        for name, attrs in stripped.items():
            ds.variables[name].attrs = attrs
    if not out:
        return ds
    coords = {n: v for n, v in out.items() if n in ds.coords}
    data = {n: v for n, v in out.items() if n not in ds.coords}
    return ds.assign_coords(coords).assign(data)


def quality_rejected(values, attrs: dict, rule: dict, *, where: str = "") -> np.ndarray:
    """Return True where a quality variable's values are rejected by the mapping's rule.

    Parameters
    ----------
    values : array_like of int
        The quality variable's stored values (NaN or fill counts as rejected).
    attrs : dict
        Its attributes (CF ``flag_values``, ``flag_masks``, ``flag_meanings``).
    rule : dict
        The mapping's ``[quality]`` table: ``reject_values``, ``accept_values``
        (anything else rejected), ``reject_bits`` (bit numbers; a sample with
        any of them set is rejected), ``reject_meanings`` (words of
        ``flag_meanings``; their ``flag_masks`` are tested as bits, their
        ``flag_values`` as values).

    Raises
    ------
    MappingError
        A ``reject_meanings`` word the variable's ``flag_meanings`` does not hold.
    """
    v = np.asarray(values)
    bad = ~np.isfinite(v) if v.dtype.kind == "f" else np.zeros(v.shape, bool)
    iv = np.where(bad, 0, v).astype(np.int64)
    if "reject_values" in rule:
        bad |= np.isin(iv, rule["reject_values"])
    if "accept_values" in rule:
        bad |= ~np.isin(iv, rule["accept_values"])
    if "reject_bits" in rule:
        mask = 0
        for b in rule["reject_bits"]:
            mask |= 1 << int(b)
        bad |= (iv & mask) != 0
    if "reject_meanings" in rule:
        meanings = str(attrs.get("flag_meanings", "")).split()
        for word in rule["reject_meanings"]:
            if word not in meanings:
                raise MappingError(
                    f"{where}: [quality] reject_meanings: {word!r} is not one of the quality "
                    f"variable's flag_meanings ({' '.join(meanings) or 'none given'})")
            i = meanings.index(word)
            if "flag_masks" in attrs:
                m = int(np.atleast_1d(attrs["flag_masks"])[i])
                if "flag_values" in attrs:
                    fv = int(np.atleast_1d(attrs["flag_values"])[i])
                    bad |= (iv & m) == fv
                else:
                    bad |= (iv & m) != 0
            elif "flag_values" in attrs:
                bad |= iv == int(np.atleast_1d(attrs["flag_values"])[i])
            else:
                raise MappingError(
                    f"{where}: [quality] reject_meanings needs flag_values or flag_masks on "
                    f"the quality variable; use reject_values or reject_bits instead")
    return bad


def units_factor(var, want: str, key: str, where: str, default=None) -> float:
    """Return the factor that converts a variable's ``units`` attribute into `want`.

    Parameters
    ----------
    var : xarray.Variable or xarray.DataArray
        The variable as read (mapping applied).
    want : str
        The units the conventions ask for (e.g. ``"km"``, ``"degree"``).
    key : str
        Its conventional name, as a mapping's ``[units]`` table would name it.
    where : str
        File and mapping, for messages.
    default : str, optional
        Units taken when the variable declares none (None: refuse).

    Returns
    -------
    float
        Multiply the values by it to get `want`
        (:func:`beltkit.units.conversion_factor`).

    Raises
    ------
    MappingError
        One line naming the file, the variable and the ``[units]`` entry that
        fixes it, when the units are missing or not convertible to `want`.
    """
    units = var.attrs.get("units", default)
    if units is None:
        raise MappingError(f"{where}: {key} has no units; give them with [units] {key} = "
                           f"\"{want}\"")
    f = conversion_factor(str(units), want)
    if f is None:
        raise MappingError(f"{where}: {key} has units {units!r}, not convertible to {want}; "
                           f"fix them with [units] {key} = \"...\"")
    return f
