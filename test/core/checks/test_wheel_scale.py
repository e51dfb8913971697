"""Wheel-speed scale check: a rolling-radius error shows as the same slip on both axles."""

from __future__ import annotations

from fixtures.checks import PERIOD, setup, steady
from kinematic_monitor.core.checks.wheel_scale import WheelScaleCheck
from kinematic_monitor.core.samples import ImuSample


def run(k_front: float, k_rear: float, ax: float = 0.0) -> list[str]:
    ctx, st, sink = setup()
    chk = WheelScaleCheck(ctx)
    t, nxt = 0.0, PERIOD
    for _ in range(500):
        t += 0.02
        if t >= nxt:
            chk.decide(nxt, 10, True)
            nxt += PERIOD
        steady(st, t, 0.0, 10.0)
        imu = ImuSample(t, 0.0, ax=ax, ay=0.0)
        st.apply_imu(imu)
        chk.on_slips(k_front, k_rear, 10.0, True)
    return sink.outs()


def test_three_percent_radius_error_on_both_axles_raises() -> None:
    # a rolling radius 3 % off (the usual size of a radius calibration, REALISM.md [Meas])
    assert run(0.03, 0.03)[:1] == ["start"]


def test_one_axle_slipping_or_opposite_signs_is_not_a_radius_error() -> None:
    assert run(0.03, 0.0) == []
    assert run(0.03, -0.03) == []


def test_hard_acceleration_pauses_the_check() -> None:
    # drive slip on both axles alike would look like a radius error (ISO 8855 slip ∝ force)
    assert run(0.03, 0.03, ax=2.0) == []
