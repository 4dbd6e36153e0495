r"""A table of field lines in the magnetic equatorial plane: first guesses of drift-shell lines.

For an internal field, the field lines through the magnetic equatorial plane
(MAG frame) change with time only through the field's secular variation. A
table of such lines (:class:`ShellTable`), traced once on a grid of MAG
longitudes :math:`\varphi_j` and start radii :math:`r_k` with the integral
invariant tabulated on each line,

.. math::

    I_{jk}(B_m) = \int_{s_1}^{s_2}\sqrt{1 - B(s)/B_m}\;ds,
    \qquad v = \ln(B_m / B_{min,jk}) = v_{max,jk}\,u^2,\ u \in [0, 1]

(Roederer 1970, ch. 3; :math:`v_{max}` where the mirror point reaches the
footprint; tabulated as :math:`I/u^2`, smooth down to :math:`u = 0`
where :math:`I` grows like :math:`v`, and continued as :math:`v\,I/u^2`
to :math:`v < 0` so that :math:`I` is smooth across the start radius where
:math:`B_{min} = B_m`), gives for any :math:`(\varphi, B_m, I_0)` the start radius of
the line with that :math:`B_m` and :math:`I_0`, the drift shell's line at
that longitude: for each of the four longitudes around :math:`\varphi` the
root in :math:`\ln r` of :math:`I(B_m) - I_0` (cubic interpolation in
:math:`u`, then in :math:`\ln r`), combined by
periodic four-point Lagrange interpolation in :math:`\varphi`. Its accuracy
(about 1e-5 in :math:`\ln r` at most, median 1.5e-6, on 48 x 64 lines) makes it a first guess:
:func:`beltkit.field.lstar` refines it with one traced line (a Newton step
with the table's slope) and falls back to its search where the table has no
answer (open or too distant lines, mirror points below the stop altitude).
"""

from __future__ import annotations

import numba as nb
import numpy as np

from ..constants import R_E_KM
from .coords import frame_matrix
from .shellsearch import integral_invariant_many
from .trace import trace_lines

__all__ = ["ShellTable", "shell_table"]

# grid of the table: MAG longitudes, ln(r / R_E), and u (v = v_max u^2) of the I columns
N_LON = 48
N_R = 64
R_RANGE_RE = (1.05, 12.0)
N_U = 24
# tables kept in memory, keyed by model, epoch bin, stop altitude and tracing tolerance
_CACHE = {}
_CACHE_SIZE = 8


class ShellTable:
    """Field lines of one model at one time on a (MAG longitude, start radius) grid.

    Parameters
    ----------
    model : FieldModel
        An internal field (its lines in the MAG frame change only secularly).
    time : numpy.datetime64
        Epoch of the table.
    altitude_km : float
        Stop altitude of the tracing, in km above the sphere of radius
        R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    rtol : float
        Tracing tolerance.
    """

    def __init__(self, model, time, altitude_km=100.0, rtol=1e-7):
        self.time = np.datetime64(time, "ns")
        phi = 2.0 * np.pi * np.arange(N_LON) / N_LON
        self.ln_r = np.linspace(np.log(R_RANGE_RE[0]), np.log(R_RANGE_RE[1]), N_R)
        mag = np.asarray(frame_matrix("MAG", self.time, model=model), dtype=float)
        ray_mag = np.stack([np.cos(phi), np.sin(phi), np.zeros(N_LON)], -1)
        ray = ray_mag @ mag  # MAG -> GEO (rows of `mag` are the MAG axes in GEO)
        start = (ray[:, None, :] * (np.exp(self.ln_r) * R_E_KM)[None, :, None]).reshape(-1, 3)
        lines = trace_lines(model, start, self.time, altitude_km, rtol=rtol)
        shape = (N_LON, N_R)
        closed = lines.closed
        with np.errstate(invalid="ignore", divide="ignore"):
            weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
            v_max = np.where(closed, np.log(weak / lines.b_min), np.nan) * (1.0 - 1e-9)
        u = np.linspace(0.0, 1.0, N_U)
        table = np.zeros((N_LON * N_R, N_U))
        for c in range(1, N_U):  # one column of mirror fields for all lines at a time
            table[:, c] = integral_invariant_many(
                lines, lines.b_min * np.exp(v_max * u[c] ** 2)) / u[c] ** 2
        # I / u^2 is smooth down to u = 0 (I grows like v near the minimum): extrapolate
        table[:, 0] = 4 * table[:, 1] - 6 * table[:, 2] + 4 * table[:, 3] - table[:, 4]
        self.b_min = np.where(closed, lines.b_min, np.nan).reshape(shape)
        self.v_max = v_max.reshape(shape)
        self.closed = closed.reshape(shape)
        self.i_km = table.reshape(shape + (N_U,))  # I / u^2, km

    def lookup(self, phi_mag, b_m_nt, i0_km):
        """First guess of the shell's start radius and the residual's slope.

        Parameters
        ----------
        phi_mag : ndarray (P,)
            MAG longitudes (rad) of the rays in the magnetic equatorial plane.
        b_m_nt, i0_km : ndarray (P,)
            Mirror field (nT) and integral invariant (km) of the drift shell.

        Returns
        -------
        ln_r : ndarray (P,)
            ln(r / R_E) of the shell's line on each ray (NaN: no answer).
        slope : ndarray (P,)
            d/d ln r of the residual 2 (I - I0) / (I + I0) there (= (dI/d ln r) / I0).
        """
        p = np.asarray(phi_mag, dtype=float).reshape(-1)
        ln_r = np.full(p.size, np.nan)
        slope = np.full(p.size, np.nan)
        _lookup(np.mod(p, 2 * np.pi) / (2 * np.pi / N_LON),
                np.asarray(b_m_nt, dtype=float).reshape(-1),
                np.asarray(i0_km, dtype=float).reshape(-1), self.ln_r, self.b_min,
                self.v_max, self.closed, self.i_km, ln_r, slope)
        return ln_r, slope


