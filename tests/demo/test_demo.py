"""The synthetic demo scenario: reproducible, convention-following, and its truth recovered.

The demo data are invented (beltkit.demo); they serve the demonstration and
this check of the pipeline end to end. The statistical check relies on the
normal distribution's coverage probabilities (textbook values: 68.27% of a
Gaussian within 1 sigma, 95.45% within 2 sigma, 99.73% within 3 sigma).
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from beltkit import demo, pad
from beltkit.demo.run import survey_dials, survey_is_partial

ROOT = Path(__file__).resolve().parents[2]
DATA_DEMO = ROOT / "data_demo"
TERN = sorted(DATA_DEMO.glob("marram_tern_fan_synthetic_*.nc"))
DUNLIN = sorted(DATA_DEMO.glob("marram_dunlin_quill_synthetic_*.nc"))


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory):
    return demo.generate(tmp_path_factory.mktemp("regen"))


@pytest.fixture(scope="module")
def tern_results():
    """(dataset, summary) of every committed spectrometer day-file, loaded."""
    out = []
    for path in TERN:
        with xr.open_dataset(path) as ds:
            ds = ds.load()
        # the truth is defined in the centred dipole: partitioned there, as the demo does
        # (the files carry position_geo, so the default model="auto" would use the IGRF)
        out.append((ds, pad.partition(ds, model="dipole").compute()))
    return out


def test_committed_files_exist_and_are_small():
    assert len(TERN) == 3 and len(DUNLIN) == 3
    total = sum(p.stat().st_size for p in DATA_DEMO.iterdir() if p.is_file())
    assert total < 10e6, f"data_demo holds {total / 1e6:.1f} MB"
    assert (DATA_DEMO / "README.md").read_text().lower().count("synthetic") >= 2


def test_regenerating_gives_identical_values(regenerated):
    names = sorted(p.name for p in regenerated)
    assert names == sorted(p.name for p in TERN + DUNLIN)
    for path in regenerated:
        with xr.open_dataset(path) as new, xr.open_dataset(DATA_DEMO / path.name) as old:
            assert sorted(new.variables) == sorted(old.variables)
            for name in new.variables:
                np.testing.assert_array_equal(new[name].values, old[name].values,
                                              err_msg=f"{path.name}:{name}")
            assert new.attrs["title"] == old.attrs["title"]


def test_other_seed_changes_counts_only(tmp_path):
    path = demo.generate(tmp_path, seed=7, n_days=1, spacecraft=("tern",))[0]
    with xr.open_dataset(path) as new, xr.open_dataset(TERN[0]) as old:
        assert not np.array_equal(new["counts"].values, old["counts"].values)
        np.testing.assert_array_equal(new["true_fraction_precipitating"].values,
                                      old["true_fraction_precipitating"].values)


@pytest.mark.parametrize("path", TERN + DUNLIN, ids=lambda p: p.name)
def test_files_follow_the_conventions_and_say_synthetic(path):
    with xr.open_dataset(path) as ds:
        assert pad.validate(ds) == []
        assert ds.attrs["title"].startswith("SYNTHETIC")
        assert "synthetic" in ds.attrs["comment"].lower()
        for name in ("true_fraction_precipitating", "true_fraction_quasi_trapped",
                     "true_fraction_trapped"):
            assert ds[name].dims == ("time", "energy")
        total = (ds["true_fraction_precipitating"] + ds["true_fraction_quasi_trapped"]
                 + ds["true_fraction_trapped"])
        np.testing.assert_allclose(total.values, 1.0, atol=1e-6)
        # generator truth in the centred dipole: the cones coincide, nothing quasi-trapped
        assert float(np.abs(ds["true_fraction_quasi_trapped"]).max()) == 0.0


def test_orbits_as_stated():
    """Altitudes from the stored GEO positions; periods by Kepler's third law.

    GM of the Earth from astropy.constants.GM_earth (IAU 2015 Resolution B3).
    """
    from astropy.constants import GM_earth

    from beltkit.constants import R_E_KM

    gm = GM_earth.to_value("km3 / s2")
    with xr.open_dataset(DUNLIN[0]) as ds:
        r = np.linalg.norm(ds["position_geo"].values, axis=-1)
        np.testing.assert_allclose(r - R_E_KM, 650.0, atol=0.01)
        # high-inclination orbit: magnetic latitudes beyond 70 deg both ways
        assert ds["mlat"].max() > 70 and ds["mlat"].min() < -70
        assert float(np.median(np.diff(ds["time"].values).astype(float))) == 1e9
    with xr.open_dataset(TERN[0]) as ds:
        r = np.linalg.norm(ds["position_geo"].values, axis=-1)
        assert abs(r.min() - (R_E_KM + 600.0)) < 5.0
        assert abs(r.max() / R_E_KM - 5.8) < 0.01
        assert float(np.abs(ds["mlat"]).max()) < 25.0
    dunlin, tern = demo.SCENARIO["dunlin"], demo.SCENARIO["tern"]
    a_dunlin = R_E_KM + dunlin["altitude_km"]
    a_tern = 0.5 * (R_E_KM + tern["perigee_altitude_km"] + tern["apogee_re"] * R_E_KM)
    for a, period in ((a_dunlin, dunlin["period_s"]), (a_tern, tern["period_s"])):
        assert period == pytest.approx(2 * math.pi * math.sqrt(a**3 / gm), rel=2e-4)


def test_belt_structure_two_zones_and_slot():
    """Omnidirectional flux at 520 keV: inner zone and outer zone above the slot (quiet day)."""
    with xr.open_dataset(TERN[0]) as ds:
        omni = (ds["flux"].sel(energy=520, method="nearest")
                * np.sin(np.radians(ds["pitch_angle"]))).mean("pitch_angle")
        L = ds["L"]
        inner = float(omni.where((L > 1.4) & (L < 1.8)).median())
        slot = float(omni.where((L > 2.4) & (L < 2.9)).median())
        outer = float(omni.where((L > 4.2) & (L < 5.2)).median())
    assert inner > 10 * slot and outer > 10 * slot


def test_storm_fills_the_loss_cone():
    with xr.open_dataset(TERN[0]) as quiet, xr.open_dataset(TERN[1]) as storm:
        f_quiet = quiet["true_loss_cone_filling"].where(quiet["L"] > 4.5).median()
        f_storm = storm["true_loss_cone_filling"].sel(
            time=slice("2027-03-09T05:00", "2027-03-09T12:00")).where(storm["L"] > 4.5).median()
    assert float(f_storm) > 3 * float(f_quiet)


def _standardised_residuals(tern_results, population, scale=1.0):
    z = []
    for ds, s in tern_results:
        full = s["coverage_precipitating"] >= 0.999
        full &= s["coverage_trapped"] >= 0.999
        est = s[f"fraction_{population}"].where(full)
        err = s[f"fraction_{population}_err"].where(full) * scale
        truth = ds[f"true_fraction_{population}"]
        zz = ((est - truth) / err).values.ravel()
        z.append(zz[np.isfinite(est.values.ravel())])
    return np.concatenate(z)


@pytest.mark.parametrize("population", ["precipitating", "trapped"])
def test_pipeline_recovers_true_fractions_within_uncertainty(tern_results, population):
    """Pipeline (centred dipole) on the spectrometer data against the generator truth.

    The truth is the populations' share of the *expected* measured flux, so
    an unbiased estimator with honest 1-sigma errors puts about 68% of the
    samples within 1 sigma and about 95% within 2 sigma (normal coverage).
    Required: at least 95% within 2 sigma; and the 1-sigma coverage between
    62% and 75%, so that inflated error bars cannot pass either.
    """
    z = _standardised_residuals(tern_results, population)
    assert z.size >= 15_000  # 3 days x 720 spectra x 8 energies, all fully covered
    assert np.isfinite(z).all()
    within1 = np.mean(np.abs(z) <= 1)
    within2 = np.mean(np.abs(z) <= 2)
    within3 = np.mean(np.abs(z) <= 3)
    assert within2 >= 0.95, (within1, within2, within3)
    assert 0.62 <= within1 <= 0.75, (within1, within2, within3)
    assert within3 >= 0.99
    assert abs(np.mean(z)) < 0.05  # no bias in units of the error


def test_recovery_check_is_sensitive(tern_results):
    """Nudge: errors understated by half must fail the 95%-within-2-sigma criterion."""
    z = _standardised_residuals(tern_results, "precipitating", scale=0.5)
    assert np.mean(np.abs(z) <= 2) < 0.90


def test_quasi_trapped_is_zero_in_the_dipole(tern_results):
    for ds, s in tern_results:
        np.testing.assert_array_equal(s["fraction_quasi_trapped"].values, 0.0)
        np.testing.assert_array_equal(ds["true_fraction_quasi_trapped"].values, 0.0)


def test_truth_uses_the_pipeline_loss_cones(tern_results):
    """The dipole loss cones of the pipeline equal beltkit.dipole's at the stored positions."""
    from beltkit import dipole

    ds, s = tern_results[1]
    np.testing.assert_allclose(s["blc_local"].values,
                               dipole.local_loss_cone(ds["L"].values.astype(float),
                                                      ds["mlat"].values.astype(float)),
                               rtol=1e-5)


