"""Localisation-jump check: chi-square bounds (scipy.stats) and jumps on a straight drive."""

from __future__ import annotations

import pytest
from scipy.stats import chi2

from fixtures.checks import setup, steady
from kinematic_monitor.core.checks.loc_jump import LocalizationJumpCheck, jump_bounds
from kinematic_monitor.core.samples import LocalizationSample


def test_bounds_are_chi_square_quantiles_for_the_hourly_rates() -> None:
    # 1 WARN and 0.001 ERROR per hour at 50 updates per second: one-sided chi-square(3)
    # quantiles (scipy.stats.chi2.ppf as the outside reference)
    warn, err = jump_bounds(1.0, 0.001, 50)
    updates = 3600.0 * 50
    assert warn == pytest.approx(chi2.ppf(1.0 - 1.0 / updates, 3), rel=1e-9)
    assert err == pytest.approx(chi2.ppf(1.0 - 0.001 / updates, 3), rel=1e-9)


def drive(jump_at: float | None, sigma_after: float = 0.05, steps: int = 200) -> tuple[
        LocalizationJumpCheck, list[str], dict[str, int], list[tuple[float, str]]]:
    """10 m/s straight along x; localisation at 50 Hz; a 1 m sideways jump at ``jump_at``."""
    ctx, st, sink = setup()
    counters, notes = ctx.counters, ctx.notes
    chk = LocalizationJumpCheck(ctx)
    for i in range(steps):
        t = 100.0 + i * 0.02
        steady(st, t, 0.0, 10.0)
        jumped = jump_at is not None and t >= jump_at
        sp = sigma_after if jumped else 0.05
        s = LocalizationSample(t, 10.0 * (t - 100.0), 1.0 if jumped else 0.0, 0.0,
                               vx=10.0, vy=0.0, yaw_rate=0.0,
                               pose_cov=(sp * sp, 0, 0, 0, sp * sp, 0, 0, 0, 1e-4))
        st.begin_loc(s)
        sp_, sy = st.loc_sigmas(s)
        pose = st.cg_pose(s)
        chk.on_loc(s, sp_, sy, pose)
        st.end_loc(s, pose, sp_)
    return chk, sink.outs(), counters, notes


def test_smooth_drive_raises_nothing() -> None:
    _, outs, _, _ = drive(None)
    assert outs == []


def test_one_metre_jump_raises_with_its_size() -> None:
    chk, outs, counters, _ = drive(102.0, steps=101)  # up to the update that jumped
    assert outs[:1] == ["start"] and counters["relocalizations"] == 0
    assert dict(chk.peaks("localization_fault"))["jump_m"] == pytest.approx(1.0, abs=0.01)


def test_declared_jump_with_collapsing_covariance_is_a_note() -> None:
    # the covariance collapses at the jump (REP 105: map may jump; a declared relocalisation
    # is not a fault): here it drops from 0.05 m to 0.02 m
    _, outs, counters, notes = drive(102.0, sigma_after=0.02)
    assert outs == [] and counters["relocalizations"] == 1 and "declared" in notes[0][1]
