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

import os
import threading

import numpy as np

from ..constants import R_E_KM
from ..errors import FieldModelError
from .earth import check_positions
from .models import IGRF
from .timeconv import as_datetime64, decimal_year

try:  # pragma: no cover - numba is a declared dependency
    import numba as _nb
except ImportError:  # pragma: no cover
    _nb = None

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

#: Published coefficients of the revised (1992) Tsyganenko 1989 model, one row per
#: activity level (Kp 0,0+ / 1-,1,1+ / ... / >= 6-). Columns 0-16: linear amplitudes
#: (tail modes 1, 2; closure symmetric, antisymmetric; ring current; Chapman-Ferraro
#: and Birkeland terms 6-15; tilt-squared tail terms 16, 17). Columns 17-29: the
#: shape parameters Delta x, a_RC, D_0, gamma_RC, R_c, G, a_T, D_y, Delta, Q, x_0,
#: gamma_T, D_yc (R_E, or 1).
T89_COEFFICIENTS = np.array([
    (-116.53, -10719., 42.375, 59.753, -11363., 1.7844, 30.268, -0.35372E-01, -0.66832E-01,
     0.16456E-01, -1.3024, 0.16529E-02, 0.20293E-02, 20.289, -0.25203E-01, 224.91, -9234.8,
     22.788, 7.8813, 1.8362, -0.27228, 8.8184, 2.8714, 14.468, 32.177, 0.01, 0.0, 7.0459, 4.0,
     20.0),
    (-55.553, -13198., 60.647, 61.072, -16064., 2.2534, 34.407, -0.38887E-01, -0.94571E-01,
     0.27154E-01, -1.3901, 0.13460E-02, 0.13238E-02, 23.005, -0.30565E-01, 55.047, -3875.7,
     20.178, 7.9693, 1.4575, 0.89471, 9.4039, 3.5215, 14.474, 36.555, 0.01, 0.0, 7.0787, 4.0,
     20.0),
    (-101.34, -13480., 111.35, 12.386, -24699., 2.6459, 38.948, -0.34080E-01, -0.12404,
     0.29702E-01, -1.4052, 0.12103E-02, 0.16381E-02, 24.49, -0.37705E-01, -298.32, 4400.9,
     18.692, 7.9064, 1.3047, 2.4541, 9.7012, 7.1624, 14.288, 33.822, 0.01, 0.0, 6.7442, 4.0,
     20.0),
    (-181.69, -12320., 173.79, -96.664, -39051., 3.2633, 44.968, -0.46377E-01, -0.16686,
     0.048298, -1.5473, 0.10277E-02, 0.31632E-02, 27.341, -0.50655E-01, -514.10, 12482.,
     16.257, 8.5834, 1.0194, 3.6148, 8.6042, 5.5057, 13.778, 32.373, 0.01, 0.0, 7.3195, 4.0,
     20.0),
    (-436.54, -9001.0, 323.66, -410.08, -50340., 3.9932, 58.524, -0.38519E-01, -0.26822,
     0.74528E-01, -1.4268, -0.10985E-02, 0.96613E-02, 27.557, -0.56522E-01, -867.03, 20652.,
     14.101, 8.3501, 0.72996, 3.8149, 9.2908, 6.4674, 13.729, 28.353, 0.01, 0.0, 7.4237, 4.0,
     20.0),
    (-707.77, -4471.9, 432.81, -435.51, -60400., 4.6229, 68.178, -0.88245E-01, -0.21002,
     0.11846, -2.6711, 0.22305E-02, 0.10910E-01, 27.547, -0.54080E-01, -424.23, 1100.2,
     13.954, 7.5337, 0.89714, 3.7813, 8.2945, 5.174, 14.213, 25.237, 0.01, 0.0, 7.0037, 4.0,
     20.0),
    (-1190.4, 2749.9, 742.56, -1110.3, -77193., 7.6727, 102.05, -0.96015E-01, -0.74507,
     0.11214, -1.3614, 0.15157E-02, 0.22283E-01, 23.164, -0.74146E-01, -2219.1, 48253.,
     12.714, 7.6777, 0.57138, 2.9633, 9.3909, 9.7263, 11.123, 21.558, 0.01, 0.0, 4.4518, 4.0,
     20.0),
])
T89_COEFFICIENTS.setflags(write=False)

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

# fixed constants of the model's equations (R_E, or R_E^2)
_A0SQ = 25.0  # ring-current day-night transition scale squared
_XLW2 = 170.0  # tail-current X-confinement width squared
_RT = 30.0  # closure-current images at z = +-30
_XD = 0.0  # centre of the tail-sheet day-night thickening
_XLD2 = 40.0  # its width squared
_SXC = 4.0  # closure-current X-confinement centre
_XLWC2 = 50.0  # its width squared
_RE = R_E_KM
_BLOCK = 512  # points per thread work item
# smaller inputs run single-threaded (and always in forked child processes, where
# GNU OpenMP is not safe)
_MIN_THREADED = 50_000
_IMPORT_PID = os.getpid()


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


