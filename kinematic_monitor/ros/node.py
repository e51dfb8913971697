"""The live rclpy node ``kinematic_monitor`` (thin adapter around the ROS-free core).

Callbacks only turn a message into a sample (``convert``), push it through the
header-stamp reorder buffer (``ordering``) and hand released samples to the ``Monitor``.
Outputs (docs/interface.md section 3): ``/diagnostics`` (REP 107 levels, one status per check),
``~/prediction`` (nav_msgs/Odometry), ``~/events`` (DiagnosticStatus at each event start
and end), a JSON-lines event log flushed at each start/end, and one console line per event.

Times are header stamps [s]; "now" for staleness is the node clock, so ``use_sim_time``
is honoured. Units and frames follow REP 103 / REP 105.

Executor: ``rclpy.experimental.EventsExecutor`` where it exists (much cheaper per message),
otherwise ``SingleThreadedExecutor``; choose with ``executor=`` or the environment variable
``KINEMATIC_MONITOR_EXECUTOR`` = ``auto`` | ``events`` | ``single``.

Messages: the JointState, localisation, Imu and NavSatFix inputs are taken as serialized CDR
bytes (raw subscriptions, in every ROS 2 release since Foxy) and turned into samples by the
one decoder per type (``io.decode``), skipping rclpy's conversion into message objects;
undecodable bytes are counted as 'malformed'. Single-value inputs with a field path
(``inputs.steering.*``, ``inputs.speed.*``) take rclpy message objects (any message type).
Outputs are built as CDR bytes by ``io.outgoing`` (the same bytes ``replay --write-bag``
records) and published as serialized messages.
"""

from __future__ import annotations

import math
import os
import signal
import sys
import time
from collections import Counter, deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from types import FrameType
from typing import TYPE_CHECKING, Any

import rclpy
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from geometry_msgs.msg import PoseWithCovarianceStamped
from nav_msgs.msg import Odometry
from rcl_interfaces.msg import (
    FloatingPointRange,
    IntegerRange,
    ParameterDescriptor,
    ParameterType,
    SetParametersResult,
)
from rclpy.node import Node
from rclpy.parameter import Parameter
from rclpy.qos import (
    DurabilityPolicy,
    HistoryPolicy,
    QoSProfile,
    ReliabilityPolicy,
)
from rclpy.task import Future
from sensor_msgs.msg import Imu, JointState

from kinematic_monitor.config import schema, validation
from kinematic_monitor.core import ordering
from kinematic_monitor.io import (
    convert,
    decode,
    event_files,
    log_location,
    outgoing,
    scalar_inputs,
)
from kinematic_monitor.ros import messages as rm

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.core.monitor import Monitor as _Monitor

NODE_NAME = "kinematic_monitor"
EXIT_OK = 0
EXIT_BAD_PARAMS = 2
EXECUTOR_ENV = "KINEMATIC_MONITOR_EXECUTOR"
# parameters every rclpy node has; never reported as unknown
_ROS_BUILTIN_PARAMS = ("use_sim_time", "start_type_description_service")
_INT_LIMIT = 2**63 - 1
_LATENCY_WINDOW = 4000  # samples kept for the latency percentiles
_LEVEL_CHECK_PERIOD = 0.02  # [s] wall time between level-change checks without transitions


@dataclass
class NodeStatus:
    """The node's own diagnostic status (same fields as the core's check statuses)."""

    name: str
    level: int
    message: str
    values: dict[str, str] = field(default_factory=dict)


class StartupError(Exception):
    """Start-up cannot continue (bad parameter); the message names the problem."""


# --- parameter schema -> ROS descriptors ------------------------------------------------

