"""Sample selection and bootstrap segments on drives built in code (test/fixtures)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fixtures.calibration import config, make_drive
from kinematic_monitor.core.calibration import selection
from kinematic_monitor.core.calibration.alignment import Aligned, align
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.samples import ChassisSample, LocalizationSample

V = config().vehicle
RULES = SelectionRules()


def aligned(samples: list[object]) -> Aligned:
    d = align(samples, V, 0.0, RULES, 0)
    assert d is not None
    return d


def test_rejections_go_to_the_first_failing_rule() -> None:
    d = aligned(make_drive(1, 60.0))
    reasons: dict[str, float] = {}
    sel = selection.select(d, V, RULES, RULES.max_lateral_accel, [(1010.0, 1020.0)], reasons)
    # the excluded window (events) is 10 s; samples that fail an earlier rule there count
    # for that rule, so the window's share is at most 10 s
    assert 0.0 < reasons["excluded window (events)"] <= 10.0 + 0.02
    assert not sel[(d.t >= 1010.0) & (d.t <= 1020.0)].any()
    # every second of the drive is either selected or rejected for exactly one reason
    assert sum(reasons.values()) + float(np.sum(d.dt[sel])) == pytest.approx(float(np.sum(d.dt)))


def test_slow_and_slipping_samples_are_rejected() -> None:
    drive = make_drive(2, 60.0, constant_speed=2.0)
    reasons: dict[str, float] = {}
    sel = selection.select(aligned(drive), V, RULES, RULES.max_lateral_accel, (), reasons)
    assert not sel.any() and reasons["below minimum speed"] > 59.0
    # rear wheels spinning 10 % fast for 10 s: outside max_wheel_slip of the drive's median
    spun = [ChassisSample(s.stamp, s.steer_left, s.steer_right, s.steer,
                          s.wheel_front_left, s.wheel_front_right, 1.1 * s.wheel_rear_left,
                          1.1 * s.wheel_rear_right)
            if isinstance(s, ChassisSample) and 1020.0 <= s.stamp < 1030.0 else s
            for s in make_drive(3, 60.0)]
    reasons = {}
    d = aligned(spun)
    sel = selection.select(d, V, RULES, RULES.max_lateral_accel, (), reasons)
    assert reasons["wheel slip"] > 8.0
    assert not sel[(d.t > 1020.5) & (d.t < 1029.5)].any()


def test_segments_are_runs_cut_into_blocks() -> None:
    d = aligned(make_drive(4, 60.0, constant_speed=10.0, straight=True))
    sel = np.ones(len(d.t), bool)
    sel[(d.t > 1030.0) & (d.t < 1030.5)] = False  # a gap splits the run
    sel[(d.t > 1040.0) & (d.t < 1040.1)] = True
    sel[(d.t > 1039.0) & (d.t < 1041.0) & ~((d.t > 1040.0) & (d.t < 1040.1))] = False
    seg = selection.segments(d, sel, RULES)
    assert (seg[~sel] == -1).all()
    # the 0.1 s island is shorter than min_run: dropped
    assert (seg[(d.t > 1040.0) & (d.t < 1040.1)] == -1).all()
    ids, counts = np.unique(seg[seg >= 0], return_counts=True)
    lengths = counts * float(np.median(d.dt))
    assert (lengths <= RULES.segment_length * 1.5).all() and lengths.min() >= RULES.min_run
    assert len(ids) >= 10


def test_standstill_needs_both_localisation_and_wheels_near_zero() -> None:
    samples: list[object] = []
    for k in range(2000):
        t = 50.0 + 0.01 * k
        moving_wheels = k >= 1000  # the wheels turn while the localisation stands
        w = 1.0 if moving_wheels else 0.0
        samples.append(ChassisSample(t, steer=0.0, wheel_rear_left=w, wheel_rear_right=w))
        if k % 2 == 0:
            samples.append(LocalizationSample(t, 0.0, 0.0, 0.0, vx=0.0, vy=0.0, yaw_rate=0.0))
    d = aligned(samples)
    still = selection.standstill(d, V, RULES)
    assert still[d.t < 59.0].all()
    assert not still[d.t > 61.0].any()


def test_imu_selection_needs_imu_and_avoids_jumps() -> None:
    d = aligned(make_drive(5, 30.0))
    assert not selection.select_imu(d, ()).any()  # no IMU in this drive
    d.imu_rate[:] = 0.0
    sel = selection.select_imu(d, [(1005.0, 1006.0)])
    assert not sel[(d.t >= 1005.0) & (d.t <= 1006.0)].any()
    assert sel[(d.t > 1010.0) & (d.t < 1020.0)].all()


def test_bad_selection_rule_named() -> None:
    with pytest.raises(ValueError, match="min_speed"):
        SelectionRules(min_speed=-1.0)
    with pytest.raises(ValueError, match="standstill_speed"):
        SelectionRules(standstill_speed=math.nan)
