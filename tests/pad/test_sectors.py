"""Binning spin-sectored counts into pitch-angle bins (beltkit.pad.bin_sectors).

The synthetic spinning spacecraft here is an independent forward model: every sector's
expected counts are the flux averaged over its circular field of view (Gauss-Legendre
nodes in the cap) and over its accumulation (the spin turns it), with the ray directions
built by scipy.spatial.transform.Rotation and the pitch angle of each ray taken as the
angle between minus the ray and B (the arrival convention, common practice). The bands
and weights of the reference estimate are computed by brute force (the boresight's pitch
angle sampled along the arc) and the spherical-zone area 2 pi (cos a1 - cos a2)
(Archimedes' hat-box theorem), not by the compiled kernel. Counts are Poisson draws
(numpy), so the estimate must agree with its expectation within the propagated errors:
the reduced chi-square over many bins is near 1 (the chi-square of independent Gaussian
deviates, textbook statistics), and halving the errors quadruples it (nudge).
"""

import numpy as np
import pytest
import xarray as xr
from scipy.spatial.transform import Rotation
from scipy.special import beta

from beltkit.errors import ConventionError
from beltkit.pad import bin_sectors, partition, sector_bands, validate

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"
N_S, N_D = 16, 2
POLAR = np.array([55.0, 125.0])  # detector boresights from the spin axis (deg)
HALF = np.array([8.0, 8.0])  # field-of-view half-angles (deg)
EDGES = np.linspace(0.0, 180.0, 13)
PHASE = np.stack([np.arange(N_S) * 22.5, np.arange(N_S) * 22.5 + 22.5], -1)


def _cap(half_deg, n_theta=4, n_phi=8):
    """Unit rays of a circular cap around +z and their weights (uniform in solid angle)."""
    x, w = np.polynomial.legendre.leggauss(n_theta)
    ch = np.cos(np.radians(half_deg))
    mu = 0.5 * (1 + ch) + 0.5 * (1 - ch) * x
    phi = (np.arange(n_phi) + 0.5) * 2 * np.pi / n_phi
    mu, phi = np.repeat(mu, n_phi), np.tile(phi, n_theta)
    s = np.sqrt(1 - mu**2)
    rays = np.stack([s * np.cos(phi), s * np.sin(phi), mu], -1)
    return rays, np.repeat(w, n_phi) / (w.sum() * n_phi)


def _rays(n_phase=6):
    """Rays (sector, detector, node, 3) in the spin frame (spin axis z, phase 0 along x)."""
    out, wts = [], []
    for d in range(N_D):
        cap, cw = _cap(HALF[d])
        tilt = Rotation.from_euler("y", POLAR[d], degrees=True)  # boresight at polar POLAR
        per_sector = []
        for s in range(N_S):
            ph = PHASE[s, 0] + (np.arange(n_phase) + 0.5) * 22.5 / n_phase
            spin = Rotation.from_euler("z", ph[:, None], degrees=True)
            r = np.concatenate([spin[i].apply(tilt.apply(cap)) for i in range(n_phase)])
            per_sector.append(r)
        out.append(per_sector)
        wts.append(np.tile(cw, n_phase) / n_phase)
    rays = np.array(out).transpose(1, 0, 2, 3)  # (sector, detector, node, 3)
    return rays, np.array(wts)  # weights (detector, node)


def _b_dirs(n_t, psi_deg, rng):
    """Field directions in the spin frame: polar angle psi from the spin axis, random azimuth."""
    az = rng.uniform(0, 2 * np.pi, n_t)
    p = np.radians(np.broadcast_to(psi_deg, (n_t,)))
    return np.stack([np.sin(p) * np.cos(az), np.sin(p) * np.sin(az), np.cos(p)], -1)


def _sin_n_lc(alpha, n=2.0, lc=20.0):
    """Gyrotropic sin^n distribution with an empty loss cone (both ends)."""
    folded = np.minimum(alpha, 180.0 - alpha)
    return np.where(folded > lc, np.sin(np.radians(alpha)) ** n, 0.0)


