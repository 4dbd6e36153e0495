r"""Geomagnetic field models behind one small interface.

Every computation in :mod:`beltkit.field` (tracing, L, loss cones, frames)
takes a *field model*: an object with the field vector at GEO Cartesian
points and times (:class:`FieldModel`). Two implementations:

:class:`CenteredDipole`
    The tilted centred dipole of the epoch, from the first-degree IGRF-14
    Gauss coefficients :math:`g_1^0, g_1^1, h_1^1` of the evaluation time
    (or frozen at a fixed epoch). Fast; the default.
:class:`IGRF`
    The full IGRF-14 main field to degree 13 (:mod:`beltkit.field.igrf`).

Conventions
-----------
* Positions: GEO Cartesian km, trailing axis of length 3; fields in nT, the
  same shape.
* Time: numpy datetime64 (UTC), datetime, ISO string or decimal year,
  broadcast against the points' leading shape.
* Points deeper than :data:`INSIDE_EARTH_TOLERANCE_KM` below the WGS-84
  ellipsoid raise :class:`~beltkit.errors.FieldModelError` (a unit mistake,
  R_E given as km or metres given as km, is the usual cause); NaN positions
  give a NaN field.
* The dipole axis (:meth:`FieldModel.dipole_axis_geo`) is the unit vector
  from the Earth's centre towards the *northern* geomagnetic (dipole) pole,
  near 80.6 N, 72.7 W in 2020. The dipole *moment* points the other way
  (towards the southern hemisphere): :math:`\hat{\mathbf m} =
  (g_1^1, h_1^1, g_1^0) / B_0`. This axis is the +Z axis of the MAG and SM
  frames (:mod:`beltkit.field.coords`).
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np

from ..constants import R_E_KM
from ..errors import FieldModelError
from . import igrf as _igrf
from .earth import INSIDE_EARTH_TOLERANCE_KM, check_positions
from .igrf_table import time_interpolation
from .timeconv import decimal_year

__all__ = [
    "INSIDE_EARTH_TOLERANCE_KM",
    "CenteredDipole",
    "FieldModel",
    "IGRF",
    "as_model",
    "check_positions",
    "model_inside",
    "dipole_coefficients",
]

#: Decimal-year resolution of :meth:`epoch_key` for time-dependent models.
EPOCH_RESOLUTION_YEARS = 0.1


@runtime_checkable
class FieldModel(Protocol):
    """The interface every geomagnetic field model provides.

    Attributes
    ----------
    name : str
        Short identifier, e.g. ``"dipole"``, ``"igrf"`` or ``"t89"``.

    Notes
    -----
    Optional methods, honoured where present (:func:`model_inside`):

    ``inside(xyz_km, time) -> bool array``
        The model's region of validity (e.g. the magnetopause of
        :class:`~beltkit.field.T89`); field-line tracing stops lines that
        leave it and reports them open. Models without it (the dipole, IGRF)
        are valid everywhere above the surface.
    ``at_time(time) -> FieldModel``
        The model with its time-varying parameters (e.g. a Kp series) fixed
        at ``time``; cached tables are built with it.
    ``cache_epoch(time)``
        The time at which a table cached under ``epoch_key(time)`` is built.
    """

    name: str

    def field_geo(self, xyz_km, time) -> np.ndarray:
        """Field vector (nT, GEO Cartesian, shape ``(..., 3)``) at GEO points (km)."""
        ...

    def dipole_b0_nt(self, time) -> np.ndarray:
        """Equatorial surface field of the epoch's centred dipole (nT)."""
        ...

    def dipole_axis_geo(self, time) -> np.ndarray:
        """Return the unit vector (GEO) towards the northern dipole pole, shape ``(..., 3)``."""
        ...

    def epoch_key(self, time) -> str:
        """Hashable text identifying the field at ``time`` for caches."""
        ...


