"""The node's output messages (io.outgoing), read back with rosbags' deserialiser.

References: the ROS 2 message definitions of diagnostic_msgs/DiagnosticArray,
DiagnosticStatus and nav_msgs/Odometry (rosbags' Jazzy typestore decodes our bytes); REP 107
levels (OK 0, WARN 1, ERROR 2); REP 103 yaw about +z, quaternion of a yaw-only rotation
(x, y, z, w) = (0, 0, sin(yaw/2), cos(yaw/2)); the nav_msgs/Odometry covariance is 6x6
row-major over (x, y, z, roll, pitch, yaw).
"""

from __future__ import annotations

import json
import math

import pytest
from rosbags.typesys import Stores, get_typestore

from kinematic_monitor.core.checks.base import CheckStatus
from kinematic_monitor.core.events import ERROR, Event, Transition
from kinematic_monitor.core.monitor import Prediction
from kinematic_monitor.io import outgoing

STORE = get_typestore(Stores.ROS2_JAZZY)


def test_diagnostics_one_status_per_check() -> None:
    sts = [CheckStatus("kinematic_monitor: lateral slip", 1, "understeer", {"nis": "3.2"}),
           CheckStatus("kinematic_monitor: node", 0, "running", {})]
    msg = STORE.deserialize_cdr(outgoing.diagnostics(1_800_000_000, 5, sts),
                                "diagnostic_msgs/msg/DiagnosticArray")
    assert (msg.header.stamp.sec, msg.header.stamp.nanosec) == (1_800_000_000, 5)
    assert [(s.level, s.name, s.message, s.hardware_id) for s in msg.status] == [
        (1, "kinematic_monitor: lateral slip", "understeer", "kinematic_monitor"),
        (0, "kinematic_monitor: node", "running", "kinematic_monitor")]
    assert [(kv.key, kv.value) for kv in msg.status[0].values] == [("nis", "3.2")]


def test_prediction_pose_covariance_and_twist() -> None:
    yaw = 2.5
    cov = (0.01, 0.002, 0.003, 0.002, 0.04, 0.005, 0.003, 0.005, 0.0009)
    pred = Prediction(1_800_000_000.25, 3.0, -4.0, yaw, 7.5, 0.2, cov, "odom")
    msg = STORE.deserialize_cdr(outgoing.prediction(pred, "map"), "nav_msgs/msg/Odometry")
    assert msg.header.frame_id == "map" and msg.child_frame_id == "base_link"
    assert msg.header.stamp.sec == 1_800_000_000
    # stamp x 1e9 in float64: 256 ns spacing at 1.8e18
    assert msg.header.stamp.nanosec == pytest.approx(250_000_000, abs=256)
    p, q = msg.pose.pose.position, msg.pose.pose.orientation
    assert (p.x, p.y, p.z) == (3.0, -4.0, 0.0)
    assert (q.x, q.y, q.z, q.w) == pytest.approx((0.0, 0.0, math.sin(yaw / 2),
                                                   math.cos(yaw / 2)), abs=1e-12)
    c = msg.pose.covariance.reshape(6, 6)
    rows = (0, 1, 5)  # x, y, yaw
    for i, ii in enumerate(rows):
        for j, jj in enumerate(rows):
            assert c[ii, jj] == cov[3 * i + j]
    assert c.sum() == pytest.approx(sum(cov))  # nothing else set
    assert (msg.twist.twist.linear.x, msg.twist.twist.angular.z) == (7.5, 0.2)
    assert not msg.twist.covariance.any()


def test_event_status_start_and_end() -> None:
    ev = Event(start=10.0, detected_at=10.2, kind="lateral_slip", level=ERROR,
               summary="understeer")
    start = Transition("start", ev)
    d = start.event.to_dict()
    assert outgoing.event_stamp("start", d) == pytest.approx(10.2)
    msg = STORE.deserialize_cdr(outgoing.event_status("start", d, int(ev.level)),
                                "diagnostic_msgs/msg/DiagnosticStatus")
    assert msg.level == ERROR and msg.name == "kinematic_monitor: event lateral_slip"
    assert msg.message == "start: understeer"
    values = {kv.key: kv.value for kv in msg.values}
    # the event-log record's fields (less the summary, which is the message), nested as JSON
    assert values["type"] == "start" and values["kind"] == "lateral_slip"
    assert json.loads(values["position"]) == d["position"]
    assert values["end"] == "null" and "summary" not in values
    ev.end = 11.0
    d = Transition("end", ev).event.to_dict()
    assert outgoing.event_stamp("end", d) == 11.0
    end = STORE.deserialize_cdr(outgoing.event_status("end", d, int(ev.level)),
                                "diagnostic_msgs/msg/DiagnosticStatus")
    assert end.level == 0  # REP 107 OK: the episode is over
    assert math.isnan(outgoing.event_stamp("end", {**d, "end": None}))