def _beam(alpha):
    """Field-aligned beam: particles moving along B within ~12 deg, over a weak isotropic floor."""
    return np.exp(-0.5 * (alpha / 8.0) ** 2) + 0.02


def _expected(dist, b, gyro=None, phase_ref=None):
    """Mean flux of each look (time, sector, detector): the distribution over its rays."""
    rays, w = _rays()
    # pitch angle of the particles entering along each ray: they move along -ray
    cosa = -np.einsum("sdni,ti->tsdn", rays, b)
    alpha = np.degrees(np.arccos(np.clip(cosa, -1, 1)))
    j = dist(alpha)
    if gyro is not None:  # a gyrophase-dependent factor (non-gyrotropic distribution)
        v = -rays[None]
        bb = b[:, None, None, None, :]
        e1 = phase_ref - np.sum(phase_ref * b, -1, keepdims=True) * b
        e1 = e1 / np.linalg.norm(e1, axis=-1, keepdims=True)
        e2 = np.cross(b, e1)
        vperp = v - np.sum(v * bb, -1, keepdims=True) * bb
        ph = np.arctan2(np.einsum("tsdni,ti->tsdn", vperp, e2),
                        np.einsum("tsdni,ti->tsdn", vperp, e1))
        j = j * gyro(ph)
    return np.einsum("tsdn,dn->tsd", j, w)


def _reference_weights(b):
    """Brute-force bands (boresight sampled along each arc) and zone-area weights."""
    n_t = b.shape[0]
    w = np.zeros((n_t, N_S, N_D, EDGES.size - 1))
    for d in range(N_D):
        tilt = Rotation.from_euler("y", POLAR[d], degrees=True)
        for s in range(N_S):
            ph = np.linspace(PHASE[s, 0], PHASE[s, 1], 721)
            spin = Rotation.from_euler("z", ph[:, None], degrees=True)
            bore = spin.apply(tilt.apply([0, 0, 1.0]))
            ax = np.degrees(np.arccos(np.clip(-bore @ b.T, -1, 1)))  # (phase, time)
            lo = np.maximum(ax.min(0) - HALF[d], 0.0)
            hi = np.minimum(ax.max(0) + HALF[d], 180.0)
            a1, a2 = EDGES[:-1][None], EDGES[1:][None]
            top = np.cos(np.radians(np.maximum(lo[:, None], a1)))
            bot = np.cos(np.radians(np.minimum(hi[:, None], a2)))
            zone = np.clip(top - bot, 0, None)
            w[:, s, d] = zone / (np.cos(np.radians(lo)) - np.cos(np.radians(hi)))[:, None]
    return w


def _dataset(mean_flux, b, g, rng, *, frame_b="GSE", b_vec=None, time=None):
    """Sectored dataset (spin form, spin axis GSE z, phase 0 along GSE x) with Poisson counts."""
    n_t, n_e = mean_flux.shape[0], len(g)
    mu = mean_flux[:, None] * np.asarray(g)[None, :, None, None]  # (time, energy, s, d)
    counts = rng.poisson(mu).astype(np.int32)
    if time is None:
        time = np.datetime64("2027-03-08T00:00", "ns") + np.arange(n_t) * np.timedelta64(
            6, "s")
    e = np.arange(n_e) * 100.0 + 100.0
    ds = xr.Dataset({
        "counts": (("time", "energy", "sector", "detector"), counts, {"units": "1"}),
        "counts_to_flux": (("energy",), 1.0 / np.asarray(g, float), {"units": FLUX_UNITS}),
        "energy_bnds": (("energy", "nv"), np.stack([e - 40, e + 40], -1), {"units": "keV"}),
        "spin_axis": (("xyz",), [0.0, 0.0, 1.0], {"frame": "GSE"}),
        "spin_phase_reference": (("xyz",), [1.0, 0.0, 0.0], {"frame": "GSE"}),
        "sector_phase_bnds": (("sector", "nv"), PHASE, {"units": "degree"}),
        "detector_polar_angle": (("detector",), POLAR, {"units": "degree"}),
        "fov_half_angle": (("detector",), HALF, {"units": "degree"}),
        "b_vector": (("time", "xyz"), (b if b_vec is None else b_vec) * 300.0,
                     {"units": "nT", "frame": frame_b}),
        "L": ("time", np.full(n_t, 4.5), {"units": "1"}),
        "mlat": ("time", np.linspace(-10, 10, n_t), {"units": "degree"}),
    }, coords={"time": time, "energy": ("energy", e, {"units": "keV",
                                                         "bounds": "energy_bnds"})})
    return ds, mu


