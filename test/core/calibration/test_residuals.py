"""Residuals before and after: the rear-axle kinematic yaw rate against commonroad's."""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinematic_monitor.core.calibration.residuals import kinematic_rate, residual


def test_kinematic_rate_is_commonroads_rear_axle_yaw_rate() -> None:
    # commonroad-vehicle-models vehicle_dynamics_ks (rear-axle reference): the yaw-rate
    # component of the state derivative is v / l_wb * tan(delta); own parameter values
    from vehiclemodels.utils.longitudinal_parameters import LongitudinalParameters
    from vehiclemodels.utils.steering_parameters import SteeringParameters
    from vehiclemodels.vehicle_dynamics_ks import vehicle_dynamics_ks
    from vehiclemodels.vehicle_parameters import VehicleParameters

    p = VehicleParameters(a=1.2, b=1.6,
                          steering=SteeringParameters(min=-1.0, max=1.0, v_min=-1, v_max=1),
                          longitudinal=LongitudinalParameters(v_min=-10, v_max=50, v_switch=20,
                                                              a_max=5))
    for v, delta in ((10.0, 0.0872665), (5.0, 0.5235988), (20.0, -0.0349066)):
        ref = vehicle_dynamics_ks([0.0, 0.0, delta, v, 0.3], [0.0, 0.0], p)[4]
        got = kinematic_rate(np.array([delta]), np.array([v]), 2.8, 0.0, np.array([0.0]))[0]
        assert got == pytest.approx(ref, rel=1e-12)
    # understeer: the prediction uses delta - K a_y (vehicle.understeer_gradient)
    got = kinematic_rate(np.array([0.1]), np.array([10.0]), 2.7, 0.004, np.array([3.0]))[0]
    assert got == pytest.approx(10.0 * math.tan(0.1 - 0.012) / 2.7, rel=1e-12)


def test_mean_and_rms() -> None:
    r = residual("x", "m", np.array([1.0, -1.0, 3.0]), np.array([0.0, 0.0, 0.3]))
    assert (r.mean_before, r.mean_after) == (1.0, pytest.approx(0.1))
    assert r.rms_before == pytest.approx(math.sqrt(11.0 / 3.0))
    assert r.rms_after == pytest.approx(math.sqrt(0.09 / 3.0))