# ---------------------------------------------------------------------------------------
# compiled kernel


def _point(x, y, z, sps, cps, psi, c):  # noqa: PLR0915 - one model evaluation
    """External field (GSM, nT) at one GSM point (R_E) for tilt psi and coefficients c."""
    # warped, hinged tail current sheet: its surface z_s(x, y) in the SM-like frame
    xs = x * cps - z * sps
    zsm = x * sps + z * cps
    rho2 = xs * xs + y * y
    half_tan = 0.5 * sps / cps
    xh = xs + c[21]
    sq_h = np.sqrt(xh * xh + 16.0)
    zs_hinge = half_tan * (xh - sq_h)
    dzs_dx = -zs_hinge / sq_h
    y2 = y * y
    y4 = y2 * y2
    den_w = y4 + 1.0e4
    zs = zs_hinge - c[22] * sps * y4 / den_w
    dzs_dy = -c[22] * sps * 4.0e4 * y2 * y / (den_w * den_w)
    dz = zsm - zs
    xz_slope = xs * dzs_dx + y * dzs_dy

    # ring current
    sq_a = np.sqrt(xs * xs + _A0SQ)
    f_day = 0.5 * (1.0 + xs / sq_a)
    thick_r = c[19] + c[20] * f_day
    dfday = 0.5 * _A0SQ / (sq_a * sq_a * sq_a)
    zeta_r = np.sqrt(dz * dz + thick_r * thick_r)
    ar = c[18] + zeta_r
    inv = 1.0 / (ar * ar + rho2)
    p52 = inv * inv * np.sqrt(inv)
    g_r = 3.0 * ar * p52 / zeta_r
    rc_x = g_r * xs * dz
    rc_y = g_r * y * dz
    rc_z = p52 * (2.0 * ar * ar - rho2) + g_r * (dz * xz_slope - thick_r * c[20] * dfday * xs)

    # tail current sheet (two modes)
    thick_t = c[19] + c[25] * y2
    adsl = 0.0
    if abs(c[28]) >= 1e-6:
        xxd = xs - _XD
        q = 1.0 / (xxd * xxd + _XLD2)
        sq_q = np.sqrt(q)
        thick_t += c[28] * 0.5 * (1.0 + xxd * sq_q)
        adsl = -thick_t * xs * c[28] * 0.5 * _XLD2 * q * sq_q
    zeta_t = np.sqrt(dz * dz + thick_t * thick_t)
    xw = xs - c[27]
    qw = 1.0 / (xw * xw + _XLW2)
    sq_w = np.sqrt(qw)
    wx = 0.5 * (1.0 - xw * sq_w)
    dwx_dx = -0.5 * _XLW2 * qw * sq_w
    om = np.sqrt(np.sqrt(xs * xs + 16.0) - xs)
    dom = -0.5 * om / (om * om + xs)
    rdy = 1.0 / (c[24] + c[26] * om)
    fy = 1.0 / (1.0 + y2 * rdy * rdy)
    w = wx * fy
    yfy = 2.0 * fy * y2 * rdy * rdy
    dw_x = dwx_dx * fy + yfy * rdy * fy * c[26] * dom * wx
    ydw_y = -wx * yfy * fy
    at = c[23] + zeta_t
    s1 = np.sqrt(at * at + rho2)
    f5 = 1.0 / s1
    f7 = 1.0 / (s1 + at)
    f1 = f5 * f7
    f3 = f5 * f5 * f5
    f9 = at * f3
    fs = dz * xz_slope - thick_t * y * 2.0 * c[25] * y + adsl
    xdw = xs * dw_x + ydw_y
    wt = w / zeta_t
    amp1 = c[0] + c[15] * psi * psi
    amp2 = c[1] + c[16] * psi * psi
    t_xy = wt * (amp1 * f1 + amp2 * f3)
    tl_x = t_xy * xs * dz
    tl_y = t_xy * y * dz
    tl_z = (amp1 * (w * f5 + xdw * f7 + wt * fs * f1)
            + amp2 * (w * f9 + xdw * f1 + wt * fs * f3))

    # ring current and tail sheet back from the SM-like frame to GSM
    sx = c[4] * rc_x + tl_x
    sz = c[4] * rc_z + tl_z
    bx = sx * cps + sz * sps
    by = c[4] * rc_y + tl_y
    bz = sz * cps - sx * sps

    # closure currents (GSM), images at z = +-_RT
    zp = z + _RT
    zm = z - _RT
    rg2 = x * x + y2
    sp = np.sqrt(zp * zp + rg2)
    sm = np.sqrt(zm * zm + rg2)
    xc = x - _SXC
    qc = 1.0 / (xc * xc + _XLWC2)
    sq_c = np.sqrt(qc)
    inv_dyc2 = 1.0 / (c[29] * c[29])
    fyc = 1.0 / (1.0 + y2 * inv_dyc2)
    wc = 0.5 * (1.0 - xc * sq_c) * fyc
    dwc_x = -0.5 * _XLWC2 * qc * sq_c * fyc
    dwc_y = -2.0 * inv_dyc2 * wc * fyc * y
    rp = 1.0 / (sp + zp)
    rm = 1.0 / (sm - zm)
    xyw = x * dwc_x + y * dwc_y
    gp = wc / sp
    gm = wc / sm
    px, py, pz = x * gp * rp, y * gp * rp, gp + xyw * rp
    mx, my, mz = -x * gm * rm, -y * gm * rm, gm + xyw * rm
    anti = c[3] * sps
    bx += c[2] * (px + mx) + anti * (px - mx)
    by += c[2] * (py + my) + anti * (py - my)
    bz += c[2] * (pz + mz) + anti * (pz - mz)

    # Chapman-Ferraro and Birkeland terms (div B = 0 fixes the z terms' weights)
    dx = c[17]
    ex = np.exp(x / dx)
    ec = ex * cps
    es = ex * sps
    z2 = z * z
    bx += ec * c[5] * z + es * (c[6] + c[7] * y2 + c[8] * z2)
    by += y * (ec * c[9] * z + es * (c[10] + c[11] * y2 + c[12] * z2))
    bz += (ec * (c[13] + c[14] * y2 - (0.5 * c[5] / dx + 0.5 * c[9]) * z2)
           + es * z * (-(c[6] / dx + c[10]) - (c[7] / dx + 3.0 * c[11]) * y2
                       - (c[8] / dx + c[12]) * z2 / 3.0))
    return bx, by, bz


