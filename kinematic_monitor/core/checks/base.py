"""Residual channels and check levels with hysteresis (pure, no ROS).

Residuals (REP 103: SI units, radians, body x forward / y left, CCW positive):

* yaw-rate residual [rad/s]: measured yaw rate (IMU, else localisation twist) minus the
  kinematic yaw rate ψ̇ = v·cos β·tan δ / L (Rajamani 2012);
* sideslip residual [rad]: measured body sideslip atan2(vy, vx) minus kinematic β;
* open-loop drift [m, rad]: kinematic dead reckoning anchored to a localisation pose,
  compared with localisation after a horizon, in the anchor's body axes;
* longitudinal slip ratio [-]: κ = (Ω·R_e − V_x) / V_x (ISO 8855 / Pacejka sign, positive
  when driving), denominator guarded at low speed;
* grip in use [-]: |a_y| / g, a lower bound on the friction coefficient in use, compared
  with the kinematic-consistency envelope 0.5·μ·g (Polack et al., IEEE IV 2017; the 0.5
  factor from memory).

Levels are REP 107 ints: OK=0, WARN=1, ERROR=2, STALE=3.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from kinematic_monitor.core.geometry import angle_diff, rotate_to_body
from kinematic_monitor.core.stats import Cusum

OK = 0
WARN = 1
ERROR = 2
STALE = 3
LEVEL_NAMES = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
GRAVITY = 9.80665  # m/s², standard gravity
KINEMATIC_ENVELOPE = 0.5  # |a_y| <= 0.5·μ·g (Polack et al. 2017, factor from memory)


@dataclass
class CheckStatus:
    """One diagnostic status: name 'kinematic_monitor: ...', level 0..3, message, values.

    ``values`` maps a key (unit in the key, e.g. 'yaw_rate_residual [rad/s]') to a string.
    """

    name: str
    level: int
    message: str
    values: dict[str, str] = field(default_factory=dict)


def kinematic_yaw_rate(v: float, delta: float, wheelbase: float, l_r: float) -> float:
    """ψ̇ = v·cos β·tan δ / L [rad/s] at the centre of gravity (Rajamani 2012)."""
    beta = math.atan(l_r * math.tan(delta) / wheelbase)
    return v * math.cos(beta) * math.tan(delta) / wheelbase


def kinematic_sideslip(delta: float, wheelbase: float, l_r: float) -> float:
    """β = atan(l_r·tan δ / L) [rad] (Rajamani 2012)."""
    return math.atan(l_r * math.tan(delta) / wheelbase)


def measured_sideslip(vx: float, vy: float) -> float:
    """Body sideslip atan2(vy, vx) [rad] from body-frame velocity [m/s]."""
    return math.atan2(vy, vx)


def slip_ratio(wheel_speed: float, ground_speed: float, min_speed: float) -> float:
    """Longitudinal slip ratio κ = (Ω·R_e − V_x) / max(|V_x|, min_speed) [-].

    ``wheel_speed`` = Ω·R_e [m/s], ``ground_speed`` = V_x [m/s] along the wheel heading.
    ISO 8855 / Pacejka sign convention: positive when driving (spin), −1 for a locked
    wheel at speed. The guard ``min_speed`` [m/s] keeps the ratio finite at standstill.
    """
    if not min_speed > 0.0:
        raise ValueError(f"min_speed must be positive, got {min_speed}")
    return (wheel_speed - ground_speed) / max(abs(ground_speed), min_speed)


def grip_in_use(lateral_accel: float) -> float:
    """|a_y| / g [-]: a lower bound on the friction coefficient being used."""
    return abs(lateral_accel) / GRAVITY


def kinematic_envelope(friction: float) -> float:
    """Largest |a_y| [m/s²] for which the kinematic model is consistent: 0.5·μ·g."""
    return KINEMATIC_ENVELOPE * friction * GRAVITY


def drift_error(
    predicted: tuple[float, float, float], measured: tuple[float, float, float]
) -> tuple[float, float, float]:
    """Error of a localisation pose vs a dead-reckoned pose (x, y, yaw) [m, m, rad].

    Returns (longitudinal [m], lateral [m], heading [rad]) of measured − predicted, in the
    predicted pose's body axes (x forward, y left).
    """
    dx = measured[0] - predicted[0]
    dy = measured[1] - predicted[1]
    lon, lat = rotate_to_body(dx, dy, predicted[2])
    return lon, lat, angle_diff(measured[2], predicted[2])


def yaw_rate_sigma(
    v: float,
    delta: float,
    wheelbase: float,
    meas_std: float,
    steer_std: float,
    speed_std: float,
    kin_rate: float,
    rel_std: float,
) -> float:
    """Standard deviation [rad/s] of one yaw-rate residual sample (first-order propagation).

    σ² = σ_meas² + (v/(L·cos²δ))²·σ_δ² + (ψ̇/v)²·σ_v² + (rel·ψ̇)²; the last term allows for
    model error of the kinematic prediction (``rel_std``, common practice, no source).
    """
    c = math.cos(delta)
    d_delta = abs(v) / (wheelbase * c * c)
    d_v = abs(kin_rate) / max(abs(v), 0.1)
    return math.sqrt(
        meas_std**2
        + (d_delta * steer_std) ** 2
        + (d_v * speed_std) ** 2
        + (rel_std * kin_rate) ** 2
    )


class LevelTracker:
    """Turns a per-decision candidate level into a level with hysteresis.

    A level is entered when the deviation has lasted ``min_duration`` [s]: counted from
    the estimated onset passed to ``update`` (e.g. the CUSUM change-point) when that is
    earlier than the first decision at the level; the alarm clears when the candidate has
    been OK for ``clear_duration`` [s]. ``update`` returns 'start', 'raise', 'end' or None.
    """

    def __init__(self, min_duration: float, clear_duration: float) -> None:
        self.min_duration = min_duration
        self.clear_duration = clear_duration
        self.level = OK
        self.max_level = OK
        self.start = math.nan
        self.end = math.nan
        self.detected_at = math.nan
        self._above_since: dict[int, float] = {}
        self._below_since = math.nan

    def reset(self) -> None:
        """Back to OK without reporting an end."""
        self.__init__(self.min_duration, self.clear_duration)  # type: ignore[misc]

    def update(
        self, candidate: int, stamp: float, onset: float = math.nan, end_hint: float = math.nan
    ) -> str | None:
        """Feed the candidate level at ``stamp`` [s]; ``onset``/``end_hint`` estimate times."""
        if candidate <= OK and self.level == OK and not self._above_since:
            return None  # OK and staying OK: what the general path below gives, unchanged
        for lvl in (WARN, ERROR):
            if candidate >= lvl:
                self._above_since.setdefault(lvl, stamp)
            else:
                self._above_since.pop(lvl, None)
        reached = OK
        for lvl in (WARN, ERROR):
            since = self._above_since.get(lvl)
            if since is not None and math.isfinite(onset):
                # the deviation has lasted since its estimated onset (e.g. the CUSUM
                # change-point), not only since the statistic crossed the threshold
                since = min(since, onset)
            # 1e-6 s slack: stamps near 1.8e9 s carry ~2.4e-7 s of float rounding
            if since is not None and stamp - since >= self.min_duration - 1e-6:
                reached = lvl
        if self.level == OK:
            if reached > OK:
                self.level = self.max_level = reached
                first = self._above_since[WARN]
                self.start = onset if math.isfinite(onset) and onset <= first else first
                self.detected_at = stamp
                self.end = math.nan
                self._below_since = math.nan
                return "start"
            return None
        if candidate > OK:
            self._below_since = math.nan
            if reached > self.level:
                self.level = reached
                self.max_level = max(self.max_level, reached)
                return "raise"
            return None
        if not math.isfinite(self._below_since):
            self._below_since = stamp
        if stamp - self._below_since >= self.clear_duration - 1e-6:
            self.level = OK
            end = end_hint if math.isfinite(end_hint) else self._below_since
            self.end = max(end, self.start)
            self._above_since.clear()
            return "end"
        return None


class CusumCheck:
    """A two-sided CUSUM on a standardised residual with WARN/ERROR thresholds and hysteresis.

    ``h_warn``/``h_error`` [σ] come from false-alarm rates (see stats.cusum_threshold).
    The statistic is capped at ``h_error`` so it falls back within about
    h_error/k decisions once the residual returns to zero mean.
    """

    def __init__(
        self,
        k: float,
        h_warn: float,
        h_error: float,
        min_duration: float,
        clear_duration: float,
    ) -> None:
        self.k = k
        self.h_warn = h_warn
        self.h_error = max(h_error, h_warn)
        self.cusum = Cusum(k, cap=self.h_error * 1.0001)
        self.tracker = LevelTracker(min_duration, clear_duration)
        self.statistic = 0.0
        self.side = 0
        self.last_z = math.nan
        self._last_excess = math.nan

    @property
    def level(self) -> int:
        """Current level (OK/WARN/ERROR)."""
        return self.tracker.level

    def reset(self, stamp: float = math.nan) -> None:
        """Forget the history (used when the check becomes inactive or time jumps)."""
        self.cusum.reset(stamp)
        self.tracker.reset()
        self.statistic = 0.0
        self.side = 0
        self._last_excess = math.nan

    def update(self, z: float, stamp: float, span: float = 0.0) -> str | None:
        """Feed one standardised residual z [σ] at ``stamp`` [s]; returns a transition.

        ``span`` [s]: z summarises data from [stamp − span, stamp) (a block mean), so a
        change first seen in it began no earlier than stamp − span: the onset estimate.
        """
        res = self.cusum.update(z, stamp)
        self.statistic, self.side, self.last_z = res.statistic, res.side, z
        if math.isfinite(z) and res.side != 0 and res.side * z > self.k:
            self._last_excess = stamp
        if res.statistic >= self.h_error:
            candidate = ERROR
        elif res.statistic >= self.h_warn:
            candidate = WARN
        else:
            candidate = OK
        onset = res.onset - span if math.isfinite(res.onset) else res.onset
        return self.tracker.update(candidate, stamp, onset, self._last_excess)


class ThresholdCheck:
    """A magnitude against WARN/ERROR thresholds (same unit), with hysteresis."""

    def __init__(
        self, warn: float, error: float, min_duration: float, clear_duration: float
    ) -> None:
        self.warn = warn
        self.error = max(error, warn)
        self.tracker = LevelTracker(min_duration, clear_duration)
        self.value = math.nan
        self._onset = math.nan
        self._last_above = math.nan

    @property
    def level(self) -> int:
        """Current level (OK/WARN/ERROR)."""
        return self.tracker.level

    def reset(self) -> None:
        """Forget the history."""
        self.tracker.reset()
        self.value = math.nan
        self._onset = math.nan
        self._last_above = math.nan

    def update(self, value: float, stamp: float, span: float = 0.0) -> str | None:
        """Feed a magnitude at ``stamp`` [s]; non-finite values count as OK.

        ``span`` [s]: the value summarises data from [stamp − span, stamp) (a block mean),
        so a deviation first seen in it began no earlier than stamp − span.
        """
        self.value = value
        mag = abs(value) if math.isfinite(value) else 0.0
        candidate = ERROR if mag >= self.error else WARN if mag >= self.warn else OK
        if candidate > OK:
            if not math.isfinite(self._onset):
                self._onset = stamp - span
            self._last_above = stamp
        elif self.tracker.level == OK:
            self._onset = math.nan
        out = self.tracker.update(candidate, stamp, self._onset, self._last_above)
        if out == "end":
            self._onset = math.nan
        return out
