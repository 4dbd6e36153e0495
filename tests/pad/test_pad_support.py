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