def shell_table(model, time, altitude_km=100.0, rtol=1e-7, bin_days=30.0, build=True):
    """Return the (cached) :class:`ShellTable` of `model` for the epoch bin of `time`.

    With ``build=False`` only a table already in memory is returned (else None).
    """
    t = np.datetime64(time, "ns")
    width = np.timedelta64(int(bin_days * 86400e9), "ns")
    k = int((t - np.datetime64("2000-01-01", "ns")) // width)
    key = (repr(model), k, float(altitude_km), float(rtol))
    if key not in _CACHE:
        if not build:
            return None
        if len(_CACHE) >= _CACHE_SIZE:
            _CACHE.pop(next(iter(_CACHE)))
        mid = np.datetime64("2000-01-01", "ns") + k * width + width // 2
        _CACHE[key] = ShellTable(model, mid, altitude_km, rtol)
    return _CACHE[key]


@nb.njit(cache=True)
def _cubic(x, y, xq):
    """Lagrange cubic through four points, value and derivative at xq."""
    val = 0.0
    der = 0.0
    for i in range(4):
        li = 1.0
        dli = 0.0
        for j in range(4):
            if j != i:
                prod = 1.0 / (x[i] - x[j])
                for m in range(4):
                    if m != i and m != j:
                        prod *= (xq - x[m]) / (x[i] - x[m])
                dli += prod
                li *= (xq - x[j]) / (x[i] - x[j])
        val += li * y[i]
        der += dli * y[i]
    return val, der


@nb.njit(cache=True)
def _invariant_at(j, k, b_m, b_min, v_max, closed, i_km, u4, y4):
    """I (km) of table line (j, k) at B_m, continued linearly in v below the line's minimum.

    +inf for an open line, NaN where the mirror point lies below the footprint.
    """
    if not closed[j, k]:
        return np.inf
    v = np.log(b_m / b_min[j, k])
    vm = v_max[j, k]
    if not (v < vm):
        return np.nan
    u = np.sqrt(max(v, 0.0) / vm)
    nu = i_km.shape[2]
    c = min(max(int(u * (nu - 1)) - 1, 0), nu - 4)
    for q in range(4):
        u4[q] = (c + q) / (nu - 1)
        y4[q] = i_km[j, k, c + q]
    g, _ = _cubic(u4, y4, u)
    return g * v / vm  # the table holds I / u^2 = I vm / v


@nb.njit(cache=True)
def _root_on_longitude(j, b_m, i0, ln_r, b_min, v_max, closed, i_km):
    """Return ln r where I(B_m) = I0 on longitude j, and dI/d ln r / I0 there (or NaN).

    I(B_m) - I0 increases with r: bisection over the radii, then Newton on the
    cubic through the four residuals around the crossing.
    """
    nr = ln_r.size
    u4 = np.empty(4)
    y4 = np.empty(4)
    lo, hi = 0, nr - 1
    f_lo = _invariant_at(j, lo, b_m, b_min, v_max, closed, i_km, u4, y4) - i0
    f_hi = _invariant_at(j, hi, b_m, b_min, v_max, closed, i_km, u4, y4) - i0
    if not (f_lo <= 0.0 and f_hi > 0.0):
        return np.nan, np.nan
    while hi - lo > 1:
        mid = (lo + hi) // 2
        f_mid = _invariant_at(j, mid, b_m, b_min, v_max, closed, i_km, u4, y4) - i0
        if np.isnan(f_mid):
            return np.nan, np.nan
        if f_mid > 0.0:
            hi, f_hi = mid, f_mid
        else:
            lo, f_lo = mid, f_mid
    k0 = min(max(hi - 2, 0), nr - 4)
    x4 = ln_r[k0:k0 + 4].copy()
    g4 = np.empty(4)
    for q in range(4):
        g4[q] = _invariant_at(j, k0 + q, b_m, b_min, v_max, closed, i_km, u4, y4) - i0
    if not np.all(np.isfinite(g4)):
        return np.nan, np.nan
    a, b = ln_r[lo], ln_r[hi]
    x = a - f_lo * (b - a) / (f_hi - f_lo)
    der = 0.0
    for _ in range(8):  # Newton on the cubic, kept inside the segment
        val, der = _cubic(x4, g4, x)
        if der <= 0.0:
            break
        x = min(max(x - val / der, a), b)
    return x, der / i0


@nb.njit(cache=True, parallel=True)
def _lookup(pos, b_m, i0, ln_r, b_min, v_max, closed, i_km, out_r, out_s):
    nlon = b_min.shape[0]
    for p in nb.prange(pos.size):
        if not (i0[p] > 0.0 and np.isfinite(b_m[p])):
            continue
        jc = int(np.floor(pos[p]))
        t = pos[p] - jc
        r = 0.0
        s = 0.0
        ok = True
        for q in range(4):
            j = (jc - 1 + q) % nlon
            rj, sj = _root_on_longitude(j, b_m[p], i0[p], ln_r, b_min, v_max, closed, i_km)
            if not (np.isfinite(rj) and np.isfinite(sj)):
                ok = False
                break
            # four-point Lagrange weight of node q - 1 at t (nodes -1, 0, 1, 2)
            w = 1.0
            for m in range(4):
                if m != q:
                    w *= (t - (m - 1.0)) / (q - m)
            r += w * rj
            s += w * sj
        if ok and s > 0.0:
            out_r[p] = r
            out_s[p] = s
