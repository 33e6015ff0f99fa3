"""Tests for retina.eye.pose: Euler convention, head-frame field, yaw derivative, head scans."""

import math

import numpy as np
import pytest

from retina.errors import InputError
from retina.eye.field import Field
from retina.eye.pose import (Pose, head_field, head_field_dyaw, headings, pose_rotation,
                             poses_from_arrays, yaw_sweep)


def _rz(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[c, -s, 0], [s, c, 0], [0, 0, 1.0]])


def _ry(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[c, 0, s], [0, 1.0, 0], [-s, 0, c]])


def _rx(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[1.0, 0, 0], [0, c, -s], [0, s, c]])


def test_pose_matches_hand_built_zyx_product():
    # Derived: intrinsic z-y-x Euler angles give R = Rz(yaw) Ry(pitch) Rx(roll) (a cross-check of
    # the scipy call against explicit matrices).
    y, p, r = 37.0, -12.0, 25.0
    M = _rz(math.radians(y)) @ _ry(math.radians(p)) @ _rx(math.radians(r))
    np.testing.assert_allclose(pose_rotation(y, p, r).as_matrix(), M, atol=1e-14)


def test_angle_senses():
    # Derived from the convention (x forward, y right, z down; NED world):
    # yaw 90 = facing east; pitch +30 = nose up; roll 90 = right wing/side down.
    np.testing.assert_allclose(pose_rotation(90).apply([1, 0, 0]), [0, 1, 0], atol=1e-15)
    nose = pose_rotation(0, 30).apply([1, 0, 0])
    assert nose[2] < 0 and nose[0] > 0  # up is -z
    np.testing.assert_allclose(pose_rotation(0, 0, 90).apply([0, 1, 0]), [0, 0, 1], atol=1e-15)


def test_facing_magnetic_north_field_points_forward_and_down():
    # Common practice, no source (design brief): a head facing magnetic north in the northern
    # hemisphere sees the field pointing forward and down.
    f = Field(48.0, 66.0, 4.0)
    b = head_field(Pose(yaw_deg=4.0).rotation, f.vector)[0]
    assert b[0] > 0 and b[2] > 0 and abs(b[1]) < 1e-12
    # Derived: in the vertical plane, at the inclination below the beak.
    assert math.degrees(math.atan2(b[2], b[0])) == pytest.approx(66.0, abs=1e-10)
    # Derived: facing east, magnetic north (declination 0) is on the bird's left (-y).
    b = head_field(pose_rotation(90.0), Field(48.0, 66.0, 0.0).vector)[0]
    assert b[1] < 0 and abs(b[0]) < 1e-12
    # Derived: pitching the nose down by the inclination points the beak along the field.
    b = head_field(pose_rotation(4.0, -66.0), f.vector)[0]
    np.testing.assert_allclose(b, [1, 0, 0], atol=1e-12)


def test_head_field_is_a_unit_vector_batch():
    R = pose_rotation(np.arange(0, 360, 45.0), 10.0, -5.0)
    b = head_field(R, [1e-5, 2e-5, 4e-5])
    assert b.shape == (8, 3)
    np.testing.assert_allclose(np.linalg.norm(b, axis=1), 1.0, rtol=1e-14)


def test_dyaw_matches_central_difference():
    # Reference: central finite difference in yaw, h = 1e-5 rad (error ~ h^2 = 1e-10).
    rng = np.random.default_rng(4)
    yaw = rng.uniform(-180, 180, 20)
    pitch = rng.uniform(-80, 80, 20)
    roll = rng.uniform(-180, 180, 20)
    bw = Field(50.0, 62.0, 7.0).vector
    h = 1e-5
    an = head_field_dyaw(pose_rotation(yaw, pitch, roll), bw)
    hd = math.degrees(h)
    fd = (head_field(pose_rotation(yaw + hd, pitch, roll), bw)
          - head_field(pose_rotation(yaw - hd, pitch, roll), bw)) / (2 * h)
    np.testing.assert_allclose(an, fd, atol=1e-9)
    # Derived: the derivative of a unit vector is tangential.
    b = head_field(pose_rotation(yaw, pitch, roll), bw)
    np.testing.assert_allclose(np.sum(an * b, axis=1), 0.0, atol=1e-14)


def test_yaw_sweep_shape_speed_and_count():
    s = yaw_sweep(30.0, 20.0, count=3, speed_deg_s=40.0, rate_hz=50.0)
    # Derived: a triangle scan of amplitude A at speed v lasts 4 A / v = 2 s; 3 scans = 6 s.
    assert s.times_s[-1] == pytest.approx(6.0)
    assert len(s) == 301
    assert s.yaw_deg.max() == pytest.approx(50.0) and s.yaw_deg.min() == pytest.approx(10.0)
    np.testing.assert_allclose(np.abs(np.diff(s.yaw_deg)) * 50.0, 40.0, atol=1e-9)
    assert s.yaw_deg[0] == pytest.approx(30.0) and s.yaw_deg[-1] == pytest.approx(30.0)
    assert len(s.rotations) == len(s)
    # pitch as a function of time
    s2 = yaw_sweep(0.0, 10.0, pitch_deg=lambda t: 5 * np.sin(t), rate_hz=10.0)
    np.testing.assert_allclose(s2.pitch_deg, 5 * np.sin(s2.times_s))


def test_headings_and_arrays():
    h = headings(8, start_deg=10.0)
    np.testing.assert_allclose(h.yaw_deg, 10.0 + 45.0 * np.arange(8))
    p = poses_from_arrays([0.0, 90.0], 5.0, 0.0)
    assert p.poses[1] == Pose(90.0, 5.0, 0.0)


def test_bad_input():
    with pytest.raises(InputError) as e:
        pose_rotation(0.0, 120.0)
    assert e.value.key == "pitch_deg"
    with pytest.raises(InputError):
        yaw_sweep(0.0, -5.0)
    with pytest.raises(InputError):
        yaw_sweep(0.0, 5.0, count=0)
    with pytest.raises(InputError):
        head_field(pose_rotation(0.0), [0.0, 0.0, 0.0])
    with pytest.raises(InputError):
        head_field("north", [1.0, 0, 0])
