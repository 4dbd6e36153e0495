"""Public names in beltkit.batch: ``model=`` (``field=`` deprecated), the footpoint attribute.

Issue 14: one name per concept across layers. The field model is ``model=``
in batch as in pad (the former ``field=`` warns for one release and gives the
same result); the footpoint altitude is ``altitude_km`` in Python and the
attribute ``footpoint_altitude_km`` in every output (partition, diffusion,
summaries), and summaries written before the change still survey together
with new ones.
"""

import json

import pytest
import xarray as xr
from _flux_factory import flux_dataset, write_flux_file

from beltkit import batch
from beltkit import io as bio


def test_summarize_dataset_field_keyword_warns_and_gives_the_model_result():
    ds = flux_dataset(n_time=40, seed=3)
    want = batch.summarize_dataset(ds, model="dipole", altitude_km=300.0)
    with pytest.warns(FutureWarning, match=r"field= is deprecated.*use model="):
        got = batch.summarize_dataset(ds, field="dipole", altitude_km=300.0)
    xr.testing.assert_identical(got, want)
    # Python refuses a keyword given twice with a TypeError (language reference, "Calls");
    # the old and the new spelling together are refused the same way
    with pytest.raises(TypeError, match="both model= and its former spelling field="):
        batch.summarize_dataset(ds, model="dipole", field="dipole")


def test_summarize_field_keyword_warns_and_records_the_same_settings(tmp_path):
    src = write_flux_file(tmp_path / "a.nc", n_time=30, seed=4)
    with pytest.warns(FutureWarning, match="use model="):
        [old] = batch.summarize([src], tmp_path / "out", field="dipole", altitude_km=250.0)
    assert old.status == "ok", old.reason
    # the same settings: a run with the new keyword finds the output up to date
    [new] = batch.summarize([src], tmp_path / "out", model="dipole", altitude_km=250.0)
    assert (new.status, new.reason) == ("skipped", "up to date")
    with xr.open_dataset(old.output) as ds:
        assert ds.attrs["field_model_requested"] == "dipole"
        assert json.loads(ds.attrs["beltkit_settings"])["field"] == "dipole"
    with pytest.raises(TypeError, match="give model= only"):
        batch.summarize([src], tmp_path / "out", model="dipole", field="dipole")


def test_psd_files_and_bin_sectored_take_model_and_warn_on_field(tmp_path):
    # the old keyword's value reaches the option check: an unknown name is refused as before
    with pytest.warns(FutureWarning, match="psd_files"), \
            pytest.raises(ValueError, match="field model must be one of"):
        batch.psd_files([], tmp_path / "p", 100.0, 0.1, field="no_such_model")
    with pytest.raises(TypeError, match="psd_files"):
        batch.psd_files([], tmp_path / "p", 100.0, 0.1, model="dipole", field="dipole")
    with pytest.warns(FutureWarning, match="bin_sectored"), \
            pytest.raises(ValueError, match="model must be None"):
        batch.bin_sectored([], tmp_path / "s", field="no_such_model")
    with pytest.raises(TypeError, match="bin_sectored"):
        batch.bin_sectored([], tmp_path / "s", model=None, field=None)
    assert not (tmp_path / "p").exists() and not (tmp_path / "s").exists()


def test_one_footpoint_attribute_in_partition_and_summary(tmp_path):
    from beltkit.pad import partition

    ds = flux_dataset(n_time=30, seed=5)
    part = partition(ds, model="dipole", altitude_km=300.0)
    assert part.attrs["footpoint_altitude_km"] == 300.0
    assert "beltkit_footpoint_altitude_km" not in part.attrs
    src = write_flux_file(tmp_path / "b.nc", ds)
    [r] = batch.summarize([src], tmp_path / "out", altitude_km=300.0)
    with xr.open_dataset(r.output) as out:
        assert out.attrs["footpoint_altitude_km"] == 300.0
        assert not [k for k in out.attrs if k.startswith("beltkit_footpoint")]


def test_summaries_of_the_former_release_survey_with_new_ones(tmp_path):
    # summaries written before the change carried the altitude twice (the partition's
    # beltkit_footpoint_altitude_km beside footpoint_altitude_km); the survey reads both
    # kinds of file together and records the one altitude
    paths = []
    for k in range(2):
        src = write_flux_file(tmp_path / f"d{k}.nc",
                              flux_dataset(n_time=40, seed=6 + k,
                                           start=f"2026-03-0{k + 1}T00:00:00"))
        [r] = batch.summarize([src], tmp_path / "out")
        assert r.status == "ok", r.reason
        paths.append(r.output)
    with xr.open_dataset(paths[0]) as ds:
        old = ds.load()
    old.attrs["beltkit_footpoint_altitude_km"] = old.attrs["footpoint_altitude_km"]
    old_path = bio.write_dataset(old, tmp_path / f"old{batch.SUMMARY_SUFFIX}")
    sv = batch.survey([old_path, paths[1]], tmp_path / "sv.nc")
    with xr.open_dataset(sv) as out:
        assert out.attrs["footpoint_altitude_km"] == 100.0
        assert int(out["fraction_trapped_count"].sum()) > 0
    # a summary of another altitude is still refused beside them (the check reads the name)
    [other] = batch.summarize([tmp_path / "d1.nc"], tmp_path / "out200", altitude_km=200.0)
    with pytest.raises(batch.SurveyError, match=r"footpoint_altitude_km \S*200\.0\S* differs"):
        batch.survey([old_path, other.output], tmp_path / "sv2.nc")

