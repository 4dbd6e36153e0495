"""K and Roederer's L* in field models (beltkit.field.invariants).

Checks against: the centred dipole's closed forms (Roederer 1970: L* = L in a
centred dipole; K = sqrt(B0/L) Y(y)/y, itself checked against scipy quad in
tests/dipole/test_dipole.py), an independent field-line integration of K with
scipy.integrate.solve_ivp in the ppigrf reference library's IGRF, and the
definition of a drift shell (samples started on one shell share its L*).
"""

import datetime as dt

import numpy as np
import ppigrf
import pytest
import xarray as xr
from scipy.integrate import solve_ivp

from beltkit import dipole
from beltkit.constants import R_E_KM
from beltkit.errors import PhysicsError
from beltkit.field import IGRF, CenteredDipole, convert, lstar, mcilwain_l, second_invariant_k
from beltkit.field.coords import frame_matrix
from beltkit.field.invariants import LSTAR_REASONS

T_DIP = np.datetime64("2020-06-01T00:00")
T_IGRF = np.datetime64("2020-01-01T00:00")  # an exact IGRF epoch: ppigrf needs no date mapping


def _dipole_samples(model, L, mlat_deg, mlon_deg):
    lam = np.radians(mlat_deg)
    phi = np.radians(mlon_deg)
    r = L * np.cos(lam) ** 2 * R_E_KM
    mag = np.stack([r * np.cos(lam) * np.cos(phi), r * np.cos(lam) * np.sin(phi),
                    r * np.sin(lam)], -1)
    return convert(mag, T_DIP, "MAG", "GEO", model=model)


def _alpha_eq(L, mlat_deg, alpha_local_deg):
    # sin^2(alpha_eq) = sin^2(alpha) B_eq / B (first invariant; Roederer 1970)
    ratio = dipole.equatorial_field(L) / dipole.field_magnitude(L, mlat_deg)
    return np.degrees(np.arcsin(np.sin(np.radians(alpha_local_deg)) * np.sqrt(ratio)))


def test_k_traced_matches_dipole_closed_form():
    # traced K in a centred dipole against the exact closed form (itself checked against
    # scipy quad to 1e-8): agreement to 1e-4, the accuracy of I integrated on the traced
    # line's samples (short near-equatorial bounces are the worst); several pitch angles
    # from one trace
    m = CenteredDipole(epoch=2020.0)
    L = np.array([2.0, 4.0, 6.0])
    lat = np.array([0.0, 20.0, -15.0])
    xyz = _dipole_samples(m, L, lat, np.array([10.0, 100.0, 250.0]))
    alphas = np.array([30.0, 50.0, 70.0])
    k = second_invariant_k(m, xyz, T_DIP, alphas)
    b0 = float(m.dipole_b0_nt(T_DIP))
    ref = dipole.second_invariant_k(L[:, None], _alpha_eq(L[:, None], lat[:, None], alphas),
                                    b0_nt=b0)
    np.testing.assert_allclose(k, ref, rtol=1e-4)
    # nudge: a 0.02 deg change of the pitch angle changes K by more than the tolerance
    k2 = second_invariant_k(m, xyz, T_DIP, alphas + 0.02)
    assert np.all(np.abs(k2 / ref - 1) > 1e-4)
    # above 90 deg folds; DataArray in, DataArray out
    da = xr.DataArray(xyz, dims=("time", "xyz"))
    kd = second_invariant_k(m, da, T_DIP, 180.0 - alphas)
    assert kd.dims == ("time", "alpha_local") and kd.attrs["units"] == "G0.5 R_E"
    np.testing.assert_allclose(kd.values, k, rtol=1e-12)


def test_lstar_equals_l_in_centred_dipole():
    # Roederer (1970): in a centred dipole Phi = 2 pi B0 R_E^2 / L, so L* = L; from the
    # traced drift shell (24 MLTs) and the cap-flux quadrature, to 1e-4 (issue 17)
    m = CenteredDipole(epoch=2020.0)
    L = np.array([1.5, 3.0, 4.5, 6.6, 4.0])
    lat = np.array([0.0, 10.0, -20.0, 5.0, 30.0])
    xyz = _dipole_samples(m, L, lat, np.array([0.0, 60.0, 140.0, 200.0, 300.0]))
    ds = lstar(m, xyz, T_DIP, np.array([90.0, 60.0, 45.0, 80.0, 70.0]))
    assert np.all(ds.lstar_reason.values == 0)
    np.testing.assert_allclose(ds.lstar.values, L, rtol=1e-4)
    # the epoch's dipole moment is stated: k0 = B0 R_E^3
    np.testing.assert_allclose(ds.dipole_b0.values, float(m.dipole_b0_nt(T_DIP)), rtol=1e-12)
    assert "k0 = B0 R_E^3" in ds.attrs["lstar_k0"]
    # K of the sample agrees with the closed form too (absolute floor for the small K
    # of near-equatorial bounces, where I from the line's samples is least accurate)
    ref = dipole.second_invariant_k(L, _alpha_eq(L, lat, np.array([90, 60, 45, 80, 70.0])),
                                    b0_nt=float(m.dipole_b0_nt(T_DIP)))
    np.testing.assert_allclose(ds.k.values[1:], ref[1:], rtol=1e-4, atol=2e-6)


