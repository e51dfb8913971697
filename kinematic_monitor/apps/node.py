"""``kinematic-monitor node``: run the live rclpy node (same as the ``kinematic_monitor``
console script / ``ros2 run kinematic_monitor kinematic_monitor``).

rclpy is imported only when the subcommand runs, so ``--help`` needs no ROS install.
"""

from __future__ import annotations

import argparse
import os

HELP = "run the live ROS 2 node (rclpy) on the configured topics"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``kinematic-monitor node``."""
    parser.add_argument("--params", metavar="FILE",
                        help="ROS 2 parameter file (passed as --ros-args --params-file FILE)")
    parser.add_argument("--executor", choices=("auto", "events", "single"), default=None,
                        help="rclpy executor: EventsExecutor where available (auto), or "
                             "force one (default: $KINEMATIC_MONITOR_EXECUTOR or auto)")
    parser.add_argument("ros_args", nargs=argparse.REMAINDER,
                        help="further ROS arguments, e.g. --ros-args -p use_sim_time:=true")


def run(args: argparse.Namespace) -> int:
    """Start the node; returns its exit code (2 on bad parameters)."""
    from kinematic_monitor.apps.cli import UsageError

    if args.params and not os.path.isfile(args.params):
        raise UsageError(f"parameter file {args.params!r} does not exist")
    try:
        from kinematic_monitor.ros import node
    except ImportError as exc:
        raise UsageError(f"rclpy or a message package is missing ({exc}); install the "
                         "'ros' extra or source a ROS 2 installation") from exc
    extra = list(args.ros_args or [])
    if extra and extra[0] == "--":
        extra = extra[1:]
    extra += list(getattr(args, "ros_tail", []))
    argv = ["kinematic_monitor"]
    if args.params:
        argv += ["--ros-args", "--params-file", args.params]
    argv += extra
    return node.main(argv, executor=args.executor)
