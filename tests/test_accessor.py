"""The ``ds.beltkit`` accessor (beltkit.accessor) equals the functions it wraps.

References used here:
* The functions of beltkit.pad the accessor forwards to (validate, partition,
  to_equatorial, fit_sine_power), each checked against outside references in its
  own test module; here the accessor must give identical objects, attributes
  included (xarray.testing.assert_identical).
* xarray's accessor contract (xarray documentation, "Extending xarray"; common
  practice): built once per object and cached, returns new objects, leaves the
  dataset untouched.
"""

import copy

import numpy as np
import pytest
import xarray as xr
from _flux_factory import flux_dataset, make_ds

import beltkit  # noqa: F401  (registers ds.beltkit)
from beltkit.accessor import BeltkitAccessor
from beltkit.errors import ConventionError
from beltkit.pad import fit_sine_power, partition, to_equatorial, validate


@pytest.fixture(scope="module")
def ds():
    return flux_dataset(n_time=20, n_energy=2, n_pitch=12, seed=3)


def test_accessor_is_registered_and_cached(ds):
    acc = ds.beltkit
    assert isinstance(acc, BeltkitAccessor)
    assert ds.beltkit is acc  # xarray caches the accessor per object
    assert acc.problems == [] and validate(ds) == []


@pytest.mark.parametrize("kwargs", [{}, {"altitude_km": 400.0, "hemispheres": True},
                                    {"model": "dipole", "fill": "sine_power"}])
def test_partition_equals_the_function(ds, kwargs):
    before = copy.deepcopy(ds)
    got = ds.beltkit.partition(**kwargs)
    xr.testing.assert_identical(got, partition(ds, **kwargs))
    xr.testing.assert_identical(ds, before)  # the dataset is untouched
    assert got is not ds


def test_keyword_arguments_reach_the_function(ds):
    # nudge: the forwarded footpoint altitude changes the loss cones (a higher footpoint
    # sits in a weaker field: a wider cone), so a method that dropped its keywords would
    # be caught by the equalities above
    low = ds.beltkit.partition(altitude_km=100.0)
    high = ds.beltkit.partition(altitude_km=1000.0)
    assert np.all(high.blc_local.values > low.blc_local.values + 0.1)


def test_to_equatorial_equals_the_function(ds):
    for kwargs in ({}, {"alpha_eq_deg": [10.0, 30.0, 60.0, 85.0]},
                   {"alpha_eq_deg": [20.0, 70.0], "altitude_km": 500.0, "method": "linear"}):
        xr.testing.assert_identical(ds.beltkit.to_equatorial(**kwargs),
                                    to_equatorial(ds, **kwargs))


def test_fit_sine_power_equals_the_function(ds):
    for kwargs in ({}, {"altitude_km": 500.0, "max_iter": 5}):
        xr.testing.assert_identical(ds.beltkit.fit_sine_power(**kwargs),
                                    fit_sine_power(ds, **kwargs))
    # the factory's shape is sin^2: the fit finds an index near 2 (Poisson noise aside)
    assert np.nanmedian(ds.beltkit.fit_sine_power()["sine_index"].values) == pytest.approx(
        2.0, abs=0.5)


def test_validate_equals_the_function():
    flux = np.ones((3, 1, 12))
    flux[0, 0, 0] = -1.0  # a negative flux is a value problem unless allowed
    bad = make_ds(flux, np.linspace(0.0, 180.0, 13))
    assert bad.beltkit.problems == []  # structure only at construction
    got = bad.beltkit.validate()
    assert got == validate(bad) and len(got) == 1 and "negative" in got[0]
    assert bad.beltkit.validate(allow_negative=True) == validate(bad, allow_negative=True) == []
    assert bad.beltkit.validate(check_values=False) == []


def test_structural_problems_kept_and_methods_refuse():
    broken = make_ds(np.ones((2, 1, 12)), np.linspace(0.0, 180.0, 13)).drop_vars(
        "pitch_angle_bnds")
    acc = broken.beltkit  # building the accessor does not raise
    assert acc.problems == validate(broken, check_values=False) and acc.problems
    assert any(p.startswith("pitch_angle_bnds") for p in acc.problems)
    acc.problems.clear()  # a copy: the accessor keeps its list
    assert acc.problems
    for method in (acc.partition, acc.to_equatorial, acc.fit_sine_power):
        with pytest.raises(ConventionError) as err:
            method()
        assert any(p.startswith("pitch_angle_bnds") for p in err.value.problems)
