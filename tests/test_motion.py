"""beltkit.motion against analytic limits, scipy quadrature, published fits and rules of thumb."""

import math
import warnings

import numpy as np
import pytest
import scipy.constants as sc
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import IntegrationWarning, quad
from scipy.optimize import brentq

from beltkit import motion, particles
from beltkit.constants import B0_NT, R_E_M
from beltkit.errors import PhysicsError

# Analytic limits (Schulz & Lanzerotti 1974, ch. 1; re-derived here: at y = 0
# T = int_0^{pi/2} cos l sqrt(1 + 3 sin^2 l) dl = 1 + asinh(sqrt 3) / (2 sqrt 3)
# with asinh(sqrt 3) = ln(2 + sqrt 3); at y -> 1, b ~ 1 + 4.5 l^2 gives
# T -> (pi/2) / sqrt(4.5) = pi sqrt 2 / 6; D(0) = 4 T(0) / 12 and D(1) = 6 T(1) / 12
# follow from the integrand factor (4 + 2 y^2 b) / 12 with y^2 b = 0 and 1).
T0 = 1 + math.log(2 + math.sqrt(3)) / (2 * math.sqrt(3))
T1 = math.pi * math.sqrt(2) / 6
D0 = T0 / 3
D1 = math.pi * math.sqrt(2) / 12


def _lam_m(y):
    # Mirror latitude by scipy.optimize.brentq on the log of b(l) = 1 / y^2.
    log_s = 2 * math.log(y)

    def f(lam):
        s2 = math.sin(lam) ** 2
        log_c6 = 3 * math.log1p(-s2) if s2 < 0.5 else 6 * math.log(math.cos(lam))
        return 0.5 * math.log1p(3 * s2) - log_c6 + log_s

    return brentq(f, 0.0, math.pi / 2 - 1e-12, xtol=1e-300, rtol=1e-15, maxiter=500)


def _b(lam):
    return math.sqrt(1 + 3 * math.sin(lam) ** 2) / math.cos(lam) ** 6


def _quad_t(fun, y):
    """Integrate fun(lam) dl / sqrt(1 - y^2 b) over [0, l_m] with scipy.integrate.quad.

    The textbook integrand is used as written; only the variable is changed,
    l = l_m sin t, to soften the endpoint singularity for quad.
    """
    lm = _lam_m(y)

    def integrand(t):
        lam = lm * math.sin(t)
        f = 1 - y * y * _b(lam)
        return lm * math.cos(t) * fun(lam) / math.sqrt(max(f, 1e-300))

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IntegrationWarning)
        return quad(integrand, 0.0, math.pi / 2, epsabs=0, epsrel=1e-12, limit=200)[0]


def _t_ref(y):
    # T(y) as defined by Hamlin et al. (1961) / Schulz & Lanzerotti (1974).
    return _quad_t(lambda lam: math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam) ** 2), y)


def _d_ref(y):
    # D(y) as defined by Schulz & Lanzerotti (1974): (1/12) (4 + 2 y^2 b) weight.
    return _quad_t(lambda lam: math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam) ** 2)
                   * (4 + 2 * y * y * _b(lam)) / 12, y)


Y_GRID = [1e-6, 1e-4, 1e-3, 0.01, 0.05, 0.1, 0.2, 0.3, 0.45, 0.6, 0.75, 0.9, 0.97, 0.999]


# ------------------------------------------------------------------ integrals


def test_analytic_limits():
    assert motion.bounce_integral(0.0) == pytest.approx(T0, rel=1e-13)
    assert motion.bounce_integral(1.0) == pytest.approx(T1, rel=1e-13)
    assert motion.drift_integral(0.0) == pytest.approx(D0, rel=1e-13)
    assert motion.drift_integral(1.0) == pytest.approx(D1, rel=1e-13)
    # The printed four-digit values (Schulz & Lanzerotti 1974): 1.3802, 0.7405.
    assert round(T0, 4) == 1.3802 and round(T1, 4) == 0.7405


