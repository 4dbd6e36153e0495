r"""Pitch angle and gyrophase of the particles that enter a detector.

A detector whose boresight points along :math:`\hat{\mathbf l}` counts the
particles that arrive from that direction, so they move along
:math:`\mathbf v = -\hat{\mathbf l}` (the arrival convention of the
pitch-angle data conventions, ``docs/conventions.md`` section 4). Their pitch
angle in the field :math:`\mathbf B` is the angle between
:math:`\mathbf v` and :math:`\mathbf B`; their gyrophase is the angle of
:math:`\mathbf v_\perp` about :math:`\mathbf B`, measured from a reference
direction projected onto the plane perpendicular to :math:`\mathbf B`.

Both functions take Cartesian vectors with a trailing axis of length 3 (any
length; numpy broadcasting over the leading axes), return degrees, give NaN
where a vector is zero or NaN, and accept :class:`xarray.DataArray` input (the
last dimension is the vector's), returning a DataArray with ``units`` and
``long_name``. Vectors given in different frames are rotated into one first
(``look_frame``/``b_frame`` keywords, or a ``frame`` attribute on the
DataArrays) with :func:`beltkit.field.convert`.
"""

from __future__ import annotations

import numpy as np

from ..errors import PhysicsError

__all__ = ["gyrophase", "look_pitch_angle"]


def _vectors(value, name):
    """Return (float ndarray with trailing axis 3, DataArray or None)."""
    da = value if (hasattr(value, "dims") and hasattr(value, "attrs")) else None
    arr = np.asarray(value.values if da is not None else value, dtype=float)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise PhysicsError(f"argument {name!r} must have a trailing axis of length 3 (x, y, z); "
                           f"got shape {arr.shape}")
    return arr, da


def _frame_of(da, given, name):
    if given is not None:
        return str(given).strip().upper()
    if da is not None and "frame" in da.attrs:
        return str(da.attrs["frame"]).strip().upper()
    return None


def _same_frame(vec, da, frame, target, time, model, name):
    """Rotate `vec` from `frame` into `target` (beltkit.field.convert) when they differ."""
    if frame is None or target is None or frame == target:
        return vec
    from ..field.coords import convert

    if time is None and da is not None and "time" in da.coords:
        time = da["time"].values
    if time is None:
        raise PhysicsError(f"argument {name!r} is in frame {frame} and the look in {target}: "
                           "pass time=... (UTC) so that the field can be rotated into the "
                           "look's frame")
    t = np.asarray(time)
    if t.ndim and t.shape != vec.shape[:-1]:
        t = t.reshape(t.shape + (1,) * (vec.ndim - 1 - t.ndim))
    return np.asarray(convert(vec, t, frame, target, model=model), dtype=float)


def _unit(v):
    """Return unit vectors; NaN where the vector is zero or not finite."""
    norm = np.sqrt(np.einsum("...i,...i->...", v, v))
    ok = np.isfinite(norm) & (norm > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok[..., None], v / np.where(ok, norm, 1.0)[..., None], np.nan)


def _angle_deg(a, b):
    """Angle between unit vectors a and b (deg), from atan2(|a x b|, a . b) (exact near 0, 180)."""
    cross = np.cross(a, b)
    sin = np.sqrt(np.einsum("...i,...i->...", cross, cross))
    cos = np.einsum("...i,...i->...", a, b)
    return np.degrees(np.arctan2(sin, cos))


def _wrap(result, das, long_name):
    """DataArray out for DataArray in: the broadcast of the inputs without their vector dims."""
    das = [d for d in das if d is not None]
    if not das:
        return float(result) if np.ndim(result) == 0 else result
    import xarray as xr

    templates = [d.isel({d.dims[-1]: 0}, drop=True) for d in das]
    templates = [t.drop_vars([c for c in t.coords if c not in t.dims and c != "time"])
                 for t in templates]
    dims, shape = [], []
    for t in templates:  # the leading dims, in order of appearance
        for d, n in zip(t.dims, t.shape):
            if d not in dims:
                dims.append(d)
                shape.append(n)
    if tuple(shape) != np.shape(result):  # numpy-style broadcasting beyond the names
        return result
    coords = {}
    for t in templates:
        for c, v in t.coords.items():
            coords.setdefault(c, v)
    return xr.DataArray(result, dims=dims, coords=coords,
                        attrs={"units": "degree", "long_name": long_name})


def _prepare(look_xyz, b_xyz, look_frame, b_frame, time, model):
    look, lda = _vectors(look_xyz, "look_xyz")
    b, bda = _vectors(b_xyz, "b_xyz")
    lf = _frame_of(lda, look_frame, "look_xyz")
    bf = _frame_of(bda, b_frame, "b_xyz")
    if (lf is None) != (bf is None):
        raise PhysicsError("give the frames of both look_xyz and b_xyz (look_frame=, b_frame= "
                           "or a 'frame' attribute), or of neither (then they must share one)")
    b = _same_frame(b, bda, bf, lf, time, model, "b_xyz")
    if lda is not None and bda is not None and lda.dims[:-1] != bda.dims[:-1]:
        # align by name: move the vector axis last after broadcasting the leading dims
        import xarray as xr

        l2 = lda.copy(data=look)
        b2 = bda.copy(data=b)
        lv, bv = lda.dims[-1], bda.dims[-1]
        if lv != bv:
            b2 = b2.rename({bv: lv})
        l2, b2 = xr.broadcast(l2, b2)
        lead = [d for d in l2.dims if d != lv]
        look = l2.transpose(*lead, lv).values
        b = b2.transpose(*lead, lv).values
    return look, lda, b, bda


