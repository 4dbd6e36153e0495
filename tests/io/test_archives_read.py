"""Foreign-made archives read by beltkit.io: ISTP CDFs, assorted netCDFs, telescope rates.

The corpus is built here (module-scoped, in a temporary folder) the way
missions deliver files, for an invented spacecraft ("Kestrel-2", synthetic
data): ISTP CDFs with fill, out-of-range and saturated values, delta-given and
centre-only pitch-angle bins, CDF_TIME_TT2000 and CDF_EPOCH times, a
record-varying energy table and CDF unit markup; netCDFs with radians, MeV,
per-MeV flux, time on a ``record`` dimension, seconds since 1970 with and
without CF units, CF packing and quality flags; telescope count-rate
archives; geodetic-only and GSM-only ephemeris. Each file is read and
compared with an independent calculation on its valid samples (plain numpy,
astropy, geopack), or refused in one line.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
import xarray as xr

from beltkit import io as bio
from beltkit.errors import MappingError

FLUX_MARKUP_MEV = "cm!E-2!N s!E-1!N sr!E-1!N MeV!E-1!N"
N_T = 40
T0 = np.datetime64("2024-03-10T06:00:00", "ns")
TIMES = T0 + np.arange(N_T) * np.timedelta64(16, "s")
CENTRES_DELTA = np.array([10.0, 30.0, 50.0, 70.0, 110.0, 130.0, 150.0, 170.0])
CENTRES_SYM = np.linspace(11.25, 168.75, 8)
E_MEV = np.array([0.1, 0.3, 0.9, 2.0])

# CDF data type codes (CDF User's Guide, section 2.5)
CDF_INT2, CDF_INT4, CDF_INT8, CDF_REAL4, CDF_REAL8 = 2, 4, 8, 21, 22
CDF_EPOCH, CDF_EPOCH16, CDF_TT2000 = 31, 32, 33


def _tt2000_ns(times):
    """TT2000 computed with astropy, independently of cdflib.

    TT2000 counts SI nanoseconds of Terrestrial Time from 2000-01-01T12:00:00 TT
    (CDF User's Guide, section 2.4).
    """
    from astropy.time import Time

    t = Time(np.datetime_as_string(times, unit="ns"), scale="utc", format="isot")
    j2000 = Time("2000-01-01T12:00:00", scale="tt")
    d = t.tt - j2000
    return np.round((d.jd1 * 86400.0) * 1e9 + (d.jd2 * 86400.0) * 1e9).astype(np.int64)


def _write_cdf(path, variables, gattrs=None):
    """Write a CDF with cdflib's writer: variables = [(name, type, rec_vary, data, attrs)]."""
    from cdflib.cdfwrite import CDF

    cdf = CDF(str(path), cdf_spec={"Compressed": False})
    cdf.write_globalattrs({k: {0: v} for k, v in (gattrs or {"Project": "Kestrel-2"}).items()})
    for name, dtype, rec, data, attrs in variables:
        data = np.asarray(data)
        dims = list(data.shape[1:] if rec else data.shape)
        spec = {"Variable": name, "Data_Type": dtype, "Num_Elements": 1, "Rec_Vary": rec,
                "Dim_Sizes": dims}
        cdf.write_var(spec, var_attrs=attrs, var_data=data)
    cdf.close()
    return path


def _truth(seed, shape):
    rng = np.random.default_rng(seed)
    return (10 ** rng.uniform(2, 5, size=shape)).astype(np.float32)


def _inject(flux, seed, counts):
    """Put fill (-1e31), negative (-3) and saturated (5e8) values at random places."""
    rng = np.random.default_rng(seed)
    flat = rng.choice(flux.size, size=sum(counts), replace=False)
    kinds = np.repeat([1, 2, 3], counts)
    out = flux.copy().ravel()
    out[flat[kinds == 1]] = -1e31
    out[flat[kinds == 2]] = -3.0
    out[flat[kinds == 3]] = 5e8
    where = np.zeros(flux.size, np.uint8)
    where[flat[kinds == 1]] = 1
    where[flat[kinds >= 2]] = 2
    return out.reshape(flux.shape), where.reshape(flux.shape)


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    d = tmp_path_factory.mktemp("archives")
    files = {}
    # 1. ISTP CDF: fill, out-of-range, saturated; delta bins; markup units; per-MeV; TT2000
    truth = _truth(1, (N_T, 4, 8))
    stored, flags = _inject(truth, 2, (7, 5, 4))
    lshell = np.linspace(3.0, 5.0, N_T)
    files["istp"] = _write_cdf(d / "kestrel2_pad_istp.cdf", [
        ("Epoch", CDF_TT2000, True, _tt2000_ns(TIMES), {"CATDESC": "sample time"}),
        ("en_centre", CDF_REAL4, False, E_MEV.astype(np.float32),
         {"UNITS": "MeV", "VAR_TYPE": "support_data"}),
        ("pa_centre", CDF_REAL4, False, CENTRES_DELTA.astype(np.float32),
         {"UNITS": "Degrees", "DELTA_PLUS_VAR": "pa_half", "DELTA_MINUS_VAR": "pa_half"}),
        ("pa_half", CDF_REAL4, False, np.full(8, 10.0, np.float32), {"UNITS": "Degrees"}),
        ("elx_pad", CDF_REAL4, True, stored,
         {"UNITS": FLUX_MARKUP_MEV, "FILLVAL": np.float32(-1e31), "VALIDMIN": np.float32(0.0),
          "VALIDMAX": np.float32(1e7), "DEPEND_0": "Epoch", "DEPEND_1": "en_centre",
          "DEPEND_2": "pa_centre", "VAR_TYPE": "data"}),
        ("lshell_dip", CDF_REAL8, True, lshell, {"UNITS": "R!IE!N", "DEPEND_0": "Epoch"}),
        ("mag_lat", CDF_REAL8, True, np.linspace(-10, 10, N_T),
         {"UNITS": "Degrees", "DEPEND_0": "Epoch"}),
        ("mlt_hr", CDF_REAL8, True, np.linspace(1, 5, N_T), {"UNITS": "hours",
                                                              "DEPEND_0": "Epoch"}),
    ])
    files["istp_truth"] = (truth, flags)
    # 2. centre-only bins, CDF_EPOCH time
    ms = (TIMES.astype("datetime64[ms]") - np.datetime64("0000-01-01T00:00:00", "ms")).astype(
        np.float64)  # CDF_EPOCH: ms since 0000-01-01 (CDF User's Guide 2.4)
    base = [("en_centre", CDF_REAL4, False, E_MEV.astype(np.float32) * 1000,
             {"UNITS": "keV"}),
            ("pa_centre", CDF_REAL4, False, CENTRES_SYM.astype(np.float32), {"UNITS": "deg"})]
    j = _truth(3, (N_T, 4, 8))
    flux_attrs = {"UNITS": "cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N", "DEPEND_0": "Epoch",
                  "DEPEND_1": "en_centre", "DEPEND_2": "pa_centre"}
    files["epoch"] = _write_cdf(d / "kestrel2_epoch.cdf", [
        ("Epoch", CDF_EPOCH, True, ms, {})] + base + [
        ("elx_pad", CDF_REAL4, True, j, flux_attrs)])
    asym = [base[0], ("pa_centre", CDF_REAL4, False,
                      np.array([5, 15, 25, 35, 45, 55, 65, 75], np.float32), {"UNITS": "deg"})]
    files["asym"] = _write_cdf(d / "kestrel2_asym.cdf", [
        ("Epoch", CDF_EPOCH, True, ms, {})] + asym + [("elx_pad", CDF_REAL4, True, j,
                                                       flux_attrs)])
    files["centre_flux"] = j
    # 3. record-varying energy table (two instrument modes), one fill
    table = np.where((np.arange(N_T) % 2 == 0)[:, None], [[50.0, 100.0, 250.0, 600.0, 1500.0]],
                     [[70.0, 150.0, 300.0, 800.0, 2000.0]])
    jt = _truth(4, (N_T, 5, 6))
    jt_stored = jt.copy()
    jt_stored[3, 1, 2] = -1e31
    files["table"] = _write_cdf(d / "kestrel2_table.cdf", [
        ("Epoch", CDF_TT2000, True, _tt2000_ns(TIMES), {}),
        ("e_table", CDF_REAL4, True, table.astype(np.float32), {"UNITS": "keV",
                                                                "DEPEND_0": "Epoch"}),
        ("pa_centre", CDF_REAL4, False, np.linspace(15, 165, 6).astype(np.float32),
         {"UNITS": "deg"}),
        ("elx_pad", CDF_REAL4, True, jt_stored,
         {"UNITS": "cm-2 s-1 sr-1 keV-1", "FILLVAL": np.float32(-1e31), "DEPEND_0": "Epoch",
          "DEPEND_1": "e_table", "DEPEND_2": "pa_centre"}),
    ])
    files["table_truth"] = (table, jt)
    return files


ISTP_MAP = {"variables": {"time": "Epoch", "flux": "elx_pad", "energy": "en_centre",
                          "pitch_angle": "pa_centre", "L": "lshell_dip", "mlat": "mag_lat",
                          "mlt": "mlt_hr"}}


def test_istp_fill_range_and_saturation_masked_flagged_counted(corpus):
    truth, flags = corpus["istp_truth"]
    ds = bio.open_indexed(corpus["istp"], ISTP_MAP)
    flux = ds["flux"].values
    # independent: valid samples are the true per-MeV flux x 1e-3 (per keV); the rest NaN
    expect = np.where(flags == 0, truth.astype(np.float64) * 1e-3, np.nan)
    np.testing.assert_allclose(flux, expect, rtol=1e-6)
    assert ds["flux"].attrs["units"] == "cm-2 s-1 sr-1 keV-1"
    np.testing.assert_array_equal(ds["read_flag"].values, flags)
    assert ds["read_flag"].dtype == np.uint8
    assert list(ds["read_flag"].attrs["flag_masks"]) == [1, 2, 4]
    assert ds["read_flag"].attrs["flag_meanings"] == "fill out_of_valid_range quality_rejected"
    assert ds.attrs["read_flag_count_fill"] == 7
    assert ds.attrs["read_flag_count_out_of_valid_range"] == 9
    assert ds.attrs["read_flag_count_quality_rejected"] == 0
    # a slab reads the same values (lazy, slab-wise)
    np.testing.assert_allclose(ds.isel(time=slice(10, 20))["flux"].values, expect[10:20],
                               rtol=1e-6)
    # units: MeV -> keV, "Degrees", R!IE!N
    np.testing.assert_allclose(ds["energy"].values, E_MEV * 1000, rtol=1e-6)
    assert ds["energy"].attrs["units"] == "keV"


def test_istp_delta_bins_give_edges_and_their_source(corpus):
    ds = bio.open_indexed(corpus["istp"], ISTP_MAP)
    edges = np.stack([CENTRES_DELTA - 10, CENTRES_DELTA + 10], -1)
    np.testing.assert_allclose(ds["pitch_angle_bnds"].values, edges)
    assert ds.attrs["pitch_angle_bnds_source"] == "delta"
    # nudge: midpoints would put an edge at 90, the deltas leave the 80-100 gap
    assert not np.any(np.isclose(ds["pitch_angle_bnds"].values, 90.0))


def test_tt2000_and_epoch_times_decode_to_utc(corpus):
    # TT2000 values made by astropy's UTC->TT (leap seconds included) read back exactly
    ds = bio.open_indexed(corpus["istp"], ISTP_MAP)
    np.testing.assert_array_equal(ds["time"].values, TIMES)
    for key in ("epoch",):
        ds = bio.open_indexed(corpus[key], {"variables": {"time": "Epoch", "flux": "elx_pad",
                                                          "energy": "en_centre",
                                                          "pitch_angle": "pa_centre"}})
        got = ds["time"].values.astype("datetime64[ms]")
        np.testing.assert_array_equal(got, TIMES.astype("datetime64[ms]"), err_msg=key)


def test_centre_only_bins_symmetric_set_gets_0_and_180(corpus):
    ds = bio.open_indexed(corpus["epoch"], {"variables": {"time": "Epoch", "flux": "elx_pad",
                                                          "energy": "en_centre",
                                                          "pitch_angle": "pa_centre"}})
    # independent: 8 bins of 22.5 deg tiling 0-180
    edges = np.linspace(0.0, 180.0, 9)
    np.testing.assert_allclose(ds["pitch_angle_bnds"].values,
                               np.stack([edges[:-1], edges[1:]], -1), atol=1e-4)
    assert ds.attrs["pitch_angle_bnds_source"] == "centres"
    np.testing.assert_allclose(ds["flux"].values, corpus["centre_flux"], rtol=1e-6)
    assert "read_flag" not in ds  # nothing masked by rule: no flag pass


def test_asymmetric_centres_refused_naming_outer_edges_then_read_with_it(corpus):
    m = {"variables": {"time": "Epoch", "flux": "elx_pad", "energy": "en_centre",
                       "pitch_angle": "pa_centre"}}
    with pytest.raises(MappingError) as info:
        bio.open_indexed(corpus["asym"], m)
    msg = str(info.value)
    assert "\n" not in msg and "kestrel2_asym.cdf" in msg and "outer_edges" in msg
    ds = bio.open_indexed(corpus["asym"], {**m, "pitch_angle": {"outer_edges": "half_spacing"}})
    np.testing.assert_allclose(ds["pitch_angle_bnds"].values[[0, -1]], [[0, 10], [70, 80]])


def test_record_varying_energy_table_is_channel_energy(corpus):
    table, jt = corpus["table_truth"]
    m = {"variables": {"time": "Epoch", "flux": "elx_pad", "energy": "e_table",
                       "pitch_angle": "pa_centre"}}
    ds = bio.open_indexed(corpus["table"], m)
    assert ds["channel_energy"].dims == ("time", "energy")
    assert ds["channel_energy"].attrs["units"] == "keV"
    np.testing.assert_allclose(ds["channel_energy"].values, table, rtol=1e-6)
    assert "energy" not in ds.variables  # no 1-D keV axis pretends to hold the energies
    assert ds["flux"].dims == ("time", "energy", "pitch_angle")
    assert np.isnan(ds["flux"].values[3, 1, 2]) and ds["read_flag"].values[3, 1, 2] == 1


def test_common_energy_axis_interpolates_loglog_per_record(corpus):
    table, jt = corpus["table_truth"]
    common = [100.0, 200.0, 500.0, 1800.0]
    m = {"variables": {"time": "Epoch", "flux": "elx_pad", "energy": "e_table",
                       "pitch_angle": "pa_centre"}, "energy": {"common_kev": common}}
    ds = bio.open_indexed(corpus["table"], m)
    np.testing.assert_array_equal(ds["energy"].values, common)
    got = ds["flux"].values
    # independent: np.interp in log E - log j record by record, no extrapolation
    expect = np.full((N_T, len(common), 6), np.nan)
    for i in range(N_T):
        for p in range(6):
            y = np.log(jt[i, :, p].astype(float))
            if i == 3 and p == 2:
                y[1] = np.nan
            v = np.exp(np.interp(np.log(common), np.log(table[i]), y,
                                 left=np.nan, right=np.nan))
            expect[i, :, p] = v
    np.testing.assert_allclose(got, expect, rtol=1e-5)
    # 1800 keV is above the even records' 1500 keV top channel: NaN, not extrapolated
    assert np.all(np.isnan(got[0::2, 3])) and np.all(np.isfinite(got[1::2, 3]))
    # the fill at channel 1 of record 3 flags the common values built from it
    assert ds["read_flag"].values[3, 1, 2] == 1 and np.isnan(got[3, 1, 2])


def _write_nc(path, dims, variables, gattrs=None):
    """Write a netCDF file with netCDF4 directly (no xarray encoding)."""
    with netCDF4.Dataset(path, "w") as nc:
        for name, size in dims.items():
            nc.createDimension(name, size)
        for name, (vdims, data, attrs) in variables.items():
            data = np.asarray(data)
            fill = attrs.pop("_FillValue", None)
            v = nc.createVariable(name, data.dtype, vdims, fill_value=fill)
            v.set_auto_maskandscale(False)
            v.setncatts(attrs)
            v[...] = data
        nc.setncatts(gattrs or {"title": "Kestrel-2 synthetic"})
    return path


@pytest.fixture(scope="module")
def nc_corpus(tmp_path_factory):
    d = tmp_path_factory.mktemp("nc")
    files = {}
    unix = (TIMES - np.datetime64("1970-01-01T00:00:00", "ns")).astype(np.int64) / 1e9
    pa_deg = np.linspace(11.25, 168.75, 8)
    pa_edges = np.linspace(0, 180, 9)
    j = _truth(7, (N_T, 4, 8))
    stored = j.copy()
    stored[5, 2, 3] = -9999.0
    stored[6, 0, 0] = 2e9  # above valid_max
    lat = np.linspace(-40, 55, N_T)
    lon = np.linspace(-170, 170, N_T)
    alt_m = np.linspace(400e3, 2000e3, N_T)
    common = {
        "pa_rad": (("n_pa",), np.radians(pa_deg), {"units": "radians",
                                                  "bounds": "pa_rad_edges"}),
        "pa_rad_edges": (("n_pa", "two"), np.radians(np.stack([pa_edges[:-1], pa_edges[1:]],
                                                              -1)), {}),
        "chan_e": (("n_e",), E_MEV, {"units": "MeV"}),
        "jflux": (("record", "n_e", "n_pa"), stored,
                  {"units": "cm-2 s-1 sr-1 MeV-1", "_FillValue": np.float32(-9999.0),
                   "valid_max": np.float32(1e9)}),
        "glat": (("record",), lat, {"units": "degrees_north"}),
        "glon": (("record",), lon, {"units": "degrees_east"}),
        "galt": (("record",), alt_m, {"units": "m"}),
    }
    dims = {"record": N_T, "n_e": 4, "n_pa": 8, "two": 2}
    files["record"] = _write_nc(d / "kestrel2_record.nc", dims, {
        "t_sec": (("record",), unix, {"units": "seconds since 1970-01-01 00:00:00"}),
        **common})
    files["nounits"] = _write_nc(d / "kestrel2_nounits.nc", dims, {
        "t_sec": (("record",), unix, {"long_name": "seconds since 1970 (UTC)"}),
        **{k: (v[0], v[1], dict(v[2])) for k, v in common.items()}})
    files["truth"] = (j, lat, lon, alt_m)
    return files


NC_MAP = {"variables": {"time": "t_sec", "flux": "jflux", "energy": "chan_e",
                        "pitch_angle": "pa_rad", "latitude": "glat", "longitude": "glon",
                        "altitude": "galt"},
          "dimensions": {"energy": "n_e", "pitch_angle": "n_pa"}}


def test_netcdf_record_dimension_radians_mev_per_mev(nc_corpus):
    j, *_ = nc_corpus["truth"]
    ds = bio.open_indexed(nc_corpus["record"], NC_MAP)
    assert ds["flux"].dims == ("time", "energy", "pitch_angle")
    np.testing.assert_array_equal(ds["time"].values, TIMES)
    np.testing.assert_allclose(ds["pitch_angle"].values, np.linspace(11.25, 168.75, 8))
    np.testing.assert_allclose(ds["pitch_angle_bnds"].values[:, 0], np.linspace(0, 157.5, 8),
                               atol=1e-9)
    assert ds.attrs["pitch_angle_bnds_source"] == "bounds"
    np.testing.assert_allclose(ds["energy"].values, E_MEV * 1e3)
    expect = j.astype(float) * 1e-3  # per MeV -> per keV
    expect[5, 2, 3] = np.nan  # _FillValue
    expect[6, 0, 0] = np.nan  # above valid_max
    np.testing.assert_allclose(ds["flux"].values, expect, rtol=1e-6)
    assert ds["read_flag"].values[5, 2, 3] == 1 and ds["read_flag"].values[6, 0, 0] == 2
    assert int((ds["read_flag"].values > 0).sum()) == 2


def test_geodetic_ephemeris_matches_astropy(nc_corpus):
    from astropy import units as u
    from astropy.coordinates import EarthLocation

    _, lat, lon, alt_m = nc_corpus["truth"]
    ds = bio.open_indexed(nc_corpus["record"], NC_MAP)
    # astropy's WGS-84 geodetic -> geocentric (reference library)
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, alt_m * u.m, ellipsoid="WGS84")
    ref = np.stack([loc.x.to_value(u.km), loc.y.to_value(u.km), loc.z.to_value(u.km)], -1)
    np.testing.assert_allclose(ds["position_geo"].values, ref, atol=1e-6)
    assert ds["position_geo"].attrs["units"] == "km" and "latitude" not in ds


