"""The pad tests' dataset builders (tests/_flux_factory.py) follow the conventions.

The datasets are invented test input; every expected value in the pad tests
comes from an outside reference named beside the check.
"""

from __future__ import annotations

import numpy as np
from _flux_factory import make_ds, make_telescope_ds

from beltkit.pad import validate


def test_builders_follow_the_conventions():
    ds = make_ds(np.ones((2, 3, 6)), np.linspace(0, 180, 7))
    assert validate(ds) == []
    tel = make_telescope_ds(np.ones((2, 1, 2)), [0.0, 90.0], [20.0, 20.0])
    assert validate(tel) == []


def test_builder_options_follow_the_conventions_and_place_the_values():
    # energy edges: geometric centres, the edges as bounds; counts with a scalar factor;
    # times from the start at the cadence (the values are invented, the checks are arithmetic)
    edges_kev = [50.0, 200.0, 800.0]
    n = np.arange(2 * 2 * 6, dtype=float).reshape(2, 2, 6)
    ds = make_ds(3.0 * n, np.linspace(0, 180, 7), energy_edges_kev=edges_kev, counts=n,
                 counts_to_flux=3.0, flux_err=np.ones_like(n), start="2026-03-05T00:00",
                 cadence_s=20.0)
    assert validate(ds) == []
    np.testing.assert_allclose(ds["energy"].values, [100.0, 400.0], rtol=1e-15)
    np.testing.assert_array_equal(ds["energy_bnds"].values, [[50.0, 200.0], [200.0, 800.0]])
    np.testing.assert_array_equal(ds["flux"].values, 3.0 * ds["counts"].values)
    assert ds["counts_to_flux"].dims == () and float(ds["counts_to_flux"]) == 3.0
    assert list(ds["time"].values) == [np.datetime64("2026-03-05T00:00:00", "ns"),
                                       np.datetime64("2026-03-05T00:00:20", "ns")]
    tel = make_telescope_ds(np.ones((2, 1, 2)), [0.0, 90.0], [15.0, 15.0],
                            flux_err=np.full((2, 1, 2), 0.1),
                            energy_kev=[300.0], start="2026-03-02")
    assert validate(tel) == []
    np.testing.assert_allclose(tel["energy_bnds"].values, [[270.0, 330.0]], rtol=1e-15)
    assert tel["flux_err"].dims == ("time", "energy", "look")
