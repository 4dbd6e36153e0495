"""The pad outputs pass CF-1.8 in the IOOS compliance checker (rules: test_cf's module notes).

Each output is written as beltkit writes files (:func:`beltkit.io.write_dataset`:
float time since 1970, no fill value on coordinates, ``Conventions`` and
``history`` set), so the check covers the variables and attributes that pad makes.
"""

import numpy as np
import pytest
from _cf_check import assert_cf_clean
from _flux_factory import make_ds

from beltkit.io import write_dataset
from beltkit.pad import fit_sine_power, partition, to_equatorial


@pytest.mark.parametrize("engine", ["partition", "to_equatorial", "fit_sine_power"])
def test_outputs_are_cf_clean(engine, tmp_path):
    rng = np.random.default_rng(0)
    j = rng.uniform(1, 2, (5, 3, 12))
    ds = make_ds(j, np.linspace(0, 180, 13), flux_err=0.1 * j, mlt=3.0)
    func = {"partition": partition, "to_equatorial": to_equatorial,
            "fit_sine_power": fit_sine_power}[engine]
    path = write_dataset(func(ds), tmp_path / f"{engine}.nc",
                         history=f"beltkit.pad.{engine} on synthetic test data")
    assert_cf_clean(path)
