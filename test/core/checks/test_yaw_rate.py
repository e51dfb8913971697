"""Yaw-rate check on a steady circle built from the Rajamani 2012 check values.

Vehicle l_f 1.2 m, l_r 1.6 m, v 10 m/s, δ 0.1 rad: ψ̇ = 0.357751 rad/s (CHECK_SOURCES.md
kinematic table [C]). The IMU noise put in equals the configured noise, so the CUSUM's
false-alarm rate applies.
"""

from __future__ import annotations

import numpy as np
import pytest

from fixtures.checks import PERIOD, setup, steady
from kinematic_monitor.core.checks.yaw_rate import YawRateCheck, yaw_rate_sigma
from kinematic_monitor.core.samples import ImuSample

RATE = 0.357751  # rad/s, Rajamani table row (10 m/s, 0.1 rad, l_f 1.2, l_r 1.6)


def run(factor: float, seconds: float = 20.0, seed: int = 3) -> tuple[YawRateCheck, list[str]]:
    ctx, st, sink = setup()
    chk = YawRateCheck(ctx)
    rng = np.random.default_rng(seed)
    t, next_decision = 100.0, 100.1
    for _ in range(int(seconds * 100)):
        t += 0.01
        if t >= next_decision:
            chk.decide(next_decision, 10, st.moving())
            next_decision += PERIOD
        steady(st, t, 0.1, 10.0)
        rate = factor * RATE + rng.normal(0.0, ctx.config.noise.imu_yaw_rate_std)
        s = ImuSample(t, rate, ay=10.0 * rate)
        st.apply_imu(s)
        chk.on_imu(s)
    return chk, sink.outs()


def test_kinematic_rate_is_the_rajamani_value() -> None:
    chk, outs = run(1.0, seconds=5.0)
    assert chk.figures["yaw_rate_kinematic [rad/s]"] == pytest.approx(RATE, abs=1e-6)


def test_consistent_yaw_rate_raises_nothing() -> None:
    _, outs = run(1.0)
    assert outs == []


def test_a_third_less_yaw_raises_within_half_a_second() -> None:
    # the body yaws at 2/3 of the kinematic rate from the start
    chk, outs = run(0.66, seconds=0.6)
    assert outs and outs[0] == "start"
    assert chk.tracker.start < 100.3 and chk.figures["yaw_rate_residual [rad/s]"] < -0.08
    assert chk.peaks("lateral_slip")[0][1] < -0.08
    assert chk.peaks("longitudinal_slip") == []


def test_sigma_first_order_terms() -> None:
    # at standstill only the measurement noise is left
    assert yaw_rate_sigma(0.0, 0.0, 2.7, 0.005, 0.002, 0.03, 0.0, 0.05) == pytest.approx(0.005)
    # steering term v/(L cos²δ)·σ_δ (derivative of v tan δ / L)
    assert yaw_rate_sigma(10.0, 0.0, 2.5, 0.0, 0.001, 0.0, 0.0, 0.0) == pytest.approx(0.004)
    # speed term (ψ̇/v)·σ_v
    assert yaw_rate_sigma(10.0, 0.0, 2.5, 0.0, 0.0, 0.1, 0.5, 0.0) == pytest.approx(0.005)
