"""Conversions that need the ROS message classes (rclpy side only).

Outbound: monitor statuses, event transitions and the filter prediction into
``diagnostic_msgs`` / ``nav_msgs`` messages. Inbound-for-publishers: samples into
``sensor_msgs`` / ``nav_msgs`` messages (used by the test publisher, the load bench and the
live demo). Message -> sample conversion lives in the ROS-free ``convert.py``.

Units and frames follow REP 103 / REP 105; diagnostic levels follow REP 107
(OK=0, WARN=1, ERROR=2, STALE=3).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus, KeyValue
from geometry_msgs.msg import PoseWithCovarianceStamped
from nav_msgs.msg import Odometry
from sensor_msgs.msg import Imu, JointState, NavSatFix

from kinematic_monitor.core.geometry import yaw_to_quaternion
from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample

HARDWARE_ID = "kinematic_monitor"
STATUS_PREFIX = "kinematic_monitor: "
LEVEL_NAMES = {0: "OK", 1: "WARN", 2: "ERROR", 3: "STALE"}
_LEVEL_FROM_NAME = {v: k for k, v in LEVEL_NAMES.items()}


def sec_to_stamp(t: float) -> Time:
    """builtin_interfaces/Time from seconds [s] (non-finite or negative -> zero time)."""
    if not math.isfinite(t) or t < 0.0:
        return Time()
    ns = int(round(t * 1e9))
    return Time(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)


def stamp_to_sec(stamp: Any) -> float:
    """Seconds [s] from a header stamp (``sec`` + ``nanosec``)."""
    return float(stamp.sec) + 1e-9 * float(stamp.nanosec)


def level_byte(level: Any) -> bytes:
    """REP 107 level as the single byte DiagnosticStatus.level wants (int, name or bytes)."""
    if isinstance(level, bytes):
        return level[:1] or b"\x00"
    if isinstance(level, str):
        value = _LEVEL_FROM_NAME.get(level.upper())
        if value is None:
            raise ValueError(f"diagnostic level {level!r} is not one of {list(_LEVEL_FROM_NAME)}")
        return bytes([value])
    value = int(level)
    if value not in LEVEL_NAMES:
        raise ValueError(f"diagnostic level {level!r} is not one of 0..3 (REP 107)")
    return bytes([value])


def level_int(level: Any) -> int:
    """REP 107 level as an int (0..3) from int, name or byte."""
    return level_byte(level)[0]


def format_value(value: Any) -> str:
    """Key-value text: floats to 6 significant digits, everything else ``str``."""
    return _fmt(value)


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return "nan" if math.isnan(value) else f"{value:.6g}"
    return str(value)


def key_values(values: Any) -> list[KeyValue]:
    """KeyValue list from a mapping or a sequence of (key, value) pairs; floats to 6 digits."""
    if values is None:
        return []
    items: Iterable[Any] = values.items() if isinstance(values, Mapping) else values
    out = []
    for item in items:
        if isinstance(item, KeyValue):
            out.append(item)
            continue
        k, v = item
        out.append(KeyValue(key=str(k), value=_fmt(v)))
    return out


def _attr(obj: Any, *names: str, default: Any = None) -> Any:
    """First present attribute (or mapping key) of ``obj`` among ``names``."""
    for name in names:
        if isinstance(obj, Mapping):
            if name in obj:
                return obj[name]
        elif hasattr(obj, name):
            return getattr(obj, name)
    return default


def status_level(status: Any) -> int:
    """REP 107 level (0..3) of a status object or mapping."""
    return level_int(_attr(status, "level", default=0))


def status_msg(status: Any, hardware_id: str = HARDWARE_ID) -> DiagnosticStatus:
    """DiagnosticStatus from a monitor check status (name, level, message, values)."""
    name = str(_attr(status, "name", default="unnamed"))
    if not name.startswith(STATUS_PREFIX):
        name = STATUS_PREFIX + name
    return DiagnosticStatus(
        level=level_byte(_attr(status, "level", default=0)),
        name=name,
        message=str(_attr(status, "message", default="")),
        hardware_id=hardware_id,
        values=key_values(_attr(status, "values", "key_values", "figures", default=None)),
    )


def diagnostic_array(statuses: Sequence[Any], stamp: Time,
                     hardware_id: str = HARDWARE_ID) -> DiagnosticArray:
    """DiagnosticArray with one status per check, header stamp ``stamp``."""
    arr = DiagnosticArray()
    arr.header.stamp = stamp
    arr.status = [status_msg(s, hardware_id) for s in statuses]
    return arr


def event_fields(record: Any) -> dict[str, Any]:
    """Plain dict view of an event start/end record (dataclass, mapping or object)."""
    if isinstance(record, Mapping):
        return dict(record)
    if hasattr(record, "to_dict"):
        return dict(record.to_dict())
    if hasattr(record, "__dataclass_fields__"):
        return {k: getattr(record, k) for k in record.__dataclass_fields__}
    return {k: v for k, v in vars(record).items() if not k.startswith("_")}


def event_phase(fields: Mapping[str, Any]) -> str:
    """'start' or 'end' for an event transition record."""
    phase = fields.get("phase", fields.get("transition", fields.get("type")))
    if isinstance(phase, str) and phase.lower() in ("start", "end"):
        return phase.lower()
    end = fields.get("end")
    return "end" if end is not None and _is_num(end) and math.isfinite(float(end)) else "start"


def _is_num(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def event_status_msg(record: Any, hardware_id: str = HARDWARE_ID) -> DiagnosticStatus:
    """DiagnosticStatus for ``~/events``: name ``kinematic_monitor: event <kind>``.

    Level is the event's level at start and OK (0) at its end; every record field is a
    key-value (``phase`` says start/end).
    """
    f = event_fields(record)
    phase = event_phase(f)
    kind = str(f.get("kind", "unknown"))
    level = level_int(f.get("level", 1)) if phase == "start" else 0
    values: list[tuple[str, Any]] = [("phase", phase)]
    for k, v in f.items():
        if k in ("phase",):
            continue
        if isinstance(v, Mapping):
            values.extend((f"{k}.{kk}", vv) for kk, vv in v.items())
        elif isinstance(v, (list, tuple)):
            values.append((k, ", ".join(_fmt(x) for x in v)))
        elif v is not None:
            values.append((k, v))
    summary = str(f.get("summary", "") or kind)
    return DiagnosticStatus(
        level=bytes([level]),
        name=f"{STATUS_PREFIX}event {kind}",
        message=f"{phase}: {summary}",
        hardware_id=hardware_id,
        values=key_values(values),
    )


def event_console_line(record: Any, t0: float = 0.0) -> str:
    """One operator line, e.g. ``[12.31 s] ERROR lateral_slip: understeer ... (start)``.

    The time is the event start (or end) stamp minus ``t0`` [s].
    """
    f = event_fields(record)
    phase = event_phase(f)
    t: Any = f.get("end") if phase == "end" else f.get("detected_at", f.get("start"))
    if not (_is_num(t) and math.isfinite(float(t))):
        t = f.get("start", math.nan)
    rel = float(t) - t0 if _is_num(t) else math.nan
    level = LEVEL_NAMES.get(level_int(f.get("level", 1)), "WARN")
    kind = f.get("kind", "unknown")
    summary = f.get("summary", "") or ""
    tail = "ended" if phase == "end" else "started"
    return f"[{rel:.2f} s] {level} {kind}: {summary} ({tail})".replace(":  (", ": (")


def prediction_odometry(pred: Any, stamp: Time, frame_id: str = "map",
                        child_frame_id: str = "base_link") -> Odometry:
    """nav_msgs/Odometry from a filter estimate.

    ``pred`` has x, y [m], yaw [rad] in ``frame_id``; v (or vx) [m/s], optional vy and
    yaw_rate in the body frame; optional ``cov`` / ``pose_cov`` 3x3 over (x, y, yaw).
    """
    msg = Odometry()
    msg.header.stamp = stamp
    msg.header.frame_id = frame_id
    msg.child_frame_id = child_frame_id
    x = float(_attr(pred, "x", default=math.nan) or 0.0)
    y = float(_attr(pred, "y", default=math.nan) or 0.0)
    yaw = float(_attr(pred, "yaw", "psi", default=math.nan))
    msg.pose.pose.position.x = x
    msg.pose.pose.position.y = y
    qx, qy, qz, qw = yaw_to_quaternion(yaw if math.isfinite(yaw) else 0.0)
    msg.pose.pose.orientation.x = qx
    msg.pose.pose.orientation.y = qy
    msg.pose.pose.orientation.z = qz
    msg.pose.pose.orientation.w = qw
    v = _attr(pred, "vx", "v", "speed", default=math.nan)
    msg.twist.twist.linear.x = float(v) if v is not None else math.nan
    vy = _attr(pred, "vy", default=None)
    if vy is not None:
        msg.twist.twist.linear.y = float(vy)
    wz = _attr(pred, "yaw_rate", default=None)
    if wz is not None:
        msg.twist.twist.angular.z = float(wz)
    cov = _attr(pred, "pose_cov", "cov", "covariance", default=None)
    if cov is not None:
        flat = [float(c) for c in _flatten(cov)]
        if len(flat) >= 9:
            idx = (0, 1, 5)  # x, y, yaw rows/cols in the 6x6 ROS covariance
            pc = [0.0] * 36
            for i in range(3):
                for j in range(3):
                    pc[idx[i] * 6 + idx[j]] = flat[i * 3 + j]
            msg.pose.covariance = pc
    return msg


def _flatten(cov: Any) -> list[Any]:
    if hasattr(cov, "tolist"):
        cov = cov.tolist()
    out: list[Any] = []
    for row in cov:
        if isinstance(row, (list, tuple)):
            out.extend(row)
        else:
            out.append(row)
    if len(out) > 9:  # e.g. the whole state covariance: take the (x, y, yaw) block of 5x5
        n = int(round(math.sqrt(len(out))))
        if n * n == len(out):
            out = [out[i * n + j] for i in range(3) for j in range(3)]
    return out


# --- samples -> messages (publishers: tests, bench, live demo) ---------------------------

DEFAULT_STEER_JOINTS = ("front_left_steer_joint", "front_right_steer_joint")
DEFAULT_WHEEL_JOINTS = (
    "front_left_wheel_joint",
    "front_right_wheel_joint",
    "rear_left_wheel_joint",
    "rear_right_wheel_joint",
)


def joint_state_msg(s: ChassisSample, steer_joints: Sequence[str] = DEFAULT_STEER_JOINTS,
                    wheel_joints: Sequence[str] = DEFAULT_WHEEL_JOINTS) -> JointState:
    """JointState: steer joints carry ``position`` [rad], wheel joints ``velocity`` [rad/s].

    Order of ``wheel_joints``: front left, front right, rear left, rear right.
    """
    msg = JointState()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.name = [*steer_joints, *wheel_joints]
    wheels = (s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left, s.wheel_rear_right)
    msg.position = [float(s.steer_left), float(s.steer_right)] + [0.0] * len(wheel_joints)
    msg.velocity = [0.0, 0.0] + [float(w) for w in wheels[: len(wheel_joints)]]
    return msg


def odometry_msg(s: LocalizationSample, child_frame_id: str = "base_link") -> Odometry:
    """nav_msgs/Odometry from a localisation sample (pose in s.frame_id, twist in body)."""
    msg = Odometry()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = s.frame_id
    msg.child_frame_id = child_frame_id
    msg.pose.pose.position.x = float(s.x)
    msg.pose.pose.position.y = float(s.y)
    qx, qy, qz, qw = yaw_to_quaternion(s.yaw)
    msg.pose.pose.orientation.z = qz
    msg.pose.pose.orientation.w = qw
    msg.pose.pose.orientation.x = qx
    msg.pose.pose.orientation.y = qy
    for attr, val in (("x", s.vx), ("y", s.vy)):
        if math.isfinite(val):
            setattr(msg.twist.twist.linear, attr, float(val))
    if math.isfinite(s.yaw_rate):
        msg.twist.twist.angular.z = float(s.yaw_rate)
    idx = (0, 1, 5)
    for src, dst in ((s.pose_cov, msg.pose), (s.twist_cov, msg.twist)):
        if len(src) == 9:
            pc = [0.0] * 36
            for i in range(3):
                for j in range(3):
                    pc[idx[i] * 6 + idx[j]] = float(src[i * 3 + j])
            dst.covariance = pc
    return msg


def pose_msg(s: LocalizationSample) -> PoseWithCovarianceStamped:
    """geometry_msgs/PoseWithCovarianceStamped from a localisation sample."""
    odo = odometry_msg(s)
    msg = PoseWithCovarianceStamped()
    msg.header = odo.header
    msg.pose = odo.pose
    return msg


def imu_msg(s: ImuSample, frame_id: str = "base_link") -> Imu:
    """sensor_msgs/Imu: angular_velocity.z [rad/s], linear_acceleration.x/y [m/s^2].

    Orientation is marked unknown (covariance[0] = -1) unless ``s.yaw`` is finite.
    """
    msg = Imu()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = frame_id
    msg.angular_velocity.z = float(s.yaw_rate)
    msg.linear_acceleration.x = float(s.ax) if math.isfinite(s.ax) else 0.0
    msg.linear_acceleration.y = float(s.ay) if math.isfinite(s.ay) else 0.0
    msg.linear_acceleration.z = 9.80665
    if math.isfinite(s.yaw):
        qx, qy, qz, qw = yaw_to_quaternion(s.yaw)
        msg.orientation.z = qz
        msg.orientation.w = qw
    else:
        cov = [0.0] * 9
        cov[0] = -1.0  # sensor_msgs/Imu: orientation unknown
        msg.orientation_covariance = cov
    return msg


def navsatfix_msg(s: GnssSample, frame_id: str = "gnss") -> NavSatFix:
    """sensor_msgs/NavSatFix from a GNSS sample (WGS84 degrees, metres)."""
    msg = NavSatFix()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = frame_id
    msg.latitude = float(s.latitude)
    msg.longitude = float(s.longitude)
    msg.altitude = float(s.altitude) if math.isfinite(s.altitude) else 0.0
    return msg


# --- message classes by type name (inputs of vehicle-specific types) ----------------------

_RCL_PRIMITIVES = {
    "double": "float64", "float": "float32", "boolean": "bool", "octet": "byte",
    "long double": "float64",
}


def import_message_class(type_name: str) -> Any:
    """The rclpy message class for ``pkg/msg/Name`` (importlib, no rosidl_runtime_py).

    Raises ImportError naming the type when its package is not installed or has no such
    message.
    """
    import importlib

    from kinematic_monitor.io.fieldpath import FieldPathError, normalize_type_name

    try:
        full = normalize_type_name(type_name)
    except FieldPathError as exc:
        raise ImportError(str(exc)) from None
    pkg, _, name = full.split("/")
    try:
        module = importlib.import_module(f"{pkg}.msg")
    except ImportError as exc:
        raise ImportError(f"message type {full}: package '{pkg}' is not installed for this "
                          f"Python ({exc})") from None
    cls = getattr(module, name, None)
    if cls is None or not hasattr(cls, "get_fields_and_field_types"):
        raise ImportError(f"message type {full}: package '{pkg}' has no message '{name}'")
    return cls


def _rcl_field_type(text: str) -> Any:
    """rclpy field type string ('double', 'sequence<double, 3>', 'pkg/Name[2]') -> FieldType."""
    from kinematic_monitor.io.fieldpath import FieldType, normalize_type_name

    text = text.strip()
    if text.startswith("sequence<") and text.endswith(">"):
        inner = text[len("sequence<"):-1].split(",")[0]
        return FieldType(_rcl_field_type(inner).base, "sequence")
    if text.endswith("]") and "[" in text:
        base, _, n = text[:-1].rpartition("[")
        if n.startswith("<="):
            return FieldType(_rcl_field_type(base).base, "sequence")
        return FieldType(_rcl_field_type(base).base, "fixed", int(n))
    if "/" in text:
        return FieldType(normalize_type_name(text))
    base = text.split("<")[0]  # bounded strings: string<10>
    return FieldType(_RCL_PRIMITIVES.get(base, base))


def rclpy_fields_of(type_name: str) -> Any:
    """fieldpath look-up over installed rclpy message classes (None if not importable)."""
    try:
        cls = import_message_class(type_name)
    except ImportError:
        return None
    return {name: _rcl_field_type(t) for name, t in cls.get_fields_and_field_types().items()}