def test_numeric_time_without_units_refused_then_read_with_epoch(nc_corpus):
    with pytest.raises(MappingError) as info:
        bio.open_indexed(nc_corpus["nounits"], NC_MAP)
    msg = str(info.value)
    assert "\n" not in msg and "kestrel2_nounits.nc" in msg
    assert "[time] epoch" in msg and "unit" in msg
    ds = bio.open_indexed(nc_corpus["nounits"], {**NC_MAP, "time": {
        "epoch": "1970-01-01T00:00:00", "unit": "s"}})
    np.testing.assert_array_equal(ds["time"].values, TIMES)
    # nudge: the same numbers read as milliseconds land in January 1970
    ms = bio.open_indexed(nc_corpus["nounits"], {**NC_MAP, "time": {
        "epoch": "1970-01-01T00:00:00", "unit": "ms"}})
    assert ms["time"].values[0] < np.datetime64("1970-02-01")


@pytest.fixture(scope="module")
def more_corpus(tmp_path_factory):
    d = tmp_path_factory.mktemp("more")
    rng = np.random.default_rng(11)
    files = {}
    unix = (TIMES - np.datetime64("1970-01-01T00:00:00", "ns")).astype(np.int64) / 1e9
    tunits = {"units": "seconds since 1970-01-01 00:00:00"}
    # Cartesian ephemeris in GSM (R_E) and GEI (km), time on a record dimension
    phi = np.linspace(0, 2 * np.pi, N_T)
    gsm = np.stack([4.0 * np.cos(phi), 4.0 * np.sin(phi), 1.0 + 0 * phi], -1)
    gei = np.stack([7000.0 * np.cos(phi), 7000.0 * np.sin(phi), 900.0 + 0 * phi], -1)
    j = _truth(12, (N_T, 2, 4))
    base = {"t_sec": (("record",), unix, dict(tunits)),
            "e_kev": (("n_e",), np.array([100.0, 300.0]), {"units": "keV"}),
            "pa_deg": (("n_pa",), np.linspace(22.5, 157.5, 4), {"units": "degree"}),
            "jflux": (("record", "n_e", "n_pa"), j, {"units": "cm-2 s-1 sr-1 keV-1"})}
    dims = {"record": N_T, "n_e": 2, "n_pa": 4, "xyz": 3}
    files["gsm"] = _write_nc(d / "kestrel2_gsm.nc", dims, {
        **base, "pos_gsm": (("record", "xyz"), gsm, {"units": "R!IE!N"})})
    files["gei"] = _write_nc(d / "kestrel2_gei.nc", dims, {
        **base, "pos_gei": (("record", "xyz"), gei, {"units": "km"})})
    files["pos"] = (gsm, gei)
    # telescope: count rates per look, G per look, dead time, efficiency, quality bits
    rate = rng.uniform(0.0, 5e3, size=(N_T, 3, 4))
    rate[2, 1, 3] = 2.5e5  # R tau > 1 with tau = 5e-6 s: saturated
    gf = np.array([0.01, 0.02, 0.015, 0.01])
    e_edges = np.array([[80.0, 120.0], [120.0, 200.0], [200.0, 400.0]])
    quality = np.zeros(N_T, np.int16)
    quality[[4, 9]] = 2  # calibration_bad
    quality[15] = 4  # telemetry_gap (kept by the rule)
    files["telescope"] = _write_nc(d / "kestrel2_tel.nc", {"time": N_T, "chan": 3, "look": 4,
                                                            "nv": 2}, {
        "time": (("time",), unix, dict(tunits)),
        "chan": (("chan",), e_edges.mean(1), {"units": "keV", "bounds": "chan_edges"}),
        "chan_edges": (("chan", "nv"), e_edges, {"units": "keV"}),
        "rates": (("time", "chan", "look"), rate, {"units": "counts/s"}),
        "gfac": (("look",), gf, {"units": "cm2 sr"}),
        "look_pa": (("time", "look"), np.tile([20.0, 60.0, 110.0, 160.0], (N_T, 1)),
                    {"units": "degree"}),
        "look_half": (("look",), np.full(4, 10.0), {"units": "degree"}),
        "qual": (("time",), quality, {"flag_masks": np.array([1, 2, 4], np.int16),
                                      "flag_meanings": "saturated calibration_bad "
                                                       "telemetry_gap"}),
    })
    files["telescope_truth"] = (rate, gf, e_edges, quality)
    # CF packing: int16 with scale/offset, _FillValue and a packed valid_range
    packed = rng.integers(0, 30000, size=(N_T, 2, 4)).astype(np.int16)
    packed[1, 0, 0] = -32768
    packed[2, 1, 1] = 31000  # above the packed valid_range
    files["packed"] = _write_nc(d / "kestrel2_packed.nc", dims, {
        "t_sec": (("record",), unix, dict(tunits)),
        "e_kev": base["e_kev"], "pa_deg": base["pa_deg"],
        "jflux": (("record", "n_e", "n_pa"), packed,
                  {"units": "cm-2 s-1 sr-1 keV-1", "scale_factor": np.float32(0.5),
                   "add_offset": np.float32(10.0), "_FillValue": np.int16(-32768),
                   "valid_range": np.array([0, 30000], np.int16)})})
    files["packed_truth"] = packed
    return files