@pytest.mark.slow
def test_run_demo_writes_data_summaries_surveys_and_figures(tmp_path, monkeypatch):
    work = tmp_path / "elsewhere"
    work.mkdir()
    monkeypatch.chdir(work)  # no repo-relative paths
    monkeypatch.setenv("MPLBACKEND", "Agg")
    out = tmp_path / "demo-out"
    paths = demo.run_demo(out, n_days=2)
    assert paths and all(Path(p).is_file() for p in paths)
    names = {Path(p).name for p in paths}
    assert {"survey_tern.nc", "survey_dunlin.nc", "run-report.jsonl"} <= names
    assert sum(n.endswith(".summary.nc") and "_coverage_" not in n for n in names) == 4
    # Dunlin's day of orbits mapped by longitude and latitude (beltkit.demo.generate_coverage)
    assert {"marram_dunlin_quill_synthetic_coverage_20270308.summary.nc",
            "survey_dunlin_geo.nc", "dunlin_survey_geo.png"} <= names
    pngs = [Path(p) for p in paths if str(p).endswith(".png")]
    assert len(pngs) >= 6
    for p in pngs:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and p.stat().st_size > 20_000
    assert not any(os.scandir(work))  # nothing written into the working directory
    assert {"tern_survey_L_MLT.png", "dunlin_survey_L_MLT.png", "dunlin_spectrogram.png"} <= names

    # the survey dials: partial-coverage wording from the summaries' coverage, for Dunlin only
    import matplotlib.text

    summaries = [Path(p) for p in paths if str(p).endswith(".summary.nc")]
    assert survey_is_partial(summaries, "dunlin") and not survey_is_partial(summaries, "tern")
    for craft, e_kev in (("tern", 160.0), ("dunlin", 190.0)):
        partial = survey_is_partial(summaries, craft)
        fig = survey_dials(out / f"survey_{craft}.nc", e_kev, partial,
                                 "note" if partial else "")
        text = " ".join(t.get_text() for t in fig.findobj(matplotlib.text.Text))
        dials = len([a for a in fig.axes if a.name == "polar"])
        if craft == "tern":  # centred dipole: no empty quasi-trapped dial, a note instead
            assert dials == 1 and "quasi-trapped fraction: zero in every cell" in text
        else:  # IGRF at 650 km: the quasi-trapped population is drawn
            assert dials == 2 and "zero in every cell" not in text
            assert "quasi-trapped fraction of the measured flux" in text
        assert "precipitating fraction" in text and "(1)" not in text
        assert ("partial coverage" in text) is partial
        assert ("of the measured flux" in text) is partial


