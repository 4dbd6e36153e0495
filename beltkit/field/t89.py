r"""Tsyganenko's (1989) Kp-parameterised model of the magnetospheric (external) field.

:class:`T89` adds the field of the magnetospheric currents to an internal
model (:class:`~beltkit.field.IGRF` by default, or a
:class:`~beltkit.field.CenteredDipole`), behind the same
:class:`~beltkit.field.FieldModel` interface: ``field_geo`` returns the
total field in GEO, ``external_geo`` the external part alone.

The model
---------
Tsyganenko, N. A. (1989), "A magnetospheric magnetic field model with a
warped tail current sheet", *Planet. Space Sci.* 37, 5-20, in the revised
form distributed by its author since 1992 (usually called T89c: the same
equations refitted to the IMP, HEOS and ISEE data, with two extra tail
terms proportional to the square of the dipole tilt). The field is the sum
of four parts, written in GSM (the ring current and the tail current
sheet in the solar-magnetic frame, rotated by the tilt :math:`\psi`):

* a ring current with vector potential :math:`A_\phi \propto \rho\,
  [(a_{RC} + \zeta)^2 + \rho^2]^{-3/2}`, :math:`\zeta = (z_r^2 +
  D_{RC}^2)^{1/2}` (:math:`z_r`: height above the warped current sheet),
  whose half-thickness :math:`D_{RC}` grows from night to day (so
  :math:`B_z \propto [2(a_{RC}+\zeta)^2 - \rho^2] / [(a_{RC}+\zeta)^2 +
  \rho^2]^{5/2}` plus a term from the sheet's slope);
* the tail current sheet (two modes, amplitudes :math:`A_1 + A_{16}\psi^2`
  and :math:`A_2 + A_{17}\psi^2`), warped and hinged at distance
  :math:`R_c` along the dipole-tilt direction, confined in X and Y by
  :math:`W(x, y)`;
* the closure currents of the tail sheet (two images at
  :math:`z = \pm 30\,R_E`, symmetric and tilt-antisymmetric terms);
* the Chapman-Ferraro magnetopause and Birkeland-current terms,
  :math:`\exp(x/\Delta x)` times low-order polynomials in y and z with
  :math:`\nabla\cdot\mathbf B = 0` imposed.

The 30 coefficients of each of the seven activity levels are the published
figures of the revised model (17 linear amplitudes, 13 shape parameters);
the code is this package's own, a compiled kernel over the equations.

Activity levels
---------------
The model has seven coefficient sets, for Kp = 0,0+ / 1-,1,1+ / 2-,2,2+ /
3-,3,3+ / 4-,4,4+ / 5-,5,5+ / >= 6-. Kp is given here on its numeric
0-9 scale with thirds (2- = 1.667, 2 = 2, 2+ = 2.333). A fractional value
maps to the level of the nearest integer, :math:`\mathrm{level} =
\min(\lfloor Kp + 1/2 \rfloor, 6)` (levels numbered 0-6): a value on the
thirds scale falls in its published bin (0+ = 0.333 -> level 0, 1- =
0.667 -> level 1, 5+ = 5.333 -> level 5, 6- = 5.667 -> level 6); every
value from 5.5 to 9 uses the highest set. Values outside 0-9 are refused
(a common mistake is Kp x 10, the integer coding of some archives).

Validity and limits
-------------------
* Fitted to spacecraft data from about 4 to 70 R_E geocentric (the
  revised model's data set); inside about 4 R_E the external field is a
  small correction to the internal one and is not constrained by data.
  Tailward of X_GSM = -70 R_E the model is not valid.
* It is an average model for each Kp bin: it has no solar-wind pressure
  or IMF input, a static magnetopause and no storm-time ring-current
  enhancement beyond what Kp carries; the dayside field near the
  magnetopause and the inner magnetosphere during strong storms (Dst below
  about -100 nT) are represented poorly.
* The magnetopause is not a boundary of the model's equations. The outer
  boundary used for tracing (:meth:`T89.inside`) is the Shue et al. (1998)
  magnetopause for a nominal solar wind (dynamic pressure 2 nPa, IMF Bz =
  0), with its axis along X_GSM, closed at X_GSM = -70 R_E: field lines
  crossing it are open.
"""

from __future__ import annotations

import threading

import numpy as np

