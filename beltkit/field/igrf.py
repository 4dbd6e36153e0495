r"""IGRF-14 field synthesis: the field vector of the International Geomagnetic Reference Field.

The spherical-harmonic synthesis of the IAGA standard (14th generation) and
its public entry points: :func:`synth_spherical` and :func:`synth_geo` for one
set of Gauss coefficients, :func:`igrf_field_spherical` and
:func:`igrf_field_cartesian` for checked inputs with a time per point. The
coefficient table and its time interpolation live in
:mod:`beltkit.field.igrf_table` (its names are re-exported here:
:func:`igrf_coefficients`, :func:`coefficients_at`, :func:`igrf_table`,
:func:`load_shc`, :class:`IGRFTable`); the compiled kernels in
:mod:`beltkit.field.igrf_kernels`.

Model
-----
Outside the sources the main field is :math:`\mathbf B = -\nabla V` with

.. math::

    V(r, \theta, \phi, t) = a \sum_{n=1}^{N} \left(\frac{a}{r}\right)^{n+1}
        \sum_{m=0}^{n} \left[g_n^m(t) \cos m\phi + h_n^m(t) \sin m\phi\right]
        P_n^m(\cos\theta),

*a* = 6371.2 km (:data:`beltkit.constants.R_E_KM`), :math:`\theta`
geocentric colatitude, :math:`\phi` east longitude and :math:`P_n^m` the
Schmidt semi-normalised associated Legendre functions (no Condon-Shortley
phase). Source: Alken, P., et al. (2021), "International Geomagnetic
Reference Field: the thirteenth generation", *Earth Planets Space* 73, 49
(the model definition, unchanged for IGRF-14); IGRF-14 coefficients:
IAGA V-MOD (2024/2025), doi:10.5281/zenodo.14012302.

Time interpolation: linear in the decimal year between the 5-year epochs,
then the predictive secular variation to 2030.0, undefined outside
1900.0-2030.0 (:mod:`beltkit.field.igrf_table`, which is the only place
the rule is implemented).

Legendre functions by recursion
-------------------------------
With :math:`u = \cos\theta`, :math:`s = \sin\theta`, write
:math:`P_n^m = s^m Q_n^m(u)`. The polynomial parts obey (Schmidt
normalisation, e.g. Langel 1987, "The main field", in *Geomagnetism* vol. 1,
ed. Jacobs, sect. 4.3; Winch et al. 2005, *Geophys. J. Int.* 160, 487)

.. math::

    Q_0^0 = Q_1^1 = 1, \qquad Q_m^m = \sqrt{\tfrac{2m-1}{2m}}\, Q_{m-1}^{m-1}
    \; (m \ge 2),

    Q_n^m = \frac{(2n-1)\,u\,Q_{n-1}^m - \sqrt{(n-1)^2 - m^2}\, Q_{n-2}^m}
                 {\sqrt{n^2 - m^2}} \quad (n > m),

and the same recursion differentiated gives :math:`dQ_n^m/du`. The powers
:math:`s^m` are carried with the longitude factors, :math:`s^m e^{i m\phi}
= (s\,e^{i\phi})^m` (in Cartesian form :math:`((x + i y)/r)^m`), so no
division by :math:`\sin\theta` ever occurs:

.. math::

    B_r &= \sum_n (n+1) \rho_n \sum_m Q_n^m (g_n^m A_m + h_n^m B_m), \\
    B_\theta &= -u \sum_n \rho_n \sum_m m Q_n^m (g_n^m E_m + h_n^m F_m)
               + s \sum_n \rho_n \sum_m \frac{dQ_n^m}{du} (g_n^m A_m + h_n^m B_m), \\
    B_\phi &= \sum_n \rho_n \sum_m m Q_n^m (g_n^m F_m - h_n^m E_m),

with :math:`\rho_n = (a/r)^{n+2}`, :math:`A_m + i B_m = s^m e^{im\phi}` and
:math:`E_m + i F_m = s^{m-1} e^{im\phi}`. At the geographic poles
(:math:`s = 0`) only the *m* = 1 terms survive in :math:`B_\theta` and
:math:`B_\phi`: they are the limits along the given meridian, finite and
exact.

Engines
-------
One engine: compiled kernels (numba, a hard dependency;
:mod:`beltkit.field.igrf_kernels`), one point at a time, column recursion in
*n* for each order *m*, threads over blocks of 256 points. With one time for
all points the coefficients come from :func:`coefficients_at` /
:func:`igrf_coefficients`; with a time per point the kernels receive the
linear pieces of :func:`beltkit.field.igrf_table.time_interpolation` and form
each point's coefficients from them. On the 2-core development machine
(shared with other jobs) the engine evaluated 1.2-2.4 million points per
second (``benchmarks/bench_igrf.py``), about 30 times the reference library
ppigrf. A vectorised numpy implementation of the same recursion, and of the
time rule through the linearity of the field in the coefficients, is kept with
the tests (``tests/igrf_reference.py``) as the reference the kernels are
checked against. The ``backend=`` keyword of the public functions is
deprecated: ``"numba"`` warns and is ignored, ``"numpy"`` is refused.

Tracing code should call :func:`synth_geo` with the coefficients of
:func:`coefficients_at`, or :meth:`beltkit.field.IGRF.field_geo`, which does
exactly that.
"""