def look_pitch_angle(look_xyz, b_xyz, *, look_frame=None, b_frame=None, time=None,
                     model=None):
    r"""Pitch angle (deg) of the particles that enter a detector looking along `look_xyz`.

    The particles move along minus the boresight, so

    .. math::
        \alpha = \angle(-\hat{\mathbf l}, \mathbf B)
        = \operatorname{atan2}\left(|\hat{\mathbf l} \times \hat{\mathbf b}|,
        \,-\hat{\mathbf l}\cdot\hat{\mathbf b}\right)
        = 180^\circ - \angle(\hat{\mathbf l}, \mathbf B)

    (the pitch angle is the angle between velocity and field, common practice;
    the atan2 form keeps full precision near 0 and 180 deg). A boresight along
    B sees pitch angle 180 (particles moving against B), one against B sees 0.

    Parameters
    ----------
    look_xyz : array_like or xarray.DataArray, shape (..., 3)
        Boresight directions (any length).
    b_xyz : array_like or xarray.DataArray, shape (..., 3)
        Magnetic field vectors (any unit), broadcast against `look_xyz`.
    look_frame, b_frame : str, optional
        Frames of the two (``"GEO"``, ``"MAG"``, ``"GSE"``, ``"GSM"``, ``"SM"``);
        default: the DataArrays' ``frame`` attribute. When they differ, B is
        rotated into the look's frame with :func:`beltkit.field.convert`.
    time : array_like of datetime64, optional
        UTC times of the vectors, needed when the frames differ (default:
        the DataArrays' ``time`` coordinate).
    model : FieldModel or str, optional
        Dipole axis for MAG, GSM, SM (default the IGRF-14 centred dipole).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Pitch angle in degree, 0-180; NaN where either vector is zero or NaN.

    Examples
    --------
    >>> look_pitch_angle([0.0, 0.0, 1.0], [0.0, 0.0, -30000.0])
    0.0
    >>> round(look_pitch_angle([1.0, 0.0, 0.0], [1.0, 1.0, 0.0]), 6)
    135.0
    """
    look, lda, b, bda = _prepare(look_xyz, b_xyz, look_frame, b_frame, time, model)
    alpha = _angle_deg(-_unit(look), _unit(b))
    return _wrap(alpha, [lda, bda], "pitch angle of the particles entering the detector")


def gyrophase(look_xyz, b_xyz, reference_xyz, *, look_frame=None, b_frame=None, time=None,
              model=None):
    r"""Gyrophase (deg, 0-360) of the particles that enter a detector looking along `look_xyz`.

    With :math:`\hat{\mathbf b}` the field direction, the particles' velocity
    direction :math:`\mathbf v = -\hat{\mathbf l}` and the reference
    :math:`\mathbf r`, both projected onto the plane perpendicular to B,

    .. math::
        \mathbf e_1 = \frac{\mathbf r - (\mathbf r\cdot\hat{\mathbf b})\hat{\mathbf b}}
        {|\cdot|}, \quad \mathbf e_2 = \hat{\mathbf b} \times \mathbf e_1, \quad
        \varphi = \operatorname{atan2}(\mathbf v\cdot\mathbf e_2,
        \,\mathbf v\cdot\mathbf e_1)

    so the gyrophase increases in the right-handed sense about B (the sense
    in which ions gyrate is the opposite, electrons the same; spherical
    geometry, common practice).

    Parameters
    ----------
    look_xyz, b_xyz : array_like or xarray.DataArray, shape (..., 3)
        Boresight and field vectors, as for :func:`look_pitch_angle`.
    reference_xyz : array_like or xarray.DataArray, shape (..., 3)
        Reference direction in the look's frame (for example the direction
        to the Sun); its projection onto the plane perpendicular to B is
        gyrophase 0.
    look_frame, b_frame, time, model
        As for :func:`look_pitch_angle`.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        Gyrophase in degree, in [0, 360); NaN where a vector is zero or NaN,
        where the reference is parallel to B, or where the look is along B
        (no perpendicular velocity).

    Examples
    --------
    >>> gyrophase([0.0, -1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0])
    90.0
    """
    look, lda, b, bda = _prepare(look_xyz, b_xyz, look_frame, b_frame, time, model)
    ref, rda = _vectors(reference_xyz, "reference_xyz")
    bh = _unit(b)
    v = -_unit(look)
    r = _unit(ref)
    e1 = _unit(r - np.einsum("...i,...i->...", r, bh)[..., None] * bh)
    par = np.abs(np.einsum("...i,...i->...", v, bh))
    e2 = np.cross(bh, e1)
    x = np.einsum("...i,...i->...", v, e1)
    y = np.einsum("...i,...i->...", v, e2)
    with np.errstate(invalid="ignore"):
        phase = np.mod(np.degrees(np.arctan2(y, x)), 360.0)
        phase = np.where(phase >= 360.0, 0.0, phase)  # -tiny mod 360 rounds to 360
        phase = np.where(par < 1.0 - 1e-12, phase, np.nan)
    return _wrap(phase, [lda, bda, rda], "gyrophase of the particles entering the detector")
