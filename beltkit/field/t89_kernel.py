r"""The compiled equations of the Tsyganenko (1989) external field model and its coefficients.

The field of the model's current systems (ring current, tail sheet with its
closure currents, magnetopause and Birkeland terms) at one GSM point, for a
dipole tilt and a coefficient set (Tsyganenko 1989, *Planet. Space Sci.* 37,
5; the revised 1992 coefficients), compiled with numba and applied to many
GEO points at once. :mod:`beltkit.field.t89` wraps it as a field model.
"""

from __future__ import annotations

import os

import numba as _nb
import numpy as np

from ..constants import R_E_KM

__all__ = ["T89_COEFFICIENTS", "external_field_geo"]

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

def external_field_geo(xyz_km, rot, tilt, im, lev, out):
    """Fill `out` (n, 3) with the external field (GEO, nT) at GEO points (n, 3) in km.

    ``rot`` (m, 3, 3) rotates GEO to GSM and ``tilt`` (m, 3) holds sin, cos and
    the angle of the dipole tilt, for the time index ``im`` (n,) of each point
    (length 1: one time); ``lev`` (n,) or (1,) is the coefficient set (-1: NaN).
    Threaded for large inputs (a parallel launch costs milliseconds), else serial.
    """
    args = (rot, tilt, im, lev, T89_COEFFICIENTS, out)
    threaded = xyz_km.shape[0] >= _MIN_THREADED and os.getpid() == _IMPORT_PID
    (_par_kernel if threaded else _ser_kernel)(xyz_km, *args)


