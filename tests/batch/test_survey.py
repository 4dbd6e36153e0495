"""Archive-scale surveys: flat-memory binning against brute force, splits, binnings, resume."""

import importlib
import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap

import numpy as np
import pytest
import xarray as xr
from _flux_factory import summary_like_dataset

from beltkit import batch
from beltkit import io as bio
from beltkit.constants import R_E_KM

N_FILES = 6
# the module (beltkit.batch.survey is the function)
survey_module = importlib.import_module("beltkit.batch.survey")
# the room that reads each summary (patched below to count, or stop, the files folded)
fold_module = importlib.import_module("beltkit.batch.survey_fold")


def _with_positions(ds, seed):
    """Add a GEO position (650 km altitude, random longitude/latitude) and b_local."""
    rng = np.random.default_rng(seed)
    n = ds.sizes["time"]
    lon = np.radians(rng.uniform(-180, 180, n))
    lat = np.radians(rng.uniform(-85, 85, n))
    r = R_E_KM + 650.0
    xyz = r * np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], -1)
    return ds.assign(
        position_geo=(("time", "xyz"), xyz, {"units": "km"}),
        b_local=("time", 10 ** rng.uniform(3.0, 4.8, n), {"units": "nT"}))


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    root = tmp_path_factory.mktemp("survey_corpus")
    paths = []
    for k in range(N_FILES):
        ds = summary_like_dataset(n_time=1500, seed=40 + k, cadence_s=20.0,
                                  start=f"2026-03-0{1 + k // 3}T{8 * (k % 3):02d}:00:00")
        paths.append(bio.write_dataset(_with_positions(ds, 90 + k),
                                       root / f"s{k}{batch.SUMMARY_SUFFIX}"))
    src = xr.concat([xr.load_dataset(p) for p in paths], dim="time", data_vars="all")
    return root, paths, src


def _cells(src, axes):
    """Brute-force cell index per sample (-1 outside) for the given (values, edges) pairs."""
    idx = np.zeros(src.sizes["time"], np.int64)
    ok = np.ones(src.sizes["time"], bool)
    for values, edges in axes:
        k = np.searchsorted(edges, values, side="right") - 1
        k[values == edges[-1]] = edges.size - 2
        ok &= (k >= 0) & (k < edges.size - 1)
        idx = idx * (edges.size - 1) + np.clip(k, 0, edges.size - 2)
    return np.where(ok, idx, -1)


def _check_against_brute_force(sv, src, cell, shape, names=("fraction_trapped", "omni_flux")):
    """Counts exact, means and std 1e-12, quantiles within the file's stated bound."""
    checked = 0
    for name in names:
        vals = src[name].values
        arrays = {s: sv[f"{name}_{s}"].isel(time=0).values.reshape(src.sizes["energy"], -1)
                  for s in ("count", "mean", "std", "median", "iqr")}
        for ie in range(src.sizes["energy"]):
            for c in range(int(np.prod(shape))):
                v = vals[cell == c, ie]
                v = v[np.isfinite(v)]
                got = {s: a[ie, c] for s, a in arrays.items()}
                assert got["count"] == v.size
                if v.size < 2:
                    continue
                np.testing.assert_allclose(got["mean"], v.mean(), rtol=1e-12)
                np.testing.assert_allclose(got["std"], v.std(ddof=1), rtol=1e-12)
                attrs = sv[f"{name}_median"].attrs
                bound = attrs["quantile_error_bound"]
                # reference: numpy's linear-interpolation quantile of the cell's samples
                exact = np.quantile(v, 0.5)
                tol = bound * (abs(exact) if attrs["quantile_error_kind"] == "relative" else 1)
                assert abs(got["median"] - exact) <= tol * (1 + 1e-9)
                q75, q25 = np.quantile(v, [0.75, 0.25])
                tol_iqr = (sv[f"{name}_iqr"].attrs["quantile_error_bound"]
                           * (q75 if attrs["quantile_error_kind"] == "relative" else 1))
                assert abs(got["iqr"] - (q75 - q25)) <= tol_iqr * (1 + 1e-9)
                checked += 1
    return checked


