"""Localisation-heading check: localisation yaw against the integrated IMU yaw rate."""

from __future__ import annotations

import numpy as np

from fixtures.checks import PERIOD, setup, steady
from kinematic_monitor.core.checks.heading import HeadingCheck
from kinematic_monitor.core.samples import ImuSample


def run(offset: float, drift_rate: float, seconds: float = 30.0) -> list[str]:
    """A 0.1 rad/s turn; the localisation yaw carries ``offset`` + ``drift_rate``·t."""
    ctx, st, sink = setup()
    n = ctx.config.noise
    chk = HeadingCheck(ctx)
    rng = np.random.default_rng(2)
    nxt = PERIOD
    for i in range(int(seconds * 100)):
        t = (i + 1) * 0.01
        if t >= nxt:
            chk.decide(nxt, 10, True)
            nxt += PERIOD
        steady(st, t, 0.05, 8.0)
        imu = ImuSample(t, 0.1 + rng.normal(0.0, n.imu_yaw_rate_std))
        st.apply_imu(imu)
        chk.on_imu(imu)
        if i % 2 == 1:  # localisation at 50 Hz
            yaw = 0.1 * t + offset + drift_rate * t + rng.normal(0.0, n.localization_yaw_std)
            chk.on_loc(t, yaw, n.localization_yaw_std)
    return sink.outs()


def test_constant_heading_offset_is_absorbed() -> None:
    assert run(0.3, 0.0) == []


def test_heading_drift_of_the_localisation_raises() -> None:
    # 0.02 rad/s (1.1 deg/s) of drift against the gyro
    assert run(0.0, 0.02)[:1] == ["start"]
