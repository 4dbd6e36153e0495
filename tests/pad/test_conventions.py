"""The validator names every problem at once; known units are converted, unknown refused."""

import copy

import numpy as np
import pytest
import xarray as xr
from _flux_factory import make_ds

from beltkit.errors import ConventionError
from beltkit.pad import flux_unit_factor, partition, validate

EDGES = np.linspace(0.0, 180.0, 13)


def _good(**kw):
    rng = np.random.default_rng(2)
    return make_ds(rng.uniform(1, 10, (4, 3, 12)), EDGES, **kw)


def test_good_dataset_has_no_problems():
    assert validate(_good()) == []


@pytest.mark.parametrize("units,factor", [
    ("cm-2 s-1 sr-1 keV-1", 1.0),
    ("cm^-2 s^-1 sr^-1 keV^-1", 1.0),
    ("cm-2 s-1 sr-1 MeV-1", 1e-3),   # 1 MeV = 1000 keV (definition of the prefix)
    ("1/(cm2 s sr MeV)", 1e-3),
    ("m-2 s-1 sr-1 keV-1", 1e-4),    # 1 m2 = 1e4 cm2
    ("cm-2 s-1 sr-1 eV-1", 1e3),
])
def test_known_flux_units_convert(units, factor):
    assert flux_unit_factor(units) == pytest.approx(factor, rel=1e-15)


@pytest.mark.parametrize("units", ["counts", "cm-2 s-1 keV-1", "cm-2 s-1 sr-1", "furlong-2"])
def test_unknown_flux_units_are_refused(units):
    assert flux_unit_factor(units) is None
    ds = _good()
    ds["flux"].attrs["units"] = units
    problems = validate(ds)
    assert any(p.startswith("flux: units") for p in problems)


def test_per_mev_flux_is_converted_not_refused():
    ds = _good()
    ds_mev = ds.copy(deep=True)
    ds_mev["flux"] = ds_mev["flux"] * 1e3  # the same flux per MeV is 1000 times larger
    ds_mev["flux"].attrs["units"] = "cm-2 s-1 sr-1 MeV-1"
    assert validate(ds_mev) == []
    a, b = partition(ds), partition(ds_mev)
    np.testing.assert_allclose(a.omni_flux.values, b.omni_flux.values, rtol=1e-12)
    assert b.omni_flux.attrs["units"] == "cm-2 s-1 keV-1"
    # energies in MeV are converted as well
    ds_e = ds.copy(deep=True)
    ds_e = ds_e.assign_coords(energy=("energy", ds.energy.values / 1e3, {"units": "MeV"}))
    ds_e["energy_bnds"] = (("energy", "nv"), ds["energy_bnds"].values / 1e3, {"units": "MeV"})
    np.testing.assert_allclose(partition(ds_e).energy.values, ds.energy.values, rtol=1e-12)


def test_every_problem_is_named_at_once():
    ds = _good()
    ds = ds.drop_vars(["energy_bnds", "mlat"])
    ds["flux"].attrs.pop("units")
    ds["L"].attrs["units"] = "furlong"
    bnds = ds["pitch_angle_bnds"].values.copy()
    bnds[3, 1] = bnds[4, 1]  # bin 3 now overlaps bin 4
    ds["pitch_angle_bnds"] = (("pitch_angle", "nv"), bnds)
    t = ds.time.values.copy()
    t[[1, 2]] = t[[2, 1]]
    ds = ds.assign_coords(time=t)
    ds["flux"][0, 1, 2] = -3.0
    problems = validate(ds)
    text = "\n".join(problems)
    for needle in ("flux: missing 'units'", "mlat: missing",
                   "L: units 'furlong'", "bins overlap", "time: not strictly increasing",
                   "flux: 1 negative values"):
        assert needle in text, needle
    assert "energy_bnds" not in text  # channel edges are optional (issue 15)
    with pytest.raises(ConventionError) as err:
        partition(ds)
    assert err.value.problems == problems


