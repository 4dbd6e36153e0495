r"""Bounce and drift loss cones in a real (non-dipole) field, with a cached drift-shell table.

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

Drift shells (the approximation made here)
------------------------------------------
Drift shells are labelled by McIlwain's L (McIlwain 1961, J. Geophys. Res.
66, 3681; Hilton 1971, J. Geophys. Res. 76, 6952) of the particles that
mirror *at the weaker footpoint of the line*: :math:`B_m = \min(B_N, B_S)`,
:math:`I = I(B_m)`. These are the particles at the edge of the bounce loss
cone, the population whose drift decides which pitch angles are lost within
a drift. Particles mirroring higher up on the same line drift on slightly
different shells (shell splitting); that difference is neglected. The
table :func:`drift_shell_table` traces lines through the dipole-equatorial
plane (MAG frame) at ``n_lon`` magnetic longitudes and a fine geometric
grid of radii, labels them, and interpolates (cubic spline in
:math:`\ln L`) the footpoint fields onto a grid of L. The minimum over
longitudes is refined by a parabola through the discrete minimum and its
two neighbours (periodic in longitude). A sample's drift minimum is that
of its own label L (monotone cubic interpolation of ln B in ln L), never more than its
own weaker footpoint field. The innermost shells pass below the stop
altitude at some longitudes (in IGRF over the South Atlantic, below L of
about 1.12 at 100 km); the table reports that limit (``l_grounded``), and
samples on such shells lose every particle within a drift (drift loss
cones of 90 deg).

Cache
-----
The table depends on the model, its epoch key (IGRF: the decimal year to
0.1 yr; :class:`~beltkit.field.T89`: the Kp level, the internal model and
the UTC hour, since the external field turns with the dipole tilt and the
Sun), the altitude, the L grid and the number of longitudes; it is
written (atomically) as netCDF under ``$BELTKIT_CACHE_DIR`` or
``$XDG_CACHE_HOME/beltkit`` or ``~/.cache/beltkit``, named by a hash of all
of these and the table format version, so a batch over a year of data
builds it about ten times at most.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np
import xarray as xr
from scipy.interpolate import CubicSpline, PchipInterpolator

from .._wrap import as_float_array
from ..atomic import atomic_file
from ..constants import R_E_KM
from ..errors import PhysicsError
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

#: Format version of the cached drift-shell table (part of the cache key).
TABLE_VERSION = 1

_DEFAULT_L = np.arange(1.1, 8.0001, 0.05)
_RADIUS_RATIO = 1.015  # geometric spacing of the radial grid of traced lines


def cache_dir() -> Path:
    """Directory of beltkit's on-disk cache.

    Returns
    -------
    pathlib.Path
        ``$BELTKIT_CACHE_DIR`` if set, else ``$XDG_CACHE_HOME/beltkit``, else
        ``~/.cache/beltkit`` (not created here).
    """
    env = os.environ.get("BELTKIT_CACHE_DIR")
    if env:
        return Path(env)
    xdg = os.environ.get("XDG_CACHE_HOME")
    if xdg:
        return Path(xdg) / "beltkit"
    return Path.home() / ".cache" / "beltkit"


def _fixed_model(model, time):
    """Return the model with its activity fixed at ``time`` (a T89 Kp series -> one level).

    A model whose parameters change with time (``at_time(time)``) is frozen at the
    activity of the table's time, so the table, its key and its identity (``repr``)
    all describe one level.
    """
    at_time = getattr(model, "at_time", None)
    return at_time(time) if at_time is not None else model


def _epoch_of(model, time):
    """Return the (key, evaluation time) of a model's cacheable epoch for one time."""
    key = model.epoch_key(time) if hasattr(model, "epoch_key") else None
    if key is None:
        raise PhysicsError(
            f"argument 'model' ({type(model).__name__}) has no epoch_key(time); the drift-shell "
            "table needs it to be cached"
        )
    t_eval = model.cache_epoch(time) if hasattr(model, "cache_epoch") else time
    return str(np.asarray(key).reshape(-1)[0]), t_eval


def _mag_to_geo(model, xyz_mag, time):
    """Rotate MAG-frame positions to GEO with the model's dipole axis at `time`.

    MAG (Hapgood 1992, Planet. Space Sci. 40, 711): +Z along the northern
    dipole axis, +Y along Z_GEO x Z_MAG; see :mod:`beltkit.field.coords`.
    """
    from .coords import convert

    return np.asarray(convert(xyz_mag, time, "MAG", "GEO", model=model))


def _foot_label(lines, b0_nt):
    """McIlwain L of particles mirroring at the weaker footpoint (the drift-shell label)."""
    with np.errstate(invalid="ignore"):
        b_weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
    i_km = lines.integral_invariant(b_weak)
    out = np.full(b_weak.shape, np.nan)
    ok = np.isfinite(i_km) & lines.closed
    out[ok] = hilton_l(b_weak[ok], i_km[ok], np.broadcast_to(b0_nt, b_weak.shape)[ok])
    return out


