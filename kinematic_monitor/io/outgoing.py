"""The monitor's output messages as CDR bytes: one builder per outgoing message.

The live node publishes these bytes and ``replay --write-bag`` records the same ones
(encoded by :mod:`kinematic_monitor.io.encode`):

- :func:`diagnostics`: ``/diagnostics``, diagnostic_msgs/msg/DiagnosticArray, one status per
  check (REP 107 levels), hardware id ``kinematic_monitor``;
- :func:`prediction`: ``~/prediction``, nav_msgs/msg/Odometry, the filter's pose in the
  localisation frame (REP 105), its (x, y, yaw) covariance in the 6x6 pose covariance, CG
  speed along body x and yaw rate as the twist in ``base_link`` (REP 103);
- :func:`event_status`: ``~/events``, diagnostic_msgs/msg/DiagnosticStatus at an event's
  start (the event's level) and end (OK); its key-values are the fields of the event-log
  record (``type`` = start | end, the ``events.json`` keys; nested values as JSON).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from typing import TYPE_CHECKING, Any, Protocol

from kinematic_monitor.core.geometry import yaw_to_quaternion
from kinematic_monitor.io import encode

if TYPE_CHECKING:  # pragma: no cover - typing only (the core's filter estimate)
    from kinematic_monitor.core.prediction import Prediction

__all__ = [
    "HARDWARE_ID",
    "StatusLike",
        "diagnostics",
    "prediction",
    "event_status",
    "event_stamp",
]

HARDWARE_ID = "kinematic_monitor"
CHILD_FRAME = "base_link"
_XY_YAW = (0, 1, 5)  # rows/cols of x, y, yaw in a 6x6 (x, y, z, roll, pitch, yaw) covariance
_ZEROS36 = (0.0,) * 36


class StatusLike(Protocol):
    """A check status (``core.checks.base.CheckStatus`` and the node's own status)."""

    @property
    def name(self) -> str: ...
    @property
    def level(self) -> int: ...
    @property
    def message(self) -> str: ...
    @property
    def values(self) -> Mapping[str, Any]: ...


def _status(level: int, name: str, message: str, values: Mapping[str, Any]
            ) -> encode.StatusFields:
    return (int(level), name, message, HARDWARE_ID,
            [(str(k), str(v)) for k, v in values.items()])


def diagnostics(sec: int, nanosec: int, statuses: Iterable[StatusLike]) -> bytes:
    """DiagnosticArray stamped (sec, nanosec) with one DiagnosticStatus per status."""
    return encode.diagnostic_array(sec, nanosec, "", [
        _status(st.level, st.name, st.message, st.values or {}) for st in statuses])


def prediction(pred: Prediction, frame_id: str) -> bytes:
    """Odometry of the filter estimate, pose in ``frame_id``, twist in ``base_link``."""
    sec, nanosec = encode.split_stamp(pred.stamp)
    cov = [0.0] * 36
    pc = list(pred.pose_cov) if len(pred.pose_cov) == 9 else [0.0] * 9
    for i, ii in enumerate(_XY_YAW):
        for j, jj in enumerate(_XY_YAW):
            cov[ii * 6 + jj] = pc[i * 3 + j]
    return encode.odometry(sec, nanosec, frame_id, CHILD_FRAME, (pred.x, pred.y, 0.0),
                           yaw_to_quaternion(pred.yaw), cov, (pred.v, 0.0, 0.0),
                           (0.0, 0.0, pred.yaw_rate), _ZEROS36)


def event_stamp(kind: str, record: Mapping[str, Any]) -> float:
    """Header-stamp time [s] of an event transition: detection at start, end at end (NaN
    when the record has none)."""
    stamp = record["detected_at"] if kind == "start" else record["end"]
    return math.nan if stamp is None else float(stamp)


def event_status(kind: str, record: Mapping[str, Any], level: int) -> bytes:
    """DiagnosticStatus of an event's ``kind`` ('start' | 'end'); ``record`` is the event's
    ``events.json`` entry, ``level`` its REP 107 level (sent at start; OK at end)."""
    start = kind == "start"
    values = {k: (json.dumps(v) if isinstance(v, dict | list) or v is None else v)
              for k, v in record.items() if k != "summary"}
    values["type"] = kind
    return encode.diagnostic_status(*_status(
        level if start else 0, f"{HARDWARE_ID}: event {record['kind']}",
        f"{kind}: {record['summary']}", values))
