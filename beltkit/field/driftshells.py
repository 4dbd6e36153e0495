r"""Drift-shell tables: the weakest footpoint field on each drift shell, traced once, cached.

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
from scipy.interpolate import CubicSpline

from .._wrap import as_float_array
from ..atomic import atomic_file
from ..constants import R_E_KM
from ..errors import PhysicsError
from .lshell import (
    hilton_l,
)
from .trace import trace_lines

__all__ = [
    "DEFAULT_L_VALUES",
    "TABLE_VERSION",
    "build_table",
    "cache_dir",
    "check_altitude",
    "check_l_values",
    "drift_shell_table",
    "epoch_of",
    "fixed_model",
]

#: Format version of the cached drift-shell table (part of the cache key).
TABLE_VERSION = 1

#: The L grid of the tables (a sample's drift minimum is interpolated in it).
DEFAULT_L_VALUES = np.arange(1.1, 8.0001, 0.05)
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


def fixed_model(model, time):
    """Return the model with its activity fixed at ``time`` (a T89 Kp series -> one level).

    A model whose parameters change with time (``at_time(time)``) is frozen at the
    activity of the table's time, so the table, its key and its identity (``repr``)
    all describe one level.
    """
    at_time = getattr(model, "at_time", None)
    return at_time(time) if at_time is not None else model


def epoch_of(model, time):
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


def check_l_values(l_values):
    """Return the table's L grid, refusing an empty, unordered or sub-1 grid."""
    lv = np.atleast_1d(as_float_array(l_values, "l_values")).astype(float)
    if lv.ndim != 1 or lv.size == 0 or not np.all(np.isfinite(lv)):
        raise PhysicsError("argument 'l_values' must be a non-empty 1-D array of finite L values")
    if np.any(np.diff(lv) <= 0):
        raise PhysicsError("argument 'l_values' must be strictly increasing")
    if lv[0] <= 1.0:
        raise PhysicsError(f"argument 'l_values' must exceed 1 (got {lv[0]:g})")
    return lv


def check_altitude(altitude_km):
    """Return the loss altitude (km above the R_E sphere), refusing negative ones."""
    a = float(altitude_km)
    if not np.isfinite(a) or a < 0:
        raise PhysicsError(f"argument 'altitude_km' must be a finite altitude >= 0 km, got {a}")
    return a


def build_table(model, t_eval, altitude_km, l_values, n_lon, **trace_options):
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
    l_values=DEFAULT_L_VALUES,
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
        Footpoint (stop) altitude, in km above the sphere of radius
        R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
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
    altitude_km = check_altitude(altitude_km)
    lv = check_l_values(l_values)
    t = np.asarray(time)
    if t.size != 1:
        raise PhysicsError("argument 'time' of drift_shell_table must be a single time")
    model = fixed_model(model, t.reshape(-1)[0])
    key, t_eval = epoch_of(model, t.reshape(-1)[0])
    path, ident = _table_path(model, key, altitude_km, lv, n_lon)
    if cache and not refresh:
        stored = _read_table(path, ident)
        if stored is not None:
            return stored
    ds = build_table(model, t_eval, altitude_km, lv, n_lon, **trace_options)
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