def _gsm_to_geo_reference(xyz, times):
    """GSM -> GEO from first principles: astropy's Sun (ITRS) and ppigrf's IGRF dipole.

    GSM: X towards the Sun, Y = D x X / |D x X| with D the northern dipole pole
    direction -(g11, h11, g10)/|.| (Hapgood 1992), Z = X x Y.
    """
    from astropy.coordinates import ITRS, get_sun
    from astropy.time import Time
    from ppigrf.ppigrf import read_shc

    t = Time(np.datetime_as_string(times, unit="s"), scale="utc")
    sun = get_sun(t).transform_to(ITRS(obstime=t)).cartesian.xyz.value.T
    sun /= np.linalg.norm(sun, axis=1, keepdims=True)
    g, h = read_shc()
    yr = 2024.0 + (times - np.datetime64("2024-01-01")) / np.timedelta64(1, "D") / 366.0
    years = np.array([ti.year for ti in g.index], float)  # rows at 1 January
    g10 = np.interp(yr, years, g[(1, 0)].values)
    g11 = np.interp(yr, years, g[(1, 1)].values)
    h11 = np.interp(yr, years, h[(1, 1)].values)
    dip = -np.stack([g11, h11, g10], -1)
    dip /= np.linalg.norm(dip, axis=1, keepdims=True)
    y = np.cross(dip, sun)
    y /= np.linalg.norm(y, axis=1, keepdims=True)
    z = np.cross(sun, y)
    m = np.stack([sun, y, z], axis=1)  # rows: GSM axes in GEO
    return np.einsum("nji,nj->ni", m, xyz)