def test_demo_summaries_record_their_field_models(tmp_path):
    """Tern in the centred dipole (its truth's model), Dunlin in the IGRF with quasi-trapped flux.

    Independent expectations (common practice): in the IGRF at 650 km the
    drift loss cone is wider than the bounce loss cone almost everywhere, so
    a quasi-trapped share appears; the centred dipole has none, and Tern's
    perigee (600 km) lies below 2,000 km, so its dipole summaries say so.
    """
    from beltkit import batch

    tern = batch.summarize(TERN[:1], tmp_path, model="dipole")[0]
    # every 10th sample of a day-file keeps the IGRF part quick (the orbit is still sampled)
    with xr.open_dataset(DUNLIN[0]) as ds:
        part = ds.isel(time=slice(0, None, 10)).load()
    sub = tmp_path / "in" / DUNLIN[0].name
    sub.parent.mkdir()
    part.to_netcdf(sub)
    dunlin = batch.summarize([sub], tmp_path)[0]  # model="auto"
    with xr.open_dataset(tern.output) as t, xr.open_dataset(dunlin.output) as d:
        assert t.attrs["field_model"] == "dipole"
        assert "no quasi-trapped population" in t.attrs["field_model_note"]
        assert (d.attrs["field_model"], d.attrs["field_model_requested"]) == ("igrf", "auto")
        assert "field_model_note" not in d.attrs
        gap = (d["dlc_local"] - d["blc_local"]).values
        assert np.nanmedian(gap) > 5.0  # degrees
        qt = d["fraction_quasi_trapped"].values
        assert np.nanmax(qt) > 0.5 and np.mean(qt[np.isfinite(qt)] > 0.01) > 0.5