from ..constants import R_E_KM
from ..errors import FieldModelError
from .earth import check_positions
from .models import IGRF
from .t89_kernel import T89_COEFFICIENTS, external_field_geo
from .timeconv import as_datetime64, decimal_year

__all__ = [
    "KP_LEVEL_RANGES",
    "KP_MAX",
    "MAGNETOPAUSE_DP_NPA",
    "T89",
    "T89_COEFFICIENTS",
    "TAIL_LIMIT_RE",
    "kp_level",
    "magnetopause_radius_re",
    "t89_external_gsm",
]

#: Largest Kp accepted (the index's scale ends at 9).
KP_MAX = 9.0
#: Kp interval of each coefficient set (level 0-6), lower bound inclusive.
KP_LEVEL_RANGES = ((0.0, 0.5), (0.5, 1.5), (1.5, 2.5), (2.5, 3.5), (3.5, 4.5), (4.5, 5.5),
                   (5.5, KP_MAX))
#: Tailward limit of the model's validity (X_GSM, R_E): the extent of its data set.
TAIL_LIMIT_RE = -70.0
#: Solar-wind dynamic pressure (nPa) and IMF Bz (nT) of the nominal magnetopause.
MAGNETOPAUSE_DP_NPA = 2.0
MAGNETOPAUSE_BZ_NT = 0.0
#: Hours over which a drift-shell table is shared (the tilt moves < 3 deg per hour).
CACHE_HOURS = 1.0
#: A Kp value holds until the next one, and at most this long (Kp is a 3-hour index).
KP_HOLD = np.timedelta64(3, "h")

def kp_level(kp):
    r"""Coefficient set (0-6) of Kp values on the 0-9 scale; NaN stays NaN (level -1).

    Parameters
    ----------
    kp : float or array_like
        Kp on its numeric scale with thirds (2- = 1.667, 2+ = 2.333).

    Returns
    -------
    numpy.ndarray of int
        :math:`\min(\lfloor Kp + 1/2 \rfloor, 6)`; -1 where Kp is NaN.

    Raises
    ------
    FieldModelError
        For values outside 0-9.
    """
    k = np.asarray(kp, dtype=float)
    with np.errstate(invalid="ignore"):
        bad = (k < 0.0) | (k > KP_MAX) | np.isinf(k)
    if np.any(bad):
        v = k[bad].flat[0] if k.ndim else float(k)
        raise FieldModelError(
            f"argument 'kp': {int(np.sum(bad))} value(s) outside the model's range 0-9 "
            f"(e.g. {v:g}); give Kp on its 0-9 scale (2- = 1.667, 2+ = 2.333), not Kp x 10"
        )
    safe = np.where(np.isnan(k), -1.0, k)
    lev = np.minimum(np.floor(safe + 0.5), 6).astype(np.int64)
    return np.where(np.isnan(k), -1, lev)


def t89_external_gsm(kp, tilt_deg, xyz_gsm_re):
    r"""External field of the model in GSM at GSM points, for a given dipole tilt.

    Parameters
    ----------
    kp : float
        Kp (0-9; see the module notes for the levels).
    tilt_deg : float
        Dipole tilt :math:`\psi` (deg), positive when the northern dipole pole
        leans towards the Sun: :math:`\sin\psi = \hat{\mathbf D}\cdot\hat{\mathbf X}_{GSM}`.
    xyz_gsm_re : array_like, shape (..., 3)
        GSM positions in Earth radii (6371.2 km).

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        External field, GSM, nT.

    Notes
    -----
    The model's equations (Tsyganenko 1989, *Planet. Space Sci.* 37, 5, with
    the 1992 revision's coefficients and tilt-squared tail terms); no
    boundary is applied.
    """
    level = int(kp_level(float(kp)))
    p = np.asarray(xyz_gsm_re, dtype=float)
    if p.ndim == 0 or p.shape[-1] != 3:
        raise FieldModelError(
            f"argument 'xyz_gsm_re' must have a trailing axis of length 3; got shape {p.shape}"
        )
    psi = np.radians(float(tilt_deg))
    flat = np.ascontiguousarray(p.reshape(-1, 3) * R_E_KM)  # the kernel takes km
    out = np.empty_like(flat)
    tilt = np.array([[np.sin(psi), np.cos(psi), psi]])
    external_field_geo(flat, np.eye(3)[None], tilt, np.zeros(1, np.int64), np.array([level]),
                       out)
    return out.reshape(p.shape)