def dipole_coefficients(time, *, allow_extrapolation: bool = False):
    """IGRF-14 first-degree Gauss coefficients at the given times.

    Parameters
    ----------
    time : datetime64, datetime, str, float or array_like
        UTC instants or decimal years.
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0.

    Returns
    -------
    g10, g11, h11 : ndarray
        :math:`g_1^0, g_1^1, h_1^1` in nT, shape of ``time`` (IGRF time
        interpolation, :func:`beltkit.field.igrf.igrf_coefficients`).
    """
    t = np.asarray(decimal_year(time), dtype=float)
    if t.ndim == 0:
        g, h, _ = _igrf.coefficients_at(float(t), 1, allow_extrapolation)
        return g[1, 0].copy(), g[1, 1].copy(), h[1, 1].copy()
    # interpolate only the three first-degree coefficients (per-sample times of a
    # long data set would make the full (..., 14, 14) tables very large)
    interp = time_interpolation(t, max_degree=1, allow_extrapolation=allow_extrapolation)
    g10 = interp.coefficients(1, 0)[0]
    g11, h11 = interp.coefficients(1, 1)
    return g10, g11, h11


def _dipole_vector(time, allow_extrapolation):
    g10, g11, h11 = dipole_coefficients(time, allow_extrapolation=allow_extrapolation)
    return np.stack([g11, h11, g10], axis=-1)


def _dipole_field(xyz, d):
    """Field of the centred dipole with potential a^3 (d . r) / r^3, d = (g11, h11, g10)."""
    r2 = np.sum(xyz * xyz, axis=-1, keepdims=True)
    r = np.sqrt(r2)
    dr = np.sum(d * xyz, axis=-1, keepdims=True)
    a3 = R_E_KM**3
    return a3 * (3.0 * dr * xyz / (r2 * r2 * r) - d / (r2 * r))


def _key_year(t):
    return np.round(np.asarray(t, float) / EPOCH_RESOLUTION_YEARS) * EPOCH_RESOLUTION_YEARS


def _keys(prefix, t):
    t = np.asarray(t, float)
    fmt = np.vectorize(lambda v: f"{prefix}@{v:.1f}", otypes=[object])
    out = fmt(_key_year(t))
    return str(out) if out.ndim == 0 else out.astype(str)


class CenteredDipole:
    r"""The tilted centred dipole of the IGRF-14 first-degree coefficients.

    Parameters
    ----------
    epoch : datetime64, datetime, str, float, optional
        Freeze the dipole at this time. By default the dipole of each
        evaluation time is used (it drifts by about 0.05 deg/yr).
    allow_extrapolation : bool
        Allow times outside IGRF-14's 1900.0-2030.0.

    Notes
    -----
    .. math::

        V = \frac{a^3}{r^3}\,\mathbf d \cdot \mathbf r, \qquad
        \mathbf B = -\nabla V = \frac{a^3}{r^5}
            \left[3 (\mathbf d \cdot \mathbf r)\,\mathbf r - r^2 \mathbf d\right],

    with :math:`\mathbf d = (g_1^1, h_1^1, g_1^0)` (GEO, nT) and *a* the
    IGRF reference radius: the degree-1 part of the IGRF potential (IAGA
    IGRF-14; e.g. Hapgood 1992, *Planet. Space Sci.* 40, 711, sect. 3.3).
    The equatorial surface field is :math:`B_0 = |\mathbf d|`.

    Examples
    --------
    >>> from beltkit.field import CenteredDipole
    >>> m = CenteredDipole(epoch=2020.0)
    >>> round(float(m.dipole_b0_nt(2024.0)))
    29805
    """

    name = "dipole"

    def __init__(self, epoch=None, *, allow_extrapolation: bool = False):
        self.allow_extrapolation = bool(allow_extrapolation)
        if epoch is None:
            self.epoch = None
        else:
            t = np.asarray(decimal_year(epoch, "epoch"), float)
            if t.ndim != 0 or not np.isfinite(t):
                raise FieldModelError(f"argument 'epoch' must be one finite time, got {epoch!r}")
            _dipole_vector(t, self.allow_extrapolation)  # validates the range
            self.epoch = float(t)

    def __repr__(self):
        if self.epoch is None:
            return "CenteredDipole()"
        return f"CenteredDipole(epoch={self.epoch!r})"

    def _time(self, time):
        if self.epoch is not None:  # frozen: the one epoch, in the shape of the times given
            shape = () if time is None else np.shape(np.asarray(time))
            return np.broadcast_to(np.asarray(self.epoch, float), shape)
        return np.asarray(decimal_year(time), float)

    def field_geo(self, xyz_km, time) -> np.ndarray:
        """Dipole field vector at GEO points.

        Parameters
        ----------
        xyz_km : array_like, shape (..., 3)
            GEO Cartesian positions in km.
        time : datetime64, datetime, str, float or array_like
            Broadcast against ``xyz_km[..., 0]`` (ignored if ``epoch`` is set).

        Returns
        -------
        numpy.ndarray, shape (..., 3)
            GEO Cartesian field in nT.
        """
        xyz = check_positions(xyz_km)
        d = _dipole_vector(self._time(time), self.allow_extrapolation)
        return _dipole_field(xyz, d)

    def dipole_b0_nt(self, time) -> np.ndarray:
        r"""Equatorial surface field :math:`\sqrt{g_{10}^2 + g_{11}^2 + h_{11}^2}` (nT)."""
        d = _dipole_vector(self._time(time), self.allow_extrapolation)
        return np.sqrt(np.sum(d * d, axis=-1))

    def dipole_axis_geo(self, time) -> np.ndarray:
        """Return the unit vector (GEO, ``(..., 3)``) towards the northern dipole pole."""
        d = _dipole_vector(self._time(time), self.allow_extrapolation)
        return -d / np.sqrt(np.sum(d * d, axis=-1, keepdims=True))

    def cache_epoch(self, time):
        """Decimal year at which a table cached under :meth:`epoch_key` should be computed."""
        if self.epoch is not None:
            return np.full(np.shape(decimal_year(time)), self.epoch)[()]
        return _key_year(decimal_year(time))[()]

    def epoch_key(self, time):
        """Cache key: ``"dipole@<decimal year to 0.1>"`` (str, or array of str).

        A frozen dipole has one key for every time.
        """
        return _keys(self.name, self.cache_epoch(time))

    cache_key = epoch_key