def test_missing_variables_and_dimensions():
    ds = _good().rename({"pitch_angle": "angle"})
    assert any("needs a 'pitch_angle' dimension" in p for p in validate(ds))
    assert any(p.startswith("flux: missing data variable")
               for p in validate(_good().drop_vars("flux")))
    ds = _good().drop_vars(["L", "mlat"])
    assert any(p.startswith("position:") for p in validate(ds))
    ds = _good().drop_vars("pitch_angle_bnds")
    assert any(p.startswith("pitch_angle_bnds: missing") for p in validate(ds))
    ds = _good().expand_dims(extra=2)
    assert any("unexpected dimension(s) ['extra']" in p for p in validate(ds))


def test_pitch_angles_outside_range_and_folding_attribute():
    ds = _good()
    bnds = ds["pitch_angle_bnds"].values.copy()
    bnds[-1, 1] = 190.0
    ds["pitch_angle_bnds"] = (("pitch_angle", "nv"), bnds)
    assert any("edges must lie in 0-180" in p for p in validate(ds))
    ds = _good()
    ds["pitch_angle"].attrs["folded"] = "true"
    assert any("folded='true' but bins extend beyond 90" in p for p in validate(ds))
    ds = _good()
    ds = ds.assign_coords(pitch_angle=np.radians(ds.pitch_angle.values))
    ds["pitch_angle"].attrs["units"] = "rad"
    ds["pitch_angle_bnds"] = np.radians(ds["pitch_angle_bnds"])
    ds["pitch_angle_bnds"].attrs["units"] = "rad"
    assert validate(ds) == []
    np.testing.assert_allclose(partition(ds).omni_flux.values, partition(_good()).omni_flux.values,
                               rtol=1e-12)


def test_negative_flux_is_flagged_and_all_nan_energies_named():
    ds = _good()
    ds["flux"][0, 0, 0] = -2.0
    ds["flux"][:, 2, :] = np.nan
    problems = validate(ds)
    assert any("flux: 1 negative values" in p for p in problems)
    assert any("all values NaN (or fill) at energies [300.0] keV" in p for p in problems)
    assert not any("negative" in p for p in validate(ds, allow_negative=True))


def test_fill_values_and_valid_range_are_honoured():
    ref = _good()
    ref["flux"][1, 0, 3] = np.nan
    ref["flux"][2, 1, 5] = np.nan
    raw = _good()
    raw["flux"][1, 0, 3] = -1e31
    raw["flux"][2, 1, 5] = 5e30
    raw["flux"].attrs["_FillValue"] = -1e31
    raw["flux"].attrs["valid_range"] = [0.0, 1e30]
    assert validate(raw) == []
    before = copy.deepcopy(raw)
    a, b = partition(ref), partition(raw)
    # the same numbers; the masked samples are flagged (input_fill 256, out of range 512)
    flag_a, flag_b = a.partition_flag.values, b.partition_flag.values
    want = flag_a.copy()
    want[1, 0] |= 256
    want[2, 1] |= 512
    np.testing.assert_array_equal(flag_b, want)
    strip = ["partition_flag"]
    xr.testing.assert_allclose(a.drop_vars(strip), b.drop_vars(strip))
    assert b.attrs["beltkit_samples_input_fill"] == 1
    assert b.attrs["beltkit_samples_input_out_of_valid_range"] == 1
    xr.testing.assert_identical(raw, before)  # the mask is applied to a copy, blockwise
    # the same through dask
    lazy = partition(raw.chunk(time=2)).compute()
    xr.testing.assert_allclose(a.drop_vars(strip), lazy.drop_vars(strip))
    np.testing.assert_array_equal(lazy.partition_flag.values, want)


def test_non_monotonic_time_and_bad_position_ranges():
    ds = _good(L=[4, 4, 0.5, 4], mlat=[0, 95, 0, 0])
    problems = validate(ds)
    assert any(p.startswith("L: values must lie in [1.0") for p in problems)
    assert any(p.startswith("mlat: values must lie in [-90.0, 90.0]") for p in problems)


