"""The import contracts of pyproject.toml ([tool.importlinter]) hold, and they do catch what they forbid.

`lint-imports` (import-linter) reads the contracts; the last two tests break a scratch copy of
the package on purpose (an import cycle, an import of ours in the analysis core) and check
that the contracts fail on it.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
LINT_IMPORTS = Path(sys.executable).with_name("lint-imports")


def _lint_imports(root: Path) -> subprocess.CompletedProcess:
    """Run lint-imports on the package ``server`` under ``root`` with the contracts in ``root``."""
    env = {**os.environ, "PYTHONPATH": str(root)}
    return subprocess.run([str(LINT_IMPORTS), "--no-cache", "--no-logo"], cwd=root, env=env, capture_output=True, text=True,
                          timeout=300)


def _scratch_copy(tmp_path: Path) -> Path:
    root = tmp_path / "repo"
    shutil.copytree(REPO / "server", root / "server", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(REPO / "pyproject.toml", root / "pyproject.toml")
    return root


def _add_line(path: Path, line: str) -> None:
    path.write_text(path.read_text(encoding="utf-8") + f"\n{line}\n", encoding="utf-8")


def test_the_import_contracts_hold():
    contracts = tomllib.loads((REPO / "pyproject.toml").read_text())["tool"]["importlinter"]["contracts"]
    run = _lint_imports(REPO)
    assert run.returncode == 0, run.stdout + run.stderr
    assert f"Contracts: {len(contracts)} kept, 0 broken." in run.stdout
    for contract in contracts:
        assert " ".join(contract["name"].split()[:4]) in " ".join(run.stdout.split())


def test_an_import_cycle_breaks_the_contracts(tmp_path):
    root = _scratch_copy(tmp_path)
    # the rail lookups importing the rail edits, which import the lookups: a cycle inside server.services
    _add_line(root / "server/services/rails.py", "from server.services import rail_edits  # noqa: E402,F401")
    run = _lint_imports(root)
    assert run.returncode == 1, run.stdout + run.stderr
    assert "No cycles are allowed in server.services." in run.stdout
    assert ".rails -> .rail_edits" in run.stdout or ".rail_edits -> .rails" in run.stdout


def test_an_import_of_ours_in_the_analysis_core_breaks_the_contracts(tmp_path):
    root = _scratch_copy(tmp_path)
    _add_line(root / "server/analysis/__init__.py", "from server import units  # noqa: E402,F401")
    run = _lint_imports(root)
    assert run.returncode == 1, run.stdout + run.stderr
    assert "server.analysis is not allowed to import server.units" in run.stdout