def magnetopause_radius_re(cos_theta, dp_npa=MAGNETOPAUSE_DP_NPA, bz_nt=MAGNETOPAUSE_BZ_NT):
    r"""Geocentric distance (R_E) of the Shue et al. (1998) magnetopause.

    Parameters
    ----------
    cos_theta : array_like
        Cosine of the angle from the magnetopause axis (the Sun direction).
    dp_npa, bz_nt : float
        Solar-wind dynamic pressure (nPa) and IMF Bz (nT).

    Returns
    -------
    numpy.ndarray
        :math:`r = r_0\,[2/(1 + \cos\theta)]^{\alpha}`.

    Notes
    -----
    .. math::

        r_0 = (11.4 + K B_z)\,D_p^{-1/6.6}, \qquad
        \alpha = (0.58 - 0.007 B_z)\,(1 + 0.024 \ln D_p),

    K = 0.013 for Bz >= 0, 0.14 otherwise (Shue et al. 1998, *J. Geophys.
    Res.* 103, 17691, eqs. 9-10; from memory, checked against the paper's
    quoted subsolar distance of about 10-11 R_E for nominal conditions). For
    2 nPa and Bz = 0: :math:`r_0` = 10.26 R_E, :math:`\alpha` = 0.590.
    """
    k = 0.013 if bz_nt >= 0 else 0.14
    r0 = (11.4 + k * bz_nt) * dp_npa ** (-1.0 / 6.6)
    alpha = (0.58 - 0.007 * bz_nt) * (1.0 + 0.024 * np.log(dp_npa))
    c = np.asarray(cos_theta, dtype=float)
    with np.errstate(divide="ignore"):
        return r0 * (2.0 / (1.0 + c)) ** alpha


def _as_kp_series(kp, kp_time):
    """Return (times datetime64[ns] sorted, levels int) of a Kp series."""
    if kp_time is None and hasattr(kp, "dims") and hasattr(kp, "coords"):
        dims = [d for d in kp.dims if d in kp.coords
                and np.asarray(kp.coords[d]).dtype.kind == "M"]
        if kp.ndim != 1 or not dims:
            raise FieldModelError(
                "argument 'kp': a DataArray of Kp must be 1-D along a datetime coordinate"
            )
        kp_time = kp.coords[dims[0]].values
    if kp_time is None:
        raise FieldModelError(
            "argument 'kp' is an array but 'kp_time' is missing: give the times of the Kp "
            "values (kp_time=...), e.g. the samples' times, or a DataArray with a time "
            "coordinate, or one Kp value"
        )
    values = np.asarray(getattr(kp, "values", kp), dtype=float).reshape(-1)
    times = as_datetime64(np.asarray(kp_time).reshape(-1), "kp_time")
    if times.size != values.size or values.size == 0:
        raise FieldModelError(
            f"arguments 'kp' ({values.size} values) and 'kp_time' ({times.size} times) must "
            "have the same, non-zero length"
        )
    if np.any(np.isnat(times)):
        raise FieldModelError("argument 'kp_time' holds NaT: give a time for every Kp value")
    levels = kp_level(values)
    order = np.argsort(times, kind="stable")
    times, levels = times[order], levels[order]
    same = times[1:] == times[:-1]
    if np.any(same & (levels[1:] != levels[:-1])):
        raise FieldModelError(
            "argument 'kp_time' repeats a time with Kp values of different model levels; "
            "give one Kp per time"
        )
    keep = np.concatenate([[True], ~same])
    return times[keep], levels[keep]