def test_counts_need_their_conversion_factor():
    ds = _good()
    ds["counts"] = (("time", "energy", "pitch_angle"), np.ones((4, 3, 12)), {"units": "1"})
    assert any(p.startswith("counts_to_flux: missing") for p in validate(ds))
    ds["counts_to_flux"] = ((), 2.0, {"units": "cm-2 s-1 sr-1 keV-1"})
    assert validate(ds) == []


def test_model_path_needs_a_position():
    # a field model needs position_geo or mlt next to L and mlat
    assert any(p.startswith("mlt: a field model needs") for p in validate(_good(), model="igrf"))
    assert validate(_good(mlt=6.0), model="igrf") == []


def test_validate_streams_dask_data():
    ds = _good()
    ds["flux"][0, 0, 0] = -1.0
    lazy = ds.chunk(time=1)
    assert validate(lazy) == validate(ds)
    assert lazy["flux"].chunks is not None


def test_missing_flux_still_reports_the_other_missing_pieces():
    # A file with another naming scheme (flux, energy and L renamed) must hear about
    # every missing piece at once, not only the first.
    ds = make_ds(np.ones((2, 1, 12)), np.linspace(0, 180, 13))
    renamed = ds.rename({"flux": "eflux_pa", "L": "lshell_dip"}).rename({"energy": "E_chan"})
    problems = validate(renamed)
    assert any(p.startswith("flux: missing") for p in problems)
    assert any(p.startswith("energy: missing") for p in problems)
    assert any(p.startswith("L: missing") for p in problems)


# ---------------------------------------------------------------- issue 15: robustness


def _dipole_blc_deg(L, mlat_deg, altitude_km=100.0):
    """Local bounce loss cone of a centred dipole, written out independently.

    Dipole field magnitude along a line (Kivelson & Russell, Introduction to
    Space Physics, eq. 6.6; common practice):
    B ~ sqrt(1 + 3 sin^2 lam) / cos^6 lam; the footpoint at r = R_E + h has
    cos^2 lam_f = r / (L R_E); sin^2 alpha_L = B(lam) / B(lam_f). R_E = 6371.2 km
    (the IGRF reference radius, from memory).
    """
    lam = np.radians(mlat_deg)
    lam_f = np.arccos(np.sqrt((6371.2 + altitude_km) / 6371.2 / L))

    def b(x):
        return np.sqrt(1 + 3 * np.sin(x) ** 2) / np.cos(x) ** 6

    return np.degrees(np.arcsin(np.sqrt(b(lam) / b(lam_f))))


def _independent_row(j, edges_deg, blc_deg):
    """Precipitating and trapped flux of one row from the exact zone solid angles.

    A bin [a1, a2] covers 2 pi (cos a1 - cos a2) sr (gyrotropy); NaN bins are
    not measured. In a dipole the drift loss cone equals the bounce one, so
    trapped = [blc, 180 - blc], precipitating = the two cones.
    """
    a1, a2 = np.radians(edges_deg[:-1]), np.radians(edges_deg[1:])
    b = np.radians(blc_deg)

    def part(lo, hi):
        c1, c2 = np.cos(np.maximum(a1, lo)), np.cos(np.minimum(a2, hi))
        return 2 * np.pi * np.maximum(c1 - c2, 0.0)

    ok = np.isfinite(j)
    prec = part(0, b) + part(np.pi - b, np.pi)
    trap = part(b, np.pi - b)
    fp, ft = np.sum(j[ok] * prec[ok]), np.sum(j[ok] * trap[ok])
    return fp, ft, fp / (fp + ft)


def _glitchy(seed=7, n=300):
    rng = np.random.default_rng(seed)
    L = np.linspace(3.0, 6.0, n)
    mlat = 12.0 * np.sin(np.linspace(0.0, 6.0, n))
    j = rng.uniform(1.0, 10.0, (n, 3, 12)) * np.sin(np.radians(EDGES[:-1] + 7.5)) ** 2
    return make_ds(j, EDGES, L=L, mlat=mlat)


