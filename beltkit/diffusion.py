r"""Pitch-angle diffusion rates and lifetimes from the filling of the loss cone.

Near the bounce loss cone :math:`\alpha_0` (equatorial pitch angle, small
angles), the bounce-averaged pitch-angle diffusion equation in steady state,
with particles inside the cone lost after a time :math:`\tau` and none lost
outside it, is (Kennel & Petschek 1966)

.. math::

    \frac{1}{\alpha}\frac{d}{d\alpha}\left(\alpha D \frac{df}{d\alpha}\right)
    = \begin{cases} f/\tau, & \alpha < \alpha_0 \\ 0, & \alpha > \alpha_0 \end{cases}

with :math:`D` the diffusion coefficient at the loss-cone edge (taken constant
across the narrow region). Its solution, regular at :math:`\alpha = 0`, with
:math:`f` and the diffusive flux :math:`\alpha D\, df/d\alpha` continuous at
:math:`\alpha_0`, depends on the single parameter
:math:`z_0 = \alpha_0 / \sqrt{D\tau}` (:func:`loss_cone_profile`). A measured
filling of the cone gives :math:`z_0` (:func:`z0_from_ratio`), hence

.. math:: D = \frac{\alpha_0^2}{z_0^2\, \tau}

(:func:`pitch_angle_diffusion`); :math:`z_0 < 1` is strong diffusion (the cone
is nearly full), :math:`z_0 > 1` weak diffusion (common practice).

Conventions (see ``docs/diffusion.md``):

* :math:`\alpha_0` is the equatorial bounce loss cone (feet at ``altitude_km``,
  100 km by default) and :math:`\tau` is half the bounce period of a particle
  at the loss-cone edge (``loss_time="half_bounce"``): with that choice the
  strong-diffusion limit reproduces the emptying time of an isotropic flux tube
  through both feet, :func:`strong_diffusion_lifetime` (derived there). Some
  authors take a quarter bounce period (``loss_time="quarter_bounce"``), which
  doubles :math:`D` for the same data. The choice is written into every output.
* The data-level :func:`from_pitch_angle_data` inverts a ratio of two measured
  mean fluxes, each modelled as the solid-angle average of the profile over the
  pitch angles the bins or the telescope's swept field-of-view band really
  cover, mapped to the equator by the first invariant.

References
----------
C. F. Kennel and H. E. Petschek, "Limit on stably trapped particle fluxes",
J. Geophys. Res. 71, 1 (1966).
M. Schulz and L. J. Lanzerotti, *Particle Diffusion in the Radiation Belts*
(Springer, 1974).

Examples
--------
>>> from beltkit import diffusion
>>> round(diffusion.cone_mean_ratio(1e-6), 6)
1.0
>>> z = diffusion.z0_from_ratio(diffusion.centre_edge_ratio(3.0), "centre_edge")
>>> round(z, 12)
3.0
"""

from __future__ import annotations

import numpy as np
import scipy.special as _sp
import xarray as xr

from . import dipole, motion, particles
from ._wrap import array_api, as_float_array, check_range
from .constants import R_E_KM, R_E_M
from .errors import ConventionError, PhysicsError

__all__ = [
    "FLAG_MEANINGS",
    "LOSS_TIMES",
    "RATIO_KINDS",
    "REGIME_MEANINGS",
    "centre_edge_ratio",
    "cone_mean_ratio",
    "diffusion_regime",
    "from_pitch_angle_data",
    "loss_cone_profile",
    "pitch_angle_diffusion",
    "strong_diffusion_lifetime",
    "two_angle_ratio",
    "z0_from_ratio",
]

#: Loss-time conventions accepted by :func:`pitch_angle_diffusion`, as fractions of the
#: bounce period of a particle at the loss-cone edge.
LOSS_TIMES = {"half_bounce": 0.5, "quarter_bounce": 0.25}
#: Ratio kinds accepted by :func:`z0_from_ratio`.
RATIO_KINDS = ("cone_mean", "centre_edge", "two_angles")
#: Values of ``diffusion_regime`` (common practice: the boundary is z0 = 1).
REGIME_MEANINGS = {0: "undetermined", 1: "strong_diffusion", 2: "weak_diffusion"}
#: Bits of ``diffusion_flag``.
FLAG_MEANINGS = {
    1: "ratio_above_one_model_not_applicable",
    2: "z0_upper_bound_only",
    4: "z0_lower_bound_only",
    8: "loss_cone_unresolved",
    16: "no_valid_data",
    32: "no_uncertainty",
}

# solver range of z0 (the ratios reach 1 and 0 to double precision beyond it)
_Z_MIN, _Z_MAX = 1e-8, 1e12
_T_LO, _T_HI = np.log(_Z_MIN), np.log(_Z_MAX)


# ---------------------------------------------------------------- Bessel helpers


def _bessel(x):
    """Return ln I0(x), ln(2 I1(x)/x) and I1(x)/I0(x) for x >= 0 (NaN kept).

    Full relative precision also as x -> 0: below x = 1 the power series
    (in s = x^2/4, ten terms, the last below 1e-16 of the sum) go through
    ``log1p``; above, the exponentially scaled Bessel functions of scipy
    (``i0e``, ``i1e``), so that large x does not overflow.
    """
    x = np.asarray(x, dtype=float)
    shape = x.shape
    x = x.ravel()
    l0 = np.full(x.shape, np.nan)
    l1 = np.full(x.shape, np.nan)
    g = np.full(x.shape, np.nan)
    small = x < 1.0
    big = x >= 1.0
    if small.any():
        xs = x[small]
        sq = xs * xs / 4.0
        t0 = np.ones_like(sq)
        t1 = np.ones_like(sq)
        s0 = np.zeros_like(sq)
        s1 = np.zeros_like(sq)
        for k in range(1, 11):
            t0 = t0 * sq / (k * k)  # I0 = sum s^k / (k!)^2
            t1 = t1 * sq / (k * (k + 1))  # 2 I1 / x = sum s^k / (k! (k+1)!)
            s0 += t0
            s1 += t1
        l0[small] = np.log1p(s0)
        l1[small] = np.log1p(s1)
        g[small] = 0.5 * xs * (1.0 + s1) / (1.0 + s0)
    if big.any():
        xb = x[big]
        e0 = _sp.i0e(xb)
        e1 = _sp.i1e(xb)
        l0[big] = xb + np.log(e0)
        l1[big] = xb + np.log(2.0 * e1 / xb)
        g[big] = e1 / e0
    return l0.reshape(shape), l1.reshape(shape), g.reshape(shape)


def _log_i0(x):
    """Return ln I0(x) (see :func:`_bessel`)."""
    return _bessel(x)[0]


def _g(x):
    """I1(x) / I0(x) (0 at x = 0)."""
    return _bessel(x)[2]


# ---------------------------------------------------------------- the profile


def _z0(z0, name="z0"):
    return check_range(z0, name, lo=0.0, hi=np.inf,
                       hint="z0 = alpha0 / sqrt(D tau) is a non-negative number")


def _profile(u, z):
    """Return f / f(alpha0) at u = alpha / alpha0 >= 0 (unchecked kernel)."""
    u = np.asarray(u, dtype=float)
    z = np.asarray(z, dtype=float)
    l0, _, g = _bessel(z)  # functions of z alone: on z's own shape, before broadcasting
    inside = u < 1.0
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        zu = z * np.where(inside, u, 0.0)
        # I0(z u) / I0(z) = exp(z u - ln I0(z)) i0e(z u): no overflow for large z
        pin = np.exp(zu - l0) * _sp.i0e(zu)
        pout = 1.0 + z * g * np.log(np.where(inside, 1.0, u))
    return np.where(inside, pin, pout)