def test_l_mlt_survey_against_brute_force(corpus, tmp_path):
    _, paths, src = corpus
    l_edges, mlt_edges = np.array([1.0, 3.0, 5.0, 8.0]), np.arange(0.0, 24.01, 6.0)
    sv = xr.load_dataset(batch.survey(paths, tmp_path / "sv.nc", l_edges=l_edges,
                                      mlt_edges=mlt_edges))
    cell = _cells(src, [(src["L"].values, l_edges), (src["mlt"].values, mlt_edges)])
    assert _check_against_brute_force(sv, src, cell, (3, 4)) > 60
    # MLT in the UDUNITS-2 name "hour", the one spelling beltkit writes (common practice)
    assert sv["mlt"].attrs["units"] == "hour"
    assert sv["omni_flux_median"].attrs["quantile_error_kind"] == "relative"
    assert json.loads(sv.attrs["quantile_error_bound"])["fraction_trapped"] == pytest.approx(
        1 / 512)


def test_geographic_field_and_named_binnings(corpus, tmp_path):
    from beltkit import plot

    _, paths, src = corpus
    xyz = src["position_geo"].values
    lon = np.degrees(np.arctan2(xyz[:, 1], xyz[:, 0]))
    lat = np.degrees(np.arcsin(xyz[:, 2] / np.linalg.norm(xyz, axis=1)))
    lon_e, lat_e = np.arange(-180.0, 180.1, 60.0), np.arange(-90.0, 90.1, 45.0)
    sv = xr.load_dataset(batch.survey(paths, tmp_path / "geo.nc", binning="lon-lat",
                                      edges={"lon": lon_e, "lat": lat_e}))
    assert sv["omni_flux_median"].dims == ("time", "energy", "lon", "lat")
    assert sv["lon"].attrs["standard_name"] == "longitude"
    cell = _cells(src, [(lon, lon_e), (lat, lat_e)])
    assert _check_against_brute_force(sv, src, cell, (6, 4), names=("omni_flux",)) >= 60

    b_e = 10 ** np.arange(3.0, 5.01, 0.5)
    l_e = np.array([1.0, 4.0, 8.0])
    sv = xr.load_dataset(batch.survey(paths, tmp_path / "lb.nc", binning="L-B",
                                      edges={"L": l_e, "b_local": b_e}))
    cell = _cells(src, [(src["L"].values, l_e), (src["b_local"].values, b_e)])
    np.testing.assert_array_equal(
        sv["fraction_trapped_count"].isel(time=0, energy=1).values.ravel(),
        np.bincount(cell[(cell >= 0) & np.isfinite(src["fraction_trapped"].values[:, 1])],
                    minlength=8))

    mlat_e, mlt_e = np.array([-20.0, 0.0, 20.0]), np.array([0.0, 12.0, 24.0])
    sv = xr.load_dataset(batch.survey(paths, tmp_path / "pair.nc", binning=("mlat", "mlt"),
                                      edges={"mlat": mlat_e, "mlt": mlt_e}))
    assert sv["omni_flux_count"].dims == ("time", "energy", "mlat", "mlt")
    assert sv["mlat"].attrs["units"] == "degree"
    cell = _cells(src, [(src["mlat"].values, mlat_e), (src["mlt"].values, mlt_e)])
    assert int(sv["omni_flux_count"].isel(time=0, energy=0, mlat=1, mlt=0)) == np.sum(cell == 2)

    fig = plot.survey_cells(sv, "omni_flux", energy=500.0)  # first axis along x
    assert (fig.axes[0].get_xlabel(), fig.axes[0].get_ylabel()) == (
        "mlat", "magnetic local time (h)")
    sv = xr.load_dataset(batch.survey(paths, tmp_path / "lt.nc", binning="L-time"))
    assert sv["omni_flux_median"].dims == ("time", "energy", "L")
    fig = plot.survey_cells(sv, "omni_flux")
    assert fig.axes[0].get_xlabel() == "time (UTC)" and fig.axes[0].get_ylabel() == "L-shell"
    # readable whatever the range: a colour scale spanning a factor of three keeps >= 3
    # labelled ticks (matplotlib alone would label none inside one decade)
    narrow = sv.assign(omni_flux_median=sv["omni_flux_median"] * 0 + 1.0
                       + 2.0 * (sv["L"] > 4))
    fig = plot.survey_cells(narrow, "omni_flux")
    bar = fig.axes[2]
    ticks = [t for t in bar.get_yticks() if 1.0 <= t <= 3.0]
    assert len(ticks) >= 3
    assert sv.sizes["time"] == 3  # daily windows: 2026-03-01 to 03-03 (the last file ends then)
    day = src["time"].values.astype("datetime64[D]")
    inside = (src["L"].values >= 1) & (src["L"].values <= 8)
    for k, d in enumerate(np.unique(day)):
        assert int(sv["omni_flux_count"].isel(time=k, energy=2).sum()) == np.sum(
            (day == d) & inside & np.isfinite(src["omni_flux"].values[:, 2]))