def _reference_estimate(mu, g, w):
    """The estimator's expectation from expected counts (reference weights)."""
    num = np.einsum("tesd,tsdi->tei", mu, w)
    den = np.einsum("tsdi,e->tei", w, np.asarray(g, float))
    with np.errstate(invalid="ignore", divide="ignore"):  # bins no look covers: NaN
        return num / den, num


@pytest.fixture(scope="module")
def gyrotropic():
    rng = np.random.default_rng(11)
    n_t = 400
    b = _b_dirs(n_t, rng.uniform(40, 80, n_t), rng)
    g = [3.0, 30.0, 300.0]  # counts per unit flux: low, middle, high statistics
    out = {}
    for name, dist in (("sin", _sin_n_lc), ("beam", _beam)):
        mean = _expected(dist, b)
        ds, mu = _dataset(mean, b, g, rng)
        out[name] = (ds, mu, bin_sectors(ds, EDGES))
    return b, g, _reference_weights(b), out


def _chi2(binned, truth, truth_counts, scale=1.0):
    ok = truth_counts >= 50.0  # Gaussian regime of the Poisson counts (common practice)
    z = (binned["flux"].values - truth) / (scale * binned["flux_err"].values)
    return float(np.mean(z[ok] ** 2)), int(ok.sum())


@pytest.mark.parametrize("name", ["sin", "beam"])
def test_recovery_within_poisson_errors(gyrotropic, name):
    b, g, w, out = gyrotropic
    ds, mu, binned = out[name]
    truth, truth_counts = _reference_estimate(mu, g, w)
    chi2, n = _chi2(binned, truth, truth_counts)
    assert n > 500
    assert 0.85 < chi2 < 1.15, chi2
    # nudge: errors halved -> chi-square ~4, the test above would fail
    assert _chi2(binned, truth, truth_counts, scale=0.5)[0] > 3.0
    # the counts are shared out in full: the bins' counts add up to the looks'
    np.testing.assert_allclose(binned["counts"].sum(("pitch_angle",)).values,
                               ds["counts"].sum(("sector", "detector")).values, rtol=1e-5)


def test_sin_n_shape_and_empty_loss_cone(gyrotropic):
    # against the distribution itself: the solid-angle mean of sin^2 over each bin
    # (closed form: integral of sin^3 = [cos^3/3 - cos]) outside the loss cone and its
    # neighbours, where the looks' bands (about 30 deg wide) smooth little
    b, g, w, out = gyrotropic
    ds, mu, binned = out["sin"]
    flux = binned["flux"].sel(energy=300.0).mean("time").values / 1.0
    a1, a2 = np.radians(EDGES[:-1]), np.radians(EDGES[1:])

    def prim(a):
        return np.cos(a) ** 3 / 3 - np.cos(a)
    bin_mean = (prim(a2) - prim(a1)) / (np.cos(a1) - np.cos(a2))
    mid = slice(3, 9)  # 45-135 deg, away from the 20 deg loss cones
    np.testing.assert_allclose(flux[mid], bin_mean[mid], rtol=0.08)
    # the loss cone bins (0-15, 165-180) hold only what the bands straddling the edge
    # spread into them: well below the trapped level, never above a quarter of the peak
    assert flux[0] < 0.25 * flux.max() and flux[-1] < 0.25 * flux.max()
    # omnidirectional flux (2 pi int j sin a da = 2 pi B(1/2, 2) outside the cones...)
    # of the binned distribution against the distribution's own, within 5 %
    lc = np.radians(20.0)
    omni_true = 2 * np.pi * 2 * (np.cos(lc) - np.cos(lc) ** 3 / 3)  # sin^3 from lc to pi-lc
    omni = np.sum(flux * 2 * np.pi * (np.cos(a1) - np.cos(a2)))
    assert omni == pytest.approx(omni_true, rel=0.05)
    assert 2 * np.pi * beta(0.5, 2.0) == pytest.approx(2 * np.pi * 4 / 3)  # B(1/2, 2) = 4/3


