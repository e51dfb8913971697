"""Sideslip check against the Rajamani 2012 check values (CHECK_SOURCES.md [C]):
l_f 1.2 m, l_r 1.6 m, δ 0.1 rad gives β = 0.057271 rad at the CG."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fixtures.checks import PERIOD, setup, steady
from kinematic_monitor.core.checks.sideslip import SideslipCheck

BETA = 0.057271  # rad


def run(beta_true: float, seconds: float = 10.0) -> tuple[SideslipCheck, list[str]]:
    ctx, st, sink = setup()
    chk = SideslipCheck(ctx)
    rng = np.random.default_rng(5)
    sv = ctx.config.noise.localization_velocity_std
    t, next_decision = 10.0, 10.1
    for _ in range(int(seconds * 50)):
        t += 0.02
        if t >= next_decision:
            chk.decide(next_decision, 10, True)
            next_decision += PERIOD
        steady(st, t, 0.1, 10.0)
        vx = 10.0 * math.cos(beta_true) + rng.normal(0.0, sv)
        vy = 10.0 * math.sin(beta_true) + rng.normal(0.0, sv)
        chk.on_velocity(vx, vy, 0.357751, True)
    return chk, sink.outs()


def test_kinematic_sideslip_is_the_rajamani_value_and_quiet() -> None:
    chk, outs = run(BETA)
    assert chk.figures["sideslip_kinematic [rad]"] == pytest.approx(BETA, abs=1e-6)
    assert outs == []


def test_sliding_body_raises() -> None:
    # a body sideslip 0.1 rad beyond the kinematic one (rear tyres sliding out)
    chk, outs = run(BETA + 0.1, seconds=2.0)
    assert outs[:1] == ["start"]
    residual = dict(chk.peaks("lateral_slip"))["sideslip_residual_rad"]
    assert residual == pytest.approx(0.1, abs=0.02)


def test_measured_sideslip_reversing_keeps_rep103_sign() -> None:
    # reversing straight back with a leftward drift: atan2 of the negated velocity
    ctx, st, _ = setup()
    chk = SideslipCheck(ctx)
    steady(st, 1.0, 0.0, -5.0)
    chk.on_velocity(-5.0, 0.0, 0.0, True)
    assert chk.figures["sideslip_measured [rad]"] == pytest.approx(0.0)