from __future__ import annotations

import warnings

import numpy as np

from .._wrap import array_api
from ..errors import FieldModelError
from .earth import INSIDE_EARTH_TOLERANCE_KM, inside_earth
from .igrf_kernels import geo_field, geo_field_timed, spherical_field, spherical_field_timed
from .igrf_table import (
    IGRFTable,
    coefficients_at,
    effective_degree,
    igrf_coefficients,
    igrf_table,
    load_shc,
    time_interpolation,
)
from .timeconv import decimal_year

__all__ = [
    "IGRFTable",
    "coefficients_at",
    "igrf_coefficients",
    "igrf_field_cartesian",
    "igrf_field_spherical",
    "load_shc",
    "synth_geo",
    "synth_spherical",
    "igrf_table",
]

def __getattr__(name):
    if name == "DEFAULT_BACKEND":
        warnings.warn(
            "beltkit.field.igrf.DEFAULT_BACKEND is deprecated and will be removed in the next "
            "release: the compiled (numba) engine is the only one",
            DeprecationWarning, stacklevel=2,
        )
        return "numba"
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def _deprecated_backend(backend, func):
    """Accept the retired ``backend=`` keyword for one release: warn, or refuse "numpy"."""
    if backend is None:
        return
    if backend == "numba":
        warnings.warn(
            f"{func}: argument 'backend' is deprecated and ignored (the compiled engine is the "
            f"only one); drop it, it will be removed in the next release",
            DeprecationWarning, stacklevel=3,
        )
        return
    if backend == "numpy":
        raise FieldModelError(
            f"{func}: backend='numpy' is no longer available (the numpy reference engine "
            f"was retired from the package; it lives with the tests); drop the 'backend' "
            f"argument to use the compiled engine"
        )
    raise FieldModelError(
        f"{func}: argument 'backend' is deprecated and accepts only None or 'numba', "
        f"got {backend!r}; drop it"
    )


def synth_spherical(r_km, colat_deg, lon_deg, g, h, *, backend=None):
    """Field in geocentric spherical components for one set of coefficients.

    Low-level: no checks of radius or time. Flat or any-shaped arrays that
    broadcast together.

    Parameters
    ----------
    r_km, colat_deg, lon_deg : array_like
        Geocentric radius (km), colatitude and east longitude (deg).
    g, h : ndarray, shape (N+1, N+1)
        Gauss coefficients in nT (e.g. from :func:`igrf_coefficients`).
    backend : None
        Deprecated and ignored (the compiled engine is the only one);
        ``"numba"`` warns, ``"numpy"`` is refused. Removed in the next release.

    Returns
    -------
    Br, Btheta, Bphi : ndarray
        Radial (outward), southward and eastward components in nT.
    """
    _deprecated_backend(backend, "synth_spherical")
    r, th, ph = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float)
    )
    shape = r.shape
    u, s, cp, sp = _angle_factors(th.ravel(), ph.ravel())
    g = np.ascontiguousarray(g, dtype=float)
    h = np.ascontiguousarray(h, dtype=float)
    out = np.empty((r.size, 3))
    spherical_field(np.ascontiguousarray(r.ravel()), u, s, cp, sp, g, h,
                    effective_degree(g, h), out)
    return out[:, 0].reshape(shape), out[:, 1].reshape(shape), out[:, 2].reshape(shape)


