"""Regenerate README.md's parameter table from the schema in kinematic_monitor/params.py."""

from __future__ import annotations

import re
import sys
from pathlib import Path

from kinematic_monitor.config.docs import spec_table_markdown

BEGIN, END = "<!-- BEGIN PARAMETERS -->", "<!-- END PARAMETERS -->"


def render(readme: str) -> str:
    """README text with the table between the markers replaced by the current schema."""
    pattern = re.compile(re.escape(BEGIN) + ".*?" + re.escape(END), re.S)
    if not pattern.search(readme):
        raise ValueError(f"README has no {BEGIN} ... {END} block")
    return pattern.sub(lambda _: f"{BEGIN}\n{spec_table_markdown().strip()}\n{END}", readme)


def main() -> int:
    path = Path(sys.argv[1] if len(sys.argv) > 1 else "README.md")
    path.write_text(render(path.read_text(encoding="utf-8")), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
