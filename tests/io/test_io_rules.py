"""The mapping's new sections, the read-time kernels and the fast path of beltkit.io."""

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, write_flux_file

from beltkit import io as bio
from beltkit.errors import MappingError
from beltkit.io.axes import interpolate_loglog
from beltkit.io.metadata import quality_rejected
from beltkit.io.telescope import rate_to_flux


@pytest.mark.parametrize("raw, words", [
    ({"time": {"epoch": "yesterday", "unit": "s"}}, ["[time] epoch", "ISO"]),
    ({"time": {"unit": "fortnight"}}, ["[time] unit", "ns, us, ms, s, min, h, d"]),
    ({"pitch_angle": {"outer_edges": [10, 200]}}, ["[pitch_angle] outer_edges", "0-180"]),
    ({"energy": {"common_kev": [300.0, 100.0]}}, ["[energy] common_kev", "increasing"]),
    ({"quality": {"reject_bits": [70]}}, ["[quality] reject_bits", "0-62"]),
    ({"position": {"form": "cartesian"}}, ["[position] frame", "GSM"]),
    ({"position": {"form": "polar"}}, ["[position] form", "geodetic"]),
    ({"telescope": {"efficiency": 1.5}}, ["[telescope] efficiency", "(0, 1]"]),
    ({"valid": {"flux": [5, 1]}}, ["[valid] flux", "[min, max]"]),
    ({"valid": {"L": [1, 10]}}, ["[valid] L", "known"]),
    ({"weather": {"x": 1}}, ["unknown section [weather]"]),
])
def test_mapping_sections_are_checked_naming_the_key(raw, words):
    with pytest.raises(MappingError) as info:
        bio.load_mapping({"variables": {"flux": "j"}, **raw}, source="k2.toml")
    msg = str(info.value)
    assert "\n" not in msg and "k2.toml" in msg
    for w in words:
        assert w in msg, (w, msg)


def test_old_three_section_mapping_still_loads_and_new_sections_default_empty():
    m = bio.load_mapping({"variables": {"flux": "j"}, "units": {"flux": "cm-2 s-1 sr-1 keV-1"},
                          "dimensions": {"time": "record"}})
    assert m["variables"] == {"flux": "j"} and m["dimensions"] == {"time": "record"}
    assert m["time"] == {} and m["quality"] == {} and m["valid"] == {}
    assert bio.load_mapping(m) is m  # a checked mapping passes through


def test_conventions_file_takes_the_fast_path(tmp_path):
    path = write_flux_file(tmp_path / "a.nc", n_time=50)
    ds = bio.open_indexed(path)
    ref = flux_dataset(n_time=50)
    assert "read_flag" not in ds and not any(k.startswith("read_flag") for k in ds.attrs)
    assert ds.attrs["pitch_angle_bnds_source"] == "bounds"
    for name in ("flux", "flux_err", "counts", "L"):
        np.testing.assert_array_equal(ds[name].values, ref[name].values, err_msg=name)
        assert "_FillValue" not in ds[name].attrs
    np.testing.assert_array_equal(ds["time"].values, ref["time"].values)


def test_loglog_interpolation_is_exact_on_a_power_law():
    # a power law j = E^-2.5 is a straight line in log-log: interpolation is exact
    e = np.array([[50.0, 100.0, 400.0, 1600.0], [1600.0, 400.0, 100.0, 60.0]])
    j = (e ** -2.5)[:, :, None] * np.array([1.0, 3.0])[None, None, :]
    target = np.array([70.0, 200.0, 1000.0, 1600.0, 3000.0])
    out, lo, hi, w = interpolate_loglog(e, j, target)
    expect = (target ** -2.5)[None, :, None] * np.array([1.0, 3.0])
    expect = np.broadcast_to(expect, out.shape).copy()
    expect[:, 4] = np.nan  # above every channel: never extrapolated
    np.testing.assert_allclose(out, expect, rtol=1e-12)
    # nudge: linear interpolation in j would miss by far more than the tolerance
    lin = np.interp(200.0, [100.0, 400.0], [100.0 ** -2.5, 400.0 ** -2.5])
    assert abs(lin / 200.0 ** -2.5 - 1) > 0.5
    assert lo[1, 0] == 3 and hi[1, 0] == 2  # neighbours in the record's own channel order


def test_rate_to_flux_zero_counts_and_saturation():
    j, err, sat = rate_to_flux(np.array([0.0, 100.0, 3e5]), 0.01, 10.0,
                               accumulation_time_s=1.0, dead_time_s=1e-5, efficiency=0.5)
    # 0 counts: flux 0, error of one count (conventions.md: N = 0 counted as 1)
    assert j[0] == 0 and err[0] == pytest.approx(1.0 / (0.01 * 0.5 * 10.0))
    # R tau = 1e-3: true rate 100 / 0.999 (non-paralysable model, Knoll 2010)
    assert j[1] == pytest.approx(100.0 / 0.999 / 0.05, rel=1e-12)
    assert sat.tolist() == [False, False, True] and np.isnan(j[2])