def test_limits_by_direct_quadrature():
    # Verify the closed forms themselves with scipy.integrate.quad at y = 0.
    t0, _ = quad(lambda lam: math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam) ** 2),
                 0, math.pi / 2, epsabs=0, epsrel=1e-13)
    assert t0 == pytest.approx(T0, rel=1e-13)
    # and the y -> 1 limit: linear extrapolation to y = 1 of quad values at
    # 1 - y = 1e-3 and 1e-4 (T is smooth in 1 - y there; quadratic term ~1e-8)
    ta, tb = _t_ref(1 - 1e-3), _t_ref(1 - 1e-4)
    assert (tb * 1e-3 - ta * 1e-4) / (1e-3 - 1e-4) == pytest.approx(T1, rel=1e-7)


@pytest.mark.parametrize("y", Y_GRID)
def test_integrals_against_scipy_quad(y):
    assert motion.bounce_integral(y) == pytest.approx(_t_ref(y), rel=1e-9)
    assert motion.drift_integral(y) == pytest.approx(_d_ref(y), rel=1e-9)


def test_drift_integral_is_the_bounce_average_of_the_local_drift():
    # Independent physics route: the gradient-curvature drift speed in a
    # curl-free field, v_d = (p v / (q B)) (1 + cos^2 a) / 2 |grad_perp B| / B
    # (Roederer 1970; Walt 1994), with grad B of the dipole
    # magnitude B = B0 sqrt(1 + 3 sin^2 l) / r^3 taken by central differences,
    # bounce-averaged with weight ds / v_par. In units of 3 L p v / (q B0 R_E^2):
    # <w> = D / T.
    L = 1.0  # the ratio is independent of L; work in R_E with B0 = 1

    def bmag(r, lam):
        return math.sqrt(1 + 3 * math.sin(lam) ** 2) / r**3

    def omega_local(lam, y):
        r = L * math.cos(lam) ** 2
        bb = bmag(r, lam)
        h = 1e-6
        dbdr = (bmag(r * (1 + h), lam) - bmag(r * (1 - h), lam)) / (2 * h * r)
        dbdl = (bmag(r, lam + h) - bmag(r, lam - h)) / (2 * h) / r
        br, bl = -2 * math.sin(lam) / r**3, math.cos(lam) / r**3  # field direction
        n = math.hypot(br, bl)
        along = (dbdr * br + dbdl * bl) / n
        perp = math.sqrt(max(dbdr**2 + dbdl**2 - along**2, 0.0))
        cos2a = 1 - y * y * bb / bmag(L, 0.0)
        v_d = (1 + cos2a) / 2 * perp / bb / bb  # times p v / q
        return v_d / (r * math.cos(lam)) / 3 * L  # in units of 3 L p v / (q B0 R_E^2)

    for y in (0.2, 0.5, 0.8):
        num = _quad_t(lambda lam, y=y: math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam) ** 2)
                      * omega_local(lam, y), y)
        ratio = num / _t_ref(y)
        assert motion.drift_integral(y) / motion.bounce_integral(y) == pytest.approx(
            ratio, rel=1e-7)


def test_hamlin_fit_accuracy():
    # Hamlin et al. (1961): T ~ 1.30 - 0.56 y, "a few per cent". Measured here
    # on a 200001-point grid: max relative deviation 0.05809, at y = 0.
    y = np.linspace(0, 1, 2001)
    dev = np.abs((1.30 - 0.56 * y) / motion.bounce_integral(y) - 1)
    assert dev.max() < 0.0582
    assert dev.max() > 0.0580  # two-sided: a change of T near y = 0 fails the test


def test_schulz_fit_accuracy():
    # Schulz & Lanzerotti (1974): T ~ 1.3802 - 0.3198 (y + sqrt y), within ~1 per
    # cent. Measured here: max relative deviation 0.00979, near y = 0.103.
    y = np.linspace(0, 1, 2001)
    dev = np.abs((1.3802 - 0.3198 * (y + np.sqrt(y))) / motion.bounce_integral(y) - 1)
    assert dev.max() < 0.0099
    assert dev.max() > 0.0097


