"""Readers (netCDF, CDF, mapping) and the atomic CF writer of beltkit.io."""

import hashlib

import netCDF4
import numpy as np
import pytest
import xarray as xr
from _flux_factory import FLUX_UNITS, flux_dataset, write_flux_cdf, write_flux_file

from beltkit import io as bio


def test_sha256_matches_published_vector_and_hashlib(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    p = tmp_path / "abc.txt"
    p.write_bytes(b"abc")
    assert bio.sha256(p) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    # several blocks: same digest as hashlib on the whole content (reference library)
    big = tmp_path / "big.bin"
    data = np.random.default_rng(0).bytes(3 * 1024 * 1024 + 17)
    big.write_bytes(data)
    assert bio.sha256(big, block_size=65536) == hashlib.sha256(data).hexdigest()


def test_open_flux_is_lazy_along_time_and_leaves_file_untouched(tmp_path):
    path = write_flux_file(tmp_path / "a.nc", n_time=300)
    before = bio.sha256(path)
    ds = bio.open_flux(path, chunks={"time": 100})
    assert ds["flux"].chunks == ((100, 100, 100), (4,), (12,))
    assert ds["flux"].attrs["units"] == FLUX_UNITS
    assert ds.attrs["source"] == "a.nc"
    ref = flux_dataset(n_time=300)
    np.testing.assert_array_equal(ds["flux"].values, ref["flux"].values)
    np.testing.assert_array_equal(ds["time"].values, ref["time"].values)
    ds.close()
    assert bio.sha256(path) == before


def test_open_indexed_gives_every_dimension_coordinate_its_index(tmp_path):
    """The reader skips the raw file's default indexes and builds them once at the end."""
    path = write_flux_file(tmp_path / "a.nc", n_time=40)
    ds = bio.open_indexed(path)
    assert set(ds.xindexes) == {"time", "energy", "pitch_angle"}
    assert ds.indexes["time"].dtype == np.dtype("datetime64[ns]")
    ref = xr.open_dataset(path)  # xarray's own decoding (reference library)
    xr.testing.assert_equal(ds["time"], ref["time"])
    t = ref["time"].values[7]
    np.testing.assert_array_equal(ds["flux"].sel(time=t).values, ref["flux"].sel(time=t).values)
    e = float(ref["energy"].values[2])
    np.testing.assert_array_equal(ds["flux"].sel(energy=e).values,
                                  ref["flux"].sel(energy=e).values)
    ref.close()
    ds.close()
    # open_raw keeps xarray's default indexes unless asked not to
    from beltkit.io.read import open_raw

    raw = open_raw(path)
    assert "time" in raw.xindexes
    raw.close()


def test_open_flux_auto_chunks_only_time(tmp_path):
    path = write_flux_file(tmp_path / "a.nc", n_time=50)
    ds = bio.open_flux(path)
    chunks = ds["flux"].chunks
    assert chunks[1] == (4,) and chunks[2] == (12,)
    ds.close()


def test_truncated_file_error_names_the_file(tmp_path):
    good = write_flux_file(tmp_path / "good.nc", n_time=400)
    bad = tmp_path / "cut.nc"
    bad.write_bytes(good.read_bytes()[:2000])
    with pytest.raises(OSError, match="cut.nc"):
        bio.open_flux(bad).load()


def test_missing_file_error_names_the_file(tmp_path):
    with pytest.raises(OSError, match="nothere.nc"):
        bio.open_flux(tmp_path / "nothere.nc")


def test_cdf_input_equals_netcdf_input(tmp_path):
    ds = flux_dataset(n_time=90, seed=3)
    nc = bio.open_flux(write_flux_file(tmp_path / "x.nc", ds), chunks=None)
    cdf_ds = bio.open_flux(write_flux_cdf(tmp_path / "x.cdf", ds), chunks={"time": 40})
    assert cdf_ds["flux"].chunks[0] == (40, 40, 10)  # read lazily, record range by range
    cdf_ds = cdf_ds.load()
    assert set(cdf_ds.data_vars) == set(nc.data_vars)
    for name in nc.variables:
        np.testing.assert_array_equal(cdf_ds[name].values, nc[name].values, err_msg=name)
        assert cdf_ds[name].dims == nc[name].dims, name
        assert cdf_ds[name].attrs.get("units") == ds[name].attrs.get("units"), name


MAPPING_TOML = """
[variables]
time = "t_utc"
flux = "eflux_pa"
energy = "E_chan"
pitch_angle = "alpha"
L = "lshell_dip"

[units]
flux = "cm-2 s-1 sr-1 keV-1"
mlat = "degree"

[dimensions]
pitch_angle = "alpha_bin"
"""


def _odd_file(tmp_path):
    ds = flux_dataset(n_time=30)
    ds["flux"].attrs.pop("units")
    odd = ds.rename_vars({"flux": "eflux_pa", "L": "lshell_dip", "pitch_angle": "alpha"})
    odd = odd.rename_dims({"pitch_angle": "alpha_bin"}).rename({"time": "t_utc",
                                                                "energy": "E_chan"})
    path = tmp_path / "odd.nc"
    odd.to_netcdf(path)
    return path, ds


def test_mapping_file_renames_and_sets_units(tmp_path):
    path, ref = _odd_file(tmp_path)
    m = tmp_path / "map.toml"
    m.write_text(MAPPING_TOML)
    ds = bio.open_flux(path, mapping=m)
    assert ds["flux"].dims == ("time", "energy", "pitch_angle")
    assert ds["flux"].attrs["units"] == FLUX_UNITS
    assert "L" in ds and "lshell_dip" not in ds
    np.testing.assert_array_equal(ds["pitch_angle"].values, ref["pitch_angle"].values)
    np.testing.assert_array_equal(ds["flux"].values, ref["flux"].values)
    assert ds.indexes["time"].equals(ref.indexes["time"])
    ds.close()


@pytest.mark.parametrize("text, words", [
    ("[variabels]\nflux = 'F'\n", ["map.toml", "variabels", "known"]),
    ("[variables]\nfluxx = 'F'\n", ["map.toml", "fluxx", "not a beltkit name"]),
    ("[variables]\nflux = 3\n", ["map.toml", "flux", "non-empty string"]),
    ("[variables]\nflux = 'F'\nflux_err = 'F'\n", ["assigned to several"]),
    ("[variables\nflux = 'F'\n", ["map.toml", "not valid TOML"]),
])
def test_bad_mapping_file_is_refused_naming_file_and_key(tmp_path, text, words):
    m = tmp_path / "map.toml"
    m.write_text(text)
    with pytest.raises(bio.MappingError) as err:
        bio.load_mapping(m)
    for w in words:
        assert w in str(err.value)


def test_mapping_naming_a_missing_variable_names_file_and_key(tmp_path):
    path = write_flux_file(tmp_path / "plain.nc", n_time=10)
    with pytest.raises(bio.MappingError) as err:
        bio.open_flux(path, mapping={"variables": {"flux": "eflux_pa"}})
    msg = str(err.value)
    assert "plain.nc" in msg and "[variables] flux = 'eflux_pa'" in msg


def _nc_info(path, var):
    with netCDF4.Dataset(path) as nc:
        v = nc[var]
        return dict(nc.__dict__), v.filters(), v.chunking(), v.dimensions


def test_writer_writes_cf_compressed_time_chunks(tmp_path):
    ds = flux_dataset(n_time=500)
    target = tmp_path / "out" / "w.nc"
    bio.write_dataset(ds, target, compress=5, history="beltkit test", time_chunk=128,
                      attrs={"flag": True, "settings": {"a": 1}})
    gattrs, filters, chunking, dims = _nc_info(target, "flux")
    assert gattrs["Conventions"] == "CF-1.8"
    assert gattrs["history"].endswith("Z beltkit test")
    assert gattrs["beltkit_version"]
    assert gattrs["flag"] == 1 and gattrs["settings"] == '{"a": 1}'
    assert filters["zlib"] is True and filters["complevel"] == 5
    assert dims[0] == "time" and chunking == [128, 4, 12]
    back = xr.open_dataset(target)
    xr.testing.assert_equal(back["flux"], ds["flux"])
    assert back["time"].encoding["units"].startswith("seconds since 1970-01-01")
    back.close()
    assert [p.name for p in target.parent.iterdir()] == ["w.nc"]  # no temporary left


def test_default_compression_is_level_one_with_shuffle(tmp_path):
    # compress=True and the commands' --compression default both mean level 1 with the
    # shuffle filter: for float32 outputs higher levels save about 1 % for 3x the time
    ds = flux_dataset(n_time=500)
    bio.write_dataset(ds, tmp_path / "d.nc", compress=True)
    _, filters, _, _ = _nc_info(tmp_path / "d.nc", "flux")
    assert filters["zlib"] is True and filters["complevel"] == 1 and filters["shuffle"]
    from beltkit.cli import build_parser

    args = build_parser().parse_args(["summarize", "x.nc", "--out", "o"])
    assert args.compression == 1 == bio.write.DEFAULT_COMPLEVEL


def test_writer_is_atomic_when_writing_fails(tmp_path, monkeypatch):
    target = tmp_path / "keep.nc"
    target.write_bytes(b"previous content")
    original = xr.Dataset.to_netcdf
    seen = []

    def exploding(self, path, *args, **kwargs):
        seen.append(path)
        original(self, path, *args, **kwargs)  # the temporary file is complete here
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", exploding)
    with pytest.raises(RuntimeError, match="disk on fire"):
        bio.write_dataset(flux_dataset(n_time=20), target)
    assert seen and seen[0].name.startswith(".keep.nc.beltkit-") and seen[0].suffix == ".tmp"
    assert target.read_bytes() == b"previous content"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep.nc"]


def test_remove_stale_temporaries_only_touches_ours(tmp_path):
    ours = bio.temporary_name(tmp_path / "a.summary.nc")
    ours.write_bytes(b"x")
    other = tmp_path / ".someone-else.tmp"
    other.write_bytes(b"y")
    keep = tmp_path / "a.summary.nc"
    keep.write_bytes(b"z")
    theirs = bio.temporary_name(tmp_path / "b[1].nc")
    theirs.write_bytes(b"w")
    assert bio.remove_stale_temporaries(tmp_path, "b[1].nc") == [theirs]
    removed = bio.remove_stale_temporaries(tmp_path)
    assert removed == [ours]
    assert other.exists() and keep.exists() and not ours.exists()


def test_read_attributes_of_damaged_file_is_empty(tmp_path):
    p = tmp_path / "broken.nc"
    p.write_bytes(b"not a netcdf file at all")
    assert bio.read_attributes(p) == {}
