r"""L-shells: the dipole L of a position and McIlwain's L from the integral invariant.

McIlwain (1961, J. Geophys. Res. 66, 3681) labelled a drift shell by the pair
(B_m, I) of a particle's mirror field and integral invariant
:math:`I = \int \sqrt{1 - B/B_m}\,ds` between its mirror points, and mapped
the pair to the equatorial radius of the dipole shell that has the same pair:
his L. Hilton (1971, J. Geophys. Res. 76, 6952) gave a closed-form
approximation of McIlwain's tabulated function, used here.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._wrap import array_api, as_float_array
from ..constants import R_E_KM
from ..errors import PhysicsError
from .points import broadcast_time, positions, start_points

__all__ = ["dipole_l", "hilton_l", "kp_level_variable", "mcilwain_l", "model_attrs",
           "open_reason_variable"]

# Hilton (1971) coefficients (from memory; verified in tests/field/test_lshell.py by
# quadrature of I in a dipole, which gives back the dipole L to better than 3e-4)
_HILTON_A = (1.35047, 0.465376, 0.0475455)


@array_api("1", long_name="dipole L-shell", name="L")
def dipole_l(r_re, mlat_deg):
    r"""Dipole L-shell of a point at radius `r_re` and magnetic latitude `mlat_deg`.

    Parameters
    ----------
    r_re : array_like
        Geocentric distance in Earth radii (R_E = 6371.2 km).
    mlat_deg : array_like
        Magnetic (dipole) latitude in degrees, in [-90, 90].

    Returns
    -------
    float, ndarray or DataArray
        :math:`L` (dimensionless, in R_E); NaN propagates.

    Notes
    -----
    From the dipole field-line equation :math:`r = L\cos^2\lambda`
    (e.g. Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 1):

    .. math:: L = \frac{r}{\cos^2\lambda}

    Examples
    --------
    >>> round(dipole_l(2.0, 45.0), 6)
    4.0
    """
    r = as_float_array(r_re, "r_re")
    lam = as_float_array(mlat_deg, "mlat_deg")
    with np.errstate(invalid="ignore"):
        if np.any(r[np.isfinite(r)] <= 0):
            raise PhysicsError("argument 'r_re' must be a positive distance in Earth radii")
        if np.any(np.abs(lam[np.isfinite(lam)]) > 90):
            raise PhysicsError("argument 'mlat_deg' must lie in [-90, 90] degrees")
    with np.errstate(divide="ignore"):
        return r / np.cos(np.radians(lam)) ** 2


@array_api("1", long_name="McIlwain L (Hilton 1971 approximation)", name="L")
def hilton_l(b_m_nt, i_km, b0_nt):
    r"""McIlwain's L from the mirror field and integral invariant (Hilton 1971).

    Parameters
    ----------
    b_m_nt : array_like
        Mirror-point field magnitude :math:`B_m`, nT.
    i_km : array_like
        Integral invariant :math:`I`, km (>= 0).
    b0_nt : array_like
        Dipole equatorial surface field of the epoch,
        :math:`B_0 = \sqrt{g_{10}^2 + g_{11}^2 + h_{11}^2}` in nT (the dipole
        moment :math:`M = B_0 R_E^3`).

    Returns
    -------
    float, ndarray or DataArray
        McIlwain :math:`L` in R_E; NaN propagates.

    Notes
    -----
    Hilton's (1971, J. Geophys. Res. 76, 6952) approximation of McIlwain's
    (1961, J. Geophys. Res. 66, 3681) function, with :math:`I` in R_E:

    .. math::

        \frac{L^3 B_m}{M} = 1 + a_1 X^{1/3} + a_2 X^{2/3} + a_3 X,
        \qquad X = \frac{I^3 B_m}{M},

    :math:`a_1 = 1.35047`, :math:`a_2 = 0.465376`, :math:`a_3 = 0.0475455`.
    For :math:`I = 0` (equatorially mirroring particles) it gives the dipole
    relation :math:`L^3 = M / B_m`. In a dipole the formula returns the
    shell's own L to a few parts in :math:`10^4` (checked by quadrature in the
    tests).

    Examples
    --------
    >>> round(hilton_l(30000.0 / 27.0, 0.0, 30000.0), 9)
    3.0
    """
    bm = as_float_array(b_m_nt, "b_m_nt")
    i = as_float_array(i_km, "i_km")
    b0 = as_float_array(b0_nt, "b0_nt")
    with np.errstate(invalid="ignore"):
        if np.any(bm[np.isfinite(bm)] <= 0):
            raise PhysicsError("argument 'b_m_nt' must be a positive field magnitude in nT")
        if np.any(i[np.isfinite(i)] < 0):
            raise PhysicsError("argument 'i_km' must be >= 0 km (an integral of a square root)")
        if np.any(b0[np.isfinite(b0)] <= 0):
            raise PhysicsError("argument 'b0_nt' must be a positive field magnitude in nT")
    x = (i / R_E_KM) ** 3 * bm / b0
    a1, a2, a3 = _HILTON_A
    x3 = np.cbrt(x)
    return np.cbrt(b0 / bm * (1 + a1 * x3 + a2 * x3**2 + a3 * x))


def needs_surface(lines, b_m):
    """Flag closed lines whose mirror field `b_m` exceeds a footpoint field (mirror below)."""
    from .trace_integral import FOOT_TOLERANCE

    with np.errstate(invalid="ignore"):
        weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
        return lines.closed & (b_m > weak * (1 + FOOT_TOLERANCE))


def l_to_surface(model, xyz_km, time, b_m_nt, b0_nt, **trace_options):
    """McIlwain L with the lines traced down to the surface (for mirror points below 100 km).

    Parameters
    ----------
    model : FieldModel
        Field model.
    xyz_km : ndarray (N, 3)
        GEO positions, km.
    time : scalar or ndarray (N,)
        Times.
    b_m_nt, b0_nt : ndarray (N,)
        Mirror fields and dipole fields of the epoch, nT.
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines`.

    Returns
    -------
    ndarray (N,)
        L (NaN where the mirror point lies below the surface too).
    """
    from .trace import trace_lines

    lines = trace_lines(model, xyz_km, time, 0.0, arg_name="xyz_km", **trace_options)
    i_km = lines.integral_invariant(b_m_nt)
    out = np.full(i_km.shape, np.nan)
    ok = np.isfinite(i_km)
    out[ok] = hilton_l(b_m_nt[ok], i_km[ok], np.asarray(b0_nt)[ok])
    return out


def model_attrs(model) -> dict:
    """Attributes naming the field model of an output and, for T89, its activity.

    Parameters
    ----------
    model : FieldModel
        The model used.

    Returns
    -------
    dict
        ``field_model`` (the model's short name, e.g. ``"t89"``),
        ``field_model_description`` (its ``repr``: internal model, Kp level
        or Kp series); for a model with one fixed Kp also ``kp`` (the value
        given) and ``kp_level`` (the coefficient set, 0-6).
    """
    out = {"field_model": str(getattr(model, "name", type(model).__name__)),
           "field_model_description": repr(model)}
    if getattr(model, "level", None) is not None and getattr(model, "kp", None) is not None:
        out["kp"] = float(model.kp)
        out["kp_level"] = int(model.level)
    return out


def kp_level_variable(model, time, lead, dims):
    """Per-sample Kp level (coefficient set 0-6) of a Kp-parameterised model, else None.

    Parameters
    ----------
    model : FieldModel
        The model used; only one with ``levels(time)`` (:class:`~beltkit.field.T89`)
        gets a variable.
    time : scalar or ndarray
        The samples' times (flat, or one time).
    lead : tuple
        Leading shape of the samples.
    dims : tuple of str
        Their dimension names.

    Returns
    -------
    xarray.Variable or None
        int8, -1 where Kp is undefined (NaN or NaT), with CF ``flag_values``
        and ``flag_meanings`` (the Kp interval of each set).
    """
    levels = getattr(model, "levels", None)
    if levels is None:
        return None
    from .t89 import KP_LEVEL_RANGES

    lev = np.broadcast_to(np.asarray(levels(time), dtype=np.int8), lead)
    meanings = ["kp_undefined"] + [f"kp_{lo:g}_to_{hi:g}" for lo, hi in KP_LEVEL_RANGES]
    return xr.Variable(dims, np.array(lev, dtype=np.int8), {
        "long_name": "Kp level (coefficient set) of the Tsyganenko 1989 model used",
        "flag_values": np.arange(-1, len(KP_LEVEL_RANGES), dtype=np.int8),
        "flag_meanings": " ".join(meanings).replace(".", "p")})


def open_reason_variable(reason, lead, dims):
    """``open_reason`` of traced lines as a CF flag variable (flags of ``OPEN_REASONS``)."""
    from .trace_ends import OPEN_REASONS

    return xr.Variable(dims, np.asarray(reason, dtype=np.int8).reshape(lead), {
        "long_name": "why the field line through the sample is open (0: not open)",
        "flag_values": np.array(sorted(OPEN_REASONS), dtype=np.int8),
        "flag_meanings": " ".join(OPEN_REASONS[k] for k in sorted(OPEN_REASONS))})




def mcilwain_l(model, xyz_km, time, alpha_local_deg=90.0, altitude_km=100.0, *,
               as_dataset=False, **trace_options):
    r"""McIlwain L of particles at GEO positions with a given local pitch angle.

    Parameters
    ----------
    model : FieldModel
        Field model (e.g. :class:`beltkit.field.IGRF`); it must provide
        ``field_geo`` and ``dipole_b0_nt(time)`` (the epoch's dipole moment).
    xyz_km : array_like or DataArray, shape (..., 3)
        Positions, GEO Cartesian km.
    time : numpy.datetime64 or array_like
        Time(s), broadcast against the leading dimensions of `xyz_km`.
    alpha_local_deg : array_like, default 90
        Local pitch angle in degrees, broadcast against the leading
        dimensions; sets the mirror field :math:`B_m = B_{local}/\sin^2\alpha`.
    altitude_km : float, default 100
        Stop altitude of the tracing, in km above the sphere of radius
        R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the
        ellipsoid. Lines whose mirror point lies below it are traced again
        down to the surface (that reference sphere);
        particles that would mirror below the surface get NaN.
    as_dataset : bool, default False, keyword-only
        Return an :class:`xarray.Dataset` (dimension ``sample`` for numpy
        input) with ``L``, ``open``, ``open_reason`` and, for a
        Kp-parameterised model, ``kp_level`` instead of the bare L.
    **trace_options
        Passed to :func:`beltkit.field.trace.trace_lines` (``rtol``, ...).

    Returns
    -------
    ndarray, DataArray or Dataset
        McIlwain L with the leading shape of `xyz_km` (a DataArray, with the
        leading dimensions, for DataArray input). NaN for NaN positions, open
        field lines and mirror points below the stop altitude. A DataArray
        carries the coordinate ``open_reason`` (CF flags of
        :data:`beltkit.field.trace_ends.OPEN_REASONS`: why a line is open), for
        :class:`~beltkit.field.T89` also ``kp_level``, and the attributes of
        :func:`model_attrs` (which model and Kp).

    Notes
    -----
    The field line through each position is traced
    (:func:`beltkit.field.trace`), :math:`I = \int\sqrt{1 - B/B_m}\,ds` is
    integrated between the mirror points (Roederer 1970, ch. 3), and L
    follows from :math:`(B_m, I)` by Hilton's (1971) approximation of
    McIlwain's (1961) function (:func:`hilton_l`) with the dipole moment of
    the epoch of each sample.
    """
    from .trace import blocks, time_block, trace_lines

    x, lead, dims, coords = positions(xyz_km)
    n = int(np.prod(lead)) if lead else 1
    t = broadcast_time(time, lead)
    alpha = as_float_array(alpha_local_deg.values if isinstance(alpha_local_deg, xr.DataArray)
                           else alpha_local_deg, "alpha_local_deg")
    with np.errstate(invalid="ignore"):
        if np.any((alpha[np.isfinite(alpha)] <= 0) | (alpha[np.isfinite(alpha)] > 180)):
            raise PhysicsError("argument 'alpha_local_deg' must lie in (0, 180] degrees")
    try:
        alpha = np.broadcast_to(alpha, lead).reshape(-1)
    except ValueError as exc:
        raise PhysicsError(
            f"argument 'alpha_local_deg' of shape {alpha.shape} does not broadcast against "
            f"the positions' leading shape {lead}"
        ) from exc
    x = x.reshape(-1, 3)
    start_points(x, R_E_KM + float(altitude_km), "xyz_km")  # fail before any tracing
    b0 = np.broadcast_to(np.asarray(model.dipole_b0_nt(t), dtype=float), (n,))
    out = np.full(n, np.nan)
    reason = np.zeros(n, dtype=np.int8)
    for sl in blocks(n):  # batches of lines (bounded memory), not single samples
        lines = trace_lines(model, x[sl], time_block(t, sl), altitude_km, arg_name="xyz_km",
                            **trace_options)
        reason[sl] = _open_reason(lines)
        b_m = lines.b_start / np.sin(np.radians(alpha[sl])) ** 2
        i_km = lines.integral_invariant(b_m)
        ok = np.isfinite(i_km)
        view = out[sl]
        view[ok] = hilton_l(b_m[ok], i_km[ok], b0[sl][ok])
        deeper = needs_surface(lines, b_m) & ~ok
        if np.any(deeper):
            tb = time_block(t, sl)
            view[deeper] = l_to_surface(model, x[sl][deeper], tb[deeper] if np.ndim(tb) else tb,
                                        b_m[deeper], b0[sl][deeper], **trace_options)
    out = out.reshape(lead)
    if dims is None and not as_dataset:
        return out if lead else float(out)
    if dims is None:
        dims = ("sample",) if len(lead) == 1 else tuple(f"sample_{i}" for i in range(len(lead)))
    extra = {"open_reason": open_reason_variable(reason, lead, dims)}
    kp = kp_level_variable(model, t, lead, dims)
    if kp is not None:
        extra["kp_level"] = kp
    attrs = {"units": "1", "long_name": "McIlwain L", **model_attrs(model)}
    if as_dataset:
        ds = xr.Dataset({"L": xr.Variable(dims, out, {"units": "1", "long_name": "McIlwain L",
                                                      "ancillary_variables": "open_reason"}),
                         "open": xr.Variable(dims, reason > 0, {
                             "long_name": "field line open: no footpoint (see open_reason)"}),
                         **extra}, coords=coords or None)
        ds.attrs.update(model_attrs(model))
        return ds
    return xr.DataArray(out, dims=dims, coords={**(coords or {}), **extra}, name="L",
                        attrs=attrs)


def _open_reason(lines):
    """Open-line reason codes of traced lines (3, the step limit, for open lines without one)."""
    if lines.open_reason is not None:
        return np.asarray(lines.open_reason, dtype=np.int8)
    return np.where(lines.open, 3, 0).astype(np.int8)