_ROS_TYPES = {
    "double": ParameterType.PARAMETER_DOUBLE,
    "integer": ParameterType.PARAMETER_INTEGER,
    "bool": ParameterType.PARAMETER_BOOL,
    "string": ParameterType.PARAMETER_STRING,
    "string_array": ParameterType.PARAMETER_STRING_ARRAY,
    "double_array": ParameterType.PARAMETER_DOUBLE_ARRAY,
}
_PARAM_TYPES = {
    "double": Parameter.Type.DOUBLE,
    "integer": Parameter.Type.INTEGER,
    "bool": Parameter.Type.BOOL,
    "string": Parameter.Type.STRING,
    "string_array": Parameter.Type.STRING_ARRAY,
    "double_array": Parameter.Type.DOUBLE_ARRAY,
}


def param_specs() -> list[schema.ParamSpec]:
    """The parameter schema (``schema.SPECS``)."""
    return list(schema.SPECS)


def descriptor_for(spec: schema.ParamSpec) -> ParameterDescriptor:
    """ParameterDescriptor from a ParamSpec: type, description, numeric range, read_only.

    ROS ranges are closed intervals; an open bound such as (0, 20] is declared as [0, 20]
    and the open end is enforced by ``validation.validate``.
    """
    d = ParameterDescriptor()
    d.name = spec.name
    d.type = _ROS_TYPES[spec.type]
    unit = "" if spec.unit == "-" else f" [{spec.unit}]"
    d.description = f"{spec.description}{unit}"
    d.additional_constraints = f"allowed: {spec.allowed_text()}"
    d.read_only = not spec.runtime_changeable
    lo = spec.min_value
    hi = spec.max_value
    if lo is not None or hi is not None:
        if spec.type == "double":
            d.floating_point_range = [FloatingPointRange(
                from_value=float(lo) if lo is not None else -math.inf,
                to_value=float(hi) if hi is not None else math.inf,
                step=0.0,
            )]
        elif spec.type == "integer":
            d.integer_range = [IntegerRange(
                from_value=int(lo) if lo is not None else -_INT_LIMIT,
                to_value=int(hi) if hi is not None else _INT_LIMIT,
                step=1,
            )]
    return d


def _coerce(spec_type: str, value: Any) -> Any:
    """Accept YAML integers where a double is expected (``wheelbase: 3``)."""
    if spec_type == "double" and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    if spec_type == "double_array" and isinstance(value, (list, tuple)):
        return [float(v) if isinstance(v, int) and not isinstance(v, bool) else v
                for v in value]
    return value


def make_qos(kind: str) -> QoSProfile:
    """Input QoS: 'sensor_data' = best effort (REP 2003 sensor data), 'reliable' = reliable.

    Depth 100 so a 1 kHz JointState stream survives short executor stalls.
    """
    rel = ReliabilityPolicy.RELIABLE if kind == "reliable" else ReliabilityPolicy.BEST_EFFORT
    return QoSProfile(history=HistoryPolicy.KEEP_LAST, depth=100, reliability=rel,
                      durability=DurabilityPolicy.VOLATILE)


def publish_bytes(publisher: Any, data: bytes) -> None:
    """Publish a serialized message (``Publisher.publish`` takes bytes in the rclpy of
    Humble, Jazzy and Kilted); where it does not, publish the deserialised object."""
    try:
        publisher.publish(data)
    except TypeError:
        from rclpy.serialization import deserialize_message

        publisher.publish(deserialize_message(data, publisher.msg_type))


def _percentile(sorted_vals: Sequence[float], q: float) -> float:
    if not sorted_vals:
        return math.nan
    k = min(len(sorted_vals) - 1, max(0, int(math.ceil(q * len(sorted_vals))) - 1))
    return float(sorted_vals[k])