def test_gsm_ephemeris_converted_like_astropy_and_ppigrf(more_corpus):
    gsm, _ = more_corpus["pos"]
    m = {"variables": {"time": "t_sec", "flux": "jflux", "energy": "e_kev",
                       "pitch_angle": "pa_deg", "position": "pos_gsm"},
         "dimensions": {"energy": "n_e", "pitch_angle": "n_pa"},
         "position": {"form": "cartesian", "frame": "GSM"}}
    ds = bio.open_indexed(more_corpus["gsm"], m)
    got = ds["position_geo"].values
    km = gsm * 6371.2  # R!IE!N: the IGRF reference radius
    ref = _gsm_to_geo_reference(km, TIMES)
    # astropy's precise Sun vs the almanac Sun: agreement to ~0.01 deg (~6 km at 4 R_E)
    assert np.max(np.linalg.norm(got - ref, axis=1)) < 15.0
    np.testing.assert_allclose(np.linalg.norm(got, axis=1), np.linalg.norm(km, axis=1),
                               rtol=1e-12)
    # nudge: reading the same numbers as GSE puts them hundreds of km away
    gse = bio.open_indexed(more_corpus["gsm"], {**m, "position": {"form": "cartesian",
                                                                  "frame": "GSE"}})
    assert np.max(np.linalg.norm(gse["position_geo"].values - ref, axis=1)) > 300.0
    # a position vector without a declared frame is refused, naming the keys
    with pytest.raises(MappingError, match=r"kestrel2_gsm\.nc.*\[position\] form"):
        bio.open_indexed(more_corpus["gsm"], {k: v for k, v in m.items() if k != "position"})


