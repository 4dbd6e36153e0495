"""Solid-angle geometry of bins and telescope fields of view against outside references."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from beltkit.pad import (
    band_overlap_solid_angle,
    band_solid_angle,
    band_weights,
    cap_intersection_area,
    fov_fraction,
    fov_fraction_below,
)


def _cap_overlap_quadrature(r1, r2, d):
    """Intersection of caps (radius r1 about z, r2 about an axis d away) by scipy quadrature."""
    r1, r2, d = np.radians([r1, r2, d])

    def arc(theta):  # azimuthal extent (rad) of the second cap on the circle of colatitude theta
        if np.sin(theta) * np.sin(d) == 0.0:
            return 2 * np.pi * float(np.cos(theta - d) >= np.cos(r2))
        c = (np.cos(r2) - np.cos(theta) * np.cos(d)) / (np.sin(theta) * np.sin(d))
        return 2 * np.arccos(np.clip(c, -1, 1))

    pts = [p for p in (abs(d - r2), d + r2) if 0 < p < r1]
    return integrate.quad(lambda th: np.sin(th) * arc(th), 0, r1, points=pts or None,
                          limit=200, epsabs=1e-13)[0]


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


@pytest.mark.parametrize("r1,r2,d", [(30, 20, 25), (60, 15, 70), (80, 45, 100), (10, 30, 5),
                                     (90, 30, 100), (45, 45, 90), (50, 10, 20), (5, 5, 9.9)])
def test_cap_intersection_matches_quadrature(r1, r2, d):
    # reference: direct integration over the first cap with scipy.integrate.quad
    ref = _cap_overlap_quadrature(r1, r2, d)
    assert cap_intersection_area(r1, r2, d) == pytest.approx(ref, rel=1e-9, abs=1e-12)


def test_fov_fraction_symmetry_and_containment():
    # a field of view centred at 90 deg is split in half by the 90-deg plane (symmetry)
    assert fov_fraction(90.0, 20.0, 0.0, 90.0) == pytest.approx(0.5, abs=1e-12)
    # a field of view entirely inside a range lies wholly in it
    assert fov_fraction(10.0, 20.0, 0.0, 180.0) == pytest.approx(1.0, abs=1e-12)
    assert fov_fraction(60.0, 10.0, 45.0, 75.0) == pytest.approx(1.0, abs=1e-12)
    assert fov_fraction(60.0, 10.0, 0.0, 40.0) == pytest.approx(0.0, abs=1e-12)
    # a hemispherical field of view along B: the part below r is the cap of r (spherical geometry)
    r = 23.0
    assert fov_fraction_below(0.0, 90.0, r) == pytest.approx(1 - np.cos(np.radians(r)), rel=1e-12)


@pytest.mark.parametrize("axis,half,r", [(30.0, 20.0, 25.0), (150.0, 25.0, 160.0),
                                         (95.0, 30.0, 100.0), (170.0, 15.0, 178.0)])
def test_fov_fraction_matches_quadrature(axis, half, r):
    # reference: the cap intersection by scipy quadrature over the field of view
    cap = 2 * np.pi * (1 - np.cos(np.radians(half)))
    if r <= 90:
        ref = _cap_overlap_quadrature(half, r, axis) / cap
    else:  # directions above r are those within 180 - r of the anti-field direction
        ref = 1 - _cap_overlap_quadrature(half, 180 - r, 180 - axis) / cap
    assert fov_fraction_below(axis, half, r) == pytest.approx(ref, rel=1e-9)


def test_fov_fraction_is_sensitive_to_the_half_angle():
    # nudge: a 0.1-degree change of the half-angle changes the split measurably
    a = fov_fraction_below(20.0, 15.0, 10.0)
    b = fov_fraction_below(20.0, 15.1, 10.0)
    assert abs(a - b) > 1e-4


@settings(max_examples=40, deadline=None)
@given(axis=st.floats(0, 180), half=st.floats(1, 90), cuts=st.lists(st.floats(0, 180),
                                                                     min_size=1, max_size=4))
def test_fov_fractions_of_a_partition_sum_to_one(axis, half, cuts):
    edges = np.concatenate([[0.0], np.sort(cuts), [180.0]])
    parts = fov_fraction(axis, half, edges[:-1], edges[1:])
    assert float(np.sum(parts)) == pytest.approx(1.0, abs=1e-9)


def test_nan_propagates():
    assert np.isnan(band_weights(np.nan, 10, 0, 5))
    assert np.isnan(fov_fraction(np.nan, 10, 0, 5))