class IGRF:
    """The IGRF-14 main field (IAGA), degree 1 to ``max_degree``.

    Parameters
    ----------
    max_degree : int
        Truncation degree, 1-13 (13 = the full model since epoch 2000).
    allow_extrapolation : bool
        Allow times outside 1900.0-2030.0 (the first/last linear piece is
        extended); otherwise such times raise
        :class:`~beltkit.errors.FieldModelError`.

    Notes
    -----
    The field is synthesised by :func:`beltkit.field.igrf.synth_geo` (Schmidt
    semi-normalised Legendre recursion, see :mod:`beltkit.field.igrf`). The
    dipole of the model (:meth:`dipole_b0_nt`, :meth:`dipole_axis_geo`) is
    the centred dipole of its first-degree coefficients at the same time.

    Examples
    --------
    >>> import numpy as np
    >>> from beltkit.field import IGRF
    >>> b = IGRF().field_geo(np.array([6371.2 + 500.0, 0.0, 0.0]), "2024-06-01")
    >>> b.shape
    (3,)
    """

    name = "igrf"

    def __init__(self, max_degree: int = 13, allow_extrapolation: bool = False):
        if int(max_degree) != max_degree or not 1 <= int(max_degree) <= 13:
            raise FieldModelError(
                f"argument 'max_degree' must be an integer 1-13, got {max_degree!r}"
            )
        self.max_degree = int(max_degree)
        self.allow_extrapolation = bool(allow_extrapolation)

    def __repr__(self):
        return (
            f"IGRF(max_degree={self.max_degree}, "
            f"allow_extrapolation={self.allow_extrapolation})"
        )

    def field_geo(self, xyz_km, time) -> np.ndarray:
        """IGRF field vector at GEO points.

        Parameters
        ----------
        xyz_km : array_like, shape (..., 3)
            GEO Cartesian positions in km.
        time : datetime64, datetime, str, float or array_like
            Broadcast against ``xyz_km[..., 0]``.

        Returns
        -------
        numpy.ndarray, shape (..., 3)
            GEO Cartesian field in nT.

        Raises
        ------
        FieldModelError
            Points inside the Earth, or times outside 1900.0-2030.0.
        """
        xyz = check_positions(xyz_km)
        t = np.asarray(decimal_year(time), float)
        if t.ndim == 0 or np.all(t == t.flat[0]):
            t0 = float(t.flat[0])
            if np.isnan(t0):
                lead = np.broadcast_shapes(xyz.shape[:-1], t.shape)
                return np.full(lead + (3,), np.nan)
            g, h, nmax = _igrf.coefficients_at(t0, self.max_degree, self.allow_extrapolation)
            if t.ndim and t.shape != xyz.shape[:-1]:
                xyz = np.broadcast_to(xyz, np.broadcast_shapes(xyz.shape[:-1], t.shape) + (3,))
            return _igrf.synth_geo(xyz, g, h, nmax=nmax)
        return _igrf.igrf_field_cartesian(
            xyz, t, max_degree=self.max_degree, allow_extrapolation=self.allow_extrapolation
        )

    def coefficients(self, time):
        """Gauss coefficients ``(g, h)`` (nT, ``[..., n, m]``) of this model at ``time``."""
        return _igrf.igrf_coefficients(
            time, max_degree=self.max_degree, allow_extrapolation=self.allow_extrapolation
        )

    def dipole_b0_nt(self, time) -> np.ndarray:
        """Equatorial surface field of the epoch's centred dipole (nT)."""
        d = _dipole_vector(decimal_year(time), self.allow_extrapolation)
        return np.sqrt(np.sum(d * d, axis=-1))

    def dipole_axis_geo(self, time) -> np.ndarray:
        """Return the unit vector (GEO, ``(..., 3)``) towards the northern dipole pole."""
        d = _dipole_vector(decimal_year(time), self.allow_extrapolation)
        return -d / np.sqrt(np.sum(d * d, axis=-1, keepdims=True))

    def cache_epoch(self, time):
        """Decimal year (rounded to 0.1 yr) at which cached tables should be computed."""
        return _key_year(decimal_year(time))[()]

    def epoch_key(self, time):
        """Cache key ``"igrf14-n<degree>@<decimal year to 0.1>"`` (str, or array of str)."""
        return _keys(f"igrf14-n{self.max_degree}", self.cache_epoch(time))

    cache_key = epoch_key