def test_gei_ephemeris_matches_astropy_true_equator_of_date(more_corpus):
    from astropy import units as u
    from astropy.coordinates import ITRS, TETE, CartesianRepresentation
    from astropy.time import Time

    _, gei = more_corpus["pos"]
    m = {"variables": {"time": "t_sec", "flux": "jflux", "energy": "e_kev",
                       "pitch_angle": "pa_deg", "position": "pos_gei"},
         "dimensions": {"energy": "n_e", "pitch_angle": "n_pa"},
         "position": {"form": "cartesian", "frame": "GEI"}}
    got = bio.open_indexed(more_corpus["gei"], m)["position_geo"].values
    t = Time(np.datetime_as_string(TIMES, unit="s"), scale="utc")
    rep = CartesianRepresentation(gei[:, 0] * u.km, gei[:, 1] * u.km, gei[:, 2] * u.km)
    ref = TETE(rep, obstime=t).transform_to(ITRS(obstime=t)).cartesian.xyz.to_value(u.km).T
    # mean (GMST) vs true (apparent) sidereal time differ by the equation of the
    # equinoxes, < 1.2 s of rotation (< 0.005 deg, 0.6 km at 7,000 km), plus polar motion
    assert np.max(np.linalg.norm(got - ref, axis=1)) < 1.5