def test_field_aligned_beam_lands_at_small_pitch_angles(gyrotropic):
    b, g, w, out = gyrotropic
    ds, mu, binned = out["beam"]
    flux = binned["flux"].sel(energy=300.0).mean("time").values
    assert np.argmax(flux) == 0
    assert flux[0] > 10 * flux[-1]  # arrival convention: along B means pitch angle near 0


def test_gyrotropy_statistic_and_flag(gyrotropic):
    b, g, w, out = gyrotropic
    ds, mu, binned = out["sin"]
    # the counting statistics alone (tolerance 0): the pair chi-square of gyrotropic data
    # has mean 1 per degree of freedom (chi-square of Gaussian deviates, textbook), and
    # is flagged at about the stated level (1e-3), certainly below 2 %
    pure = bin_sectors(ds, EDGES, gyrotropy_tolerance=0.0)
    assert ((pure["sector_flag"].values & 2) > 0).mean() < 0.02
    chi = pure["gyrotropy_chi2"].values
    dof = pure["gyrotropy_dof"].values
    assert 0.85 < np.nansum(chi * dof) / np.sum(dof[np.isfinite(chi)]) < 1.15
    assert ((binned["sector_flag"].values & 2) > 0).mean() < 0.02  # default tolerance
    # a distribution with a gyrophase dependence 1 + 0.6 sin(phase), phase from the spin
    # axis's projection (antisymmetric about the plane of the spin axis and B, where the
    # sectors at mirror phases see the same pitch angle), is flagged
    rng = np.random.default_rng(12)
    ref = np.tile([0.0, 0.0, 1.0], (b.shape[0], 1))
    mean = _expected(_sin_n_lc, b, gyro=lambda ph: 1 + 0.6 * np.sin(ph), phase_ref=ref)
    ds2, _ = _dataset(mean, b, g, rng)
    non = bin_sectors(ds2, EDGES)
    flagged2 = (non["sector_flag"].values & 2) > 0
    assert flagged2[:, 2].mean() > 0.8  # 300 counts per unit flux (default tolerance)
    assert flagged2[:, 1].mean() > 0.5  # 30 counts per unit flux



def test_b_along_spin_axis_is_flagged_and_coverage_says_so():
    rng = np.random.default_rng(13)
    n_t = 20
    psi = np.r_[np.full(10, 2.0), np.full(10, 60.0)]
    b = _b_dirs(n_t, psi, rng)
    ds, _ = _dataset(_expected(_sin_n_lc, b), b, [30.0], rng)
    out = bin_sectors(ds, EDGES)
    deg = (out["sector_flag"].values[:, 0] & 4) > 0
    assert deg[:10].all() and not deg[10:].any()
    np.testing.assert_allclose(out["spin_b_angle"].values, psi, atol=1e-4)
    cov = out["pitch_angle_coverage"].values
    # near-degenerate: each detector sees its polar angle +- (2 + 8) deg: two narrow zones
    # (spherical zones, 2 pi (cos a1 - cos a2) each) - a small part of the sphere
    a = np.radians([55 - 10, 55 + 10])
    zone = 2 * (np.cos(a[0]) - np.cos(a[1])) * 2 * np.pi / (4 * np.pi)
    assert cov[:10].max() < zone + 0.01 and cov[10:].min() > 0.9
    assert (out["look_count"].values[:10] == 0).any()  # unsampled bins: flagged, NaN
    unsampled = out["look_count"].values == 0
    assert np.isnan(out["flux"].values[unsampled]).all()
    assert ((out["sector_flag"].values[:10] & 1) > 0).all()
    # bin coverage: the 45-60 deg bin lies inside detector 0's zone 45-65 at psi = 2 deg;
    # the 90-105 deg bin in neither zone (both detectors' zones: 45-65 and 115-135)
    bcov = out["bin_coverage"].values
    assert bcov[:10, 3].min() > 0.99 and bcov[:10, 6].max() == 0.0
    assert ((out["sector_flag"].values[:10] & 16) > 0).all()