def _check_l_values(l_values):
    lv = np.atleast_1d(as_float_array(l_values, "l_values")).astype(float)
    if lv.ndim != 1 or lv.size == 0 or not np.all(np.isfinite(lv)):
        raise PhysicsError("argument 'l_values' must be a non-empty 1-D array of finite L values")
    if np.any(np.diff(lv) <= 0):
        raise PhysicsError("argument 'l_values' must be strictly increasing")
    if lv[0] <= 1.0:
        raise PhysicsError(f"argument 'l_values' must exceed 1 (got {lv[0]:g})")
    return lv


def _check_altitude(altitude_km):
    a = float(altitude_km)
    if not np.isfinite(a) or a < 0:
        raise PhysicsError(f"argument 'altitude_km' must be a finite altitude >= 0 km, got {a}")
    return a


def _build_table(model, t_eval, altitude_km, l_values, n_lon, **trace_options):
    """Trace the radial grid at each magnetic longitude and interpolate onto `l_values`."""
    if int(n_lon) != n_lon or n_lon < 3:
        raise PhysicsError(f"argument 'n_lon' must be an integer >= 3, got {n_lon!r}")
    n_lon = int(n_lon)
    r_stop_re = 1.0 + altitude_km / R_E_KM
    if l_values[0] <= r_stop_re:
        raise PhysicsError(
            f"argument 'l_values' starts at {l_values[0]:g}, below the stop radius "
            f"{r_stop_re:.4f} R_E of altitude_km = {altitude_km:g}"
        )
    r_lo = max(r_stop_re * 1.001, l_values[0] * 0.8)
    r_hi = max(l_values[-1] * 1.12, r_lo * _RADIUS_RATIO**4)
    n_r = int(np.ceil(np.log(r_hi / r_lo) / np.log(_RADIUS_RATIO))) + 1
    radii = r_lo * np.exp(np.linspace(0.0, np.log(r_hi / r_lo), n_r))
    mlon = np.arange(n_lon) * (360.0 / n_lon)
    phi = np.radians(mlon)
    rr, pp = np.meshgrid(radii, phi, indexing="ij")  # (n_r, n_lon)
    xyz_mag = np.stack([rr * np.cos(pp), rr * np.sin(pp), np.zeros_like(rr)], axis=-1) * R_E_KM
    xyz_geo = _mag_to_geo(model, xyz_mag.reshape(-1, 3), t_eval)
    lines = trace_lines(model, xyz_geo, t_eval, altitude_km, **trace_options)
    b0 = float(np.asarray(model.dipole_b0_nt(t_eval)).reshape(-1)[0])
    label = _foot_label(lines, b0).reshape(n_r, n_lon)
    fields = {
        "b_foot_north": lines.b_foot_north.reshape(n_r, n_lon),
        "b_foot_south": lines.b_foot_south.reshape(n_r, n_lon),
        "b_min": lines.b_min.reshape(n_r, n_lon),
    }
    geo_lon = {}
    for hemi, foot in (("north", lines.foot_north), ("south", lines.foot_south)):
        geo_lon[hemi] = np.degrees(np.arctan2(foot[:, 1], foot[:, 0])).reshape(n_r, n_lon)
    out = {k: np.full((l_values.size, n_lon), np.nan) for k in fields}
    out_lon = {k: np.full((l_values.size, n_lon), np.nan) for k in geo_lon}
    log_l = np.log(l_values)
    for j in range(n_lon):  # one spline per magnetic longitude (not per line)
        lab = label[:, j]
        ok = np.isfinite(lab) & np.all([np.isfinite(f[:, j]) for f in fields.values()], axis=0)
        lab_ok = lab[ok]
        if lab_ok.size < 4:
            continue
        keep = np.concatenate([[True], np.diff(lab_ok) > 0])  # monotone in L
        x = np.log(lab_ok[keep])
        inside = (log_l >= x[0]) & (log_l <= x[-1])
        for k, f in fields.items():
            spl = CubicSpline(x, np.log(f[ok, j][keep]))
            out[k][inside, j] = np.exp(spl(log_l[inside]))
        for k, g in geo_lon.items():
            # unwrap for interpolation, wrap back to (-180, 180]
            u = np.degrees(np.unwrap(np.radians(g[ok, j][keep])))
            v = np.interp(log_l[inside], x, u)
            out_lon[k][inside, j] = (v + 180.0) % 360.0 - 180.0
    b_weak = np.fmin(out["b_foot_north"], out["b_foot_south"])
    drift_min = _periodic_min(b_weak)
    # shells below the lowest traced line at some longitude reach the stop altitude there
    with np.errstate(invalid="ignore"):
        lowest = np.nanmin(np.where(np.isfinite(label), label, np.inf), axis=0)
    # (known only when the radial grid starts just above the stop altitude)
    at_floor = r_lo <= r_stop_re * 1.0011 and np.all(np.isfinite(lowest))
    grounded_below = float(np.max(lowest)) if at_floor else np.nan
    ds = xr.Dataset(
        {
            "b_foot_north": (("L", "mlon"), out["b_foot_north"],
                             {"units": "nT", "long_name": "northern footpoint field"}),
            "b_foot_south": (("L", "mlon"), out["b_foot_south"],
                             {"units": "nT", "long_name": "southern footpoint field"}),
            "b_min": (("L", "mlon"), out["b_min"],
                      {"units": "nT", "long_name": "minimum field along the line"}),
            "glon_foot_north": (("L", "mlon"), out_lon["north"],
                                {"units": "degrees_east",
                                 "long_name": "geographic longitude of the northern footpoint"}),
            "glon_foot_south": (("L", "mlon"), out_lon["south"],
                                {"units": "degrees_east",
                                 "long_name": "geographic longitude of the southern footpoint"}),
            "b_foot_drift_min": (("L",), drift_min,
                                 {"units": "nT",
                                  "long_name": "minimum footpoint field over the drift shell"}),
            "l_grounded": ((), grounded_below,
                           {"units": "1", "long_name": "shells of lower L reach the stop "
                            "altitude at some longitude (NaN: not determined)"}),
        },
        coords={
            "L": ("L", l_values, {"units": "1", "long_name":
                                  "McIlwain L of particles mirroring at the weaker footpoint"}),
            "mlon": ("mlon", mlon, {"units": "degrees_east", "long_name":
                                    "magnetic (MAG) longitude of the dipole-equatorial crossing"}),
        },
    )
    return ds


