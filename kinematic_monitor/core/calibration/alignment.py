"""Alignment: the inputs of one drive on its localisation stamps (REP 103 body frame, SI).

The localisation stamps are the time base. Chassis and IMU values are linearly
interpolated to them; a localisation stamp whose neighbouring chassis samples are more
than ``max_gap`` apart is unusable. The localisation twist is taken at the CG
(``inputs.localization.reference_x`` metres ahead of it): ``vx`` is the same at every point
of the rigid body, ``vy_cg = vy - reference_x * r``. Without a twist, velocity comes from
differenced positions; without a yaw rate, from the IMU, else from differenced yaw. The
fitted signals are then low-passed over ``fit_smooth_time``: noise in a regressor (yaw
rate in the curvature) biases a least-squares slope towards zero by var(noise)/var(signal),
and averaging shrinks that ratio by the number of samples averaged.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.calibration.signals import (
    derivative,
    interp_or_nan,
    interp_with_gap,
    smooth,
    smooth_nan,
)
from kinematic_monitor.core.model import VehicleParams
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

#: column order of :attr:`Aligned.wheels` (front left, front right, rear left, rear right)
WHEEL_ORDER = ("front_left", "front_right", "rear_left", "rear_right")


@dataclass
class Aligned:
    """Aligned arrays on the localisation stamps of one or more drives (body frame, CG)."""

    t: np.ndarray  # [s]
    source: np.ndarray  # drive index
    vx: np.ndarray  # [m/s]
    vy: np.ndarray  # [m/s] at the CG
    r: np.ndarray  # [rad/s] yaw rate (localisation twist, else IMU, else differenced yaw)
    steer: np.ndarray  # [rad] measured bicycle angle (or steering-wheel angle / file ratio)
    w_front: np.ndarray  # [rad/s] mean front wheel angular speed
    w_rear: np.ndarray  # [rad/s] mean rear wheel angular speed
    valid: np.ndarray  # aligned (chassis present)
    jump: np.ndarray  # localisation jump nearby
    ax: np.ndarray  # [m/s^2] longitudinal acceleration (IMU, else differenced vx)
    steer_rate: np.ndarray  # [rad/s]
    yaw_accel: np.ndarray  # [rad/s^2]
    dt: np.ndarray  # [s] time each sample stands for
    wheels: np.ndarray  # [rad/s] shape (n, 4) in WHEEL_ORDER, NaN where missing
    loc_rate: np.ndarray  # [rad/s] yaw rate of the localisation alone (twist, else d yaw/dt)
    imu_rate: np.ndarray  # [rad/s] IMU yaw rate, NaN where no IMU
    imu_ax: np.ndarray  # [m/s^2] IMU x acceleration (IMU axes), NaN where no IMU
    imu_ay: np.ndarray  # [m/s^2] IMU y acceleration (IMU axes), NaN where no IMU
    loc_ax: np.ndarray  # [m/s^2] CG acceleration from the twist, body x: dvx/dt - r vy
    loc_ay: np.ndarray  # [m/s^2] CG acceleration from the twist, body y: dvy/dt + r vx
    loc_yaw_rate_sq: np.ndarray  # [rad^2/s^2] loc_rate squared (centripetal lever-arm term)
    loc_yaw_accel: np.ndarray  # [rad/s^2] d loc_rate / dt (tangential lever-arm term)
    yaw_rate_source: str

    @property
    def ay(self) -> np.ndarray:
        """Steady-state lateral acceleration vx * r [m/s^2]."""
        return np.asarray(self.vx * self.r)

    @property
    def kappa(self) -> np.ndarray:
        """Path curvature of the rear-axle centre r / vx [1/m]."""
        return np.asarray(self.r / self.vx)

    def subset(self, mask: np.ndarray) -> Aligned:
        """The samples where ``mask`` is true (same fields)."""
        return dataclasses.replace(self, **{name: getattr(self, name)[mask]
                                            for name in _ARRAY_FIELDS})


_ARRAY_FIELDS = tuple(f.name for f in dataclasses.fields(Aligned) if f.name != "yaw_rate_source")


def concat(parts: list[Aligned]) -> Aligned:
    """The drives one after the other (each keeps its ``source`` index)."""
    arrays = {name: np.concatenate([getattr(p, name) for p in parts]) for name in _ARRAY_FIELDS}
    sources = ", ".join(sorted({p.yaw_rate_source for p in parts}))
    return Aligned(**arrays, yaw_rate_source=sources)


def bicycle_angle(dl: np.ndarray, dr: np.ndarray, v: VehicleParams) -> np.ndarray:
    """Mean of the bicycle angles implied by each measured road-wheel angle (Ackermann).

    ``tan d = tan d_i / (1 +- (w / 2L) tan d_i)`` for the left (+) and right (-) wheel [rad].
    """
    q = 0.5 * v.track_width / v.wheelbase
    with np.errstate(invalid="ignore", divide="ignore"):
        tl, tr = np.tan(dl), np.tan(dr)
        a = np.arctan(tl / (1.0 + q * tl))
        b = np.arctan(tr / (1.0 - q * tr))
    return np.asarray(0.5 * (a + b), dtype=float)


def _collect(samples: Iterable[Any], v: VehicleParams
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Localisation, chassis and IMU rows sorted by stamp (None without both first two).

    Chassis columns: stamp, bicycle angle, mean front and rear wheel speed, then the four
    wheels in WHEEL_ORDER. The measured bicycle angle is given directly, else it comes from
    the left/right pair (the converters have divided steering-wheel angles by the ratio).
    """
    ch: list[tuple[float, ...]] = []
    loc: list[tuple[float, ...]] = []
    imu: list[tuple[float, ...]] = []
    for s in samples:
        if isinstance(s, ChassisSample):
            fl, fr, rl, rr = (s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left,
                              s.wheel_rear_right)
            ch.append((s.stamp, s.steer, s.steer_left, s.steer_right, 0.5 * (fl + fr),
                       0.5 * (rl + rr), fl, fr, rl, rr))
        elif isinstance(s, LocalizationSample):
            loc.append((s.stamp, s.x, s.y, s.yaw, s.vx, s.vy, s.yaw_rate))
        elif isinstance(s, ImuSample):
            imu.append((s.stamp, s.yaw_rate, s.ax, s.ay))
    if not loc or not ch:
        return None
    L = _by_stamp(np.array(loc, dtype=float))
    C = _by_stamp(np.array(ch, dtype=float))
    pair = bicycle_angle(C[:, 2], C[:, 3], v)
    C = np.column_stack([C[:, 0], np.where(np.isfinite(C[:, 1]), C[:, 1], pair), C[:, 4:]])
    keep = np.concatenate([[True], np.diff(L[:, 0]) > 0.0])
    I = _by_stamp(np.array(imu, dtype=float)) if imu else np.zeros((0, 4))
    return L[keep], C, I


