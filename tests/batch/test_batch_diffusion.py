"""Diffusion outputs in summaries and surveys (``summarize(..., diffusion=...)``, ``--diffusion``).

The reference for the values is :func:`beltkit.diffusion.from_pitch_angle_data`
run on the whole dataset in memory (its physics is tested in tests/diffusion/test_diffusion.py);
here the summaries must reproduce it on both of summarize's paths (one slab read
and computed ahead of the writer, and a long file streamed slab by slab), keep
the settings that decide whether an output is up to date, write ``inf`` bounds
in a file the CF checker (IOOS compliance checker, cf:1.8; see test_cf.py)
accepts, and bin D, z0 and the lifetime in the survey with numpy's median per
cell as the check.
"""

import numpy as np
import pytest
import xarray as xr
from _cf_check import assert_cf_clean
from _flux_factory import make_ds

from beltkit import batch, diffusion, dipole
from beltkit.cli import main
from beltkit.errors import SurveyError

DIFFUSION_VARS = ("diffusion_ratio", "diffusion_ratio_err", "z0", "z0_lower", "z0_upper",
                  "diffusion_coefficient", "diffusion_coefficient_lower",
                  "diffusion_coefficient_upper", "loss_time", "strong_diffusion_lifetime",
                  "lifetime", "lifetime_lower", "lifetime_upper", "diffusion_regime",
                  "diffusion_flag", "diffusion_loss_cone", "diffusion_field_ratio")


def event_dataset(n=300, seed=4, dead=None):
    """Bins with the steady-state profile (invented): z0 log-uniform 0.3-20, every 7th isotropic.

    ``dead`` = (energy index, time slice): that channel's flux is missing there.
    """
    rng = np.random.default_rng(seed)
    z0 = np.exp(rng.uniform(np.log(0.3), np.log(20.0), n))
    z0[::7] = 1e-6  # a full cone: ratio 1 within errors, only an upper bound on z0 (D_upper inf)
    L = np.linspace(3.5, 5.5, n)
    mlat = 8.0 * np.sin(np.linspace(0, 3 * np.pi, n))
    mlt = np.linspace(0.0, 47.9, n) % 24.0
    edges = np.concatenate([np.arange(0, 20, 1.0), np.arange(20, 160, 10.0),
                            np.arange(160, 181, 1.0)])
    centre = 0.5 * (edges[:-1] + edges[1:])
    a0 = dipole.bounce_loss_cone(L)
    b_ratio = dipole.field_magnitude(L, mlat) / dipole.equatorial_field(L)
    local = np.minimum(centre, 180 - centre)[None, :]
    aeq = np.degrees(np.arcsin(np.minimum(np.sin(np.radians(local)) / np.sqrt(b_ratio[:, None]),
                                          1.0)))
    prof = diffusion.loss_cone_profile(aeq, a0[:, None], z0[:, None])
    energies = np.array([300.0, 600.0])
    flux = 1e4 * prof[:, None, :] * np.array([1.0, 0.3])[None, :, None]
    sig = 0.03 * flux + 1.0
    flux = np.abs(flux + rng.normal(size=flux.shape) * sig)
    if dead is not None:
        flux[dead[1], dead[0], :] = np.nan
        sig[dead[1], dead[0], :] = np.nan
    return make_ds(flux, edges, L=L, mlat=mlat, mlt=mlt, flux_err=sig, energy_kev=energies,
                   start="2026-03-05T00:00", cadence_s=20.0)


def _write(ds, path):
    ds.to_netcdf(path, engine="netcdf4",
                 encoding={"time": {"units": "seconds since 2000-01-01", "dtype": "float64"}})
    return path


def _summary(out_dir):
    [path] = sorted(out_dir.glob("*" + batch.SUMMARY_SUFFIX))
    return xr.load_dataset(path)


def _assert_same(a, b, names=DIFFUSION_VARS):
    # to rounding: the matrix products of a slab may sum in another order (BLAS blocking)
    for name in names:
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=1e-12, atol=0,
                                   err_msg=name)


@pytest.fixture(scope="module")
def gapped(tmp_path_factory):
    # channel 1 has no valid flux at samples 100-199 (a whole slab when slabs are 100 long)
    root = tmp_path_factory.mktemp("gapped")
    ds = event_dataset(dead=(1, slice(100, 200)))
    return ds, _write(ds, root / "gapped.nc")