def model_inside(model, xyz_km, time) -> np.ndarray:
    """Return True where points lie inside a model's region of validity.

    Parameters
    ----------
    model : FieldModel
        A model, with or without the optional ``inside(xyz_km, time)``.
    xyz_km : array_like, shape (..., 3)
        GEO Cartesian positions in km.
    time : datetime64, datetime, str, float or array_like
        Broadcast against ``xyz_km[..., 0]``.

    Returns
    -------
    numpy.ndarray of bool, shape ``(...)``
        ``model.inside(xyz_km, time)``, or True everywhere for models
        without a boundary (finite points; NaN points give False).
    """
    fn = getattr(model, "inside", None)
    xyz = np.asarray(xyz_km, dtype=float)
    if fn is None:
        return np.all(np.isfinite(xyz), axis=-1)
    return np.asarray(fn(xyz, time), dtype=bool)


def as_model(spec=None) -> FieldModel:
    """Turn a model specification into a field model.

    Parameters
    ----------
    spec : None, str or FieldModel
        ``None`` or ``"dipole"`` -> :class:`CenteredDipole` (dipole of each
        evaluation time); ``"igrf"`` -> :class:`IGRF`; a model object is
        returned unchanged.

    Returns
    -------
    FieldModel
        The model.

    Raises
    ------
    FieldModelError
        For an unknown name or an object without the interface.
    """
    if spec is None:
        return CenteredDipole()
    if isinstance(spec, str):
        key = spec.strip().lower()
        if key in ("dipole", "centered_dipole", "centred_dipole"):
            return CenteredDipole()
        if key in ("igrf", "igrf14", "igrf-14"):
            return IGRF()
        raise FieldModelError(
            f"argument 'model': unknown field model {spec!r}; use 'dipole', 'igrf' or a "
            f"FieldModel object such as beltkit.field.IGRF() or beltkit.field.T89(kp=3)"
        )
    if isinstance(spec, FieldModel):
        return spec
    raise FieldModelError(
        f"argument 'model' must be None, 'dipole', 'igrf' or a FieldModel "
        f"(with name, field_geo, dipole_b0_nt, dipole_axis_geo, epoch_key); "
        f"got {type(spec).__name__}"
    )
