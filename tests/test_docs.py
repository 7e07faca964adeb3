"""The README keeps its promises: the two-line quick start, every setting, every command."""

from __future__ import annotations

import re
from pathlib import Path

from server.__main__ import build_parser
from server.config import Settings

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text()


def _quick_start_lines() -> list[str]:
    section = README.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [line for block in re.findall(r"```sh\n(.*?)```", section, re.S) for line in block.splitlines() if line]


def test_quick_start_is_two_lines_and_ci_runs_the_test_line():
    lines = _quick_start_lines()
    assert len(lines) == 2
    assert "railsign demo" in lines[0]
    assert "pytest" in lines[1]
    assert lines[1] in (ROOT / ".ci" / "run").read_text()


def test_every_setting_is_in_the_configuration_table():
    for name in Settings.model_fields:
        assert f"`RAILSIGN_{name.upper()}`" in README, f"RAILSIGN_{name.upper()} is not documented"


def test_every_command_is_in_the_command_table():
    parser = build_parser()
    commands = next(a for a in parser._actions if a.dest == "command").choices
    for command in commands:
        assert f"| `{command}" in README, f"command {command} is not documented"


def test_readme_starts_with_the_job_and_carries_the_caution():
    first_paragraph = README.split("\n\n")[1]
    assert "switched power rail" in first_paragraph
    assert "does not certify hardware" in README