@array_api("1", long_name="steady-state phase-space density over its value at the loss-cone "
                          "edge")
def loss_cone_profile(alpha_eq_deg, alpha0_deg, z0):
    r"""Steady-state pitch-angle profile near the loss cone, relative to its edge value.

    Solving

    .. math::

        \frac{1}{\alpha}\frac{d}{d\alpha}\left(\alpha D \frac{df}{d\alpha}\right)
        = \frac{f}{\tau} \;(\alpha < \alpha_0), \qquad = 0 \;(\alpha > \alpha_0)

    with :math:`x = \alpha / \sqrt{D\tau}` turns the inner equation into the
    modified Bessel equation of order 0, :math:`f'' + f'/x - f = 0`, whose
    solution regular at 0 is :math:`f = A\, I_0(x)`; outside,
    :math:`\alpha D f' = C` gives :math:`f = B + C' \ln(\alpha/\alpha_0)`.
    Continuity of :math:`f` at :math:`\alpha_0` gives :math:`B = A I_0(z_0)`, and
    continuity of the diffusive flux :math:`\alpha D f'` gives
    :math:`C' = A z_0 I_1(z_0)` (:math:`I_0' = I_1`), so with
    :math:`z_0 = \alpha_0/\sqrt{D\tau}`

    .. math::

        \frac{f(\alpha)}{f(\alpha_0)} =
        \begin{cases}
        I_0(z_0 \alpha/\alpha_0) / I_0(z_0), & \alpha < \alpha_0, \\
        1 + z_0 \dfrac{I_1(z_0)}{I_0(z_0)} \ln(\alpha/\alpha_0), & \alpha \ge \alpha_0.
        \end{cases}

    Parameters
    ----------
    alpha_eq_deg : array_like or xarray.DataArray
        Equatorial pitch angle in degrees (0-90; small angles: the equation
        is written in the small-angle limit).
    alpha0_deg : array_like or xarray.DataArray
        Equatorial loss-cone half-angle in degrees, in (0, 90).
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0` (0: strong diffusion, a flat profile).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`f(\alpha)/f(\alpha_0)`. The exponentially scaled Bessel functions
        of :mod:`scipy.special` (``i0e``, ``i1e``) keep large :math:`z_0` finite.

    Notes
    -----
    Kennel & Petschek (1966); the derivation above is checked in the tests by
    integrating the differential equation numerically (no Bessel functions).

    Examples
    --------
    >>> round(loss_cone_profile(0.0, 4.0, 0.0), 12)
    1.0
    >>> round(loss_cone_profile(8.0, 4.0, 1.0), 6)
    1.309414
    """
    a = check_range(alpha_eq_deg, "alpha_eq_deg", lo=0.0, hi=90.0,
                    hint="Equatorial pitch angles are in degrees, 0-90 (fold larger ones)")
    a0 = check_range(alpha0_deg, "alpha0_deg", lo=0.0, hi=90.0, lo_open=True, hi_open=True,
                     hint="alpha0_deg is the equatorial loss-cone half-angle in degrees")
    return _profile(a / a0, _z0(z0))


@array_api("1", long_name="mean phase-space density in the loss cone over its edge value")
def cone_mean_ratio(z0):
    r"""Mean of the profile over the loss cone's solid angle, over its edge value.

    .. math::

        \frac{\langle f\rangle_{cone}}{f(\alpha_0)}
        = \frac{2}{\alpha_0^2}\int_0^{\alpha_0} \frac{I_0(z_0\alpha/\alpha_0)}{I_0(z_0)}
          \alpha\, d\alpha = \frac{2 I_1(z_0)}{z_0 I_0(z_0)}

    (weight :math:`\alpha\, d\alpha`, the solid angle at small angles;
    :math:`\int_0^z x I_0(x) dx = z I_1(z)`). It falls from 1 at
    :math:`z_0 = 0` (full cone) to :math:`\approx 2/z_0` for :math:`z_0 \gg 1`.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(cone_mean_ratio(1000.0) * 1000.0, 3)
    1.999
    """
    z = _z0(z0)
    l0, l1, _ = _bessel(z)
    return np.exp(l1 - l0)


@array_api("1", long_name="phase-space density at the loss-cone centre over its edge value")
def centre_edge_ratio(z0):
    r"""Profile at the centre of the loss cone over its edge value.

    .. math:: \frac{f(0)}{f(\alpha_0)} = \frac{1}{I_0(z_0)}

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(centre_edge_ratio(2.0), 6)
    0.438676
    """
    return np.exp(-_log_i0(_z0(z0)))


def _two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg):
    a0 = check_range(alpha0_deg, "alpha0_deg", lo=0.0, hi=90.0, lo_open=True, hi_open=True,
                     hint="alpha0_deg is the equatorial loss-cone half-angle in degrees")
    a1 = check_range(alpha1_deg, "alpha1_deg", lo=0.0, hi=90.0,
                     hint="Equatorial pitch angles are in degrees, 0-90")
    a2 = check_range(alpha2_deg, "alpha2_deg", lo=0.0, hi=90.0,
                     hint="Equatorial pitch angles are in degrees, 0-90")
    with np.errstate(invalid="ignore"):
        bad = a1 >= a2
    if np.any(bad):
        raise PhysicsError("argument 'alpha1_deg' must be smaller than 'alpha2_deg' (the ratio "
                           "is f(alpha1)/f(alpha2) <= 1); swap the two angles and invert "
                           "1/ratio instead")
    return a1 / a0, a2 / a0


def _log_p(u, z, l0z=None, gz=None):
    """Return ln f(u)/f(alpha0), accurate for small z (u = alpha/alpha0)."""
    if l0z is None:
        l0z, _, gz = _bessel(z)
    inside = u < 1.0
    lin = _log_i0(z * np.where(inside, u, 0.0)) - l0z
    lout = np.log1p(z * gz * np.log(np.where(inside, 1.0, u)))
    return np.where(inside, lin, lout)


@array_api("1", long_name="ratio of the steady-state phase-space density at two equatorial "
                          "pitch angles")
def two_angle_ratio(z0, alpha0_deg, alpha1_deg, alpha2_deg):
    r"""Ratio of the profile at two equatorial pitch angles, :math:`f(\alpha_1)/f(\alpha_2)`.

    .. math:: R = \frac{f(\alpha_1)}{f(\alpha_2)}, \qquad \alpha_1 < \alpha_2,

    with :math:`f` of :func:`loss_cone_profile`; for example a telescope
    looking into the cone (:math:`\alpha_1`) and one seeing the locally
    mirroring particles (:math:`\alpha_2`), each mapped to the equator. It falls
    from 1 at :math:`z_0 = 0` to 0 as :math:`z_0 \to \infty` when
    :math:`\alpha_1 < \alpha_0`, or to :math:`\ln(\alpha_1/\alpha_0)/\ln(\alpha_2/\alpha_0)`
    when both angles are outside the cone.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0`.
    alpha0_deg : array_like or xarray.DataArray
        Equatorial loss cone in degrees.
    alpha1_deg, alpha2_deg : array_like or xarray.DataArray
        Equatorial pitch angles in degrees, ``alpha1_deg < alpha2_deg``.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        The ratio, in (0, 1].

    Examples
    --------
    >>> round(two_angle_ratio(1.0, 4.0, 0.0, 4.0), 6) == round(centre_edge_ratio(1.0), 6)
    True
    """
    u1, u2 = _two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg)
    z = _z0(z0)
    return np.exp(_log_p(u1, z) - _log_p(u2, z))


