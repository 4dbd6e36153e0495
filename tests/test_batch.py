"""beltkit.batch: survey binning (against plain numpy per cell) and summarize's machinery."""

import json

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, summary_like_dataset, write_flux_file

from beltkit import batch
from beltkit import io as bio


def _write_summaries(tmp_path, n=2, **kwargs):
    paths = []
    for k in range(n):
        ds = summary_like_dataset(seed=10 + k, start=f"2026-03-01T0{2 * k}:00:00", **kwargs)
        paths.append(bio.write_dataset(ds, tmp_path / f"s{k}{batch.SUMMARY_SUFFIX}"))
    return paths


def test_survey_statistics_equal_numpy_per_cell(tmp_path):
    paths = _write_summaries(tmp_path, n=2)
    l_edges = np.array([1.0, 3.0, 5.0, 8.0])
    mlt_edges = np.arange(0.0, 24.01, 6.0)
    out = batch.survey(paths, tmp_path / "survey.nc", l_edges=l_edges, mlt_edges=mlt_edges,
                       time_window="3h")
    sv = xr.open_dataset(out)
    src = xr.concat([xr.open_dataset(p) for p in paths], dim="time", data_vars="all",
                    coords="different", compat="equals", join="outer")
    # samples 00:00-03:19 and 02:00-05:19 UTC; 3 h windows aligned on 1970-01-01
    assert sv.sizes["time"] == 2
    np.testing.assert_array_equal(sv["time_bnds"].values[1], np.array(
        ["2026-03-01T03:00", "2026-03-01T06:00"], dtype="datetime64[ns]"))
    np.testing.assert_array_equal(sv["L_bnds"].values[:, 0], l_edges[:-1])
    np.testing.assert_array_equal(sv["mlt_bnds"].values[:, 1], mlt_edges[1:])
    t = src["time"].values
    win = (t.astype("int64") // (3 * 3600 * 10**9))
    win = win - win.min()
    checked = 0
    for name in ("fraction_trapped", "omni_flux"):
        vals = src[name].values
        for it in range(2):
            for ie in range(src.sizes["energy"]):
                for il in range(3):
                    for im in range(4):
                        sel = ((win == it) & (src["L"].values >= l_edges[il])
                               & (src["L"].values < l_edges[il + 1])
                               & (src["mlt"].values >= mlt_edges[im])
                               & (src["mlt"].values < mlt_edges[im + 1]))
                        v = vals[sel, ie]
                        v = v[np.isfinite(v)]
                        cell = dict(time=it, energy=ie, L=il, mlt=im)
                        assert int(sv[f"{name}_count"][cell]) == v.size
                        if v.size == 0:
                            assert np.isnan(float(sv[f"{name}_mean"][cell]))
                            continue
                        np.testing.assert_allclose(float(sv[f"{name}_mean"][cell]), v.mean(),
                                                   rtol=1e-12)
                        np.testing.assert_allclose(float(sv[f"{name}_median"][cell]),
                                                   np.median(v), rtol=1e-12)
                        q75, q25 = np.percentile(v, [75, 25])
                        np.testing.assert_allclose(float(sv[f"{name}_iqr"][cell]), q75 - q25,
                                                   rtol=1e-9, atol=1e-15)
                        if v.size > 1:
                            np.testing.assert_allclose(float(sv[f"{name}_std"][cell]),
                                                       v.std(ddof=1), rtol=1e-9)
                        checked += 1
    assert checked > 20
    # total count = finite samples inside the grid
    inside = (src["L"] >= 1) & (src["L"] < 8)
    assert int(sv["fraction_trapped_count"].sum()) == int(
        np.isfinite(src["fraction_trapped"].where(inside)).sum())
    assert sv["fraction_trapped_mean"].attrs["cell_methods"] == "time: L: mlt: mean"
    assert sv["fraction_trapped_mean"].dims == ("time", "energy", "L", "mlt")
    assert sv.attrs["Conventions"] == "CF-1.8"
    assert set(json.loads(sv.attrs["source_sha256"])) == {p.name for p in paths}
    sv.close()
    src.close()


def test_survey_without_window_is_one_window_over_all_samples(tmp_path):
    paths = _write_summaries(tmp_path, n=2)
    sv = xr.open_dataset(batch.survey(paths, tmp_path / "sv.nc"))
    assert sv.sizes["time"] == 1
    lo, hi = sv["time_bnds"].values[0]
    assert lo == np.datetime64("2026-03-01T00:00:00") and hi >= np.datetime64(
        "2026-03-01T05:19:00")
    # default grid: L 1-8 by 0.5, MLT hourly
    assert sv.sizes["L"] == 14 and sv.sizes["mlt"] == 24
    sv.close()


def test_survey_refuses_mismatched_summaries_and_writes_nothing(tmp_path):
    good = _write_summaries(tmp_path, n=1)[0]
    other = bio.write_dataset(summary_like_dataset(n_energy=4),
                              tmp_path / "four.summary.nc")
    igrf = bio.write_dataset(summary_like_dataset(field_model="igrf"),
                             tmp_path / "igrf.summary.nc")
    junk = tmp_path / "junk.summary.nc"
    junk.write_bytes(b"garbage")
    with pytest.raises(batch.SurveyError) as err:
        batch.survey([good, other, igrf, junk], tmp_path / "sv.nc")
    text = str(err.value)
    assert "four.summary.nc: its energies differ" in text
    assert "igrf.summary.nc: field_model 'igrf' differs" in text
    assert "junk.summary.nc" in text
    assert len(err.value.problems) == 3
    assert not (tmp_path / "sv.nc").exists()


def test_expand_inputs_folders_globs_and_duplicates(tmp_path):
    for name in ("b.nc", "a.cdf", ".hidden.nc", "a.summary.nc", "notes.txt"):
        (tmp_path / name).write_bytes(b"")
    got = batch.expand_inputs([tmp_path, str(tmp_path / "*.nc"), tmp_path / "b.nc"])
    assert [p.name for p in got] == ["a.cdf", "b.nc", "a.summary.nc"]


def test_one_line_joins_convention_problems():
    from beltkit.errors import ConventionError

    exc = ConventionError(["flux: missing 'units'", "L: missing"], source="x.nc")
    assert batch.one_line(exc) == "flux: missing 'units'; L: missing"


def test_duplicate_output_names_fail_without_running(tmp_path):
    (tmp_path / "d1").mkdir()
    (tmp_path / "d2").mkdir()
    a = write_flux_file(tmp_path / "d1" / "day.nc", n_time=10)
    b = write_flux_file(tmp_path / "d2" / "day.nc", flux_dataset(n_time=10))
    results = batch.summarize([a, b], tmp_path / "out", fail_fast=True)
    assert [r.status for r in results][1] == "failed"
    assert "also the output of" in results[1].reason
