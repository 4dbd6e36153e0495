"""beltkit.diffusion against an independent integration of the diffusion equation, quadrature,
scipy.constants kinematics and synthetic data with a known diffusion coefficient."""

import math

import numpy as np
import pytest
import scipy.constants as sc
import xarray as xr
from _diffusion_data import bins_dataset, telescope_dataset
from scipy.integrate import quad, solve_ivp

from beltkit import diffusion, pad
from beltkit.errors import PhysicsError

R_E_KM = 6371.2  # IGRF reference radius (IAGA, IGRF-14), the R_E of beltkit


# ------------------------------------------------------------------ the profile


def _integrate_profile(z0, alpha0=0.08, d_coef=1e-3, n_out=3.0):
    """Integrate (1/a) d/da (a D df/da) = f/tau inside, = 0 outside, numerically.

    State (f, a D f'); no Bessel function: solve_ivp with the regular start
    f = 1 + a^2 / (4 D tau) (series of the equation at a -> 0). The state is
    carried through alpha0 unchanged, i.e. f and a D f' are continuous there.
    """
    tau = alpha0**2 / (z0**2 * d_coef)

    def rhs(a, y, inside):
        return [y[1] / (a * d_coef), a * y[0] / tau if inside else 0.0]

    a_start = 1e-6 * alpha0
    y0 = [1.0 + a_start**2 / (4 * d_coef * tau), a_start**2 / (2 * tau)]
    inner = solve_ivp(rhs, (a_start, alpha0), y0, args=(True,), rtol=1e-12, atol=1e-14,
                      dense_output=True)
    outer = solve_ivp(rhs, (alpha0, n_out * alpha0), inner.y[:, -1], args=(False,),
                      rtol=1e-12, atol=1e-14, dense_output=True)
    f0 = inner.y[0, -1]

    def f(a):
        a = np.asarray(a, dtype=float)
        return np.where(a <= alpha0, inner.sol(np.maximum(a, a_start))[0],
                        outer.sol(np.maximum(a, alpha0))[0]) / f0

    return f, alpha0


@pytest.mark.parametrize("z0", [0.2, 1.0, 3.0, 12.0])
def test_profile_solves_the_equation_with_both_matching_conditions(z0):
    # Kennel & Petschek (1966) steady state; checked against solve_ivp (no Bessel functions)
    f, alpha0 = _integrate_profile(z0)
    a = np.linspace(0.0, 3.0 * alpha0, 61)
    got = diffusion.loss_cone_profile(np.degrees(a), np.degrees(alpha0), z0)
    np.testing.assert_allclose(got, f(a), rtol=1e-8)
    # nudge: a 1 % different z0 is detected by the same comparison
    off = diffusion.loss_cone_profile(np.degrees(a), np.degrees(alpha0), 1.01 * z0)
    assert np.max(np.abs(off / f(a) - 1)) > 1e-4


def test_profile_matching_conditions_by_finite_differences():
    # continuity of f and of the diffusive flux a D df/da (D constant: of df/da) at alpha0
    a0, z0, h = 4.0, 2.0, 1e-6
    left = diffusion.loss_cone_profile(a0 - h, a0, z0)
    right = diffusion.loss_cone_profile(a0 + h, a0, z0)
    assert abs(left - 1.0) < 1e-5 and abs(right - 1.0) < 1e-5
    d_left = (diffusion.loss_cone_profile(a0 - h, a0, z0)
              - diffusion.loss_cone_profile(a0 - 2 * h, a0, z0)) / h
    d_right = (diffusion.loss_cone_profile(a0 + 2 * h, a0, z0)
               - diffusion.loss_cone_profile(a0 + h, a0, z0)) / h
    assert d_left == pytest.approx(d_right, rel=1e-4)


def test_profile_limits():
    a = np.linspace(0.0, 12.0, 25)
    # strong diffusion (z0 -> 0): the cone is full, the profile flat
    np.testing.assert_allclose(diffusion.loss_cone_profile(a, 4.0, 1e-6), 1.0, atol=1e-11)
    assert diffusion.cone_mean_ratio(1e-6) == pytest.approx(1.0, abs=1e-12)
    # weak diffusion (z0 >> 1): cone average ~ 2 / z0 (2 I1/(z I0) -> 2/z (1 - 1/(2z)))
    for z0 in (50.0, 200.0, 1e4):
        assert diffusion.cone_mean_ratio(z0) * z0 / 2 == pytest.approx(1.0, rel=1.0 / z0)
    # no overflow for large z0 (scaled Bessel functions)
    assert np.isfinite(diffusion.loss_cone_profile(1.0, 4.0, 1e5))
    assert 0 < diffusion.centre_edge_ratio(600.0) < 1e-250  # e^-600, no overflow of I0


