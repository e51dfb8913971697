"""Sample selection: where the kinematic assumption holds, and the bootstrap segments.

Kinematic driving (:func:`select`): speed ``vx >= min_speed``; steady-state lateral
acceleration ``a_y = vx * r`` within a limit; longitudinal acceleration, steering rate and
yaw acceleration small (steady inputs); no wheel slip (rear-axle wheel speed within
``max_wheel_slip`` of the drive's median ratio to ground speed); no localisation jump;
outside caller-given ``exclude`` windows (e.g. the events of a replay). Rigid-body
kinematics hold in any motion, so the IMU estimates use every aligned sample outside jumps
and excluded windows (:func:`select_imu`). Usable runs shorter than ``min_run`` are
dropped; runs are cut into segments of at most ``segment_length`` seconds for the
bootstrap (:func:`segments`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.model import VehicleParams


def excluded(d: Aligned, exclude: Sequence[tuple[float, float]]) -> np.ndarray:
    """True inside any (start, end) stamp window [s]."""
    ex = np.zeros(len(d.t), bool)
    for a, b in exclude:
        ex |= (d.t >= a) & (d.t <= b)
    return ex


def select(d: Aligned, v: VehicleParams, rules: SelectionRules, max_ay: float,
           exclude: Sequence[tuple[float, float]],
           reasons: dict[str, float] | None) -> np.ndarray:
    """Kinematic samples; ``reasons`` gets the seconds rejected by the first failing rule."""
    ay = d.vx * d.r
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = d.vx / (v.wheel_radius * d.w_rear)
    base = d.valid & (d.vx >= rules.min_speed)
    med = float(np.nanmedian(ratio[base])) if np.any(base) else math.nan
    tests: list[tuple[str, np.ndarray]] = [
        ("no chassis data", ~d.valid),
        ("below minimum speed", ~(d.vx >= rules.min_speed)),
        ("lateral acceleration", ~(np.abs(ay) <= max_ay)),
        ("longitudinal acceleration", ~(np.abs(d.ax) <= rules.max_long_accel)),
        ("steering not steady", ~(np.abs(d.steer_rate) <= rules.max_steer_rate)),
        ("yaw rate not steady", ~(np.abs(d.yaw_accel) <= rules.max_yaw_accel)),
        ("wheel slip", ~(np.abs(ratio / med - 1.0) <= rules.max_wheel_slip)
         if math.isfinite(med) else np.zeros(len(ay), bool)),
        ("localisation jump", d.jump),
        ("steering beyond max_road_wheel_angle",
         ~(np.abs(d.steer) <= v.max_road_wheel_angle)),
        ("excluded window (events)", excluded(d, exclude)),
    ]
    sel = np.ones(len(d.t), bool)
    for name, bad in tests:
        if reasons is not None:
            # attribute each rejected sample to the first rule it fails
            reasons[name] = float(np.sum(d.dt[sel & bad]))
        sel &= ~bad
    return sel


def select_imu(d: Aligned, exclude: Sequence[tuple[float, float]]) -> np.ndarray:
    """Samples with IMU and localisation, outside localisation jumps and excluded windows."""
    have = np.isfinite(d.imu_rate) & np.isfinite(d.loc_rate) & np.isfinite(d.vx)
    return np.asarray(have & ~d.jump & ~excluded(d, exclude), dtype=bool)


def standstill(d: Aligned, v: VehicleParams, rules: SelectionRules) -> np.ndarray:
    """True where the localisation speed and the rear wheels' speed are both near zero."""
    wheel_speed = np.abs(v.wheel_radius * d.w_rear)
    return np.asarray((np.hypot(d.vx, d.vy) < rules.standstill_speed)
                      & (wheel_speed < rules.standstill_speed), dtype=bool)


def segments(d: Aligned, sel: np.ndarray, rules: SelectionRules) -> np.ndarray:
    """Segment id per sample (-1 = unused): runs >= min_run cut into segment_length blocks."""
    seg = np.full(len(d.t), -1)
    n = len(d.t)
    k = 0
    next_id = 0
    while k < n:
        if not sel[k]:
            k += 1
            continue
        j = k
        while j + 1 < n and sel[j + 1] and d.source[j + 1] == d.source[k] \
                and d.t[j + 1] - d.t[j] <= rules.max_gap:
            j += 1
        run = np.arange(k, j + 1)
        dur = float(np.sum(d.dt[run]))
        if dur >= rules.min_run:
            nblk = max(int(round(dur / rules.segment_length)), 1)
            for part in np.array_split(run, nblk):
                seg[part] = next_id
                next_id += 1
        k = j + 1
    return seg
