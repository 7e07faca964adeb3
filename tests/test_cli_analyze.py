"""`railsign analyze FILE`: report, JSON contract, Monte Carlo options and exit codes (no database)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from server.__main__ import EXIT_BAD_INPUT, EXIT_FAILING_CHECK, EXIT_OK, main
from tests.analysis.rail_documents import load_switch_5v
from tests.factories import rail_doc

SECTIONS = {"verdict", "startup", "short_circuit", "timer", "retry", "steady", "checks"}


def _write(tmp_path, doc, name="rail.json"):
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


def test_passing_rail_prints_a_report_and_exits_0(tmp_path, capsys):
    code = main(["analyze", _write(tmp_path, load_switch_5v())])
    out = capsys.readouterr().out
    assert code == EXIT_OK
    assert "verdict: PASS" in out
    assert "does not certify hardware" in out  # the caution travels with every report
    assert "common practice, not a standard" in out


def test_failing_rail_exits_1_and_json_has_the_contract_fields(tmp_path, capsys):
    code = main(["analyze", _write(tmp_path, rail_doc()), "--json", "--corners"])
    result = json.loads(capsys.readouterr().out)
    assert code == EXIT_FAILING_CHECK
    assert SECTIONS | {"corners"} <= set(result)
    assert "monte_carlo" not in result
    assert "waveforms" not in result["startup"]  # omitted unless asked
    assert any(c["verdict"] == "fail" for c in result["checks"])
    assert result["startup"]["i_peak"] == pytest.approx(4.0, rel=1e-3)  # the 4 A current limit holds


def test_monte_carlo_is_reproducible_with_its_seed(tmp_path, capsys):
    path = _write(tmp_path, load_switch_5v())
    runs = []
    for _ in range(2):
        main(["analyze", path, "--json", "--monte-carlo", "300", "--seed", "11", "--waveforms"])
        runs.append(json.loads(capsys.readouterr().out))
    assert runs[0]["monte_carlo"]["n"] == 300
    assert runs[0]["monte_carlo"] == runs[1]["monte_carlo"]
    assert len(runs[0]["startup"]["waveforms"]["t"]) <= 2000


def test_bad_document_exits_2_naming_the_field(tmp_path, capsys):
    doc = rail_doc()
    doc["load"]["c_nom"] = "-47 uF"
    assert main(["analyze", _write(tmp_path, doc)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "load.c_nom" in err and "greater than zero" in err


def test_missing_file_and_bad_json_exit_2(tmp_path, capsys):
    assert main(["analyze", str(tmp_path / "none.json")]) == EXIT_BAD_INPUT
    assert "no such file" in capsys.readouterr().err
    broken = tmp_path / "broken.json"
    broken.write_text("{")
    assert main(["analyze", str(broken)]) == EXIT_BAD_INPUT


def test_the_console_command_reads_standard_input():
    proc = subprocess.run([sys.executable, "-m", "server", "analyze", "-", "--json"], input=json.dumps(load_switch_5v()),
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["verdict"] == "pass"