def _periodic_min(b):
    """Minimum over the last (periodic) axis, refined by a parabola in ln B.

    NaN where any longitude is missing (the shell is not resolved there).
    """
    n = b.shape[-1]
    with np.errstate(invalid="ignore", divide="ignore"):
        lb = np.log(b)
    bad = ~np.all(np.isfinite(lb), axis=-1)
    lbf = np.where(np.isfinite(lb), lb, np.inf)
    k = np.argmin(lbf, axis=-1)
    rows = np.arange(b.shape[0])
    f0 = lbf[rows, (k - 1) % n]
    f1 = lbf[rows, k]
    f2 = lbf[rows, (k + 1) % n]
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = f0 - 2 * f1 + f2
        shift = np.clip(np.where(curv > 0, 0.5 * (f0 - f2) / curv, 0.0), -1.0, 1.0)
        fmin = f1 - 0.25 * (f0 - f2) * shift
    fmin = np.minimum(fmin, f1)
    out = np.exp(fmin)
    out[bad] = np.nan
    return out


def _table_path(model, key, altitude_km, l_values, n_lon):
    ident = {
        "version": TABLE_VERSION,
        "model": getattr(model, "name", type(model).__name__),
        "repr": repr(model),
        "epoch_key": key,
        "altitude_km": round(float(altitude_km), 6),
        "l_values": [round(float(v), 9) for v in l_values],
        "n_lon": int(n_lon),
    }
    text = json.dumps(ident, sort_keys=True)
    digest = hashlib.sha256(text.encode()).hexdigest()[:20]
    name = f"driftshell_v{TABLE_VERSION}_{ident['model']}_{digest}.nc"
    return cache_dir() / name, text