class KinematicMonitorNode(Node):
    """rclpy node: declares and validates parameters, wires inputs to the core.

    Raises ``StartupError`` from the constructor on a bad parameter.
    """

    monitor: _Monitor

    def __init__(self, *, context: Any = None, console: Callable[[str], None] | None = None
                 ) -> None:
        kwargs: dict[str, Any] = {"allow_undeclared_parameters": False,
                                  "automatically_declare_parameters_from_overrides": False}
        if context is not None:
            kwargs["context"] = context
        super().__init__(NODE_NAME, **kwargs)
        self._console = console or (lambda line: print(line, flush=True))
        self._specs = {s.name: s for s in param_specs()}
        self._values, self.config = self._declare_and_validate()
        self.counters: Counter[str] = Counter()
        # wall time - header stamp [s], at reception and when processed (after reordering)
        self._rx_latency: deque[float] = deque(maxlen=_LATENCY_WINDOW)
        self._latency: deque[float] = deque(maxlen=_LATENCY_WINDOW)
        self._last_levels: tuple[Any, ...] | None = None
        self._level_signature: tuple[Any, ...] | None = None
        self._last_level_check = 0.0
        self._last_prediction_stamp = -math.inf
        self._last_stamp = math.nan
        self._t0 = math.nan
        self._closed = False
        # samples in stamp order waiting for their batch, and when the oldest came in
        self._batch: list[Any] = []
        self._batch_since = 0.0
        self._build_core()
        self._create_io()
        self.add_on_set_parameters_callback(self._on_set_parameters)
        self._report_parameters()

    # --- parameters -------------------------------------------------------------------
    def _overrides(self) -> dict[str, Any]:
        raw = getattr(self, "_parameter_overrides", None) or {}
        return {name: p.value for name, p in raw.items()}

    def _declare_and_validate(self) -> tuple[dict[str, Any], validation.MonitorConfig]:
        """Validate file values + defaults, then declare every parameter with them.

        Validation comes first so a bad value is reported in the schema's words (name,
        value, allowed range) rather than as an rclpy descriptor exception.
        """
        overrides = self._overrides()
        values: dict[str, Any] = {}
        for name, value in overrides.items():
            spec = self._specs.get(name)
            if spec is not None:
                values[name] = _coerce(spec.type, value)
            elif schema.is_ros_reserved(name):
                continue
            else:
                values[name] = value  # validate() names unknown parameters
        config = self._validated(values)  # raises StartupError before anything is declared
        checked = {k: list(v) if isinstance(v, tuple) else v for k, v in config.values.items()}
        for name, spec in self._specs.items():
            try:
                self.declare_parameter(name, checked[name], descriptor_for(spec),
                                       ignore_override=True)
            except Exception as exc:  # rclpy type/range exceptions
                raise StartupError(
                    f"parameter '{name}': value {checked.get(name)!r} rejected by ROS: "
                    f"{exc}") from exc
        return checked, config

    def _validated(self, values: dict[str, Any]) -> validation.MonitorConfig:
        try:
            return validation.validate(values)
        except schema.ParamError as exc:
            raise StartupError(str(exc)) from exc

    def _on_set_parameters(self, changes: list[Parameter]) -> SetParametersResult:
        """Validate runtime changes exactly as at start-up; reject with the reason."""
        try:
            merged = dict(self._values)
            for p in changes:
                if p.name in _ROS_BUILTIN_PARAMS:
                    continue
                spec = self._specs.get(p.name)
                if spec is None:
                    return SetParametersResult(successful=False,
                                               reason=f"unknown parameter {p.name!r}")
                if not getattr(spec, "runtime_changeable", False):
                    return SetParametersResult(
                        successful=False,
                        reason=f"parameter {p.name} cannot change at run time (restart)")
                merged[p.name] = _coerce(spec.type, p.value)
            try:
                config = validation.validate(merged)
            except schema.ParamError as exc:
                return SetParametersResult(successful=False, reason=str(exc))
            self._apply_config(config)
            self._values = merged
            self.config = config
            self.get_logger().info(
                "parameters changed: "
                + ", ".join(f"{p.name}={p.value!r}" for p in changes))
            return SetParametersResult(successful=True)
        except Exception as exc:  # never let an exception escape into rclpy
            self.counters["callback_errors"] += 1
            return SetParametersResult(successful=False, reason=f"internal error: {exc}")

    def _apply_config(self, config: validation.MonitorConfig) -> None:
        """Hand new thresholds to the core: open events are closed at the last stamp and
        the monitor restarts with the new configuration (its filter re-initialises from the
        next samples)."""
        self._flush_batch()  # samples before the change meet the thresholds they came with
        to = config.timeouts
        self.buffer.set_timeouts({"joint_states": to.joint_states,
                                  "localization": to.localization, "imu": to.imu})
        from kinematic_monitor.core.monitor import Monitor

        if math.isfinite(self._last_stamp):
            self.monitor.flush(self._last_stamp)
            self._handle_transitions()
        self.monitor = Monitor(config)
        self._last_levels = None
        self._level_signature = None
        self.get_logger().info("monitor restarted with the new thresholds")

    def _report_parameters(self) -> None:
        lines = [f"  {name} = {self._values.get(name, '<unset>')!r}" for name in self._specs]
        self.get_logger().info("parameters:\n" + "\n".join(lines))

    # --- core -------------------------------------------------------------------------
    def _build_core(self) -> None:
        cfg = self.config
        # the core (pulls in scipy): imported only once the parameters are known good
        from kinematic_monitor.core.monitor import Monitor

        self.monitor = Monitor(cfg)
        # processing in small batches: each wake-up of a callback costs far more in a live
        # process than the same work warm (see bench/node_load.py)
        self._batch_size = int(cfg.inputs.batch_size)
        self._batch_delay = float(cfg.inputs.batch_delay)
        # the reorder buffer replay uses too (configured in one place)
        self.buffer = ordering.input_buffer(cfg)
        js = cfg.inputs.joint_states
        self._scalar_inputs = self._plan_scalar_inputs()
        roles = {i.settings.role for group in self._scalar_inputs.values() for i in group}
        # a steering input replaces the steer joints, a speed input the wheel joints
        self._joint_states_topic = "" if roles == {"steering", "speed"} else js.topic
        self.joint_map = convert.JointMap(
            () if "steering" in roles else js.steering_joints,
            () if "speed" in roles else js.front_wheel_joints,
            () if "speed" in roles else js.rear_wheel_joints,
            steering_ratio=cfg.vehicle.steering_ratio) if self._joint_states_topic \
            else None
        # converters divide steering-wheel angles by the ratio first: the limit is on the
        # road-wheel angle
        self._max_steer = cfg.vehicle.max_road_wheel_angle
        self.event_log: event_files.EventLogWriter | None = None
        if cfg.output.events_log:
            path = log_location.events_log_path(cfg.output.events_log)
            try:
                path.parent.mkdir(parents=True, exist_ok=True)
                self.event_log = event_files.EventLogWriter(path)
            except OSError as exc:
                raise StartupError(
                    f"parameter 'output.events_log': cannot open {str(path)!r}: {exc.strerror}"
                ) from exc
            self.get_logger().info(f"event log: {os.path.abspath(path)}")

    def _plan_scalar_inputs(self) -> dict[str, list[scalar_inputs.ScalarInput]]:
        """Topic -> checked steering/speed inputs (message class imported by type name)."""
        out: dict[str, list[scalar_inputs.ScalarInput]] = {}
        self._scalar_classes: dict[str, Any] = {}
        try:
            for st in scalar_inputs.scalar_settings(self.config):
                try:
                    cls = rm.import_message_class(st.type_name)
                except ImportError as exc:
                    raise StartupError(f"{st.param_prefix}: topic {st.topic}: {exc}") from None
                out.setdefault(st.topic, []).append(
                    scalar_inputs.plan_scalar_input(st, rm.rclpy_fields_of))
                self._scalar_classes[st.topic] = cls
        except ValueError as exc:
            raise StartupError(str(exc)) from None
        return out

    def _scalar_callback(self, topic: str, name: str) -> Callable[[Any], Any]:
        planned = self._scalar_inputs[topic]
        receive_stamped = planned[0].receive_time_stamped

        def conv(msg: Any) -> Any:
            got = scalar_inputs.chassis_from_scalar_msg(msg, planned, self.now_sec())
            if receive_stamped and not isinstance(got, convert.Rejected):
                self.counters[f"receive_time_stamped.{name}"] += 1
            return got

        return conv

    # --- subscriptions / publishers / timers --------------------------------------------
    def _create_io(self) -> None:
        cfg = self.config
        qos = make_qos(cfg.inputs.qos)
        self._subs: list[Any] = []

        def sub(msg_type: Any, topic: str, name: str, fn: Callable[[Any], Any],
                raw: bool) -> None:
            if not topic:
                self.get_logger().info(f"input {name}: disabled (empty topic)")
                return
            # standard types: serialized CDR bytes and the one decoder (io.decode)
            self._subs.append(self.create_subscription(
                msg_type, topic, self._guarded(name, fn), qos, raw=raw))
            self.get_logger().info(
                f"input {name}: {topic} ({msg_type.__name__}, {cfg.inputs.qos}, "
                f"{'raw' if raw else 'typed'} messages)")

        jmap = self.joint_map
        if jmap is None:
            self.get_logger().info("input joint_states: not read (inputs.steering and "
                                   "inputs.speed replace it)")
        else:
            sub(JointState, self._joint_states_topic, "joint_states",
                decode.joint_state_decoder(jmap, self._max_steer), True)
        for topic, planned in self._scalar_inputs.items():
            name = "+".join(i.settings.role for i in planned)
            sub(self._scalar_classes[topic], topic, name, self._scalar_callback(topic, name),
                False)
            for i in planned:
                stamp = (f"stamp {i.plan.stamp_path}" if i.plan.stamp_path is not None
                         else "no header: receive-time stamped")
                self.get_logger().info(
                    f"input {i.settings.role}: {i.settings.describe()} x {i.settings.scale:g} "
                    f"+ {i.settings.offset:g}"
                    + (f" / {i.settings.divisor:g}" if i.settings.divisor != 1.0 else "")
                    + f"; {stamp}")
        loc = cfg.inputs.localization
        if loc.type == "pose_with_covariance":
            sub(PoseWithCovarianceStamped, loc.topic, "localization",
                decode.pose_with_covariance_stamped, True)
        else:
            sub(Odometry, loc.topic, "localization", decode.odometry, True)
        if loc.reset_topic:
            # any message on the reset topic declares a deliberate relocalisation (REP 105:
            # map may jump); the message type is taken to be a stamped pose, as /initialpose
            self._subs.append(self.create_subscription(
                PoseWithCovarianceStamped, loc.reset_topic,
                self._guarded("localization_reset", self._on_reset), 10))
        sub(Imu, cfg.inputs.imu.topic, "imu", decode.imu, True)
        if cfg.inputs.gnss.topic:  # GNSS places drives on maps (replay, sweep): offline only
            self.get_logger().info(f"input gnss: {cfg.inputs.gnss.topic} is read offline for "
                                   "maps; the live monitor does not use it")

        self.pub_diag = self.create_publisher(DiagnosticArray, "/diagnostics", 10)
        self.pub_prediction = self.create_publisher(Odometry, "~/prediction", 10)
        self.pub_events = self.create_publisher(DiagnosticStatus, "~/events", 50)
        period = cfg.output.diagnostics_period
        self.prediction_frame = cfg.output.prediction_frame
        # [s] header-stamp time between ~/prediction messages (1 µs slack: float stamps)
        self._prediction_period = 1.0 / cfg.output.prediction_rate - 1e-6
        self._diag_timer = self.create_timer(period, self._guarded_timer(
            "diagnostics", self._on_diag_timer))
        self._tick_timer = self.create_timer(0.1, self._guarded_timer(
            "tick", self._on_tick))

    def _guarded(self, name: str, convert_fn: Callable[[Any], Any]) -> Callable[[Any], None]:
        """The subscription callback of input ``name``: convert, count, reorder, process.

        :meth:`_ingest` with its common case (a sample) inlined: one callback per message
        at every input rate, so it touches as little as it can.
        """
        counters = self.counters
        received = f"received.{name}"
        rx_latency = self._rx_latency
        push = self.buffer.push
        rejected = convert.Rejected
        wall = time.time
        clock = time.monotonic

        def callback(msg: Any) -> None:
            try:
                result = convert_fn(msg)
                if result is None or isinstance(result, rejected):
                    self._ingest(name, result)
                    return
                counters[received] += 1
                rx_latency.append(wall() - result.stamp)
                released = push(result, name)
                if released:
                    self._queue_released(released)
                elif self._batch and clock() - self._batch_since >= self._batch_delay:
                    self._flush_batch()  # nothing new in order, but the batch is due
            except Exception as exc:  # no exception ever escapes a callback
                self.counters["callback_errors"] += 1
                self.get_logger().error(f"input {name}: {type(exc).__name__}: {exc}",
                                        throttle_duration_sec=5.0)
        return callback

    def _guarded_timer(self, name: str, fn: Callable[[], None]) -> Callable[[], None]:
        def callback() -> None:
            try:
                fn()
            except Exception as exc:
                self.counters["callback_errors"] += 1
                self.get_logger().error(f"timer {name}: {type(exc).__name__}: {exc}",
                                        throttle_duration_sec=5.0)
        return callback

    def now_sec(self) -> float:
        """Node clock [s] (simulated time under use_sim_time)."""
        return self.get_clock().now().nanoseconds * 1e-9

    # --- data path --------------------------------------------------------------------
    def _ingest(self, name: str, result: Any) -> None:
        if isinstance(result, convert.Rejected):
            self.counters[f"rejected.{name}"] += 1
            self.counters[f"rejected.{name}.{result.reason}"] += 1
            self.get_logger().warning(f"input {name}: rejected: {result.reason}",
                                      throttle_duration_sec=5.0)
            return
        if result is None:
            return
        self.counters[f"received.{name}"] += 1
        self._rx_latency.append(time.time() - result.stamp)
        self._queue_released(self.buffer.push(result, name))

    def _queue_released(self, released: list[Any]) -> None:
        """Samples in stamp order: processed at once with ``inputs.batch_size`` 1, else
        once ``inputs.batch_size`` wait or the oldest has waited ``inputs.batch_delay``
        (also checked by the 10 Hz tick)."""
        if not released:
            return
        if self._batch_size <= 1:
            self._process_released(released)
            return
        batch = self._batch
        if not batch:
            self._batch_since = time.monotonic()
        batch.extend(released)
        if (len(batch) >= self._batch_size
                or time.monotonic() - self._batch_since >= self._batch_delay):
            self._flush_batch()

    def _flush_batch(self) -> None:
        """Process the samples waiting for their batch."""
        if self._batch:
            batch, self._batch = self._batch, []
            self._process_released(batch)

    def _process_released(self, released: list[Any]) -> None:
        """Feed released samples (and TimeReset markers) to the monitor in stamp order."""
        if not released:
            return
        wall = time.time()
        seen = False
        for item in released:
            if isinstance(item, ordering.TimeReset):
                self.counters["time_resets"] += 1
                self.get_logger().warning(
                    f"header stamps jumped back from {item.previous:.3f} s to "
                    f"{item.stamp:.3f} s: monitor reset")
                self.monitor.process(item)
                self._last_stamp = math.nan
                self._last_prediction_stamp = -math.inf
                continue
            self.monitor.process(item)
            stamp = float(item.stamp)
            self._latency.append(wall - stamp)
            self._last_stamp = stamp
            if math.isnan(self._t0):
                self._t0 = stamp
            seen = True
        if seen:
            self._after_processing()

    def _on_reset(self, msg: Any) -> None:
        self._flush_batch()  # what came before the declaration is processed before it
        stamp = rm.stamp_to_sec(msg.header.stamp)
        self.monitor.declare_relocalization(stamp)
        self.counters["localization_resets"] += 1
        return None

    def _after_processing(self) -> None:
        had_events = self._handle_transitions()
        if self._last_stamp - self._last_prediction_stamp >= self._prediction_period:
            self._publish_prediction()
        wall = time.monotonic()
        if had_events or wall - self._last_level_check >= _LEVEL_CHECK_PERIOD:
            self._last_level_check = wall
            self._maybe_publish_on_level_change()

    def _handle_transitions(self) -> bool:
        transitions = self.monitor.pop_transitions()
        if not transitions:
            return False
        for rec in list(transitions):
            self._emit_event(rec)
        return True

    def _emit_event(self, rec: Any) -> None:
        if self.event_log is not None:
            try:
                self.event_log.write(rec)
            except Exception as exc:
                self.counters["event_log_errors"] += 1
                self.get_logger().error(f"event log: {exc}", throttle_duration_sec=5.0)
        try:
            publish_bytes(self.pub_events, outgoing.event_status(
                rec.type, rec.event.to_dict(), int(rec.event.level)))
        except Exception as exc:  # context may be gone during shutdown
            self.counters["publish_errors"] += 1
            self.get_logger().debug(f"~/events: {exc}")
        t0 = self._t0 if math.isfinite(self._t0) else 0.0
        self._console(rm.event_console_line(rec, t0))
        self.counters["events"] += 1

    def _publish_prediction(self) -> None:
        pred = self.monitor.prediction()
        if pred is None:
            return
        self._last_prediction_stamp = pred.stamp
        publish_bytes(self.pub_prediction, outgoing.prediction(pred, self.prediction_frame))

    # --- diagnostics ------------------------------------------------------------------
    def statuses(self) -> list[Any]:
        """Monitor statuses plus the node's own input/latency status."""
        out: list[Any] = list(self.monitor.statuses())
        out.append(self._node_status())
        return out

    def _node_status(self) -> NodeStatus:
        lat = sorted(self._latency)
        rx = sorted(self._rx_latency)
        values: dict[str, Any] = {
            "receive_latency_p50 [ms]": 1e3 * _percentile(rx, 0.5),
            "receive_latency_p99 [ms]": 1e3 * _percentile(rx, 0.99),
            "latency_p50 [ms]": 1e3 * _percentile(lat, 0.5),
            "latency_p99 [ms]": 1e3 * _percentile(lat, 0.99),
            "latency_max [ms]": 1e3 * lat[-1] if lat else math.nan,
            "reorder_window [s]": self.buffer.lag,
            "late_dropped": self.buffer.late_dropped,
            "duplicates_dropped": getattr(self.buffer, "duplicates", 0),
            "released_by_watermark": self.buffer.released_by_watermark,
            "released_by_lag": self.buffer.released_by_lag,
            "time_resets": self.buffer.resets,
        }
        values.update({f"core.{k}": v for k, v in sorted(self.monitor.counters.items())})
        values.update(sorted(self.counters.items()))
        errors = self.counters.get("callback_errors", 0)
        return NodeStatus("kinematic_monitor: node", 1 if errors else 0,
                           f"{errors} callback errors" if errors else "running",
                           {k: rm.format_value(v) for k, v in values.items()})

    def publish_diagnostics(self) -> None:
        """Publish /diagnostics now (one status per check)."""
        sts = self.statuses()
        self._last_levels = tuple(int(s.level) for s in sts)
        self._level_signature = self._levels()
        sec, nanosec = divmod(self.get_clock().now().nanoseconds, 1_000_000_000)
        publish_bytes(self.pub_diag, outgoing.diagnostics(sec, nanosec, sts))

    def _levels(self) -> tuple[tuple[str, int], ...]:
        """The monitor's levels as numbers: far cheaper than building every status's text,
        and this runs at up to 1 / _LEVEL_CHECK_PERIOD Hz."""
        return tuple(self.monitor.levels())

    def _maybe_publish_on_level_change(self) -> None:
        if self._levels() != self._level_signature:
            self.publish_diagnostics()

    def _on_diag_timer(self) -> None:
        self.publish_diagnostics()

    def _on_tick(self) -> None:
        self._flush_batch()  # before the stale check; and inputs gone quiet send no callback
        self.monitor.check_stale(self.now_sec())
        self._handle_transitions()
        self._maybe_publish_on_level_change()

    # --- shutdown ---------------------------------------------------------------------
    def close(self) -> None:
        """Close open events (written to the log and ~/events), publish final diagnostics."""
        if self._closed:
            return
        self._closed = True
        try:
            self._flush_batch()
            self._process_released(self.buffer.flush())
            end = self._last_stamp if math.isfinite(self._last_stamp) else self.now_sec()
            self.monitor.flush(end)
            self._handle_transitions()
            self.publish_diagnostics()
        except Exception as exc:
            self.get_logger().error(f"shutdown: {type(exc).__name__}: {exc}")
        finally:
            if self.event_log is not None:
                try:
                    self.event_log.close()
                except Exception as exc:
                    self.get_logger().error(f"closing event log: {exc}")