def _angle_factors(colat_deg, lon_deg):
    """Cosines and sines of flat colatitudes and longitudes in degrees (contiguous)."""
    thr = np.radians(colat_deg)
    phr = np.radians(lon_deg)
    return np.cos(thr), np.sin(thr), np.cos(phr), np.sin(phr)


def synth_geo(xyz_km, g, h, *, backend=None, nmax=None):
    r"""Cartesian GEO field vector for one set of coefficients (fast entry point).

    Low-level: no checks of radius or time, no broadcasting of time. This is
    what :meth:`beltkit.field.IGRF.field_geo` and field-line tracing call.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    g, h : ndarray, shape (N+1, N+1)
        Gauss coefficients in nT of one epoch.
    backend : None
        Deprecated and ignored (the compiled engine is the only one);
        ``"numba"`` warns, ``"numpy"`` is refused. Removed in the next release.
    nmax : int, optional
        Highest degree to sum (default: the highest non-zero one of ``g``,
        ``h``); passing it saves a scan of the coefficients per call.

    Returns
    -------
    ndarray, shape (..., 3)
        :math:`(B_x, B_y, B_z)` in GEO, nT.

    Notes
    -----
    The spherical components from the recursion in the module notes are
    rotated to Cartesian with :math:`B_x = (B_r s + B_\theta u)\cos\phi -
    B_\phi \sin\phi`, :math:`B_y = (B_r s + B_\theta u)\sin\phi + B_\phi
    \cos\phi`, :math:`B_z = B_r u - B_\theta s`. On the rotation axis the
    meridian :math:`\phi = 0` is used; the horizontal vector does not depend
    on that choice.
    """
    _deprecated_backend(backend, "synth_geo")
    xyz = np.asarray(xyz_km, dtype=float)
    shape = xyz.shape
    flat = np.ascontiguousarray(xyz.reshape(-1, 3))
    g = np.ascontiguousarray(g, dtype=float)
    h = np.ascontiguousarray(h, dtype=float)
    nmax = effective_degree(g, h) if nmax is None else int(nmax)
    out = np.empty(flat.shape)
    geo_field(flat, g, h, nmax, out)
    return out.reshape(shape)


