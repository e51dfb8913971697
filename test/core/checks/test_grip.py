"""Grip check: lateral acceleration against the kinematic envelope 0.5·μ·g."""

from __future__ import annotations

import pytest

from fixtures.checks import setup
from kinematic_monitor.core.checks.grip import GripCheck
from kinematic_monitor.core.levels import OK, WARN
from kinematic_monitor.core.model import GRAVITY, kinematic_envelope


def test_envelope_is_half_mu_g() -> None:
    # Polack et al., IEEE IV 2017 (the 0.5 factor from memory); standard gravity 9.80665
    assert kinematic_envelope(1.0) == pytest.approx(0.5 * 9.80665)
    assert kinematic_envelope(0.3) == pytest.approx(0.15 * GRAVITY)


def test_warn_outside_the_envelope_after_min_duration() -> None:
    ctx, st, _ = setup(checks__friction_assumed=0.5)
    chk = GripCheck(ctx)
    for i in range(10):
        st.ay = 2.0  # inside 0.25 g
        chk.decide(i * 0.1)
    assert chk.level == OK and chk.figures["grip_in_use [g]"] == pytest.approx(2.0 / GRAVITY)
    for i in range(10, 14):
        st.ay = -3.0  # beyond 0.5·0.5·g = 2.45 m/s²
        chk.decide(i * 0.1)
    assert chk.level == WARN
    assert dict(chk.peaks("lateral_slip"))["lateral_accel_g"] == pytest.approx(3.0 / GRAVITY)
    assert "outside" in chk.status_message(WARN, True, None, "")
