"""Play a rosbag2 folder over DDS in real time (or faster), as a separate ROS 2 process.

Each recorded message is published unchanged (its serialized CDR bytes) on its topic, at
its log (receive) time scaled by ``rate``; header stamps stay as recorded. Simulated time
is published on ``/clock`` (rosgraph_msgs/Clock, the log time of the messages played), so a
subscriber run with ``use_sim_time:=true`` sees the bag's clock, as with a recorder's own
player. Publishers are reliable (they match reliable and best-effort subscriptions alike).

Usable from Python (:func:`play`) or as ``python -m kinematic_monitor.ros.player BAG [--rate R]``.
Needs rclpy and the message packages of the bag's types; ``rosbags`` reads the bag.
"""

from __future__ import annotations

import argparse
import importlib
import math
import signal
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

CLOCK_TOPIC = "/clock"
CLOCK_PERIOD = 0.01  # [s] of bag time between /clock messages
QOS_DEPTH = 1000


class PlayerError(Exception):
    """The bag cannot be played: unreadable, unknown message type, no such topic."""


def message_class(type_name: str) -> Any:
    """The rclpy message class for a type name such as ``sensor_msgs/msg/JointState``."""
    parts = type_name.split("/")
    if len(parts) == 2:  # "pkg/Type" short form
        parts = [parts[0], "msg", parts[1]]
    if len(parts) != 3 or not all(parts):
        raise PlayerError(f"message type {type_name!r} is not of the form pkg/msg/Type")
    pkg, sub, name = parts
    try:
        module = importlib.import_module(f"{pkg}.{sub}")
        return getattr(module, name)
    except (ImportError, AttributeError) as exc:
        raise PlayerError(f"message type {type_name!r}: Python class not found ({exc}); "
                          f"is the {pkg} package installed?") from exc


def _open_reader(bag_path: str | Path) -> Any:
    from rosbags.rosbag2 import Reader

    path = Path(bag_path)
    if not path.exists():
        raise PlayerError(f"bag {str(path)!r} does not exist")
    try:
        reader = Reader(path)
        reader.open()
    except Exception as exc:  # rosbags raises several kinds for unreadable bags
        raise PlayerError(f"bag {str(path)!r} cannot be read: {exc}") from exc
    return reader


class _Stop:
    """Set by SIGINT/SIGTERM while playing (only installed in the main thread)."""

    def __init__(self) -> None:
        self.flag = False
        self._previous: dict[int, Any] = {}

    def install(self) -> None:
        import threading

        if threading.current_thread() is not threading.main_thread():
            return
        for s in (signal.SIGINT, signal.SIGTERM):
            self._previous[s] = signal.signal(s, self._on_signal)

    def _on_signal(self, signum: int, frame: Any) -> None:
        self.flag = True

    def restore(self) -> None:
        for s, h in self._previous.items():
            signal.signal(s, h)
        self._previous.clear()


def play(bag_path: str | Path, rate: float = 1.0, topics: Sequence[str] | None = None,
         on_message: Callable[[str, int], None] | None = None, *, clock: bool = True,
         wait_subscribers: float = 10.0, settle: float = 0.5, node_name: str = "bag_player",
         log: Callable[[str], None] | None = None) -> dict[str, int]:
    """Publish the bag's messages paced by log time / ``rate``; return counts per topic.

    ``topics``: only these (default: all). ``on_message(topic, log_time_ns)`` is called after
    each publish. Before playing, waits up to ``wait_subscribers`` [s] for every topic to
    have a subscriber; once any topic has one, waits at most ``settle`` [s] more for the
    rest. Stops early on SIGINT/SIGTERM (what was played is returned).
    """
    if not (isinstance(rate, (int, float)) and math.isfinite(rate) and rate > 0):
        raise PlayerError(f"rate {rate!r} must be a positive number")
    say = log or (lambda line: None)
    reader = _open_reader(bag_path)
    try:
        conns = list(reader.connections)
        if topics is not None:
            wanted = set(topics)
            missing = wanted - {c.topic for c in conns}
            if missing:
                known = ", ".join(sorted({c.topic for c in conns}))
                raise PlayerError(f"topic(s) {', '.join(sorted(missing))} not in the bag "
                                  f"(it has: {known})")
            conns = [c for c in conns if c.topic in wanted]
        if not conns:
            raise PlayerError(f"bag {str(bag_path)!r} has no topic to play")
        classes = {c.topic: message_class(c.msgtype) for c in conns}
        return _play(reader, conns, classes, float(rate), on_message, clock,
                     wait_subscribers, settle, node_name, say)
    finally:
        reader.close()