# ---------------------------------------------------------------- inversion


def _neg_log_ratio(kind, z, u1=None, u2=None):
    """Return -ln R(z) and d(-ln R)/dz for a ratio kind (unchecked kernel)."""
    l0, l1, g = _bessel(z)
    if kind == "cone_mean":
        # d/dz ln(2 I1 / (z I0)) = 1/g - 2/z - g; small z: -z/4 (the difference cancels)
        with np.errstate(divide="ignore", invalid="ignore"):
            dv = np.where(z < 0.05, z / 4.0, 2.0 / z + g - 1.0 / g)
        return l0 - l1, dv
    if kind == "centre_edge":
        return l0, g
    v = _log_p(u2, z, l0, g) - _log_p(u1, z, l0, g)
    k = z * g
    dk = z * (1.0 - g * g)

    def dlogp(u):
        inside = u < 1.0
        lu = np.log(np.where(inside, 1.0, u))
        gu = _g(z * np.where(inside, u, 0.0))
        return np.where(inside, u * gu - g, dk * lu / (1.0 + k * lu))

    return v, dlogp(u2) - dlogp(u1)


def _q(kind, t, u1=None, u2=None):
    """Return q = ln(-ln R) as a function of t = ln z, with dq/dt (increasing in t)."""
    z = np.exp(t)
    v, dv = _neg_log_ratio(kind, z, u1, u2)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.log(v)
        dq = z * dv / v
        # small z: -ln R ~ c z^2 for every kind, so q ~ 2 t + const
        dq = np.where((z < 1e-3) | ~np.isfinite(dq) | (dq <= 0), 2.0, dq)
    return q, dq


_TABLES = {}


def _table(kind):
    """Return (q, t, dt/dq) on a grid of t = ln z for the closed-form kinds."""
    if kind not in _TABLES:
        t = np.linspace(_T_LO, _T_HI, 4001)
        q, dq = _q(kind, t)
        _TABLES[kind] = (q, t, 1.0 / dq)
    return _TABLES[kind]


def _guess(kind, y):
    """Return the initial t for q(t) = y: cubic Hermite interpolation of the tabulated inverse."""
    q, t, dtdq = _table(kind)
    yc = np.clip(y, q[0], q[-1])
    i = np.clip(np.searchsorted(q, yc) - 1, 0, q.size - 2)
    h = q[i + 1] - q[i]
    s = (yc - q[i]) / h
    s2 = s * s
    s3 = s2 * s
    return ((2 * s3 - 3 * s2 + 1) * t[i] + (s3 - 2 * s2 + s) * h * dtdq[i]
            + (-2 * s3 + 3 * s2) * t[i + 1] + (s3 - s2) * h * dtdq[i + 1])


def _solve(kind, y, u1=None, u2=None):
    """Solve q(t) = y for t by bracketed (safeguarded) Newton steps, vectorised.

    ``y`` = ln(-ln r) for ratios r in (0, 1). Returns z (NaN outside the reach
    [1e-8, 1e12] of the solver). Newton converges quadratically, so a step
    below 1e-10 in t leaves an error far below rounding after it is taken.
    """
    y = np.asarray(y, dtype=float)
    shape = y.shape
    y = y.ravel()
    t = np.full(y.shape, np.nan)
    if kind in ("cone_mean", "centre_edge"):
        q, _, _ = _table(kind)
        ok = np.isfinite(y) & (y > q[0]) & (y < q[-1])
        t0 = _guess(kind, y)
    else:
        u1 = np.broadcast_to(u1, shape).ravel()
        u2 = np.broadcast_to(u2, shape).ravel()
        q_lo, _ = _q(kind, np.full(y.shape, _T_LO), u1, u2)
        q_hi, _ = _q(kind, np.full(y.shape, _T_HI), u1, u2)
        ok = np.isfinite(y) & (y > q_lo) & (y < q_hi)
        if u1.size and np.all(u1 == u1[0]) and np.all(u2 == u2[0]):
            # one pair of angles for all: a table of its own gives a close start
            tt = np.linspace(_T_LO, _T_HI, 4001)
            qq, dq = _q(kind, tt, np.full(tt.shape, u1[0]), np.full(tt.shape, u2[0]))
            _TABLES["two_angles"] = (qq, tt, 1.0 / dq)
            t0 = np.clip(_guess("two_angles", y), _T_LO, _T_HI)
        else:  # start from the centre-to-edge inversion (the same small-z law)
            t0 = np.clip(_guess("centre_edge", y), _T_LO + 1.0, _T_HI - 1.0)
    idx = np.flatnonzero(ok)
    tc = t0[idx]
    lo = np.full(idx.size, _T_LO)
    hi = np.full(idx.size, _T_HI)
    yc = y[idx]
    a1 = None if u1 is None else u1[idx]
    a2 = None if u2 is None else u2[idx]
    for _ in range(200):
        if idx.size == 0:
            break
        qv, dq = _q(kind, tc, a1, a2)
        f = qv - yc
        hi = np.where(f > 0, tc, hi)
        lo = np.where(f <= 0, tc, lo)
        step = f / dq
        tn = tc - step
        scale = np.maximum(1.0, np.abs(tc))
        done = (np.abs(step) <= 1e-10 * scale) | (f == 0) | (hi - lo <= 1e-14 * scale)
        bad = ~done & ~((tn > lo) & (tn < hi))
        tn = np.where(bad, 0.5 * (lo + hi), tn)
        t[idx[done]] = tn[done]
        keep = ~done
        if keep.all():
            tc = tn
            continue
        idx, tc, lo, hi, yc = idx[keep], tn[keep], lo[keep], hi[keep], yc[keep]
        if a1 is not None:
            a1, a2 = a1[keep], a2[keep]
    return np.exp(t).reshape(shape)


