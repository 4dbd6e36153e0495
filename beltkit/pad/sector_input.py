r"""Reading a sectored dataset for :func:`beltkit.pad.bin_sectors`: checks and look geometry.

:func:`read_sectored` checks a sectored dataset (``docs/conventions.md``
section 9) and collects what the binning kernel needs (listing every problem
at once); :func:`look_geometry` turns the look directions, or the spin form,
and the field into the kernel's per-look arrays: the field's unit vector in
the spin frame :math:`(b_s, \rho\cos\varphi_b, \rho\sin\varphi_b)`
(spin axis :math:`\hat{\mathbf s}`, the reference direction projected on the
spin plane :math:`\hat{\mathbf e}_1`, :math:`\hat{\mathbf e}_2 =
\hat{\mathbf s}\times\hat{\mathbf e}_1`), the cosines and sines of each
sector's start and end phase, and each look's polar angle and field-of-view
half-angle. The geometry itself is described in :mod:`beltkit.pad.sectors`.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ..errors import ConventionError
from .conventions import FLUX_UNITS, flux_unit_factor

__all__ = ["INPUT_NAMES", "SectoredInput", "factor_array", "look_geometry", "passed_through",
           "read_sectored", "unit_vectors"]

#: the sectored dataset's own variables (not passed through to the binned output)
INPUT_NAMES = ("counts", "flux", "flux_err", "counts_to_flux", "look_direction", "spin_axis",
               "spin_phase_reference", "sector_phase_bnds", "detector_polar_angle",
               "detector_azimuth", "fov_half_angle", "b_vector")
_DEG = math.pi / 180.0


def unit_vectors(v):
    """Return unit vectors; NaN where the vector is zero or not finite."""
    norm = np.sqrt(np.einsum("...i,...i->...", v, v))
    ok = np.isfinite(norm) & (norm > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = v / norm[..., None]
    if not ok.all():
        out[~ok] = np.nan
    return out


def _deg_values(ds, name, problems, dims_ok, *, lo=None, hi=None, lo_open=False):
    """Values of an angle variable in degree (rad converted), checked; None if absent/bad."""
    var = ds[name]
    if not set(var.dims) <= set(dims_ok):
        problems.append(f"{name}: dims {var.dims} must be a subset of {tuple(dims_ok)}")
        return None
    units = str(var.attrs.get("units", "")).strip().lower()
    if units in ("degree", "degrees", "deg", "degree_east", "degree_north"):
        f = 1.0
    elif units in ("rad", "radian", "radians"):
        f = 180.0 / math.pi
    else:
        problems.append(f"{name}: units {var.attrs.get('units')!r}; give it in 'degree' (or "
                        "'rad')")
        return None
    vals = np.asarray(var.values, dtype=float) * f
    bad = ~np.isfinite(vals)
    if lo is not None:
        bad |= (vals <= lo) if lo_open else (vals < lo)
    if hi is not None:
        bad |= vals > hi
    if np.any(bad):
        rng = f"{'(' if lo_open else '['}{lo}, {hi}]"
        where = f" and in {rng}" if lo is not None else ""
        problems.append(f"{name}: values must be finite{where} degree ({int(bad.sum())} are "
                        "not)")
        return None
    return var.copy(data=vals)


def _frame(var, problems):
    from ..field.coords import FRAMES

    f = str(var.attrs.get("frame", "")).strip().upper()
    if f not in FRAMES:
        problems.append(f"{var.name}: needs a 'frame' attribute, one of {', '.join(FRAMES)} "
                        f"(got {var.attrs.get('frame')!r})")
        return None
    return f


def _vector_var(ds, name, problems, lead_ok):
    """(values (..., 3) broadcastable, lead dims) of a vector variable; None when bad."""
    var = ds[name]
    if var.ndim == 0 or var.shape[-1] != 3 or var.dims[-1] in lead_ok:
        problems.append(f"{name}: needs a last dimension of length 3 (x, y, z), got dims "
                        f"{var.dims} and shape {var.shape}")
        return None
    lead = var.dims[:-1]
    if not set(lead) <= set(lead_ok):
        problems.append(f"{name}: leading dims {lead} must be a subset of {tuple(lead_ok)}")
        return None
    return var


def _field_direction(ds, field, time, target, problems):
    """Return the unit field vector (T, 3) in frame `target`."""
    if field is not None:
        if "position_geo" not in ds.variables:
            problems.append("position_geo: a field model needs the sample positions (time, 3) "
                            "GEO km; or give b_vector (time, 3) with a frame attribute")
            return None
        from ..field.coords import convert
        from ..field.models import as_model

        if target is None:
            return None
        model = as_model(field)
        pos = np.asarray(ds["position_geo"].values, dtype=float)
        b = np.asarray(model.field_geo(pos, time), dtype=float)
        if target != "GEO":
            b = np.asarray(convert(b, time, "GEO", target, model=model), dtype=float)
        return unit_vectors(b)
    if "b_vector" not in ds.variables:
        problems.append("b_vector: missing; give the field vector per time (time, 3) with a "
                        "'frame' attribute, or pass model=... (a field model evaluated at "
                        "position_geo)")
        return None
    var = _vector_var(ds, "b_vector", problems, ("time",))
    if var is None:
        return None
    frame = _frame(var, problems)
    if frame is None or target is None:
        return None
    b = np.broadcast_to(np.asarray(var.values, dtype=float), (time.shape[0], 3))
    if frame != target:
        from ..field.coords import convert

        b = np.asarray(convert(b, time, frame, target), dtype=float)
    return unit_vectors(b)


class SectoredInput:
    """Everything the binning kernel needs from a sectored dataset, checked."""


def read_sectored(ds, edges_deg, field):
    """Check a sectored dataset and the bin edges; return a :class:`SectoredInput`.

    Raises
    ------
    ConventionError
        Listing every problem at once.
    """
    problems = []
    if not isinstance(ds, xr.Dataset):
        raise ConventionError([f"dataset: expected an xarray.Dataset, got {type(ds).__name__}"])
    s = SectoredInput()
    edges = np.asarray(edges_deg, dtype=float)
    if (edges.ndim != 1 or edges.size < 2 or np.any(~np.isfinite(edges))
            or np.any(np.diff(edges) <= 0) or edges[0] < 0 or edges[-1] > 180):
        problems.append("pitch_angle_edges_deg: needs at least two strictly increasing edges "
                        f"in 0-180 degree, got {edges.tolist()}")
    s.edges = edges
    if "counts" in ds.data_vars:
        s.is_counts, s.name = True, "counts"
    elif "flux" in ds.data_vars:
        s.is_counts, s.name = False, "flux"
    else:
        raise ConventionError(["counts: missing; a sectored dataset needs 'counts' (with "
                               "'counts_to_flux') or 'flux', dims (time, energy, sector[, "
                               "detector])"], ds.encoding.get("source"))
    data = ds[s.name]
    dims = set(data.dims)
    need = {"time", "energy", "sector"}
    if not need <= dims or not dims <= need | {"detector"}:
        problems.append(f"{s.name}: dims must be (time, energy, sector) or (time, energy, "
                        f"sector, detector), got {data.dims}")
    s.has_det = "detector" in data.dims
    s.order = ("time", "energy", "sector") + (("detector",) if s.has_det else ())
    s.n_t = ds.sizes.get("time", 0)
    s.n_e = ds.sizes.get("energy", 0)
    s.n_s = ds.sizes.get("sector", 0)
    s.n_d = ds.sizes.get("detector", 1) if s.has_det else 1
    s.n_k = s.n_s * s.n_d
    if s.is_counts:
        if "counts_to_flux" not in ds.variables:
            problems.append("counts_to_flux: missing; counts need the flux per count "
                            f"({FLUX_UNITS!r}), dims a subset of the counts' dims")
        else:
            c2f = ds["counts_to_flux"]
            f = flux_unit_factor(c2f.attrs.get("units", ""))
            if f is None or not set(c2f.dims) <= set(s.order):
                problems.append(f"counts_to_flux: units must be a directional flux per count "
                                f"({FLUX_UNITS!r}) and dims a subset of {s.order}; got "
                                f"{c2f.attrs.get('units')!r}, {c2f.dims}")
            else:
                s.c2f, s.c2f_scale = c2f, f
    else:
        f = flux_unit_factor(data.attrs.get("units", ""))
        if f is None:
            problems.append(f"flux: units {data.attrs.get('units')!r} are not a directional "
                            f"flux; expected {FLUX_UNITS!r}")
        s.flux_scale = f
        s.err = None
        if "flux_err" in ds.data_vars:
            fe = ds["flux_err"]
            fs = flux_unit_factor(fe.attrs.get("units", ""))
            if fs is None or set(fe.dims) != dims:
                problems.append("flux_err: must have flux's dims and directional-flux units")
            else:
                s.err, s.err_scale = fe, fs
    if "time" not in ds.coords or "energy" not in ds.coords:
        problems.append("time, energy: coordinates missing")
        raise ConventionError(problems, ds.encoding.get("source"))
    s.time = ds["time"].values
    # field of view
    if "fov_half_angle" not in ds.variables:
        problems.append("fov_half_angle: missing; give each detector's field-of-view "
                        "half-angle (degree, scalar or (detector,))")
        s.half = None
    else:
        s.half = _deg_values(ds, "fov_half_angle", problems, ("detector",), lo=0.0, hi=90.0,
                             lo_open=True)
    # look geometry
    det_dims = ("detector",) if s.has_det else ()
    if "look_direction" in ds.variables:
        s.mode = 0
        var = _vector_var(ds, "look_direction", problems, ("time", "sector") + det_dims)
        s.frame = _frame(var, problems) if var is not None else None
        s.look = var
    elif "spin_axis" in ds.variables:
        s.mode = 1
        var = _vector_var(ds, "spin_axis", problems, ("time",))
        s.frame = _frame(var, problems) if var is not None else None
        s.spin = var
        for name in ("spin_phase_reference", "sector_phase_bnds", "detector_polar_angle"):
            if name not in ds.variables:
                problems.append(f"{name}: missing (the spin form needs spin_axis, "
                                "spin_phase_reference, sector_phase_bnds and "
                                "detector_polar_angle; docs/conventions.md section 9)")
        if "spin_phase_reference" in ds.variables:
            ref = _vector_var(ds, "spin_phase_reference", problems, ("time",))
            if ref is not None and s.frame is not None:
                rf = _frame(ref, problems)
                rv = np.broadcast_to(np.asarray(ref.values, float), (s.n_t, 3))
                if rf is not None and rf != s.frame:
                    from ..field.coords import convert

                    rv = np.asarray(convert(rv, s.time, rf, s.frame), float)
                s.ref = rv
        s.bnds = s.polar = s.azimuth = None
        if "sector_phase_bnds" in ds.variables:
            pb = ds["sector_phase_bnds"]
            if pb.ndim < 2 or pb.shape[-1] != 2 or "sector" not in pb.dims[:-1] or not set(
                    pb.dims[:-1]) <= {"time", "sector"}:
                problems.append(f"sector_phase_bnds: dims must be (sector, 2) or (time, "
                                f"sector, 2), got {pb.dims}")
            else:
                b = _deg_values(ds, "sector_phase_bnds", problems, pb.dims)
                if b is not None:
                    width = b.isel({pb.dims[-1]: 1}) - b.isel({pb.dims[-1]: 0})
                    if np.any(width.values <= 0) or np.any(width.values > 360):
                        problems.append("sector_phase_bnds: each sector needs start < end <= "
                                        "start + 360 degree (unwrap phases past 360)")
                    else:
                        s.bnds = b
        if "detector_polar_angle" in ds.variables:
            s.polar = _deg_values(ds, "detector_polar_angle", problems, ("detector",), lo=0.0,
                                  hi=180.0)
        if "detector_azimuth" in ds.variables:
            s.azimuth = _deg_values(ds, "detector_azimuth", problems, ("detector",))
    else:
        problems.append("look_direction: missing; give the look directions as unit vectors "
                        "(look_direction, (..., 3) with a 'frame' attribute) or in the spin "
                        "form (spin_axis, spin_phase_reference, sector_phase_bnds, "
                        "detector_polar_angle); docs/conventions.md section 9")
        s.mode, s.frame = -1, None
    s.bhat = _field_direction(ds, field, s.time, s.frame, problems)
    if problems:
        raise ConventionError(problems, ds.encoding.get("source"))
    return s


def _per_look(var, s, with_time):
    """Broadcast a variable over (time?, sector, detector) and flatten the looks: (Tx, K)."""
    dims = (("time",) if with_time else ()) + ("sector", "detector")
    da = var
    if not s.has_det and "detector" not in da.dims:
        da = da.expand_dims(detector=1)
    shape = tuple(s.n_t if d == "time" else s.n_s if d == "sector" else s.n_d for d in dims)
    for d, n in zip(dims, shape):
        if d not in da.dims:
            da = da.expand_dims({d: n})
    arr = np.ascontiguousarray(da.transpose(*dims).values, dtype=float)
    return arr.reshape(arr.shape[:-2] + (s.n_k,)) if with_time else arr.reshape(1, s.n_k)


def look_geometry(s):
    """Return the kernel's geometry arrays.

    (bvec, look, cp0, sp0, cp1, sp1, ph0, ph1, cth, sth, cdel, sdel, psi); psi,
    the spin axis - field angle (degree), is None for look directions.
    """
    half = s.half if s.has_det or "detector" not in s.half.dims else s.half
    hv = np.broadcast_to(np.asarray(half.values, float).reshape(-1), (s.n_d,)) if (
        half.ndim) else np.full(s.n_d, float(half.values))
    hk = np.tile(hv, s.n_s)  # k = sector * n_d + detector
    cdel, sdel = np.cos(hk * _DEG), np.sin(hk * _DEG)
    dummy2 = np.zeros((1, s.n_k))
    if s.mode == 0:
        lv = s.look
        tdim = "time" in lv.dims
        comp = lv.dims[-1]
        parts = [_per_look(lv.isel({comp: c}), s, tdim) for c in range(3)]
        look = unit_vectors(np.stack(parts, axis=-1))  # (Tl, K, 3)
        bvec = np.ascontiguousarray(s.bhat)
        z = np.zeros(s.n_k)
        return (bvec, look, dummy2, dummy2, dummy2, dummy2, dummy2, dummy2, z, z, cdel, sdel,
                None)
    spin = np.asarray(s.spin.values, float)
    ref = s.ref
    if spin.ndim == 1 and ref.strides[0] == 0:  # one spin frame for all times: one row
        spin, ref = spin[None], ref[:1]
    spin = unit_vectors(np.broadcast_to(spin, (ref.shape[0], 3)))
    e1 = unit_vectors(ref - np.einsum("ti,ti->t", ref, spin)[:, None] * spin)
    e2 = np.cross(spin, e1)
    spin, e1, e2 = (np.broadcast_to(a, (s.n_t, 3)) for a in (spin, e1, e2))
    bh = s.bhat
    bvec = np.ascontiguousarray(np.stack([np.einsum("ti,ti->t", bh, spin),
                                          np.einsum("ti,ti->t", bh, e1),
                                          np.einsum("ti,ti->t", bh, e2)], axis=-1))
    psi = np.degrees(np.arccos(np.clip(bvec[:, 0], -1.0, 1.0)))
    bd = s.bnds.dims[-1]
    tdim = "time" in s.bnds.dims
    p0 = _per_look(s.bnds.isel({bd: 0}), s, tdim)
    p1 = _per_look(s.bnds.isel({bd: 1}), s, tdim)
    if s.azimuth is not None:
        az = np.tile(np.broadcast_to(np.asarray(s.azimuth.values, float).reshape(-1),
                                     (s.n_d,)), s.n_s)
        p0, p1 = p0 + az, p1 + az
    p0r, p1r = p0 * _DEG, p1 * _DEG
    pol = np.asarray(s.polar.values, float).reshape(-1)
    pk = np.tile(np.broadcast_to(pol, (s.n_d,)), s.n_s)
    look = np.zeros((1, 1, 3))
    return (bvec, look, np.cos(p0r), np.sin(p0r), np.cos(p1r), np.sin(p1r), p0r, p1r,
            np.cos(pk * _DEG), np.sin(pk * _DEG), cdel, sdel, psi)


def factor_array(var, s, scale):
    """Return a per-look factor variable as an array (T|1, E|1, K) in canonical units."""
    da = var
    for d in ("time", "energy", "sector", "detector"):
        if d == "detector" and not s.has_det:
            continue
        if d not in da.dims:
            da = da.expand_dims({d: 1})
    arr = np.asarray(da.transpose(*s.order).values, dtype=float) * scale
    if not s.has_det:
        arr = arr[..., None]
    arr = np.broadcast_to(arr, arr.shape[:2] + (s.n_s, s.n_d))
    return np.ascontiguousarray(arr).reshape(arr.shape[:2] + (s.n_k,))


def passed_through(ds, s):
    """Variables of `ds` carried into the output: positions, energy bounds, per-time data."""
    keep = {}
    skip = set(INPUT_NAMES)
    for name, var in ds.data_vars.items():
        if name in skip or {"sector", "detector", "pitch_angle"} & set(var.dims):
            continue
        if "time" in var.dims or set(var.dims) <= {"energy", "nv", "bnds"}:
            keep[name] = var
    if "energy_bnds" in ds.variables:
        keep["energy_bnds"] = ds["energy_bnds"]
    return keep
