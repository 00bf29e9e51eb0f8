"""Virtual IMU and head orientation against analytic cases."""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.sim import (
    STANDARD_GRAVITY,
    ImuNoise,
    head_orientation,
    imu,
    imus,
    joint_derivatives,
    load_robot,
    parse_robot,
)

ROBOT = load_robot("torso-e1")

# A one-joint turntable: a vertical axis at the origin, a site 0.2 m out along x.
TURNTABLE = parse_robot("""
name: turntable
units: {length: m, angle: rad, velocity: rad/s, acceleration: rad/s^2}
base: base
joints:
  spin:
    parent: base
    child: plate
    axis: [0, 0, 1]
    limits: {lower: -1000, upper: 1000, velocity: 100, acceleration: 100}
sites:
  left_wrist: {link: plate, xyz: [0.2, 0, 0]}
  right_wrist: {link: plate, xyz: [-0.2, 0, 0]}
  head: {link: plate, xyz: [0, 0, 0.1]}
  chest: {link: base}
""", source="turntable")


def test_rest_reads_standard_gravity_up():
    """At rest an accelerometer whose z axis points up reads +g0 on z, with
    g0 = 9.80665 m/s^2 (3rd CGPM 1901), and the gyroscope reads zero."""
    t = np.arange(50) / 100.0
    q = np.zeros((50, 12))
    for site in ROBOT.site_names:  # all site frames of torso-e1 are upright at q = 0
        acc, gyro = imu(ROBOT, t, q, site)
        np.testing.assert_allclose(acc, np.tile([0, 0, STANDARD_GRAVITY], (50, 1)), atol=1e-12)
        np.testing.assert_allclose(gyro, 0, atol=1e-12)


def test_rest_tilted_sensor_reads_gravity_in_its_frame():
    """Left arm abducted 90 deg: the wrist frame is the base frame turned +90 deg
    about x, so the up direction (0, 0, 1) of the base is (0, 1, 0) in the wrist
    frame (R_x(90 deg)^T e_z = e_y) and the accelerometer reads (0, +g0, 0)."""
    t = np.arange(20) / 100.0
    q = np.zeros((20, 12))
    q[:, ROBOT.joint_index("left_shoulder_abduction")] = np.pi / 2
    acc, _ = imu(ROBOT, t, q, "left_wrist")
    np.testing.assert_allclose(acc, np.tile([0, STANDARD_GRAVITY, 0], (20, 1)), atol=1e-12)


@pytest.mark.parametrize("omega", [0.5, 2.0, -3.0])
def test_constant_rate_centripetal(omega):
    """A site at r = 0.2 m on a plate turning at constant rate omega reads the
    centripetal acceleration omega^2 r toward the axis (-x in the site frame,
    textbook uniform circular motion), gravity +g0 on z, and gyro (0, 0, omega).
    q = omega t is a cubic polynomial, so the spline derivatives are exact."""
    t = np.linspace(0.0, 3.0, 301)
    q = (omega * t)[:, None]
    acc, gyro = imu(TURNTABLE, t, q, "left_wrist")
    expected = np.tile([-omega**2 * 0.2, 0.0, STANDARD_GRAVITY], (len(t), 1))
    np.testing.assert_allclose(acc, expected, atol=1e-9)
    np.testing.assert_allclose(gyro, np.tile([0, 0, omega], (len(t), 1)), atol=1e-9)
    # on the axis (head site, 0.1 m up on the axis): no centripetal term
    acc_axis, _ = imu(TURNTABLE, t, q, "head")
    np.testing.assert_allclose(acc_axis, np.tile([0, 0, STANDARD_GRAVITY], (len(t), 1)),
                               atol=1e-9)


def test_angular_acceleration_tangential():
    """With q = a t^2 / 2 the site reads tangential a r on +y and centripetal
    (a t)^2 r on -x (rigid-body kinematics, uniform angular acceleration)."""
    a = 1.5
    t = np.linspace(0.0, 2.0, 201)
    q = (0.5 * a * t**2)[:, None]
    acc, gyro = imu(TURNTABLE, t, q, "left_wrist")
    np.testing.assert_allclose(acc[:, 1], a * 0.2, atol=1e-9)
    np.testing.assert_allclose(acc[:, 0], -((a * t) ** 2) * 0.2, atol=1e-9)
    np.testing.assert_allclose(gyro[:, 2], a * t, atol=1e-9)