def test_telescope_rates_to_flux_with_dead_time_efficiency_quality(more_corpus):
    rate, gf, e_edges, quality = more_corpus["telescope_truth"]
    m = {"variables": {"count_rate": "rates", "geometric_factor": "gfac", "energy": "chan",
                       "look_pitch_angle": "look_pa",
                       "look_half_angle": "look_half", "quality": "qual"},
         "dimensions": {"energy": "chan"},
         "telescope": {"accumulation_time_s": 0.5, "dead_time_s": 5e-6, "efficiency": 0.8},
         "quality": {"reject_meanings": ["calibration_bad"]}}
    ds = bio.open_indexed(more_corpus["telescope"], m)
    # independent: R_true = R / (1 - R tau); j = R_true / (G eps dE) (common practice,
    # Knoll 2010 section 4.VII); sigma from sqrt(N), N = R dt
    tau, eps, dt_s = 5e-6, 0.8, 0.5
    de = (e_edges[:, 1] - e_edges[:, 0])[None, :, None]
    g = gf[None, None, :]
    live = 1 - rate * tau
    j = rate / live / (g * eps * de)
    err = np.sqrt(np.maximum(rate * dt_s, 1)) / dt_s / live**2 / (g * eps * de)
    bad = np.zeros(rate.shape, bool)
    bad[[4, 9]] = True
    bad[2, 1, 3] = True
    np.testing.assert_allclose(ds["flux"].values, np.where(bad, np.nan, j), rtol=1e-12)
    np.testing.assert_allclose(ds["flux_err"].values, np.where(bad, np.nan, err), rtol=1e-12)
    flag = ds["read_flag"].values
    assert flag[2, 1, 3] == 2 and np.all(flag[[4, 9]] == 4) and np.all(flag[15] == 0)
    assert ds.attrs["read_flag_count_quality_rejected"] == 2 * 12
    assert ds.attrs["read_flag_count_out_of_valid_range"] == 1
    assert ds["flux"].attrs["units"] == "cm-2 s-1 sr-1 keV-1"
    # the same rule by bits and by values
    for rule in ({"reject_bits": [1]}, {"reject_values": [2]}):
        alt = bio.open_indexed(more_corpus["telescope"], {**m, "quality": rule})
        np.testing.assert_array_equal(alt["read_flag"].values, flag)
    # a quality variable without a rule is refused, naming the keys
    with pytest.raises(MappingError, match=r"kestrel2_tel\.nc.*\[quality\] reject_values"):
        bio.open_indexed(more_corpus["telescope"], {k: v for k, v in m.items()
                                                    if k != "quality"})


def test_cf_packing_fill_and_packed_valid_range(more_corpus):
    packed = more_corpus["packed_truth"]
    m = {"variables": {"time": "t_sec", "flux": "jflux", "energy": "e_kev",
                       "pitch_angle": "pa_deg"},
         "dimensions": {"energy": "n_e", "pitch_angle": "n_pa"}}
    ds = bio.open_indexed(more_corpus["packed"], m)
    # CF-1.8 section 8.1: value = packed x scale_factor + add_offset; fill and the
    # valid_range compare with the packed values (section 2.5.1)
    expect = packed * 0.5 + 10.0
    expect[1, 0, 0] = np.nan
    expect[2, 1, 1] = np.nan
    np.testing.assert_allclose(ds["flux"].values, expect, rtol=1e-6)
    assert ds["read_flag"].values[1, 0, 0] == 1 and ds["read_flag"].values[2, 1, 1] == 2
    assert "_FillValue" not in ds["flux"].attrs and "scale_factor" not in ds["flux"].attrs


def test_suggested_mapping_reads_the_istp_file_like_the_hand_mapping(corpus, tmp_path):
    text = bio.suggest_mapping(corpus["istp"])
    path = tmp_path / "suggested.toml"
    path.write_text(text)
    assert 'flux = "elx_pad"' in text and 'time = "Epoch"' in text
    assert "GUESS" in text  # L, mlat, mlt were found by name and unit: marked
    ds = bio.open_indexed(corpus["istp"], path)
    ref = bio.open_indexed(corpus["istp"], ISTP_MAP)
    np.testing.assert_array_equal(ds["flux"].values, ref["flux"].values)
    for name in ("L", "mlat", "mlt", "pitch_angle_bnds", "energy", "read_flag"):
        np.testing.assert_array_equal(ds[name].values, ref[name].values, err_msg=name)
    from beltkit.pad import validate

    assert validate(ds, strict=False) == []  # masked samples flagged, the file kept
    # strict validation reports the masked samples (the read_flag contract)
    assert any("9 values out of valid range" in p for p in validate(ds))


