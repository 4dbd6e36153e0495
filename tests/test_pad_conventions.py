"""The validator names every problem at once; known units are converted, unknown refused."""

import copy

import numpy as np
import pytest
import xarray as xr
from test_pad_support import make_ds

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
    for needle in ("flux: missing 'units'", "energy_bnds: missing", "mlat: missing",
                   "L: units 'furlong'", "bins overlap", "time: not strictly increasing",
                   "flux: 1 negative values"):
        assert needle in text, needle
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
    xr.testing.assert_allclose(a, b)
    xr.testing.assert_identical(raw, before)  # the mask is applied to a copy, blockwise
    # the same through dask
    xr.testing.assert_allclose(a, partition(raw.chunk(time=2)).compute())


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