def test_bands_against_brute_force(gyrotropic):
    b, g, w, out = gyrotropic
    ds = out["sin"][0].isel(time=slice(0, 30))
    bands = sector_bands(ds)
    for d in range(N_D):
        tilt = Rotation.from_euler("y", POLAR[d], degrees=True)
        for s in (0, 5, 11):
            ph = np.linspace(PHASE[s, 0], PHASE[s, 1], 2001)
            spin = Rotation.from_euler("z", ph[:, None], degrees=True)
            bore = spin.apply(tilt.apply([0, 0, 1.0]))
            ax = np.degrees(np.arccos(np.clip(-bore @ b[:30].T, -1, 1)))
            np.testing.assert_allclose(bands["band_lower"].values[:, s, d],
                                       np.maximum(ax.min(0) - HALF[d], 0), atol=2e-3)
            np.testing.assert_allclose(bands["band_upper"].values[:, s, d],
                                       np.minimum(ax.max(0) + HALF[d], 180), atol=2e-3)


def test_output_follows_pitch_angle_conventions_and_partitions(gyrotropic):
    ds, mu, binned = gyrotropic[3]["sin"]
    assert validate(binned) == []
    part = partition(binned.isel(time=slice(0, 50)))
    assert np.isfinite(part["fraction_trapped"].values).mean() > 0.9
    assert binned["flux"].attrs["units"] == FLUX_UNITS
    assert set(binned["sector_flag"].attrs["flag_masks"]) == {1, 2, 4, 8, 16}
    assert "L" in binned and "mlat" in binned  # positions passed through
    assert "counts" in ds and "sector" in ds["counts"].dims  # input untouched


def test_frames_and_look_direction_form(gyrotropic):
    # b_vector in GEO and the spin axis in GSE: the field is rotated first (field.convert);
    # the same result as giving the field in GSE
    from beltkit.field import convert

    ds = gyrotropic[3]["sin"][0].isel(time=slice(0, 40))
    ref = bin_sectors(ds, EDGES)
    b_geo = convert(ds["b_vector"].values, ds["time"].values, "GSE", "GEO")
    ds_geo = ds.assign(b_vector=(("time", "xyz"), b_geo, {"units": "nT", "frame": "GEO"}))
    np.testing.assert_allclose(bin_sectors(ds_geo, EDGES)["flux"].values,
                               ref["flux"].values, rtol=1e-5)
    # the look-direction form with sectors of zero width: the spin form with one phase
    mid = PHASE.mean(-1)
    tilt = [Rotation.from_euler("y", p, degrees=True).apply([0, 0, 1.0]) for p in POLAR]
    spin = Rotation.from_euler("z", mid[:, None], degrees=True)
    looks = np.stack([spin.apply(t) for t in tilt], 1)
    fixed = ds.drop_vars(["spin_axis", "spin_phase_reference", "sector_phase_bnds",
                          "detector_polar_angle"]).assign(
        look_direction=(("sector", "detector", "xyz"), looks, {"frame": "GSE"}))
    narrow = ds.assign(sector_phase_bnds=(("sector", "nv"),
                                          np.stack([mid, mid + 1e-9], -1), {"units": "degree"}))
    np.testing.assert_allclose(bin_sectors(fixed, EDGES)["flux"].values,
                               bin_sectors(narrow, EDGES)["flux"].values, rtol=1e-5)


def test_refuses_bad_datasets_listing_problems(gyrotropic):
    ds = gyrotropic[3]["sin"][0].isel(time=slice(0, 5))
    bad = ds.drop_vars(["fov_half_angle", "b_vector"])
    with pytest.raises(ConventionError) as err:
        bin_sectors(bad, EDGES)
    text = str(err.value)
    assert "fov_half_angle" in text and "b_vector" in text
    with pytest.raises(ConventionError, match="negative"):
        bin_sectors(ds.assign(counts=-ds["counts"]), EDGES)