@array_api("1", long_name="loss-cone parameter z0 = alpha0 / sqrt(D tau)")
def z0_from_ratio(ratio, kind, alpha0_deg=None, alpha1_deg=None, alpha2_deg=None):
    r"""Invert a loss-cone filling ratio for :math:`z_0`.

    Each ratio is a monotone decreasing function of :math:`z_0` from 1 at
    :math:`z_0 = 0`: :func:`cone_mean_ratio` (``"cone_mean"``),
    :func:`centre_edge_ratio` (``"centre_edge"``) and :func:`two_angle_ratio`
    (``"two_angles"``, which needs the three angles). With
    :math:`q = \ln(-\ln R)` and :math:`t = \ln z_0`, :math:`q(t)` is increasing
    and nearly linear in both limits (:math:`-\ln R \propto z_0^2` for small
    :math:`z_0`); it is solved element by element by Newton steps kept inside a
    shrinking bracket (bisection when a step leaves it), all elements at once,
    started from a tabulated inverse. No loop runs over the samples.

    Parameters
    ----------
    ratio : array_like or xarray.DataArray
        Measured ratio(s).
    kind : {"cone_mean", "centre_edge", "two_angles"}
        Which ratio it is.
    alpha0_deg, alpha1_deg, alpha2_deg : array_like or xarray.DataArray, optional
        Loss cone and the two equatorial pitch angles (degrees,
        ``alpha1_deg < alpha2_deg``) for ``"two_angles"``.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`z_0`; NaN where the ratio is outside (0, 1), where it lies below
        the ratio's limit for :math:`z_0 \to \infty` (two angles both outside
        the cone), or beyond the solver's reach :math:`[10^{-8}, 10^{12}]`.

    Raises
    ------
    PhysicsError
        For an unknown ``kind`` or missing angles.

    Notes
    -----
    Round trips :math:`z_0 \to R \to z_0` agree to better than 1e-9 (relative)
    for :math:`0.01 \le z_0 \le 50` (tests). Kennel & Petschek (1966).

    Examples
    --------
    >>> round(z0_from_ratio(cone_mean_ratio(0.5), "cone_mean"), 12)
    0.5
    """
    if kind not in RATIO_KINDS:
        raise PhysicsError(f"argument 'kind' must be one of {', '.join(RATIO_KINDS)}; got "
                           f"{kind!r}")
    r = as_float_array(ratio, "ratio")
    u1 = u2 = None
    if kind == "two_angles":
        if alpha0_deg is None or alpha1_deg is None or alpha2_deg is None:
            raise PhysicsError("kind='two_angles' needs alpha0_deg, alpha1_deg and alpha2_deg "
                               "(equatorial loss cone and the two pitch angles, degrees)")
        u1, u2 = _two_angle_args(alpha0_deg, alpha1_deg, alpha2_deg)
        shape = np.broadcast_shapes(r.shape, np.shape(u1), np.shape(u2))
        r = np.broadcast_to(r, shape)
        u1, u2 = np.broadcast_to(u1, shape), np.broadcast_to(u2, shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = (r > 0) & (r < 1)
        y = np.where(inside, np.log(-np.log(np.where(inside, r, 0.5))), np.nan)
    return _solve(kind, y, u1, u2)


# ---------------------------------------------------------------- rates and lifetimes


def _loss_fraction(loss_time):
    if loss_time not in LOSS_TIMES:
        raise PhysicsError(f"argument 'loss_time' must be one of {', '.join(LOSS_TIMES)}; got "
                           f"{loss_time!r}")
    return LOSS_TIMES[loss_time]


def _loss_time_text(loss_time):
    return loss_time.replace("_", " ") + " period of a particle at the loss-cone edge"


def _c7(cos2_foot):
    r"""Return the integral of cos^7 between the feet, 2 (s - s^3 + 3 s^5/5 - s^7/7)."""
    s = np.sqrt(1.0 - cos2_foot)
    s2 = s * s
    return 2.0 * s * (1.0 - s2 + s2 * s2 * (0.6 - s2 / 7.0))


def _tau_sd(L, energy_kev, species, sin2_a0, altitude_km):
    """tau_SD = 2 L R_E C7 / (v sin^2 alpha0) (unchecked kernel)."""
    cos2 = (1.0 + altitude_km / R_E_KM) / L
    v = particles.speed(energy_kev, species)
    return 2.0 * L * R_E_M * _c7(cos2) / (v * sin2_a0)


@array_api("s", long_name="strong-diffusion lifetime: emptying time of an isotropic flux tube "
                          "through both feet")
def strong_diffusion_lifetime(L, energy_kev, species="electron", altitude_km=100.0):
    r"""Lifetime of an isotropic flux tube that empties through both feet (strong diffusion).

    With isotropic flux :math:`j` on a dipole line, the particles of one energy
    per unit equatorial cross-section of the flux tube number
    :math:`N = (4\pi j / v) \int n\, B_{eq}/B\, ds = (4\pi j/v) L R_E C_7`,
    because :math:`ds\, B_{eq}/B = L R_E \cos^7\lambda\, d\lambda` on the line
    :math:`r = L R_E\cos^2\lambda`; each foot (where the local loss cone is the
    whole downgoing hemisphere) receives :math:`\pi j` per unit area, and its
    area per unit equatorial area is :math:`B_{eq}/B_f = \sin^2\alpha_0`.
    Hence

    .. math::

        \tau_{SD} = \frac{N}{2\pi j \sin^2\alpha_0}
        = \frac{2 L R_E C_7}{v \sin^2\alpha_0}, \qquad
        C_7 = \int_{-\lambda_f}^{\lambda_f}\cos^7\lambda\, d\lambda
        = 2\left(s - s^3 + \tfrac35 s^5 - \tfrac17 s^7\right),\ s = \sin\lambda_f .

    With feet at the surface, :math:`1/\sin^2\alpha_0 = L^3 (4 - 3/L)^{1/2}`, so
    :math:`\tau_{SD} = 2 C_7 L^4 (4 - 3/L)^{1/2} R_E / v` with
    :math:`C_7 \to 32/35` at large L: the :math:`L^4 (4 - 3/L)^{1/2} R_E/v`
    scaling of the published form (Schulz 1974, from memory; its prefactor was
    not checked against the paper, the one here is derived above and checked
    by quadrature in the tests).

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (> 0).
    species : str or Species
        Particle species (:func:`beltkit.particles.get_species`).
    altitude_km : float
        Altitude of the feet where particles are lost (km, default 100).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\tau_{SD}` in s.

    Notes
    -----
    Relation to the loss time: with :math:`\tau` half a bounce period, the loss
    rate :math:`N_{cone}/\tau` of a full cone equals the precipitating flux
    :math:`2\pi j \sin^2\alpha_0` above (:math:`N_{cone} = \pi j \sin^2\alpha_0 T_b`
    at small :math:`\alpha_0`), so the limit :math:`z_0 \to 0` of the
    diffusion solution is this emptying time (Kennel & Petschek 1966).

    Examples
    --------
    >>> round(strong_diffusion_lifetime(4.5, 300.0), 2)
    35.67
    """
    L = check_range(L, "L", lo=1.0, hi=np.inf, hi_open=True,
                    hint="L is the equatorial distance of the field line in Earth radii")
    e = check_range(energy_kev, "energy_kev", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                    hint="Kinetic energy is in keV and positive")
    a0 = np.radians(dipole.bounce_loss_cone(L, altitude_km=altitude_km))
    return _tau_sd(L, e, species, np.sin(a0) ** 2, float(altitude_km))


def _diffusion(z0, L, energy_kev, species, altitude_km, loss_time):
    frac = _loss_fraction(loss_time)
    z = _z0(z0)
    a0 = dipole.bounce_loss_cone(L, altitude_km=altitude_km)
    e = check_range(energy_kev, "energy_kev", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                    hint="Kinetic energy is in keV and positive")
    tau = frac * motion.bounce_period(e, L, a0, species)
    with np.errstate(divide="ignore"):
        return np.radians(a0) ** 2 / (z * z * tau)


_pad_wrapped = array_api("s-1", long_name="bounce-averaged pitch-angle diffusion coefficient "
                                          "at the loss-cone edge")(_diffusion)


def pitch_angle_diffusion(z0, L, energy_kev, species="electron", *, altitude_km=100.0,
                          loss_time="half_bounce"):
    r"""Pitch-angle diffusion coefficient at the loss-cone edge from :math:`z_0`, in a dipole.

    .. math:: D = \frac{\alpha_0^2}{z_0^2\, \tau}, \qquad \tau = c\, T_b(E, L, \alpha_0)

    with :math:`\alpha_0` the equatorial bounce loss cone (radians) of the
    centred dipole for feet at ``altitude_km`` (:func:`beltkit.dipole.bounce_loss_cone`)
    and :math:`T_b` the bounce period of a particle at the loss-cone edge
    (:func:`beltkit.motion.bounce_period`); :math:`c = 1/2` by default
    (``"half_bounce"``: particles in the cone reach an atmosphere within half a
    bounce; the strong-diffusion limit then matches
    :func:`strong_diffusion_lifetime`), :math:`1/4` for ``"quarter_bounce"``.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0` (0 gives an infinite D).
    L : array_like or xarray.DataArray
        Dipole L.
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV.
    species : str or Species
        Particle species.
    altitude_km : float, keyword-only
        Altitude of the feet (km, default 100).
    loss_time : {"half_bounce", "quarter_bounce"}, keyword-only
        Loss time inside the cone, as a fraction of the bounce period.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`D` in s-1 (a DataArray's ``long_name`` names the loss time).

    Notes
    -----
    Kennel & Petschek (1966).

    Examples
    --------
    >>> d = pitch_angle_diffusion(1.0, 4.5, 300.0)
    >>> round(d / pitch_angle_diffusion(1.0, 4.5, 300.0, loss_time="quarter_bounce"), 12)
    0.5
    """
    out = _pad_wrapped(z0, L, energy_kev, species, altitude_km, loss_time)
    if isinstance(out, xr.DataArray):
        out.attrs["long_name"] += f" (loss time: {_loss_time_text(loss_time)})"
        out.attrs["beltkit_loss_time"] = loss_time
    return out


def _regime(z, z_lo=None, z_hi=None):
    z = np.asarray(z, dtype=float)
    reg = np.where(z < 1.0, 1, np.where(z >= 1.0, 2, 0))
    if z_lo is not None:
        reg = np.where(np.isnan(z) & (z_hi < 1.0), 1, reg)
        reg = np.where(np.isnan(z) & (z_lo > 1.0), 2, reg)
    return reg.astype(np.int8)


def diffusion_regime(z0):
    r"""Diffusion regime of :math:`z_0`: 1 strong (:math:`z_0 < 1`), 2 weak, 0 undetermined.

    The boundary :math:`z_0 = 1` is common practice (Kennel & Petschek 1966:
    the loss cone is nearly full below it and nearly empty well above it).

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0` (NaN gives 0).

    Returns
    -------
    numpy.ndarray, int or xarray.DataArray
        int8 codes of :data:`REGIME_MEANINGS` (a DataArray carries
        ``flag_values`` and ``flag_meanings``).

    Examples
    --------
    >>> diffusion_regime([0.5, 3.0, float("nan")]).tolist()
    [1, 2, 0]
    """
    if isinstance(z0, xr.DataArray):
        out = xr.apply_ufunc(_regime, z0, dask="parallelized", output_dtypes=[np.int8])
        out.attrs = _regime_attrs()
        return out
    r = _regime(as_float_array(z0, "z0"))
    return int(r) if r.ndim == 0 else r


def _regime_attrs():
    return {"long_name": "pitch-angle diffusion regime (boundary z0 = 1, common practice)",
            "flag_values": np.array(list(REGIME_MEANINGS), dtype=np.int8),
            "flag_meanings": " ".join(REGIME_MEANINGS.values())}


# ---------------------------------------------------------------- from data

# cells in u = alpha_eq / alpha0: 50 uniform inside the cone, geometric outside to 64
_U_EDGES = np.concatenate([np.linspace(0.0, 1.0, 101), np.linspace(1.0, 1.5, 101)[1:],
                           1.5 * 1.03 ** np.arange(1, 129)])
_N_INSIDE = 100
# z0 grid of the per-sample response tables (t = ln z)
_T_GRID = np.linspace(np.log(1e-3), np.log(1e3), 193)
_SAMPLE_BLOCK = 2048


def _cell_means(z):
    """Mean of the profile over each u cell (weight u du), shape (cells, len(z))."""
    ua = _U_EDGES[:-1, None]
    ub = _U_EDGES[1:, None]
    z = np.asarray(z, dtype=float)[None, :]
    inside = ub <= 1.0 + 1e-12
    with np.errstate(over="ignore", invalid="ignore"):
        # (2/(ub^2 - ua^2)) [u I1(z u) / z]_ua^ub / I0(z), scaled Bessel functions
        def term(u):
            return u * _sp.i1e(z * u) * np.exp(z * (u - 1.0))

        pin = 2.0 * (term(ub) - term(ua)) / (z * _sp.i0e(z) * (ub * ub - ua * ua))
        k = z * _g(z)
        lb = np.log(np.maximum(ub, 1.0))
        la = np.log(np.maximum(ua, 1.0))
        # int u ln u du = u^2 ln u / 2 - u^2 / 4
        iln = (ub * ub * lb / 2 - ub * ub / 4) - (ua * ua * la / 2 - ua * ua / 4)
        pout = 1.0 + k * 2.0 * iln / (ub * ub - ua * ua)
    return np.where(inside, pin, pout)


_CELL_TABLE = {}


def _cell_table():
    if "p" not in _CELL_TABLE:
        _CELL_TABLE["p"] = _cell_means(np.exp(_T_GRID))
    return _CELL_TABLE["p"]


def _band_cumulative(cos1, cos2, c):
    """Solid angle of bands [a1, a2] (cosines) at local angles below phi on both sides.

    ``c`` = cos(phi), phi in [0, 90] deg; broadcast as numpy arrays.
    """
    return 2.0 * np.pi * ((cos1 - np.clip(c, cos2, cos1)) + (np.clip(-c, cos2, cos1) - cos2))


def _cell_weights(cos1, cos2, coef, cphi):
    """Weights (n, cells) over the u cells of the flux-weighted mean sum_i coef_i j_i.

    The cumulative weight below a local angle, sum_i (coef_i / Omega_i) S_i, is
    piecewise linear in cos(phi) with breaks at the band edges: it is computed
    exactly at the breaks (one matrix product) and interpolated linearly there.
    ``cos1``, ``cos2`` are (P,) for fixed bins (``coef`` may then be a tuple of
    coefficient arrays sharing the interpolation) or (n, 1) for one band per sample.
    """
    omega = 2.0 * np.pi * (cos1 - cos2)
    with np.errstate(invalid="ignore", divide="ignore"):
        inv = np.where(omega > 0, 1.0 / np.where(omega > 0, omega, 1.0), 0.0)
    w = tuple(c * inv for c in coef) if isinstance(coef, tuple) else coef * inv
    if cos1.ndim == 2:  # one band per sample
        cum = w * _band_cumulative(cos1, cos2, cphi)
        return np.diff(cum, axis=-1)
    breaks = np.unique(np.clip(np.concatenate([cos1, cos2, -cos1, -cos2, [0.0, 1.0]]),
                               0.0, 1.0))
    # the interpolation plan (break index and fraction) is shared by every weight row
    j = np.clip(np.searchsorted(breaks, cphi), 1, breaks.size - 1)
    x0, x1 = breaks[j - 1], breaks[j]
    frac = (cphi - x0) / (x1 - x0)
    s_breaks = _band_cumulative(cos1[:, None], cos2[:, None], breaks[None, :])  # (P, B)
    out = []
    for wk in (w if isinstance(w, tuple) else (w,)):
        gb = wk @ s_breaks  # (n, B)
        g0 = np.take_along_axis(gb, j - 1, axis=-1)
        g1 = np.take_along_axis(gb, j, axis=-1)
        out.append(np.diff(g0 + (g1 - g0) * frac, axis=-1))
    return tuple(out) if isinstance(w, tuple) else out[0]


def _cone_share(a1, a2, blc):
    """Solid angle of bands [a1, a2] (deg) inside the cones [0, blc] and [180 - blc, 180]."""
    c1, c2 = np.cos(np.radians(a1)), np.cos(np.radians(a2))
    cb = np.cos(np.radians(blc))[:, None]
    return 2.0 * np.pi * ((c1 - np.clip(cb, c2, c1)) + (np.clip(-cb, c2, c1) - c2))


def _table_y(rtab):
    """Return ln(-ln R) of per-sample tables (n, Z), made non-decreasing along z."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ytab = np.log(-np.log(np.clip(rtab, 1e-300, 1.0)))
    return np.maximum.accumulate(np.where(np.isfinite(ytab), ytab, -np.inf), axis=-1)


def _invert_tables(r, ytab):
    """Invert per-sample tables for ratios r (n, K); ``ytab`` from :func:`_table_y`.

    The bracketing table entry is found by a vectorised bisection over the
    table index (8 gathers for 193 entries), then t = ln z is interpolated
    linearly against ln(-ln R); below the table the small-z law q = 2 t + const
    continues it; NaN above it or for r outside (0, 1).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = (r > 0) & (r < 1)
        y = np.where(inside, np.log(-np.log(np.where(inside, r, 0.5))), np.nan)
    n_z = ytab.shape[-1]
    lo = np.zeros(r.shape, dtype=np.intp)  # invariant: ytab[lo] < y <= ytab[hi] when inside
    hi = np.full(r.shape, n_z - 1, dtype=np.intp)
    while True:
        active = hi - lo > 1
        if not active.any():
            break
        mid = (lo + hi) // 2
        below = np.take_along_axis(ytab, mid, axis=-1) < y
        lo = np.where(active & below, mid, lo)
        hi = np.where(active & ~below, mid, hi)
    y0 = np.take_along_axis(ytab, lo, axis=-1)
    y1 = np.take_along_axis(ytab, hi, axis=-1)
    first = ytab[:, :1]
    last = ytab[:, -1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _T_GRID[lo] + (y - y0) * (_T_GRID[hi] - _T_GRID[lo]) / (y1 - y0)
        t = np.where(y <= first, _T_GRID[0] + (y - first) / 2.0, t)
    t = np.where(y > last, np.nan, t)
    return np.where(np.isfinite(y), np.exp(t), np.nan)


def _prepared(ds, model, allow_negative):
    from .pad.conventions import check

    return check(ds, model=model, allow_negative=allow_negative)


def _flux_arrays(ds, prep):
    """Flux and 1-sigma error (time, energy, angle) in canonical units, masked (numpy)."""
    adim = "look" if prep.kind == "telescope" else "pitch_angle"
    order = ("time", "energy", adim)
    x = prep.flux_mask.apply(np.asarray(ds["flux"].transpose(*order).values), np.float64)
    s = None
    if prep.error_source == "flux_err":
        s = prep.err_mask.apply(np.asarray(ds["flux_err"].transpose(*order).values), np.float64)
    elif prep.error_source == "counts":
        from .pad import flux_unit_factor

        counts = prep.counts_mask.apply(np.asarray(ds["counts"].transpose(*order).values),
                                        np.float64)
        c2f = ds["counts_to_flux"].astype(float)
        c2f = (c2f * flux_unit_factor(c2f.attrs["units"])).broadcast_like(
            ds["flux"]).transpose(*order).values
        # Poisson, N = 0 counted as 1 (the convention of docs/conventions.md)
        s = np.where(np.isnan(counts), np.nan, np.sqrt(np.maximum(counts, 1.0)) * c2f)
    return x, s


def _cones_from(ds, model, altitude_km, cones):
    needed = ("blc_local", "blc_equatorial", "b_local", "b_min", "L")
    if cones is None:
        from .pad import partition

        cones = partition(ds, model=model, altitude_km=altitude_km)
    missing = [n for n in needed if n not in cones.variables]
    if missing:
        raise ConventionError([f"cones: missing {', '.join(missing)}; pass the result of "
                               "beltkit.pad.partition (or a summary) for the same dataset, or "
                               "cones=None"])
    if cones.sizes.get("time") != ds.sizes["time"]:
        raise ConventionError([f"cones: {cones.sizes.get('time')} times, but the flux dataset "
                               f"has {ds.sizes['time']}; pass the partition of this dataset"])
    return {n: np.asarray(cones[n].values, dtype=float) for n in needed}


def _measurement(ds, prep, c, x, s, band_deg):
    """Bands, numerator and denominator coefficients per sample and the measured ratio."""
    blc = c["blc_local"]
    n = blc.shape[0]
    if prep.kind == "bins":
        a1 = np.broadcast_to(prep.edges[:, 0], (n, prep.edges.shape[0]))
        a2 = np.broadcast_to(prep.edges[:, 1], (n, prep.edges.shape[0]))
        num = _cone_share(a1, a2, blc)
        outer = np.minimum(blc + band_deg, 90.0)
        den = _cone_share(a1, a2, outer) - num
        num_c = num
    else:
        from .pad import swept_band

        look = ds["look_pitch_angle"].transpose("time", "look").values.astype(float)
        look = look * prep.angle_scale.get("look_pitch_angle", 1.0)
        half = ds["look_half_angle"].values.astype(float) * prep.angle_scale.get(
            "look_half_angle", 1.0)
        a1, a2 = swept_band(look, half)
        valid = np.isfinite(a1) & np.isfinite(a2) & (a2 > a1)
        a1 = np.where(valid, a1, 0.0)
        a2 = np.where(valid, a2, 0.0)
        omega = 2.0 * np.pi * (np.cos(np.radians(a1)) - np.cos(np.radians(a2)))
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(valid, _cone_share(a1, a2, blc) / omega, np.nan)
        k_in = np.argmax(np.where(np.isnan(frac), -1.0, frac), axis=1)
        k_out = np.argmin(np.where(np.isnan(frac), 2.0, frac), axis=1)
        eye = np.eye(a1.shape[1])
        num_c = eye[k_in] * valid
        den = eye[k_out] * valid
        den = np.where((k_in == k_out)[:, None], 0.0, den)
    with np.errstate(invalid="ignore", divide="ignore"):
        cn = num_c / num_c.sum(axis=1, keepdims=True)
        cd = den / den.sum(axis=1, keepdims=True)
    used = (cn > 0) | (cd > 0)  # (n, P)
    ok = ~np.any(used[:, None, :] & ~np.isfinite(x), axis=-1)  # (n, E)
    x0 = np.where(np.isfinite(x), x, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        num_f = np.einsum("nep,np->ne", x0, np.nan_to_num(cn))
        den_f = np.einsum("nep,np->ne", x0, np.nan_to_num(cd))
        r = np.where(ok & (den_f > 0), num_f / den_f, np.nan)
        if s is None:
            sr = np.full(r.shape, np.nan)
        else:
            s0 = np.where(np.isfinite(s), s, np.nan)
            coef = (np.nan_to_num(cn)[:, None, :] - r[..., None] * np.nan_to_num(cd)[:, None, :])
            var = np.nansum(np.where(used[:, None, :], (s0 * coef) ** 2, 0.0), axis=-1)
            bad_s = np.any(used[:, None, :] & ~np.isfinite(s), axis=-1)
            sr = np.where(bad_s, np.nan, np.sqrt(var) / den_f)
    return a1, a2, cn, cd, r, sr


def _response_tables(a1, a2, cn, cd, c):
    """Per-sample modelled ratio R(z) on the z grid and the in-cone shares of both means."""
    n = c["blc_local"].shape[0]
    ptab = _cell_table()
    n_z = _T_GRID.size
    rtab = np.full((n, n_z), np.nan)
    share_num = np.full(n, np.nan)
    share_den = np.full(n, np.nan)
    n_in = _N_INSIDE  # cells inside the cone
    if a1.ndim == 2 and not np.all(a1 == a1[:1]):  # telescopes: one band per mean
        kn = np.argmax(np.nan_to_num(cn), axis=1)[:, None]
        kd = np.argmax(np.nan_to_num(cd), axis=1)[:, None]
        # a tuple per mean, built at once (a generator here would see only the last k)
        bands = [tuple(np.take_along_axis(a, k, axis=1) for a in (a1, a2)) for k in (kn, kd)]
        bands = [tuple(np.cos(np.radians(b)) for b in pair) for pair in bands]
        coefs = (np.ones((n, 1)), np.ones((n, 1)))
    else:
        c1 = np.cos(np.radians(np.atleast_2d(a1)[0]))
        c2 = np.cos(np.radians(np.atleast_2d(a2)[0]))
        bands = [(c1, c2), (c1, c2)]
        coefs = (np.nan_to_num(cn), np.nan_to_num(cd))
    for start in range(0, n, _SAMPLE_BLOCK):
        sl = slice(start, min(start + _SAMPLE_BLOCK, n))
        a0 = np.radians(c["blc_equatorial"][sl])[:, None]
        ratio_b = (c["b_local"][sl] / c["b_min"][sl])[:, None]
        with np.errstate(invalid="ignore", over="ignore"):
            aeq = np.minimum(_U_EDGES[None, :] * a0, np.pi / 2)
            s_loc = np.sin(aeq) * np.sqrt(ratio_b)
            cphi = np.sqrt(np.clip(1.0 - s_loc * s_loc, 0.0, 1.0))  # cos of local angle
        cphi[:, -1] = 0.0  # the last cell takes every pitch angle beyond it (local 90 deg)
        cphi = np.nan_to_num(cphi, nan=1.0)
        if bands[0][0].ndim == 2:
            wn, wd = (_cell_weights(b1[sl], b2[sl], coef[sl], cphi)
                      for (b1, b2), coef in zip(bands, coefs))
        else:  # fixed bins: one interpolation plan for both means
            wn, wd = _cell_weights(bands[0][0], bands[0][1], (coefs[0][sl], coefs[1][sl]),
                                   cphi)
        with np.errstate(invalid="ignore", divide="ignore"):
            rtab[sl] = (wn @ ptab) / (wd @ ptab)
            share_num[sl] = wn[:, :n_in].sum(axis=1) / wn.sum(axis=1)
            share_den[sl] = wd[:, :n_in].sum(axis=1) / wd.sum(axis=1)
    return rtab, share_num, share_den


def _attrs(long_name, units, **extra):
    return {"long_name": long_name, "units": units, **extra}


def from_pitch_angle_data(ds, model="auto", altitude_km=100.0, *, cones=None,
                          species="electron", loss_time="half_bounce", filling_band_deg=10.0,
                          interval_sigma=2.0, allow_negative=False, prepared=None):
    r"""Diffusion coefficient, lifetime and regime per sample and energy from measured flux.

    For each time and energy a ratio of two measured mean fluxes is formed,

    * pitch-angle bins: the mean flux in the bounce loss cone over the mean in
      the band just outside it, :math:`[\alpha_B, \alpha_B + \Delta]` local
      (both sides of 90 deg) -- the definition of ``loss_cone_filling`` in
      :func:`beltkit.pad.partition`;
    * telescopes: the look with the largest share of its swept band inside the
      bounce loss cone over the look with the smallest share,

    with its 1-sigma error from ``flux_err`` or Poisson ``counts`` (first order,
    keeping the covariance of a bin that is in both means). The same ratio is
    modelled for each sample as :math:`R(z_0) = \bar A(z_0)/\bar B(z_0)`, each
    mean the solid-angle average of :func:`loss_cone_profile` over the local
    pitch angles it covers mapped to the equator
    (:math:`\sin^2\alpha_{eq} = \sin^2\alpha\, B_{min}/B_{local}`; the profile is
    averaged in closed form over 328 cells of :math:`\alpha_{eq}/\alpha_0`).
    :math:`R` falls monotonically from 1 at :math:`z_0 = 0`, so
    :math:`[r - k\sigma, r + k\sigma]` maps to an interval of :math:`z_0`, and
    through :math:`D = \alpha_0^2/(z_0^2\tau)` to one of :math:`D`.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset following ``docs/conventions.md`` (bins or telescopes);
        not modified. Loaded into memory.
    model : "auto", None, "dipole", "igrf" or FieldModel
        Field model of the loss cones, as for :func:`beltkit.pad.partition`
        (``"auto"`` is partition's default: dipole closed forms from ``L`` and
        ``mlat`` when present).
    altitude_km : float
        Altitude of the feet (km).
    cones : xarray.Dataset, keyword-only, optional
        The partition of ``ds`` (or its summary) when already computed: its
        ``blc_local``, ``blc_equatorial``, ``b_local``, ``b_min`` and ``L`` are
        used instead of partitioning again. It must come from the same model and
        altitude.
    species : str or Species, keyword-only
        Particle species of the flux.
    loss_time : {"half_bounce", "quarter_bounce"}, keyword-only
        Loss time :math:`\tau` (:func:`pitch_angle_diffusion`).
    filling_band_deg : float, keyword-only
        Width :math:`\Delta` of the band outside the cone (bins).
    interval_sigma : float, keyword-only
        Half-width :math:`k` of the ratio interval in sigmas (2: about 95 per
        cent for Gaussian errors).
    allow_negative : bool, keyword-only
        Accept negative flux values (as in partition).
    prepared : beltkit.pad.conventions.Prepared, keyword-only, optional
        The dataset's validation (:func:`beltkit.pad.conventions.check`, e.g.
        made once on a whole file of which ``ds`` is a slab), trusted instead
        of validating ``ds`` again.

    Returns
    -------
    xarray.Dataset
        Per time and energy: ``diffusion_ratio`` and ``diffusion_ratio_err``,
        ``z0`` with ``z0_lower``/``z0_upper``, ``diffusion_coefficient`` (s-1)
        with ``_lower``/``_upper`` (``inf`` where unbounded), ``loss_time`` (s),
        ``strong_diffusion_lifetime`` (s), ``lifetime`` with ``_lower``/``_upper``
        (s), ``diffusion_regime`` (:data:`REGIME_MEANINGS`) and
        ``diffusion_flag`` (:data:`FLAG_MEANINGS`); per time
        ``diffusion_loss_cone`` (the equatorial :math:`\alpha_0`, degree) and
        ``diffusion_field_ratio`` (:math:`B_{min}/B_{local}`). The
        conventions are in the attributes.

    Notes
    -----
    * A ratio above 1 beyond its interval: flag 1, all NaN (the model does not
      apply). An interval reaching 1: ``z0_lower`` = 0 and ``D_upper`` = inf
      (flag 2; ``z0`` is NaN when the ratio itself is at least 1). An interval
      reaching the model's limit for :math:`z_0 \to \infty`: ``z0_upper`` = inf
      (flag 4; ``z0`` NaN when the ratio itself is there).
    * Loss cone unresolved (flag 8, all NaN): less than half of the cone
      mean's solid angle is inside the cone, or less than half of the
      reference mean's is outside.
    * ``lifetime`` = :math:`\tau_{SD}` / :func:`cone_mean_ratio` (:math:`z_0`):
      the flux tube's content over the loss rate of the steady state, taking
      the trapped flux at the level of the cone edge; a lower bound where the
      distribution rises away from the cone. It tends to :math:`\tau_{SD}` for
      :math:`z_0 \to 0`.
    * The bounce period and :math:`\tau_{SD}` are those of the centred dipole at
      the sample's ``L`` with the model's :math:`\alpha_0`.
    * Kennel & Petschek (1966); see ``docs/diffusion.md``.
    """
    frac = _loss_fraction(loss_time)
    k_sigma = float(interval_sigma)
    if not k_sigma > 0:
        raise PhysicsError(f"argument 'interval_sigma' must be positive; got {interval_sigma!r}")
    part_model = None if (isinstance(model, str) and model == "auto") else model
    prep = prepared if prepared is not None else _prepared(ds, part_model, allow_negative)
    c = _cones_from(ds, part_model, altitude_km, cones)
    x, s = _flux_arrays(ds, prep)
    a1, a2, cn, cd, r, sr = _measurement(ds, prep, c, x, s, float(filling_band_deg))
    rtab, share_num, share_den = _response_tables(a1, a2, cn, cd, c)
    n, n_e = r.shape
    r_inf = rtab[:, -1:]
    with np.errstate(invalid="ignore"):
        unknown = ~np.isfinite(c["blc_equatorial"]) | ~np.isfinite(c["L"])
        unresolved = ~((share_num >= 0.5) & (share_den <= 0.5)) & ~unknown
        no_data = ~np.isfinite(r) | unknown[:, None]
        no_err = ~np.isfinite(sr) & ~no_data
        ks = np.where(no_err, 0.0, k_sigma * sr)
        r_lo, r_hi = r - ks, r + ks
        above = r_lo > 1.0
        upper_only = (r_hi >= rtab[:, :1]) & ~above
        lower_only = (r_lo <= r_inf) & ~above
    zs = _invert_tables(np.concatenate([r, r_hi, r_lo], axis=1), _table_y(rtab))
    z, z_from_hi, z_from_lo = zs[:, :n_e], zs[:, n_e:2 * n_e], zs[:, 2 * n_e:]
    # beyond the table's largest z0 (1e3) only that lower bound is known
    z_lo = np.where(upper_only, 0.0, np.where(r_hi <= r_inf, np.exp(_T_GRID[-1]), z_from_hi))
    z_hi = np.where(lower_only, np.inf, z_from_lo)
    z = np.where((r >= rtab[:, :1]) | (r <= r_inf), np.nan, z)
    dead = above | unresolved[:, None] | no_data
    z, z_lo, z_hi = (np.where(dead, np.nan, v) for v in (z, z_lo, z_hi))
    flag = (np.where(above, 1, 0) | np.where(upper_only & ~dead, 2, 0)
            | np.where(lower_only & ~dead, 4, 0) | np.where(unresolved[:, None], 8, 0)
            | np.where(no_data, 16, 0) | np.where(no_err, 32, 0)).astype(np.int16)

    e = prep.energy_kev[None, :]
    L = c["L"][:, None]
    a0_deg = c["blc_equatorial"][:, None]
    good = np.isfinite(L) & np.isfinite(a0_deg) & (L >= 1.0)
    Ls = np.where(good, L, 2.0)
    a0s = np.where(good, a0_deg, 45.0)
    tau = np.where(good, frac * np.asarray(motion.bounce_period(e, Ls, a0s, species)), np.nan)
    sin2 = np.sin(np.radians(a0s)) ** 2
    alt = float(altitude_km)
    Lc = np.maximum(Ls, 1.0 + alt / R_E_KM)
    tau_sd = np.where(good, _tau_sd(Lc, e, species, sin2, alt), np.nan)
    a0r2 = np.radians(a0s) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        d = a0r2 / (z * z * tau)
        d_lo = a0r2 / (z_hi * z_hi * tau)
        d_hi = a0r2 / (z_lo * z_lo * tau)

        def life(zz):
            return np.where(np.isinf(zz), np.inf, tau_sd / np.asarray(cone_mean_ratio(
                np.where(np.isfinite(zz), zz, 0.0))))

        lt, lt_lo, lt_hi = life(z), life(z_lo), life(z_hi)
    lt, lt_lo, lt_hi = (np.where(np.isnan(zz), np.nan, v)
                        for zz, v in ((z, lt), (z_lo, lt_lo), (z_hi, lt_hi)))
    regime = np.where(dead, 0, _regime(z, z_lo, z_hi)).astype(np.int8)

    lt_text = _loss_time_text(loss_time)
    dims = ("time", "energy")
    out = {
        "diffusion_ratio": (dims, r, _attrs(
            "measured loss-cone filling ratio inverted for z0 (cone mean over reference mean)",
            "1", ancillary_variables="diffusion_ratio_err")),
        "diffusion_ratio_err": (dims, sr, _attrs(
            "uncertainty (1 sigma) of diffusion ratio", "1")),
        "z0": (dims, z, _attrs("loss-cone parameter z0 = alpha0 / sqrt(D tau)", "1")),
        "z0_lower": (dims, z_lo, _attrs("lower end of the z0 interval", "1")),
        "z0_upper": (dims, z_hi, _attrs("upper end of the z0 interval", "1")),
        "diffusion_coefficient": (dims, d, _attrs(
            f"bounce-averaged pitch-angle diffusion coefficient at the loss-cone edge "
            f"(loss time: {lt_text})", "s-1")),
        "diffusion_coefficient_lower": (dims, d_lo, _attrs(
            "lower end of the diffusion coefficient interval", "s-1")),
        "diffusion_coefficient_upper": (dims, d_hi, _attrs(
            "upper end of the diffusion coefficient interval", "s-1")),
        "loss_time": (dims, np.broadcast_to(tau, r.shape).copy(), _attrs(
            f"loss time in the loss cone: {lt_text}", "s")),
        "strong_diffusion_lifetime": (dims, np.broadcast_to(tau_sd, r.shape).copy(), _attrs(
            "strong-diffusion lifetime: emptying time of an isotropic flux tube through both "
            "feet", "s")),
        "lifetime": (dims, lt, _attrs(
            "loss lifetime: strong-diffusion lifetime over the cone-mean filling of z0", "s")),
        "lifetime_lower": (dims, lt_lo, _attrs("lower end of the lifetime interval", "s")),
        "lifetime_upper": (dims, lt_hi, _attrs("upper end of the lifetime interval", "s")),
        "diffusion_regime": (dims, regime, _regime_attrs()),
        "diffusion_flag": (dims, flag, {
            "long_name": "pitch-angle diffusion quality flags",
            "flag_masks": np.array(list(FLAG_MEANINGS), dtype=np.int16),
            "flag_meanings": " ".join(FLAG_MEANINGS.values())}),
        "diffusion_loss_cone": (("time",), c["blc_equatorial"], _attrs(
            "equatorial bounce loss cone alpha0 used for z0", "degree")),
        "diffusion_field_ratio": (("time",), c["b_min"] / c["b_local"], _attrs(
            "minimum field on the line over the field at the sample (maps local pitch "
            "angles to the equator)", "1")),
    }
    energy = xr.Variable("energy", prep.energy_kev, {"units": "keV",
                                                    "long_name": "kinetic energy"})
    tvar = ds["time"].variable.copy(deep=False)
    tvar.attrs = {"standard_name": "time", "long_name": "time (UTC)", **tvar.attrs}
    res = xr.Dataset(out, coords={"time": tvar, "energy": energy})
    res.attrs = {
        "title": "beltkit pitch-angle diffusion from the loss-cone filling",
        "beltkit_field_model": str(getattr(model, "name", model)),
        "beltkit_footpoint_altitude_km": alt,
        "beltkit_loss_time": loss_time,
        "beltkit_interval_sigma": k_sigma,
        "beltkit_diffusion_ratio": (
            "pitch-angle bins: mean flux in the bounce loss cone over the mean in "
            f"[blc, blc + {float(filling_band_deg):g} deg]; telescopes: look most inside "
            "the cone over look least inside it; both modelled with their bands mapped to "
            "the equator"),
        "beltkit_species": str(getattr(species, "name", species)),
        "beltkit_regime_boundary": "z0 = 1 (common practice)",
    }
    return res