if _nb is not None:
    _point_c = _nb.njit(cache=True, error_model="numpy", inline="always")(_point)

    @_nb.njit(cache=True, error_model="numpy", inline="always")
    def _rows(lo, hi, xyz_km, rot, tilt, im, lev, coef, out):  # pragma: no cover - compiled
        """GEO points -> GEO external field; rot/tilt per time (index im), level per point."""
        per_t = im.shape[0] > 1
        per_l = lev.shape[0] > 1
        for i in range(lo, hi):
            j = im[i] if per_t else 0
            k = lev[i] if per_l else lev[0]
            px, py, pz = xyz_km[i, 0], xyz_km[i, 1], xyz_km[i, 2]
            if k < 0 or not (np.isfinite(px) and np.isfinite(py) and np.isfinite(pz)):
                out[i, 0] = np.nan
                out[i, 1] = np.nan
                out[i, 2] = np.nan
                continue
            r = rot[j]
            gx = (r[0, 0] * px + r[0, 1] * py + r[0, 2] * pz) / _RE
            gy = (r[1, 0] * px + r[1, 1] * py + r[1, 2] * pz) / _RE
            gz = (r[2, 0] * px + r[2, 1] * py + r[2, 2] * pz) / _RE
            bx, by, bz = _point_c(gx, gy, gz, tilt[j, 0], tilt[j, 1], tilt[j, 2], coef[k])
            out[i, 0] = r[0, 0] * bx + r[1, 0] * by + r[2, 0] * bz
            out[i, 1] = r[0, 1] * bx + r[1, 1] * by + r[2, 1] * bz
            out[i, 2] = r[0, 2] * bx + r[1, 2] * by + r[2, 2] * bz

    @_nb.njit(cache=True, error_model="numpy", parallel=True)
    def _par_kernel(xyz_km, rot, tilt, im, lev, coef, out):  # pragma: no cover - compiled
        n = xyz_km.shape[0]
        for blk in _nb.prange((n + _BLOCK - 1) // _BLOCK):
            lo = blk * _BLOCK
            _rows(lo, min(n, lo + _BLOCK), xyz_km, rot, tilt, im, lev, coef, out)

    @_nb.njit(cache=True, error_model="numpy")
    def _ser_kernel(xyz_km, rot, tilt, im, lev, coef, out):  # pragma: no cover - compiled
        _rows(0, xyz_km.shape[0], xyz_km, rot, tilt, im, lev, coef, out)

    def _kernel_geo(xyz_km, *args):
        """Threaded for large inputs (a parallel launch costs milliseconds), else serial."""
        threaded = xyz_km.shape[0] >= _MIN_THREADED and os.getpid() == _IMPORT_PID
        (_par_kernel if threaded else _ser_kernel)(xyz_km, *args)
else:  # pragma: no cover
    _kernel_geo = None


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
    _kernel_geo(flat, np.eye(3)[None], tilt, np.zeros(1, np.int64), np.array([level]),
                T89_COEFFICIENTS, out)
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
        _kernel_geo(pts, np.ascontiguousarray(rot), np.ascontiguousarray(tilt), im, lev,
                    T89_COEFFICIENTS, out)
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