def _play(reader: Any, conns: list[Any], classes: dict[str, Any], rate: float,
          on_message: Callable[[str, int], None] | None, clock: bool, wait_subscribers: float,
          settle: float, node_name: str, say: Callable[[str], None]) -> dict[str, int]:
    import rclpy
    from rclpy.context import Context
    from rclpy.qos import DurabilityPolicy, HistoryPolicy, QoSProfile, ReliabilityPolicy
    from rosgraph_msgs.msg import Clock

    context = Context()
    try:
        from rclpy.signals import SignalHandlerOptions
        rclpy.init(context=context, signal_handler_options=SignalHandlerOptions.NO)
    except (ImportError, TypeError):  # pragma: no cover - very old rclpy
        rclpy.init(context=context)
    stop = _Stop()
    stop.install()
    node = None
    try:
        from rclpy.node import Node

        node = Node(node_name, context=context)
        qos = QoSProfile(history=HistoryPolicy.KEEP_LAST, depth=QOS_DEPTH,
                         reliability=ReliabilityPolicy.RELIABLE,
                         durability=DurabilityPolicy.VOLATILE)
        pubs = {t: node.create_publisher(cls, t, qos) for t, cls in classes.items()}
        pub_clock = node.create_publisher(Clock, CLOCK_TOPIC, 10) if clock else None
        _wait_for_subscribers(pubs, wait_subscribers, settle, stop, say)
        counts = dict.fromkeys(pubs, 0)
        wall0 = time.monotonic()
        log0: int | None = None
        next_clock = -math.inf
        clock_msg = Clock()
        say(f"playing at rate {rate:g}")
        for conn, log_ns, raw in reader.messages(connections=conns):
            if stop.flag:
                break
            if log0 is None:
                log0 = log_ns
            due = wall0 + (log_ns - log0) * 1e-9 / rate
            wait = due - time.monotonic()
            while wait > 0 and not stop.flag:
                time.sleep(min(wait, 0.1))
                wait = due - time.monotonic()
            if stop.flag:
                break
            if pub_clock is not None and log_ns * 1e-9 >= next_clock:
                clock_msg.clock.sec, clock_msg.clock.nanosec = divmod(int(log_ns), 10**9)
                pub_clock.publish(clock_msg)
                next_clock = log_ns * 1e-9 + CLOCK_PERIOD
            pubs[conn.topic].publish(bytes(raw))
            counts[conn.topic] += 1
            if on_message is not None:
                on_message(conn.topic, log_ns)
        time.sleep(0.2)  # let the last messages leave before the publishers go
        return counts
    finally:
        stop.restore()
        if node is not None:
            node.destroy_node()
        if context.ok():
            rclpy.shutdown(context=context)


def _wait_for_subscribers(pubs: dict[str, Any], timeout: float, settle: float, stop: _Stop,
                          say: Callable[[str], None]) -> None:
    deadline = time.monotonic() + max(0.0, timeout)
    first_match: float | None = None
    while not stop.flag:
        matched = [t for t, p in pubs.items() if p.get_subscription_count() > 0]
        now = time.monotonic()
        if len(matched) == len(pubs):
            break
        if matched and first_match is None:
            first_match = now
        if now >= deadline or (first_match is not None and now - first_match >= settle):
            unmatched = sorted(set(pubs) - set(matched))
            say("no subscriber for " + ", ".join(unmatched) + "; playing anyway")
            break
        time.sleep(0.02)
    time.sleep(0.2)  # discovery is per endpoint pair: give the last match time to settle


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m kinematic_monitor.ros.player BAG [--rate R] [--topics T ...]``."""
    ap = argparse.ArgumentParser(prog="python -m kinematic_monitor.ros.player",
                                 description=__doc__.splitlines()[0] if __doc__ else None)
    ap.add_argument("bag", help="rosbag2 folder")
    ap.add_argument("--rate", type=float, default=1.0, help="playback rate (default 1.0)")
    ap.add_argument("--topics", nargs="+", metavar="TOPIC", help="only these topics")
    ap.add_argument("--no-clock", action="store_true", help="do not publish /clock")
    ap.add_argument("--wait", type=float, default=10.0, metavar="S",
                    help="seconds to wait for subscribers before playing (default 10)")
    a = ap.parse_args(argv)

    def say(line: str) -> None:
        print(f"player: {line}", flush=True)

    try:
        counts = play(a.bag, rate=a.rate, topics=a.topics, clock=not a.no_clock,
                      wait_subscribers=a.wait, log=say)
    except PlayerError as exc:
        print(f"player: error: {exc}", file=sys.stderr, flush=True)
        return 2
    say("played " + ", ".join(f"{t}={n}" for t, n in counts.items()))
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