def _by_stamp(rows: np.ndarray) -> np.ndarray:
    return rows[np.argsort(rows[:, 0], kind="stable")]


def _body_velocity(t: np.ndarray, x: np.ndarray, y: np.ndarray, yaw: np.ndarray,
                   vx_in: np.ndarray, vy_in: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Twist velocity [m/s], else differenced positions rotated into the body frame."""
    vx, vy = vx_in.copy(), vy_in.copy()
    if not np.all(np.isfinite(vx)):
        gx, gy = np.gradient(x, t), np.gradient(y, t)
        c, s_ = np.cos(yaw), np.sin(yaw)
        bad = ~np.isfinite(vx)
        vx[bad] = (c * gx + s_ * gy)[bad]
        bad = ~np.isfinite(vy)
        vy[bad] = (-s_ * gx + c * gy)[bad]
    return vx, vy


def _yaw_rate(t: np.ndarray, yaw: np.ndarray, twist: np.ndarray, I: np.ndarray,
              max_gap: float) -> tuple[np.ndarray, str]:
    """Yaw rate [rad/s]: the twist's, else the IMU's, else differenced yaw; and its source."""
    r = twist.copy()
    src = "localisation twist"
    if not np.all(np.isfinite(r)):
        bad = ~np.isfinite(r)
        if len(I):
            ri, ok = interp_with_gap(t, I[:, 0], I[:, 1], max_gap)
            r[bad & ok] = ri[bad & ok]
            src = "IMU"
        bad = ~np.isfinite(r)
        if np.any(bad):
            r[bad] = np.gradient(yaw, t)[bad]
            src = "differenced localisation yaw" if src != "IMU" else "IMU / differenced yaw"
    return r, src


def _jumps(t: np.ndarray, x: np.ndarray, y: np.ndarray, yaw: np.ndarray, vx: np.ndarray,
           vy: np.ndarray, r: np.ndarray, rules: SelectionRules) -> np.ndarray:
    """True within 1 s of a pose step the twist does not explain (or a gap in the stamps)."""
    dtt = np.diff(t)
    mid_yaw = 0.5 * (yaw[1:] + yaw[:-1])
    vxm, vym = 0.5 * (vx[1:] + vx[:-1]), 0.5 * (vy[1:] + vy[:-1])
    px = np.cos(mid_yaw) * vxm - np.sin(mid_yaw) * vym
    py = np.sin(mid_yaw) * vxm + np.cos(mid_yaw) * vym
    err_p = np.hypot(np.diff(x) - px * dtt, np.diff(y) - py * dtt)
    err_y = np.abs(np.diff(yaw) - 0.5 * (r[1:] + r[:-1]) * dtt)
    big = (err_p > rules.max_position_jump) | (err_y > rules.max_yaw_jump) \
        | (dtt > rules.max_gap)
    jump = np.zeros(len(t), bool)
    for k in np.flatnonzero(big):
        jump[(t >= t[k] - 1.0) & (t <= t[k + 1] + 1.0)] = True
    return jump


def _long_accel(t: np.ndarray, I: np.ndarray, vx: np.ndarray, nsm: int,
                max_gap: float) -> np.ndarray:
    """Longitudinal acceleration [m/s^2]: the IMU's where present, else differenced vx."""
    if len(I) and np.all(np.isfinite(I[:, 2])):
        ax, ok_a = interp_with_gap(t, I[:, 0], I[:, 2], max_gap)
        return np.where(ok_a, smooth(ax, nsm), derivative(t, vx, nsm))
    return derivative(t, vx, nsm)


def _accelerations(t: np.ndarray, vx: np.ndarray, vy: np.ndarray, rate: np.ndarray,
                   imu: list[np.ndarray], nsm: int) -> dict[str, np.ndarray]:
    """Body-frame accelerations [m/s^2] from the (smoothed) twist and the IMU's, filtered alike.

    Rigid-body kinematics in a rotating frame: ``a_x = dvx/dt - r vy``, ``a_y = dvy/dt +
    r vx``. Every term passes the same moving average over ``nsm`` samples (the one the
    derivative applies), so the IMU and the twist see the same filter.
    """
    return {
        "loc_ax": derivative(t, vx, nsm) - smooth(rate * vy, nsm),
        "loc_ay": derivative(t, vy, nsm) + smooth(rate * vx, nsm),
        "loc_yaw_rate_sq": smooth(rate * rate, nsm),
        "loc_yaw_accel": derivative(t, rate, nsm),
        "imu_ax": smooth(imu[1], nsm),
        "imu_ay": smooth(imu[2], nsm),
    }


def _window(seconds: float, dt_med: float) -> int:
    return max(int(round(seconds / max(dt_med, 1e-6))), 1)


def align(samples: Iterable[Any], v: VehicleParams, reference_x: float,
          rules: SelectionRules, source: int) -> Aligned | None:
    """One drive's samples on its localisation stamps; None without chassis or localisation.

    ``reference_x`` [m]: how far the localised point sits ahead of the CG along body x.
    """
    got = _collect(samples, v)
    if got is None or len(got[0]) < 3:
        return None
    L, C, I = got
    t = L[:, 0]
    dt_med = float(np.median(np.diff(t)))
    nsm, nfit = _window(rules.smooth_time, dt_med), _window(rules.fit_smooth_time, dt_med)
    x, y, yaw = L[:, 1], L[:, 2], np.unwrap(L[:, 3])
    vx, vy = _body_velocity(t, x, y, yaw, L[:, 4], L[:, 5])
    r, src = _yaw_rate(t, yaw, L[:, 6], I, rules.max_gap)
    steer, ok_s = interp_with_gap(t, C[:, 0], C[:, 1], rules.max_gap)
    wr, ok_r = interp_with_gap(t, C[:, 0], C[:, 3], rules.max_gap)
    gap = rules.max_gap
    wf = interp_or_nan(t, C[:, 0], C[:, 2], gap)
    wheels = np.column_stack([smooth_nan(interp_or_nan(t, C[:, 0], C[:, j], gap), nfit)
                              for j in range(4, 8)])
    imu = [smooth_nan(interp_or_nan(t, I[:, 0], I[:, j], gap), nfit) for j in (1, 2, 3)]
    loc_rate = smooth_nan(np.where(np.isfinite(L[:, 6]), L[:, 6], np.gradient(yaw, t)), nfit)
    r_s, vx_s, vy_s = smooth_nan(r, nfit), smooth_nan(vx, nfit), smooth_nan(vy - reference_x * r,
                                                                             nfit)
    return Aligned(
        t=t, source=np.full(len(t), source), vx=vx_s, vy=vy_s, r=r_s,
        steer=smooth_nan(steer, nfit), w_front=smooth_nan(wf, nfit), w_rear=smooth_nan(wr, nfit),
        valid=ok_s & ok_r & np.isfinite(vx) & np.isfinite(r),
        jump=_jumps(t, x, y, yaw, vx, vy, r, rules), ax=_long_accel(t, I, vx, nsm, gap),
        steer_rate=derivative(t, np.nan_to_num(steer), nsm),
        yaw_accel=derivative(t, r_s, nsm),
        dt=np.minimum(np.concatenate([np.diff(t), [dt_med]]), rules.max_gap),
        wheels=wheels, loc_rate=loc_rate, imu_rate=imu[0],
        **_accelerations(t, vx_s, vy_s, loc_rate, imu, nsm), yaw_rate_source=src,
    )
