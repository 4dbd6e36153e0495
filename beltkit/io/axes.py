r"""The energy and pitch-angle axes of a flux file, made conventional at read time.

Pitch-angle bin edges (:func:`resolve_pitch_angle`) come, in this order, from

1. the bounds variable (``pitch_angle_bnds``, or the CF ``bounds`` of the
   centres): source ``"bounds"``;
2. ISTP ``DELTA_PLUS_VAR``/``DELTA_MINUS_VAR`` (or the mapping's
   ``pitch_angle_delta_plus``/``pitch_angle_delta_minus``): edges
   :math:`[c - \delta_-, c + \delta_+]`, source ``"delta"``;
3. the centres: inner edges at the midpoints between neighbouring centres;
   the outer edges at 0 and 180 deg (0 and 90 for folded data) when the
   centres are symmetric about 90 deg (45 deg), i.e. a set covering the whole
   sphere, or as the mapping's ``[pitch_angle] outer_edges`` states
   (``[lower, upper]``, or ``"half_spacing"``: half the neighbouring spacing
   beyond the outer centres, clipped to 0-180); source ``"centres"``.

Any other set of centres is refused with a message naming ``outer_edges``. The
source is recorded in the dataset attribute ``pitch_angle_bnds_source``.

Energies are converted to keV and angles to degrees (:mod:`beltkit.units`).
An energy table that varies from record to record (``energy`` with dims
``(time, channel)``) becomes the 2-D coordinate ``channel_energy`` (keV) and
the channel dimension ``energy`` has no coordinate (unless the table is the
same in every record, when it is the ordinary 1-D ``energy``). With the
mapping's ``[energy] common_kev``, the flux is interpolated instead onto that
axis per record (:func:`interpolate_loglog`), giving the ordinary layout.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import MappingError
from ..units import conversion_factor

__all__ = [
    "ANGLE_UNITS",
    "ENERGY_UNITS",
    "interpolate_loglog",
    "resolve_energy",
    "resolve_pitch_angle",
]

ENERGY_UNITS = "keV"
ANGLE_UNITS = "degree"


def _to_unit(var: xr.Variable, want: str, name: str, where: str, parent_units=None):
    """Return `var` converted to `want` when its units say how (else unchanged)."""
    units = var.attrs.get("units", parent_units)
    if units is None or (units == want and "units" in var.attrs):
        return var  # nothing to convert (the fast path of conventions files)
    factor = conversion_factor(str(units), want)
    if factor is None:
        return var  # the validator names the unit problem
    values = np.asarray(var.values, dtype=np.float64) * factor
    return xr.Variable(var.dims, values, {**var.attrs, "units": want}, var.encoding)


def _delta_names(ds, base):
    a = ds[base].attrs
    plus = f"{base}_delta_plus" if f"{base}_delta_plus" in ds.variables else a.get(
        "DELTA_PLUS_VAR")
    minus = f"{base}_delta_minus" if f"{base}_delta_minus" in ds.variables else a.get(
        "DELTA_MINUS_VAR")
    if plus and minus and str(plus) in ds.variables and str(minus) in ds.variables:
        return str(plus), str(minus)
    return None


def _delta_edges(ds, base, want, where, units):
    names = _delta_names(ds, base)
    if names is None:
        return None
    centres = ds[base].values
    parts = []
    for n in names:
        v = _to_unit(ds.variables[n], want, n, where, parent_units=units)
        d = np.asarray(v.values, float)
        if d.ndim > 1 or (d.ndim == 1 and d.size != centres.size):
            raise MappingError(f"{where}: {n} (the {base} delta) has shape {d.shape}, which "
                               f"does not fit {base} ({centres.size} values)")
        parts.append(np.broadcast_to(d, centres.shape))
    return np.stack([centres - parts[1], centres + parts[0]], axis=-1), names


def resolve_pitch_angle(ds: xr.Dataset, rule: dict, *, where: str) -> xr.Dataset:
    """Return `ds` with pitch angles in degrees and ``pitch_angle_bnds`` present.

    Parameters
    ----------
    ds : xarray.Dataset
        Conventional names, time resolved.
    rule : dict
        The mapping's ``[pitch_angle]`` table (``outer_edges``, ``folded``).
    where : str
        File and mapping, for messages.

    Raises
    ------
    MappingError
        Centres alone that cover no symmetric set, with no ``outer_edges`` rule.
    """
    if "pitch_angle" not in ds.variables or ds["pitch_angle"].ndim != 1:
        return ds
    ds = ds.copy(deep=False)  # attributes are set below: never on the caller's dataset
    original_units = ds.variables["pitch_angle"].attrs.get("units")
    pa = _to_unit(ds.variables["pitch_angle"], ANGLE_UNITS, "pitch_angle", where)
    if rule.get("folded"):
        pa.attrs["folded"] = "true"
    if pa is not ds.variables["pitch_angle"]:
        ds = ds.assign_coords(pitch_angle=pa)
    bounds = str(pa.attrs.get("bounds", "pitch_angle_bnds"))
    if bounds in ds.variables:
        bnds = _to_unit(ds.variables[bounds], ANGLE_UNITS, bounds, where,
                        parent_units=original_units)
        if bounds != "pitch_angle_bnds":
            ds = ds.drop_vars(bounds)
        if bnds is not ds.variables.get("pitch_angle_bnds"):
            ds["pitch_angle_bnds"] = bnds
        source = "bounds"
    else:
        delta = _delta_edges(ds, "pitch_angle", ANGLE_UNITS, where, original_units)
        if delta is not None:
            edges, names = delta
            ds = ds.drop_vars([n for n in names if n not in ds.dims])
            source = "delta"
        else:
            edges = _edges_from_centres(np.asarray(pa.values, float), rule,
                                        str(pa.attrs.get("folded", "")).lower() == "true",
                                        where)
            source = "centres"
        ds["pitch_angle_bnds"] = xr.Variable((pa.dims[0], "nv"), edges,
                                             {"units": ANGLE_UNITS})
    ds["pitch_angle"].attrs["bounds"] = "pitch_angle_bnds"
    ds.attrs["pitch_angle_bnds_source"] = source
    return ds


def _edges_from_centres(c, rule, folded, where):
    top = 90.0 if folded else 180.0
    outer = rule.get("outer_edges")
    if c.size < 2 and not isinstance(outer, list):
        raise MappingError(f"{where}: one pitch-angle centre and no bin edges; give "
                           f"[pitch_angle] outer_edges = [lower, upper] in the mapping")
    mid = 0.5 * (c[:-1] + c[1:])
    if isinstance(outer, list):
        lo, hi = float(outer[0]), float(outer[1])
    elif outer == "half_spacing":
        lo = max(0.0, c[0] - 0.5 * (c[1] - c[0]))
        hi = min(top, c[-1] + 0.5 * (c[-1] - c[-2]))
    else:
        symmetric = np.allclose(c + c[::-1], top, rtol=0, atol=1e-6 * top)
        if not (symmetric and c[0] > 0 and c[-1] < top):
            raise MappingError(
                f"{where}: pitch-angle bins given as centres only ({c[0]:g} ... {c[-1]:g} deg, "
                f"not a set symmetric about {top / 2:g} deg), so the outer bin edges are not "
                f"known; state them in the mapping: [pitch_angle] outer_edges = [lower, upper] "
                f"or outer_edges = \"half_spacing\", or give pitch_angle_bnds")
        lo, hi = 0.0, top
    lower = np.concatenate([[lo], mid])
    upper = np.concatenate([mid, [hi]])
    return np.stack([lower, upper], axis=-1)


def resolve_energy(ds: xr.Dataset, *, where: str) -> xr.Dataset:
    """Return `ds` with energies in keV, ISTP deltas as edges, a record-varying table as 2-D.

    A 2-D ``energy`` ``(time, channel)`` becomes ``channel_energy`` (keV) on
    dims ``(time, energy)`` (the channel dimension renamed ``energy`` in every
    variable), unless every record holds the same table.
    """
    if "energy" not in ds.variables:
        return ds
    ds = ds.copy(deep=False)  # attributes are set below: never on the caller's dataset
    var = ds.variables["energy"]
    if var.ndim == 2 and "time" in var.dims:
        chan = [d for d in var.dims if d != "time"][0]
        table = _to_unit(var, ENERGY_UNITS, "energy", where)
        values = np.asarray(table.values, float)
        ds = ds.drop_vars("energy")
        if chan != "energy":
            if "energy" in ds.dims:
                raise MappingError(f"{where}: the energy table has dims {var.dims} but the "
                                   f"file also has a dimension 'energy'; name the channel "
                                   f"dimension with [dimensions] energy = \"{chan}\"")
            ds = ds.rename_dims({chan: "energy"})
        dims = tuple("energy" if d == chan else d for d in var.dims)
        if values.shape[0] and np.all(values == values[:1]):
            attrs = {k: v for k, v in table.attrs.items() if k not in ("DEPEND_0",)}
            return ds.assign_coords(energy=xr.Variable(("energy",), values[0] if
                                                       dims[0] == "time" else values[:, 0],
                                                       attrs))
        ds = ds.assign_coords(channel_energy=xr.Variable(dims, values, {
            **{k: v for k, v in table.attrs.items() if k not in ("bounds", "DEPEND_0")},
            "long_name": "channel energy of each record"}))
        for name in ("energy_bnds",):
            if name in ds.variables and "time" in ds.variables[name].dims:
                ds = ds.rename_vars({name: "channel_energy_bnds"})
        return ds
    if var.ndim != 1:
        return ds
    converted = _to_unit(var, ENERGY_UNITS, "energy", where)
    if converted is not var:
        ds = ds.assign_coords(energy=converted)
    bounds = str(var.attrs.get("bounds", "energy_bnds"))
    if bounds in ds.variables:
        bnds = _to_unit(ds.variables[bounds], ENERGY_UNITS, bounds, where,
                        parent_units=var.attrs.get("units"))
        if bounds != "energy_bnds":
            ds = ds.drop_vars(bounds)
        if bnds is not ds.variables.get("energy_bnds"):
            ds["energy_bnds"] = bnds
        ds["energy"].attrs["bounds"] = "energy_bnds"
    else:
        delta = _delta_edges(ds, "energy", ENERGY_UNITS, where, var.attrs.get("units"))
        if delta is not None:
            edges, names = delta
            ds = ds.drop_vars([n for n in names if n not in ds.dims])
            ds["energy_bnds"] = xr.Variable((var.dims[0], "nv"), edges, {"units": ENERGY_UNITS})
            ds["energy"].attrs["bounds"] = "energy_bnds"
    return ds


def interpolate_loglog(energy_kev, values, target_kev, axis=1):
    r"""Interpolate values per record onto common energies, linearly in log E and log j.

    Parameters
    ----------
    energy_kev : numpy.ndarray, shape (n_time, n_channel)
        Channel energies of each record (any order; NaN channels are skipped).
    values : numpy.ndarray, shape (n_time, n_channel, ...)
        Values on those channels (flux: positive; zero or negative neighbours
        fall back to interpolation linear in the value).
    target_kev : numpy.ndarray, shape (n_target,)
        Common energies.
    axis : int
        Channel axis of `values` (1).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray, numpy.ndarray, numpy.ndarray)
        Interpolated values (n_time, n_target, ...), the indices (n_time,
        n_target) of the lower and upper neighbouring channels in the input
        order, and the weight of the upper one
        (for carrying flags and errors). Targets outside a record's channel
        span are NaN (no extrapolation).

    Notes
    -----
    .. math:: \log j(E) = (1 - w) \log j_k + w \log j_{k+1},\quad
              w = \frac{\log E - \log E_k}{\log E_{k+1} - \log E_k}

    the usual power-law interpolation of particle spectra (common practice).
    """
    e = np.asarray(energy_kev, float)
    v = np.asarray(values)
    order = np.argsort(np.where(np.isfinite(e), e, np.inf), axis=1)
    e = np.take_along_axis(e, order, axis=1)
    extra = (1,) * (v.ndim - 2)
    v = np.take_along_axis(v, order.reshape(order.shape + extra), axis=1)
    loge = np.log(np.where(e > 0, e, np.nan))
    t = np.log(np.asarray(target_kev, float))
    n = e.shape[1]
    valid_count = np.isfinite(loge).sum(axis=1, keepdims=True)
    k = (np.where(np.isfinite(loge), loge, np.inf)[:, :, None] <= t[None, None, :]).sum(1) - 1
    top = np.take_along_axis(loge, np.clip(valid_count - 1, 0, n - 1), axis=1)
    at_top = (k == valid_count - 1) & np.isclose(t[None, :], top)
    k = np.where(at_top, k - 1, k)
    inside = (k >= 0) & (k <= valid_count - 2)
    k = np.clip(k, 0, max(n - 2, 0))
    e0 = np.take_along_axis(loge, k, axis=1)
    e1 = np.take_along_axis(loge, k + 1, axis=1)
    w = np.where(inside, (t[None, :] - e0) / (e1 - e0), np.nan)
    kk = k.reshape(k.shape + extra)
    v0 = np.take_along_axis(v, kk, axis=1).astype(float)
    v1 = np.take_along_axis(v, kk + 1, axis=1).astype(float)
    ww = w.reshape(w.shape + extra)
    with np.errstate(divide="ignore", invalid="ignore"):
        pos = (v0 > 0) & (v1 > 0)
        logv = np.exp((1 - ww) * np.log(np.where(pos, v0, 1.0))
                      + ww * np.log(np.where(pos, v1, 1.0)))
        lin = (1 - ww) * v0 + ww * v1
    out = np.where(pos, logv, lin)
    lo = np.take_along_axis(order, k, axis=1)
    hi = np.take_along_axis(order, np.minimum(k + 1, n - 1), axis=1)
    return out, lo, hi, w