# --- executor and process entry point ------------------------------------------------------

def make_executor(kind: str | None = None, context: Any = None) -> Any:
    """EventsExecutor when available (``auto``/``events``), else SingleThreadedExecutor."""
    kind = (kind or os.environ.get(EXECUTOR_ENV, "auto") or "auto").lower()
    if kind not in ("auto", "events", "single"):
        raise StartupError(f"{EXECUTOR_ENV}={kind!r}: expected auto, events or single")
    if kind in ("auto", "events"):
        try:
            from rclpy.experimental import EventsExecutor  # rclpy >= Jazzy-era wheels
        except ImportError:
            if kind == "events":
                raise StartupError("EventsExecutor is not available in this rclpy") from None
        else:
            return EventsExecutor(context=context) if context is not None else EventsExecutor()
    from rclpy.executors import SingleThreadedExecutor
    return SingleThreadedExecutor(context=context)


def _init_rclpy(args: list[str] | None) -> None:
    try:
        from rclpy.signals import SignalHandlerOptions
        rclpy.init(args=args, signal_handler_options=SignalHandlerOptions.NO)
    except (ImportError, TypeError):  # very old rclpy: keep its handlers
        rclpy.init(args=args)


def main(args: list[str] | None = None, executor: str | None = None) -> int:
    """Run the node until SIGINT/SIGTERM; returns the exit code (2: bad parameters)."""
    argv = list(sys.argv if args is None else args)
    _init_rclpy(argv)
    stop = {"flag": False}
    done: Future = Future()

    def on_signal(signum: int, frame: FrameType | None) -> None:
        stop["flag"] = True
        if not done.done():
            done.set_result(signum)

    node: KinematicMonitorNode | None = None
    ex: Any = None
    code = EXIT_OK
    try:
        try:
            node = KinematicMonitorNode()
            ex = make_executor(executor)
        except StartupError as exc:
            msg = f"bad parameters: {exc}"
            try:  # to the console and the ROS log file, like every other node message
                rclpy.logging.get_logger(NODE_NAME).fatal(msg)
            except Exception:
                print(f"[{NODE_NAME}] {msg}", file=sys.stderr, flush=True)
            return EXIT_BAD_PARAMS
        previous = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
        ex.add_node(node)
        node.get_logger().info(f"running ({type(ex).__name__})")
        try:
            while not stop["flag"] and rclpy.ok():
                # always with a timeout: without one the EventsExecutor of these rclpy wheels
                # never returns after the future completes (and ignores SIGTERM)
                ex.spin_until_future_complete(done, timeout_sec=0.25)
        finally:
            node.close()
            for s, h in previous.items():
                signal.signal(s, h)
            node.get_logger().info("stopped")
    finally:
        if ex is not None:
            try:
                ex.shutdown(timeout_sec=0.5)
            except TypeError:
                ex.shutdown()
            except Exception:
                pass
        if node is not None:
            node.destroy_node()
        if rclpy.ok():
            rclpy.shutdown()
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
