"""Where the node's JSON-lines event log goes (parameter ``output.events_log``).

The parameter is a path in which two placeholders are replaced:

* ``{ros_log_dir}``: the ROS log directory, found as ROS 2's logging does
  (``rcl_logging_get_logging_directory``): ``$ROS_LOG_DIR`` if set and not empty, else
  ``$ROS_HOME/log`` if ``ROS_HOME`` is set and not empty, else ``~/.ros/log``; a leading
  ``~`` is replaced by the home directory (``$HOME``).
* ``{run}``: this run's start time (local, to the second) and process id, e.g.
  ``20250314-101502-4242``, so that every run gets its own file.

A path without placeholders is used as it is (a relative one is relative to the working
directory).
"""

from __future__ import annotations

import os
import time
from collections.abc import Mapping
from pathlib import Path

ROS_LOG_DIR_TOKEN = "{ros_log_dir}"
RUN_TOKEN = "{run}"


def _expand_home(path: str, env: Mapping[str, str]) -> str:
    """A leading ``~`` replaced by ``$HOME`` (as ``rcutils_expand_user`` does)."""
    if not path.startswith("~"):
        return path
    home = env.get("HOME") or str(Path.home())
    return home + path[1:]


def ros_log_dir(env: Mapping[str, str] | None = None) -> str:
    """The ROS log directory for environment ``env`` (default ``os.environ``)."""
    env = os.environ if env is None else env
    log_dir = env.get("ROS_LOG_DIR", "")
    if log_dir:
        return _expand_home(log_dir, env)
    ros_home = env.get("ROS_HOME", "")
    if ros_home:
        return os.path.join(_expand_home(ros_home, env), "log")
    return os.path.join(_expand_home("~", env), ".ros", "log")


def run_id(start: float, pid: int) -> str:
    """``YYYYmmdd-HHMMSS-PID`` for a run started at ``start`` [s since the epoch, local time]."""
    return time.strftime("%Y%m%d-%H%M%S", time.localtime(start)) + f"-{pid}"


def events_log_path(setting: str, env: Mapping[str, str] | None = None,
                    start: float | None = None, pid: int | None = None) -> Path:
    """The event-log file for parameter value ``setting``, placeholders replaced.

    ``start`` [s since the epoch] and ``pid`` name the run (default: now, this process).
    """
    path = setting
    if ROS_LOG_DIR_TOKEN in path:
        path = path.replace(ROS_LOG_DIR_TOKEN, ros_log_dir(env))
    if RUN_TOKEN in path:
        path = path.replace(RUN_TOKEN, run_id(time.time() if start is None else start,
                                              os.getpid() if pid is None else pid))
    return Path(path)
