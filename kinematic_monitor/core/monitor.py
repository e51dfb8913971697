"""The monitor core: samples in stamp order in, check statuses and events out (no ROS).

Data flow. Every sample updates the latest inputs; residual samples are accumulated per
channel; decisions are taken on a fixed grid of ``decision_period`` [s] (header-stamp
clock): at a grid time t, only samples with stamp < t have been used, so a decision
never depends on later data and a replayed bag gives the live node's events.

Channels (see ``checks``): yaw rate, sideslip, open-loop drift (CUSUM on standardised
block means), wheel slip per axle (thresholds), wheel-speed scale (CUSUM), localisation
jump (chi-square per update), filter consistency (windowed NIS, status only), grip in
use vs the kinematic envelope (status only), input staleness. A channel that starts an
alarm is triaged (``triage.classify``) into an event; several channels agreeing on a
kind share one event. Standardisation uses the configured sensor noise (``noise.*``)
propagated to first order plus a model-uncertainty allowance.

Parameters read with a default when the parameter schema lacks them (extension
candidates): ``checks.decision_period`` [s] 0.1, ``checks.min_shift`` [σ] 1.0,
``checks.model_tolerance`` [-] 0.05 (relative error allowed to the kinematic model),
``checks.yaw_rate_tolerance`` [rad/s] 0.01, ``checks.sideslip_tolerance`` [rad] 0.01,
``checks.understeer_tolerance`` [rad/(m/s²)] 0.0015 (linear-range understeer gradient the
yaw-rate check tolerates beyond ``vehicle.understeer_gradient``; ≈ 0.84 deg/g, an
uncertainty of the calibrated gradient; common practice, no source),
``checks.sideslip_gradient_tolerance`` [rad/(m/s²)] 0.015 (linear-range sideslip change
per lateral acceleration tolerated; common practice, no source),
``checks.wheel_scale_tolerance`` [-] 0.01, ``checks.yaw_lag`` [s] 0.2 (yaw-rate response
lag of the vehicle tolerated while the kinematic yaw rate changes; common practice, no
source), ``checks.heading_time_constant`` [s] 5.0 and ``checks.heading_tolerance``
[rad] 0.005 (localisation yaw vs IMU-integrated heading; common practice, no source),
``vehicle.understeer_gradient`` [rad/(m/s²)] 0.0, ``inputs.localization.reference_x``
[m] 0.0 (localisation child frame ahead of the CG; −l_r for a rear-axle base_link).
"""

from __future__ import annotations

import functools
import math
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from kinematic_monitor.core import model
from kinematic_monitor.core.checks.base import (
    ERROR,
    GRAVITY,
    LEVEL_NAMES,
    OK,
    STALE,
    WARN,
    CheckStatus,
    CusumCheck,
    LevelTracker,
    ThresholdCheck,
    drift_error,
    kinematic_envelope,
    slip_ratio,
    yaw_rate_sigma,
)
from kinematic_monitor.core.events import Event, Transition
from kinematic_monitor.core.geometry import angle_diff, wrap_angle
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample
from kinematic_monitor.core.stats import (
    arl_for_rate,
    chi2_upper,
    cusum_threshold,
    mean_nis_bounds,
)
from kinematic_monitor.core.triage import Evidence, Verdict, classify

PREFIX = "kinematic_monitor: "
CUSUM_CHANNELS = ("yaw_rate", "sideslip", "drift", "wheel_scale", "heading")
BLOCK_CHANNELS = ("yaw_rate", "sideslip", "wheel_scale", "heading")
STATUS_NAMES = {
    "yaw_rate": "yaw rate",
    "sideslip": "sideslip",
    "drift": "drift",
    "slip_ratio": "wheel slip",
    "wheel_scale": "wheel speed scale",
    "localization": "localization jump",
    "nis": "filter consistency",
    "heading": "localization heading",
    "grip": "grip",
}
INPUTS = ("joint_states", "localization", "imu")
#: check -> its name in time-series columns (the status label with underscores)
SERIES_CHECKS = {ch: label.replace(" ", "_") for ch, label in STATUS_NAMES.items()}
#: decisions taken through a gap without samples before skipping to its end (300 s at the
#: default period: every input is stale long before; bounds the time a garbage future stamp
#: or a clock jump costs)
MAX_GAP_DECISIONS = 3000
MIN_POSITION_STD = 1e-4  # [m] smallest localisation position std used
MIN_YAW_STD = 1e-5  # [rad] smallest localisation yaw std used
CALIBRATION_MAX_AX = 1.0  # m/s² (≈ 0.1 g): above it the wheel-scale check pauses (common
# practice, no source): drive and brake slip would look like a wheel-radius error
UNITS = {"yaw_rate": "rad/s", "sideslip": "rad", "wheel_scale": "-", "heading": "rad"}


def _opt(cfg: Any, name: str, default: Any) -> Any:
    """Parameter ``name`` from a MonitorConfig (``get``) or a mapping; else ``default``."""
    try:
        if hasattr(cfg, "get"):
            value = cfg.get(name)
            if value is not None:
                return value
    except (KeyError, TypeError):
        pass
    return default


_CHASSIS, _LOC, _IMU, _GNSS = range(4)
#: sample class -> kind (exact-type look-up on the hot path; subclasses via isinstance)
# a header stamp is builtin_interfaces/Time: int32 seconds + uint32 nanoseconds, so no
# message can carry a stamp at or beyond 2**31 s; anything else handed to the core is garbage
MAX_STAMP = float(2**31)
_SAMPLE_KINDS: dict[type, int] = {ChassisSample: _CHASSIS, LocalizationSample: _LOC,
                                  ImuSample: _IMU, GnssSample: _GNSS}
isfinite = math.isfinite


def _fin(*vals: float) -> bool:
    for v in vals:
        if not math.isfinite(v):
            return False
    return True


@dataclass
class Prediction:
    """Filter estimate for ``~/prediction``: pose [m, rad] in the localisation frame,
    CG speed [m/s], yaw rate [rad/s], (x, y, yaw) covariance row-major."""

    stamp: float
    x: float
    y: float
    yaw: float
    v: float
    yaw_rate: float
    pose_cov: tuple[float, ...]
    frame_id: str


@dataclass
class _Acc:
    """Block accumulator of a residual channel."""

    n: int = 0
    s: float = 0.0
    noise_var: float = 0.0
    allowance: float = 0.0
    all_active: bool = True

    def add(self, r: float, noise_var: float, allowance: float, active: bool) -> None:
        self.n += 1
        self.s += r
        self.noise_var += noise_var
        self.allowance += allowance
        self.all_active = self.all_active and active

    def z(self, n_eff_cap: int) -> tuple[float, float]:
        """(mean residual, standardised excess over the allowance) of the block."""
        if self.n == 0:
            return math.nan, math.nan
        return mean_excess_z(self.s / self.n, self.allowance / self.n,
                             self.noise_var / self.n, max(1, min(self.n, n_eff_cap)))


def mean_excess_z(mean: float, allowance: float, noise_var: float, n_eff: int) -> tuple[
        float, float]:
    """(mean, z): the part of |mean| beyond the model allowance, in σ of the block mean.

    The allowance is a dead band for the kinematic model's own error (deterministic, so
    it does not average out); the noise variance of one sample shrinks with ``n_eff``.
    """
    excess = math.copysign(max(0.0, abs(mean) - allowance), mean)
    sd = math.sqrt(noise_var / n_eff)
    return mean, excess / sd if sd > 0.0 else math.nan


@dataclass
class _EventSlot:
    event: Event
    channels: set[str] = field(default_factory=set)