def test_suggested_mapping_marks_what_the_file_does_not_say(nc_corpus, tmp_path):
    text = bio.suggest_mapping(nc_corpus["nounits"])
    assert "NEEDED" in text and "# epoch =" in text
    path = tmp_path / "s.toml"
    path.write_text(text)
    # as written it still fails, naming the key to fill in
    with pytest.raises(MappingError, match=r"\[time\] epoch"):
        bio.open_indexed(nc_corpus["nounits"], path)
    path.write_text(text.replace("# epoch =", "epoch =").replace("# unit =", "unit ="))
    ds = bio.open_indexed(nc_corpus["nounits"], path)
    np.testing.assert_array_equal(ds["time"].values, TIMES)
    assert ds["position_geo"].shape == (N_T, 3)  # geodetic guessed from names and units


def test_cdf_written_by_cdflib_from_xarray_summarises_like_the_netcdf(tmp_path):
    from cdflib.xarray import xarray_to_cdf

    from beltkit.batch import summarize
    from beltkit.demo import tern_flux_model

    # a demo day-file (the synthetic Marram-Tern spectrometer), first 30 spectra
    day, _ = tern_flux_model("2026-03-01", np.random.default_rng(5), n_times=30)
    nc = bio.write_dataset(day, tmp_path / "nc" / "tern_day.nc")
    with xr.open_dataset(nc) as src:
        src = src.load()
    (tmp_path / "cdf").mkdir()
    cdf = tmp_path / "cdf" / "tern_day.cdf"
    xarray_to_cdf(src, str(cdf))  # a general-purpose writer (cdflib), ISTP attributes added
    a = summarize([nc], tmp_path / "out_nc", model="dipole")
    b = summarize([cdf], tmp_path / "out_cdf", model="dipole")
    assert [r.status for r in a + b] == ["ok", "ok"], [r.reason for r in a + b]
    with xr.open_dataset(a[0].output) as sa, xr.open_dataset(b[0].output) as sb:
        assert set(sa.data_vars) == set(sb.data_vars) and sa.sizes["time"] == 30
        for name in sa.data_vars:
            np.testing.assert_array_equal(sa[name].values, sb[name].values, err_msg=name)
        np.testing.assert_array_equal(sa["time"].values, sb["time"].values)
        assert np.isfinite(sa["fraction_trapped"].values).any()


def test_cli_inspect_suggests_a_mapping_that_summarize_uses_unedited(corpus, tmp_path, capsys):
    from beltkit.cli import main

    out = tmp_path / "maps" / "istp.toml"
    main(["inspect", str(corpus["istp"]), "--suggest-mapping", str(out)])
    text = capsys.readouterr().out
    assert f"wrote  {out}" in text and "pitch-angle bin edges from: delta" in text
    assert "masked when read: 7 fill, 9 out of valid range, 0 quality rejected" in text
    assert not list(out.parent.glob(".*.tmp"))  # written atomically, nothing left beside it
    assert main(["summarize", str(corpus["istp"]), "--mapping", str(out), "--out",
                 str(tmp_path / "s")]) == 0
    with xr.open_dataset(next((tmp_path / "s").glob("*.nc"))) as summary:
        assert summary.sizes["time"] == N_T
    # a second input with --suggest-mapping is an option error
    assert main(["inspect", str(corpus["epoch"]), str(corpus["asym"]),
                 "--suggest-mapping", str(out)]) == 1


def test_fill_times_become_nat_and_labels_follow_their_dimension(tmp_path):
    # a TT2000 fill (ISTP: the int64 minimum) and a CDF_CHAR label variable (LABL_PTR_1)
    tt = _tt2000_ns(TIMES[:5])
    tt[2] = np.iinfo(np.int64).min
    j = _truth(21, (5, 2, 4))
    path = _write_cdf(tmp_path / "k2_fill_time.cdf", [
        ("Epoch", CDF_TT2000, True, tt, {"FILLVAL": np.int64(np.iinfo(np.int64).min)}),
        ("en_centre", CDF_REAL4, False, np.array([100.0, 300.0], np.float32), {"UNITS": "keV"}),
        ("pa_centre", CDF_REAL4, False, np.linspace(22.5, 157.5, 4).astype(np.float32),
         {"UNITS": "deg"}),
        ("en_label", 51, False, np.array(["low E   ", "high E  "]), {}),
        ("elx_pad", CDF_REAL4, True, j, {"UNITS": "cm-2 s-1 sr-1 keV-1", "DEPEND_0": "Epoch",
                                         "DEPEND_1": "en_centre", "DEPEND_2": "pa_centre",
                                         "LABL_PTR_1": "en_label"}),
    ])
    raw = bio.open_cdf(path)
    assert raw["en_label"].dims == ("en_centre",)
    ds = bio.open_indexed(path, {"variables": {"time": "Epoch", "flux": "elx_pad",
                                               "energy": "en_centre",
                                               "pitch_angle": "pa_centre"}})
    t = ds["time"].values
    assert np.isnat(t[2]) and np.array_equal(t[[0, 1, 3, 4]], TIMES[[0, 1, 3, 4]])
    # netCDF: a CF time with a _FillValue
    unix = (TIMES[:5] - np.datetime64("1970-01-01", "ns")).astype(np.int64) / 1e9
    unix[1] = -1.0
    nc = _write_nc(tmp_path / "k2_fill_time.nc", {"record": 5}, {
        "t_sec": (("record",), unix, {"units": "seconds since 1970-01-01",
                                      "_FillValue": -1.0})})
    got = bio.open_indexed(nc, {"variables": {"time": "t_sec"}})["time"].values
    assert np.isnat(got[1]) and got[0] == TIMES[0]


