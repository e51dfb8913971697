"""Diagnostic levels (REP 107 and ``diagnostic_msgs/DiagnosticStatus``): OK, WARN, ERROR, STALE."""

from __future__ import annotations

OK = 0
WARN = 1
ERROR = 2
STALE = 3
LEVEL_NAMES: dict[int, str] = {OK: "OK", WARN: "WARN", ERROR: "ERROR", STALE: "STALE"}
LEVEL_BY_NAME: dict[str, int] = {name: level for level, name in LEVEL_NAMES.items()}