class T89:
    r"""Internal field plus Tsyganenko's (1989) external field for a Kp level.

    Parameters
    ----------
    kp : float, array_like or xarray.DataArray
        Kp on its 0-9 scale (2- = 1.667, 2+ = 2.333): one value for every
        time, or a series: an array with ``kp_time``, or a 1-D DataArray
        along a datetime coordinate. A value of the series holds from its
        time until the next one, at most 3 hours (Kp is a 3-hour index);
        times outside that coverage are refused. NaN values give a NaN
        field (unresolved lines, NaN L and loss cones).
    internal : FieldModel, default ``IGRF()``
        The internal field (:class:`~beltkit.field.IGRF` or
        :class:`~beltkit.field.CenteredDipole`); it also supplies the dipole
        axis that sets GSM and the tilt.
    kp_time : array_like of datetime64, optional
        Times of the values of an array ``kp``.

    Notes
    -----
    .. math::

        \mathbf B = \mathbf B_{int}(\mathbf r, t)
            + M_{GSM}^{T}(t)\,\mathbf B_{T89}\!\left(M_{GSM}(t)\,\mathbf r / R_E;\;
              \psi(t), \mathrm{level}(Kp)\right),
        \qquad \sin\psi = \hat{\mathbf D}\cdot\hat{\mathbf X}_{GSM},

    with :math:`M_{GSM}` the GEO-to-GSM rotation of
    :func:`beltkit.field.coords.frame_matrix` (Hapgood 1992) built on the
    internal model's dipole axis :math:`\hat{\mathbf D}`. The external model
    is Tsyganenko (1989), *Planet. Space Sci.* 37, 5-20, revised
    coefficients (see :mod:`beltkit.field.t89` for the levels, validity
    region and limits). Field lines are traced inside :meth:`inside` only.

    Examples
    --------
    >>> import numpy as np
    >>> from beltkit.field import T89
    >>> m = T89(kp=2.0)
    >>> b = m.external_geo(np.array([-6.0 * 6371.2, 0.0, 0.0]), "2024-03-20T00:00")
    >>> b.shape
    (3,)
    """

    name = "t89"

    def __init__(self, kp, internal=None, *, kp_time=None):
        self.internal = IGRF() if internal is None else internal
        for attr in ("field_geo", "dipole_axis_geo", "dipole_b0_nt", "epoch_key"):
            if not hasattr(self.internal, attr):
                raise FieldModelError(
                    f"argument 'internal' must be a field model such as IGRF() or "
                    f"CenteredDipole(); {type(self.internal).__name__} has no {attr}"
                )
        if getattr(self.internal, "name", "") == "t89":
            raise FieldModelError("argument 'internal' must be an internal field model, not T89")
        scalar = np.ndim(getattr(kp, "values", kp)) == 0 and kp_time is None
        if scalar:
            kp_f = float(np.asarray(getattr(kp, "values", kp), dtype=float))
            if np.isnan(kp_f):
                raise FieldModelError("argument 'kp' is NaN: give a Kp value 0-9")
            self.level = int(kp_level(kp_f))
            self.kp = kp_f
            self._series = None
        else:
            self._series = _as_kp_series(kp, kp_time)
            self.level = None
            self.kp = None
        self._frame_cache = {}
        self._many_cache = None
        self._many_lock = threading.Lock()

    def __getstate__(self):
        state = dict(self.__dict__)
        state.update(_frame_cache={}, _many_cache=None, _many_lock=None)
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._many_lock = threading.Lock()

    def __repr__(self):
        if self._series is None:
            return f"T89(kp_level={self.level}, internal={self.internal!r})"
        t, lev = self._series
        return (f"T89(kp series of {t.size} values {t[0]}..{t[-1]}, "
                f"internal={self.internal!r})")

    # -- activity ---------------------------------------------------------------------
    def levels(self, time):
        """Coefficient set (0-6, or -1 for NaN Kp / NaT) at the given times."""
        if self._series is None:
            return np.full(np.shape(time), self.level, dtype=np.int64)
        tt, lev = self._series
        t = as_datetime64(time)
        k = np.searchsorted(tt, t, side="right") - 1
        nat = np.isnat(t)
        kc = np.clip(k, 0, tt.size - 1)
        with np.errstate(invalid="ignore"):
            out_of = ~nat & ((k < 0) | (t - tt[kc] > KP_HOLD))
        if np.any(out_of):
            bad = np.asarray(t)[out_of].flat[0]
            raise FieldModelError(
                f"time {bad} is outside the Kp series ({tt[0]} to {tt[-1]} + 3 h, each value "
                "holding at most 3 h): give Kp covering every time of the data"
            )
        return np.where(nat, -1, lev[kc])

    def at_time(self, time):
        """Return the model with the fixed Kp level of ``time`` (for caches keyed by level)."""
        lev = int(np.asarray(self.levels(np.asarray(time).reshape(-1)[:1]))[0])
        if lev < 0:
            raise FieldModelError(f"Kp is undefined (NaN) at {time}; no fixed-level model")
        return T89(kp=float(lev), internal=self.internal)

    # -- geometry ---------------------------------------------------------------------
    def _frames(self, time):
        """GSM rotation (..., 3, 3) and (sin psi, cos psi, psi) (..., 3) per time."""
        from .coords import frame_matrix

        m = frame_matrix("GSM", time, model=self.internal)
        dip = np.asarray(self.internal.dipole_axis_geo(time), float)
        dip = np.broadcast_to(dip, m.shape[:-1])
        sps = np.einsum("...i,...i->...", dip, m[..., 0, :])
        cps = np.einsum("...i,...i->...", dip, m[..., 2, :])
        psi = np.arctan2(sps, cps)
        norm = np.hypot(sps, cps)
        return m, np.stack([sps / norm, cps / norm, psi], axis=-1)

    def _frames_one(self, t0):
        """:meth:`_frames` of one datetime64, remembered (tracing asks again and again)."""
        key = int(np.asarray(t0, dtype="datetime64[ns]").astype(np.int64))
        hit = self._frame_cache.get(key)
        if hit is None:
            if len(self._frame_cache) > 64:
                self._frame_cache.clear()
            hit = self._frames(np.asarray(t0, dtype="datetime64[ns]"))
            self._frame_cache[key] = hit
        return hit

    def _frames_many(self, uniq):
        """:meth:`_frames` and :meth:`levels` of sorted distinct times, remembered.

        Tracing many lines of many samples asks for the same set of times at
        every step; their rotations, tilts and levels are computed once and
        looked up by time afterwards (profiling showed the frames taking half
        of an L* computation's field time before).
        """
        key = np.asarray(uniq, dtype="datetime64[ns]").astype(np.int64)
        with self._many_lock:
            c = self._many_cache
            if c is not None:
                pos = np.minimum(np.searchsorted(c[0], key), c[0].size - 1)
                found = c[0][pos] == key
            else:
                pos, found = None, np.zeros(key.size, bool)
            if not np.all(found):
                miss = np.asarray(uniq)[~found]
                m, tl = self._frames(miss)
                lv = np.asarray(self.levels(miss), np.int64)
                if c is None or c[0].size + miss.size > 1_000_000:
                    parts = (key[~found], m, tl, lv)
                else:
                    parts = tuple(np.concatenate([a, b]) for a, b in
                                  zip(c, (key[~found], m, tl, lv)))
                order = np.argsort(parts[0], kind="stable")
                c = self._many_cache = tuple(a[order] for a in parts)
                pos = np.searchsorted(c[0], key)
            return c[1][pos], c[2][pos], c[3][pos]

    def tilt_deg(self, time):
        r"""Dipole tilt :math:`\psi` (deg) at the times, :math:`\sin\psi = \hat D\cdot\hat X`."""
        return np.degrees(self._frames(time)[1][..., 2])

    def _external(self, xyz, time):
        t = np.asarray(time)
        if t.dtype.kind not in "M":
            t = as_datetime64(time)
        lead = np.broadcast_shapes(xyz.shape[:-1], t.shape)
        n = int(np.prod(lead)) if lead else 1
        pts = np.ascontiguousarray(np.broadcast_to(xyz, lead + (3,)).reshape(n, 3))
        if t.ndim == 0 or t.size == 1:
            t0 = t.reshape(-1)[0]
            if np.isnat(t0):
                return np.full(lead + (3,), np.nan)
            rot, tilt = self._frames_one(t0)
            rot, tilt = rot[None], tilt[None]
            im = np.zeros(1, np.int64)
            lev = np.asarray(self.levels(t0)).reshape(1).astype(np.int64)
        else:
            tb = np.broadcast_to(t, lead).reshape(n)
            uniq, im = np.unique(tb, return_inverse=True)
            ok = ~np.isnat(uniq)
            rot = np.full((uniq.size, 3, 3), np.nan)
            tilt = np.full((uniq.size, 3), np.nan)
            lev_u = np.full(uniq.size, -1, np.int64)
            if np.any(ok):
                rot[ok], tilt[ok], lev_u[ok] = self._frames_many(uniq[ok])
            if uniq.size == 1:
                im = np.zeros(1, np.int64)
                lev = lev_u
            else:
                im = np.ascontiguousarray(im.reshape(n), dtype=np.int64)
                lev = np.ascontiguousarray(lev_u[im])
        out = np.empty((n, 3))
        external_field_geo(pts, np.ascontiguousarray(rot), np.ascontiguousarray(tilt), im, lev,
                           out)
        return out.reshape(lead + (3,))

    # -- the FieldModel interface -------------------------------------------------------
    def external_geo(self, xyz_km, time) -> np.ndarray:
        """External (magnetospheric) field alone at GEO points.

        Parameters
        ----------
        xyz_km : array_like, shape (..., 3)
            GEO Cartesian positions in km.
        time : datetime64, datetime, str or array_like
            UTC instants, broadcast against ``xyz_km[..., 0]``.

        Returns
        -------
        numpy.ndarray, shape (..., 3)
            GEO Cartesian field in nT (no boundary applied: see :meth:`inside`).
        """
        return self._external(check_positions(xyz_km), time)

    def field_geo(self, xyz_km, time) -> np.ndarray:
        """Total field (internal + external) at GEO points, GEO Cartesian nT, shape (..., 3)."""
        xyz = check_positions(xyz_km)
        b_int = np.asarray(self.internal.field_geo(xyz, time), dtype=float)
        b_ext = self._external(xyz, time)
        return b_int + b_ext

    def inside(self, xyz_km, time) -> np.ndarray:
        r"""Return True where points lie inside the model's outer boundary.

        The boundary is the Shue et al. (1998) magnetopause for a nominal
        solar wind (:func:`magnetopause_radius_re`, 2 nPa, Bz = 0; axis along
        :math:`X_{GSM}`) closed by the plane :math:`X_{GSM}` =
        :data:`TAIL_LIMIT_RE` (-70 R_E, the tailward end of the model's data).
        NaN points give False.
        """
        from .coords import convert

        xyz = np.asarray(xyz_km, dtype=float)
        t = np.asarray(time)
        if t.dtype.kind != "M":
            t = as_datetime64(time)
        if t.size == 1 and not np.isnat(t.reshape(-1)[0]):
            rot = self._frames_one(t.reshape(-1)[0])[0]
            g = xyz @ rot.T / R_E_KM
        else:
            g = np.asarray(convert(xyz, t, "GEO", "GSM", model=self.internal)) / R_E_KM
        r = np.sqrt(np.sum(g * g, axis=-1))
        with np.errstate(invalid="ignore", divide="ignore"):
            rmp = magnetopause_radius_re(g[..., 0] / r)
            return (r < rmp) & (g[..., 0] > TAIL_LIMIT_RE)

    def dipole_b0_nt(self, time) -> np.ndarray:
        """Equatorial surface field of the internal model's centred dipole (nT)."""
        return self.internal.dipole_b0_nt(time)

    def dipole_axis_geo(self, time) -> np.ndarray:
        """Return the unit vector (GEO) towards the northern dipole pole (internal model)."""
        return self.internal.dipole_axis_geo(time)

    def cache_epoch(self, time):
        """Time (datetime64, rounded to :data:`CACHE_HOURS`) at which a cached table is built."""
        t = as_datetime64(time).astype("datetime64[s]").astype(np.int64)
        step = int(CACHE_HOURS * 3600)
        r = ((t + step // 2) // step) * step
        return r.astype("datetime64[s]")[()]

    def epoch_key(self, time):
        """Cache key ``"t89-kp<level>+<internal prefix>@<UTC hour>"`` (str, or array of str).

        The field depends on the time through the internal model, the dipole
        tilt and the Sun's direction: tables are shared within
        :data:`CACHE_HOURS` and one Kp level.
        """
        te = np.asarray(self.cache_epoch(time))
        lev = np.asarray(self.levels(np.asarray(as_datetime64(time))))
        inner = np.asarray(self.internal.epoch_key(decimal_year(te.astype("datetime64[ns]"))))
        inner = np.vectorize(lambda k: str(k).split("@")[0], otypes=[object])(inner)
        hours = np.datetime_as_string(te, unit="h")
        fmt = np.vectorize(lambda lv, ik, tt: f"t89-kp{lv}+{ik}@{tt}", otypes=[object])
        out = fmt(lev, inner, hours)
        return str(out) if out.ndim == 0 else out.astype(str)

    cache_key = epoch_key
