"""Pitch angle and gyrophase of look directions (beltkit.pad.look_pitch_angle, gyrophase).

References: the pitch angle is the angle between the particle velocity and B (common
practice); the particles that enter a detector move along minus its boresight (the
arrival convention of docs/conventions.md section 4, common practice). The independent
computations below use scipy.spatial.transform.Rotation (rotation invariance, explicit
rotations of a known configuration) and the arc cosine of normalised dot products in
numpy's extended precision (a different formula from the atan2 of the code).
"""

import numpy as np
import pytest
import xarray as xr
from scipy.spatial.transform import Rotation

from beltkit.errors import PhysicsError
from beltkit.field import convert
from beltkit.field.coords import FRAMES
from beltkit.pad import gyrophase, look_pitch_angle


def _acos_pitch(look, b):
    """Independent: 180 - angle(look, B) from arccos of the normalised dot (longdouble)."""
    lo = np.asarray(look, np.longdouble)
    bb = np.asarray(b, np.longdouble)
    c = np.sum(lo * bb, -1) / np.sqrt(np.sum(lo * lo, -1) * np.sum(bb * bb, -1))
    return 180.0 - np.degrees(np.arccos(np.clip(c, -1, 1)).astype(float))


def test_random_vectors_against_arccos_and_rotation_invariance():
    rng = np.random.default_rng(1)
    look = rng.normal(size=(500, 3)) * rng.uniform(0.1, 50.0, (500, 1))
    b = rng.normal(size=(500, 3)) * 3e4
    got = look_pitch_angle(look, b)
    np.testing.assert_allclose(got, _acos_pitch(look, b), atol=1e-9)
    rot = Rotation.random(500, random_state=2)  # any common rotation leaves the angle alone
    np.testing.assert_allclose(look_pitch_angle(rot.apply(look), rot.apply(b)), got, atol=1e-9)


def test_field_aligned_beam_arrival_convention():
    # a beam moving along +B (pitch angle 0) enters the detector whose boresight points
    # against B: the look along -B sees pitch angle 0, the look along +B sees 180
    b = np.array([0.3, -0.2, 0.9]) * 400.0
    assert look_pitch_angle(-b, b) == pytest.approx(0.0, abs=1e-6)
    assert look_pitch_angle(b, b) == pytest.approx(180.0, abs=1e-6)
    # a detector tilted 10 deg from -B (rotation about an axis perpendicular to B)
    perp = np.cross(b, [1.0, 0.0, 0.0])
    tilted = Rotation.from_rotvec(np.radians(10.0) * perp / np.linalg.norm(perp)).apply(-b)
    assert look_pitch_angle(tilted, b) == pytest.approx(10.0, abs=1e-9)
    # nudge: without the sign flip (pitch = angle(look, B)) the answer would be 170
    assert abs(look_pitch_angle(tilted, b) - 170.0) > 100


def test_nan_and_zero_vectors_give_nan_and_broadcasting():
    b = np.array([[0.0, 0.0, 1.0], [0.0, 0.0, 0.0], [np.nan, 0, 1]])
    out = look_pitch_angle(np.array([[1.0, 0, 0]]), b)
    assert out[0] == pytest.approx(90.0) and np.isnan(out[1]) and np.isnan(out[2])
    looks = np.random.default_rng(3).normal(size=(4, 5, 3))
    assert look_pitch_angle(looks, [0.0, 0.0, 1.0]).shape == (4, 5)
    with pytest.raises(PhysicsError, match="length 3"):
        look_pitch_angle([1.0, 0.0], [0.0, 0.0, 1.0])


@pytest.mark.parametrize("look_frame", FRAMES)
def test_all_frames_convert_supports(look_frame):
    # the look in one frame, the field in GEO: the field is rotated first; the reference is
    # both vectors converted to GEO with beltkit.field.convert and the arccos formula
    rng = np.random.default_rng(4)
    time = np.datetime64("2027-03-08T00:00", "ns") + np.arange(6) * np.timedelta64(4, "h")
    look = rng.normal(size=(6, 3))
    b_geo = rng.normal(size=(6, 3)) * 1e4
    got = look_pitch_angle(look, b_geo, look_frame=look_frame, b_frame="GEO", time=time)
    look_geo = convert(look, time, look_frame, "GEO")
    np.testing.assert_allclose(got, _acos_pitch(look_geo, b_geo), atol=1e-8)
    for b_frame in FRAMES:  # and the field in every frame, the look in look_frame
        b_f = convert(b_geo, time, "GEO", b_frame)
        again = look_pitch_angle(look, b_f, look_frame=look_frame, b_frame=b_frame, time=time)
        np.testing.assert_allclose(again, got, atol=1e-8)
    if look_frame != "GEO":  # nudge: ignoring the frames gives another angle
        assert np.max(np.abs(look_pitch_angle(look, b_geo) - got)) > 1.0


def test_dataarrays_with_frame_attributes():
    time = np.datetime64("2027-03-09T06:00", "ns") + np.arange(3) * np.timedelta64(1, "h")
    rng = np.random.default_rng(5)
    look = xr.DataArray(rng.normal(size=(3, 4, 3)), dims=("time", "sector", "xyz"),
                        coords={"time": time}, attrs={"frame": "GSM"})
    b = xr.DataArray(rng.normal(size=(3, 3)), dims=("time", "xyz"), coords={"time": time},
                     attrs={"frame": "SM", "units": "nT"})
    out = look_pitch_angle(look, b)
    assert out.dims == ("time", "sector") and out.attrs["units"] == "degree"
    b_gsm = convert(b.values, time, "SM", "GSM")
    want = _acos_pitch(look.values, b_gsm[:, None, :])
    np.testing.assert_allclose(out.values, want, atol=1e-8)


def test_gyrophase_against_explicit_rotation():
    # B along z, reference x: a particle moving along (cos p, sin p, cot) has gyrophase p
    # (right-handed about B); the detector looks along minus the velocity. Then the whole
    # configuration is turned by random rotations (scipy), which must not change it.
    p = np.radians(np.array([0.0, 30.0, 135.0, 200.0, 315.0]))
    v = np.stack([np.cos(p), np.sin(p), np.full_like(p, 0.4)], -1)
    look = -v
    b = np.array([0.0, 0.0, 2.0])
    ref = np.array([3.0, 0.0, 1.0])  # its projection perpendicular to B is +x
    np.testing.assert_allclose(gyrophase(look, b, ref), np.degrees(p), atol=1e-9)
    rot = Rotation.random(random_state=6)
    turned = gyrophase(rot.apply(look), rot.apply(b), rot.apply(ref))
    assert np.all((turned >= 0) & (turned < 360))
    np.testing.assert_allclose((turned - np.degrees(p) + 180.0) % 360.0 - 180.0, 0.0,
                               atol=1e-9)
    # along B, or a reference parallel to B: undefined
    assert np.isnan(gyrophase(-b, b, ref)) and np.isnan(gyrophase(look[0], b, b))
