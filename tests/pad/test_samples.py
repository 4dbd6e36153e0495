"""Per-sample flags of beltkit.pad.samples: a given local field below the model's minimum.

References used here:
* The centred dipole's field magnitude along a line,
  B = (B0 / L^3) sqrt(1 + 3 sin^2 mlat) / cos^6 mlat (textbook; Walt 1994),
  written out here with B0 = 30,000 nT (a round value chosen for the test, not
  the model's): its minimum along the line is B0 / L^3 at the equator.
* The mirror-ratio loss cone sin^2(alpha) = B / B_mirror (common practice):
  the local cone follows the given local field, flagged or not.
"""

import numpy as np
import pytest
import xarray as xr
from _flux_factory import make_ds

from beltkit import dipole
from beltkit.pad import partition
from beltkit.pad.samples import (
    B_LOCAL_BELOW_MIN_BIT,
    COUNTED_FLAGS,
    flag_counts,
    local_field_below_minimum,
)

EDGES_12 = np.linspace(0.0, 180.0, 13)


def _textbook_b(L, mlat_deg, b0_nt=30000.0):
    lam = np.radians(mlat_deg)
    return b0_nt / L**3 * np.sqrt(1.0 + 3.0 * np.sin(lam) ** 2) / np.cos(lam) ** 6


def test_the_closed_form_agrees_with_the_textbook_line_field():
    L, mlat = np.array([2.0, 4.0, 6.5]), np.array([0.0, 20.0, -35.0])
    np.testing.assert_allclose(dipole.field_magnitude(L, mlat, b0_nt=30000.0),
                               _textbook_b(L, mlat), rtol=1e-13)


def test_a_given_b_local_below_the_line_minimum_is_flagged_and_kept():
    L = 4.0
    b_eq = float(dipole.equatorial_field(L))  # the model's b_min on this line (dipole)
    # four samples at 10 deg: the line's own field, 1 % above the minimum, 3 % below it,
    # and just inside the tolerance (float32 storage of b_local must not raise the flag)
    b_line = float(dipole.field_magnitude(L, 10.0))
    b_given = np.array([b_line, 1.01 * b_eq, 0.97 * b_eq, b_eq * (1 - 2e-6)])
    flux = np.ones((4, 2, 12))
    out = partition(make_ds(flux, EDGES_12, L=L, mlat=10.0, b_local=b_given))
    flag = out["partition_flag"].values
    below = (flag & B_LOCAL_BELOW_MIN_BIT) != 0
    np.testing.assert_array_equal(below, np.array([[False] * 2, [False] * 2, [True] * 2,
                                                   [False] * 2]))
    # kept, not masked: the local cone still follows the given field (mirror ratio)
    b_foot = float(dipole.footpoint_field(L))
    expected = np.degrees(np.arcsin(np.sqrt(b_given / b_foot)))
    np.testing.assert_allclose(out["blc_local"].values, expected, rtol=1e-12)
    assert np.all(np.isfinite(out["fraction_precipitating"].values))
    # counted with the other sample flags, and declared in the CF flag attributes
    assert out.attrs["beltkit_samples_b_local_below_b_min"] == 1
    assert flag_counts(flag)["b_local_below_b_min"] == 1
    masks = list(out["partition_flag"].attrs["flag_masks"])
    meanings = out["partition_flag"].attrs["flag_meanings"].split()
    assert meanings[masks.index(B_LOCAL_BELOW_MIN_BIT)] == "b_local_below_b_min"
    assert COUNTED_FLAGS[B_LOCAL_BELOW_MIN_BIT] == "b_local_below_b_min"


def test_strict_does_not_refuse_the_kept_flag_and_a_model_field_is_never_flagged():
    L = 3.0
    b_eq = float(dipole.equatorial_field(L))
    flux = np.ones((2, 1, 12))
    strict = partition(make_ds(flux, EDGES_12, L=L, b_local=[b_eq, 0.5 * b_eq]), strict=True)
    assert (strict["partition_flag"].values[1] & B_LOCAL_BELOW_MIN_BIT).all()
    own = partition(make_ds(flux, EDGES_12, L=L, mlat=[0.0, 30.0]))
    assert not (own["partition_flag"].values & B_LOCAL_BELOW_MIN_BIT).any()


def test_lazy_data_get_the_same_flag():
    L = 5.0
    b_eq = float(dipole.equatorial_field(L))
    ds = make_ds(np.ones((6, 1, 12)), EDGES_12, L=L,
                 b_local=b_eq * np.array([1.0, 0.9, 1.2, 0.8, 1.0, 1.0]))
    lazy = partition(ds.chunk(time=2))
    eager = partition(ds)
    assert lazy["partition_flag"].chunks is not None
    np.testing.assert_array_equal(lazy["partition_flag"].values, eager["partition_flag"].values)
    assert ((eager["partition_flag"].values[:, 0] & B_LOCAL_BELOW_MIN_BIT) != 0).tolist() == [
        False, True, False, True, False, False]


@pytest.mark.parametrize("given", [None, "nan"])
def test_no_b_local_or_nan_b_local_flags_nothing(given):
    cones = xr.Dataset({"b_local": ("time", [np.nan, 100.0]), "b_min": ("time", [200.0, 50.0])})
    ds = xr.Dataset({"b_local": ("time", [np.nan, 100.0])}) if given else xr.Dataset()
    assert local_field_below_minimum(ds, cones) is None
