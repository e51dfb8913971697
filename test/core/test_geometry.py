"""Tests of the planar geometry helpers against transforms3d and REP 103 conventions."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from transforms3d.euler import euler2quat, quat2euler

from kinematic_monitor.core.geometry import (
    angle_diff,
    quaternion_to_yaw,
    rotate_to_body,
    wrap_angle,
    yaw_to_quaternion,
)

angles = st.floats(min_value=-20.0, max_value=20.0, allow_nan=False)


@given(angles)
def test_yaw_to_quaternion_matches_transforms3d(yaw):
    # transforms3d.euler.euler2quat(roll, pitch, yaw, 'sxyz') returns (w, x, y, z)
    w, x, y, z = euler2quat(0.0, 0.0, yaw, "sxyz")
    qx, qy, qz, qw = yaw_to_quaternion(yaw)
    # q and -q are the same rotation
    sign = 1.0 if qw * w + qz * z >= 0 else -1.0
    np.testing.assert_allclose([qx, qy, qz, qw], sign * np.array([x, y, z, w]), atol=1e-12)


@given(
    st.floats(min_value=-1.2, max_value=1.2),
    st.floats(min_value=-1.2, max_value=1.2),
    st.floats(min_value=-math.pi, max_value=math.pi),
    st.floats(min_value=0.1, max_value=10.0),
)
def test_quaternion_to_yaw_matches_transforms3d_with_roll_and_pitch(roll, pitch, yaw, scale):
    w, x, y, z = euler2quat(roll, pitch, yaw, "sxyz")
    # yaw of the ZYX (static xyz) decomposition, transforms3d.euler.quat2euler as reference;
    # the helper accepts non-normalised quaternions
    expected = quat2euler((w, x, y, z), "sxyz")[2]
    got = quaternion_to_yaw(scale * x, scale * y, scale * z, scale * w)
    assert angle_diff(got, expected) == pytest.approx(0.0, abs=1e-9)


def test_quaternion_to_yaw_rejects_zero_and_nan():
    with pytest.raises(ValueError, match="quaternion"):
        quaternion_to_yaw(0.0, 0.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="quaternion"):
        quaternion_to_yaw(0.0, 0.0, float("nan"), 1.0)


@given(angles)
def test_wrap_angle_range_and_equivalence(a):
    w = wrap_angle(a)
    assert -math.pi <= w < math.pi
    # same direction: equal cosine and sine (definition of angle equivalence mod 2 pi)
    assert math.cos(w) == pytest.approx(math.cos(a), abs=1e-9)
    assert math.sin(w) == pytest.approx(math.sin(a), abs=1e-9)


def test_angle_diff_across_pi():
    assert angle_diff(-math.pi + 0.01, math.pi - 0.01) == pytest.approx(0.02)
    assert angle_diff(math.pi - 0.01, -math.pi + 0.01) == pytest.approx(-0.02)


def test_rotate_to_body_rep103():
    # REP 103: heading +90 deg (facing +y); a map +y vector is straight ahead (+x body),
    # a map -x vector is to the left (+y body)
    assert rotate_to_body(0.0, 1.0, math.pi / 2) == pytest.approx((1.0, 0.0))
    assert rotate_to_body(-1.0, 0.0, math.pi / 2) == pytest.approx((0.0, 1.0))