def test_dunlin_truth_is_documented_as_not_recovered():
    for text in ((DATA_DEMO / "README.md").read_text(), demo.__doc__):
        flat = " ".join(text.replace("*", "").split())
        assert "not a recovery target" in flat
        assert "measured solid angle" in flat


def test_sine_power_fit_recovers_the_generator_index():
    """Outer zone near the equator: fitted n within a few per cent of the generator's n.

    The generator's shape is sin^n outside the loss cone with a roll-off at the
    edge, averaged over 15-degree bins; both bias a sin^n fit slightly, so the
    tolerance is 6% on the median (measured: 2-4% low).
    """
    with xr.open_dataset(TERN[1]) as ds:
        ds = ds.load()
    fits = pad.fit_sine_power(ds)
    outer = (ds["L"] > 3.5) & (np.abs(ds["mlat"]) < 5)
    ratio = (fits["sine_index"] / ds["true_sine_index"]).where(outer)
    med = ratio.median("time").values
    assert outer.sum() > 100
    assert np.all(np.abs(med - 1) < 0.06), med


def test_generate_refuses_bad_arguments(tmp_path):
    with pytest.raises(ValueError, match="n_days"):
        demo.generate(tmp_path, n_days=0)
    with pytest.raises(ValueError, match="spacecraft"):
        demo.generate(tmp_path, spacecraft=("heron",))
    assert not list(tmp_path.glob("*.nc"))


# ----------------------------------------------------------------- scattering event (Dunlin)


@pytest.fixture(scope="module")
def dunlin_event():
    """The storm-day Dunlin file's scattering-event samples (true_z0 finite), loaded."""
    [storm] = [p for p in DUNLIN if demo.SCENARIO["dunlin"]["event_day"].replace("-", "")
               in p.name]
    with xr.open_dataset(storm) as ds:
        ds = ds.load()
    event = np.flatnonzero(np.isfinite(ds["true_z0"].values).any(axis=1))
    return ds.isel(time=event)


def _coverage(out, d_true):
    """Share of resolved samples whose interval holds the true D (a one-sided bound counts)."""
    lo = out["diffusion_coefficient_lower"].values
    hi = out["diffusion_coefficient_upper"].values
    resolved = np.isfinite(lo) | np.isfinite(hi)
    inside = (lo <= d_true) & (d_true <= hi)
    return inside[resolved].mean(), resolved.mean()


def _calibrated(coverage):
    # the pass criterion of issue 20: at least 90 % of the samples inside, and not (almost)
    # all of them, which an over-wide interval gives (2 sigma nominal: 95.45 % of a Gaussian)
    return 0.90 <= coverage <= 0.99


def _event_summary(ds, sigma=2.0):
    from beltkit import batch

    # the pipeline's own path: summarize's per-file summary, field "auto" (IGRF), diffusion on
    return batch.summarize_dataset(ds, diffusion={"interval_sigma": sigma})


def test_scattering_event_is_where_and_as_stated(dunlin_event):
    ds = dunlin_event
    z0 = ds["true_z0"].values
    assert ds.sizes["time"] > 500 and np.isfinite(z0).all()
    lo, hi = demo.SCENARIO["dunlin"]["event_l_range"]
    assert float(ds["L"].min()) >= lo and float(ds["L"].max()) <= hi
    assert np.mean((z0 >= 0.3) & (z0 <= 20.0)) > 0.8  # z0 mostly within 0.3-20
    # the other days carry no event
    for path in DUNLIN:
        if demo.SCENARIO["dunlin"]["event_day"].replace("-", "") not in path.name:
            with xr.open_dataset(path) as other:
                assert np.isnan(other["true_z0"].values).all()
    # the look into the cone has most of its swept band inside the local bounce cone (IGRF)
    summary = _event_summary(ds)
    blc = summary["blc_local"].values[:, None]
    a1, a2 = pad.swept_band(ds["look_pitch_angle"].values.astype(float),
                            ds["look_half_angle"].values.astype(float))
    c1, c2, cb = (np.cos(np.radians(a)) for a in (a1, a2, blc))
    # solid angle of [a1, a2] inside [0, blc] or [180 - blc, 180] (PHYSICS.md, bands)
    inside = (c1 - np.clip(cb, c2, c1)) + (np.clip(-cb, c2, c1) - c2)
    share = inside / (c1 - c2)
    assert np.all(share.max(axis=1) > 0.5) and np.all(share.min(axis=1) < 0.5)