def test_lstar_nudge_and_reasons():
    m = CenteredDipole(epoch=2020.0)
    xyz = _dipole_samples(m, np.array([4.0]), np.array([0.0]), np.array([0.0]))
    ds = lstar(m, xyz * 1.001, T_DIP)  # nudge: 0.1% further out is a different shell
    assert abs(float(ds.lstar[0]) / 4.0 - 1) > 5e-4
    # a pitch angle whose mirror point lies below 100 km (inside the loss cone)
    low = lstar(m, xyz, T_DIP, 2.0)
    assert np.isnan(low.lstar.values[0])
    assert LSTAR_REASONS[int(low.lstar_reason.values[0])] == \
        "sample_mirror_point_below_stop_altitude"
    # an open line (beyond max_radius_re)
    far = lstar(m, _dipole_samples(m, np.array([40.0]), np.array([0.0]), np.array([0.0])),
                T_DIP, max_radius_re=30.0)
    assert LSTAR_REASONS[int(far.lstar_reason.values[0])] == "sample_line_open_or_invalid"
    with pytest.raises(PhysicsError, match="n_mlt"):
        lstar(m, xyz, T_DIP, n_mlt=4)
    flags = low.lstar_reason.attrs
    assert list(flags["flag_values"]) == sorted(LSTAR_REASONS)


def _igrf_samples():
    return np.array([[4.5 * R_E_KM, 0.0, 0.3 * R_E_KM],
                     [0.0, -3.0 * R_E_KM, 1.0 * R_E_KM],
                     [-5.0 * R_E_KM, 2.0 * R_E_KM, -0.5 * R_E_KM]])


def test_lstar_igrf_same_on_one_drift_shell():
    # A drift shell is the set of lines sharing B_m and K (Roederer 1970): samples started
    # on one sample's computed shell at other MLTs, with the local pitch angle that gives
    # the same B_m, must get the same L* (to 1e-3, issue 17) and the same K.
    m = IGRF()
    alpha = np.array([70.0, 40.0])
    ds = lstar(m, _igrf_samples()[:2], T_IGRF, alpha)
    assert np.all(ds.lstar_reason.values == 0)
    shell = ds.drift_shell_xyz.values[:, 3::6]  # 4 of the 24 MLTs
    b = np.linalg.norm(m.field_geo(shell.reshape(-1, 3), T_IGRF), axis=-1).reshape(
        shell.shape[:2])
    a_new = np.degrees(np.arcsin(np.sqrt(b / ds.b_mirror.values[:, None])))
    again = lstar(m, shell, T_IGRF, a_new)
    np.testing.assert_allclose(again.lstar.values, ds.lstar.values[:, None] + 0 * a_new,
                               rtol=1e-3)
    np.testing.assert_allclose(again.k.values, ds.k.values[:, None] + 0 * a_new, rtol=1e-4)
    # sanity of the comparison: the shell's start points do lie at different MLTs and
    # different distances (an eccentric shell), so equal L* is not trivial
    r = np.linalg.norm(shell, axis=-1)
    assert np.all(r.max(axis=1) / r.min(axis=1) > 1.005)

    # L* lies between the smallest and largest McIlwain L of the shell's field lines,
    # each line labelled by its equatorially mirroring particles (alpha_local = 90 deg at
    # the line's minimum of B; McIlwain 1961 via Hilton 1971): these differ from line to
    # line in IGRF, bracketing the flux-based L* (the McIlwain L of the shell's own
    # (B_m, I) is one number for the whole shell by construction and is not a bracket)
    from beltkit.field.trace import trace_lines

    full = ds.drift_shell_xyz.values
    lines = trace_lines(m, full.reshape(-1, 3), T_IGRF)
    l_eq = mcilwain_l(m, lines.xyz_min, T_IGRF, 90.0).reshape(full.shape[:2])
    assert np.all(ds.lstar.values >= l_eq.min(axis=1))
    assert np.all(ds.lstar.values <= l_eq.max(axis=1))