GLITCH_TIMES = [10, 50, 120, 200, 299]
NEGATIVE = [(5, 0, 3), (60, 1, 0), (61, 2, 11), (150, 0, 6), (250, 1, 5)]


@pytest.mark.parametrize("chunked", [False, True])
def test_ephemeris_glitches_flag_those_samples_and_keep_the_rest(chunked):
    # issue 15: five ephemeris glitches (magnetic latitude 95 deg, L = 0.7) among 300 good
    # samples: strict refuses the file; otherwise those five samples are NaN and flagged
    # position_out_of_range and the other 295 equal a partition of the valid samples alone
    clean = _glitchy()
    bad = clean.copy(deep=True)
    bad["L"].values[GLITCH_TIMES[:2]] = 0.7
    bad["mlat"].values[GLITCH_TIMES[2:]] = 95.0
    with pytest.raises(ConventionError) as err:
        partition(bad)
    assert [p.split(":")[0] for p in err.value.problems] == ["L", "mlat"]
    assert validate(bad, strict=False) == []
    before = copy.deepcopy(bad)
    src = bad.chunk(time=64) if chunked else bad
    out = partition(src, strict=False).compute()
    xr.testing.assert_identical(bad, before)
    flag = out.partition_flag.values
    assert (flag[GLITCH_TIMES] & 4096).all() and (flag[GLITCH_TIMES] & 64).all()
    valid = np.setdiff1d(np.arange(300), GLITCH_TIMES)
    assert not (flag[valid] & 4096).any()
    for name in ("flux_trapped", "fraction_precipitating", "omni_flux", "blc_local"):
        assert np.isnan(out[name].values[GLITCH_TIMES]).all(), name
    ref = partition(clean.isel(time=valid))
    xr.testing.assert_allclose(out.isel(time=valid).drop_attrs(), ref.drop_attrs(),
                               rtol=1e-12)
    # and the valid samples beside each glitch equal the dipole calculation written out here
    for t in sorted({min(g + 1, 298) if g + 1 not in GLITCH_TIMES else g - 1
                     for g in GLITCH_TIMES}):
        blc = _dipole_blc_deg(bad.L.values[t], bad.mlat.values[t])
        for e in range(3):
            fp, ft, frac = _independent_row(bad.flux.values[t, e], EDGES, blc)
            assert float(out.flux_trapped[t, e]) == pytest.approx(ft, rel=1e-9)
            assert float(out.fraction_precipitating[t, e]) == pytest.approx(frac, rel=1e-9)
    if not chunked:
        assert out.attrs["beltkit_samples_position_out_of_range"] == 5
        assert out.attrs["beltkit_samples_negative_flux_masked"] == 0


