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
    assert "load.c_nom" in err and "must be above 0 F" in err


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


def test_default_report_is_the_signoff_worst_case_and_nominal_is_labelled(tmp_path, capsys):
    path = _write(tmp_path, load_switch_5v())
    main(["analyze", path])
    worst = capsys.readouterr().out
    assert "basis: worst case over" in worst and "worst case at" in worst
    main(["analyze", path, "--nominal"])
    nominal = capsys.readouterr().out
    assert "NOT a sign-off verdict" in nominal
    # the default JSON carries the same verdicts as the pages: worst case, with the point in words
    main(["analyze", path, "--json"])
    result = json.loads(capsys.readouterr().out)
    assert result["basis"] == "worst case" and result["signoff"] is True
    assert all(c["corner"] for c in result["checks"] if c["verdict"] != "n/a")


def test_a_load_turning_on_above_the_supply_minimum_is_analysed_and_fails(tmp_path, capsys):
    doc = load_switch_5v()
    doc["load"]["v_on"] = 4.9  # above the 4.75 V supply minimum: at v_min the load never starts
    code = main(["analyze", _write(tmp_path, doc), "--json"])
    result = json.loads(capsys.readouterr().out)
    assert code == EXIT_FAILING_CHECK
    first = result["checks"][0]
    assert first["id"] == "startup_complete" and first["verdict"] == "fail"
    assert "never starts" in first["detail"] and first["corner"].startswith("supply 4.75 V (min)")
    assert first["nominal"]["verdict"] == "pass"  # at 5 V it does start


def test_thermal_runaway_gets_a_verdict_and_exit_1(tmp_path, capsys):
    # 30 A through a small 40 mOhm part: 36 W against 40 K/W has no thermal fixed point
    doc = load_switch_5v()
    doc["load"].update(model="resistive", i_nom=30.0, v_on=0.0)
    doc["supply"]["i_max"] = None
    doc["fet"].update(rds_on=0.04, rth_ja=40.0)
    code = main(["analyze", _write(tmp_path, doc), "--json"])
    result = json.loads(capsys.readouterr().out)
    assert code == EXIT_FAILING_CHECK
    by_id = {c["id"]: c for c in result["checks"]}
    assert by_id["steady_stable"]["verdict"] == "fail" and "Thermal runaway" in by_id["steady_stable"]["detail"]