def _ppigrf_cartesian(xyz_km):
    # ppigrf.igrf_gc (reference library): geocentric (Br, Btheta, Bphi) -> GEO Cartesian
    x, y, z = np.asarray(xyz_km, dtype=float).reshape(-1, 3).T
    r = np.sqrt(x * x + y * y + z * z)
    th = np.arccos(z / r)
    ph = np.arctan2(y, x)
    br, bt, bp = (np.ravel(c) for c in ppigrf.igrf_gc(r, np.degrees(th), np.degrees(ph),
                                                       dt.datetime(2020, 1, 1)))
    st, ct, sp, cp = np.sin(th), np.cos(th), np.sin(ph), np.cos(ph)
    return np.stack([br * st * cp + bt * ct * cp - bp * sp,
                     br * st * sp + bt * ct * sp + bp * cp,
                     br * ct - bt * st], -1)


def _k_solve_ivp(field, start, b_m):
    # Independent integration of the same field line: scipy's DOP853 for dx/ds = +-B/|B|,
    # K accumulated as an extra state dK/ds = sqrt(B_m - B), each half stopped at the
    # mirror point B = B_m by an event (no samples, no interpolation, no Gauss rule).
    def rhs(s, u, sign):
        b = field(u[:3])
        bm = np.linalg.norm(b)
        return np.concatenate([sign * b / bm, [np.sqrt(max(b_m - bm, 0.0))]])

    def mirror(s, u, sign):
        return np.linalg.norm(field(u[:3])) - b_m

    mirror.terminal = True
    total = 0.0
    ends = []
    for sign in (1.0, -1.0):
        sol = solve_ivp(rhs, (0.0, 1e6), np.concatenate([start, [0.0]]), method="DOP853",
                        rtol=1e-10, atol=1e-9, events=mirror, args=(sign,))
        assert sol.status == 1  # stopped at the mirror point
        total += sol.y[3, -1]
        ends.append(sol.y[:3, -1])
    return np.sqrt(1e-5) * total / R_E_KM, np.array(ends)  # sqrt(nT) km -> G^(1/2) R_E


def test_k_igrf_traced_against_independent_integration():
    # K from the traced line (Dormand-Prince tracer, I from samples of ln B and a Gauss
    # rule) against scipy's DOP853 integration of the line with the K integrand as a
    # state, to 2e-5. The field along that integration is beltkit's IGRF (ppigrf costs
    # 25 ms a call, too slow inside an ODE solver); it is checked against the ppigrf
    # reference library here at the start and at both mirror points (and at 20,000
    # points in tests/field/test_igrf.py).
    m = IGRF()
    start = np.array([3.2 * R_E_KM, 1.1 * R_E_KM, 0.6 * R_E_KM])
    alphas = np.array([35.0, 65.0])
    k = second_invariant_k(m, start, T_IGRF, alphas)

    def field(x):
        return m.field_geo(x, T_IGRF)

    b_loc = np.linalg.norm(field(start))
    for a, kk in zip(alphas, k):
        ref, ends = _k_solve_ivp(field, start, b_loc / np.sin(np.radians(a)) ** 2)
        assert kk == pytest.approx(ref, rel=2e-5)
        pts = np.vstack([start, ends])
        np.testing.assert_allclose(field(pts), _ppigrf_cartesian(pts), rtol=0, atol=1e-6)
    # nudge: 0.01 deg of pitch angle moves K by more than the tolerance
    k2 = second_invariant_k(m, start, T_IGRF, alphas + 0.01)
    assert np.all(np.abs(k2 / k - 1) > 2e-5)


def _orbit_samples(n, t0, cadence_min=37.0):
    # an invented elliptical orbit (perigee 1.3 R_E, apogee 6.5 R_E, period 10 h, plane fixed
    # in GEO, inclination 20 deg), synthetic; local pitch angles 40-90 deg
    t = np.arange(n) * cadence_min * 60.0
    a, e = 0.5 * (1.3 + 6.5), (6.5 - 1.3) / (6.5 + 1.3)
    ecc = 2 * np.pi * t / 36000.0
    for _ in range(40):  # Kepler's equation by fixed-point iteration
        ecc = 2 * np.pi * t / 36000.0 + e * np.sin(ecc)
    nu = 2 * np.arctan2(np.sqrt(1 + e) * np.sin(ecc / 2), np.sqrt(1 - e) * np.cos(ecc / 2))
    r = a * (1 - e * np.cos(ecc)) * R_E_KM
    inc = np.radians(20.0)
    xyz = np.stack([r * np.cos(nu), r * np.sin(nu) * np.cos(inc), r * np.sin(nu) * np.sin(inc)],
                   -1)
    times = t0 + (t * 1e3).astype("timedelta64[ms]")
    alpha = np.random.default_rng(11).uniform(40.0, 90.0, n)
    return xyz, times, alpha