def test_drift_ratio_fit_accuracy():
    # D/T ~ 0.35 + 0.15 y (Hamlin et al. 1961), about 5 per cent off at y = 0.
    y = np.linspace(0, 1, 2001)
    dev = np.abs((0.35 + 0.15 * y) / (motion.drift_integral(y) / motion.bounce_integral(y)) - 1)
    # Measured: max deviation 0.0500, at y = 0 (0.35 against exactly D/T = 1/3).
    assert dev.max() < 0.0501
    assert dev[0] == pytest.approx(0.05, abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(y1=st.floats(0.0, 1.0), y2=st.floats(0.0, 1.0))
def test_integrals_between_limits_and_monotone(y1, y2):
    t1, t2 = motion.bounce_integral(np.array([y1, y2]))
    d1, d2 = motion.drift_integral(np.array([y1, y2]))
    # within the documented relative accuracy of the quadrature, 2e-10
    tol = 2e-10
    for t, d in ((t1, d1), (t2, d2)):
        assert T1 * (1 - tol) <= t <= T0 * (1 + tol)
        assert D1 * (1 - tol) <= d <= D0 * (1 + tol)
    if y1 < y2:
        assert t1 >= t2 * (1 - tol) and d1 >= d2 * (1 - tol)


def test_chunked_evaluation_matches_elementwise():
    # 300k elements cross many chunk and tier boundaries.
    rng = np.random.default_rng(7)
    y = rng.uniform(0, 1, 300_000)
    y[:50] = rng.uniform(0, 1e-5, 50)
    t, d = motion.bounce_integral(y), motion.drift_integral(y)
    idx = np.r_[0:50, 1000:1010, 299_990:300_000]
    np.testing.assert_allclose(t[idx], [motion.bounce_integral(v) for v in y[idx]], rtol=1e-15)
    np.testing.assert_allclose(d[idx], [motion.drift_integral(v) for v in y[idx]], rtol=1e-15)


# ------------------------------------------------------------------ periods


def test_bounce_period_formula_and_methods():
    # T_b = 4 L R_E T(y) / v (Hamlin et al. 1961), with v from PlasmaPy.
    import astropy.units as u
    from plasmapy.formulary.relativity import RelativisticBody

    v = float(RelativisticBody("e-", kinetic_energy=500 * u.keV).velocity.si.value)
    y = math.sin(math.radians(40.0))
    ref = 4 * 3.0 * R_E_M * _t_ref(y) / v
    assert motion.bounce_period(500.0, 3.0, 40.0) == pytest.approx(ref, rel=1e-9)
    assert motion.bounce_period(500.0, 3.0, 140.0) == pytest.approx(ref, rel=1e-9)
    assert motion.bounce_period(500.0, 3.0, 40.0, method="hamlin") == pytest.approx(
        4 * 3.0 * R_E_M * (1.30 - 0.56 * y) / v, rel=1e-9)
    assert motion.bounce_period(500.0, 3.0, 40.0, method="schulz") == pytest.approx(
        4 * 3.0 * R_E_M * (1.3802 - 0.3198 * (y + math.sqrt(y))) / v, rel=1e-9)


def test_relativistic_electron_bounce_is_a_fraction_of_a_second():
    # Common practice: MeV electrons at L ~ 4 bounce in a few tenths of a second.
    tb = motion.bounce_period(np.array([500.0, 1000.0, 3000.0]), 4.0, np.array([30.0, 60, 90]))
    assert np.all((tb > 0.1) & (tb < 1.0))


def test_equatorial_drift_rate_is_textbook_gradient_drift():
    # Equatorial particle: Omega = 3 L p v / (2 q B0 R_E^2) (textbook gradient
    # drift), with p and v from PlasmaPy and e from scipy.constants.
    import astropy.units as u
    from plasmapy.formulary.relativity import RelativisticBody

    for species, energy, L in (("e-", 1000.0, 6.6), ("p+", 50.0, 3.0)):
        body = RelativisticBody(species, kinetic_energy=energy * u.keV)
        pv = float(body.momentum.si.value) * float(body.velocity.si.value)
        ref = 3 * L * pv / (2 * sc.elementary_charge * B0_NT * 1e-9 * R_E_M**2)
        rate = motion.drift_rate(energy, L, 90.0, species)
        assert abs(rate) == pytest.approx(ref, rel=1e-9)
        assert motion.drift_period(energy, L, 90.0, species) == pytest.approx(
            2 * math.pi / ref, rel=1e-9)


def test_drift_rate_check_is_sensitive():
    # Nudge: a 1e-3 change of B0 must break the agreement asserted above.
    ref = motion.drift_rate(1000.0, 6.6, 90.0)
    nudged = motion.drift_rate(1000.0, 6.6, 90.0, b0_nt=B0_NT * (1 + 1e-3))
    assert nudged != pytest.approx(ref, rel=1e-9)
    assert nudged == pytest.approx(ref / (1 + 1e-3), rel=1e-12)


def test_mev_electrons_at_geostationary_drift_in_about_ten_minutes():
    # Common practice: ~1 MeV electrons at L = 6.6 circle the Earth in roughly ten minutes.
    td = motion.drift_period(1000.0, 6.6, np.array([10.0, 45.0, 90.0]))
    assert np.all((td > 5 * 60) & (td < 20 * 60))


def test_drift_period_approx_method():
    y = math.sin(math.radians(30.0))
    exact = motion.drift_period(300.0, 4.0, 30.0, "proton")
    approx = motion.drift_period(300.0, 4.0, 30.0, "proton", method="approx")
    ratio_exact = motion.drift_integral(y) / motion.bounce_integral(y)
    assert approx == pytest.approx(exact * ratio_exact / (0.35 + 0.15 * y), rel=1e-12)


def test_drift_direction_and_sign():
    # Electrons drift eastward, positive ions westward (Walt 1994).
    assert motion.drift_direction("electron") == "eastward"
    for ion in ("proton", "alpha", "O+"):
        assert motion.drift_direction(ion) == "westward"
        assert motion.drift_rate(100.0, 4.0, 60.0, ion) < 0
    assert motion.drift_rate(100.0, 4.0, 60.0, "e-") > 0


def test_scalings_with_energy_species_and_L():
    # T_b ~ L / v, T_d ~ 1 / (L p v) (Schulz & Lanzerotti 1974): check through particles.
    e = np.array([10.0, 100.0, 1000.0])
    for sp in ("electron", "proton", "alpha", "oxygen+"):
        tb = motion.bounce_period(e, 5.0, 50.0, sp)
        np.testing.assert_allclose(tb * particles.speed(e, sp) / 5.0,
                                   tb[0] * particles.speed(e[0], sp) / 5.0, rtol=1e-12)
        td = motion.drift_period(e, 5.0, 50.0, sp)
        np.testing.assert_allclose(td * particles.pv(e, sp), td[0] * particles.pv(e[0], sp),
                                   rtol=1e-12)
    assert motion.drift_period(100.0, 2.0, 50.0) == pytest.approx(
        2 * motion.drift_period(100.0, 4.0, 50.0), rel=1e-12)


def _dipole_field_si(x):
    # Earth-like centred dipole (northward at the equator), tesla, x in metres:
    # B = -B0 R_E^3 [3 (z_hat . r_hat) r_hat - z_hat] / r^3 (textbook dipole).
    r2 = np.sum(x * x, axis=-1, keepdims=True)
    k = B0_NT * 1e-9 * R_E_M**3 / (r2 * r2 * np.sqrt(r2))
    b = 3 * x[..., 2:3] * x
    b[..., 2:3] -= r2
    return -k * b


def _boris(x, u, q_over_m, dt, nsteps):
    # Relativistic Boris push (Boris 1970; Birdsall & Langdon, "Plasma Physics
    # via Computer Simulation") of the Lorentz force in a static field; u = gamma v.
    c2 = sc.speed_of_light**2
    xs = np.empty((nsteps + 1, *x.shape))
    us = np.empty_like(xs)
    xs[0], us[0] = x, u
    for i in range(nsteps):
        ginv = 1 / np.sqrt(1 + np.sum(u * u, axis=-1, keepdims=True) / c2)
        xh = x + (0.5 * dt) * u * ginv
        t = (0.5 * q_over_m * dt) * ginv * _dipole_field_si(xh)
        s = 2 * t / (1 + np.sum(t * t, axis=-1, keepdims=True))
        u = u + np.cross(u + np.cross(u, t), s)
        x = xh + (0.5 * dt) * u * ginv
        xs[i + 1], us[i + 1] = x, u
    return xs, us


def test_full_orbit_bounce_period_and_drift_rate():
    # Independent of every adiabatic formula: integrate the Lorentz-force orbit
    # of 100 keV protons started on the L = 2 equator (20 steps per gyration),
    # time one bounce (equator to equator, same direction) and the guiding
    # centre's azimuthal advance over it (guiding centre x - (m/q) B x u / B^2).
    # The adiabatic results hold to first order in gyroradius / scale length
    # (~3e-3 here); measured agreement ~1e-3 for both quantities.
    energy, L = 100.0, 2.0
    alphas = np.array([20.0, 45.0, 70.0])
    m, q = sc.proton_mass, sc.elementary_charge
    gamma = particles.lorentz_factor(energy, "proton")
    v = particles.speed(energy, "proton")
    a = np.radians(alphas)
    x0 = np.zeros((3, 3))
    x0[:, 0] = L * R_E_M
    u0 = np.stack([np.zeros(3), gamma * v * np.sin(a), gamma * v * np.cos(a)], axis=-1)
    tb = motion.bounce_period(energy, L, alphas, "proton")
    dt = 1 / (20 * particles.gyrofrequency(B0_NT / L**3, energy, "proton"))
    xs, us = _boris(x0, u0, q / m, dt, int(1.02 * tb.max() / dt))
    bb = _dipole_field_si(xs)
    gc = xs - (m / q) * np.cross(bb, us) / np.sum(bb * bb, axis=-1, keepdims=True)
    phi = np.unwrap(np.arctan2(gc[..., 1], gc[..., 0]), axis=0)
    for j, alpha in enumerate(alphas):
        z = xs[:, j, 2]
        i = np.flatnonzero((z[:-1] < 0) & (z[1:] >= 0))[0]  # next northward crossing
        f = -z[i] / (z[i + 1] - z[i])
        t_bounce = (i + f) * dt
        advance = phi[i, j] + f * (phi[i + 1, j] - phi[i, j]) - phi[0, j]
        assert t_bounce == pytest.approx(tb[j], rel=3e-3)
        assert advance / t_bounce == pytest.approx(
            motion.drift_rate(energy, L, alpha, "proton"), rel=3e-3)
        assert advance < 0  # protons drift westward


# ------------------------------------------------------------------ boundary


def test_bad_input():
    with pytest.raises(PhysicsError, match=r"'y'.*\[0, 1\]"):
        motion.bounce_integral(1.5)
    with pytest.raises(PhysicsError, match="energy_kev"):
        motion.bounce_period(-5.0, 4.0, 45.0)
    with pytest.raises(PhysicsError, match="'L'"):
        motion.drift_period(100.0, 0.5, 45.0)
    with pytest.raises(PhysicsError, match="alpha_eq_deg"):
        motion.drift_rate(100.0, 4.0, 200.0)
    with pytest.raises(PhysicsError, match="method"):
        motion.bounce_period(100.0, 4.0, 45.0, method="quick")
    with pytest.raises(PhysicsError, match="'hamlin'"):
        motion.bounce_period(100.0, 4.0, 45.0, method="quick")
    with pytest.raises(PhysicsError, match="species"):
        motion.drift_direction("graviton")


def test_nan_and_zero_energy():
    out = motion.bounce_period(np.array([np.nan, 100.0]), 4.0, np.array([30.0, np.nan]))
    assert np.isnan(out).all()
    assert np.isnan(motion.bounce_integral(np.nan))
    assert motion.drift_period(0.0, 4.0, 30.0) == math.inf
    assert motion.bounce_period(0.0, 4.0, 30.0) == math.inf


def test_dataarray_in_and_out_with_dask():
    e = xr.DataArray(np.array([0.3, 1.0, 2.0]), dims="energy", attrs={"units": "MeV"})
    a = xr.DataArray(np.linspace(10, 90, 6), dims="pitch", attrs={"units": "deg"}).chunk(2)
    out = motion.drift_period(e, 6.6, a)
    assert out.chunks is not None  # stays lazy
    out = out.compute()
    assert out.attrs["units"] == "s"
    assert out.dims == ("energy", "pitch")
    assert float(out.isel(energy=1, pitch=5)) == pytest.approx(
        motion.drift_period(1000.0, 6.6, 90.0), rel=1e-12)
    tb = motion.bounce_period(e, xr.DataArray([3.0, 5.0], dims="L"), 45.0)
    assert tb.attrs["units"] == "s" and tb.sizes == {"energy": 3, "L": 2}
    assert motion.drift_rate(e, 4.0, 45.0).attrs["units"] == "rad s-1"
    assert motion.bounce_integral(xr.DataArray([0.0, 1.0], dims="y")).attrs["units"] == "1"
