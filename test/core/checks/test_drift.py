"""Drift check: kinematic dead reckoning (exact arcs) against localisation poses."""

from __future__ import annotations

import math

from fixtures.checks import setup, steady
from kinematic_monitor.core import model
from kinematic_monitor.core.checks.drift import DriftCheck
from kinematic_monitor.core.checks.sideslip import SideslipCheck
from kinematic_monitor.core.checks.yaw_rate import YawRateCheck


def run(lateral_rate: float, seconds: float = 20.0) -> tuple[DriftCheck, list[str]]:
    """A circle at 8 m/s, δ 0.05 rad; the localisation adds ``lateral_rate`` [m/s] of
    sideways drift (body left)."""
    ctx, st, sink = setup()
    chk = DriftCheck(ctx, YawRateCheck(ctx), SideslipCheck(ctx))
    x = y = heading = 0.0
    off = 0.0
    for i in range(int(seconds * 100)):
        t = 50.0 + i * 0.01
        chk.on_chassis(t)
        steady(st, t, 0.05, 8.0)
        x, y, heading = model.step(x, y, heading, 8.0, 0.05, 0.01, ctx.config.vehicle)
        off += lateral_rate * 0.01
        if i % 2 == 1:
            pose = (x - off * math.sin(heading), y + off * math.cos(heading), heading)
            chk.on_loc(t, pose, 0.02, 0.003, False)
    return chk, sink.outs()


def test_exact_arcs_match_the_localisation() -> None:
    chk, outs = run(0.0)
    assert outs == [] and abs(chk.figures["drift_lateral [m]"]) < 1e-6


def test_sideways_drift_of_the_localisation_raises() -> None:
    chk, outs = run(0.5)
    assert outs[:1] == ["start"]
    assert dict(chk.peaks("localization_fault"))["drift_lateral_m"] > 0.3
