"""README.md stays true: the job first, the caution, the two commands, the parameter table."""

from __future__ import annotations

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _tool():  # type: ignore[no-untyped-def]
    spec = importlib.util.spec_from_file_location("update_readme_params",
                                                  ROOT / "tools" / "update_readme_params.py")
    assert spec and spec.loader
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_parameter_table_matches_schema() -> None:
    assert _tool().render(README) == README, (
        "README.md's parameter table is out of date: run "
        "`.venv/bin/python tools/update_readme_params.py`")


def test_quick_start_has_exactly_the_two_commands() -> None:
    quick = README.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    block = quick.split("```sh", 1)[1].split("```", 1)[0]
    commands = [line.split("#")[0].strip() for line in block.strip().splitlines()]
    assert commands == ["make demo", "make test"]


def test_first_paragraph_states_the_job_and_caution_follows() -> None:
    first = README.split("\n\n")[1]
    assert "kinematic bicycle model" in first and "slip" in first
    caution_at = README.index("Safety caution")
    assert caution_at < README.index("## Quick start")
    assert "not a safety function" in README