def test_negative_flux_values_masked_and_equal_an_independent_calculation():
    # issue 15: five negative background-subtracted values; strict refuses, otherwise the
    # value is masked (NaN), its (time, energy) output flagged negative_flux_masked and
    # computed on the remaining bins: equal to the zone solid-angle sums written out here
    clean = _glitchy(seed=9)
    bad = clean.copy(deep=True)
    for t, e, p in NEGATIVE:
        bad["flux"].values[t, e, p] = -2.5
    with pytest.raises(ConventionError, match="5 negative values"):
        partition(bad)
    out = partition(bad, strict=False)
    assert out.attrs["beltkit_samples_negative_flux_masked"] == 5
    flag = out.partition_flag.values
    rows = {(t, e) for t, e, _ in NEGATIVE}
    for t in range(300):
        for e in range(3):
            assert bool(flag[t, e] & 2048) == ((t, e) in rows)
            assert not flag[t, e] & 16  # masked, not kept
    L, mlat = bad.L.values, bad.mlat.values
    for t, e, p in NEGATIVE:
        j = bad.flux.values[t, e].copy()
        j[p] = np.nan
        blc = _dipole_blc_deg(L[t], mlat[t])
        fp, ft, frac = _independent_row(j, EDGES, blc)
        assert float(out.blc_local[t]) == pytest.approx(blc, rel=1e-9)
        assert float(out.flux_precipitating[t, e]) == pytest.approx(fp, rel=1e-9)
        assert float(out.flux_trapped[t, e]) == pytest.approx(ft, rel=1e-9)
        assert float(out.fraction_precipitating[t, e]) == pytest.approx(frac, rel=1e-9)
        # nudge: keeping the negative value instead would change the number
        kept = _independent_row(np.nan_to_num(j, nan=-2.5), EDGES, blc)[1]
        assert abs(kept - ft) > 1e-6 * ft
    # every other row equals the clean data's
    other = np.ones((300, 3), dtype=bool)
    for t, e in rows:
        other[t, e] = False
    ref = partition(clean)
    for name in ("flux_trapped", "fraction_precipitating", "coverage_trapped"):
        np.testing.assert_allclose(out[name].values[other], ref[name].values[other],
                                   rtol=1e-12)
    # allow_negative keeps them (flag 16) as before
    kept = partition(bad, strict=False, allow_negative=True)
    assert (kept.partition_flag.values[[t for t, _, _ in NEGATIVE],
                                       [e for _, e, _ in NEGATIVE]] & 16).all()
    assert kept.attrs["beltkit_samples_negative_flux_masked"] == 0


def test_negative_uncertainties_masked_or_refused():
    ds = _good(flux_err=np.full((4, 3, 12), 0.5))
    ds["flux_err"].values[2, 1, 4] = -0.1
    with pytest.raises(ConventionError, match="negative uncertainties"):
        partition(ds)
    out = partition(ds, strict=False)
    assert out.partition_flag.values[2, 1] & 8192
    assert np.isnan(out.flux_trapped_err.values[2, 1])  # unknown, not a wrong number
    assert np.isfinite(out.flux_trapped.values[2, 1])  # the flux itself is measured
    assert np.isfinite(out.flux_trapped_err.values[2, 0])
    assert out.attrs["beltkit_samples_negative_uncertainty_masked"] == 1


INFINITE = [(7, 0, 2, np.inf), (42, 1, 9, -np.inf), (43, 2, 0, np.inf), (180, 0, 11, -np.inf)]


