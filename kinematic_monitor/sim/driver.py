"""Closed-loop test driver: pure-pursuit steering and a PI speed controller.

* Steering: pure pursuit (Coulter, "Implementation of the Pure Pursuit Path Tracking
  Algorithm", CMU-RI-TR-92-01, 1992): aim at the path point one look-ahead distance ahead of
  the rear axle, delta = atan(2 L sin(alpha) / l_d), with a speed-dependent look-ahead.
* Speed: PI control of the CG speed to a reference with feed-forward of the reference
  slope and of the driving resistances, giving a total wheel torque; positive torque goes to
  the drive, negative to the brakes. At standstill with a zero reference the brakes hold.

All quantities SI and REP 103 (x forward, y left, yaw counter-clockwise positive).
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass, field

import numpy as np

from kinematic_monitor.sim.dynamics import AIR_DENSITY, GRAVITY, SimVehicle


class Path:
    """A polyline path [m] in the map frame with arc-length lookup; optionally closed."""

    def __init__(self, points: np.ndarray, closed: bool = False) -> None:
        pts = np.asarray(points, dtype=float)
        if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2:
            raise ValueError(f"path points must have shape (N>=2, 2), got {pts.shape}")
        if not np.all(np.isfinite(pts)):
            raise ValueError("path points contain NaN or infinite values")
        if closed and np.hypot(*(pts[0] - pts[-1])) > 1e-6:
            pts = np.vstack([pts, pts[:1]])
        seg = np.diff(pts, axis=0)
        seg_len = np.hypot(seg[:, 0], seg[:, 1])
        keep = np.concatenate([[True], seg_len > 1e-9])
        pts = pts[keep]
        seg = np.diff(pts, axis=0)
        seg_len = np.hypot(seg[:, 0], seg[:, 1])
        if seg_len.size == 0:
            raise ValueError("path has zero length")
        self.points = pts
        self.closed = closed
        self.s = np.concatenate([[0.0], np.cumsum(seg_len)])
        self.length = float(self.s[-1])
        self._xs = pts[:, 0].tolist()
        self._ys = pts[:, 1].tolist()
        self._sl = self.s.tolist()
        self._n = len(self._xs)

    def heading_at_start(self) -> float:
        """Direction of the first segment [rad]."""
        d = self.points[1] - self.points[0]
        return math.atan2(d[1], d[0])

    def point_at(self, s: float) -> tuple[float, float]:
        """Point at arc length ``s`` [m] (wrapped on a closed path, clamped otherwise)."""
        if self.closed:
            s = s % self.length
        else:
            s = min(max(s, 0.0), self.length)
        i = min(max(bisect.bisect_right(self._sl, s) - 1, 0), self._n - 2)
        s0, s1 = self._sl[i], self._sl[i + 1]
        f = (s - s0) / (s1 - s0)
        return (
            self._xs[i] + f * (self._xs[i + 1] - self._xs[i]),
            self._ys[i] + f * (self._ys[i + 1] - self._ys[i]),
        )

    def project(self, x: float, y: float, hint: int | None, window: int = 24) -> tuple[int, float]:
        """Nearest segment index and arc length of the projection of (x, y).

        With a ``hint`` only segments hint-4..hint+window are searched (wrapping on a
        closed path), which keeps tracking O(1) per call; without one, all segments.
        """
        n = self._n - 1
        if hint is None:
            idx = range(n)
        elif self.closed:
            idx = (j % n for j in range(hint - 4, hint + window))  # type: ignore[assignment]
        else:
            idx = range(max(hint - 4, 0), min(hint + window, n))
        best = (math.inf, 0, 0.0)
        xs, ys, sl = self._xs, self._ys, self._sl
        for i in idx:
            ax, ay = xs[i], ys[i]
            dx, dy = xs[i + 1] - ax, ys[i + 1] - ay
            ll = dx * dx + dy * dy
            f = ((x - ax) * dx + (y - ay) * dy) / ll
            f = 0.0 if f < 0.0 else (1.0 if f > 1.0 else f)
            ex, ey = ax + f * dx - x, ay + f * dy - y
            d2 = ex * ex + ey * ey
            if d2 < best[0]:
                best = (d2, i, sl[i] + f * (sl[i + 1] - sl[i]))
        return best[1], best[2]


@dataclass(frozen=True)
class SpeedProfile:
    """Piecewise-linear speed reference [m/s] over time [s] or travelled distance [m].

    ``points``: (key, speed) pairs with increasing keys; before the first key the first
    speed holds, after the last the last one. ``by``: "time" or "distance" (odometer of the
    CG path). ``period``: if set, the key wraps modulo period (e.g. one lap of a loop).
    """

    points: tuple[tuple[float, float], ...]
    by: str = "time"
    period: float | None = None

    def __post_init__(self) -> None:
        if self.by not in ("time", "distance"):
            raise ValueError(f"SpeedProfile.by={self.by!r} must be 'time' or 'distance'")
        if len(self.points) < 1:
            raise ValueError("SpeedProfile.points must not be empty")
        keys = [k for k, _ in self.points]
        if any(b < a for a, b in zip(keys, keys[1:], strict=False)):
            raise ValueError(f"SpeedProfile keys must be non-decreasing, got {keys}")
        for k, v in self.points:
            if not (math.isfinite(k) and math.isfinite(v) and v >= 0.0):
                raise ValueError(f"SpeedProfile point ({k!r}, {v!r}) must be finite, v >= 0")
        if self.period is not None and not self.period > 0.0:
            raise ValueError(f"SpeedProfile.period={self.period!r} must be > 0")

    def __call__(self, key: float) -> float:
        if self.period is not None:
            key = key % self.period
        pts = self.points
        if key <= pts[0][0]:
            return pts[0][1]
        if key >= pts[-1][0]:
            return pts[-1][1]
        keys = [k for k, _ in pts]
        i = bisect.bisect_right(keys, key) - 1
        (k0, v0), (k1, v1) = pts[i], pts[i + 1]
        if k1 <= k0:
            return v1
        return v0 + (v1 - v0) * (key - k0) / (k1 - k0)


@dataclass
class DriverGains:
    """Tuning of the test driver (our own values)."""

    lookahead_time: float = 0.6  # [s] look-ahead = max(min_lookahead, lookahead_time * v)
    min_lookahead: float = 4.0  # [m]
    speed_kp: float = 1.2  # [1/s] speed error -> acceleration
    speed_ki: float = 0.3  # [1/s^2]
    max_accel_cmd: float = 3.5  # [m/s^2] largest acceleration request
    max_decel_cmd: float = 10.0  # [m/s^2] largest deceleration request
    hold_brake: float = 1500.0  # [N m] total brake torque holding the car at standstill
    lift_spin: float = 4.0  # [m/s] wheel-spin surplus at which the driver eases off
    lift_factor: float = 0.0  # [-] share of the drive torque kept while easing off
    steer_noise: float = 0.002  # [rad] std of a slow random steering disturbance
    noise_time: float = 1.0  # [s] correlation time of that disturbance


@dataclass
class PurePursuitDriver:
    """Pure-pursuit steering + PI speed control; call :meth:`update` at the driver rate."""

    path: Path
    speed: SpeedProfile
    vehicle: SimVehicle
    gains: DriverGains = field(default_factory=DriverGains)
    seed: int = 0

    def __post_init__(self) -> None:
        self._hint: int | None = None
        self._integral = 0.0
        self._last_ref: float | None = None
        self._rng = np.random.default_rng(self.seed)
        self._noise = 0.0

    def update(
        self,
        t: float,
        dt: float,
        x: float,
        y: float,
        yaw: float,
        v: float,
        odometer: float,
        wheel_spin: float = 0.0,
    ) -> tuple[float, float, float]:
        """Commands (delta [rad], drive torque [N m], brake torque [N m]) for the state.

        ``x, y, yaw`` CG pose, ``v`` [m/s] forward speed, ``odometer`` [m] travelled CG
        distance, ``dt`` [s] time since the previous update, ``wheel_spin`` [m/s] how much
        the fastest driven wheel's surface speed exceeds ``v``: like a human driver hearing
        the engine rev, the driver eases off the drive torque while it is above
        ``gains.lift_spin``.
        """
        p = self.vehicle
        g = self.gains
        L = p.wheelbase
        # --- steering (pure pursuit about the rear axle)
        rx = x - p.cg_to_rear_axle * math.cos(yaw)
        ry = y - p.cg_to_rear_axle * math.sin(yaw)
        self._hint, s_here = self.path.project(rx, ry, self._hint)
        ld = max(g.min_lookahead, g.lookahead_time * abs(v))
        tx, ty = self.path.point_at(s_here + ld)
        dx, dy = tx - rx, ty - ry
        dist = math.hypot(dx, dy)
        alpha = math.atan2(dy, dx) - yaw
        delta = math.atan2(2.0 * L * math.sin(alpha), max(dist, 1e-3))
        if g.steer_noise > 0.0:
            a = math.exp(-dt / g.noise_time)
            self._noise = a * self._noise + math.sqrt(1.0 - a * a) * g.steer_noise * float(
                self._rng.standard_normal()
            )
            delta += self._noise
        # --- speed (PI with feed-forward)
        key = t if self.speed.by == "time" else odometer
        v_ref = self.speed(key)
        ff = 0.0
        if self._last_ref is not None and dt > 0.0:
            ff = (v_ref - self._last_ref) / dt
        self._last_ref = v_ref
        if v_ref < 0.05 and v < 0.3:
            self._integral = 0.0
            return delta, 0.0, g.hold_brake
        err = v_ref - v
        self._integral = min(max(self._integral + err * dt, -5.0), 5.0)
        a_cmd = g.speed_kp * err + g.speed_ki * self._integral + ff
        a_cmd = min(max(a_cmd, -g.max_decel_cmd), g.max_accel_cmd)
        resist = 0.5 * AIR_DENSITY * p.drag_area * v * abs(v) + (
            p.rolling_resistance * p.mass * GRAVITY
        )
        torque = (p.mass * a_cmd + resist) * p.wheel_radius
        if torque >= 0.0:
            if wheel_spin > g.lift_spin:
                torque *= g.lift_factor
                self._integral = min(self._integral, 0.0)
            return delta, torque, 0.0
        return delta, 0.0, -torque