@pytest.mark.parametrize("z0", [0.05, 1.0, 7.0, 40.0])
def test_ratios_against_quadrature(z0):
    # closed forms against scipy.integrate.quad of the profile (solid angle ~ a da)
    mean = quad(lambda a: diffusion.loss_cone_profile(a, 4.0, z0) * a, 0, 4.0,
                epsabs=0, epsrel=1e-12)[0] * 2 / 16.0
    assert diffusion.cone_mean_ratio(z0) == pytest.approx(mean, rel=1e-9)
    assert diffusion.centre_edge_ratio(z0) == pytest.approx(
        diffusion.loss_cone_profile(0.0, 4.0, z0), rel=1e-12)
    assert diffusion.two_angle_ratio(z0, 4.0, 1.0, 6.0) == pytest.approx(
        diffusion.loss_cone_profile(1.0, 4.0, z0) / diffusion.loss_cone_profile(6.0, 4.0, z0),
        rel=1e-12)


# ------------------------------------------------------------------ inversion

Z = np.geomspace(0.01, 50.0, 801)


@pytest.mark.parametrize("kind", ["cone_mean", "centre_edge"])
def test_round_trip(kind):
    r = getattr(diffusion, f"{kind}_ratio")(Z)
    back = diffusion.z0_from_ratio(r, kind)
    assert np.max(np.abs(back / Z - 1)) < 1e-9


@pytest.mark.parametrize("angles", [(4.0, 0.0, 4.0), (4.0, 2.0, 6.0), (4.0, 4.5, 9.0),
                                    (2.5, 1.0, 2.6), (4.0, 0.0, 20.0)])
def test_round_trip_two_angles(angles):
    r = diffusion.two_angle_ratio(Z, *angles)
    back = diffusion.z0_from_ratio(r, "two_angles", *angles)
    assert np.max(np.abs(back / Z - 1)) < 1e-9


def test_inversion_outside_the_reach_is_nan():
    for kind in ("cone_mean", "centre_edge"):
        got = diffusion.z0_from_ratio([1.0, 1.2, 0.0, -0.1, np.nan], kind)
        assert np.all(np.isnan(got))
    # both angles outside the cone: the ratio cannot fall below ln(a1/a0) / ln(a2/a0)
    limit = math.log(6 / 4) / math.log(9 / 4)
    assert np.isnan(diffusion.z0_from_ratio(0.99 * limit, "two_angles", 4.0, 6.0, 9.0))
    assert np.isfinite(diffusion.z0_from_ratio(1.01 * limit, "two_angles", 4.0, 6.0, 9.0))
    with pytest.raises(PhysicsError, match="alpha1_deg"):
        diffusion.z0_from_ratio(0.5, "two_angles", 4.0, 6.0, 2.0)
    with pytest.raises(PhysicsError, match="kind"):
        diffusion.z0_from_ratio(0.5, "edge")
    with pytest.raises(PhysicsError, match="needs alpha0_deg"):
        diffusion.z0_from_ratio(0.5, "two_angles")


def test_dataarray_in_and_out():
    z = xr.DataArray([0.5, 2.0], dims="time", attrs={"units": "1"})
    r = diffusion.cone_mean_ratio(z)
    assert isinstance(r, xr.DataArray) and r.attrs["units"] == "1"
    back = diffusion.z0_from_ratio(r, "cone_mean")
    np.testing.assert_allclose(back.values, [0.5, 2.0], rtol=1e-12)
    d = diffusion.pitch_angle_diffusion(z, 4.5, 300.0)
    assert d.attrs["units"] == "s-1" and "half bounce" in d.attrs["long_name"]
    reg = diffusion.diffusion_regime(z)
    assert reg.values.tolist() == [1, 2] and "flag_meanings" in reg.attrs


# ------------------------------------------------------------------ D and tau_SD


