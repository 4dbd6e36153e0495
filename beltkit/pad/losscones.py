r"""Per-sample loss cones of a flux dataset, from its position.

Definitions (common practice). A particle of local pitch angle
:math:`\alpha` at field :math:`B_\mathrm{loc}` mirrors where
:math:`B_m = B_\mathrm{loc}/\sin^2\alpha` (first invariant conserved). With
:math:`B_N, B_S` the footpoint fields (default 100 km altitude) of the
sample's field line and :math:`B_d` the minimum footpoint field over its
drift shell:

* bounce loss cone (lost within one bounce, whichever way it moves):
  :math:`B_m \ge \min(B_N, B_S)`, i.e. local half-angle
  :math:`\alpha_{BLC} = \arcsin\sqrt{B_\mathrm{loc}/\min(B_N, B_S)}` on both
  sides (around 0 and 180 deg);
* drift loss cone: :math:`B_m \ge B_d`,
  :math:`\alpha_{DLC} = \arcsin\sqrt{B_\mathrm{loc}/B_d} \ge \alpha_{BLC}`;
* direction-resolved local cones
  :math:`\sin^2\alpha_N = B_\mathrm{loc}/B_N`,
  :math:`\sin^2\alpha_S = B_\mathrm{loc}/B_S` (pitch angles below 90 deg move
  along B toward the northern footpoint, above 90 deg toward the southern).

Equatorial cones use the line's minimum field :math:`B_\mathrm{min}` in place
of :math:`B_\mathrm{loc}`. Where :math:`B_\mathrm{loc}` exceeds the mirror
field (a sample below the footpoint altitude) the cone is 90 deg.

Two paths:

* centred dipole closed forms of :mod:`beltkit.dipole` from ``L`` and
  ``mlat`` (``model=None`` or ``"dipole"``); there :math:`B_N = B_S = B_d`,
  so the drift loss cone equals the bounce loss cone. ``L`` must be a
  centred-dipole L (the equatorial distance of the dipole field line through
  the sample, in Earth radii); an ``L`` whose attribute ``L_definition``
  declares another definition (``"mcilwain"``, ``"roederer"``, ...) is
  refused there;
* any field model through :func:`beltkit.field.loss_cones`, at
  ``position_geo`` or at the position rebuilt from ``L``, ``mlat``, ``mlt``
  (dipole field line in SM coordinates, converted to GEO).

A measured ``b_local`` in the dataset replaces the model's local field in the
local cones on both paths.

:func:`resolve_model` turns ``model="auto"`` into a model for a dataset: the
IGRF at each sample's time where the data carry ``position_geo``, the centred
dipole where they carry only ``L`` and ``mlat``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .. import dipole
from .._threads import cores, map_slices
from ..constants import R_E_KM
from ..errors import ConventionError
from .conventions import Prepared

__all__ = [
    "DIPOLE_L_DEFINITIONS",
    "LOW_ALTITUDE_KM",
    "L_DEFINITION_ATTR",
    "cone_from_fields",
    "dipole_low_altitude_note",
    "model_name",
    "resolve_model",
    "sample_loss_cones",
]

#: Attribute of ``L`` that declares how the L-shell was computed.
L_DEFINITION_ATTR = "L_definition"
#: Values of ``L_definition`` that mean a centred-dipole L (the only L the dipole path takes).
DIPOLE_L_DEFINITIONS = ("dipole", "centred_dipole", "centered_dipole")
#: Below this altitude (km) the centred dipole's lack of a quasi-trapped population is noted.
LOW_ALTITUDE_KM = 2000.0

_DEG = {"units": "degree"}


def cone_from_fields(b_here, b_mirror):
    r"""Loss-cone half-angle (deg) from the local and the mirror field.

    .. math:: \alpha = \arcsin\sqrt{\min(1, B_\mathrm{here}/B_\mathrm{mirror})}

    (the mirror-ratio loss cone, common practice). NaN propagates.

    Parameters
    ----------
    b_here : array_like or xarray.DataArray
        Field at the point (nT).
    b_mirror : array_like or xarray.DataArray
        Field at which particles are lost (nT).

    Returns
    -------
    array_like or xarray.DataArray
        Half-angle in degrees (DataArray in, DataArray out).

    Examples
    --------
    >>> round(float(cone_from_fields(1.0, 2.0)), 10)
    45.0
    """
    ratio = b_here / b_mirror
    if isinstance(ratio, xr.DataArray):
        out = np.degrees(np.arcsin(np.sqrt(ratio.clip(0.0, 1.0))))
        out.attrs = dict(_DEG)
        return out
    return np.degrees(np.arcsin(np.sqrt(np.clip(ratio, 0.0, 1.0))))


def _is_dipole_closed_form(model):
    return model is None or (isinstance(model, str) and model == "dipole")


def resolve_model(ds, model="auto"):
    """Return the field model a dataset is partitioned in.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset (only the names of its position variables are looked at).
    model : "auto", None, "dipole", "igrf" or FieldModel
        ``"auto"``: ``"igrf"`` (IGRF at each sample's time) when the dataset
        carries ``position_geo``, else ``"dipole"`` (closed forms from ``L``
        and ``mlat``). Anything else is returned unchanged.

    Returns
    -------
    None, str or FieldModel

    Examples
    --------
    >>> import xarray as xr
    >>> resolve_model(xr.Dataset({"L": ("time", [4.0]), "mlat": ("time", [0.0])}))
    'dipole'
    >>> resolve_model(xr.Dataset({"position_geo": (("time", "xyz"), [[7000.0, 0, 0]])}))
    'igrf'
    """
    if isinstance(model, str) and model == "auto":
        return "igrf" if "position_geo" in ds.variables else "dipole"
    return model


def model_name(model) -> str:
    """Name of a (resolved) model for output attributes: "dipole", "igrf", or the model's name.

    Examples
    --------
    >>> model_name(None), model_name("igrf")
    ('dipole', 'igrf')
    """
    if model is None:
        return "dipole"
    return str(getattr(model, "name", model))


def _check_dipole_l(ds):
    """Refuse an ``L`` declared as other than a centred-dipole L (the dipole path)."""
    if "L" not in ds.variables:
        return
    declared = ds["L"].attrs.get(L_DEFINITION_ATTR)
    if declared is None or str(declared).strip().lower() in DIPOLE_L_DEFINITIONS:
        return
    raise ConventionError(
        [f"L: its {L_DEFINITION_ATTR} is {str(declared)!r}, not a centred-dipole L, and the "
         "centred-dipole loss cones need a dipole L: give the geographic position "
         "('position_geo', (time, 3) GEO km; the default model='auto' then uses the IGRF at "
         "each sample's time) or pass a field model (model='igrf' or a FieldModel)"],
        ds.encoding.get("source"))


def dipole_low_altitude_note(ds, prep: Prepared, model) -> str:
    r"""Return the note for a dipole partition of samples below :data:`LOW_ALTITUDE_KM`, or "".

    In a centred dipole the drift loss cone equals the bounce loss cone, so
    nothing is quasi-trapped; at low altitude the real field's drift loss
    cone is much wider (over the South Atlantic the field is weakest), so the
    dipole's empty quasi-trapped population is a property of the model.
    The altitude is :math:`(r - R_E)`, with :math:`r = L R_E\cos^2\lambda`
    (dipole field line) or :math:`|\mathbf{r}_{GEO}|`.

    Parameters
    ----------
    ds : xarray.Dataset
        Validated flux dataset (``L`` and ``mlat``, or ``position_geo``).
    prep : Prepared
        Its description (unit factors of the position variables).
    model : None, str or FieldModel
        The resolved model (see :func:`resolve_model`).

    Returns
    -------
    str
        The note, or "" when the model is not the centred dipole or every
        sample lies at or above :data:`LOW_ALTITUDE_KM`.
    """
    if model_name(model) != "dipole":
        return ""
    scale = prep.other_scale
    if "L" in ds.variables and "mlat" in ds.variables:
        mv = np.asarray(ds["mlat"].values, dtype=float)
        lv = np.asarray(ds["L"].values, dtype=float)
        fm, fl = scale.get("mlat", 1.0), scale.get("L", 1.0)
        r_limit = 1.0 + LOW_ALTITUDE_KM / R_E_KM

        def count(sl):
            # r / R_E = L cos^2(mlat), in place (a few passes over the block only)
            c = np.cos(np.radians(mv[sl] * fm))
            r = lv[sl] * fl * c
            r *= c
            return np.count_nonzero(r < r_limit), np.count_nonzero(np.isfinite(r))

        # numpy's loops release the GIL: two blocks per core at once
        parts = map_slices(count, lv.size, _cone_block(lv.size),
                           parallel=True)
        low = int(sum(p[0] for p in parts))  # NaN compares False
        total = int(sum(p[1] for p in parts))
    elif "position_geo" in ds.variables:
        xyz = np.asarray(ds["position_geo"].values, dtype=float)
        r = np.linalg.norm(xyz, axis=-1) * scale.get("position_geo", 1.0)
        low = int(np.count_nonzero(r < R_E_KM + LOW_ALTITUDE_KM))  # NaN compares False
        total = int(np.count_nonzero(np.isfinite(r)))
    else:
        return ""
    if low == 0:
        return ""
    return (f"{low} of {total} samples lie below {LOW_ALTITUDE_KM:g} km altitude, where the "
            "centred dipole has no quasi-trapped population (its drift loss cone equals the "
            "bounce loss cone); the real field's drift loss cone is wider there. Use the IGRF "
            "(model='auto' with 'position_geo' in the data, or model='igrf') to see the "
            "quasi-trapped population")


def _attrs(long_name, units="degree"):
    return {"units": units, "long_name": long_name}


def time_coords(ds):
    """Return the dataset's ``time`` coordinate as :class:`xarray.Coordinates`, index reused.

    The variable is a shallow copy (the caller's attributes are never touched)
    with CF ``standard_name``/``long_name`` added when missing.
    """
    var = ds["time"].variable.copy(deep=False)
    var.attrs = {"standard_name": "time", "long_name": "time (UTC)", **var.attrs}
    return xr.Coordinates(coords={"time": var}, indexes={"time": ds.xindexes["time"]})


def _finish(out, ds):
    names = {
        "blc_local": ("local bounce loss cone half-angle", "degree"),
        "dlc_local": ("local drift loss cone half-angle", "degree"),
        "blc_equatorial": ("equatorial bounce loss cone half-angle", "degree"),
        "dlc_equatorial": ("equatorial drift loss cone half-angle", "degree"),
        "loss_cone_north": ("local loss cone toward the northern footpoint "
                            "(pitch angles below 90 degree)", "degree"),
        "loss_cone_south": ("local loss cone toward the southern footpoint "
                            "(pitch angles above 90 degree, measured from 180)", "degree"),
        "b_local": ("magnetic field magnitude at the sample", "nT"),
        "b_min": ("minimum magnetic field magnitude on the field line", "nT"),
        "L": ("L-shell", "1"),
        "mlat": ("magnetic latitude", "degree"),
        "mlt": ("magnetic local time", "hour"),
    }
    variables = {}
    for k, v in out.items():
        ln, u = names[k]
        var = v.variable if isinstance(v, xr.DataArray) else xr.Variable(("time",), v)
        variables[k] = xr.Variable(var.dims, var.data, _attrs(ln, u))
    return xr.Dataset(variables, coords=time_coords(ds))


def _var(ds, name, scale):
    v = ds[name]
    f = scale.get(name, 1.0)
    v = v.astype(float, copy=False) if f == 1.0 else v.astype(float) * f
    return v.reset_coords(drop=True) if hasattr(v, "reset_coords") else v


def _dipole_cones(L, mlat, b_loc, altitude_km):
    """Return ``(b_eq, b_loc, blc, blc_eq)`` from the closed forms of :mod:`beltkit.dipole`."""
    b_foot = dipole.footpoint_field(L, altitude_km=altitude_km)
    b_eq = dipole.equatorial_field(L)
    if b_loc is None:
        b_loc = dipole.field_magnitude(L, mlat)
    return b_eq, b_loc, cone_from_fields(b_loc, b_foot), cone_from_fields(b_eq, b_foot)


#: fewest samples per block of the eager dipole closed forms
_CONE_BLOCK = 16384


def _cone_block(n):
    """Return the block length of the eager dipole passes: two blocks per core."""
    return max(_CONE_BLOCK, -(-n // (2 * cores())))


def _dipole_cones_blocks(L, mlat, b_loc, altitude_km):
    """:func:`_dipole_cones` on eager DataArrays, in blocks on the worker threads.

    numpy's elementwise loops release the GIL, so two blocks per core run
    on every core at once (for 10^6 samples about 75 -> 36 ms on two cores;
    smaller blocks gain nothing: the functions' Python overhead per call then
    holds the lock). The same functions run on each block, so the values
    are the same. A value the closed forms refuse is refused on the whole
    arrays (the message names the whole data, not one block of it).
    """
    lv = np.ascontiguousarray(L.values)
    mv = np.ascontiguousarray(mlat.values)
    bv = None if b_loc is None else np.ascontiguousarray(b_loc.values)
    out = tuple(np.empty(lv.size) for _ in range(4))

    def one(sl):
        for o, v in zip(out, _dipole_cones(lv[sl], mv[sl], None if bv is None else bv[sl],
                                           altitude_km)):
            o[sl] = v

    try:
        map_slices(one, lv.size, _cone_block(lv.size),
                   parallel=True)
    except Exception:
        _dipole_cones(lv, mv, bv, altitude_km)  # raises with the whole arrays' message
        raise
    return out


def _dipole_path(ds, prep: Prepared, altitude_km):
    _check_dipole_l(ds)
    L = _var(ds, "L", prep.other_scale)
    mlat = _var(ds, "mlat", prep.other_scale)
    L.attrs = {"units": "1"}
    mlat.attrs = {"units": "degree"}
    b_loc = _var(ds, "b_local", prep.other_scale) if "b_local" in ds.variables else None
    if any(v is not None and v.chunks is not None for v in (L, mlat, b_loc)):
        # lazy: the closed forms of beltkit.dipole on the dask arrays
        b_eq, b_loc, blc, blc_eq = _dipole_cones(L, mlat, b_loc, altitude_km)
    else:
        b_eq, b_loc, blc, blc_eq = _dipole_cones_blocks(L, mlat, b_loc, altitude_km)
    out = {
        "blc_local": blc, "dlc_local": blc, "blc_equatorial": blc_eq,
        "dlc_equatorial": blc_eq, "loss_cone_north": blc,
        "loss_cone_south": blc, "b_local": b_loc, "b_min": b_eq, "L": L,
        "mlat": mlat,
    }
    if "mlt" in ds.variables:
        out["mlt"] = _var(ds, "mlt", prep.other_scale)
    return _finish(out, ds)


_MODEL_FIELDS = ("b_local", "b_min", "b_foot_north", "b_foot_south", "b_foot_drift_min",
                 "L", "mlat", "mlt")


def _positions_geo(xyz_or_lm, time, from_magnetic):
    """Return GEO positions (n, 3) km for one block."""
    if not from_magnetic:
        return xyz_or_lm
    from ..field import convert

    L, mlat, mlt = xyz_or_lm[:, 0], xyz_or_lm[:, 1], xyz_or_lm[:, 2]
    r_km = np.asarray(dipole.radius(L, mlat), dtype=float) * R_E_KM
    lam = np.radians(mlat)
    phi = np.radians((mlt - 12.0) * 15.0)  # MLT 12 h = sunward (+x of SM)
    xyz_sm = np.stack([r_km * np.cos(lam) * np.cos(phi), r_km * np.cos(lam) * np.sin(phi),
                       r_km * np.sin(lam)], axis=-1)
    return np.asarray(convert(xyz_sm, time, "SM", "GEO"), dtype=float)


def _model_block(pos, time, *, model, altitude_km, from_magnetic):
    """Loss-cone inputs of one time block from the field model, stacked (n, 8)."""
    from ..field import loss_cones

    n = pos.shape[0]
    out = np.full((n, len(_MODEL_FIELDS)), np.nan)
    if n == 0:
        return out
    xyz = _positions_geo(pos, time, from_magnetic)
    res = loss_cones(model, xyz, time, altitude_km=altitude_km, dim="time")
    for k, name in enumerate(_MODEL_FIELDS):
        if name in res.variables:
            out[:, k] = np.asarray(res[name].values, dtype=float).reshape(n)
    return out


def _model_path(ds, prep: Prepared, model, altitude_km):
    from ..field import as_model

    model = as_model(model if model is not None else "dipole")
    if "position_geo" in ds.variables:
        pos = ds["position_geo"].astype(float) * prep.other_scale.get("position_geo", 1.0)
        pos = pos.reset_coords(drop=True)
        pos = pos.rename({pos.dims[1]: "_xyz"})
        from_magnetic = False
    else:
        pos = xr.concat([_var(ds, n, prep.other_scale) for n in ("L", "mlat", "mlt")],
                        dim="_xyz").transpose("time", "_xyz")
        from_magnetic = True
    time = ds["time"].reset_coords(drop=True)
    if pos.chunks is not None and time.chunks is None:
        time = time.chunk({"time": pos.chunks[0]})
    stacked = xr.apply_ufunc(
        _model_block, pos, time,
        input_core_dims=[["_xyz"], []], output_core_dims=[["_field"]],
        kwargs={"model": model, "altitude_km": altitude_km, "from_magnetic": from_magnetic},
        dask="parallelized", output_dtypes=[float],
        dask_gufunc_kwargs={"output_sizes": {"_field": len(_MODEL_FIELDS)}},
    )
    f = {name: stacked.isel(_field=k, drop=True) for k, name in enumerate(_MODEL_FIELDS)}
    b_loc = _var(ds, "b_local", prep.other_scale) if "b_local" in ds.variables else f["b_local"]
    b_bounce = np.minimum(f["b_foot_north"], f["b_foot_south"])
    out = {
        "blc_local": cone_from_fields(b_loc, b_bounce),
        "dlc_local": cone_from_fields(b_loc, f["b_foot_drift_min"]),
        "blc_equatorial": cone_from_fields(f["b_min"], b_bounce),
        "dlc_equatorial": cone_from_fields(f["b_min"], f["b_foot_drift_min"]),
        "loss_cone_north": cone_from_fields(b_loc, f["b_foot_north"]),
        "loss_cone_south": cone_from_fields(b_loc, f["b_foot_south"]),
        "b_local": b_loc, "b_min": f["b_min"],
    }
    # L, mlat, mlt: the dataset's own when present, else the model's
    for name in ("L", "mlat", "mlt"):
        out[name] = _var(ds, name, prep.other_scale) if name in ds.variables else f[name]
    return _finish(out, ds)


def sample_loss_cones(ds, prep: Prepared, model=None, altitude_km=100.0):
    """Loss cones and field values per time sample of a validated dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset that passed :func:`beltkit.pad.conventions.check`.
    prep : Prepared
        Its description (unit factors of the position variables).
    model : None, "auto", "dipole", "igrf" or FieldModel
        None or "dipole" with ``L``/``mlat`` uses the dipole closed forms
        (refused for an ``L`` declared non-dipole by ``L_definition``);
        "auto" is resolved by :func:`resolve_model`; anything else (or a
        dataset with only ``position_geo``) uses
        :func:`beltkit.field.loss_cones`.
    altitude_km : float
        Footpoint altitude at which particles count as lost, in km above the
        sphere of radius R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`),
        not the ellipsoid.

    Returns
    -------
    xarray.Dataset
        Per-time ``blc_local``, ``dlc_local``, ``blc_equatorial``,
        ``dlc_equatorial``, ``loss_cone_north``, ``loss_cone_south`` (degree),
        ``b_local``, ``b_min`` (nT), ``L``, ``mlat`` and, when known, ``mlt``.
        Lazy when the dataset is dask-backed.
    """
    model = resolve_model(ds, model)
    has_lm = "L" in ds.variables and "mlat" in ds.variables
    if _is_dipole_closed_form(model) and has_lm:
        return _dipole_path(ds, prep, altitude_km)
    return _model_path(ds, prep, model, altitude_km)
