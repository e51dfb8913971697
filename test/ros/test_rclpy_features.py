"""The rclpy features the node relies on, checked on whichever ROS 2 release is installed.

``make test`` runs these (marker ``dds``) against the newest release's wheels (.venv) and
against Jazzy's (.venv-jazzy):

* the executor choice: ``rclpy.experimental.EventsExecutor`` where it exists, otherwise
  ``SingleThreadedExecutor`` (the fallback is forced here by hiding the module);
* serialized messages: ``Publisher.publish(bytes)`` sends CDR bytes as they are, and a
  subscription with ``raw=True`` hands over the bytes; both must be the bytes that
  ``rclpy.serialization.serialize_message`` gives and must decode to the message sent.

Reference: rclpy's own API (``rclpy.publisher.Publisher.publish``, ``Node.create_subscription``
``raw`` argument, ``rclpy.serialization``); the traffic stays in one process on this
machine's own domain (test/dds_helpers.py).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Iterator
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import pytest

pytest.importorskip("rclpy")

import rclpy  # noqa: E402  (after the importorskip)
from rclpy.context import Context  # noqa: E402
from rclpy.executors import SingleThreadedExecutor  # noqa: E402

from dds_helpers import new_domain_id  # noqa: E402
from kinematic_monitor.ros import node as node_mod  # noqa: E402

pytestmark = pytest.mark.dds


@pytest.fixture
def context() -> Iterator[Context]:
    ctx = Context()
    rclpy.init(context=ctx, domain_id=new_domain_id())
    try:
        yield ctx
    finally:
        if ctx.ok():
            rclpy.shutdown(context=ctx)


def _shutdown(ex: Any) -> None:
    try:
        ex.shutdown(timeout_sec=0.5)
    except TypeError:
        ex.shutdown()


def test_rclpy_release_is_one_we_test() -> None:
    # 7.x: Jazzy, 9.x: Kilted (the releases named in README's "Supported ROS 2 releases")
    try:
        wheel = version("ros-rclpy")
    except PackageNotFoundError:
        pytest.skip("rclpy comes from a ROS installation, not the registry wheels")
    assert int(wheel.split(".")[0]) in (7, 9), wheel


def test_auto_picks_the_events_executor(context: Context) -> None:
    from rclpy.experimental import EventsExecutor  # present in the Jazzy and Kilted wheels

    ex = node_mod.make_executor("auto", context=context)
    try:
        reference = EventsExecutor(context=context)
        assert type(ex) is type(reference)
        _shutdown(reference)
        assert type(ex) is not SingleThreadedExecutor
    finally:
        _shutdown(ex)


def test_without_events_executor_auto_falls_back_and_events_is_refused(
        context: Context, monkeypatch: pytest.MonkeyPatch) -> None:
    # an rclpy without rclpy.experimental (older releases): importing it raises ImportError
    monkeypatch.setitem(sys.modules, "rclpy.experimental", None)
    ex = node_mod.make_executor("auto", context=context)
    try:
        assert type(ex) is SingleThreadedExecutor
    finally:
        _shutdown(ex)
    with pytest.raises(node_mod.StartupError, match="EventsExecutor is not available"):
        node_mod.make_executor("events", context=context)


def test_single_is_single_and_a_bad_choice_names_the_variable(context: Context) -> None:
    ex = node_mod.make_executor("single", context=context)
    try:
        assert type(ex) is SingleThreadedExecutor
    finally:
        _shutdown(ex)
    with pytest.raises(node_mod.StartupError, match=node_mod.EXECUTOR_ENV):
        node_mod.make_executor("fastest", context=context)


@pytest.mark.parametrize("executor", ["events", "single"])
def test_publish_bytes_reaches_raw_and_typed_subscriptions(context: Context,
                                                          executor: str) -> None:
    from rclpy.node import Node
    from rclpy.qos import QoSProfile, ReliabilityPolicy
    from rclpy.serialization import deserialize_message, serialize_message
    from sensor_msgs.msg import JointState

    qos = QoSProfile(depth=50, reliability=ReliabilityPolicy.RELIABLE)
    pub_node = Node("bytes_publisher", context=context)
    sub_node = Node("bytes_subscriber", context=context)
    raw: list[bytes] = []
    typed: list[Any] = []
    sub_node.create_subscription(JointState, "/km_test/joints", raw.append, qos, raw=True)
    sub_node.create_subscription(JointState, "/km_test/joints", typed.append, qos)
    pub = pub_node.create_publisher(JointState, "/km_test/joints", qos)
    ex = node_mod.make_executor(executor, context=context)
    ex.add_node(pub_node)
    ex.add_node(sub_node)
    try:
        deadline = time.monotonic() + 10.0
        while pub.get_subscription_count() < 2 and time.monotonic() < deadline:
            ex.spin_once(timeout_sec=0.05)
        assert pub.get_subscription_count() == 2
        sent = []
        for i in range(5):
            msg = JointState(name=["front_left_steer_joint", "rear_left_wheel_joint"],
                             position=[0.01 * i, 0.0], velocity=[0.0, 25.0 + i])
            msg.header.stamp.sec = 1000 + i
            msg.header.frame_id = "base_link"
            data = serialize_message(msg)
            assert isinstance(data, bytes)
            pub.publish(data)
            sent.append((data, msg))
        deadline = time.monotonic() + 10.0
        while (len(raw) < 5 or len(typed) < 5) and time.monotonic() < deadline:
            ex.spin_once(timeout_sec=0.05)
        assert [bytes(r) for r in raw] == [d for d, _ in sent]
        assert typed == [m for _, m in sent]
        assert [deserialize_message(r, JointState) for r in raw] == [m for _, m in sent]
    finally:
        _shutdown(ex)
        pub_node.destroy_node()
        sub_node.destroy_node()
