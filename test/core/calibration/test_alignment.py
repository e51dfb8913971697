"""Alignment on the localisation stamps: reference point, yaw-rate sources, accelerations.

The drives are steady circles built in code: speed v on radius R (at the rear axle), yaw
rate r = v / R, CG lateral velocity l_r r and no lateral velocity at the rear axle
(Rajamani 2012, kinematic model, from memory for the section); in body axes the CG
acceleration is (-r vy_cg, r vx) (rigid body in a rotating frame, REP 103 signs: a left
turn has positive r and a_y).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinematic_monitor.core.calibration import alignment
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.model import VehicleParams
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

V = VehicleParams(2.70, 1.35, 0.31, 1.55)
RULES = SelectionRules()


def circle(v: float = 10.0, R: float = 50.0, duration: float = 20.0, ref_x: float = 0.0,
           twist_rate: bool = True, imu: tuple[float, float, float] | None = None,
           chassis_gap: tuple[float, float] | None = None) -> list[object]:
    """Samples of a steady left circle; base_link ``ref_x`` ahead of the CG."""
    r = v / R
    vy_ref = V.cg_to_rear_axle * r + ref_x * r  # lateral velocity of the localised point
    out: list[object] = []
    for k in range(int(duration * 100)):
        t = 100.0 + 0.01 * k
        if not (chassis_gap and chassis_gap[0] <= t < chassis_gap[1]):
            out.append(ChassisSample(t, steer=math.atan(V.wheelbase / R),
                                     wheel_rear_left=v / 0.31, wheel_rear_right=v / 0.31))
        if imu is not None:
            out.append(ImuSample(t, imu[0], ax=imu[1], ay=imu[2]))
        if k % 2 == 0:
            yaw = r * (t - 100.0)
            out.append(LocalizationSample(t, R * math.sin(yaw), R * (1 - math.cos(yaw)), yaw,
                                          vx=v, vy=vy_ref,
                                          yaw_rate=r if twist_rate else math.nan))
    return out


def test_rear_axle_base_link_gives_the_cg_lateral_velocity() -> None:
    # base_link at the rear-axle centre (reference_x = -l_r): its lateral velocity is 0, the
    # CG's is l_r r
    d = alignment.align(circle(ref_x=-1.35), V, -1.35, RULES, 0)
    assert d is not None
    inner = slice(50, -50)
    np.testing.assert_allclose(d.vy[inner], 1.35 * 0.2, rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.r[inner], 0.2, rtol=0, atol=1e-12)
    assert d.yaw_rate_source == "localisation twist"


def test_accelerations_implied_by_the_twist() -> None:
    # a_x = dvx/dt - r vy_cg = -0.2 * 0.27, a_y = dvy/dt + r vx = 0.2 * 10 = v^2 / R [C]
    d = alignment.align(circle(), V, 0.0, RULES, 0)
    assert d is not None
    inner = slice(50, -50)
    np.testing.assert_allclose(d.loc_ax[inner], -0.2 * 0.27, rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.loc_ay[inner], 10.0**2 / 50.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.loc_yaw_rate_sq[inner], 0.04, rtol=0, atol=1e-12)
    np.testing.assert_allclose(d.loc_yaw_accel[inner], 0.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.ay[inner], 2.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(d.kappa[inner], 1.0 / 50.0, rtol=0, atol=1e-12)
    assert np.isnan(d.imu_rate).all() and np.isnan(d.imu_ax).all()  # no IMU in the data


def test_imu_values_on_the_localisation_stamps() -> None:
    d = alignment.align(circle(imu=(0.21, 0.1, 1.9)), V, 0.0, RULES, 0)
    assert d is not None
    inner = slice(50, -50)
    np.testing.assert_allclose(d.imu_rate[inner], 0.21, rtol=0, atol=1e-12)
    np.testing.assert_allclose(d.imu_ax[inner], 0.1, rtol=0, atol=1e-12)
    np.testing.assert_allclose(d.imu_ay[inner], 1.9, rtol=0, atol=1e-12)
    # the twist's yaw rate is used, the IMU's only stands in for a missing one
    np.testing.assert_allclose(d.r[inner], 0.2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(d.loc_rate[inner], 0.2, rtol=0, atol=1e-12)


@pytest.mark.parametrize(("imu", "source"), [
    ((0.2, 0.0, 2.0), "IMU"),
    (None, "differenced localisation yaw"),
])
def test_yaw_rate_without_twist_rate(imu: tuple[float, float, float] | None,
                                     source: str) -> None:
    d = alignment.align(circle(twist_rate=False, imu=imu), V, 0.0, RULES, 0)
    assert d is not None and d.yaw_rate_source == source
    np.testing.assert_allclose(d.r[50:-50], 0.2, rtol=0, atol=1e-9)
    # the localisation's own rate is its differenced yaw either way
    np.testing.assert_allclose(d.loc_rate[50:-50], 0.2, rtol=0, atol=1e-9)


def test_chassis_gap_makes_samples_invalid() -> None:
    d = alignment.align(circle(chassis_gap=(105.0, 106.0)), V, 0.0, RULES, 0)
    assert d is not None
    inside = (d.t > 105.01) & (d.t < 105.99)
    assert inside.any() and not d.valid[inside].any()
    assert d.valid[(d.t > 101.0) & (d.t < 104.0)].all()


def test_localisation_step_is_a_jump_for_a_second_around_it() -> None:
    samples = [LocalizationSample(s.stamp, s.x + 1.0, s.y, s.yaw, s.vx, s.vy, s.yaw_rate)
               if isinstance(s, LocalizationSample) and s.stamp >= 110.0 else s
               for s in circle()]
    d = alignment.align(samples, V, 0.0, RULES, 0)
    assert d is not None
    assert d.jump[(d.t >= 109.1) & (d.t <= 110.9)].all()
    assert not d.jump[(d.t < 108.9) | (d.t > 111.1)].any()


def test_bicycle_angle_inverts_ackermann() -> None:
    # cot d_l = cot d - w/(2L), cot d_r = cot d + w/(2L) (Ackermann geometry) [C]
    delta = 0.1
    q = 1.55 / (2 * 2.70)
    dl = math.atan(1.0 / (1.0 / math.tan(delta) - q))
    dr = math.atan(1.0 / (1.0 / math.tan(delta) + q))
    out = alignment.bicycle_angle(np.array([dl, -dr]), np.array([dr, -dl]), V)
    np.testing.assert_allclose(out, [delta, -delta], rtol=0, atol=1e-12)


def test_without_chassis_or_localisation_nothing_is_aligned() -> None:
    only_loc = [s for s in circle() if isinstance(s, LocalizationSample)]
    assert alignment.align(only_loc, V, 0.0, RULES, 0) is None
    assert alignment.align(circle()[:5], V, 0.0, RULES, 0) is None  # < 3 localisation stamps


def test_drives_concatenate_and_subset_keep_every_field() -> None:
    a = alignment.align(circle(duration=5.0), V, 0.0, RULES, 0)
    b = alignment.align(circle(duration=3.0, twist_rate=False), V, 0.0, RULES, 1)
    assert a is not None and b is not None
    d = alignment.concat([a, b])
    assert len(d.t) == len(a.t) + len(b.t) == d.wheels.shape[0]
    assert set(np.unique(d.source)) == {0, 1}
    assert d.yaw_rate_source == "differenced localisation yaw, localisation twist"
    sub = d.subset(d.source == 1)
    assert len(sub.t) == len(b.t) and np.array_equal(sub.loc_ay, b.loc_ay)