def _independent_300kev_l45():
    """Speed, loss cone, C7 and bounce period for a 300 keV electron at L = 4.5, 100 km feet."""
    mc2 = sc.m_e * sc.c**2 / (sc.e * 1e3)  # keV, CODATA via scipy.constants
    gamma = 1 + 300.0 / mc2
    v = sc.c * math.sqrt(1 - 1 / gamma**2)
    L = 4.5
    cos2f = (R_E_KM + 100.0) / (L * R_E_KM)
    lam_f = math.acos(math.sqrt(cos2f))
    sin2a0 = cos2f**3 / math.sqrt(4 - 3 * cos2f)  # B_eq / B_foot on the dipole line
    y = math.sqrt(sin2a0)
    # flux-tube content per unit equatorial area and isotropic flux: int B_eq/B ds over the
    # line between the feet, ds = L R_E cos l sqrt(1 + 3 sin^2 l) dl (quad, no closed form)
    tube = quad(lambda lam: L * R_E_KM * 1e3 * math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam)**2)
                * math.cos(lam)**6 / math.sqrt(1 + 3 * math.sin(lam)**2), -lam_f, lam_f,
                epsabs=0, epsrel=1e-13)[0]
    # bounce integral T(y) by quad with l = l_m sin t (removes the mirror-point singularity)
    lam_m = math.asin(math.sqrt(1 - _mirror_cos2(y * y)))

    def integrand(t):
        lam = lam_m * math.sin(t)
        b = math.sqrt(1 + 3 * math.sin(lam)**2) / math.cos(lam)**6
        return (math.cos(lam) * math.sqrt(1 + 3 * math.sin(lam)**2)
                / math.sqrt(max(1 - y * y * b, 1e-300)) * lam_m * math.cos(t))

    T = quad(integrand, 0, math.pi / 2, epsabs=0, epsrel=1e-12, limit=200)[0]
    t_bounce = 4 * L * R_E_KM * 1e3 * T / v  # Hamlin et al. 1961
    return {"v": v, "sin2a0": sin2a0, "tube": tube, "t_bounce": t_bounce,
            "alpha0": math.asin(y)}


def _mirror_cos2(s):
    from scipy.optimize import brentq

    # u = cos^2(l_m): u^6 + 3 s^2 u - 4 s^2 = 0 (mirror condition, Roederer 1970)
    return brentq(lambda u: u**6 + 3 * s * s * u - 4 * s * s, 1e-12, 1.0, xtol=1e-16,
                  rtol=1e-15)


def test_strong_diffusion_lifetime_300kev_l45():
    ref = _independent_300kev_l45()
    # content N = 4 pi j tube / v over the loss 2 x pi j sin^2 a0 through both feet
    tau_sd = (4 * math.pi * ref["tube"] / ref["v"]) / (2 * math.pi * ref["sin2a0"])
    got = diffusion.strong_diffusion_lifetime(4.5, 300.0)
    assert got == pytest.approx(tau_sd, rel=1e-9)
    assert got == pytest.approx(35.67, abs=0.01)
    assert abs(got / (1.01 * tau_sd) - 1) > 5e-3  # nudge: 1 % off is detected


def test_diffusion_coefficient_300kev_l45_half_bounce():
    # convention: tau = half the bounce period of a particle at the loss-cone edge
    # (docs/diffusion.md); D = alpha0^2 / (z0^2 tau), alpha0 in radians
    ref = _independent_300kev_l45()
    for z0 in (0.5, 1.0, 4.0):
        d_ref = ref["alpha0"]**2 / (z0**2 * ref["t_bounce"] / 2)
        assert diffusion.pitch_angle_diffusion(z0, 4.5, 300.0) == pytest.approx(d_ref,
                                                                                   rel=1e-8)
        # quarter-bounce convention of some authors: D twice as large for the same z0
        assert diffusion.pitch_angle_diffusion(
            z0, 4.5, 300.0, loss_time="quarter_bounce") == pytest.approx(2 * d_ref, rel=1e-8)
    assert diffusion.pitch_angle_diffusion(1.0, 4.5, 300.0) == pytest.approx(0.02010, rel=1e-3)
    with pytest.raises(PhysicsError, match="loss_time"):
        diffusion.pitch_angle_diffusion(1.0, 4.5, 300.0, loss_time="bounce")


def test_half_bounce_loss_time_gives_the_tube_emptying_rate():
    # a full cone (isotropic j) holds N_cone = int_0^a0 2 pi j sin a cos a T_b(a) da per unit
    # equatorial area (each particle counted once, as it crosses the equator northward); with
    # tau = T_b(a0) / 2 its loss N_cone / tau equals the precipitation 2 pi j sin^2 a0 of
    # the feet, up to the variation of T_b inside the cone (a few per cent at L = 4.5)
    from beltkit import motion

    ref = _independent_300kev_l45()
    a0 = ref["alpha0"]
    n_cone = quad(lambda a: 2 * math.pi * math.sin(a) * math.cos(a)
                  * motion.bounce_period(300.0, 4.5, math.degrees(a)), 0, a0)[0]
    rate = n_cone / (ref["t_bounce"] / 2)
    assert rate == pytest.approx(2 * math.pi * ref["sin2a0"], rel=0.03)


# ------------------------------------------------------------------ data