class Monitor:
    """Kinematic consistency monitor; see the module docstring.

    ``config``: a ``params.MonitorConfig`` or a mapping of dotted parameter names
    (validated with ``params.validate``; a bad value raises ``params.ParamError``).

    Public API: ``process(sample_or_TimeReset)`` (stamp order; never raises, bad samples
    are counted in ``counters``), ``statuses() -> list[CheckStatus]``,
    ``pop_transitions() -> list[events.Transition]``, ``events`` (all events, open ones
    have ``end`` NaN), ``prediction() -> Prediction | None``, ``check_stale(now)``,
    ``declare_relocalization(stamp)`` (reset-topic message), ``flush(end_stamp)``,
    ``reset_timeline(stamp)``, ``notes`` (relocalisations and other non-events).
    """

    def __init__(self, config: Any) -> None:
        if isinstance(config, Mapping):
            from kinematic_monitor.config.validation import validate

            config = validate(config)
        self.config = config
        self.p: model.VehicleParams = config.vehicle_params()
        c = config.checks
        n = config.noise
        self.min_speed = float(c.min_speed)
        self.period = float(_opt(config, "checks.decision_period", 0.1))
        self.min_shift = float(_opt(config, "checks.min_shift", 1.0))
        self.model_rel = float(_opt(config, "checks.model_tolerance", 0.05))
        self.us_tol = float(_opt(config, "checks.understeer_tolerance", 0.0015))
        self.beta_ay_tol = float(_opt(config, "checks.sideslip_gradient_tolerance", 0.015))
        self.yaw_tol = float(_opt(config, "checks.yaw_rate_tolerance", 0.01))
        self.beta_tol = float(_opt(config, "checks.sideslip_tolerance", 0.01))
        self.scale_tol = float(_opt(config, "checks.wheel_scale_tolerance", 0.01))
        self.yaw_lag = float(_opt(config, "checks.yaw_lag", 0.2))
        self.heading_tau = max(float(_opt(config, "checks.heading_time_constant", 5.0)), 0.1)
        self.heading_tol = float(_opt(config, "checks.heading_tolerance", 0.005))
        self.understeer = float(_opt(config, "vehicle.understeer_gradient", 0.0))
        self.ref_x = float(_opt(config, "inputs.localization.reference_x", 0.0))
        self.friction = float(c.friction_assumed)
        self.horizon = float(c.drift_horizon)
        self.noise = n
        self.imu_enabled = bool(config.inputs.imu.enabled)
        self.timeouts = {
            "joint_states": float(config.timeouts.joint_states),
            "localization": float(config.timeouts.localization),
            "imu": float(config.timeouts.imu),
        }
        self._timeout_loc = self.timeouts["localization"]
        self._timeout_imu = self.timeouts["imu"]
        # wheel-speed noise as CG speed [m/s], for one wheel and for the mean of two
        self._sig_v = n.wheel_speed_std * self.p.effective_wheel_radius
        self._sig_v_pair = n.wheel_speed_std * self.p.effective_wheel_radius / math.sqrt(2.0)
        self.frame_id = str(_opt(config, "output.prediction_frame", "map"))
        # thresholds from the false-alarm rates
        rate = float(c.false_alarm_rate)
        err_rate = rate * (1.0 - float(c.error_confidence))
        self.k = 0.5 * self.min_shift
        self.h_warn = cusum_threshold(self.k, arl_for_rate(rate, 1.0 / self.period))
        self.h_error = cusum_threshold(self.k, arl_for_rate(err_rate, 1.0 / self.period))
        drift_rate = 1.0 / self.horizon
        self.h_warn_drift = cusum_threshold(self.k, arl_for_rate(rate, drift_rate))
        self.h_error_drift = cusum_threshold(self.k, arl_for_rate(err_rate, drift_rate))
        self.loc_rate_guess = 50.0  # Hz; refined from the data for the jump threshold
        self._rate_fa = rate
        self._rate_err = err_rate
        self.nis_window = int(c.nis_window)
        self.min_duration = float(c.min_duration)
        self.clear_duration = float(c.clear_duration)
        self.slip_warn = float(c.slip_ratio_warn)
        self.slip_error = float(c.slip_ratio_error)
        self.events: list[Event] = []
        self.counters: dict[str, int] = {
            "samples": 0,
            "rejected_nan": 0,
            "rejected_bad_stamp": 0,
            "rejected_steer_range": 0,
            "rejected_out_of_order": 0,
            "rejected_type": 0,
            "filter_errors": 0,
            "internal_errors": 0,
            "relocalizations": 0,
            "time_resets": 0,
            "notes": 0,
        }
        self.notes: list[tuple[float, str]] = []
        self._transitions: list[Transition] = []
        self._series_needs: dict[str, set[str]] | None = None
        self._series_names: dict[tuple[str, str], str] = {}
        self._reset_state()

    # ------------------------------------------------------------------ state
    def _reset_state(self) -> None:
        self.now = -math.inf
        self._next_decision = math.nan
        self._grid_k = 0
        self._first_stamp = math.nan
        self.last_seen: dict[str, float] = {k: math.nan for k in INPUTS}
        self._delta = math.nan  # bicycle steer, corrected [rad]
        self._delta_meas = math.nan  # bicycle steer as measured [rad]
        # stamps of the latest steering and speed [s]: a sample carrying only one of them
        # (separate steering and speed topics) reuses the other while it is fresh
        self._steer_t = math.nan
        self._speed_t = math.nan
        self._speed = math.nan  # CG speed from rear wheels [m/s]
        self._wheels: tuple[float, float, float, float] | None = None
        self._steer_pair: tuple[float, float] = (math.nan, math.nan)
        self._imu: ImuSample | None = None
        self._loc: LocalizationSample | None = None
        # previous localisation: t, x, y, yaw, position std, vx, vy (CG, body frame)
        self._loc_prev: tuple[float, float, float, float, float, float, float] | None = None
        self._meas_rate = math.nan
        self._ay = math.nan
        self._n_chassis_block = 0
        self._acc: dict[str, _Acc] = {ch: _Acc() for ch in BLOCK_CHANNELS}
        # heading check: IMU-integrated heading [rad], its last stamp, and the slowly
        # tracked offset between localisation yaw and that heading [rad]
        self._imu_heading = 0.0
        self._heading_t = math.nan
        self._heading_offset = math.nan
        self._heading_prev_t = math.nan
        self._heading_n = 0
        self._slip_acc: dict[str, list[float]] = {"front": [], "rear": []}
        self._kin_rate = math.nan
        self._curv_delta = math.nan  # steering angle [rad] of the kept curvature [1/m]
        self._curv = math.nan
        self._yaw_allow = 0.0  # latest yaw-rate allowance [rad/s]
        self._kin_ref = (math.nan, math.nan)  # (stamp, kinematic yaw rate) for the slope
        self._lag_allow = 0.0  # transient allowance [rad/s]
        self._ground = (math.nan, math.nan)  # (stamp, localisation CG speed [m/s])
        self._rear_slipping = False  # rear wheels' slip ratio beyond checks.slip_ratio_warn
        self._beta_allow = 0.0  # latest sideslip allowance [rad]
        self._yaw_rate_loc = math.nan
        self._yaw_rate_imu = math.nan
        self._cusum: dict[str, CusumCheck] = {
            ch: CusumCheck(
                self.k,
                self.h_warn_drift if ch == "drift" else self.h_warn,
                self.h_error_drift if ch == "drift" else self.h_error,
                self.min_duration,
                self.clear_duration,
            )
            for ch in CUSUM_CHANNELS
        }
        self._slip = ThresholdCheck(self.slip_warn, self.slip_error, self.min_duration,
                                    self.clear_duration)
        self._jump = ThresholdCheck(math.inf, math.inf, 0.0, self.clear_duration)
        self._grip = ThresholdCheck(kinematic_envelope(self.friction), math.inf,
                                    self.min_duration, self.clear_duration)
        self._stale = {k: LevelTracker(0.0, 0.0) for k in INPUTS}
        self._active = False
        self._figures: dict[str, dict[str, float]] = {k: {} for k in STATUS_NAMES}
        self._figures.update({f"input_{k}": {} for k in INPUTS})
        self._slots: dict[str, _EventSlot] = {}  # kind -> open event
        self._channel_kind: dict[str, str] = {}
        # drift dead reckoning
        self._dr: tuple[float, float, float] | None = None
        self._dr_t = math.nan
        self._dr_anchor_t = math.nan
        self._dr_dist = 0.0
        self._dr_nchassis = 0
        self._dr_dyaw = 0.0
        self._dr_imu_dyaw = math.nan
        self._imu_t = math.nan
        # kinematic, IMU, localisation heading rates over the last drift window [rad/s],
        # σ of a kinematic comparison and σ of IMU vs localisation
        self._drift_rates = (math.nan,) * 5
        # filter
        self._ekf: Any = None
        self._nis: deque[float] = deque(maxlen=max(1, self.nis_window))
        self._nis_dof = 3
        self._declared_reset_t = -math.inf
        self._clock_t = -math.inf  # latest external clock time given to check_stale [s]

    def reset_timeline(self, stamp: float) -> None:
        """Time jumped backwards: close open events at the last time and start afresh."""
        if math.isfinite(self.now):
            self.flush(self.now)
        self.counters["time_resets"] += 1
        self._reset_state()

    # ------------------------------------------------------------------ input
    def process(self, sample: Any) -> None:
        """Consume one sample (stamp order) or a ``TimeReset`` marker. Never raises."""
        if isinstance(sample, TimeReset):
            self.reset_timeline(sample.stamp)
            return
        try:
            self._process(sample)
        except Exception as exc:  # defensive: a bad sample is counted, never a crash
            self.counters["internal_errors"] += 1
            if len(self.notes) < 1000:
                self.notes.append((getattr(sample, "stamp", math.nan),
                                   f"internal error: {type(exc).__name__}: {exc}"))

    def declare_relocalization(self, stamp: float) -> None:
        """The localisation announced a deliberate jump (e.g. a reset topic message)."""
        self._declared_reset_t = stamp

    def _process(self, s: Any) -> None:
        kind = _SAMPLE_KINDS.get(type(s))
        if kind is None:  # a subclass of a sample type, or not a sample at all
            kind = next((k for cls, k in _SAMPLE_KINDS.items() if isinstance(s, cls)), None)
            if kind is None:
                self.counters["rejected_type"] += 1
                return
        stamp = s.stamp
        if type(stamp) is not float and not isinstance(stamp, (int, float)):
            self.counters["rejected_nan"] += 1
            return
        if not 0.0 < stamp < MAX_STAMP:  # also false for NaN: then counted as NaN
            self.counters["rejected_nan" if not isfinite(stamp) else "rejected_bad_stamp"] += 1
            return
        if stamp < self.now:
            self.counters["rejected_out_of_order"] += 1
            return
        if kind == _IMU:
            if not isfinite(s.yaw_rate):
                self.counters["rejected_nan"] += 1
                return
        elif kind == _LOC:
            if not (isfinite(s.x) and isfinite(s.y) and isfinite(s.yaw)
                    and all(map(isfinite, s.pose_cov))):
                self.counters["rejected_nan"] += 1
                return
        elif kind == _GNSS:
            return
        if self._first_stamp != self._first_stamp:  # NaN until the first sample
            self._first_stamp = stamp
            self._grid_k = math.floor(stamp / self.period) + 1
            self._next_decision = self._grid_k * self.period
        if self._next_decision <= stamp:
            self._decide_until(stamp)
        self.now = stamp
        self.counters["samples"] += 1
        if kind == _IMU:
            self._on_imu(s)
        elif kind == _CHASSIS:
            self._on_chassis(s)
        else:
            self._on_loc(s)

    # ------------------------------------------------------------------ chassis
    def _on_chassis(self, s: ChassisSample) -> None:
        p = self.p
        hold = self.timeouts["joint_states"]
        got_steer = True
        if isfinite(s.steer):
            delta_m = s.steer
        elif isfinite(s.steer_left) and isfinite(s.steer_right):
            try:
                delta_m = model.ackermann_to_bicycle(s.steer_left, s.steer_right, p)
            except ValueError:
                self.counters["rejected_steer_range"] += 1
                return
        else:  # speed-only sample: reuse the latest steering while fresh
            got_steer = False
            fresh = isfinite(self._steer_t) and s.stamp - self._steer_t <= hold
            delta_m = self._delta_meas if fresh else math.nan
        if got_steer and abs(delta_m) > p.max_road_wheel_angle:
            self.counters["rejected_steer_range"] += 1
            return
        delta = delta_m + p.steering_offset  # model.corrected_steer
        wheels = (s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left, s.wheel_rear_right)
        got_speed = True
        tan_d = cos_b = math.nan  # tan(delta), cos(sideslip(delta)) when computed below
        wb = p.wheelbase
        if isfinite(wheels[2]) and isfinite(wheels[3]) and isfinite(delta):
            # model.cg_speed_from_rear_wheels inlined: the same operations in the same order
            tan_d = math.tan(delta)
            cos_b = math.cos(math.atan(p.cg_to_rear_axle * tan_d / wb))
            speed = 0.5 * p.effective_wheel_radius * (wheels[2] + wheels[3]) / cos_b
        elif isfinite(s.speed):
            speed = s.speed
        else:  # steering-only sample: reuse the latest speed while fresh
            got_speed = False
            fresh = isfinite(self._speed_t) and s.stamp - self._speed_t <= hold
            speed = self._speed if fresh else math.nan
        if not (got_steer or got_speed):
            self.counters["rejected_nan"] += 1
            return
        if not (isfinite(delta) and isfinite(speed)):  # half of the inputs so far: keep it
            if got_steer:
                self._delta, self._delta_meas, self._steer_t = delta, delta_m, s.stamp
            if got_speed:
                self._speed, self._speed_t = speed, s.stamp
            self.counters["chassis_partial"] = self.counters.get("chassis_partial", 0) + 1
            return
        stamp = s.stamp
        # _dr_advance(stamp) inlined (the inputs held until now)
        dr = self._dr
        if dr is not None and stamp > self._dr_t:
            held_d, held_v = self._delta, self._speed
            if isfinite(held_d) and isfinite(held_v):
                dt = stamp - self._dr_t
                x, y, yaw = dr
                dr = self._dr = model.step(x, y, yaw, held_v, held_d, dt, p)
                self._dr_dist += abs(held_v) * dt
                self._dr_dyaw += angle_diff(dr[2], yaw)
                self._dr_t = stamp
        self._delta, self._speed = delta, speed
        self._delta_meas = delta_m
        if got_steer:
            self._steer_t = stamp
            self._steer_pair = (s.steer_left, s.steer_right)
        if got_speed:
            self._speed_t = stamp
            self._wheels = wheels if (isfinite(wheels[0]) and isfinite(wheels[1])
                                      and isfinite(wheels[2]) and isfinite(wheels[3])) else None
        self._n_chassis_block += 1
        self._dr_nchassis += 1
        self.last_seen["joint_states"] = stamp
        # _kinematic_rate() inlined (delta and speed are finite here)
        d = delta
        if self.understeer != 0.0 and isfinite(self._ay):
            d -= self.understeer * self._ay
        if d != self._curv_delta:
            self._curv_delta = d
            if d is delta and isfinite(cos_b):  # no understeer term (same float object)
                # model.curvature(delta) = cos(sideslip) * tan(delta) / L: both computed above
                self._curv = cos_b * tan_d / wb
            else:
                self._curv = model.curvature(d, p)
        kin_speed = speed
        if self._rear_slipping:
            g = self._ground_speed()
            if isfinite(g):
                kin_speed = g
        self._kin_rate = kin_speed * self._curv
        self._track_kinematic_change(stamp)
        if self._ekf is not None:
            try:
                self._ekf.predict(stamp, delta_m, speed)
            except (ValueError, RuntimeError):
                self.counters["filter_errors"] += 1
                self._ekf = None

    def _track_kinematic_change(self, stamp: float) -> None:
        """Transient allowance [rad/s]: yaw_lag·|d(kinematic yaw rate)/dt|, held and decayed.

        A real vehicle's yaw rate follows the kinematic (steady-state) one with a lag of
        about ``checks.yaw_lag`` [s], so while the kinematic rate changes the measured one
        trails it by about yaw_lag·|dψ̇/dt|; that is not slip. The slope is taken over
        ≥ 0.05 s (steering noise), the allowance decays with time constant yaw_lag.
        """
        kin = self._kin_rate
        if not isfinite(kin) or self.yaw_lag <= 0.0:
            return
        t0, k0 = self._kin_ref
        if not isfinite(t0) or stamp < t0:
            self._kin_ref = (stamp, kin)
            return
        dt = stamp - t0
        if dt < 0.05:
            return
        decayed = self._lag_allow * math.exp(-dt / self.yaw_lag)
        self._lag_allow = max(self.yaw_lag * abs(kin - k0) / dt, decayed)
        self._kin_ref = (stamp, kin)

    def _kinematic_rate(self) -> float:
        """Kinematic yaw rate [rad/s] from the latest inputs (with understeer allowance)."""
        delta = self._delta
        if not (isfinite(delta) and isfinite(self._speed)):
            return math.nan
        if self.understeer != 0.0 and isfinite(self._ay):
            delta -= self.understeer * self._ay
        # model.yaw_rate(v, delta) = v * model.curvature(delta): the curvature changes only
        # with the steering, so it is kept for the last angle (same floats, fewer calls)
        if delta != self._curv_delta:
            self._curv_delta = delta
            self._curv = model.curvature(delta, self.p)
        return self._kin_speed() * self._curv

    def _have_chassis(self) -> bool:
        return isfinite(self._delta) and isfinite(self._speed)

    def _ground_speed(self) -> float:
        """CG speed over ground [m/s] from the localisation twist, NaN when not fresh."""
        t, v = self._ground
        if isfinite(t) and isfinite(v) and self.now - t <= self._timeout_loc:
            return v
        return math.nan

    def _moving(self) -> bool:
        """Moving: wheel-speed or (locked wheels) localisation speed >= checks.min_speed."""
        speed = self._speed
        if not (isfinite(self._delta) and isfinite(speed)):
            return False
        if abs(speed) >= self.min_speed:
            return True
        g = self._ground_speed()
        return isfinite(g) and abs(g) >= self.min_speed

    def _kin_speed(self) -> float:
        """Speed [m/s] for the kinematic prediction: the rear wheels' CG speed, or the
        localisation speed while the rear wheels spin or lock (their speed is not the
        vehicle's then)."""
        if self._rear_slipping:
            g = self._ground_speed()
            if isfinite(g):
                return g
        return self._speed

    # ------------------------------------------------------------------ IMU
    def _on_imu(self, s: ImuSample) -> None:
        stamp, rate = s.stamp, s.yaw_rate
        ht = self._heading_t
        if isfinite(ht):
            if 0.0 < stamp - ht <= self._timeout_imu:
                self._imu_heading += rate * (stamp - ht)
            elif stamp > ht:
                self._heading_offset = math.nan  # gap: the integrated heading is lost
        self._heading_t = stamp
        if self._dr is not None and isfinite(self._imu_t) and stamp > self._dr_anchor_t:
            t0 = max(self._imu_t, self._dr_anchor_t)
            self._dr_imu_dyaw += rate * (stamp - t0)
        self._imu_t = stamp
        self.last_seen["imu"] = stamp
        self._imu = s
        self._yaw_rate_imu = rate
        speed = self._speed
        ay = s.ay
        ay_fin = isfinite(ay)
        if not ay_fin:
            ay = speed * rate if isfinite(speed) else math.nan
            ay_fin = isfinite(ay)
        self._ay = ay
        delta = self._delta
        if not (isfinite(delta) and isfinite(speed)):
            return
        # _add_yaw_residual(rate, imu_yaw_rate_std) inlined (most frequent sample type):
        # the same operations in the same order, so the same floats
        d = delta
        if self.understeer != 0.0 and ay_fin:
            d -= self.understeer * ay
        if d != self._curv_delta:
            self._curv_delta = d
            # model.curvature(d, p) = cos(model.sideslip(d, p)) * tan(d) / L, inlined
            wb = self.p.wheelbase
            tan_d = math.tan(d)
            self._curv = math.cos(math.atan(self.p.cg_to_rear_axle * tan_d / wb)) * tan_d / wb
        kin_speed = speed
        if self._rear_slipping:
            g = self._ground_speed()
            if isfinite(g):
                kin_speed = g
        kin = kin_speed * self._curv
        self._kin_rate = kin
        self._meas_rate = rate
        # checks.yaw_rate_sigma(speed, delta, L, σ_imu, σ_δ, σ_v pair, kin, 0.0)
        wheelbase = self.p.wheelbase
        c = math.cos(delta)
        abs_v = abs(speed)
        d_delta = abs_v / (wheelbase * c * c)
        d_v = abs(kin) / max(abs_v, 0.1)
        noise = math.sqrt(self.noise.imu_yaw_rate_std**2
                          + (d_delta * self.noise.steering_angle_std) ** 2
                          + (d_v * self._sig_v_pair) ** 2
                          + (0.0 * kin) ** 2)
        ay_abs = abs(ay) if ay_fin else abs(rate * speed)
        allow = (self.model_rel * abs(kin) + self.yaw_tol + self._lag_allow
                 + abs_v / wheelbase * self.us_tol * ay_abs)
        self._yaw_allow = allow
        if abs_v >= self.min_speed:
            moving = True
        else:
            g = self._ground_speed()
            moving = isfinite(g) and abs(g) >= self.min_speed
        acc = self._acc["yaw_rate"]
        acc.n += 1
        acc.s += rate - kin
        acc.noise_var += noise**2
        acc.allowance += allow
        acc.all_active = acc.all_active and moving

    def _imu_fresh(self) -> bool:
        t = self.last_seen["imu"]
        return self.imu_enabled and isfinite(t) and self.now - t <= self._timeout_imu

    def _add_yaw_residual(self, meas: float, meas_std: float) -> None:
        kin = self._kinematic_rate()
        self._kin_rate = kin
        self._meas_rate = meas
        noise = yaw_rate_sigma(self._speed, self._delta, self.p.wheelbase, meas_std,
                               self.noise.steering_angle_std, self._sig_v_pair, kin, 0.0)
        ay = abs(self._ay) if isfinite(self._ay) else abs(meas * self._speed)
        allow = (self.model_rel * abs(kin) + self.yaw_tol + self._lag_allow
                 + abs(self._speed) / self.p.wheelbase * self.us_tol * ay)
        self._yaw_allow = allow
        self._acc["yaw_rate"].add(meas - kin, noise**2, allow, self._moving())

    # ------------------------------------------------------------------ localisation
    def _loc_sigmas(self, s: LocalizationSample) -> tuple[float, float]:
        """(position std [m], yaw std [rad]) from the message covariance or config."""
        sp, sy = self.noise.localization_position_std, self.noise.localization_yaw_std
        if len(s.pose_cov) == 9:
            vx, vy, vyaw = s.pose_cov[0], s.pose_cov[4], s.pose_cov[8]
            if vx > 0.0 and vy > 0.0:
                sp = math.sqrt(0.5 * (vx + vy))
            if vyaw > 0.0:
                sy = math.sqrt(vyaw)
        # floors far below any real localisation: a claimed near-zero variance would
        # collapse the filter covariance to singular (common practice, no source)
        return max(sp, MIN_POSITION_STD), max(sy, MIN_YAW_STD)

    def _cg_pose(self, s: LocalizationSample) -> tuple[float, float, float]:
        c, sn = math.cos(s.yaw), math.sin(s.yaw)
        return s.x - self.ref_x * c, s.y - self.ref_x * sn, s.yaw

    def _on_loc(self, s: LocalizationSample) -> None:
        self.last_seen["localization"] = s.stamp
        sp, sy = self._loc_sigmas(s)
        pose = self._cg_pose(s)
        prev = self._loc_prev
        meas_rate = s.yaw_rate
        self._yaw_rate_loc = meas_rate
        # --- jump test against the short kinematic prediction from the previous update
        jumped = False
        if prev is not None and self._have_chassis():
            t0, x0, y0, yaw0, sp0, vx0, vy0 = prev
            dt = max(s.stamp - t0, 0.0)
            if dt > 0.0:
                self.loc_rate_guess = 0.9 * self.loc_rate_guess + 0.1 / max(dt, 1e-3)
            rate = self._kinematic_rate()
            # (a) kinematic prediction from the previous pose
            pred = model.step(x0, y0, yaw0, self._speed, self._delta, dt, self.p)
            lon, lat, dyaw = drift_error(pred, pose)
            sig_v = self.noise.wheel_speed_std * self.p.effective_wheel_radius
            var_p = sp**2 + sp0**2 + (dt * sig_v) ** 2 + (self.model_rel * abs(self._speed)
                                                          * dt) ** 2
            var_y = 2.0 * sy**2 + (dt * (self.model_rel * abs(rate) + self.yaw_tol)) ** 2
            nis_jump = (lon**2 + lat**2) / var_p + dyaw**2 / var_y
            # (b) prediction from measured motion: the previous body velocity and the IMU
            # (or localisation) yaw rate; a slide is consistent with it, a jump is not
            m_rate = self._yaw_rate_imu if self._imu_fresh() else meas_rate
            if isfinite(vx0) and isfinite(vy0) and isfinite(m_rate):
                ym = yaw0 + 0.5 * m_rate * dt
                c, sn = math.cos(ym), math.sin(ym)
                pm = (x0 + (c * vx0 - sn * vy0) * dt, y0 + (sn * vx0 + c * vy0) * dt,
                      yaw0 + m_rate * dt)
                lon_m, lat_m, dyaw_m = drift_error(pm, pose)
                a_max = 10.0  # m/s², bound on unmodelled acceleration (common practice)
                var_pm = sp**2 + sp0**2 + 2.0 * (dt * self.noise.localization_velocity_std) ** 2 \
                    + (0.5 * a_max * dt * dt) ** 2
                var_ym = 2.0 * sy**2 + (dt * self.noise.imu_yaw_rate_std) ** 2 + (
                    0.5 * a_max / self.p.wheelbase * dt * dt) ** 2
                nis_m = (lon_m**2 + lat_m**2) / var_pm + dyaw_m**2 / var_ym
                nis_jump = min(nis_jump, nis_m)
            self._jump.warn, self._jump.error = self._jump_thresholds(
                max(1, round(self.loc_rate_guess)))
            jump_pos = math.hypot(lon, lat)
            f = self._figures["localization"]
            f["jump_position [m]"] = jump_pos
            f["jump_heading [rad]"] = dyaw
            f["jump_nis [-]"] = nis_jump
            f["jump_nis_warn [-]"] = self._jump.warn
            declared = self._declared_reset_t >= t0 or (sp < 0.5 * sp0)
            if nis_jump >= self._jump.warn:
                jumped = True
                if declared:
                    self.counters["relocalizations"] += 1
                    self.notes.append((s.stamp, f"relocalisation declared: jumped "
                                       f"{jump_pos:.2f} m (note, not a fault)"))
                    self.counters["notes"] += 1
                    nis_jump = 0.0
            out = self._jump.update(nis_jump, s.stamp)
            self._handle("localization", out, s.stamp, extra={"loc_jump": jump_pos})
            if dt > 0 and not jumped and not isfinite(meas_rate):
                self._yaw_rate_loc = dyaw / dt + rate
        meas_fin = isfinite(meas_rate)
        vy_prev = s.vy - self.ref_x * (meas_rate if meas_fin else 0.0)
        self._loc_prev = (s.stamp, pose[0], pose[1], pose[2], sp, s.vx, vy_prev)
        self._loc = s
        self._heading_sample(s.stamp, s.yaw, sy)
        vel_fin = isfinite(s.vx) and isfinite(s.vy)
        if vel_fin:
            self._ground = (s.stamp, math.copysign(math.hypot(s.vx, s.vy), s.vx))
        have_chassis = isfinite(self._delta) and isfinite(self._speed)
        # --- yaw rate from localisation when no IMU
        if meas_fin and have_chassis and not self._imu_fresh():
            sig = self.noise.localization_velocity_std / max(self.p.track_width, 1.0)
            self._add_yaw_residual(meas_rate, max(sig, self.noise.imu_yaw_rate_std))
        # --- sideslip and wheel slip from the body velocity
        if vel_fin and isfinite(self._delta) and isfinite(self._speed):
            rate_m = meas_rate if meas_fin else self._yaw_rate_imu
            vy_cg = s.vy - self.ref_x * (rate_m if isfinite(rate_m) else 0.0)
            vx = s.vx
            moving = self._moving() and abs(vx) >= self.min_speed
            beta_m = math.atan2(vy_cg, vx) if vx >= 0 else math.atan2(-vy_cg, -vx)
            beta_k = model.sideslip(self._delta, self.p)
            sv = self.noise.localization_velocity_std
            noise = (sv / max(abs(vx), self.min_speed, 0.1)) ** 2 + (
                self.p.cg_to_rear_axle / self.p.wheelbase * self.noise.steering_angle_std) ** 2
            ay = abs(self._ay) if isfinite(self._ay) else (
                abs(vx * rate_m) if isfinite(rate_m) else 0.0)
            allow = self.model_rel * abs(beta_k) + self.beta_tol + self.beta_ay_tol * ay
            self._beta_allow = allow
            self._acc["sideslip"].add(beta_m - beta_k, noise, allow, moving)
            f = self._figures["sideslip"]
            f["sideslip_measured [rad]"] = beta_m
            f["sideslip_kinematic [rad]"] = beta_k
            self._slip_sample(vx, vy_cg, rate_m, moving)
        # --- drift
        self._drift_on_loc(s.stamp, pose, sp, sy, jumped)
        # --- filter
        self._filter_on_loc(s, jumped, sp, sy)

    def _heading_sample(self, stamp: float, yaw: float, sy: float) -> None:
        """Localisation yaw vs the IMU-integrated heading (a heading drift or yaw jump of the
        localisation; immune to tyre slip, which both sensors see alike).

        e = wrap(yaw − ∫ψ̇_IMU − offset); the offset follows e with time constant
        ``checks.heading_time_constant`` τ [s] (absorbs a constant offset and gyro bias: a
        bias b leaves b·τ, covered by ``checks.heading_tolerance`` [rad]). A ramp (drift)
        keeps e growing; a step is absorbed after a few τ.
        """
        if not self._imu_fresh() or not (isfinite(yaw) and isfinite(self._heading_t)) or \
                stamp - self._heading_t > self.timeouts["imu"]:
            self._heading_offset = math.nan
            return
        # IMU heading extrapolated to the localisation stamp with the latest rate
        head = self._imu_heading + self._yaw_rate_imu * (stamp - self._heading_t)
        diff = yaw - head
        if not isfinite(self._heading_offset):
            self._heading_offset = diff
            self._heading_prev_t = stamp
            self._heading_n = 1
            return
        e = angle_diff(diff, self._heading_offset)
        dt = max(stamp - self._heading_prev_t, 0.0)
        self._heading_prev_t = stamp
        self._heading_n += 1
        # running mean at first, then an exponential average with time constant τ
        n_ema = max(2.0 * self.heading_tau / max(dt, 1e-3), 1.0)
        gain = max(min(dt / self.heading_tau, 1.0), 1.0 / self._heading_n)
        self._heading_offset += gain * e
        self._figures["heading"].update({"heading_error [rad]": e})
        if self._heading_n < 10:  # offset still settling
            return
        # e = noise of this yaw minus the offset's own error (averaged over ~n samples);
        # the integrated IMU noise grows as σ·sqrt(dt_imu·τ) (dt_imu ≈ 0.01 s assumed)
        n_off = min(float(self._heading_n), n_ema)
        noise = sy**2 * (1.0 + 1.0 / n_off) + (self.noise.imu_yaw_rate_std**2) * 0.01 * (
            self.heading_tau)
        self._acc["heading"].add(e, noise, self.heading_tol, self._moving())

    @functools.lru_cache(maxsize=64)  # noqa: B019 (one monitor per process, few rates)
    def _nis_bounds(self, dof: int, n: int, loc_rate_hz: int) -> tuple[float, float, float]:
        """Mean-NIS bounds over ``n`` updates: (95 % lower, 95 % upper, WARN) where WARN
        is the chi-square(dof·n)/n quantile for ``checks.false_alarms_per_hour`` windows."""
        windows_per_hour = 3600.0 * loc_rate_hz / n
        conf = 1.0 - min(0.5, self._rate_fa / windows_per_hour)
        lo, hi = mean_nis_bounds(dof, n, 0.95)
        return lo, hi, chi2_upper(dof * n, conf) / n

    @functools.lru_cache(maxsize=64)  # noqa: B019 (one monitor per process, few rates)
    def _jump_thresholds(self, loc_rate_hz: int) -> tuple[float, float]:
        """chi-square(3) WARN/ERROR bounds per localisation update at ``loc_rate_hz``."""
        p_warn = self._rate_fa / (3600.0 * loc_rate_hz)
        p_err = self._rate_err / (3600.0 * loc_rate_hz)
        return chi2_upper(3, 1.0 - p_warn), chi2_upper(3, 1.0 - p_err)

    def _slip_sample(self, vx: float, vy: float, rate: float, moving: bool) -> None:
        if self._wheels is None or not moving:
            self._rear_slipping = False
            return
        p = self.p
        r_e = p.effective_wheel_radius
        w = 0.5 * p.track_width
        rate = rate if isfinite(rate) else 0.0
        fl, fr, rl, rr = self._wheels
        dl, dr = self._steer_pair
        if not (isfinite(dl) and isfinite(dr)):
            dl = dr = self._delta
        lf = p.cg_to_front_axle
        g_fl = (vx - w * rate) * math.cos(dl) + (vy + lf * rate) * math.sin(dl)
        g_fr = (vx + w * rate) * math.cos(dr) + (vy + lf * rate) * math.sin(dr)
        g_front = 0.5 * (g_fl + g_fr)
        k_front = slip_ratio(0.5 * r_e * (fl + fr), g_front, self.min_speed)
        k_rear = slip_ratio(0.5 * r_e * (rl + rr), vx, self.min_speed)
        self._rear_slipping = abs(k_rear) >= self.slip_warn
        self._slip_acc["front"].append(k_front)
        self._slip_acc["rear"].append(k_rear)
        # calibration: the smaller of two same-sign axle slips (free rolling axle)
        k_cal = 0.0
        if k_front * k_rear > 0.0:
            k_cal = math.copysign(min(abs(k_front), abs(k_rear)), k_front)
        sw = self.noise.wheel_speed_std * r_e
        sv = self.noise.localization_velocity_std
        noise = (sw**2 / 2.0 + sv**2) / max(abs(vx), self.min_speed) ** 2
        # a wheel-radius error shows at steady speed; braking and driving slip both axles
        # alike (ISO 8855 slip ∝ force), so hard braking or acceleration is left out
        imu = self._imu
        ax = imu.ax if imu is not None and self._imu_fresh() else math.nan
        steady = not (isfinite(ax) and abs(ax) > CALIBRATION_MAX_AX)
        self._acc["wheel_scale"].add(k_cal, noise, self.scale_tol, moving and steady)

    def _drift_on_loc(self, stamp: float, pose: tuple[float, float, float], sp: float,
                      sy: float, jumped: bool) -> None:
        if self._dr is None or jumped or not self._have_chassis():
            self._anchor(stamp, pose)
            return
        if stamp - self._dr_anchor_t < self.horizon - 1e-6:
            return
        self._dr_advance(stamp)
        lon, lat, dyaw = drift_error(self._dr, pose)
        dist = max(self._dr_dist, 1e-6)
        n_eff = max(1, self._dr_nchassis)
        sd_yaw_pred = self.horizon * abs(self._speed) / self.p.wheelbase * (
            self.noise.steering_angle_std / math.sqrt(n_eff))
        var_lat = 2.0 * sp**2 + (0.5 * dist * sd_yaw_pred) ** 2 + (dist * sy) ** 2
        h = max(stamp - self._dr_anchor_t, 1e-6)
        allow_yaw = self._yaw_allow * h
        allow_lat = 0.5 * dist * allow_yaw + dist * max(self._beta_allow, self.beta_tol)
        _, z = mean_excess_z(lat, allow_lat, var_lat, 1)
        loc_dyaw = angle_diff(pose[2], self._dr_yaw0)
        sd_rate = (math.sqrt(2.0 * sy**2 + sd_yaw_pred**2) + allow_yaw) / h
        # heading change: two localisation yaws, and an integrated IMU rate whose white
        # noise grows as σ·sqrt(h·dt_imu) (dt_imu ≈ 0.01 s assumed)
        sd_meas = math.hypot(math.sqrt(2.0) * sy,
                             self.noise.imu_yaw_rate_std * math.sqrt(0.01 * h)) / h
        self._drift_rates = (self._dr_dyaw / h, self._dr_imu_dyaw / h, loc_dyaw / h, sd_rate,
                             sd_meas)
        moving = self._moving() and dist >= self.min_speed * self.horizon * 0.5
        f = self._figures["drift"]
        f.update({"drift_lateral [m]": lat, "drift_longitudinal [m]": lon,
                  "drift_heading [rad]": dyaw, "drift_distance [m]": dist,
                  "drift_lateral_per_distance [-]": lat / dist,
                  "drift_heading_per_distance [rad/m]": dyaw / dist})
        chk = self._cusum["drift"]
        if moving:
            out = chk.update(z, stamp)
            self._handle("drift", out, stamp)
        else:
            self._deactivate("drift", stamp)
        self._anchor(stamp, pose)

    def _anchor(self, stamp: float, pose: tuple[float, float, float]) -> None:
        self._dr = pose
        self._dr_yaw0 = pose[2]
        self._dr_t = stamp
        self._dr_anchor_t = stamp
        self._dr_dist = 0.0
        self._dr_nchassis = 0
        self._dr_dyaw = 0.0
        self._dr_imu_dyaw = 0.0 if self._imu_fresh() else math.nan

    def _dr_advance(self, stamp: float) -> None:
        """Dead-reckon the drift pose to ``stamp`` with the inputs held since ``_dr_t``."""
        if self._dr is None or not stamp > self._dr_t or not (
                isfinite(self._delta) and isfinite(self._speed)):
            return
        dt = stamp - self._dr_t
        x, y, yaw = self._dr
        self._dr = model.step(x, y, yaw, self._speed, self._delta, dt, self.p)
        self._dr_dist += abs(self._speed) * dt
        self._dr_dyaw += angle_diff(self._dr[2], yaw)
        self._dr_t = stamp

    def _filter_on_loc(self, s: LocalizationSample, jumped: bool, sp: float, sy: float
                       ) -> None:
        """Filter update with the pose; ``sp`` [m], ``sy`` [rad] from :meth:`_loc_sigmas`."""
        cov = [[sp**2, 0.0, 0.0], [0.0, sp**2, 0.0], [0.0, 0.0, sy**2]]
        if self._ekf is None or jumped or not self._have_chassis():
            # the filter module (numpy) is imported on the first (re)initialisation only
            from kinematic_monitor.core.ekf import BicycleEKF, FilterNoise

            try:
                fn = FilterNoise(
                    steer_std=self.noise.steering_angle_std,
                    speed_std=self.noise.wheel_speed_std * self.p.effective_wheel_radius,
                )
                ekf = BicycleEKF(self.p, fn, reference_x=self.ref_x)
                v0 = self._speed if isfinite(self._speed) else 0.0
                ekf.initialise(s.stamp, s.x, s.y, s.yaw, v=v0, pose_cov=cov)
                if _fin(self._delta_meas_or_nan()):
                    ekf.predict(s.stamp, self._delta_meas_or_nan(), v0)
                self._ekf = ekf
                self._nis.clear()
            except (ValueError, RuntimeError):
                self.counters["filter_errors"] += 1
                self._ekf = None
            return
        try:
            self._ekf.predict(s.stamp, self._delta_meas_or_nan(), self._speed)
            # update_pose(s.x, s.y, s.yaw, cov) without building the Innovation arrays
            nis = self._ekf.update_pose_diag(s.x, s.y, s.yaw, cov[0][0], cov[2][2])
        except (ValueError, RuntimeError):
            self.counters["filter_errors"] += 1
            self._ekf = None
            return
        self._nis_dof = 3
        if self._moving():
            self._nis.append(float(nis))

    def _delta_meas_or_nan(self) -> float:
        return self._delta_meas

    # ------------------------------------------------------------------ decisions
    def _decide_until(self, stamp: float) -> None:
        """Take every decision whose grid time is <= ``stamp`` (data before it only)."""
        guard = 0
        while self._next_decision <= stamp and guard < MAX_GAP_DECISIONS:
            self._decide(self._next_decision)
            self._next_decision += self.period
            guard += 1
        if guard >= MAX_GAP_DECISIONS:  # a huge gap: levels are held; skip ahead on the grid
            self._grid_k = math.floor(stamp / self.period) + 1
            self._next_decision = self._grid_k * self.period

    def _decide(self, t: float) -> None:
        self._check_inputs(t)
        n_ch = max(1, self._n_chassis_block)
        self._active = self._moving()
        for ch in BLOCK_CHANNELS:
            acc = self._acc[ch]
            mean, z = acc.z(n_ch)
            chk = self._cusum[ch]
            if acc.n and acc.all_active and self._active and isfinite(z):
                self._figures[ch].update({f"block_mean_residual [{UNITS[ch]}]": mean,
                                          "excess [sigma]": z})
                out = chk.update(z, t, span=self.period)
                self._handle(ch, out, t)
            elif not self._active or (acc.n and not acc.all_active):
                self._deactivate(ch, t)
            self._acc[ch] = _Acc()
        if self._have_chassis():
            f = self._figures["yaw_rate"]
            f.update({"yaw_rate_kinematic [rad/s]": self._kin_rate,
                      "yaw_rate_measured [rad/s]": self._meas_rate,
                      "yaw_rate_residual [rad/s]": self._meas_rate - self._kin_rate})
        # wheel slip per axle
        fr, rr = self._slip_acc["front"], self._slip_acc["rear"]
        if fr and rr and self._active:
            kf, kr = sum(fr) / len(fr), sum(rr) / len(rr)
            worst = kf if abs(kf) >= abs(kr) else kr
            self._figures["slip_ratio"].update({"slip_ratio_front [-]": kf,
                                                "slip_ratio_rear [-]": kr})
            out = self._slip.update(worst, t, span=self.period)
            self._handle("slip_ratio", out, t)
        elif not self._active:
            if self._slip.level:
                out = self._slip.update(0.0, t)
                self._handle("slip_ratio", out, t)
        self._slip_acc = {"front": [], "rear": []}
        # grip in use
        ay = self._ay if isfinite(self._ay) else (
            self._speed * self._meas_rate if _fin(self._speed, self._meas_rate) else math.nan)
        if isfinite(ay):
            self._figures["grip"].update({"lateral_accel [m/s^2]": ay,
                                          "grip_in_use [g]": abs(ay) / GRAVITY,
                                          "kinematic_envelope [m/s^2]": self._grip.warn})
            self._grip.update(abs(ay), t)
        self._n_chassis_block = 0
        # update peaks of open events
        for slot in self._slots.values():
            self._update_peak(slot.event, slot.channels)

    def _deactivate(self, ch: str, t: float) -> None:
        chk = self._cusum[ch]
        if chk.level:
            self._close_channel(ch, t)
        chk.reset(t)

    def _check_inputs(self, t: float) -> None:
        # never behind the external clock of check_stale: with stamps behind the node's
        # clock (a clock offset, stamps an hour back) the inputs stay STALE instead of
        # flapping between the two clocks at the tick rate
        t = max(t, self._clock_t)
        for name in INPUTS:
            if name == "imu" and not self.imu_enabled:
                continue
            last = self.last_seen[name]
            ref = last if isfinite(last) else self._first_stamp
            stale = isfinite(ref) and t - ref > self.timeouts[name]
            level = (WARN if name == "imu" else ERROR) if stale else OK
            tr = self._stale[name]
            out = tr.update(level, t, onset=ref + self.timeouts[name] if isfinite(ref) else t,
                            end_hint=last if isfinite(last) else t)
            self._figures[f"input_{name}"] = {"age [s]": t - ref if isfinite(ref) else math.nan,
                                              "timeout [s]": self.timeouts[name]}
            self._handle(f"input_{name}", out, t)

    def check_stale(self, now: float) -> None:
        """Staleness at an external clock time ``now`` [s] (the node's clock)."""
        if not math.isfinite(now) or now < self.now:
            return
        self._clock_t = max(self._clock_t, now)
        self._check_inputs(now)

    # ------------------------------------------------------------------ events
    def _evidence(self, channel: str, extra: dict[str, float] | None = None) -> Evidence:
        f = self._figures
        ev = Evidence(
            channel=channel,
            yaw_rate_kin=self._kin_rate,
            yaw_rate_imu=self._yaw_rate_imu if self._imu_fresh() else math.nan,
            yaw_rate_loc=self._yaw_rate_loc,
            lateral_accel=self._ay,
            speed=self._speed,
            steer=self._delta,
            wheelbase=self.p.wheelbase,
            slip_front=f["slip_ratio"].get("slip_ratio_front [-]", math.nan),
            slip_rear=f["slip_ratio"].get("slip_ratio_rear [-]", math.nan),
            friction_assumed=self.friction,
        )
        if _fin(self._speed, self._delta):
            sig_v = self.noise.wheel_speed_std * self.p.effective_wheel_radius
            ev.yaw_rate_sigma = yaw_rate_sigma(
                self._speed, self._delta, self.p.wheelbase, self.noise.imu_yaw_rate_std,
                self.noise.steering_angle_std, sig_v, self._kin_rate, self.model_rel)
            ev.yaw_rate_sigma = max(ev.yaw_rate_sigma, self._yaw_allow, 0.01)
            loc_sd = self.noise.localization_velocity_std / max(self.p.track_width, 1.0)
            ev.meas_sigma = math.hypot(self.noise.imu_yaw_rate_std,
                                       max(loc_sd, self.noise.imu_yaw_rate_std))
        if channel == "drift" and _fin(self._drift_rates[0], self._drift_rates[2]):
            ev.yaw_rate_kin, ev.yaw_rate_imu, ev.yaw_rate_loc, sd, sd_m = self._drift_rates
            ev.yaw_rate_sigma = max(sd, 1e-3)
            ev.meas_sigma = max(sd_m, 1e-3)
        if extra:
            for k, v in extra.items():
                setattr(ev, k, v)
        if channel.startswith("input_"):
            ev.channel = "input"
            name = channel[len("input_"):]
            ev.detail = f"{name} input silent for more than {self.timeouts[name]:.2f} s"
        return ev

    def _position(self) -> tuple[float, float]:
        if self._loc is not None:
            return (self._loc.x, self._loc.y)
        return (math.nan, math.nan)

    def _handle(self, channel: str, out: str | None, t: float,
                extra: dict[str, float] | None = None) -> None:
        if out is None:
            return
        tracker = self._tracker(channel)
        if out == "start":
            verdict = classify(self._evidence(channel, extra))
            if channel == "drift" and "localization_fault" in self._slots:
                # drift compares dead reckoning with the localisation: while a localisation
                # fault is open, a drift alarm is that fault's consequence
                verdict = Verdict("localization_fault", "drift", verdict.summary)
            if verdict.note:
                self.counters["notes"] += 1
                self.notes.append((t, verdict.summary))
                return
            kind = verdict.kind
            slot = self._slots.get(kind)
            if slot is not None and channel == "drift":
                # the slow (1/horizon) drift channel corroborates but never prolongs an
                # episode that a faster channel opened
                return
            self._channel_kind[channel] = kind
            if slot is None:
                ev = Event(start=tracker.start, detected_at=t, kind=kind,
                           level=max(WARN, min(ERROR, tracker.level)),
                           position=self._position(), summary=verdict.summary)
                slot = _EventSlot(ev, {channel})
                self._slots[kind] = slot
                self.events.append(ev)
                self._update_peak(ev, slot.channels)
                self._transitions.append(Transition("start", ev))
            else:
                # the start stays as first detected, so a prefix of the data gives the
                # same event (causality); the level may rise
                slot.channels.add(channel)
                slot.event.level = max(slot.event.level, min(ERROR, tracker.level))
        elif out == "raise":
            open_kind = self._channel_kind.get(channel)
            if open_kind is not None and open_kind in self._slots:
                ev = self._slots[open_kind].event
                ev.level = max(ev.level, min(ERROR, tracker.level))
        elif out == "end":
            self._close_channel(channel, tracker.end)

    def _close_channel(self, channel: str, end: float) -> None:
        kind = self._channel_kind.pop(channel, None)
        if kind is None or kind not in self._slots:
            return
        slot = self._slots[kind]
        slot.channels.discard(channel)
        if not slot.channels:
            ev = slot.event
            ev.end = max(end if isfinite(end) else self.now, ev.start)
            del self._slots[kind]
            self._transitions.append(Transition("end", ev))

    def _tracker(self, channel: str) -> LevelTracker:
        if channel in self._cusum:
            return self._cusum[channel].tracker
        if channel == "slip_ratio":
            return self._slip.tracker
        if channel == "localization":
            return self._jump.tracker
        if channel.startswith("input_"):
            return self._stale[channel[len("input_"):]]
        raise KeyError(channel)

    def _update_peak(self, ev: Event, channels: set[str]) -> None:
        def peak(name: str, value: float) -> None:
            if isfinite(value) and (name not in ev.peak or abs(value) > abs(ev.peak[name])):
                ev.peak[name] = value

        if ev.kind in ("lateral_slip", "calibration_bias", "localization_fault"):
            if _fin(self._meas_rate, self._kin_rate):
                peak("yaw_rate_residual_rad_s", self._meas_rate - self._kin_rate)
            peak("lateral_accel_g", abs(self._ay) / GRAVITY if isfinite(self._ay) else math.nan)
            peak("sideslip_residual_rad",
                 self._figures["sideslip"].get("sideslip_measured [rad]", math.nan)
                 - self._figures["sideslip"].get("sideslip_kinematic [rad]", math.nan))
            peak("drift_lateral_m", self._figures["drift"].get("drift_lateral [m]", math.nan))
        if ev.kind == "localization_fault":
            peak("jump_m", self._figures["localization"].get("jump_position [m]", math.nan))
        if ev.kind in ("longitudinal_slip", "calibration_bias"):
            peak("slip_ratio_front", self._figures["slip_ratio"].get("slip_ratio_front [-]",
                                                                     math.nan))
            peak("slip_ratio_rear", self._figures["slip_ratio"].get("slip_ratio_rear [-]",
                                                                    math.nan))
        if ev.kind == "input_stale":
            for name in INPUTS:
                if f"input_{name}" in channels:
                    peak(f"{name}_age_s", self._figures[f"input_{name}"].get("age [s]", math.nan))
        peak("speed_m_s", self._speed if isfinite(self._speed) else math.nan)

    # ------------------------------------------------------------------ outputs
    def pop_transitions(self) -> list[Transition]:
        """Event starts and ends since the previous call, in order."""
        out, self._transitions = self._transitions, []
        return out

    def flush(self, end_stamp: float) -> None:
        """Take the pending decisions up to ``end_stamp`` [s] and close open events there."""
        if math.isfinite(end_stamp) and end_stamp >= self.now and math.isfinite(
                self._next_decision):
            self._decide_until(end_stamp)
        end = end_stamp if math.isfinite(end_stamp) else self.now
        for kind in list(self._slots):
            slot = self._slots.pop(kind)
            slot.event.end = max(end, slot.event.start)
            self._transitions.append(Transition("end", slot.event))
        self._channel_kind.clear()

    def prediction(self) -> Prediction | None:
        """The filter estimate (CG pose, speed, yaw rate), or None before initialisation."""
        ekf = self._ekf
        if ekf is None:
            return None
        try:
            cov = tuple(float(c) for c in ekf.pose_covariance())
            rate = model.yaw_rate(ekf.v, ekf.steer(), self.p) if hasattr(ekf, "steer") else (
                self._kin_rate)
            return Prediction(float(ekf.stamp), float(ekf.x), float(ekf.y),
                              wrap_angle(float(ekf.yaw)), float(ekf.v), float(rate), cov,
                              self.frame_id)
        except (ValueError, RuntimeError, AttributeError, TypeError):
            return None

    def estimate(self) -> tuple[float, float, float, float] | None:
        """(x [m], y [m], yaw [rad], v [m/s]) of :meth:`prediction` without its covariance
        (the same floats), or None where :meth:`prediction` gives None."""
        ekf = self._ekf
        if ekf is None:
            return None
        try:
            if hasattr(ekf, "steer"):
                model.yaw_rate(ekf.v, ekf.steer(), self.p)  # as prediction(): may raise
            return (float(ekf.x), float(ekf.y), wrap_angle(float(ekf.yaw)), float(ekf.v))
        except (ValueError, RuntimeError, AttributeError, TypeError):
            return None

    def statuses(self) -> list[CheckStatus]:
        """One status per check (REP 107 levels), figures as strings with units."""
        out: list[CheckStatus] = []
        stale_inputs = {n for n in INPUTS if self._stale[n].level}
        inactive = f"inactive below {self.min_speed:.1f} m/s"
        needs = self._needs_by_check()
        for ch, label in STATUS_NAMES.items():
            figs = dict(self._figures.get(ch, {}))
            level, msg = OK, "ok"
            if ch in self._cusum:
                chk = self._cusum[ch]
                level = chk.level
                figs["cusum [sigma]"] = chk.statistic
                figs["cusum_warn [sigma]"] = chk.h_warn
                figs["cusum_error [sigma]"] = chk.h_error
            elif ch == "slip_ratio":
                level = self._slip.level
            elif ch == "localization":
                level = self._jump.level
            elif ch == "grip":
                level = self._grip.level
                msg = "within the kinematic envelope" if level == OK else (
                    "outside the kinematic-consistency envelope 0.5*mu*g")
            elif ch == "nis":
                level, msg = self._nis_status(figs)
            if level and ch not in ("grip", "nis"):
                kind = self._channel_kind.get(ch)
                slot = self._slots.get(kind) if kind else None
                msg = slot.event.summary if slot else LEVEL_NAMES[level].lower()
            if ch != "localization" and not self._active and level == OK and ch != "grip":
                msg = inactive
            if needs[ch] & stale_inputs:
                level, msg = STALE, "input stale: " + ", ".join(sorted(needs[ch] & stale_inputs))
            out.append(CheckStatus(PREFIX + label, int(level), msg, _fmt(figs)))
        for name in INPUTS:
            if name == "imu" and not self.imu_enabled:
                continue
            tr = self._stale[name]
            figs = self._figures[f"input_{name}"]
            level = STALE if tr.level else OK
            msg = f"no {name} for more than {self.timeouts[name]:.2f} s" if tr.level else "ok"
            out.append(CheckStatus(PREFIX + f"input {name}", level, msg, _fmt(figs)))
        return out

    def series_values(self) -> tuple[dict[str, int], dict[str, float]]:
        """What ``statuses()`` carries, as numbers, for a time-series row (cheap: no text).

        Returns (level per check, finite figures as ``"<check>.<figure>"``), the check
        named as in ``statuses()`` with spaces as underscores ('yaw_rate', 'wheel_slip',
        'input_imu'); levels as in ``statuses()`` (REP 107 ints, STALE on stale inputs).
        """
        needs = self._series_needs
        if needs is None:
            needs = self._series_needs = self._needs_by_check()
        stale = {n for n in INPUTS if self._stale[n].level}
        levels: dict[str, int] = {}
        values: dict[str, float] = {}
        isfinite = math.isfinite
        names = self._series_names  # (check, figure) -> "<check>.<figure>"
        cusum = self._cusum
        for ch, check in SERIES_CHECKS.items():
            figs = self._figures.get(ch, {})
            nis_level = OK
            if ch == "nis":
                figs = dict(figs)
                nis_level = self._nis_status(figs)[0]
            level = self._check_level(ch, nis_level)
            levels[check] = int(STALE if stale and needs[ch] & stale else level)
            items = list(figs.items())
            chk = cusum.get(ch)
            if chk is not None:  # the figures, then the CUSUM's three (never among them)
                items += [("cusum [sigma]", chk.statistic), ("cusum_warn [sigma]", chk.h_warn),
                          ("cusum_error [sigma]", chk.h_error)]
            for key, v in items:
                if isfinite(v):
                    full = names.get((check, key))
                    if full is None:
                        full = names[(check, key)] = f"{check}.{key}"
                    values[full] = float(v)
        for name in INPUTS:
            if name == "imu" and not self.imu_enabled:
                continue
            check = "input_" + name
            levels[check] = STALE if self._stale[name].level else OK
            for key, v in self._figures[check].items():
                if isfinite(v):
                    values[f"{check}.{key}"] = float(v)
        return levels, values

    def series_reader(self, channels: Sequence[str], checks: Sequence[str]
                      ) -> Callable[[], tuple[list[float], list[int]]]:
        """A function giving what :meth:`series_values` gives, as two lists in a fixed order.

        ``channels``: names as in ``series_values()[1]`` ("<check>.<figure>"); ``checks``:
        names as in ``series_values()[0]``. The function returns (the value of each channel,
        NaN where ``series_values`` has none or it is not finite; the level of each check,
        OK for an unknown name). For a time series written row by row: the names are
        resolved once here instead of at every row.
        """
        internal = {check: ch for ch, check in SERIES_CHECKS.items()}
        internal.update({f"input_{n}": f"input_{n}" for n in INPUTS})
        cusum_attr = {"cusum [sigma]": "statistic", "cusum_warn [sigma]": "h_warn",
                      "cusum_error [sigma]": "h_error"}
        # per channel: (figures key in self._figures, figure name, CUSUM attribute or None)
        cols: list[tuple[str, str, str | None] | None] = []
        for name in channels:
            check, _, key = name.partition(".")
            ch = internal.get(check)
            if ch is None or not key:
                cols.append(None)
            else:
                cols.append((ch, key, cusum_attr.get(key) if ch in CUSUM_CHANNELS else None))
        levs = [internal.get(c) for c in checks]
        nan = math.nan
        empty: dict[str, float] = {}

        def read() -> tuple[list[float], list[int]]:
            figures = self._figures
            cusum = self._cusum
            nis_figs = dict(figures.get("nis", empty))
            nis_level = self._nis_status(nis_figs)[0]
            values: list[float] = []
            for col in cols:
                if col is None:
                    values.append(nan)
                    continue
                ch, key, attr = col
                if attr is not None:  # series_values: the CUSUM's value over a figure's
                    v = getattr(cusum[ch], attr)
                    if isfinite(v):
                        values.append(float(v))
                        continue
                v = (nis_figs if ch == "nis" else figures.get(ch, empty)).get(key, nan)
                values.append(float(v) if isfinite(v) else nan)
            needs = self._series_needs
            if needs is None:
                needs = self._series_needs = self._needs_by_check()
            stale = {n for n in INPUTS if self._stale[n].level}
            levels: list[int] = []
            for lch in levs:
                if lch is None:
                    levels.append(OK)
                    continue
                ch = lch
                if ch.startswith("input_"):
                    levels.append(STALE if self._stale[ch[6:]].level else OK)
                else:
                    level = self._check_level(ch, nis_level)
                    levels.append(int(STALE if stale and needs[ch] & stale else level))
            return values, levels

        return read

    def _check_level(self, ch: str, nis_level: int) -> int:
        """Level of check ``ch`` before the stale-input rule (``nis_level``: the NIS
        check's, from :meth:`_nis_status`)."""
        chk = self._cusum.get(ch)
        if chk is not None:
            return chk.level
        if ch == "slip_ratio":
            return self._slip.level
        if ch == "localization":
            return self._jump.level
        if ch == "grip":
            return self._grip.level
        if ch == "nis":
            return nis_level
        return OK

    def _needs_by_check(self) -> dict[str, set[str]]:
        """Inputs each check needs (a stale one makes the check STALE)."""
        return {"yaw_rate": {"joint_states"} | ({"imu"} if self.imu_enabled else set()),
                "sideslip": {"joint_states", "localization"},
                "drift": {"joint_states", "localization"},
                "slip_ratio": {"joint_states", "localization"},
                "wheel_scale": {"joint_states", "localization"},
                "localization": {"localization"},
                "nis": {"localization"},
                "heading": {"localization", "imu"},
                "grip": set()}

    def _nis_status(self, figs: dict[str, float]) -> tuple[int, str]:
        n = len(self._nis)
        if n < self._nis.maxlen if self._nis.maxlen else True:
            return OK, f"collecting ({n}/{self.nis_window} updates)"
        mean = sum(self._nis) / n
        # the update rate in whole Hz, as for the jump thresholds: the bounds are then
        # computed once per rate (the estimate jitters with the stamps)
        lo, hi, hi_fa = self._nis_bounds(self._nis_dof, n, max(1, round(self.loc_rate_guess)))
        figs.update({"mean_nis [-]": mean, "mean_nis_95_lower [-]": lo,
                     "mean_nis_95_upper [-]": hi, "mean_nis_warn [-]": hi_fa})
        if mean > hi_fa:
            return WARN, "localisation inconsistent with the kinematic filter"
        if mean < lo:
            return OK, "localisation covariance looks pessimistic"
        return OK, "consistent"


def _fmt(figs: Mapping[str, float]) -> dict[str, str]:
    return {k: (f"{v:.6g}" if isinstance(v, float) else str(v)) for k, v in figs.items()}