def test_missing_binning_variable_is_refused_with_the_way_to_get_it(tmp_path):
    bare = bio.write_dataset(summary_like_dataset(), tmp_path / f"bare{batch.SUMMARY_SUFFIX}")
    with pytest.raises(batch.SurveyError) as err:
        batch.survey([bare], tmp_path / "geo.nc", binning="lon-lat")
    text = str(err.value)
    assert "has no position_geo for the lon/lat binning" in text
    assert "geographic position" in text
    with pytest.raises(batch.SurveyError, match="has no b_local.*--field igrf"):
        batch.survey([bare], tmp_path / "lb.nc", binning="L-B")
    with pytest.raises(ValueError, match="give the bin edges of 'mlat'"):
        batch.survey([bare], tmp_path / "x.nc", binning=("mlat", "L"))
    assert not any(tmp_path.glob("*.nc.*"))


def test_summaries_of_other_settings_are_refused_naming_the_values(tmp_path):
    paths = []
    for k, alt in enumerate((100.0, 200.0)):
        ds = summary_like_dataset(seed=k)
        ds.attrs.update(field_model="dipole", footpoint_altitude_km=alt)
        paths.append(bio.write_dataset(ds, tmp_path / f"s{k}{batch.SUMMARY_SUFFIX}"))
    with pytest.raises(batch.SurveyError) as err:
        batch.survey(paths, tmp_path / "mixed.nc")
    # the values as written in the files, not their numpy repr
    assert "footpoint_altitude_km 200.0 differs from 100.0" in str(err.value)
    assert "np.float64" not in str(err.value)


def _assert_same_survey(a, b, exact_means=False):
    assert set(a.data_vars) == set(b.data_vars)
    for v in a.data_vars:
        x, y = a[v].values, b[v].values
        if v.endswith(("_mean", "_std")) and not exact_means:
            np.testing.assert_allclose(x, y, rtol=1e-12)
        else:  # counts and histogram quantiles: bit for bit
            np.testing.assert_array_equal(x, y)


def test_workers_and_cluster_merge_to_the_single_pass(corpus, tmp_path):
    from distributed import Client

    _, paths, _ = corpus
    kw = dict(l_edges=np.array([1.0, 4.0, 8.0]), mlt_edges=np.arange(0.0, 24.1, 8.0),
              time_window="12h")
    one = xr.load_dataset(batch.survey(paths, tmp_path / "one.nc", **kw))
    two = xr.load_dataset(batch.survey(paths, tmp_path / "two.nc", workers=2, **kw))
    _assert_same_survey(one, two)
    with Client(processes=False, n_workers=1, threads_per_worker=2,
                dashboard_address=None) as client:
        dist = xr.load_dataset(batch.survey(paths, tmp_path / "dist.nc", scheduler=client, **kw))
    _assert_same_survey(one, dist)


_KILLER = textwrap.dedent("""
    import importlib, os, signal, sys
    from beltkit.batch import survey
    m = importlib.import_module("beltkit.batch.survey_fold")
    fold = m.fold_summary
    seen = []
    def dying(path, spec, open_stats):
        if len(seen) == 3:  # after three summaries (and their checkpoint): SIGKILL
            os.kill(os.getpid(), signal.SIGKILL)
        seen.append(path)
        fold(path, spec, open_stats)
    m.fold_summary = dying
    m_kw = dict(time_window="12h", l_edges=[1, 4, 8], mlt_edges=[0, 12, 24])
    survey(sys.argv[2:], sys.argv[1], checkpoint_s=0.0, **m_kw)
""")


KW = dict(time_window="12h", l_edges=[1, 4, 8], mlt_edges=[0, 12, 24])  # as in _KILLER


