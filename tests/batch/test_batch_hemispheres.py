"""Losses per hemisphere in summaries and surveys (``hemispheres=True``, ``--hemispheres``).

The values' physics is tested in tests/pad/test_hemispheres.py; here the
summaries must carry exactly :func:`beltkit.pad.partition`'s per-hemisphere
outputs when asked (on both of summarize's paths: one slab, and a file
streamed slab by slab), none when not, and keep the request among the
settings that decide whether an output is up to date. The independent check
is the centred dipole's symmetry (common practice, see docs/conventions.md:
the two footpoints' loss cones are equal, so the fluxes lost north and south
add up to the precipitating flux).
"""

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, write_flux_file

from beltkit import batch, pad
from beltkit.cli import main
from beltkit.pad.outputs import HEMI_ERR_NAMES, HEMI_NAMES

HEMI_VARS = tuple(HEMI_NAMES) + tuple(HEMI_ERR_NAMES)


@pytest.fixture
def flux_file(tmp_path):
    ds = flux_dataset(n_time=300, n_energy=3)
    return write_flux_file(tmp_path / "craft_a_day1.nc", ds), ds


def _load(path):
    return xr.load_dataset(path)


def test_summaries_carry_the_losses_per_hemisphere_only_when_asked(flux_file, tmp_path):
    path, ds = flux_file
    [plain] = batch.summarize([path], tmp_path / "plain", model="dipole")
    assert plain.status == "ok"
    assert not set(HEMI_VARS) & set(_load(plain.output).data_vars)
    [hemi] = batch.summarize([path], tmp_path / "hemi", model="dipole", hemispheres=True)
    assert hemi.status == "ok"
    out = _load(hemi.output)
    ref = pad.partition(ds, model="dipole", hemispheres=True)
    for name in HEMI_VARS:
        assert out[name].dims == ("time", "energy")
        assert out[name].attrs["units"] == ref[name].attrs["units"]
        np.testing.assert_allclose(out[name].values, ref[name].values, rtol=1e-6,
                                   equal_nan=True, err_msg=name)
    # centred dipole: equal cones at both footpoints, so north + south = precipitating
    total = out["flux_lost_north"].values + out["flux_lost_south"].values
    np.testing.assert_allclose(total, out["flux_precipitating"].values, rtol=1e-5)
    assert np.nanmax(out["flux_lost_north"].values) > 0
    # the other outputs are the plain summary's
    base = _load(plain.output)
    for name in ("flux_precipitating", "fraction_trapped", "partition_flag"):
        np.testing.assert_array_equal(out[name].values, base[name].values)


def test_streamed_file_gives_the_one_slab_result(flux_file, tmp_path, monkeypatch):
    path, _ = flux_file
    [one] = batch.summarize([path], tmp_path / "one", model="dipole", hemispheres=True)
    monkeypatch.setattr(batch.products, "TIME_SLAB", 100)
    monkeypatch.setattr(batch.products, "STREAM_SLAB", 100)
    [streamed] = batch.summarize([path], tmp_path / "streamed", model="dipole",
                                 hemispheres=True)
    a, b = _load(one.output), _load(streamed.output)
    for name in HEMI_VARS:
        np.testing.assert_array_equal(a[name].values, b[name].values, err_msg=name)


def test_the_request_decides_whether_an_output_is_up_to_date(flux_file, tmp_path):
    path, _ = flux_file
    out = tmp_path / "out"
    assert batch.summarize([path], out, model="dipole")[0].status == "ok"
    assert batch.summarize([path], out, model="dipole")[0].status == "skipped"
    # asking for the hemispheres redoes the file once
    assert batch.summarize([path], out, model="dipole", hemispheres=True)[0].status == "ok"
    assert "flux_lost_south" in _load(out / "craft_a_day1.summary.nc").data_vars
    assert batch.summarize([path], out, model="dipole",
                           hemispheres=True)[0].status == "skipped"
    # and dropping the request redoes it again, without them
    assert batch.summarize([path], out, model="dipole")[0].status == "ok"
    assert "flux_lost_south" not in _load(out / "craft_a_day1.summary.nc").data_vars


def test_command_line_option_and_survey(flux_file, tmp_path):
    path, _ = flux_file
    assert main(["summarize", str(path), "--out", str(tmp_path / "s"), "--field", "dipole",
                 "--hemispheres"]) == 0
    summary = tmp_path / "s" / "craft_a_day1.summary.nc"
    s = _load(summary)
    assert set(HEMI_VARS) <= set(s.data_vars)
    assert s.attrs["history"].endswith("--hemispheres")
    assert '"hemispheres":true' in s.attrs["beltkit_settings"]
    l_edges = np.arange(3.0, 6.5, 0.5)
    sv = xr.load_dataset(batch.survey([summary], tmp_path / "survey.nc", l_edges=l_edges))
    # each cell's mean is numpy's mean of the summary's values in that cell
    got = sv["fraction_lost_north_mean"].isel(time=0).values  # (energy, L, mlt)
    values = s["fraction_lost_north"].values
    il = np.digitize(s["L"].values, l_edges) - 1
    im = np.floor(s["mlt"].values).astype(int)
    for k in range(values.shape[1]):
        for a, b in {(a, b) for a, b in zip(il, im) if 0 <= a < len(l_edges) - 1}:
            cell = values[(il == a) & (im == b), k]
            cell = cell[np.isfinite(cell)]
            if cell.size:
                assert got[k, a, b] == pytest.approx(cell.mean(), rel=1e-5)
    # without the option the survey has no such variable
    assert main(["summarize", str(path), "--out", str(tmp_path / "p"), "--field", "dipole"]) == 0
    plain = xr.load_dataset(batch.survey([tmp_path / "p" / "craft_a_day1.summary.nc"],
                                         tmp_path / "plain.nc", l_edges=l_edges))
    assert "fraction_precipitating_mean" in plain.data_vars
    assert not any(v.startswith(("fraction_lost", "flux_lost")) for v in plain.data_vars)