def test_pipeline_recovers_d_of_the_scattering_event(dunlin_event):
    ds = dunlin_event
    out = _event_summary(ds)
    d_true = ds["true_diffusion_coefficient"].values.astype(float)
    cov, resolved = _coverage(out, d_true)
    assert resolved > 0.95, resolved
    assert _calibrated(cov), cov
    ratio = out["diffusion_coefficient"].values / d_true
    assert np.nanmedian(ratio) == pytest.approx(1.0, abs=0.02)
    # the figure of the event is drawn from these outputs
    assert out.attrs["beltkit_loss_time"] == "half_bounce"


@pytest.mark.parametrize("factor", [0.5, 2.0])
def test_narrowed_or_widened_event_interval_fails_the_criterion(dunlin_event, factor):
    ds = dunlin_event
    out = _event_summary(ds, sigma=2.0 * factor)
    cov, _ = _coverage(out, ds["true_diffusion_coefficient"].values.astype(float))
    assert not _calibrated(cov), cov


def test_psd_profiles_show_the_injected_local_source(tmp_path):
    """The radial profiles of f at fixed (mu, K) peak where the generator's source is, after it.

    Truth: the spectrometer's flux is multiplied by ``true_local_source_factor``,
    a Gaussian in L centred on SCENARIO["tern"]["source_lstar"] that is 1 before
    the storm onset and grows after it; in the centred dipole L* = L (Roederer
    1970), so f at fixed mu and K carries the same factor. Before the onset
    f(L*) rises monotonically outward (no local maximum); after it a local
    maximum sits in the bin of the source and grows pass by pass.
    """
    from beltkit import batch

    p = demo.SCENARIO["tern"]
    onset = np.datetime64(demo.SCENARIO["storm_onset"], "ns")
    # the truth stored in the files: 1 before the onset, largest at the stated L after it
    for path in TERN:
        with xr.open_dataset(path) as ds:
            factor = ds["true_local_source_factor"].values
            before = ds["time"].values < onset
            assert np.all(factor[before] == 1.0)
            if (~before).any():
                top = np.unravel_index(np.argmax(factor), factor.shape)
                assert abs(float(ds["L"][top[0]]) - p["source_lstar"]) < 0.1
    done = batch.psd_files(TERN, tmp_path, p["psd_mu_mev_per_g"], p["psd_k_g05_re"],
                           model="dipole")
    assert [r.status for r in done] == ["ok"] * len(TERN)
    profiles = demo.tern_psd_profiles([r.output for r in done], mu_mev_per_g=1000.0)
    centres = profiles["lstar"].values
    half = np.timedelta64(150, "m")  # a pass lasts about 4.5 h (half the 9 h orbit)
    seen_before, peaks_after = 0, []
    for i in range(profiles.sizes["pass"]):
        f = np.log(profiles["psd"].isel({"pass": i}).values)
        ok = np.isfinite(f)
        if ok.sum() < 10:  # a pass that skims the belt (near apogee or perigee only)
            continue
        inner = [j for j in range(1, f.size - 1)
                 if ok[j - 1:j + 2].all() and f[j] > f[j - 1] and f[j] > f[j + 1]]
        mid = profiles["pass_time"].values[i]
        if mid + half < onset:
            seen_before += 1
            assert inner == [], f"a local maximum before the onset on the pass at {mid}"
        elif mid - half > onset:
            assert len(inner) == 1, f"pass at {mid}: local maxima at {centres[inner]}"
            assert abs(centres[inner[0]] - p["source_lstar"]) <= 0.125 + 1e-9
            peaks_after.append(f[inner[0]])
    assert seen_before >= 4 and len(peaks_after) >= 5
    # the peak grows: every complete pass after the first is above it, the last ~5x it
    assert min(peaks_after[1:]) > peaks_after[0]
    assert peaks_after[-1] - peaks_after[0] > np.log(3.0)
