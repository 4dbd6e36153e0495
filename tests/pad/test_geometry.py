"""Solid-angle geometry of bins and telescope looks against outside references."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from beltkit.pad import (
    band_overlap_solid_angle,
    band_solid_angle,
    band_weights,
    look_solid_angles,
)


def test_full_sphere_and_hemisphere():
    # spherical geometry: a zone [a1, a2] has solid angle 2 pi (cos a1 - cos a2)
    assert band_solid_angle(0, 180) == pytest.approx(4 * np.pi, rel=1e-15)
    assert band_solid_angle(0, 90) == pytest.approx(2 * np.pi, rel=1e-15)


def test_bin_straddling_the_loss_cone_splits_by_cap_area():
    # a 20-degree bin split at an 8-degree loss cone: the part inside is the spherical cap of
    # half-angle 8 deg, area 2 pi (1 - cos 8 deg) (spherical geometry)
    cap = 2 * np.pi * (1 - np.cos(np.radians(8.0)))
    assert band_overlap_solid_angle(0, 20, 0, 8) == pytest.approx(cap, rel=1e-14)
    w = band_weights(0, 20, 0, 8)
    assert w == pytest.approx(cap / (2 * np.pi * (1 - np.cos(np.radians(20.0)))), rel=1e-14)
    # and the mirror-image bin at the anti-field-aligned end gives the same cap
    assert band_overlap_solid_angle(160, 180, 172, 180) == pytest.approx(cap, rel=1e-12)
    # whole-bin rounding would give 1 or 0; the exact split is neither
    assert 0.1 < w < 0.2


@settings(max_examples=60, deadline=None)
@given(a1=st.floats(0, 179), width=st.floats(0.5, 60), blc=st.floats(0, 89),
       extra=st.floats(0, 30))
def test_weights_sum_to_one_per_bin(a1, width, blc, extra):
    a2 = min(a1 + width, 180.0)
    dlc = min(blc + extra, 90.0)
    ranges = [(0, blc), (180 - blc, 180), (blc, dlc), (180 - dlc, 180 - blc), (dlc, 180 - dlc)]
    total = sum(band_weights(a1, a2, r1, r2) for r1, r2 in ranges)
    assert total == pytest.approx(1.0, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(looks=st.lists(st.tuples(st.floats(0, 180), st.floats(1, 90)), min_size=1, max_size=4),
       cuts=st.lists(st.floats(0, 180), min_size=1, max_size=4))
def test_look_solid_angles_of_a_partition_add_up_to_the_union_of_the_bands(looks, cuts):
    # the ranges of a partition of [0, 180] share out the union of the swept bands once
    # (no pitch angle counted twice); the union's solid angle is summed here from the
    # merged intervals, 2 pi (cos a1 - cos a2) each (spherical geometry)
    axis = np.array([a for a, _ in looks])
    half = np.array([h for _, h in looks])
    edges = np.concatenate([[0.0], np.sort(cuts), [180.0]])
    parts = sum(look_solid_angles(axis, half, r1, r2).sum()
                for r1, r2 in zip(edges[:-1], edges[1:]))
    bands = sorted(zip(np.maximum(axis - half, 0), np.minimum(axis + half, 180)))
    union, (lo, hi) = 0.0, bands[0]
    for a1, a2 in bands[1:]:
        if a1 > hi:
            union += band_solid_angle(lo, hi)
            lo, hi = a1, a2
        else:
            hi = max(hi, a2)
    union += band_solid_angle(lo, hi)
    assert float(parts) == pytest.approx(float(union), rel=1e-9, abs=1e-12)


def test_look_solid_angles_is_sensitive_to_the_half_angle():
    # nudge: a 0.1-degree change of the half-angle changes the split measurably
    a = look_solid_angles([20.0], [15.0], 0.0, 10.0)[0]
    b = look_solid_angles([20.0], [15.1], 0.0, 10.0)[0]
    assert abs(a - b) > 1e-4


def test_nan_propagates():
    assert np.isnan(band_weights(np.nan, 10, 0, 5))
    # a look without a pitch angle samples nothing
    assert look_solid_angles([np.nan, 30.0], [10.0, 10.0], 0.0, 180.0).tolist()[0] == 0.0