def test_spline_derivatives_converge():
    """Spline derivatives of sin(t) approach cos(t) and -sin(t) with errors of order
    h^3 and h^2 (Hall & Meyer 1976): halving h cuts the qd error by about 8 in the
    interior and qdd error by at least about 4."""
    errs = []
    for n in (101, 201):
        t = np.linspace(0, 2 * np.pi, n)
        qd, qdd = joint_derivatives(t, np.sin(t)[:, None])
        inner = slice(n // 4, 3 * n // 4)
        errs.append((np.max(np.abs(qd[inner, 0] - np.cos(t[inner]))),
                     np.max(np.abs(qdd[:, 0] + np.sin(t)))))
    assert errs[0][0] / errs[1][0] > 6
    assert errs[0][1] / errs[1][1] > 3.5
    assert errs[1][0] < 1e-6 and errs[1][1] < 1e-3


def test_imus_equal_imu():
    """The multi-site call gives the same readings as one call per site."""
    rng = np.random.default_rng(3)
    t = np.arange(200) / 100.0
    q = ROBOT.rest + 0.3 * np.sin(np.outer(t, rng.uniform(1, 3, 12)))
    both = imus(ROBOT, t, q)
    for site in ROBOT.site_names:
        acc, gyro = imu(ROBOT, t, q, site)
        np.testing.assert_array_equal(both[site][0], acc)
        np.testing.assert_array_equal(both[site][1], gyro)


def test_noise_statistics_and_seeding():
    """White noise of density N sampled at f_s has standard deviation N sqrt(f_s)
    (Woodman 2007); the bias shifts the mean; the same seed repeats the draw."""
    t = np.arange(20000) / 100.0
    q = np.zeros((len(t), 12))
    noise = ImuNoise(acc_noise_density=0.002, gyro_noise_density=0.0005,
                     acc_bias=(0.1, 0.0, 0.0), gyro_bias=(0.0, 0.0, -0.01))
    acc, gyro = imu(ROBOT, t, q, "chest", noise=noise, rng=np.random.default_rng(7))
    np.testing.assert_allclose(acc.std(axis=0), 0.002 * 10, rtol=0.03)
    np.testing.assert_allclose(gyro.std(axis=0), 0.0005 * 10, rtol=0.03)
    np.testing.assert_allclose(acc.mean(axis=0), [0.1, 0, STANDARD_GRAVITY], atol=1e-3)
    np.testing.assert_allclose(gyro.mean(axis=0), [0, 0, -0.01], atol=1e-4)
    acc2, _ = imu(ROBOT, t, q, "chest", noise=noise, rng=np.random.default_rng(7))
    np.testing.assert_array_equal(acc, acc2)
    with pytest.raises(ValueError, match="rng"):
        imu(ROBOT, t, q, "chest", noise=noise)
    with pytest.raises(ValueError):
        ImuNoise(acc_noise_density=-1.0)


def test_bad_time_base():
    with pytest.raises(ValueError, match="increase"):
        imu(ROBOT, np.array([0.0, 0.1, 0.1]), np.zeros((3, 12)), "head")
    with pytest.raises(ValueError, match="shape"):
        imu(ROBOT, np.arange(3.0), np.zeros((4, 12)), "head")


def test_head_orientation_signs():
    """Neck rotation alone is pure yaw, neck flexion alone pure pitch (z-y'-x''), and
    the quaternion of a yaw psi is (cos psi/2, 0, 0, sin psi/2) (Diebel 2006)."""
    q = np.zeros((2, 12))
    q[0, ROBOT.joint_index("neck_rotation")] = 0.4
    q[1, ROBOT.joint_index("neck_flexion")] = -0.2
    hp = head_orientation(ROBOT, q)
    np.testing.assert_allclose(hp.yaw, [0.4, 0], atol=1e-12)
    np.testing.assert_allclose(hp.pitch, [0, -0.2], atol=1e-12)
    np.testing.assert_allclose(hp.roll, [0, 0], atol=1e-12)
    np.testing.assert_allclose(hp.quaternion[0], [np.cos(0.2), 0, 0, np.sin(0.2)], atol=1e-12)
    assert hp.quaternion.shape == (2, 4)