@pytest.mark.parametrize("chunked", [False, True])
@pytest.mark.parametrize("variable", ["flux", "flux_err"])
def test_infinite_values_are_masked_and_flagged_like_the_other_bad_samples(variable, chunked,
                                                                           tmp_path):
    # issue 15: +inf and -inf in an otherwise good file are masked like NaN and the outputs
    # they touch flagged input_out_of_valid_range (bit 512, shared with the values outside a
    # declared valid range: an infinite value lies outside every valid range; see
    # docs/conventions.md, section 2a); strict refuses the file naming the variable. The
    # expected numbers are the same file's with those samples set to NaN.
    from beltkit.io import open_flux

    def with_err():
        ds = _glitchy(seed=11)
        return ds.assign(flux_err=(ds.flux.dims, 0.1 * ds.flux.values + 0.05, ds.flux.attrs))

    clean, bad, nan = with_err(), with_err(), with_err()
    for t, e, p, value in INFINITE:
        bad[variable].values[t, e, p] = value
        nan[variable].values[t, e, p] = np.nan
    for name, ds in (("clean", clean), ("bad", bad), ("nan", nan)):
        ds.to_netcdf(tmp_path / f"{name}.nc")
    chunks = {"time": 64} if chunked else None

    def run(name, **kw):
        with open_flux(tmp_path / f"{name}.nc", chunks=chunks) as ds:
            if name == "bad":  # the reader leaves the values as they are
                assert int(np.isinf(ds[variable].values).sum()) == 4
            return partition(ds, **kw).compute()

    with pytest.raises(ConventionError) as err:
        run("bad")
    assert len(err.value.problems) == 1
    what = "values" if variable == "flux" else "uncertainties"
    assert err.value.problems[0].startswith(f"{variable}: 4 infinite {what} (+inf or -inf)")
    with open_flux(tmp_path / "bad.nc", chunks=None) as ds:
        assert validate(ds) == err.value.problems  # the validator's own scan agrees
        assert validate(ds, strict=False) == []
    out, ref, before = run("bad", strict=False), run("nan", strict=False), run("clean")
    rows = {(t, e) for t, e, _, _ in INFINITE}
    hit = np.zeros((300, 3), dtype=bool)
    for t, e in rows:
        hit[t, e] = True
    flag = out.partition_flag.values
    np.testing.assert_array_equal((flag & 512) != 0, hit)  # exactly those samples' outputs
    np.testing.assert_array_equal(flag & ~512, ref.partition_flag.values)
    for name in out.data_vars:
        if name == "partition_flag":
            continue
        got = out[name].values
        assert not np.isinf(got).any(), name
        # masked: every output equals the partition with those samples NaN
        np.testing.assert_array_equal(got, ref[name].values, err_msg=name)
        if got.ndim == 2:  # the other samples' outputs are the clean file's (to the rounding
            # of the kernel's two summation paths; atol: an error bar whose variance nearly
            # cancels keeps only the square root of its rounding, ~1e-8)
            np.testing.assert_allclose(got[~hit], before[name].values[~hit], rtol=1e-12,
                                       atol=1e-7 if name.endswith("_err") else 1e-12,
                                       err_msg=name)
    ti, ei = np.nonzero(hit)
    if variable == "flux":  # the value is masked, the rest of its bins still measure
        assert np.isfinite(out.flux_trapped.values[ti, ei]).all()
        assert (out.coverage_trapped.values[ti, ei] < 1).all()
    else:  # the uncertainty is masked: the flux is measured, its error unknown
        assert np.isfinite(out.flux_trapped.values[ti, ei]).all()
        assert np.isnan(out.flux_trapped_err.values[ti, ei]).all()
        assert np.isnan(out.fraction_precipitating_err.values[ti, ei]).all()
    if not chunked:
        assert out.attrs["beltkit_samples_input_out_of_valid_range"] == 4


def test_reader_masks_become_flag_bits_and_strict_refuses_range_and_quality():
    # contract with beltkit.io: masked values arrive as NaN with read_flag bits
    # 1 fill, 2 out of the valid range, 4 quality-rejected; a (time, energy) output carries
    # bit << 8 when any of its bins has it
    ds = _good()
    rf = np.zeros((4, 3, 12), dtype=np.uint8)
    for (t, e, p), bit in (((0, 0, 3), 1), ((1, 2, 0), 2), ((3, 1, 5), 4), ((3, 1, 6), 1)):
        ds["flux"].values[t, e, p] = np.nan
        rf[t, e, p] = bit
    ds["read_flag"] = (("time", "energy", "pitch_angle"), rf)
    problems = validate(ds)
    assert problems == [
        "flux: 1 values out of valid range (masked when read); drop strict to keep the file "
        "with those samples masked and flagged",
        "flux: 1 values quality rejected (masked when read); drop strict to keep the file "
        "with those samples masked and flagged"]
    assert validate(ds, strict=False) == []
    out = partition(ds, strict=False)
    flag = out.partition_flag.values
    assert flag[0, 0] & 256 and flag[1, 2] & 512 and flag[3, 1] & 1024 and flag[3, 1] & 256
    assert not (flag[2] & (256 | 512 | 1024)).any()
    assert out.attrs["beltkit_samples_input_quality_rejected"] == 1
    meanings = dict(zip(out.partition_flag.attrs["flag_masks"].tolist(),
                        out.partition_flag.attrs["flag_meanings"].split()))
    assert meanings[1024] == "input_quality_rejected" and meanings[4096] == (
        "position_out_of_range")
    # the numbers are those of the NaN values alone
    plain = partition(ds.drop_vars("read_flag"))
    xr.testing.assert_allclose(out.drop_vars("partition_flag").drop_attrs(),
                               plain.drop_vars("partition_flag").drop_attrs())
    ds["read_flag"] = (("time", "energy"), rf[:, :, 0])
    assert any(p.startswith("read_flag: must be an integer variable with the dims of flux")
               for p in validate(ds, strict=False))


