"""l_r from the lateral velocity at the CG (rear axle without lateral velocity, Rajamani
2012, kinematic model, from memory for the section), on drives from test/fixtures."""

from __future__ import annotations

import math

from fixtures.calibration import config, make_drive
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.samples import LocalizationSample

NAME = "vehicle.cg_to_rear_axle"


def test_cg_position_recovered_when_excited() -> None:
    drive = make_drive(5, 300.0, wheelbase=2.76, lr=1.45, curv=(0.02, 0.01), pair=False)
    res = cal.calibrate(drive, config(), cal.SelectionRules(max_lateral_accel=3.0), seed=5)
    lr = res.estimates[NAME]
    assert lr.observable, lr.reason
    assert abs(lr.value - 1.45) < max(4 * lr.uncertainty, 0.01)


def test_straight_drive_leaves_it_unobservable() -> None:
    e = cal.calibrate(make_drive(3, 120.0, straight=True), config(), seed=3).estimates[NAME]
    assert not e.observable and e.value == e.prior == 1.35 and e.reason


def test_without_lateral_velocity_or_when_not_asked() -> None:
    pose_vx = [LocalizationSample(s.stamp, s.x, s.y, s.yaw, s.vx, math.nan, s.yaw_rate)
               if isinstance(s, LocalizationSample) else s for s in make_drive(6, 120.0)]
    e = cal.calibrate(pose_vx, config(), seed=6).estimates[NAME]
    assert not e.observable
    e = cal.calibrate(make_drive(6, 120.0), config(), seed=6, fit_cg=False).estimates[NAME]
    assert (e.observable, e.reason) == (False, "not fitted")


def test_fitted_value_outside_the_wheelbase_is_kept() -> None:
    # a localisation whose lateral velocity says the CG sits behind the rear axle
    # (l_r = -0.5 m): implausible, the input value stays
    drive = make_drive(9, 200.0, lr=-0.5, curv=(0.02, 0.01), pair=False)
    e = cal.calibrate(drive, config(), cal.SelectionRules(max_lateral_accel=3.0),
                      seed=9).estimates[NAME]
    assert not e.observable and e.value == 1.35
    assert "outside (0, wheelbase)" in e.reason and e.fitted < 0.0