def test_per_channel_validmax_in_pitch_energy_order(tmp_path):
    # ISTP VALIDMAX with one value per element of the last dimension (energy)
    j = _truth(31, (6, 8, 4))  # file order: (Epoch, pitch, energy)
    vmax = np.array([1e3, 1e4, 3e4, 1e5], np.float32)
    path = _write_cdf(tmp_path / "k2_perchan.cdf", [
        ("Epoch", CDF_TT2000, True, _tt2000_ns(TIMES[:6]), {}),
        ("pa_centre", CDF_REAL4, False, CENTRES_SYM.astype(np.float32), {"UNITS": "deg"}),
        ("en_centre", CDF_REAL4, False, np.array([50, 100, 200, 400], np.float32),
         {"UNITS": "keV"}),
        ("elx_pad", CDF_REAL4, True, j, {"UNITS": "cm-2 s-1 sr-1 keV-1", "DEPEND_0": "Epoch",
                                         "DEPEND_1": "pa_centre", "DEPEND_2": "en_centre",
                                         "VALIDMAX": vmax}),
    ])
    ds = bio.open_indexed(path, {"variables": {"time": "Epoch", "flux": "elx_pad",
                                               "energy": "en_centre",
                                               "pitch_angle": "pa_centre"}})
    assert ds["flux"].dims == ("time", "energy", "pitch_angle")
    expect = np.where(j > vmax, np.nan, j).transpose(0, 2, 1)  # plain numpy, file order
    np.testing.assert_allclose(ds["flux"].values, expect, rtol=1e-6)
    assert ds.attrs["read_flag_count_out_of_valid_range"] == int((j > vmax).sum()) > 0
    # a VALIDMAX that fits no trailing dimension is refused in one line naming [valid]
    bad = tmp_path / "k2_perchan_bad.cdf"
    _write_cdf(bad, [
        ("Epoch", CDF_TT2000, True, _tt2000_ns(TIMES[:6]), {}),
        ("elx_pad", CDF_REAL4, True, j, {"UNITS": "cm-2 s-1 sr-1 keV-1", "DEPEND_0": "Epoch",
                                         "VALIDMAX": np.ones(8, np.float32)})])
    with pytest.raises(MappingError, match=r"k2_perchan_bad\.cdf.*VALIDMAX.*\[valid\] flux"):
        bio.open_indexed(bad, {"variables": {"time": "Epoch", "flux": "elx_pad"}})
    # a slab in energy and pitch selects the matching limits
    sub = ds.isel(energy=slice(1, 3), pitch_angle=slice(0, 2))["flux"].values
    np.testing.assert_allclose(sub, expect[:, 1:3, 0:2], rtol=1e-6)


def test_suggested_mappings_for_a_telescope_archive_and_gsm_ephemeris(more_corpus, tmp_path):
    rate, gf, e_edges, _ = more_corpus["telescope_truth"]
    text = bio.suggest_mapping(more_corpus["telescope"])
    assert 'count_rate = "rates"' in text and 'geometric_factor = "gfac"' in text
    path = tmp_path / "tel.toml"
    path.write_text(text)
    ds = bio.open_indexed(more_corpus["telescope"], path)
    # no dead time, efficiency or accumulation time in the file: j = R / (G dE), no errors
    expect = rate / (gf[None, None, :] * (e_edges[:, 1] - e_edges[:, 0])[None, :, None])
    np.testing.assert_allclose(ds["flux"].values, expect, rtol=1e-12)
    assert "flux_err" not in ds and ds["look_pitch_angle"].dims == ("time", "look")
    text = bio.suggest_mapping(more_corpus["gsm"])
    assert 'position = "pos_gsm"' in text and 'frame = "GSM"  # GUESS' in text
    path.write_text(text)
    got = bio.open_indexed(more_corpus["gsm"], path)["position_geo"].values
    ref = bio.open_indexed(more_corpus["gsm"], {
        "variables": {"time": "t_sec", "flux": "jflux", "energy": "e_kev",
                      "pitch_angle": "pa_deg", "position": "pos_gsm"},
        "dimensions": {"energy": "n_e", "pitch_angle": "n_pa"},
        "position": {"form": "cartesian", "frame": "GSM"}})["position_geo"].values
    np.testing.assert_array_equal(got, ref)


def test_cdf_without_istp_depends_reads_on_its_record_axis(tmp_path):
    # a plain (non-ISTP) CDF: no DEPEND_0 anywhere, time and flux share the record axis
    j = _truth(41, (5, 2, 4))
    path = _write_cdf(tmp_path / "k2_plain.cdf", [
        ("t_epoch", CDF_EPOCH, True, (TIMES[:5].astype("datetime64[ms]") - np.datetime64(
            "0000-01-01T00:00:00", "ms")).astype(np.float64), {}),
        ("elx_pad", CDF_REAL4, True, j, {"UNITS": "cm-2 s-1 sr-1 keV-1"}),
        ("en_centre", CDF_REAL4, False, np.array([100.0, 300.0], np.float32), {"UNITS": "keV"}),
        ("pa_centre", CDF_REAL4, False, np.linspace(22.5, 157.5, 4).astype(np.float32),
         {"UNITS": "deg"})])
    ds = bio.open_indexed(path, {
        "variables": {"time": "t_epoch", "flux": "elx_pad", "energy": "en_centre",
                      "pitch_angle": "pa_centre"},
        "dimensions": {"energy": "elx_pad_dim1", "pitch_angle": "elx_pad_dim2"}})
    assert ds["flux"].dims == ("time", "energy", "pitch_angle")
    np.testing.assert_array_equal(ds["time"].values, TIMES[:5])
    np.testing.assert_allclose(ds["flux"].values, j, rtol=1e-6)


def test_suggested_mapping_reads_a_record_varying_energy_table(corpus, tmp_path):
    table, _ = corpus["table_truth"]
    text = bio.suggest_mapping(corpus["table"])
    assert 'energy = "e_table"' in text and "# common_kev" in text
    path = tmp_path / "table.toml"
    path.write_text(text)
    ds = bio.open_indexed(corpus["table"], path)
    np.testing.assert_allclose(ds["channel_energy"].values, table, rtol=1e-6)
    assert ds["read_flag"].values[3, 1, 2] == 1
