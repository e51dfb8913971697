"""IMU yaw misalignment: its accelerations against those implied by the localisation twist.

The IMU of test/fixtures/calibration.py measures the rigid-body acceleration of its point,
(a_x - x r^2, a_y + x dr/dt) (rigid-body kinematics [C], REALISM.md), in axes yawed by phi
counter-clockwise (REP 103); the rotation is checked against transforms3d here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fixtures.calibration import (
    Imperfections,
    ImuSpec,
    config,
    make_drive,
    mounted,
    simulated_drive,
)
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.samples import ImuSample


def test_fixture_rotation_is_a_counter_clockwise_mounting_yaw() -> None:
    # transforms3d.euler.euler2mat(0, 0, phi) is the IMU axes in body axes (yaw about z);
    # a body vector seen in the IMU axes is R^T a
    from transforms3d.euler import euler2mat

    phi = math.radians(1.5)
    R = euler2mat(0.0, 0.0, phi)
    a = np.array([1.2, -0.4, 0.0])
    mx, my = mounted(np.array([a[0]]), np.array([a[1]]), np.zeros(1), np.zeros(1), phi, 0.0)
    np.testing.assert_allclose([mx[0], my[0]], (R.T @ a)[:2], rtol=0, atol=1e-15)
    # forward acceleration alone: the IMU, turned to the left, reads it partly to its right
    _, my = mounted(np.array([1.0]), np.zeros(1), np.zeros(1), np.zeros(1), phi, 0.0)
    assert my[0] == pytest.approx(-math.sin(phi))


def test_yaw_recovered_with_lever_arm_and_accelerometer_bias() -> None:
    phi = math.radians(1.0)  # REALISM.md [M]: the IMU yaw axis can be misaligned by ~1 deg
    spec = ImuSpec(yaw=phi, lever_x=0.8, accel_bias=(0.06, -0.09))
    res = cal.calibrate(make_drive(1, 300.0, imu=spec), config(), seed=1)
    e = res.estimates[cal.IMU_YAW]
    assert e.observable and not e.is_parameter and e.unit == "rad"
    assert abs(e.value - phi) < 4 * e.uncertainty
    assert abs(math.degrees(e.value - phi)) < 0.1


def test_yaw_errors_cover_truth_over_seeds() -> None:
    # |error| < 1.96 SE in >= 17 of 20 seeds (binomial: P(X <= 16 | p = 0.95) = 1.6 %,
    # scipy.stats.binom.cdf(16, 20, 0.95))
    rng = np.random.default_rng(11)
    hits = 0
    for seed in range(20):
        phi = math.radians(rng.uniform(-1.5, 1.5))
        spec = ImuSpec(yaw=phi, lever_x=rng.uniform(0.0, 1.0))
        res = cal.calibrate(make_drive(300 + seed, 80.0, imu=spec), config(),
                            cal.SelectionRules(min_usable=30.0), seed=seed, n_boot=100)
        e = res.estimates[cal.IMU_YAW]
        hits += abs(e.fitted - phi) < 1.96 * e.uncertainty
    assert hits >= 17


def test_accelerations_that_do_not_follow_the_vehicle() -> None:
    # an IMU whose accelerometer reads only noise (a dead axis pair): gains near 0
    drive = [ImuSample(s.stamp, s.yaw_rate, 0.0, 0.0) if isinstance(s, ImuSample) else s
             for s in make_drive(2, 120.0, imu=ImuSpec())]
    e = cal.calibrate(drive, config(), seed=2).estimates[cal.IMU_YAW]
    assert not e.observable and e.value == 0.0
    assert e.reason.startswith("the IMU accelerations do not follow the localisation's")


def test_no_lateral_excitation_leaves_the_yaw_unobservable() -> None:
    drive = make_drive(3, 120.0, straight=True, constant_speed=10.0,
                       imu=ImuSpec(yaw=math.radians(1.0)))
    e = cal.calibrate(drive, config(), seed=3).estimates[cal.IMU_YAW]
    assert not e.observable and e.value == 0.0
    assert e.reason.startswith(("standard error", "correlation", "condition number")), e.reason


@pytest.mark.slow
def test_simulated_mounting_yaw() -> None:
    # the dynamic simulator's CG accelerations, IMU yawed by -1.2 deg, 0.8 m ahead of the CG
    phi = math.radians(-1.2)
    imp = Imperfections(imu_yaw=phi, imu_lever_x=0.8, accel_bias=(0.05, -0.05))
    samples, cfg, _ = simulated_drive(12, 240.0, imperfect=imp)
    e = cal.calibrate(samples, cfg, cal.SelectionRules(min_usable=60.0),
                      seed=12).estimates[cal.IMU_YAW]
    assert e.observable and abs(e.value - phi) < 4 * e.uncertainty, e
