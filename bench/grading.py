"""The detection benchmark harness: suite, pipeline and baseline (outside the package).

Scoring against truth (matching and must-detect rules) is ``kinematic_monitor.sim.scoring``.

Pipeline (the one replay uses): a ``TrueTrace`` -> simulated sensors (``SensorConfig``
defaults, i.e. the stated noise levels) -> faults -> message records -> CDR bytes
(``sim.bagout.record_cdr``, the one encoder) -> the one decoder per type (``io.decode``) ->
samples in header-stamp order -> :class:`~kinematic_monitor.core.monitor.Monitor` configured
with the vehicle's own parameters (``sim.bagout.vehicle_params``) merged into the
parameter defaults. See :func:`samples_from_records` and :func:`run_case`.

Suite (:func:`build_suite`): gentle dry driving (``gentle_loop``, |a_y| < 0.3 g, the
false-alarm set), cornering into ice and wet patches, hard acceleration and braking on ice
and snow, localisation jumps and heading drift, a steering offset, and an independent set
driven by commonroad-vehicle-models' ``vehicle_dynamics_std`` (:func:`commonroad_trace`,
our own parameter values, uniform μ 1.0 and 0.3). :func:`targets` evaluates the issue's
targets over a run.

Baseline: :class:`YawRateBaseline`, a plain |IMU yaw rate − kinematic yaw rate| over a
fixed threshold held ``min_duration``; every alarm is reported as ``lateral_slip``.
"""

from __future__ import annotations

import functools
import math
import statistics
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from kinematic_monitor.config.validation import validate
from kinematic_monitor.core import model
from kinematic_monitor.core.events import SLIP_KINDS, Event
from kinematic_monitor.core.model import GRAVITY
from kinematic_monitor.core.samples import ChassisSample, ImuSample
from kinematic_monitor.io import convert, decode
from kinematic_monitor.sim.bagout import record_cdr
from kinematic_monitor.sim.scoring import (  # noqa: F401 - re-exported for the bench
    EPOCH,
    FAULT_KINDS,
    MATCH_RULE,
    MUST_DETECT_RULE,
    TABLE_KINDS,
    Grade,
    KindRow,
    Truth,
    grade,
    must_detect,
    to_truth,
)


# --------------------------------------------------------------------------- pipeline
def joint_map(sensor_config: Any) -> convert.JointMap:
    """The JointMap of a ``sim.sensors.SensorConfig``'s joint names."""
    js = sensor_config.joint_states
    return convert.JointMap(js.steer_joints, js.wheel_joints[:2], js.wheel_joints[2:])


@functools.lru_cache(maxsize=8)
def _joint_state_decoder(jmap: convert.JointMap) -> decode.Decoder:
    return decode.joint_state_decoder(jmap)


_DECODERS: dict[str, decode.Decoder] = {"odometry": decode.odometry, "imu": decode.imu}


def sample_from_record(r: Any, jmap: convert.JointMap) -> Any:
    """One ``sim.sensors`` record to a sample (or a ``convert.Rejected``, or None for GNSS),
    through the bytes a bag would hold: encoded, then decoded as replay and the node do."""
    if r.key == "joint_states":
        return _joint_state_decoder(jmap)(record_cdr(r))
    fn = _DECODERS.get(r.key)
    return None if fn is None else fn(record_cdr(r))


def samples_from_records(records: Iterable[Any], sensor_config: Any,
                         rejected: dict[str, int] | None = None) -> list[Any]:
    """Simulated message records -> samples sorted by header stamp (stable).

    ``rejected`` (optional) counts conversion rejections by reason; GNSS is skipped (the
    monitor does not use it).
    """
    jmap = joint_map(sensor_config)
    out = []
    for r in records:
        s = sample_from_record(r, jmap)
        if s is None:
            continue
        if isinstance(s, convert.Rejected):
            if rejected is not None:
                key = str(getattr(s, "reason", s))
                rejected[key] = rejected.get(key, 0) + 1
            continue
        out.append(s)
    out.sort(key=lambda s: s.stamp)
    return out