def drift_shell_table(
    model,
    time,
    altitude_km=100.0,
    l_values=_DEFAULT_L,
    n_lon=72,
    *,
    cache=True,
    refresh=False,
    **trace_options,
):
    r"""Footpoint fields of the drift shells at magnetic longitudes, per L (cached on disk).

    Parameters
    ----------
    model : FieldModel
        Field model with ``field_geo``, ``dipole_b0_nt``, ``dipole_axis_geo``
        and ``epoch_key`` (and optionally ``cache_epoch``, the time at which a
        key's table is computed).
    time : numpy.datetime64, str or float
        One time; the table is computed for the model's epoch containing it.
    altitude_km : float, default 100
        Footpoint (stop) altitude.
    l_values : array_like, default 1.1 to 8.0 in steps of 0.05
        Increasing grid of McIlwain L (drift-shell labels, see module notes).
    n_lon : int, default 72
        Number of magnetic longitudes (equally spaced from 0 deg).
    cache : bool, default True
        Read and write the on-disk cache (:func:`cache_dir`).
    refresh : bool, default False
        Rebuild even when a cached table exists.
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines`.

    Returns
    -------
    xarray.Dataset
        Dimensions ``L`` and ``mlon``: ``b_foot_north``, ``b_foot_south``,
        ``b_min`` (nT) and the footpoints' geographic longitudes per L and
        longitude; ``b_foot_drift_min`` (nT) per L: the minimum over
        longitudes and both hemispheres. NaN where a shell is not resolved
        at every longitude. Scalar ``l_grounded``: shells of lower L pass
        below the lowest traced line (apex ~6 km above the stop altitude)
        at some longitude, i.e. they reach the atmosphere there (in IGRF
        near the South Atlantic, L of about 1.12); NaN when the L grid
        does not reach down to it.

    Notes
    -----
    See the module docstring for the drift-shell label (McIlwain L of
    particles mirroring at the weaker footpoint) and the interpolation.
    The cache file name holds a hash of the model, epoch key, altitude, L
    grid, ``n_lon`` and :data:`TABLE_VERSION`; files (netCDF-3, written by
    scipy) go to a temporary name in the cache folder, are flushed to disk
    and moved into place with :func:`os.replace`.
    """
    altitude_km = _check_altitude(altitude_km)
    lv = _check_l_values(l_values)
    t = np.asarray(time)
    if t.size != 1:
        raise PhysicsError("argument 'time' of drift_shell_table must be a single time")
    model = _fixed_model(model, t.reshape(-1)[0])
    key, t_eval = _epoch_of(model, t.reshape(-1)[0])
    path, ident = _table_path(model, key, altitude_km, lv, n_lon)
    if cache and not refresh:
        stored = _read_table(path, ident)
        if stored is not None:
            return stored
    ds = _build_table(model, t_eval, altitude_km, lv, n_lon, **trace_options)
    ds.attrs.update(
        {
            "title": "beltkit drift-shell footpoint table",
            "model": getattr(model, "name", type(model).__name__),
            "epoch_key": key,
            "epoch_decimal_year": float(np.asarray(t_eval, dtype=float))
            if np.asarray(t_eval).dtype.kind in "fi" else str(t_eval),
            "altitude_km": altitude_km,
            "table_version": TABLE_VERSION,
            "cache_identity": ident,
            "shell_label": "McIlwain L (Hilton 1971) of particles mirroring at the weaker "
                           "footpoint of each traced line",
        }
    )
    if cache:
        _write_table(ds, path)
    return ds


# The cache is read and written with xarray's "scipy" engine (netCDF-3, pure Python,
# scipy being a runtime dependency), never through the netCDF-C/HDF5 libraries: a
# table can be built or read while another thread of the process writes a summary
# through netCDF4 (beltkit.batch's pipelined summarize computes file k while file
# k-1 is written), and those C libraries are not thread-safe.


def _read_table(path, ident):
    """Return the cached table at `path` if it is readable and its identity is `ident`, else None.

    An unreadable or foreign file (a table of an older beltkit included) is
    not trusted: the caller rebuilds it and writes it over.
    """
    if not path.exists():
        return None
    try:
        with open(path, "rb") as fh, xr.open_dataset(fh, engine="scipy") as f:
            ds = f.load()  # (the file object is closed here even when parsing fails)
    except (OSError, ValueError, TypeError, KeyError, RuntimeError):
        return None
    return ds if ds.attrs.get("cache_identity") == ident else None


def _write_table(ds, path):
    """Write the table atomically (:func:`beltkit.atomic.atomic_file`) in the scipy engine."""
    atomic_file(path, lambda tmp: ds.to_netcdf(tmp, engine="scipy"))


def _asin_deg(ratio):
    with np.errstate(invalid="ignore"):
        return np.degrees(np.arcsin(np.sqrt(np.clip(ratio, 0.0, 1.0))))


def loss_cones(model, xyz_km, time, altitude_km=100.0, dim="sample", *, l_values=_DEFAULT_L,
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
        Footpoint (stop) altitude.
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
        drift-shell label), ``mlat``, ``mlon`` (deg), ``mlt`` (h) (also as
        ``mlat_deg``, ``mlt_hours``), ``open`` and ``open_reason`` (CF
        flags of :data:`beltkit.field.trace.OPEN_REASONS`: boundary, maximum
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

    altitude_km = _check_altitude(altitude_km)
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
    lv = _check_l_values(l_values)
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
    out["mlt"] = (np.asarray(mlt, dtype=float), "h", "magnetic local time")
    # the names of the cross-module contract, beside the short ones
    out["mlat_deg"] = out["mlat"]
    out["mlt_hours"] = out["mlt"]
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
        Footpoint altitude.
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
    altitude_km = _check_altitude(altitude_km)
    lv = _check_l_values([float(L)])
    model = _fixed_model(model, np.asarray(time).reshape(-1)[0])
    key, t_eval = _epoch_of(model, np.asarray(time).reshape(-1)[0])
    table = _build_table(model, t_eval, altitude_km, lv, n_lon, **trace_options)
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