@array_api(
    ("nT", "nT", "nT"),
    long_name=("radial magnetic field", "southward magnetic field", "eastward magnetic field"),
    name=("b_r", "b_theta", "b_phi"),
)
def igrf_field_spherical(r_km, colat_deg, lon_deg, time, *, max_degree=13,
                         allow_extrapolation=False, backend=None):
    r"""IGRF-14 field vector in geocentric spherical components.

    Parameters
    ----------
    r_km : array_like
        Geocentric radius in km (IGRF reference radius 6371.2 km).
    colat_deg : array_like
        Geocentric colatitude in degrees, 0-180 (the poles are exact).
    lon_deg : array_like
        East longitude in degrees.
    time : datetime64, datetime, str, float or array_like
        UTC instants or decimal years, broadcast elementwise against the
        points (one time per point, not an outer product).
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0 (see :func:`igrf_coefficients`).
    backend : None
        Deprecated and ignored (the compiled engine is the only one);
        ``"numba"`` warns, ``"numpy"`` is refused. Removed in the next release.

    Returns
    -------
    Br, Btheta, Bphi : ndarray or xarray.DataArray
        Radial (outward), southward and eastward components in nT, shape of
        the broadcast inputs (floats for scalar input; DataArrays with
        ``units`` for DataArray input). NaN inputs give NaN.

    Raises
    ------
    FieldModelError
        For times outside 1900.0-2030.0 (unless allowed), colatitudes outside
        0-180 deg, or points more than 10 km below the WGS-84 ellipsoid (the
        rule of :func:`beltkit.field.models.check_positions`).

    Notes
    -----
    Spherical-harmonic synthesis of :math:`\mathbf B = -\nabla V` (module
    notes; IAGA IGRF-14) with Schmidt semi-normalised Legendre functions by
    recursion. Each point's coefficients follow the IGRF time rule of
    :func:`beltkit.field.igrf_table.time_interpolation`,
    :math:`g(t) = g(T_k) + (t - T_k)\,\dot g_k`, formed point by point in
    the compiled kernel.

    Examples
    --------
    >>> br, bt, bp = igrf_field_spherical(6371.2, 90.0, 0.0, "2020-01-01")
    >>> round(float(bt))  # northward field on the equator is -Btheta
    -27637
    """
    _deprecated_backend(backend, "igrf_field_spherical")
    r, th, ph, t = np.broadcast_arrays(
        np.asarray(r_km, float), np.asarray(colat_deg, float), np.asarray(lon_deg, float),
        np.asarray(decimal_year(time), dtype=float),
    )
    shape = r.shape
    u, s, cp, sp = _angle_factors(th.ravel(), ph.ravel())
    rr = np.ascontiguousarray(r.ravel())
    _check_spherical(rr, th.ravel(), u, s)
    interp = time_interpolation(t.ravel(), max_degree=max_degree,
                                allow_extrapolation=allow_extrapolation)
    out = np.empty((rr.size, 3))
    spherical_field_timed(rr, u, s, cp, sp, *interp.pieces(), interp.max_degree, out)
    return out[:, 0].reshape(shape), out[:, 1].reshape(shape), out[:, 2].reshape(shape)


def _check_spherical(r, colat, u, s):
    """Refuse colatitudes outside 0-180 deg and points inside the Earth (NaN ignored)."""
    bad = (colat < 0.0) | (colat > 180.0)
    if np.any(bad):
        raise FieldModelError(
            f"argument 'colat_deg' must lie in [0, 180] degrees (geocentric colatitude); "
            f"got {colat[bad][0]:g}"
        )
    inside = inside_earth((r * s) ** 2, r * u)
    if np.any(inside):
        raise FieldModelError(
            f"argument 'r_km': {int(inside.sum())} point(s) inside the Earth (e.g. "
            f"{r[inside][0]:g} km, more than {INSIDE_EARTH_TOLERANCE_KM:g} km below the "
            f"WGS-84 surface); give the geocentric radius in km"
        )


def igrf_field_cartesian(xyz_km, time, *, max_degree=13, allow_extrapolation=False,
                         backend=None):
    r"""IGRF-14 field vector in GEO Cartesian components, with per-point times.

    Parameters
    ----------
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    time : datetime64, datetime, str, float or array_like
        Broadcast against ``xyz_km[..., 0]``.
    max_degree : int
        Truncation degree, 1-13.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0.
    backend : None
        Deprecated and ignored (the compiled engine is the only one);
        ``"numba"`` warns, ``"numpy"`` is refused. Removed in the next release.

    Returns
    -------
    ndarray, shape (..., 3)
        GEO :math:`(B_x, B_y, B_z)` in nT; NaN positions or times give NaN.

    Raises
    ------
    FieldModelError
        For times outside 1900.0-2030.0 (unless allowed).

    Notes
    -----
    Each point's coefficients follow the IGRF time rule of
    :func:`beltkit.field.igrf_table.time_interpolation`, formed point by point
    in the compiled kernel; no position check (``IGRF().field_geo`` does it).
    """
    _deprecated_backend(backend, "igrf_field_cartesian")
    xyz = np.asarray(xyz_km, dtype=float)
    t = np.asarray(decimal_year(time), dtype=float)
    lead = np.broadcast_shapes(xyz.shape[:-1], t.shape)
    flat = np.ascontiguousarray(np.broadcast_to(xyz, lead + (3,)).reshape(-1, 3))
    interp = time_interpolation(np.broadcast_to(t, lead), max_degree=max_degree,
                                allow_extrapolation=allow_extrapolation)
    out = np.empty(flat.shape)
    geo_field_timed(flat, *interp.pieces(), interp.max_degree, out)
    return out.reshape(lead + (3,))
