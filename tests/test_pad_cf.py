"""The pad outputs pass the CF checker (cfchecker, CF-1.8) with no errors and no warnings."""

import re

import numpy as np
import pytest
from test_cf import run_cf_checker
from test_pad_support import make_ds

from beltkit.pad import fit_sine_power, partition, to_equatorial


@pytest.mark.parametrize("engine", ["partition", "to_equatorial", "fit_sine_power"])
def test_outputs_are_cf_clean(engine, tmp_path):
    rng = np.random.default_rng(0)
    j = rng.uniform(1, 2, (5, 3, 12))
    ds = make_ds(j, np.linspace(0, 180, 13), flux_err=0.1 * j, mlt=3.0)
    func = {"partition": partition, "to_equatorial": to_equatorial,
            "fit_sine_power": fit_sine_power}[engine]
    out = func(ds)
    out.attrs["Conventions"] = "CF-1.8"
    path = tmp_path / f"{engine}.nc"
    out.to_netcdf(path)
    report = run_cf_checker(path, tmp_path)
    errors = int(re.search(r"ERRORS detected: (\d+)", report).group(1))
    warnings = int(re.search(r"WARNINGS given: (\d+)", report).group(1))
    assert (errors, warnings) == (0, 0), report