def test_sigkill_then_resume_ends_equal_to_an_uninterrupted_run(corpus, tmp_path, monkeypatch):
    paths = [shutil.copy(p, tmp_path / p.name) for p in corpus[1]]  # one is changed below
    paths = [type(corpus[1][0])(p) for p in paths]
    ref = xr.load_dataset(batch.survey(paths, tmp_path / "ref.nc", **KW))
    out = tmp_path / "killed.nc"
    proc = subprocess.run([sys.executable, "-c", _KILLER, str(out), *map(str, paths)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    partial = out.with_name(out.name + survey_module.PARTIAL_SUFFIX)
    assert partial.exists() and not out.exists()

    folded = []
    fold = fold_module.fold_summary
    monkeypatch.setattr(fold_module, "fold_summary",
                        lambda p, s, o: (folded.append(os.path.basename(p)), fold(p, s, o)))
    resumed = xr.load_dataset(batch.survey(paths, out, **KW))
    assert folded == [p.name for p in paths[3:]]  # the three folded before the kill reused
    _assert_same_survey(ref, resumed)
    assert resumed.attrs["source_sha256"] == ref.attrs["source_sha256"]
    assert not partial.exists()  # removed once the survey is written

    # nudge: a partial aggregate whose inputs changed is not reused (interrupted in-process)
    def interrupted(p, s, o):
        if len(folded) == 3:
            raise KeyboardInterrupt
        folded.append(p)
        fold(p, s, o)

    monkeypatch.setattr(fold_module, "fold_summary", interrupted)
    folded.clear()
    with pytest.raises(KeyboardInterrupt):
        batch.survey(paths, out, **KW, checkpoint_s=0.0)
    assert partial.exists()
    changed = summary_like_dataset(n_time=1500, seed=99, cadence_s=20.0,
                                   start="2026-03-01T00:00:00")
    bio.write_dataset(_with_positions(changed, 1), paths[0])
    monkeypatch.setattr(fold_module, "fold_summary",
                        lambda p, s, o: (folded.append(os.path.basename(p)), fold(p, s, o)))
    folded.clear()
    batch.survey(paths, out, **KW)
    assert len(folded) == N_FILES


def test_demo_low_orbit_geographic_map_shows_the_south_atlantic(tmp_path):
    # common practice: at low altitude, electrons are stably trapped (outside the drift loss
    # cone) only where the field is weakest along their drift, over the South Atlantic; the
    # demo's Dunlin telescopes, partitioned in the IGRF, must show that on a longitude-
    # latitude map (South Atlantic box lon -90..40, lat -50..0)
    from beltkit import demo, plot

    cover = demo.generate_coverage(tmp_path, orbits=15, cadence_s=120.0)
    [done] = batch.summarize([cover], tmp_path / "sum", model="auto")
    assert done.status == "ok", done.reason
    with xr.open_dataset(done.output) as s:
        assert s["position_geo"].dims == ("time", "xyz")  # summaries keep the position
    sv = xr.load_dataset(batch.survey([done.output], tmp_path / "geo.nc", binning="lon-lat",
                                      edges={"lon": np.arange(-180.0, 180.1, 30.0),
                                             "lat": np.arange(-90.0, 90.1, 15.0)}))
    med = sv["flux_trapped_median"].isel(time=0, energy=0)
    med = med.where(sv["flux_trapped_count"].isel(time=0, energy=0) >= 3)
    top = med.where(med == med.max(), drop=True)
    assert -90 <= float(top["lon"][0]) <= 40 and -50 <= float(top["lat"][0]) <= 0
    box = med.sel(lon=slice(-90, 40), lat=slice(-50, 0))
    rest = med.where(~((med.lon >= -90) & (med.lon <= 40) & (med.lat >= -50) & (med.lat <= 0)))
    rest = rest.sel(lat=slice(-50, 50))  # the same latitudes elsewhere
    assert float(box.max()) > 10 * float(rest.max())  # nudge: not a marginal maximum
    fig = plot.survey_cells(sv, "flux_trapped", partial=True)
    assert fig.axes[0].get_xlabel().startswith("geographic longitude")
    assert fig.axes[1].get_title() == "samples per cell"


def test_command_line_binnings_and_refusal(corpus, tmp_path, capsys):
    from beltkit.cli import main

    _, paths, _ = corpus
    out = tmp_path / "geo.nc"
    assert main(["survey", *map(str, paths[:2]), "--out", str(out), "--binning", "lon-lat",
                 "--bins", "lon", "-180", "180", "90", "--bins", "lat", "-90", "90", "45",
                 "--quantiles", "0.1", "0.9", "--restart"]) == 0
    sv = xr.load_dataset(out)
    assert sv.sizes["lon"] == 4 and sv.sizes["lat"] == 4
    assert "omni_flux_q10" in sv and "omni_flux_q90" in sv
    assert sv.attrs["binning"] == "lon-lat"
    bare = bio.write_dataset(summary_like_dataset(), tmp_path / f"bare{batch.SUMMARY_SUFFIX}")
    assert main(["survey", str(bare), "--out", str(tmp_path / "lb.nc"), "--binning", "L-B"]) == 1
    text = capsys.readouterr().out
    assert "FAILED" in text and "has no b_local" in text and "--field igrf" in text