def _coverage(out, d_true):
    """Share of resolved samples whose interval holds the true D (a one-sided bound counts)."""
    lo = out["diffusion_coefficient_lower"].values
    hi = out["diffusion_coefficient_upper"].values
    resolved = np.isfinite(lo) | np.isfinite(hi)
    inside = (lo <= d_true) & (d_true <= hi)
    return inside[resolved].mean(), resolved.mean()


def _calibrated(coverage):
    # the pass criterion of issue 20: at least 90 % of the samples inside, and not (almost)
    # all of them, which an over-wide interval gives (2 sigma nominal: 95.4 %)
    return 0.90 <= coverage <= 0.99


@pytest.fixture(scope="module")
def scattering_event():
    # synthetic event: D_true known per sample (log-uniform z0 0.3-20 along 1500 samples)
    rng = np.random.default_rng(7)
    z0 = np.exp(rng.uniform(np.log(0.3), np.log(20.0), 1500))
    ds = bins_dataset(z0, seed=3)
    d_true = diffusion.pitch_angle_diffusion(z0[:, None], 4.5, ds.energy.values[None, :])
    return ds, d_true


def test_recovered_d_lies_in_its_interval(scattering_event):
    ds, d_true = scattering_event
    out = diffusion.from_pitch_angle_data(ds)
    cov, resolved = _coverage(out, d_true)
    assert resolved > 0.99
    assert _calibrated(cov), cov
    # median recovered D within 2 % of the truth (model error of the band response < 0.3 %)
    ratio = out["diffusion_coefficient"].values / d_true
    assert np.nanmedian(ratio) == pytest.approx(1.0, abs=0.02)


@pytest.mark.parametrize("factor", [0.5, 2.0])
def test_narrowed_or_widened_interval_fails_the_criterion(scattering_event, factor):
    ds, d_true = scattering_event
    out = diffusion.from_pitch_angle_data(ds, interval_sigma=2.0 * factor)
    cov, _ = _coverage(out, d_true)
    assert not _calibrated(cov), cov


def test_telescope_pair_recovers_d():
    rng = np.random.default_rng(11)
    z0 = np.exp(rng.uniform(np.log(0.3), np.log(10.0), 600))
    ds = telescope_dataset(z0)
    out = diffusion.from_pitch_angle_data(ds)
    d_true = diffusion.pitch_angle_diffusion(z0[:, None], 4.5, 300.0)
    cov, resolved = _coverage(out, d_true)
    assert resolved > 0.99 and _calibrated(cov), cov
    # noise-free: the band model (cells of alpha_eq / alpha0) is within 0.5 % of z0
    exact = diffusion.from_pitch_angle_data(telescope_dataset(np.array([0.5, 2.0, 8.0]),
                                                               err=0.0))
    np.testing.assert_allclose(exact["z0"].values[:, 0], [0.5, 2.0, 8.0], rtol=5e-3)


def test_noise_free_bins_match_the_cone_mean_closed_form():
    # fine bins at the equator, a reference band of 0.05 deg just outside the cone: the band
    # ratio is the cone mean 2 I1/(z0 I0) over the band mean of 1 + k ln u, k = z0 I1/I0
    # (mean of ln u over [1, b] with weight u du: (b^2 ln b / 2 - b^2/4 + 1/4) / ((b^2-1)/2))
    from scipy.special import iv

    from beltkit import dipole

    a0 = dipole.bounce_loss_cone(4.5)
    fine = np.linspace(0, a0, 41)
    edges = np.concatenate([fine, [a0 + 0.05, 30.0, 90.0, 150.0, 180 - a0 - 0.05],
                            180 - fine[::-1]])
    z0 = np.array([0.3, 1.0, 3.0, 10.0])
    ds = bins_dataset(z0, energies=(300.0,), err=0.0, edges=edges)
    out = diffusion.from_pitch_angle_data(ds, filling_band_deg=0.05)
    b = (a0 + 0.05) / a0
    mean_ln = (b * b * math.log(b) / 2 - b * b / 4 + 0.25) / ((b * b - 1) / 2)
    k = z0 * iv(1, z0) / iv(0, z0)
    expected = 2 * iv(1, z0) / (z0 * iv(0, z0)) / (1 + k * mean_ln)
    np.testing.assert_allclose(out["diffusion_ratio"].values[:, 0], expected, rtol=5e-4)
    np.testing.assert_allclose(out["z0"].values[:, 0], z0, rtol=1e-2)  # flux noise 1e-4


