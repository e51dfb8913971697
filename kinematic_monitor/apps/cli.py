"""The ``kinematic-monitor`` command line.

Each subcommand lives in its own module exposing ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``; modules are imported only
when their subcommand runs, so ``--help`` stays fast and needs no ROS install.

Exit codes (docs/interface.md section 4): 0 ok, 1 a ``--fail-on`` condition was met,
2 bad usage, bad parameters or unreadable input.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from kinematic_monitor import __version__

EXIT_OK = 0
EXIT_FAIL_ON = 1
EXIT_USAGE = 2

# subcommand name -> module path (module has HELP, add_arguments, run)
SUBCOMMANDS: dict[str, str] = {
    "demo": "kinematic_monitor.apps.demo",
    "replay": "kinematic_monitor.apps.replay",
    "simulate": "kinematic_monitor.apps.simulate",
    "node": "kinematic_monitor.apps.node",
    "calibrate": "kinematic_monitor.apps.calibrate",
    "sweep": "kinematic_monitor.apps.sweep",
}


class UsageError(Exception):
    """Bad usage, bad parameters or unreadable input: exit code 2 with a message."""


def load_config(path: str) -> Any:
    """The validated ``MonitorConfig`` of a ROS 2 parameter file; ``UsageError`` if bad."""
    from kinematic_monitor.config.files import load_params_file
    from kinematic_monitor.config.schema import ParamError
    from kinematic_monitor.config.validation import validate

    if not os.path.isfile(path):
        raise UsageError(f"parameter file {path!r} does not exist or is not a file")
    try:
        return validate(load_params_file(path))
    except ParamError as exc:
        raise UsageError(f"parameter file {path!r}: {exc}") from None


def make_parent_folders(path: Path, option: str) -> None:
    """Create the missing folders above output ``path``; ``UsageError`` naming ``option``."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"{option} {path}: cannot create folder {path.parent} "
                         f"({exc.strerror})") from None


def progress_wanted() -> bool:
    """A progress bar only on an interactive terminal and never under CI."""
    if os.environ.get("CI", "").strip().lower() in ("1", "true", "yes"):
        return False
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


def _load(module_path: str):  # type: ignore[no-untyped-def]
    return importlib.import_module(module_path)


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The top-level parser with every available subcommand, or just ``only``.

    Building a subcommand imports its module; a run of one subcommand imports only that
    one, so start-up stays short (``replay`` does not pay for the simulator or Dask).
    """
    parser = argparse.ArgumentParser(
        prog="kinematic-monitor",
        description=(
            "Check an Ackermann vehicle's motion against the kinematic bicycle model: "
            "detect tyre slip, localisation faults and calibration bias, live or from "
            "recorded rosbag2 files. Advisory only, not a safety function."
        ),
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module_path in SUBCOMMANDS.items():
        if only is not None and name != only:
            continue
        try:
            module = _load(module_path)
        except ImportError as exc:  # an optional extra is missing
            p = sub.add_parser(name, help=f"(unavailable: {exc})")
            p.set_defaults(_module=None, _import_error=str(exc))
            continue
        p = sub.add_parser(name, help=module.HELP, description=module.HELP)
        module.add_arguments(p)
        p.set_defaults(_module=module)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    words = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(only=words[0] if words and words[0] in SUBCOMMANDS else None)
    # ROS arguments pass through untouched: everything from --ros-args on is the node's
    ros_tail: list[str] = []
    if "--ros-args" in words:
        cut = words.index("--ros-args")
        words, ros_tail = words[:cut], words[cut:]
    args = parser.parse_args(words)
    args.ros_tail = ros_tail
    if ros_tail and args.command != "node":
        parser.error("--ros-args is only understood by the 'node' subcommand")
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_USAGE
    module = args._module
    if module is None:
        print(f"kinematic-monitor {args.command}: {args._import_error}", file=sys.stderr)
        return EXIT_USAGE
    try:
        return int(module.run(args))
    except UsageError as exc:
        print(f"kinematic-monitor {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"kinematic-monitor {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
