"""The monitor core: samples in stamp order in, check statuses and events out (no ROS).

Every sample updates the latest inputs (``core/motion.py``) and is handed to the checks that
use it (``core/checks/``); decisions are taken on a fixed grid of ``DECISION_PERIOD`` [s] of
header-stamp time: at a grid time t only samples stamped before t have been used, so a
decision never depends on later data and a replayed bag gives the live node's events. A check
that finds a deviation reports it to the event book (``core/episodes.py``), which triages it
(``core/triage.py``) into one event per kind and episode. The pose filter
(``core/prediction.py``) gives the ``~/prediction`` estimate.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from kinematic_monitor.core.checks import CheckSet, build_checks
from kinematic_monitor.core.checks.base import (
    MODEL_TOLERANCE,
    PREFIX,
    Check,
    CheckContext,
    CheckStatus,
)
from kinematic_monitor.core.checks.yaw_rate import yaw_rate_sigma
from kinematic_monitor.core.episodes import EventBook
from kinematic_monitor.core.events import Event, Transition
from kinematic_monitor.core.levels import STALE
from kinematic_monitor.core.motion import MotionState
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.prediction import PoseFilter, Prediction
from kinematic_monitor.core.samples import (
    ChassisSample,
    GnssSample,
    ImuSample,
    LocalizationSample,
)
from kinematic_monitor.core.triage import Evidence

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig

#: decision grid [s] of header-stamp time (10 Hz; common practice, no source)
DECISION_PERIOD = 0.1
#: decisions taken through a gap without samples before skipping to its end (300 s at the
#: decision period: every input is stale long before; bounds the time a garbage future
#: stamp or a clock jump costs)
MAX_GAP_DECISIONS = 3000
#: a header stamp is builtin_interfaces/Time, int32 seconds + uint32 nanoseconds, so no
#: message can carry a stamp at or beyond 2**31 s; anything else handed to the core is garbage
MAX_STAMP = float(2**31)
COUNTERS = ("samples", "rejected_nan", "rejected_bad_stamp", "rejected_steer_range",
            "rejected_out_of_order", "rejected_type", "filter_errors", "internal_errors",
            "relocalizations", "time_resets", "notes")
_CHASSIS, _LOC, _IMU, _GNSS = range(4)
#: sample class -> kind (exact-type look-up on the hot path; subclasses via isinstance)
_SAMPLE_KINDS: dict[type, int] = {ChassisSample: _CHASSIS, LocalizationSample: _LOC,
                                  ImuSample: _IMU, GnssSample: _GNSS}
_isfinite = math.isfinite


class Monitor:
    """Kinematic consistency monitor; see the module docstring.

    ``config``: the validated configuration (``config.validation.validate``).

    Public API: ``process(sample_or_TimeReset)`` (stamp order; never raises, bad samples
    are counted in ``counters``), ``statuses()``, ``series_values()``, ``levels()``,
    ``pop_transitions()``, ``events`` (all events, open ones have ``end`` NaN),
    ``prediction()``, ``estimate()``, ``check_stale(now)``, ``declare_relocalization(stamp)``
    (reset-topic message), ``flush(end_stamp)``, ``reset_timeline(stamp)``, ``notes``.
    """

    def __init__(self, config: MonitorConfig) -> None:
        self.config = config
        self.p = config.vehicle
        self.events: list[Event] = []
        self.counters: dict[str, int] = dict.fromkeys(COUNTERS, 0)
        self.notes: list[tuple[float, str]] = []
        self._transitions: list[Transition] = []
        self.state = MotionState(config, self.counters)
        self._reset_state()

    @property
    def now(self) -> float:
        """Header stamp [s] of the latest sample processed (-inf before the first)."""
        return self.state.now

    # ------------------------------------------------------------------ state
    def _reset_state(self) -> None:
        cfg = self.config
        rate_guess = self.state.loc_rate_guess  # the update rate outlives a time reset
        self.state = st = MotionState(cfg, self.counters)
        st.loc_rate_guess = rate_guess
        self._next_decision = math.nan
        self._first_stamp = math.nan
        self._clock_t = -math.inf  # latest external clock time given to check_stale [s]
        self._active = False
        self.book = EventBook(self, self._transitions)
        self.checks: CheckSet = build_checks(CheckContext(st, self.book, DECISION_PERIOD, cfg,
                                                          self.notes, self.counters))
        self.book.attach(self.checks.statuses_order, self.checks.peaks_order)
        self.filter = PoseFilter(st, self.counters, cfg.noise.steering_angle_std,
                                 cfg.noise.wheel_speed_std, cfg.output.prediction_frame)

    def reset_timeline(self, stamp: float) -> None:
        """Time jumped backwards to ``stamp`` [s]: close open events at the last time and
        start afresh."""
        if math.isfinite(self.state.now):
            self.flush(self.state.now)
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
        """The localisation announced a deliberate jump at ``stamp`` [s] (reset topic)."""
        self.checks.loc_jump.declare(stamp)

    def _kind(self, s: Any) -> int | None:
        """The sample's kind, or None (counted) when it is no sample or its values are bad."""
        kind = _SAMPLE_KINDS.get(type(s))
        if kind is None:  # a subclass of a sample type, or not a sample at all
            kind = next((k for cls, k in _SAMPLE_KINDS.items() if isinstance(s, cls)), None)
            if kind is None:
                self.counters["rejected_type"] += 1
                return None
        stamp = s.stamp
        if type(stamp) is not float and not isinstance(stamp, (int, float)):
            self.counters["rejected_nan"] += 1
            return None
        if not 0.0 < stamp < MAX_STAMP:  # also false for NaN: then counted as NaN
            self.counters["rejected_nan" if not _isfinite(stamp) else "rejected_bad_stamp"] += 1
            return None
        if stamp < self.state.now:
            self.counters["rejected_out_of_order"] += 1
            return None
        if kind == _IMU and not _isfinite(s.yaw_rate) or kind == _LOC and not (
                _isfinite(s.x) and _isfinite(s.y) and _isfinite(s.yaw)
                and all(map(_isfinite, s.pose_cov))):
            self.counters["rejected_nan"] += 1
            return None
        return kind

    def _process(self, s: Any) -> None:
        kind = self._kind(s)
        if kind is None or kind == _GNSS:
            return
        stamp = s.stamp
        if self._first_stamp != self._first_stamp:  # NaN until the first sample
            self._first_stamp = stamp
            self._next_decision = (math.floor(stamp / DECISION_PERIOD) + 1) * DECISION_PERIOD
        if self._next_decision <= stamp:
            self._decide_until(stamp)
        self.state.now = stamp
        self.counters["samples"] += 1
        if kind == _IMU:
            self._on_imu(s)
        elif kind == _CHASSIS:
            self._on_chassis(s)
        else:
            self._on_loc(s)

    def _on_chassis(self, s: ChassisSample) -> None:
        st = self.state
        ch = st.read_chassis(s)
        if ch is None:
            return
        self.checks.drift.on_chassis(s.stamp)  # dead reckoning with the held inputs first
        st.apply_chassis(s.stamp, ch)
        self.filter.predict(s.stamp, ch.delta_meas, ch.speed)

    def _on_imu(self, s: ImuSample) -> None:
        chk = self.checks
        chk.heading.on_imu(s)
        chk.drift.on_imu(s)
        self.state.apply_imu(s)
        chk.yaw_rate.on_imu(s)

    def _on_loc(self, s: LocalizationSample) -> None:
        st, chk = self.state, self.checks
        st.begin_loc(s)
        sp, sy = st.loc_sigmas(s)
        pose = st.cg_pose(s)
        jumped = chk.loc_jump.on_loc(s, sp, sy, pose)
        st.end_loc(s, pose, sp)
        chk.heading.on_loc(s.stamp, s.yaw, sy)
        st.note_ground_speed(s)
        chk.yaw_rate.on_loc(s)
        if _isfinite(s.vx) and _isfinite(s.vy) and st.have_chassis():
            vx, vy_cg, rate = st.cg_velocity(s)
            moving = st.moving() and abs(vx) >= st.min_speed
            chk.sideslip.on_velocity(vx, vy_cg, rate, moving)
            slips = chk.wheel_slip.on_velocity(vx, vy_cg, rate, moving)
            if slips is not None:
                chk.wheel_scale.on_slips(slips[0], slips[1], vx, moving)
        chk.drift.on_loc(s.stamp, pose, sp, sy, jumped)
        nis, restarted = self.filter.update(s, jumped, sp, sy)
        if restarted:
            chk.consistency.clear()
        elif nis is not None and st.moving():
            chk.consistency.add(nis)

    # ------------------------------------------------------------------ decisions
    def _decide_until(self, stamp: float) -> None:
        """Take every decision whose grid time is <= ``stamp`` (data before it only)."""
        guard = 0
        while self._next_decision <= stamp and guard < MAX_GAP_DECISIONS:
            self._decide(self._next_decision)
            self._next_decision += DECISION_PERIOD
            guard += 1
        if guard >= MAX_GAP_DECISIONS:  # a huge gap: levels are held; skip ahead on the grid
            self._next_decision = (math.floor(stamp / DECISION_PERIOD) + 1) * DECISION_PERIOD

    def _decide(self, t: float) -> None:
        st, chk = self.state, self.checks
        self._check_inputs(t)
        n_ch = max(1, st.n_chassis_block)
        self._active = active = st.moving()
        for block in chk.block_order:
            block.decide(t, n_ch, active)
        chk.wheel_slip.decide(t, active)
        chk.grip.decide(t)
        st.n_chassis_block = 0
        self.book.update_peaks()

    def _check_inputs(self, t: float) -> None:
        # never behind the external clock of check_stale: with stamps behind the node's
        # clock (a clock offset, stamps an hour back) the inputs stay STALE instead of
        # flapping between the two clocks at the tick rate
        t = max(t, self._clock_t)
        for inp in self.checks.inputs:
            inp.decide(t, self._first_stamp)

    def check_stale(self, now: float) -> None:
        """Staleness at an external clock time ``now`` [s] (the node's clock)."""
        if not math.isfinite(now) or now < self.state.now:
            return
        self._clock_t = max(self._clock_t, now)
        self._check_inputs(now)

    # ------------------------------------------------------------------ events
    def evidence(self, channel: str, extra: dict[str, float] | None) -> Evidence:
        """The triage evidence of an alarm on ``channel`` now (the event book asks)."""
        st, p, n = self.state, self.p, self.config.noise
        slips = self.checks.wheel_slip.figures
        ev = Evidence(
            channel=channel, yaw_rate_kin=st.kin_rate,
            yaw_rate_imu=st.yaw_rate_imu if st.imu_fresh() else math.nan,
            yaw_rate_loc=st.yaw_rate_loc, lateral_accel=st.ay, speed=st.speed,
            steer=st.delta, wheelbase=p.wheelbase,
            slip_front=slips.get("slip_ratio_front [-]", math.nan),
            slip_rear=slips.get("slip_ratio_rear [-]", math.nan),
            friction_assumed=float(self.config.checks.friction_assumed))
        if _isfinite(st.speed) and _isfinite(st.delta):
            sig_v = n.wheel_speed_std * p.effective_wheel_radius
            sigma = yaw_rate_sigma(st.speed, st.delta, p.wheelbase, n.imu_yaw_rate_std,
                                   n.steering_angle_std, sig_v, st.kin_rate, MODEL_TOLERANCE)
            ev.yaw_rate_sigma = max(sigma, self.checks.yaw_rate.allowance, 0.01)
            loc_sd = n.localization_velocity_std / max(p.track_width, 1.0)
            ev.meas_sigma = math.hypot(n.imu_yaw_rate_std, max(loc_sd, n.imu_yaw_rate_std))
        self.book.checks[channel].evidence(ev)
        for k, v in (extra or {}).items():
            setattr(ev, k, v)
        return ev

    def position(self) -> tuple[float, float]:
        """The latest localised [x, y] [m] (NaN before any)."""
        loc = self.state.loc
        return (loc.x, loc.y) if loc is not None else (math.nan, math.nan)

    def first_and_now(self) -> tuple[float, float]:
        """The first and the latest stamp [s]."""
        return self._first_stamp, self.state.now

    def common_peaks(self) -> list[tuple[str, float]]:
        """The speed [m/s], kept for every event."""
        speed = self.state.speed
        return [("speed_m_s", speed if _isfinite(speed) else math.nan)]

    # ------------------------------------------------------------------ outputs
    def pop_transitions(self) -> list[Transition]:
        """Event starts and ends since the previous call, in order."""
        out, self._transitions[:] = list(self._transitions), []
        return out

    def flush(self, end_stamp: float) -> None:
        """Take the pending decisions up to ``end_stamp`` [s] and close open events there."""
        if math.isfinite(end_stamp) and end_stamp >= self.state.now and math.isfinite(
                self._next_decision):
            self._decide_until(end_stamp)
        self.book.flush(end_stamp if math.isfinite(end_stamp) else self.state.now)

    def prediction(self) -> Prediction | None:
        """The filter estimate (CG pose, speed, yaw rate), or None before initialisation."""
        return self.filter.prediction()

    def estimate(self) -> tuple[float, float, float, float] | None:
        """(x [m], y [m], yaw [rad], v [m/s]) of :meth:`prediction`, or None."""
        return self.filter.estimate()

    def _stale_inputs(self) -> set[str]:
        return {inp.input_name for inp in self.checks.inputs if inp.stale}

    @staticmethod
    def _level(check: Check, stale: set[str]) -> int:
        """A check's level for every output: STALE when an input it needs is stale."""
        return STALE if stale and check.needs & stale else int(check.level)

    def levels(self) -> list[tuple[str, int]]:
        """(check name as in the time series, level) of every check, as in ``statuses()``."""
        stale = self._stale_inputs()
        return [(c.label.replace(" ", "_"), self._level(c, stale))
                for c in self.checks.statuses_order]

    def statuses(self) -> list[CheckStatus]:
        """One status per check (REP 107 levels), figures as strings with units."""
        stale = self._stale_inputs()
        inactive = f"inactive below {self.state.min_speed:.1f} m/s"
        out: list[CheckStatus] = []
        for c in self.checks.statuses_order:
            level = self._level(c, stale)
            if level == STALE and c.needs & stale:
                msg = "input stale: " + ", ".join(sorted(c.needs & stale))
            else:
                msg = c.status_message(level, self._active, self.book.summary_for(c.name),
                                       inactive)
            out.append(CheckStatus(PREFIX + c.label, level, msg, _fmt(c.status_figures())))
        return out

    def series_values(self) -> tuple[dict[str, int], dict[str, float]]:
        """What ``statuses()`` carries, as numbers, for a time-series row (no text).

        Returns (level per check, finite figures as ``"<check>.<figure>"``), the check named
        as in ``statuses()`` with spaces as underscores ('yaw_rate', 'wheel_slip',
        'input_imu').
        """
        stale = self._stale_inputs()
        levels: dict[str, int] = {}
        values: dict[str, float] = {}
        for c in self.checks.statuses_order:
            name = c.label.replace(" ", "_")
            levels[name] = self._level(c, stale)
            for key, v in c.status_figures().items():
                if _isfinite(v):
                    values[f"{name}.{key}"] = float(v)
        return levels, values


def _fmt(figs: Mapping[str, float]) -> dict[str, str]:
    return {k: (f"{v:.6g}" if isinstance(v, float) else str(v)) for k, v in figs.items()}