def test_summary_holds_the_diffusion_of_the_whole_dataset(gapped, tmp_path):
    ds, src = gapped
    res = batch.summarize(src, tmp_path / "one", diffusion=True)
    assert [r.status for r in res] == ["ok"], res
    got = _summary(tmp_path / "one")
    # the reference: the diffusion module on the whole dataset, in memory, same loss cones
    ref = diffusion.from_pitch_angle_data(ds, model="dipole")
    for name in DIFFUSION_VARS:
        np.testing.assert_allclose(got[name].values, ref[name].values, rtol=1e-12,
                                   err_msg=name)
        assert got[name].attrs.get("units") == ref[name].attrs.get("units"), name
    for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma",
                "beltkit_diffusion_ratio", "beltkit_regime_boundary"):
        assert str(got.attrs[key]) == str(ref.attrs[key]), key
    # the partition is still there, and the event gives values, bounds and inf
    assert "fraction_trapped" in got and np.isfinite(got["z0"]).mean() > 0.5
    assert np.isinf(got["diffusion_coefficient_upper"]).sum() >= 60
    assert json_settings(got)["diffusion"] == {"loss_time": "half_bounce",
                                               "species": "electron", "interval_sigma": 2.0}


def json_settings(ds):
    import json

    return json.loads(ds.attrs["beltkit_settings"])


def test_streamed_slabs_give_the_one_slab_result(gapped, tmp_path, monkeypatch):
    _, src = gapped
    assert [r.status for r in batch.summarize(src, tmp_path / "one", diffusion=True)] == ["ok"]
    # the same file through the streamed path in one slab (fail_fast runs each file whole)
    assert [r.status for r in batch.summarize(src, tmp_path / "whole", diffusion=True,
                                              fail_fast=True)] == ["ok"]
    monkeypatch.setattr(batch.products, "TIME_SLAB", 100)
    monkeypatch.setattr(batch.products, "STREAM_SLAB", 100)
    assert [r.status for r in batch.summarize(src, tmp_path / "slabs", diffusion=True)] == ["ok"]
    one, whole, slabs = (_summary(tmp_path / d) for d in ("one", "whole", "slabs"))
    _assert_same(one, whole)
    _assert_same(one, slabs)
    # the slab without channel 1 is not refused: its samples say "no valid data" there,
    # while the model-only outputs (loss time) are still given
    gap = slabs["diffusion_flag"].values[100:200, 1]
    assert np.all(gap & 16) and np.all(np.isnan(slabs["z0"].values[100:200, 1]))
    assert np.all(np.isfinite(slabs["loss_time"].values[100:200, 1]))
    assert np.isfinite(slabs["z0"].values[100:200, 0]).mean() > 0.5


def test_changed_options_redo_the_file(tmp_path):
    src = _write(event_dataset(n=120, seed=8), tmp_path / "f.nc")
    out = tmp_path / "out"

    def run(**kw):
        return [r.status for r in batch.summarize(src, out, **kw)]

    assert run() == ["ok"]
    assert "z0" not in _summary(out)
    assert run(diffusion=True) == ["ok"]  # the option turned on: redone
    half = _summary(out)
    assert run(diffusion={"loss_time": "half_bounce"}) == ["skipped"]  # same as the default
    assert run(diffusion={"loss_time": "quarter_bounce"}) == ["ok"]
    quarter = _summary(out)
    # D = alpha0^2 / (z0^2 tau): a quarter-bounce loss time doubles D at the same z0
    np.testing.assert_array_equal(quarter["z0"].values, half["z0"].values)
    np.testing.assert_allclose(quarter["diffusion_coefficient"].values,
                               2.0 * half["diffusion_coefficient"].values, rtol=1e-12)
    assert quarter.attrs["beltkit_loss_time"] == "quarter_bounce"
    assert run(diffusion={"loss_time": "quarter_bounce", "interval_sigma": 1.0}) == ["ok"]
    assert run() == ["ok"]  # turned off again: redone, without the outputs
    assert "z0" not in _summary(out) and "diffusion" not in json_settings(_summary(out))
    assert run() == ["skipped"]


def test_bad_options_are_refused(tmp_path):
    src = _write(event_dataset(n=20), tmp_path / "f.nc")
    for bad, words in (({"loss": "half_bounce"}, "unknown"),
                       ({"loss_time": "full_bounce"}, "loss_time"),
                       ({"interval_sigma": 0.0}, "interval_sigma")):
        with pytest.raises(ValueError, match=words):
            batch.summarize(src, tmp_path / "out", diffusion=bad)
    assert not (tmp_path / "out").exists()  # refused before anything is run