def test_energy_channel_edges_are_optional():
    ds = _good()
    bare = ds.drop_vars("energy_bnds")
    bare["energy"].attrs.pop("bounds")
    assert validate(bare) == []
    a, b = partition(ds), partition(bare)
    assert "energy_bnds" in a.variables and "energy_bnds" not in b.variables
    assert "bounds" not in b.energy.attrs
    xr.testing.assert_allclose(a.drop_vars("energy_bnds"), b)


def test_record_varying_energy_table_keeps_each_samples_channel_energies():
    # an (time, energy) energy table (ISTP record-varying DEPEND_1): each sample is
    # partitioned on its own channels (the partition does not depend on the energy value),
    # and the outputs keep the table as channel_energy (time, energy) in keV
    ds = _good()
    table_mev = np.array([[0.1, 0.2, 0.3], [0.11, 0.21, 0.31], [0.12, 0.22, 0.32],
                          [0.13, 0.23, 0.33]])
    varying = ds.drop_vars(["energy", "energy_bnds"])
    varying["channel_energy"] = (("time", "energy"), table_mev, {"units": "MeV"})
    varying = varying.set_coords("channel_energy")
    assert validate(varying) == []
    out = partition(varying)
    assert out.channel_energy.dims == ("time", "energy")
    assert out.channel_energy.attrs["units"] == "keV"
    np.testing.assert_allclose(out.channel_energy.values, table_mev * 1e3, rtol=1e-12)
    ref = partition(ds)
    np.testing.assert_array_equal(out.flux_trapped.values, ref.flux_trapped.values)
    lazy = partition(varying.chunk(time=2)).compute()
    xr.testing.assert_allclose(lazy, out)
    # a table of the wrong shape, or no energy at all, is a structural problem
    wrong = varying.assign_coords(channel_energy=(("energy", "time"), table_mev.T,
                                                  {"units": "MeV"}))
    assert any(p.startswith("channel_energy: a record-varying energy table must have dims")
               for p in validate(wrong, strict=False))
    none = varying.drop_vars("channel_energy")
    assert any(p.startswith("energy: missing coordinate variable") for p in validate(none))


def test_a_file_without_any_valid_value_is_refused_even_when_not_strict():
    ds = _good()
    ds["flux"].values[:] = np.nan
    assert validate(ds, strict=False) == [
        "flux: no valid value at all (every value NaN, fill or masked); check the fill-value "
        "attributes, the valid range and the quality rule of the mapping"]
    # one dead channel among good ones is flagged (no_valid_flux, 32), not refused
    ds = _good()
    ds["flux"].values[:, 1, :] = np.nan
    out = partition(ds, strict=False)
    assert (out.partition_flag.values[:, 1] & 32).all()
    assert np.isfinite(out.flux_trapped.values[:, [0, 2]]).all()


def test_positions_inside_the_earth_are_masked():
    # a GEO position 1000 km from the centre is a glitch (inside the solid Earth)
    from beltkit.pad.samples import position_mask

    ds = _good(mlt=6.0)
    pos = np.tile([20000.0, 0.0, 0.0], (4, 1))
    pos[2] = [1000.0, 0.0, 0.0]
    ds["position_geo"] = (("time", "xyz"), pos, {"units": "km"})
    assert position_mask(ds, {}).tolist() == [False, False, True, False]
    ds["position_geo"].attrs["units"] = "m"  # 20 km and 1 km: all inside
    assert position_mask(ds, {"position_geo": 1e-3}).all()
    assert any(p.startswith("position_geo: 1 positions inside the solid Earth")
               for p in validate(ds.assign(position_geo=ds.position_geo.assign_attrs(
                   units="km"))))
