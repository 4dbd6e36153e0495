"""beltkit.batch.options: the settings fingerprint covers every mapping section that counts.

A rerun skips an output only when its recorded settings equal the present
ones; the mapping's rules of reading (``[valid]``, ``[quality]``, ...) change
the values read, so changing any of them must redo the file. The values read
are checked against the file's own numbers masked by hand (numpy).
"""

import json

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, write_flux_file

from beltkit import batch
from beltkit.batch.options import FIRST_MAPPING_SECTIONS, mapping_key
from beltkit.io import MAPPING_SECTIONS


def _with_quality(n_time=40, seed=8):
    ds = flux_dataset(n_time=n_time, seed=seed)
    quality = (np.arange(n_time) % 4).astype("int16")  # 0, 1, 2, 3 repeating
    return ds.assign(quality=("time", quality, {"long_name": "quality code (invented)"}))


def _run(src, out, mapping):
    [r] = batch.summarize([src], out, model="dipole", mapping=mapping)
    assert r.status in ("ok", "skipped"), r.reason
    return r


def test_changing_the_valid_or_quality_section_redoes_the_file(tmp_path):
    ds = _with_quality()
    src = write_flux_file(tmp_path / "q.nc", ds)
    out = tmp_path / "out"
    base = {"variables": {"quality": "quality"}, "quality": {"reject_values": [3]}}
    assert _run(src, out, base).status == "ok"
    assert _run(src, out, base).reason == "up to date"
    # [quality]: another rejected code changes which samples are read -> redone
    other_quality = {**base, "quality": {"reject_values": [1]}}
    r = _run(src, out, other_quality)
    assert r.status == "ok"
    with xr.open_dataset(r.output) as got:
        rejected = np.isnan(got["omni_flux"].values).all(axis=1)
    np.testing.assert_array_equal(rejected, ds["quality"].values == 1)
    assert _run(src, out, other_quality).reason == "up to date"
    # [valid]: a valid range that masks the largest flux values -> redone
    cap = float(np.quantile(ds["flux"].values, 0.9))
    with_valid = {**other_quality, "valid": {"flux": [0.0, cap]}}
    r = _run(src, out, with_valid)
    assert r.status == "ok"
    with xr.open_dataset(r.output) as got:
        assert int(got.attrs["beltkit_samples_input_out_of_valid_range"]) > 0
    assert _run(src, out, with_valid).reason == "up to date"
    # the same rules in a mapping file: editing its [quality] section redoes the file too
    toml = tmp_path / "names.toml"
    toml.write_text('[variables]\nquality = "quality"\n[quality]\nreject_values = [3]\n')
    assert _run(src, out, toml).status == "ok"
    assert _run(src, out, toml).reason == "up to date"
    toml.write_text('[variables]\nquality = "quality"\n[quality]\nreject_values = [2]\n')
    assert _run(src, out, toml).status == "ok"


@pytest.mark.parametrize("section", [s for s in MAPPING_SECTIONS
                                     if s not in FIRST_MAPPING_SECTIONS])
def test_every_later_section_is_in_the_fingerprint(section):
    assert mapping_key({section: {"some_key": 1}}) != mapping_key({section: {"some_key": 2}})
    assert mapping_key({section: {"some_key": 1}}) != mapping_key({})


def test_a_mapping_of_the_first_format_keeps_its_former_fingerprint(tmp_path):
    # outputs made with a mapping of only [variables], [units], [dimensions] stay up to
    # date: the fingerprint is the one recorded before the later sections counted
    first = {"variables": {"flux": "flux"}, "units": {}, "dimensions": {}}
    assert mapping_key(first) == first
    checked = {s: {} for s in MAPPING_SECTIONS} | {"variables": {"flux": "flux"},
                                                 "source": "a name only"}
    assert mapping_key(checked) == first
    src = write_flux_file(tmp_path / "f.nc", n_time=20, seed=9)
    r = _run(src, tmp_path / "o", {"variables": {"flux": "flux"}})
    with xr.open_dataset(r.output) as got:
        assert json.loads(got.attrs["beltkit_settings"])["mapping"] == first
