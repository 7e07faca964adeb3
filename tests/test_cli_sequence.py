"""`railsign sequence FILE`: the board power-up sequence offline: report, JSON and exit codes (no database)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

from server.__main__ import EXIT_BAD_INPUT, EXIT_FAILING_CHECK, EXIT_OK, main
from tests.analysis.rail_documents import efuse_12v, slew_12v_demo


def _sequence(tmp_path, *, r_source=0.05, i_max=6.0, enable_b=None):
    (tmp_path / "efuse.json").write_text(json.dumps(efuse_12v()))
    doc = {"schema": "railsign.sequence/1", "name": "controller board",
           "supplies": [{"id": "p12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.0, "r_source": r_source,
                         "i_max": i_max}],
           "rails": [{"id": "main", "ref": "efuse.json", "supply": "p12", "enable": {"at": 0.0}},
                     {"id": "logic", "rail": slew_12v_demo(), "supply": "p12",
                      "enable": enable_b or {"after": "main", "threshold": 0.85, "delay": 1e-3}}]}
    path = tmp_path / "sequence.json"
    path.write_text(json.dumps(doc))
    return str(path)


def test_a_good_sequence_prints_the_checks_in_words_and_exits_0(tmp_path, capsys):
    code = main(["sequence", _sequence(tmp_path)])
    out = capsys.readouterr().out
    assert code == EXIT_OK
    assert "Verdict: pass" in out
    assert "At the supply-low corner" in out
    assert "rail logic (12 V logic, slew-controlled, on p12): enabled at" in out  # the rail read by ref too
    assert "does not certify hardware" in out


def test_a_supply_that_cannot_carry_the_inrush_fails_and_json_holds_the_contract(tmp_path, capsys):
    # both rails at once, on a supply rated 4 A: the eFuse's 3 A limit plus the slew rail's inrush
    code = main(["sequence", _sequence(tmp_path, i_max=4.0, enable_b={"at": 0.0}), "--json"])
    result = json.loads(capsys.readouterr().out)
    assert code == EXIT_FAILING_CHECK
    assert {"schema", "name", "verdict", "checks", "corners", "conventions", "caution"} <= set(result)
    failing = [c for c in result["checks"] if c["verdict"] == "fail"]
    assert failing and all(c["id"] == "supply_current" for c in failing)
    assert all(c["value"] > 4.0 and c["margin"] < 1.0 for c in failing)
    series = result["corners"][0]["series"]
    assert len(series["t"]) == len(series["supplies"]["p12"]["v"]) == len(series["rails"]["logic"]["i"])


def test_a_cycle_is_bad_input_naming_the_field(tmp_path, capsys):
    path = _sequence(tmp_path)
    doc = json.loads(open(path).read())
    doc["rails"][0]["enable"] = {"after": "logic", "threshold": 0.9}
    open(path, "w").write(json.dumps(doc))
    code = main(["sequence", path])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT
    assert "rails[0].enable.after" in err and "cycle in the enable chain" in err


def test_the_example_sequence_reads_rails_in_engineering_notation(capsys):
    # examples/sequences/example_board.json: one rail by ref to examples/rails/vout_12v.json ("680uF" notation),
    # one inline
    code = main(["sequence", str(Path(__file__).resolve().parent.parent / "examples/sequences/example_board.json")])
    out = capsys.readouterr().out
    assert code == EXIT_OK, out
    assert "rail main (VOUT_12V_MAIN, on in12)" in out and "rail aux (VOUT_12V_AUX, on in12)" in out


def test_csv_prints_every_instant_of_each_corner_as_the_json_holds_it(tmp_path, capsys):
    path = _sequence(tmp_path)
    assert main(["sequence", path, "--json"]) == EXIT_OK
    result = json.loads(capsys.readouterr().out)
    assert main(["sequence", path, "--csv"]) == EXIT_OK
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert rows[0] == ["Corner", "Time (s)", "12 V input: voltage (V)", "12 V input: current (A)",
                       "Rail main (12 V main, eFuse): input current (A)",
                       "Rail logic (12 V logic, slew-controlled): input current (A)",
                       "Rail main (12 V main, eFuse): output (V)", "Rail logic (12 V logic, slew-controlled): output (V)"]
    for corner in result["corners"]:
        mine = [row for row in rows[1:] if row[0] == corner["title"]]
        series = corner["series"]
        assert [float(r[1]) for r in mine] == series["t"]
        assert [float(r[3]) for r in mine] == series["supplies"]["p12"]["i"]
        assert [float(r[7]) for r in mine] == series["rails"]["logic"]["v_out"]