def test_inf_bounds_pass_the_writer_and_the_cf_checker(gapped, tmp_path):
    _, src = gapped
    batch.summarize(src, tmp_path / "out", diffusion=True)
    [path] = (tmp_path / "out").glob("*" + batch.SUMMARY_SUFFIX)
    with xr.open_dataset(path) as back:
        upper = back["diffusion_coefficient_upper"].values
        # inf (unbounded) and NaN (no value) stay distinct through the NaN-filled writer
        assert np.isinf(upper).sum() >= 60 and np.isnan(upper).sum() > 0
    assert_cf_clean(path)


def test_survey_bins_d_z0_and_lifetime_with_their_median(tmp_path):
    paths = []
    for k in range(2):
        src = _write(event_dataset(n=240, seed=20 + k), tmp_path / f"d{k}.nc")
        paths.append(src)
    batch.summarize(paths, tmp_path / "out", diffusion=True)
    summaries = sorted((tmp_path / "out").glob("*" + batch.SUMMARY_SUFFIX))
    l_edges = np.array([3.0, 4.0, 5.0, 6.0])
    mlt_edges = np.array([0.0, 12.0, 24.0])
    sv = xr.load_dataset(batch.survey(summaries, tmp_path / "survey.nc", l_edges=l_edges,
                                      mlt_edges=mlt_edges))
    src = xr.concat([xr.load_dataset(p) for p in summaries], dim="time", data_vars="all",
                    coords="different", compat="equals", join="outer")
    checked = 0
    for name in ("diffusion_coefficient", "z0", "lifetime"):
        assert "median is the meaningful" in sv[f"{name}_median"].attrs["comment"]
        assert sv[f"{name}_median"].attrs["units"] == src[name].attrs["units"]
        for il in range(3):
            for im in range(2):
                sel = ((src["L"].values >= l_edges[il]) & (src["L"].values < l_edges[il + 1])
                       & (src["mlt"].values >= mlt_edges[im])
                       & (src["mlt"].values < mlt_edges[im + 1]))
                v = src[name].values[sel, 0]
                v = v[np.isfinite(v)]
                cell = dict(time=0, energy=0, L=il, mlt=im)
                assert int(sv[f"{name}_count"][cell]) == v.size
                if v.size:  # histogram median: within the relative bound the file states
                    bound = sv[f"{name}_median"].attrs["quantile_error_bound"]
                    assert sv[f"{name}_median"].attrs["quantile_error_kind"] == "relative"
                    np.testing.assert_allclose(float(sv[f"{name}_median"][cell]),
                                               np.median(v), rtol=bound * (1 + 1e-9))
                    checked += 1
    assert checked >= 12
    assert sv.attrs["beltkit_loss_time"] == "half_bounce"
    # summaries of another loss time are not mixed into one survey
    batch.summarize(paths[1], tmp_path / "quarter", diffusion={"loss_time": "quarter_bounce"})
    mixed = [summaries[0], *(tmp_path / "quarter").glob("*" + batch.SUMMARY_SUFFIX)]
    with pytest.raises(SurveyError, match="beltkit_loss_time"):
        batch.survey(mixed, tmp_path / "mixed.nc")


def test_command_line_option(tmp_path, capsys):
    src = _write(event_dataset(n=60, seed=2), tmp_path / "f.nc")
    out = tmp_path / "out"
    assert main(["summarize", str(src), "--out", str(out), "--loss-time", "quarter_bounce"]) == 1
    assert "--loss-time only applies with --diffusion" in capsys.readouterr().err
    assert not out.exists()
    assert main(["summarize", str(src), "--out", str(out), "--diffusion", "--loss-time",
                 "quarter_bounce", "--species", "e-"]) == 0
    got = _summary(out)
    assert got.attrs["beltkit_loss_time"] == "quarter_bounce"
    assert got.attrs["beltkit_species"] == "electron"
    assert "--diffusion" in got.attrs["history"]
    ref = diffusion.from_pitch_angle_data(event_dataset(n=60, seed=2), model="dipole",
                                          loss_time="quarter_bounce")
    np.testing.assert_allclose(got["diffusion_coefficient"].values,
                               ref["diffusion_coefficient"].values, rtol=1e-12)
