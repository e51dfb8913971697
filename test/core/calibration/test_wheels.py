"""Wheel-speed scales of the axles.

Truth: each wheel centre moves with the rigid body, (vx - r p_y, vy + r p_x) at body
position (p_x, p_y) from the CG (planar rigid-body kinematics, REP 103 axes); kinematic
drives from test/fixtures/calibration.py.
"""

from __future__ import annotations

import math

import numpy as np

from fixtures.calibration import config, make_drive
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.calibration.alignment import align
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.calibration.wheels import ground_speeds
from kinematic_monitor.core.samples import ChassisSample, LocalizationSample


def test_axle_scales_recover_the_file_radius_error() -> None:
    # the wheel radius in the file 2 % small: true effective radius 1/0.98 of it;
    # acceptance of the calibration issue +-0.2 %, and within 4 standard errors
    scale = 1.0 / 0.98
    res = cal.calibrate(make_drive(1, 300.0, offset=-0.0175, scale=scale, K=0.0035), config(),
                        seed=1)
    e_sc = res.estimates["vehicle.wheel_speed_scale"]
    assert e_sc.observable and abs(e_sc.value / scale - 1.0) < 0.002
    assert abs(e_sc.value - scale) < 4 * e_sc.uncertainty
    front = res.estimates["front_wheel_speed_scale"]
    assert abs(front.value - scale) < 4 * front.uncertainty
    speed = res.residuals[1]
    assert abs(speed.mean_after) < 0.2 * abs(speed.mean_before)


def test_wheel_centre_ground_speeds() -> None:
    # vx = 10 m/s, r = 0.5 rad/s, vy_cg = 0.675 m/s (l_r r), track 1.55 m, l_f 1.35 m [C]:
    # rear left 10 - 0.5 * 0.775, rear right 10 + 0.5 * 0.775; front wheels at the vector
    # magnitude |(10 -+ 0.3875, 0.675 + 0.675)|
    samples: list[object] = []
    for k in range(300):
        t = 0.01 * k
        samples.append(ChassisSample(t, steer=0.0, wheel_rear_left=1.0, wheel_rear_right=1.0))
        if k % 2 == 0:
            samples.append(LocalizationSample(t, 10 * t, 0.0, 0.5 * t, vx=10.0, vy=0.675,
                                              yaw_rate=0.5))
    d = align(samples, config().vehicle, 0.0, SelectionRules(), 0)
    assert d is not None
    g = ground_speeds(d, config().vehicle, 1.35)[50:-50]
    np.testing.assert_allclose(g[:, 2], 10 - 0.3875, atol=1e-9)
    np.testing.assert_allclose(g[:, 3], 10 + 0.3875, atol=1e-9)
    np.testing.assert_allclose(g[:, 0], math.hypot(10 - 0.3875, 1.35), atol=1e-9)
    np.testing.assert_allclose(g[:, 1], math.hypot(10 + 0.3875, 1.35), atol=1e-9)
