r"""Bounce and drift loss cones in a real (non-dipole) field, from footpoint and drift-shells.

Definitions (common practice)
-----------------------------
For a sample at a point with field :math:`B_{loc}` on a field line with
footpoint fields :math:`B_N`, :math:`B_S` (at the stop altitude, default
100 km) and minimum field :math:`B_{min}`:

* a particle is lost within one bounce when its mirror field exceeds the
  weaker footpoint field; the *bounce* loss cone is set by
  :math:`B_{foot} = \min(B_N, B_S)`;
* a particle is lost within one drift around the Earth when its mirror
  field exceeds the weakest footpoint field anywhere on its drift shell
  (both hemispheres); the *drift* loss cone is set by
  :math:`B_{foot} = B_{drift}` (``b_foot_drift_min``);
* conservation of the first invariant (:math:`\sin^2\alpha / B` constant
  along the line) gives the loss-cone angles

.. math::

    \sin^2\alpha_{LC,loc} = \frac{B_{loc}}{B_{foot}}, \qquad
    \sin^2\alpha_{LC,eq} = \frac{B_{min}}{B_{foot}}

(Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 1-3).
A ratio above 1 (possible locally near the weak-field region, where the
sample's own field can exceed a footpoint field) means every pitch angle
is lost: 90 deg.

The drift minimum comes from the drift-shell table of
:mod:`beltkit.field.driftshells`.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy.interpolate import PchipInterpolator

from ..constants import R_E_KM
from .driftshells import (
    DEFAULT_L_VALUES,
    TABLE_VERSION,
    build_table,
    cache_dir,
    check_altitude,
    check_l_values,
    drift_shell_table,
    epoch_of,
    fixed_model,
)
from .lshell import (
    hilton_l,
    kp_level_variable,
    l_to_surface,
    model_attrs,
    needs_surface,
    open_reason_variable,
)
from .points import broadcast_time, positions, start_points
from .trace import blocks, time_block, trace_lines

__all__ = [
    "TABLE_VERSION",
    "cache_dir",
    "drift_shell_table",
    "loss_cones",
    "loss_cones_vs_longitude",
]


def _asin_deg(ratio):
    with np.errstate(invalid="ignore"):
        return np.degrees(np.arcsin(np.sqrt(np.clip(ratio, 0.0, 1.0))))


def loss_cones(model, xyz_km, time, altitude_km=100.0, dim="sample", *, l_values=DEFAULT_L_VALUES,
               n_lon=72, **trace_options):
    r"""Local and equatorial bounce and drift loss cones at GEO positions.

    Parameters
    ----------
    model : FieldModel
        Field model, e.g. :class:`beltkit.field.IGRF`.
    xyz_km : array_like or DataArray, shape (..., 3)
        Sample positions, GEO Cartesian km (above the stop altitude).
    time : numpy.datetime64 or array_like
        Time(s), broadcast against the leading dimensions of `xyz_km`.
    altitude_km : float, default 100
        Footpoint (stop) altitude, in km above the sphere of radius
        R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    dim : str, default "sample"
        Dimension name for 1-D numpy input (``dim_0``, ``dim_1``, ... style
        suffixes for more dimensions); DataArray input keeps its dims.
    l_values, n_lon
        Grid of the drift-shell table (:func:`drift_shell_table`).
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines`.

    Returns
    -------
    xarray.Dataset
        ``blc_local``, ``dlc_local``, ``blc_equatorial``,
        ``dlc_equatorial``, ``loss_cone_north``, ``loss_cone_south`` (deg);
        ``b_local``, ``b_min``, ``b_foot_north``, ``b_foot_south``,
        ``b_foot_drift_min`` (nT); ``L`` (McIlwain L of locally mirroring
        particles; lines whose other mirror point lies below the stop
        altitude are traced to the surface for it), ``L_foot`` (the
        drift-shell label), ``mlat``, ``mlon`` (deg), ``mlt`` (hour),
        ``open`` and ``open_reason`` (CF
        flags of :data:`beltkit.field.trace_ends.OPEN_REASONS`: boundary, maximum
        radius, step limit); for :class:`~beltkit.field.T89` also
        ``kp_level`` per sample (-1 where Kp is undefined). Attributes
        ``field_model`` (short name), ``field_model_description`` (internal
        model and Kp) and, for one fixed Kp, ``kp`` and ``kp_level``.
        Loss cones and L are NaN for open lines and NaN positions; the
        drift quantities are NaN outside the table's L range.

    Notes
    -----
    .. math::

        \sin^2\alpha_{BLC} = \frac{B}{\min(B_N, B_S)}, \qquad
        \sin^2\alpha_{DLC} = \frac{B}{B_{drift}}, \qquad
        \sin^2\alpha_{N,S} = \frac{B}{B_{N,S}},

    with :math:`B = B_{loc}` (local) or :math:`B_{min}` (equatorial);
    common practice, from the first adiabatic invariant (Roederer 1970).
    The drift minimum comes from the cached :func:`drift_shell_table` of
    each sample's model epoch, interpolated at the sample's label L, and
    never exceeds the sample's own weaker footpoint field. Samples on
    shells that reach the stop altitude somewhere in longitude (label
    below the table's ``l_grounded``) get ``b_foot_drift_min`` equal to
    their line's :math:`B_{min}`, i.e. drift loss cones of 90 deg: every
    particle is lost within a drift. Field lines
    are traced by :func:`beltkit.field.trace`; L by
    :func:`beltkit.field.mcilwain_l`'s method.
    """
    from . import coords

    altitude_km = check_altitude(altitude_km)
    x, lead, dims, coords_in = positions(xyz_km)
    if dims is None:
        dims = (dim,) if len(lead) == 1 else tuple(f"{dim}_{i}" for i in range(len(lead)))
    n = int(np.prod(lead)) if lead else 1
    t = broadcast_time(time, lead)
    x = x.reshape(-1, 3)
    start_points(x, R_E_KM + altitude_km, "xyz_km")  # fail before any tracing
    b0 = np.broadcast_to(np.asarray(model.dipole_b0_nt(t), dtype=float), (n,))
    per_line = {k: np.full(n, np.nan) for k in ("b_start", "b_foot_north", "b_foot_south",
                                                 "b_min", "l_local", "l_foot")}
    closed = np.zeros(n, dtype=bool)
    is_open = np.zeros(n, dtype=bool)
    reason = np.zeros(n, dtype=np.int8)
    for sl in blocks(n):  # batches of lines (bounded memory), not single samples
        lines = trace_lines(model, x[sl], time_block(t, sl), altitude_km, arg_name="xyz_km",
                            **trace_options)
        for k in ("b_start", "b_foot_north", "b_foot_south", "b_min"):
            per_line[k][sl] = getattr(lines, k)
        closed[sl] = lines.closed
        is_open[sl] = lines.open
        reason[sl] = (lines.open_reason if lines.open_reason is not None
                      else np.where(lines.open, 3, 0))
        with np.errstate(invalid="ignore"):
            weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
        i_both = lines.integral_invariant(np.stack([lines.b_start, weak], axis=1))
        for col, (k, bm) in enumerate((("l_local", lines.b_start), ("l_foot", weak))):
            ok = lines.closed & np.isfinite(i_both[:, col])
            view = per_line[k][sl]
            view[ok] = hilton_l(bm[ok], i_both[ok, col], b0[sl][ok])
        # locally mirroring particles whose conjugate mirror point lies below the stop
        # altitude: their L comes from the line traced down to the surface
        deeper = needs_surface(lines, lines.b_start) & ~np.isfinite(per_line["l_local"][sl])
        if np.any(deeper):
            tb = time_block(t, sl)
            view = per_line["l_local"][sl]
            view[deeper] = l_to_surface(model, x[sl][deeper],
                                        tb[deeper] if np.ndim(tb) else tb,
                                        lines.b_start[deeper], b0[sl][deeper], **trace_options)
    b_loc = per_line["b_start"]
    b_foot_n, b_foot_s = per_line["b_foot_north"], per_line["b_foot_south"]
    with np.errstate(invalid="ignore"):
        b_weak = np.fmin(b_foot_n, b_foot_s)
    l_local, l_foot = per_line["l_local"], per_line["l_foot"]

    # drift minimum: one table per model epoch among the samples
    b_drift = np.full(n, np.nan)
    grounded = np.zeros(n, dtype=bool)
    lv = check_l_values(l_values)
    t_flat = np.broadcast_to(np.asarray(t), (n,)) if np.ndim(t) else None
    keys = np.asarray(model.epoch_key(t_flat if t_flat is not None else t)).reshape(-1)
    keys = np.broadcast_to(keys, (n,))
    for key in np.unique(keys[np.isfinite(l_foot)]):  # loop over epochs, not samples
        sel = (keys == key) & np.isfinite(l_foot)
        t_rep = t_flat[np.flatnonzero(sel)[0]] if t_flat is not None else t
        table = drift_shell_table(model, t_rep, altitude_km, lv, n_lon, **trace_options)
        dm = table["b_foot_drift_min"].values
        l_ground = float(table["l_grounded"]) if "l_grounded" in table else np.nan
        with np.errstate(invalid="ignore"):
            grounded[sel] = l_foot[sel] < l_ground
        good = np.isfinite(dm)
        if good.sum() < 2:
            continue
        ll = np.log(table["L"].values[good])
        interp = PchipInterpolator(ll, np.log(dm[good]), extrapolate=False)
        with np.errstate(invalid="ignore"):
            b_drift[sel] = np.exp(interp(np.log(l_foot[sel])))
    b_min = per_line["b_min"]
    with np.errstate(invalid="ignore"):
        b_drift = np.fmin(b_drift, np.where(np.isfinite(b_drift), b_weak, np.nan))
        # a shell reaching the stop altitude somewhere loses every particle within a
        # drift: B_drift = B_min makes both drift loss cones 90 deg
        b_drift = np.where(grounded, b_min, b_drift)
        out = {
            "blc_local": (_asin_deg(b_loc / b_weak), "degree", "local bounce loss cone"),
            "dlc_local": (_asin_deg(b_loc / b_drift), "degree", "local drift loss cone"),
            "blc_equatorial": (_asin_deg(b_min / b_weak), "degree", "equatorial bounce loss cone"),
            "dlc_equatorial": (_asin_deg(b_min / b_drift), "degree", "equatorial drift loss cone"),
            "loss_cone_north": (_asin_deg(b_loc / b_foot_n), "degree",
                                "local loss cone of the northern footpoint"),
            "loss_cone_south": (_asin_deg(b_loc / b_foot_s), "degree",
                                "local loss cone of the southern footpoint"),
        }
    for k in list(out):
        vals, u, ln = out[k]
        vals = np.where(closed & np.isfinite(vals), vals, np.nan)
        out[k] = (vals, u, ln)
    nanc = np.where(closed, 1.0, np.nan)
    out.update(
        {
            "b_local": (b_loc, "nT", "local field magnitude"),
            "b_min": (b_min * nanc, "nT", "minimum field along the field line"),
            "b_foot_north": (b_foot_n * nanc, "nT", "northern footpoint field"),
            "b_foot_south": (b_foot_s * nanc, "nT", "southern footpoint field"),
            "b_foot_drift_min": (b_drift, "nT", "minimum footpoint field over the drift shell"),
            "L": (l_local, "1", "McIlwain L of locally mirroring particles"),
            "L_foot": (l_foot, "1",
                       "McIlwain L of particles mirroring at the weaker footpoint (shell label)"),
        }
    )
    mlat, mlon, _ = coords.magnetic_coordinates(x.reshape(-1, 3), t, model=model)
    mlt = coords.magnetic_local_time(x.reshape(-1, 3), t, model=model)
    out["mlat"] = (np.asarray(mlat, dtype=float), "degree", "magnetic (dipole) latitude")
    out["mlon"] = (np.asarray(mlon, dtype=float), "degree", "magnetic (dipole) longitude")
    out["mlt"] = (np.asarray(mlt, dtype=float), "hour", "magnetic local time")
    data = {k: (dims, np.asarray(v).reshape(lead), {"units": u, "long_name": ln})
            for k, (v, u, ln) in out.items()}
    data["open"] = (dims, is_open.reshape(lead),
                    {"long_name": "field line open: it left the model's outer boundary, went "
                                  "beyond the maximum radius or exceeded the step limit (no "
                                  "footpoint; see open_reason)"})
    data["open_reason"] = open_reason_variable(reason, lead, dims)
    kp = kp_level_variable(model, t, lead, dims)
    if kp is not None:
        data["kp_level"] = kp
    ds = xr.Dataset(data, coords=coords_in or None)
    for k in ("blc_local", "dlc_local", "blc_equatorial", "dlc_equatorial", "L"):
        ds[k].attrs["ancillary_variables"] = "open_reason"
    ds.attrs["altitude_km"] = altitude_km
    ds.attrs.update(model_attrs(model))
    ds.attrs["drift_shell_label"] = ("McIlwain L of particles mirroring at the weaker footpoint; "
                                     "see beltkit.field.losscone")
    return ds


def loss_cones_vs_longitude(model, L, time, altitude_km=100.0, n_lon=72, **trace_options):
    r"""Equatorial bounce and drift loss cones around one drift shell, versus magnetic longitude.

    Parameters
    ----------
    model : FieldModel
        Field model, e.g. :class:`beltkit.field.IGRF`.
    L : float
        Drift-shell label (McIlwain L of particles mirroring at the weaker
        footpoint; see the module notes).
    time : numpy.datetime64, str or float
        One time (the model's epoch containing it is used).
    altitude_km : float, default 100
        Footpoint altitude, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    n_lon : int, default 72
        Number of magnetic longitudes.
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines`.

    Returns
    -------
    xarray.Dataset
        Dimension ``mlon`` (deg): ``blc_equatorial``, ``dlc_equatorial``
        (deg), ``b_foot_north``, ``b_foot_south``, ``b_min`` (nT); scalar
        ``b_foot_drift_min`` (nT), ``l_grounded`` and ``L``. If the shell
        reaches the stop altitude at some longitude (L below
        ``l_grounded``) the drift loss cone is 90 deg everywhere and the
        longitudes without a line are NaN.

    Notes
    -----
    :math:`\sin^2\alpha_{BLC} = B_{min}/\min(B_N, B_S)` at each longitude
    and :math:`\sin^2\alpha_{DLC} = B_{min}/B_{drift}` (common practice).
    Not cached (one shell is quick); uses the same construction as
    :func:`drift_shell_table`.

    Examples
    --------
    >>> import numpy as np
    >>> from beltkit.field import IGRF
    >>> from beltkit.field.losscone import loss_cones_vs_longitude
    >>> ds = loss_cones_vs_longitude(IGRF(), 1.5, np.datetime64("2024-01-01"), n_lon=12)
    >>> bool((ds.dlc_equatorial >= ds.blc_equatorial - 1e-9).all())
    True
    """
    altitude_km = check_altitude(altitude_km)
    lv = check_l_values([float(L)])
    model = fixed_model(model, np.asarray(time).reshape(-1)[0])
    key, t_eval = epoch_of(model, np.asarray(time).reshape(-1)[0])
    table = build_table(model, t_eval, altitude_km, lv, n_lon, **trace_options)
    tb = table.isel(L=0)
    b_weak = np.fmin(tb["b_foot_north"].values, tb["b_foot_south"].values)
    b_drift = float(tb["b_foot_drift_min"])
    dlc = _asin_deg(tb["b_min"].values / b_drift)
    if float(L) < float(table["l_grounded"]):
        dlc = np.full(dlc.shape, 90.0)  # the shell reaches the stop altitude somewhere
    ds = xr.Dataset(
        {
            "blc_equatorial": ("mlon", _asin_deg(tb["b_min"].values / b_weak),
                               {"units": "degree", "long_name": "equatorial bounce loss cone"}),
            "dlc_equatorial": ("mlon", dlc,
                               {"units": "degree", "long_name": "equatorial drift loss cone"}),
            "b_foot_north": tb["b_foot_north"],
            "b_foot_south": tb["b_foot_south"],
            "b_min": tb["b_min"],
            "glon_foot_north": tb["glon_foot_north"],
            "glon_foot_south": tb["glon_foot_south"],
            "b_foot_drift_min": ((), b_drift, {"units": "nT", "long_name":
                                               "minimum footpoint field over the drift shell"}),
            "l_grounded": table["l_grounded"],
        },
        coords={"mlon": table["mlon"], "L": ((), float(L), table["L"].attrs)},
    )
    ds.attrs.update({"field_model": getattr(model, "name", type(model).__name__),
                     "epoch_key": key, "altitude_km": altitude_km})
    return ds