def test_quality_rule_by_values_bits_and_cf_meanings():
    q = np.array([0, 1, 2, 3, 4, 6])
    attrs = {"flag_masks": [1, 2, 4], "flag_meanings": "sat cal gap"}
    assert quality_rejected(q, attrs, {"reject_values": [2, 3]}).tolist() == \
        [False, False, True, True, False, False]
    assert quality_rejected(q, attrs, {"accept_values": [0]}).tolist() == \
        [False, True, True, True, True, True]
    assert quality_rejected(q, attrs, {"reject_bits": [2]}).tolist() == \
        [False, False, False, False, True, True]
    assert quality_rejected(q, attrs, {"reject_meanings": ["cal"]}).tolist() == \
        [False, False, True, True, False, True]
    with pytest.raises(MappingError, match="reject_meanings.*'noise'.*sat cal gap"):
        quality_rejected(q, attrs, {"reject_meanings": ["noise"]}, where="k2.nc")


def test_dask_chunks_read_the_masked_flux(tmp_path):
    ds = flux_dataset(n_time=30)
    ds["flux"].attrs["valid_max"] = np.float32(5e4)
    ds["flux"].encoding["_FillValue"] = np.float32(-1.0)
    path = write_flux_file(tmp_path / "v.nc", ds)
    lazy = bio.open_flux(path, chunks={"time": 7})
    assert lazy["flux"].chunks[0] == (7, 7, 7, 7, 2)
    got = lazy["flux"].values
    ref = ds["flux"].values
    np.testing.assert_array_equal(got, np.where(ref > 5e4, np.nan, ref))
    assert lazy.attrs["read_flag_count_out_of_valid_range"] == int((ref > 5e4).sum()) > 0


def test_other_cf_time_variables_decode_like_xarray(tmp_path):
    ds = flux_dataset(n_time=10)
    ds["sweep_start"] = ("time", ds["time"].values - np.timedelta64(500, "ms"))
    path = write_flux_file(tmp_path / "t.nc", ds)
    got = bio.open_indexed(path)["sweep_start"].values
    with xr.open_dataset(path) as ref:  # xarray's own CF decoding
        np.testing.assert_array_equal(got, ref["sweep_start"].values)
    assert got.dtype.kind == "M"


def test_a_caller_writing_into_a_slab_does_not_change_the_next_read(tmp_path):
    ds = flux_dataset(n_time=12)
    ds["flux"].attrs["valid_max"] = np.float32(1e5)
    path = write_flux_file(tmp_path / "w.nc", ds)
    opened = bio.open_indexed(path)
    first = opened["flux"].values
    first[:] = -1.0
    again = opened["flux"].values
    ref = ds["flux"].values
    np.testing.assert_array_equal(again, np.where(ref > 1e5, np.nan, ref))


def test_valid_range_from_the_mapping_masks_and_a_misplaced_one_is_refused(tmp_path):
    ds = flux_dataset(n_time=15)
    path = write_flux_file(tmp_path / "r.nc", ds)
    got = bio.open_indexed(path, {"variables": {"flux": "flux"}, "valid": {"flux": [0, 2e4]}})
    ref = ds["flux"].values
    np.testing.assert_array_equal(got["flux"].values, np.where(ref > 2e4, np.nan, ref))
    assert got.attrs["read_flag_count_out_of_valid_range"] == int((ref > 2e4).sum()) > 0
    with pytest.raises(MappingError, match=r"r\.nc.*\[valid\] counts.*\[valid\] flux"):
        bio.open_indexed(path, {"variables": {"flux": "flux"}, "valid": {"counts": [0, 9]}})
    with pytest.raises(MappingError, match=r"r\.nc.*\[telescope\].*count_rate"):
        bio.open_indexed(path, {"variables": {"flux": "flux"},
                                "telescope": {"geometric_factor": 0.01}})


def test_cdf_time_types_decode_to_utc():
    from astropy.time import Time

    from beltkit.io.cdf import cdf_time_to_datetime64

    t = np.array(["2016-12-31T23:59:59", "2017-01-01T00:00:00.25"], "datetime64[ns]")
    zero = np.datetime64("0000-01-01T00:00:00", "ms")  # the CDF epoch (CDF User's Guide 2.4)
    ms = (t.astype("datetime64[ms]") - zero).astype(np.int64).astype(np.float64)  # ms, no ns
    np.testing.assert_array_equal(cdf_time_to_datetime64(ms), t)  # CDF_EPOCH
    sec = np.floor(ms / 1e3)
    ps = (ms - sec * 1e3) * 1e9
    np.testing.assert_array_equal(cdf_time_to_datetime64(sec + 1j * ps), t)  # CDF_EPOCH16
    # CDF_TIME_TT2000: TT ns since J2000 computed by astropy, across the 2016 leap second
    d = Time(np.datetime_as_string(t), scale="utc").tt - Time("2000-01-01T12:00:00", scale="tt")
    tt = np.round(d.jd1 * 86400e9 + d.jd2 * 86400e9).astype(np.int64)
    np.testing.assert_array_equal(cdf_time_to_datetime64(tt), t)
    # nudge: ignoring the leap second would put the second time 1 s late
    assert tt[1] - tt[0] == 2_250_000_000
    fill = np.int64(np.iinfo(np.int64).min)
    assert np.isnat(cdf_time_to_datetime64(np.array([fill, tt[0]]), fill)[0])