def monitor_config(vehicle: Any, overrides: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Parameter mapping: defaults + the simulated vehicle's parameters + ``overrides``."""
    from kinematic_monitor.sim.bagout import vehicle_params

    cfg: dict[str, Any] = dict(vehicle_params(vehicle))
    if overrides:
        cfg.update(overrides)
    return cfg


def run_monitor(samples: Sequence[Any], config: Mapping[str, Any]) -> list[Event]:
    """Feed the samples to a fresh Monitor; return all its events (flushed at the end)."""
    from kinematic_monitor.core.monitor import Monitor

    m = Monitor(validate(config))
    for s in samples:
        m.process(s)
    if samples:
        m.flush(samples[-1].stamp)
    return list(m.events)


# --------------------------------------------------------------------------- baseline
class YawRateBaseline:
    """Simple baseline: |IMU yaw rate − kinematic yaw rate| > ``threshold`` [rad/s] held
    for ``min_duration`` [s] at speed ≥ ``min_speed`` [m/s] -> a ``lateral_slip`` event;
    it ends after ``clear_duration`` [s] below the threshold. No noise model, no triage.
    """

    def __init__(self, params: model.VehicleParams, threshold: float = 0.05,
                 min_duration: float = 0.2, clear_duration: float = 1.0,
                 min_speed: float = 1.0) -> None:
        self.p = params
        self.threshold = threshold
        self.min_duration = min_duration
        self.clear_duration = clear_duration
        self.min_speed = min_speed

    def run(self, samples: Iterable[Any]) -> list[Event]:
        """Events over the samples (header-stamp order)."""
        events: list[Event] = []
        delta = speed = math.nan
        above_since = below_since = math.nan
        current: Event | None = None
        t = math.nan
        for s in samples:
            t = s.stamp
            if isinstance(s, ChassisSample):
                try:
                    delta = model.ackermann_to_bicycle(s.steer_left, s.steer_right, self.p)
                    speed = model.cg_speed_from_rear_wheels(
                        s.wheel_rear_left, s.wheel_rear_right, delta, self.p)
                except (ValueError, ZeroDivisionError):
                    continue
                continue
            if not isinstance(s, ImuSample) or not math.isfinite(delta + speed):
                continue
            if abs(speed) < self.min_speed:
                bad = False
            else:
                kin = model.yaw_rate(speed, delta, self.p)
                bad = abs(s.yaw_rate - kin) > self.threshold
            if bad:
                below_since = math.nan
                if math.isnan(above_since):
                    above_since = t
                if current is None and t - above_since >= self.min_duration:
                    current = Event(start=above_since, detected_at=t, kind="lateral_slip",
                                    level=1, summary="yaw-rate residual over threshold")
                    events.append(current)
            else:
                above_since = math.nan
                if current is not None:
                    if math.isnan(below_since):
                        below_since = t
                    if t - below_since >= self.clear_duration:
                        current.end = below_since
                        current = None
        if current is not None:
            current.end = t
        return events



# --------------------------------------------------------------------------- suite
@dataclass
class Case:
    """One benchmark drive: a trace factory, faults, seed and the set it belongs to.

    ``group``: "dry" (false-alarm set: dry driving below 0.3 g), "slip", "fault" or
    "commonroad". ``make_trace(duration)`` returns a ``TrueTrace``-like object.
    """

    name: str
    group: str
    make_trace: Callable[[float], Any]
    duration: float
    faults: tuple[Any, ...] = ()
    seed: int = 1


@dataclass
class CaseResult:
    """Events of the monitor and of the baseline on one case, with the truth."""

    case: Case
    truths: list[Truth]
    events: list[Event]
    baseline: list[Event]
    hours: float
    max_abs_ay_g: float
    rejected: dict[str, int] = field(default_factory=dict)


def run_case(case: Case, overrides: Mapping[str, Any] | None = None) -> CaseResult:
    """Simulate, sense, inject faults, convert and run the monitor and the baseline."""
    import numpy as np

    from kinematic_monitor.config.validation import validate
    from kinematic_monitor.sim import faults, sensors, truth

    trace = case.make_trace(case.duration)
    scfg = sensors.SensorConfig()
    series = sensors.sample_truth(trace, scfg)
    injected = faults.apply_faults(series, list(case.faults))
    sensors.add_noise(series, scfg, seed=case.seed)
    rejected: dict[str, int] = {}
    samples = samples_from_records(sensors.iter_records(series, scfg), scfg, rejected)
    epoch = scfg.epoch_ns * 1e-9
    truths = to_truth(truth.truth_intervals(trace) + injected, epoch)
    cfg = monitor_config(trace.vehicle, overrides)
    events = run_monitor(samples, cfg)
    base = YawRateBaseline(validate(cfg).vehicle).run(samples)
    return CaseResult(case, truths, events, base, trace.duration / 3600.0,
                      float(np.max(np.abs(trace.ay))) / GRAVITY, rejected)


def table(results: Sequence[CaseResult], which: str = "events",
          groups: Iterable[str] | None = None) -> dict[str, KindRow]:
    """Per-kind rows summed over ``results`` (``which`` = "events" or "baseline")."""
    want = set(groups) if groups is not None else None
    rows = {k: KindRow(k) for k in TABLE_KINDS}
    for r in results:
        if want is not None and r.case.group not in want:
            continue
        g = grade(getattr(r, which), r.truths)
        for k, row in g.rows.items():
            rows[k].add(row)
    return rows


def format_table(rows: Mapping[str, KindRow], hours: float, title: str) -> str:
    """The per-kind table as fixed-width text (latencies in s, false alarms per hour)."""
    head = (f"{'kind':20s} {'episodes':>8s} {'detected':>8s} {'missed':>6s} {'optional':>9s} "
            f"{'lat_med':>7s} {'lat_max':>7s} {'wrong':>5s} {'FA':>4s} {'FA/h':>6s}")
    lines = [title, head]
    for k, r in rows.items():
        if not (r.episodes or r.optional or r.wrong_kind or r.false_alarms):
            continue
        fa_h = r.false_alarms / hours if hours > 0 else math.nan
        lines.append(
            f"{k:20s} {r.episodes:8d} {r.detected:8d} {r.missed:6d} "
            f"{r.optional_detected:4d}/{r.optional:<4d} {r.median_latency:7.2f} "
            f"{r.max_latency:7.2f} {r.wrong_kind:5d} {r.false_alarms:4d} {fa_h:6.2f}")
    return "\n".join(lines)


# --------------------------------------------------------------------------- commonroad set
@dataclass(frozen=True)
class CommonRoadVehicle:
    """Our invented test vehicle as driven by commonroad's single-track drift model.

    Geometry as the house simulator's vehicle; both axles carry the same tyre, so the
    linear understeer gradient K = W_f/C_αf − W_r/C_αr is 0 (C_α = |p_ky1|·F_z per axle,
    Gillespie 1992 ch. 6, from memory). Lengths [m], mass [kg], inertia [kg m²].
    """

    mu: float = 1.0
    wheelbase: float = 2.70
    cg_to_rear_axle: float = 1.40
    track_width: float = 1.55
    wheel_radius: float = 0.31
    mass: float = 1520.0
    yaw_inertia: float = 2450.0
    cg_height: float = 0.52
    max_steer: float = 0.60

    @property
    def cg_to_front_axle(self) -> float:
        """l_f [m]."""
        return self.wheelbase - self.cg_to_rear_axle

    def understeer_gradient(self, mu: float = 1.0) -> float:
        """K [rad/(m/s²)]: 0 (identical tyres front and rear, see the class docstring)."""
        del mu
        return 0.0

    def commonroad_parameters(self) -> Any:
        """A ``vehiclemodels`` parameter object with our numbers (no named vehicle set)."""
        from vehiclemodels.vehicle_parameters import VehicleParameters

        p = VehicleParameters()
        p.a, p.b = self.cg_to_front_axle, self.cg_to_rear_axle
        p.m, p.I_z, p.h_s, p.h_cg = self.mass, self.yaw_inertia, self.cg_height, self.cg_height
        p.R_w, p.I_y_w = self.wheel_radius, 1.0
        p.T_sb, p.T_se = 0.65, 1.0  # brake torque 65 % front; front-wheel drive
        p.l, p.w, p.T_f, p.T_r = 4.6, 1.8, self.track_width, self.track_width
        s = p.steering
        s.min, s.max, s.v_min, s.v_max = -self.max_steer, self.max_steer, -1.0, 1.0
        lo = p.longitudinal
        lo.v_min, lo.v_max, lo.v_switch, lo.a_max = -5.0, 50.0, 7.0, 11.0
        t = p.tire
        # Magic Formula coefficients (our invented tyre; shape factors C 1.65 / 1.3 as in
        # CHECK_SOURCES), peak friction = road mu, no shifts, no camber effects
        t.p_cx1, t.p_dx1, t.p_dx3, t.p_ex1, t.p_kx1 = 1.65, self.mu, 0.0, 0.0, 20.0
        t.p_hx1, t.p_vx1 = 0.0, 0.0
        t.r_bx1, t.r_bx2, t.r_cx1, t.r_ex1, t.r_hx1 = 13.0, 9.7, 1.0, 0.0, 0.0
        t.p_cy1, t.p_dy1, t.p_dy3, t.p_ey1, t.p_ky1 = 1.3, self.mu, 0.0, -0.5, -18.0
        t.p_hy1, t.p_hy3, t.p_vy1, t.p_vy3 = 0.0, 0.0, 0.0, 0.0
        t.r_by1, t.r_by2, t.r_by3, t.r_cy1, t.r_ey1, t.r_hy1 = 10.0, 8.0, 0.0, 1.0, 0.0, 0.0
        t.r_vy1, t.r_vy3, t.r_vy4, t.r_vy5, t.r_vy6 = 0.0, 0.0, 0.0, 0.0, 0.0
        return p


def commonroad_trace(scenario: Any, duration: float, mu: float = 1.0, seed: int = 0,
                     dt: float = 0.002, driver_period: float = 0.01) -> Any:
    """Drive ``scenario`` (path + speed profile) with commonroad's ``vehicle_dynamics_std``.

    Fixed-step RK4 at ``dt`` [s]; our ``PurePursuitDriver`` gives steering and wheel
    torques at ``driver_period``: steering rate = (δ_cmd − δ)/0.05 s (clipped by the
    model), acceleration = (drive − brake torque)/(m·R_w). Returns a ``TrueTrace`` whose
    ``vehicle`` is a :class:`CommonRoadVehicle` (wheel speeds per wheel from the axle
    speeds and the yaw rate; body accelerations by finite differences).
    """
    import numpy as np
    from vehiclemodels.vehicle_dynamics_std import vehicle_dynamics_std

    from kinematic_monitor.sim.driver import PurePursuitDriver
    from kinematic_monitor.sim.dynamics import SimVehicle, ackermann_angles
    from kinematic_monitor.sim.trace import TrueTrace

    veh = CommonRoadVehicle(mu=mu)
    p = veh.commonroad_parameters()
    sv = SimVehicle()  # driver geometry/resistance figures: same geometry as ours
    drv = PurePursuitDriver(scenario.path, scenario.speed, sv, seed=seed)
    x0, y0, yaw0 = scenario.start_pose()
    v0 = max(float(scenario.initial_speed), 0.0)
    R = veh.wheel_radius
    state = [x0, y0, 0.0, v0, yaw0, 0.0, 0.0, v0 / R, v0 / R]

    def f(x: Any, u: list[float]) -> Any:
        return np.asarray(vehicle_dynamics_std(list(x), u, p))

    n = int(round(duration / dt)) + 1
    every = max(int(round(driver_period / dt)), 1)
    rows = np.empty((n, 9))
    odo = 0.0
    u = [0.0, 0.0]
    x = np.asarray(state, dtype=float)
    for k in range(n):
        rows[k] = x
        if k % every == 0:
            vx = x[3] * math.cos(x[6])
            spin = x[7] * R - vx
            d_cmd, drive, brake = drv.update(k * dt, every * dt, x[0], x[1], x[4], vx, odo,
                                             spin)
            acc = (drive - brake) / (veh.mass * R)
            if x[3] < 0.3 and acc < 0.0:
                acc = -x[3] / max(dt * every, 1e-3)  # hold at standstill
            u = [max(-1.0, min(1.0, (d_cmd - x[2]) / 0.05)), acc]
        k1 = f(x, u)
        k2 = f(x + 0.5 * dt * k1, u)
        k3 = f(x + 0.5 * dt * k2, u)
        k4 = f(x + dt * k3, u)
        x = x + dt / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
        x[7], x[8] = max(x[7], 0.0), max(x[8], 0.0)
        odo += abs(x[3]) * dt
        if not np.all(np.isfinite(x)):
            raise RuntimeError(f"commonroad simulation diverged at t={k * dt:.3f} s")
    t = np.arange(n) * dt
    v, beta, r, steer = rows[:, 3], rows[:, 6], rows[:, 5], rows[:, 2]
    vx, vy = v * np.cos(beta), v * np.sin(beta)
    ax = np.gradient(vx, dt) - r * vy
    ay = np.gradient(vy, dt) + r * vx
    lr = np.array([ackermann_angles(float(d), veh.wheelbase, veh.track_width)
                   for d in steer.tolist()])
    half = 0.5 * veh.track_width
    wf, wr = rows[:, 7], rows[:, 8]
    omega = np.column_stack([wf - half * r * np.cos(steer) / R, wf + half * r * np.cos(steer) / R,
                             wr - half * r / R, wr + half * r / R])
    return TrueTrace(dt=dt, t=t, x=rows[:, 0], y=rows[:, 1], yaw=rows[:, 4], vx=vx, vy=vy,
                     yaw_rate=r, ax=ax, ay=ay, steer_left=lr[:, 0], steer_right=lr[:, 1],
                     steer=steer, wheel_omega=omega, mu=np.full(n, mu),
                     vehicle=veh,  # type: ignore[arg-type]
                     scenario=f"commonroad_{scenario.name}_mu{mu:g}")


def build_suite(full: bool = True) -> list[Case]:
    """The benchmark suite (``full``) or its short version for the unit test.

    Full: 30 min of gentle dry driving (|a_y| < 0.3 g, the false-alarm set); cornering
    into ice and wet patches; hard acceleration and braking on ice and snow; localisation
    jumps and heading drift; a steering offset; and the commonroad set
    (``vehicle_dynamics_std`` on uniform μ 1.0 and 0.3).
    """
    from dataclasses import replace

    from kinematic_monitor.sim import faults as fl
    from kinematic_monitor.sim import scenarios as sc

    def ours(name: str, **kw: Any) -> Callable[[float], Any]:
        return lambda d: sc.simulate(sc.SCENARIOS[name](**kw), duration=d, seed=1)

    def cr(scen: Any, mu: float) -> Callable[[float], Any]:
        return lambda d: commonroad_trace(scen, d, mu=mu, seed=1)

    k = 1.0 if full else 0.0
    dry_len = 1800.0 if full else 120.0
    loop10 = replace(sc.gentle_loop(), initial_speed=10.0)
    circle_cr = replace(sc.skidpad_circle(radius=40.0, speed=9.0), initial_speed=5.0)
    strip_cr = sc.accel_brake_strip(top_speed=15.0, accel_time=5.0, duration=15.0)
    cases = [
        Case("gentle_loop", "dry", ours("gentle_loop"), dry_len),
        Case("circle_ice_patch", "slip", ours("circle_ice_patch"), 20.0 + 20.0 * k),
        Case("loop_ice_bend", "slip", ours("loop_ice_bend"), 60.0 + 60.0 * k),
        Case("brake_on_ice", "slip", ours("brake_on_ice"), 22.0),
        Case("loc_jump", "fault", ours("gentle_loop"), 70.0,
             (fl.LocalizationJump(start=30.0, dx=0.8, dy=0.6, duration=10.0),)),
        Case("heading_drift", "fault", ours("gentle_loop"), 70.0,
             (fl.HeadingDrift(start=30.0, rate=0.03, duration=10.0),)),
        Case("cr_circle_mu0.3", "commonroad", cr(circle_cr, 0.3), 20.0),
    ]
    if full:
        cases += [
            Case("circle_wet_patch", "slip", ours("circle_wet_patch"), 40.0),
            Case("launch_on_ice", "slip", ours("launch_on_ice"), 20.0),
            Case("launch_on_snow", "slip", ours("launch_on_snow"), 20.0),
            Case("loc_jump_small", "fault", ours("gentle_loop"), 90.0,
                 (fl.LocalizationJump(start=40.0, dx=0.0, dy=-0.5, duration=None),), seed=2),
            Case("heading_drift_slow", "fault", ours("gentle_loop"), 90.0,
                 (fl.HeadingDrift(start=40.0, rate=0.015, duration=20.0),), seed=2),
            Case("steering_offset", "fault", ours("gentle_loop"), 120.0,
                 (fl.SteeringOffset(start=30.0, offset=0.01),)),
            Case("cr_loop_mu1.0", "commonroad", cr(loop10, 1.0), 180.0),
            Case("cr_strip_mu0.3", "commonroad", cr(strip_cr, 0.3), 15.0),
        ]
    return cases


def targets(results: Sequence[CaseResult]) -> list[tuple[str, bool, str]]:
    """The issue's targets: (name, met, figure) over a suite's results.

    Latency targets pool the slip and localisation-fault kinds; false alarms are counted
    on the dry set (group "dry"), where any event at all is a WARN on dry driving.
    """
    kinds = SLIP_KINDS + ("localization_fault",)
    mon = table(results, "events")
    missed = sum(mon[k].missed for k in kinds)
    episodes = sum(mon[k].episodes for k in kinds)
    lat = [x for k in kinds for x in mon[k].latencies]
    med = statistics.median(lat) if lat else math.nan
    mx = max(lat) if lat else math.nan
    dry = [r for r in results if r.case.group == "dry"]
    dry_h = sum(r.hours for r in dry)
    dry_fa = sum(len(grade(r.events, r.truths).false_alarms) for r in dry)
    dry_events = sum(len(r.events) for r in dry)
    dry_ay = max((r.max_abs_ay_g for r in dry), default=math.nan)
    cross = 0
    for r in results:
        for ev, tr in grade(r.events, r.truths).wrong:
            if (ev.kind in SLIP_KINDS and tr.kind == "localization_fault") or (
                    ev.kind == "localization_fault" and tr.kind in SLIP_KINDS):
                cross += 1
    return [
        ("every slip / localisation-fault episode detected with the right kind",
         missed == 0, f"{episodes - missed}/{episodes} detected"),
        ("median latency <= 0.3 s", med <= 0.3, f"{med:.2f} s"),
        ("max latency <= 1.0 s", mx <= 1.0, f"{mx:.2f} s"),
        ("<= 1 false alarm per hour of dry driving",
         dry_h > 0 and dry_fa / dry_h <= 1.0,
         f"{dry_fa} in {dry_h * 60:.1f} min = {dry_fa / dry_h if dry_h else math.nan:.2f}/h"),
        ("no WARN on dry driving below 0.3 g", dry_events == 0 and dry_ay < 0.3,
         f"{dry_events} events, max |a_y| {dry_ay:.2f} g"),
        ("no localisation fault reported as slip or slip as localisation fault", cross == 0,
         f"{cross} cross-reported"),
    ]