@pytest.fixture(scope="module")
def igrf_fast_and_exact():
    from beltkit.field.shelltable import shell_table

    xyz, times, alpha = _orbit_samples(24, T_IGRF)
    m = IGRF()
    # the table of equatorial lines that guides the fast path in IGRF (built by lstar
    # itself for large blocks; built here so that these 30 samples use it too)
    assert shell_table(m, times[12]) is shell_table(m, times[0], build=False)
    return (m, times, lstar(m, xyz, times, alpha, method="fast"),
            lstar(m, xyz, times, alpha, method="exact"))


def test_lstar_fast_path_agrees_with_exact_path_igrf(igrf_fast_and_exact):
    # The fast path (lines traced only past their mirror points, table-guided Newton and
    # secant roots taken untraced, flux from the shell's equatorial start curve; see
    # beltkit.field.invariants) against the exact path
    # (every line traced to both footpoints, converged traces only, flux through the
    # footprint cap): the same L* to 1e-4 relative on 24 orbit samples (measured ~3e-7),
    # the same reasons and the same K of the sample.
    m, times, fast, exact = igrf_fast_and_exact
    assert fast.lstar_reason.values.tolist() == exact.lstar_reason.values.tolist()
    ok = exact.lstar_reason.values == 0
    assert ok.sum() >= 20
    np.testing.assert_allclose(fast.lstar.values[ok], exact.lstar.values[ok], rtol=1e-4)
    np.testing.assert_allclose(fast.k.values[ok], exact.k.values[ok], rtol=1e-6)
    # the shells' start points agree too (each MLT: the same field line)
    np.testing.assert_allclose(fast.drift_shell_xyz.values[ok], exact.drift_shell_xyz.values[ok],
                               rtol=0, atol=1e-3 * R_E_KM)
    # nudge: a 1e-3 error of L* fails the comparison (the shell's radii 1e-3 further out
    # at every MLT give an L* about 1e-3 larger, recomputed by the same flux formula)
    from beltkit.field.shellsearch import cap_flux_equator

    shell = fast.drift_shell_xyz.values[ok]
    mag = np.asarray(frame_matrix("MAG", times[ok], model=m))
    sm_mag = np.einsum("sij,smj->smi", mag, shell)
    phi_s = np.arctan2(sm_mag[..., 1], sm_mag[..., 0])
    r_s = np.linalg.norm(shell, axis=-1)
    r_f = R_E_KM + 100.0
    b0 = fast.dipole_b0.values[ok]
    again = 2 * np.pi * b0 * R_E_KM**2 / cap_flux_equator(m, times[ok], r_s, phi_s, r_f, mag)
    np.testing.assert_allclose(again, fast.lstar.values[ok], rtol=1e-9)
    nudged = 2 * np.pi * b0 * R_E_KM**2 / cap_flux_equator(m, times[ok], r_s * 1.001, phi_s,
                                                            r_f, mag)
    assert np.all(np.abs(nudged / exact.lstar.values[ok] - 1) > 1e-4)


def test_cap_flux_equator_dipole_closed_form():
    # Roederer (1970): in a centred dipole the flux through the polar cap bounded by the
    # shell of L is Phi = 2 pi B0 R_E^2 / L; from the equatorial circle r = L R_E and the
    # footprint sphere r_f (flux into the hemisphere minus the annulus r_f..L R_E)
    from beltkit.field.shellsearch import cap_flux_equator

    m = CenteredDipole(epoch=2020.0)
    L = np.array([1.2, 2.0, 4.0, 7.0])
    mag = np.broadcast_to(np.asarray(frame_matrix("MAG", T_DIP, model=m)), (L.size, 3, 3))
    phi_s = np.broadcast_to(np.linspace(0, 2 * np.pi, 24, endpoint=False), (L.size, 24))
    r_s = np.broadcast_to((L * R_E_KM)[:, None], (L.size, 24))
    phi = cap_flux_equator(m, T_DIP, r_s, phi_s, R_E_KM + 100.0, mag)
    b0 = float(m.dipole_b0_nt(T_DIP))
    np.testing.assert_allclose(phi, 2 * np.pi * b0 * R_E_KM**2 / L, rtol=1e-10)
