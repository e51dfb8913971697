"""Wheel-slip check: slip ratio signs (ISO 8855 / SAE J670) and alarms per axle."""

from __future__ import annotations

import pytest

from fixtures.checks import PERIOD, setup, steady
from kinematic_monitor.core.checks.wheel_slip import WheelSlipCheck, slip_ratio


def test_slip_ratio_signs_and_guard() -> None:
    # ISO 8855 / Pacejka sign (from memory): driving → positive
    assert slip_ratio(11.0, 10.0, 1.0) == pytest.approx(0.1)
    # SAE J670e: a locked wheel has braking slip 1.0, i.e. κ = −1 [V]
    assert slip_ratio(0.0, 10.0, 1.0) == pytest.approx(-1.0)
    # low speed: denominator guarded (common practice, no source)
    assert slip_ratio(0.5, 0.0, 1.0) == pytest.approx(0.5)
    with pytest.raises(ValueError, match="min_speed"):
        slip_ratio(1.0, 1.0, 0.0)


def run(rear_factor: float, front_factor: float = 1.0) -> tuple[WheelSlipCheck, list[str]]:
    ctx, st, sink = setup()
    chk = WheelSlipCheck(ctx)
    r = ctx.config.vehicle.effective_wheel_radius
    w = 10.0 / r  # straight ahead at 10 m/s: every wheel rolls at v / R_e
    st.wheels = (front_factor * w, front_factor * w, rear_factor * w, rear_factor * w)
    t, nxt = 0.0, PERIOD
    for _ in range(100):
        t += 0.02
        if t >= nxt:
            chk.decide(nxt, True)
            nxt += PERIOD
        steady(st, t, 0.0, 10.0)
        slips = chk.on_velocity(10.0, 0.0, 0.0, True)
        assert slips is not None
    return chk, sink.outs()


def test_free_rolling_wheels_have_zero_slip() -> None:
    chk, outs = run(1.0)
    assert chk.figures["slip_ratio_rear [-]"] == pytest.approx(0.0, abs=1e-12)
    assert outs == [] and not chk.state.rear_slipping


def test_spinning_rear_wheels_raise_an_error() -> None:
    chk, outs = run(1.25)  # κ = +0.25 beyond checks.slip_ratio_error 0.2
    assert outs[:1] == ["start"] and chk.tracker.max_level == 2
    assert dict(chk.peaks("longitudinal_slip"))["slip_ratio_rear"] == pytest.approx(0.25)
    assert chk.state.rear_slipping  # the kinematic speed then comes from the localisation


def test_locked_front_wheels_are_negative_slip() -> None:
    chk, outs = run(1.0, front_factor=0.0)
    assert outs[:1] == ["start"]
    assert chk.figures["slip_ratio_front [-]"] == pytest.approx(-1.0)
