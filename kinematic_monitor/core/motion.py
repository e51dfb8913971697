"""The latest inputs and what follows from them, shared by every check (pure, no ROS).

:class:`MotionState` keeps the newest steering angle, speed, wheel speeds, IMU and
localisation samples, and derives from them what several checks use: the kinematic yaw rate
(Rajamani 2012 kinematic bicycle model at the centre of gravity, with the understeer term
δ − K·a_y), the speed over ground from the localisation twist, whether the vehicle moves, and
the transient allowance for the vehicle's yaw-response lag. Units SI, angles in radians,
body x forward / y left (REP 103); positions in the localisation frame (REP 105).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, NamedTuple

from kinematic_monitor.core import model
from kinematic_monitor.core.rates import IntervalTracker
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig

INPUTS = ("joint_states", "localization", "imu")
MIN_POSITION_STD = 1e-4  # [m] smallest localisation position std used
MIN_YAW_STD = 1e-5  # [rad] smallest localisation yaw std used
#: the steering slope for the yaw-lag allowance is taken over at least this long [s]
#: (steering noise; common practice, no source)
LAG_SLOPE_TIME = 0.05

_isfinite = math.isfinite
_NAN = math.nan


class ChassisInputs(NamedTuple):
    """A chassis sample turned into the monitor's inputs (see :meth:`MotionState.read_chassis`):
    corrected and measured bicycle angle [rad], CG speed [m/s], wheel speeds (FL, FR, RL, RR)
    [rad/s], which of steering and speed the sample carried, and its left/right angles [rad]."""

    delta: float
    delta_meas: float
    speed: float
    wheels: tuple[float, float, float, float]
    got_steer: bool
    got_speed: bool
    steer_pair: tuple[float, float]


class MotionState:
    """Latest inputs and derived quantities; see the module docstring.

    ``delta`` is the corrected bicycle road-wheel angle [rad] (measured + steering offset),
    ``delta_meas`` the measured one, ``speed`` the CG speed from the rear wheels (or a speed
    input) [m/s], ``ay`` the lateral acceleration [m/s²] (IMU, else speed·yaw rate),
    ``kin_rate`` the latest kinematic yaw rate [rad/s], ``meas_rate`` the latest measured
    yaw rate it was compared with [rad/s].
    """

    def __init__(self, config: MonitorConfig, counters: dict[str, int]) -> None:
        self.p = config.vehicle
        self.counters = counters
        c, t, n = config.checks, config.timeouts, config.noise
        self.min_speed, self.yaw_lag = c.min_speed, c.yaw_lag
        self.imu_enabled = config.inputs.imu.enabled
        self.ref_x = config.inputs.localization.reference_x
        self.timeouts = {"joint_states": t.joint_states, "localization": t.localization,
                         "imu": t.imu}  # configured [s]; see timeout()
        self.rates = {name: IntervalTracker() for name in INPUTS}
        self.position_std, self.yaw_std = n.localization_position_std, n.localization_yaw_std
        self.now = -math.inf
        self.last_seen: dict[str, float] = {k: _NAN for k in INPUTS}
        # chassis: angles, CG speed and the stamps of the latest steering and speed [s] (a
        # sample carrying only one of them reuses the other while it is fresh)
        self.delta = self.delta_meas = self.speed = self.steer_t = self.speed_t = _NAN
        self.wheels: tuple[float, float, float, float] | None = None
        self.steer_pair: tuple[float, float] = (_NAN, _NAN)
        self.n_chassis_block = 0  # complete chassis samples in the current decision block
        self.imu: ImuSample | None = None
        self.yaw_rate_imu = self.ay = self.yaw_rate_loc = self.kin_rate = self.meas_rate = _NAN
        self.loc: LocalizationSample | None = None
        # previous localisation: t, x, y, yaw (CG), position std, vx, vy (CG, body frame)
        self.loc_prev: tuple[float, float, float, float, float, float, float] | None = None
        self.ground = (_NAN, _NAN)  # (stamp, localisation CG speed [m/s])
        self.loc_rate_guess = 50.0  # Hz; refined from the data
        self.rear_slipping = False  # rear wheels' slip ratio beyond checks.slip_ratio_warn
        # the curvature [1/m] kept for one steering angle [rad]; (stamp, kinematic yaw
        # rate) for the lag slope; the transient yaw-rate allowance [rad/s]
        self._curv_delta = self._curv = _NAN
        self._kin_ref = (_NAN, _NAN)
        self.lag_allow = 0.0

    # ------------------------------------------------------------------ queries
    def timeout(self, name: str) -> float:
        """Effective timeout [s] of input ``name``: its configured ``timeouts.*``, or longer
        for an input slower than that (``rates.GAP_FACTOR`` typical intervals)."""
        return self.rates[name].timeout(self.timeouts[name])

    def have_chassis(self) -> bool:
        """Steering and speed are known."""
        return _isfinite(self.delta) and _isfinite(self.speed)

    def ground_speed(self) -> float:
        """CG speed over ground [m/s] from the localisation twist, NaN when not fresh."""
        t, v = self.ground
        if _isfinite(t) and _isfinite(v) and self.now - t <= self.timeout("localization"):
            return v
        return _NAN

    def moving(self) -> bool:
        """Moving: wheel-speed or (locked wheels) localisation speed >= checks.min_speed."""
        speed = self.speed
        if not (_isfinite(self.delta) and _isfinite(speed)):
            return False
        if abs(speed) >= self.min_speed:
            return True
        g = self.ground_speed()
        return _isfinite(g) and abs(g) >= self.min_speed

    def imu_fresh(self) -> bool:
        """An IMU sample within timeouts.imu of now."""
        t = self.last_seen["imu"]
        return self.imu_enabled and _isfinite(t) and self.now - t <= self.timeout("imu")

    def kin_speed(self) -> float:
        """Speed [m/s] for the kinematic prediction: the rear wheels' CG speed, or the
        localisation speed while the rear wheels spin or lock (their speed is not the
        vehicle's then)."""
        if self.rear_slipping:
            g = self.ground_speed()
            if _isfinite(g):
                return g
        return self.speed

    def curvature(self, delta: float) -> float:
        """``model.curvature(delta)`` [1/m], kept for the last angle (it changes only with
        the steering, while the speed changes at every sample)."""
        if delta != self._curv_delta:
            self._curv_delta = delta
            self._curv = model.curvature(delta, self.p)
        return self._curv

    def kinematic_rate(self) -> float:
        """Kinematic yaw rate [rad/s] from the latest inputs, with the understeer term
        δ − K·a_y (K = vehicle.understeer_gradient); NaN without steering or speed."""
        delta = self.delta
        if not (_isfinite(delta) and _isfinite(self.speed)):
            return _NAN
        k = self.p.understeer_gradient
        if k != 0.0 and _isfinite(self.ay):
            delta -= k * self.ay
        return self.kin_speed() * self.curvature(delta)

    # ------------------------------------------------------------------ chassis
    def read_chassis(self, s: ChassisSample) -> ChassisInputs | None:
        """The inputs a chassis sample gives, or None when it gives too little yet.

        A sample with only steering or only speed reuses the other while it is fresh
        (timeouts.joint_states); with neither fresh it is kept for later and None returned.
        Out-of-range steering is counted (``rejected_steer_range``) and None returned.
        """
        p = self.p
        hold = self.timeout("joint_states")
        got_steer = True
        if _isfinite(s.steer):
            delta_m = s.steer
        elif _isfinite(s.steer_left) and _isfinite(s.steer_right):
            try:
                delta_m = model.ackermann_to_bicycle(s.steer_left, s.steer_right, p)
            except ValueError:
                self.counters["rejected_steer_range"] += 1
                return None
        else:  # speed-only sample: reuse the latest steering while fresh
            got_steer = False
            fresh = _isfinite(self.steer_t) and s.stamp - self.steer_t <= hold
            delta_m = self.delta_meas if fresh else _NAN
        if got_steer and abs(delta_m) > p.max_road_wheel_angle:
            self.counters["rejected_steer_range"] += 1
            return None
        delta = model.corrected_steer(delta_m, p)
        wheels = (s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left,
                  s.wheel_rear_right)
        got_speed = True
        if _isfinite(wheels[2]) and _isfinite(wheels[3]) and _isfinite(delta):
            speed = model.cg_speed_from_rear_wheels(wheels[2], wheels[3], delta, p)
        elif _isfinite(s.speed):
            speed = s.speed
        else:  # steering-only sample: reuse the latest speed while fresh
            got_speed = False
            fresh = _isfinite(self.speed_t) and s.stamp - self.speed_t <= hold
            speed = self.speed if fresh else _NAN
        if not (got_steer or got_speed):
            self.counters["rejected_nan"] += 1
            return None
        if not (_isfinite(delta) and _isfinite(speed)):  # half of the inputs so far: keep it
            if got_steer:
                self.delta, self.delta_meas, self.steer_t = delta, delta_m, s.stamp
            if got_speed:
                self.speed, self.speed_t = speed, s.stamp
            self.counters["chassis_partial"] = self.counters.get("chassis_partial", 0) + 1
            return None
        return ChassisInputs(delta, delta_m, speed, wheels, got_steer, got_speed,
                             (s.steer_left, s.steer_right))

    def apply_chassis(self, stamp: float, ch: ChassisInputs) -> None:
        """Take the inputs of a complete chassis sample and update the kinematic yaw rate."""
        self.delta, self.speed = ch.delta, ch.speed
        self.delta_meas = ch.delta_meas
        if ch.got_steer:
            self.steer_t = stamp
            self.steer_pair = ch.steer_pair
        if ch.got_speed:
            self.speed_t = stamp
            w = ch.wheels
            self.wheels = w if (_isfinite(w[0]) and _isfinite(w[1]) and _isfinite(w[2])
                                and _isfinite(w[3])) else None
        self.n_chassis_block += 1
        self.last_seen["joint_states"] = stamp
        self.rates["joint_states"].note(stamp)
        self.kin_rate = self.kinematic_rate()
        self._track_kinematic_change(stamp)

    def _track_kinematic_change(self, stamp: float) -> None:
        """Transient allowance [rad/s]: yaw_lag·|d(kinematic yaw rate)/dt|, held and decayed.

        A real vehicle's yaw rate follows the kinematic (steady-state) one with a lag of
        about ``checks.yaw_lag`` [s], so while the kinematic rate changes the measured one
        trails it by about yaw_lag·|dψ̇/dt|; that is not slip. The slope is taken over
        ≥ LAG_SLOPE_TIME, the allowance decays with time constant yaw_lag.
        """
        kin = self.kin_rate
        if not _isfinite(kin) or self.yaw_lag <= 0.0:
            return
        t0, k0 = self._kin_ref
        if not _isfinite(t0) or stamp < t0:
            self._kin_ref = (stamp, kin)
            return
        dt = stamp - t0
        if dt < LAG_SLOPE_TIME:
            return
        decayed = self.lag_allow * math.exp(-dt / self.yaw_lag)
        self.lag_allow = max(self.yaw_lag * abs(kin - k0) / dt, decayed)
        self._kin_ref = (stamp, kin)

    # ------------------------------------------------------------------ IMU
    def apply_imu(self, s: ImuSample) -> None:
        """Take an IMU sample: yaw rate and lateral acceleration (else speed·yaw rate)."""
        self.last_seen["imu"] = s.stamp
        self.rates["imu"].note(s.stamp)
        self.imu = s
        rate = s.yaw_rate
        self.yaw_rate_imu = rate
        ay = s.ay
        if not _isfinite(ay):
            ay = self.speed * rate if _isfinite(self.speed) else _NAN
        self.ay = ay

    # ------------------------------------------------------------------ localisation
    def loc_sigmas(self, s: LocalizationSample) -> tuple[float, float]:
        """(position std [m], yaw std [rad]) from the message covariance or the config."""
        sp, sy = self.position_std, self.yaw_std
        if len(s.pose_cov) == 9:
            vx, vy, vyaw = s.pose_cov[0], s.pose_cov[4], s.pose_cov[8]
            if vx > 0.0 and vy > 0.0:
                sp = math.sqrt(0.5 * (vx + vy))
            if vyaw > 0.0:
                sy = math.sqrt(vyaw)
        # floors far below any real localisation: a claimed near-zero variance would
        # collapse the filter covariance to singular (common practice, no source)
        return max(sp, MIN_POSITION_STD), max(sy, MIN_YAW_STD)

    def cg_pose(self, s: LocalizationSample) -> tuple[float, float, float]:
        """CG pose (x, y [m], yaw [rad]) of a localised point ``reference_x`` ahead of it."""
        c, sn = math.cos(s.yaw), math.sin(s.yaw)
        return s.x - self.ref_x * c, s.y - self.ref_x * sn, s.yaw

    def begin_loc(self, s: LocalizationSample) -> None:
        """First step of a localisation sample: its stamp and twist yaw rate."""
        self.last_seen["localization"] = s.stamp
        self.rates["localization"].note(s.stamp)
        self.yaw_rate_loc = s.yaw_rate

    def end_loc(self, s: LocalizationSample, pose: tuple[float, float, float],
                sp: float) -> None:
        """Keep the sample as the previous one (CG pose and velocity) and the ground speed."""
        rate = s.yaw_rate
        vy_prev = s.vy - self.ref_x * (rate if _isfinite(rate) else 0.0)
        self.loc_prev = (s.stamp, pose[0], pose[1], pose[2], sp, s.vx, vy_prev)
        self.loc = s

    def note_ground_speed(self, s: LocalizationSample) -> None:
        """Speed over ground from the twist (signed by its forward component)."""
        if _isfinite(s.vx) and _isfinite(s.vy):
            self.ground = (s.stamp, math.copysign(math.hypot(s.vx, s.vy), s.vx))

    def cg_velocity(self, s: LocalizationSample) -> tuple[float, float, float]:
        """(vx, vy at the CG [m/s], yaw rate used [rad/s]) of a sample with a twist:
        vy_cg = vy − reference_x·ψ̇ (rigid body), ψ̇ from the twist, else the IMU."""
        rate = s.yaw_rate if _isfinite(s.yaw_rate) else self.yaw_rate_imu
        return s.vx, s.vy - self.ref_x * (rate if _isfinite(rate) else 0.0), rate