def test_ratio_is_the_partition_filling():
    ds = bins_dataset(np.array([0.5, 2.0, 6.0]))
    out = diffusion.from_pitch_angle_data(ds)
    part = pad.partition(ds)
    np.testing.assert_allclose(out["diffusion_ratio"], part["loss_cone_filling"], rtol=1e-12)
    np.testing.assert_allclose(out["diffusion_ratio_err"], part["loss_cone_filling_err"],
                               rtol=1e-9)
    # the partition result can be passed instead of recomputing the loss cones
    again = diffusion.from_pitch_angle_data(ds, cones=part)
    xr.testing.assert_identical(out, again)


def test_flags_and_bounds():
    ds = bins_dataset(np.array([1.0, 1.0, 1.0, 1.0]), energies=(300.0,))
    flux = ds["flux"].values.copy()
    err = ds["flux_err"].values.copy()
    bnds = ds["pitch_angle_bnds"].values
    incone = (bnds[:, 0] < 4.5) | (bnds[:, 1] > 175.5)  # every bin that touches a cone
    flux[0, 0] = 1e4  # isotropic: ratio 1, strong diffusion, only an upper bound on z0
    flux[1, 0, incone] = 0.0  # empty cone: at the noise floor, only a lower bound
    flux[2, 0, incone] = 3e4  # ratio well above 1: model not applicable
    err[:3] = 100.0
    ds = ds.assign(flux=(ds["flux"].dims, flux, ds["flux"].attrs),
                   flux_err=(ds["flux_err"].dims, err, ds["flux_err"].attrs))
    out = diffusion.from_pitch_angle_data(ds)
    flag = out["diffusion_flag"].values[:, 0]
    assert flag[0] & 2 and out["z0_lower"].values[0, 0] == 0.0
    assert np.isinf(out["diffusion_coefficient_upper"].values[0, 0])
    assert out["diffusion_regime"].values[0, 0] == 1
    assert flag[1] & 4 and np.isinf(out["z0_upper"].values[1, 0])
    assert np.isnan(out["z0"].values[1, 0]) and out["z0_lower"].values[1, 0] > 1
    assert out["diffusion_regime"].values[1, 0] == 2
    assert flag[2] & 1 and np.isnan(out["z0"].values[2, 0])
    assert np.isnan(out["diffusion_coefficient"].values[2, 0])
    assert flag[3] == 0 and np.isfinite(out["z0"].values[3, 0])


def test_coarse_bins_leave_the_cone_unresolved():
    edges = np.arange(0.0, 181.0, 15.0)  # 15 deg bins at the equator, cone ~4.4 deg
    out = diffusion.from_pitch_angle_data(bins_dataset(np.array([1.0, 5.0]), edges=edges))
    assert np.all(out["diffusion_flag"].values & 8)
    assert np.all(np.isnan(out["z0"].values))


def test_poisson_counts_give_intervals():
    rng = np.random.default_rng(5)
    z0 = np.exp(rng.uniform(np.log(0.5), np.log(5.0), 400))
    ds = bins_dataset(z0, energies=(300.0,), counts=0.5)
    out = diffusion.from_pitch_angle_data(ds)
    d_true = diffusion.pitch_angle_diffusion(z0[:, None], 4.5, 300.0)
    cov, resolved = _coverage(out, d_true)
    assert resolved > 0.95 and cov >= 0.9, cov


def test_outputs_carry_units_and_names(tmp_path):
    ds = bins_dataset(np.array([0.5, 2.0]))
    out = diffusion.from_pitch_angle_data(ds, loss_time="quarter_bounce")
    for name, var in out.data_vars.items():
        assert "long_name" in var.attrs, name
        assert "units" in var.attrs or "flag_meanings" in var.attrs, name
    assert out["diffusion_coefficient"].attrs["units"] == "s-1"
    assert "quarter bounce" in out["diffusion_coefficient"].attrs["long_name"]
    assert out.attrs["beltkit_loss_time"] == "quarter_bounce"
    # quarter bounce: the same z0, twice the D of the default
    half = diffusion.from_pitch_angle_data(ds)
    np.testing.assert_allclose(out["z0"], half["z0"])
    np.testing.assert_allclose(out["diffusion_coefficient"], 2 * half["diffusion_coefficient"])
    # lifetime -> tau_SD in strong diffusion, tau_SD / cone_mean_ratio(z0) in general
    np.testing.assert_allclose(
        half["lifetime"], half["strong_diffusion_lifetime"] / diffusion.cone_mean_ratio(
            half["z0"].values), rtol=1e-12)
    out.to_netcdf(tmp_path / "d.nc")
    back = xr.open_dataset(tmp_path / "d.nc")
    np.testing.assert_allclose(back["z0"], out["z0"])
    back.close()