def test_missing_counts_skip_the_look_only(gyrotropic):
    # a NaN (fill) count drops that look at that sample and energy; other samples are
    # computed exactly as before (the per-sample fast path and the general path agree)
    ds = gyrotropic[3]["sin"][0].isel(time=slice(0, 20))
    ref = bin_sectors(ds, EDGES)
    counts = ds["counts"].values.astype(np.float32)
    counts[5, 1, 3, 0] = np.nan
    out = bin_sectors(ds.assign(counts=(ds["counts"].dims, counts, {"units": "1"})), EDGES)
    others = np.ones(20, bool)
    others[5] = False
    np.testing.assert_array_equal(out["flux"].values[others], ref["flux"].values[others])
    np.testing.assert_array_equal(out["flux"].values[5, [0, 2]], ref["flux"].values[5, [0, 2]])
    fed = ref["look_count"].values[5, 1] - out["look_count"].values[5, 1]
    assert fed.min() == 0 and 1 <= fed.sum() <= 4  # the look's band spans 1-4 bins
    np.testing.assert_allclose(out["counts"].values[5, 1].sum(),
                               np.nansum(counts[5, 1]), rtol=1e-5)
    # the general path gives the clean path's numbers too (same energy, no NaN)
    np.testing.assert_allclose(out["flux"].values[5, 0], ref["flux"].values[5, 0], rtol=1e-6)


def test_flux_input_equals_counts_input(gyrotropic):
    # flux = counts x counts_to_flux with flux_err = sqrt(max(N, 1)) x counts_to_flux (the
    # Poisson convention of section 2) bins to the same numbers when the exposure does not
    # depend on the look: sum w N / sum w G = sum w (N / G) / sum w
    ds = gyrotropic[3]["sin"][0].isel(time=slice(0, 25))
    c2f = ds["counts_to_flux"]
    n = ds["counts"].astype(float)
    flux_ds = ds.drop_vars(["counts", "counts_to_flux"]).assign(
        flux=(n * c2f).assign_attrs(units="cm-2 s-1 sr-1 MeV-1"),  # per MeV: x 1e-3 to keV
        flux_err=(np.sqrt(np.maximum(n, 1)) * c2f).assign_attrs(units=FLUX_UNITS))
    ref = bin_sectors(ds, EDGES)
    got = bin_sectors(flux_ds.assign(flux=flux_ds["flux"] * 1e3), EDGES)
    np.testing.assert_allclose(got["flux"].values, ref["flux"].values, rtol=1e-5)
    np.testing.assert_allclose(got["flux_err"].values, ref["flux_err"].values, rtol=1e-5)
    np.testing.assert_allclose(got["gyrotropy_chi2"].values, ref["gyrotropy_chi2"].values,
                               rtol=1e-4)
    assert "counts" not in got


def test_field_keyword_is_a_deprecated_spelling_of_model(gyrotropic):
    # issue 14: the field model is model= throughout; field= warns for one release
    ds = gyrotropic[3]["sin"][0].isel(time=slice(0, 20))
    with pytest.warns(FutureWarning, match="use model="):
        got = bin_sectors(ds, EDGES, field=None)
    xr.testing.assert_identical(got, bin_sectors(ds, EDGES))
    with pytest.warns(FutureWarning, match="use model="):
        bands = sector_bands(ds, field=None)
    xr.testing.assert_identical(bands, sector_bands(ds))
    # the value reaches the geometry: a model needs position_geo, which this set lacks
    with pytest.raises(ConventionError, match="position_geo"):
        bin_sectors(ds, EDGES, model="dipole")
    with pytest.warns(FutureWarning), pytest.raises(ConventionError, match="position_geo"):
        bin_sectors(ds, EDGES, field="dipole")
    with pytest.raises(TypeError, match="give model= only"):
        bin_sectors(ds, EDGES, model=None, field=None)
