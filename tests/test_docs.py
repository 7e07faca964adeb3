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


DEVELOPERS = (ROOT / "DEVELOPERS.md").read_text()


def _layout() -> str:
    return DEVELOPERS.split("## Layout", 1)[1].split("Rules the code keeps", 1)[0]


def _named(block: str, name: str) -> bool:
    return re.search(rf"(?<![\w/.]){re.escape(name)}(?![\w])", block) is not None


def _entry(layout: str, package: str) -> str:
    """The layout's text of one package of server: from its line to the next entry at its depth."""
    return re.search(rf"\n  {package}/(.*?)\n  \w", layout, re.S).group(1)


def test_the_layout_names_every_module_of_the_server_the_services_and_the_analysis_core():
    layout = _layout()
    server = ROOT / "server"
    missing = [p.name for p in server.iterdir()
               if (p.suffix == ".py" and p.name != "__init__.py" and not _named(layout, p.name))
               or (p.is_dir() and (p / "__init__.py").exists() and not _named(layout, p.name + "/"))]
    for package in ("services", "analysis", "schemas"):
        entry = _entry(layout, package)
        missing += [f"{package}/{p.name}" for p in (server / package).glob("*.py")
                    if p.name != "__init__.py" and not _named(entry, p.name)]
    assert missing == []
    assert _named(_entry(layout, "services"), "errors.py") and not _named(_entry(layout, "schemas"), "errors.py")


def test_the_migration_example_takes_the_next_free_revision_id():
    numbers = sorted(int(p.name[:4]) for p in (ROOT / "migrations" / "versions").glob("[0-9][0-9][0-9][0-9]_*.py"))
    rev_id = int(re.search(r"--rev-id (\d{4})", DEVELOPERS).group(1))
    assert rev_id == numbers[-1] + 1
    newest = next((ROOT / "migrations" / "versions").glob(f"{numbers[-1]:04d}_*.py")).name
    assert f"`{newest}`" in DEVELOPERS
