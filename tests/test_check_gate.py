"""`railsign check`: the CI gate over a folder of rail files (exit codes, lines, JUnit XML, baseline)."""

from __future__ import annotations

import copy
import json
import xml.etree.ElementTree as ET

import pytest
from junitparser import Error, Failure, JUnitXml, Skipped

from railsign import gate
from server.__main__ import main
from server.demo import BOARDS, FETS

# Invented demo rails with known sign-off verdicts (tests/test_demo.py shows every verdict among them).
PASSING, MARGINAL, FAILING = "HEATER_24V", "SOM_12V", "PSE_PORT_24V"


def demo_doc(name: str) -> dict:
    for _, _, rails in BOARDS:
        for doc, part in rails:
            if doc["name"] == name:
                return {**copy.deepcopy(doc), "fet": copy.deepcopy(FETS[part])}
    raise KeyError(name)


def _write(path, data) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data))


@pytest.fixture
def folder(tmp_path):
    """One passing, one marginal, one failing and one invalid rail file (two in a subfolder)."""
    root = tmp_path / "rails"
    _write(root / "heater.json", demo_doc(PASSING))
    _write(root / "compute" / "som.json", demo_doc(MARGINAL))
    _write(root / "compute" / "fan.json", demo_doc(FAILING))
    bad = demo_doc(PASSING)
    bad["name"] = "HEATER_BAD"
    bad["load"]["c_nom"] = "-10 uF"
    _write(root / "broken.json", bad)
    _write(root / ".drafts" / "unfinished.json", {"name": "not read: a hidden folder"})
    (root / "notes.txt").write_text("not a rail file")
    return root


def _run(capsys, *args) -> tuple[int, list[str]]:
    code = main(["check", *map(str, args)])
    return code, capsys.readouterr().out.splitlines()


def test_a_folder_with_an_invalid_file_exits_2_and_the_junit_report_reads(folder, tmp_path, capsys):
    report = tmp_path / "junit.xml"
    code, lines = _run(capsys, folder, "--junit", report)
    assert code == gate.EXIT_INVALID
    by_file = {line.split(":")[0].split()[-1]: line for line in lines if ".json" in line.split(":")[0]}
    assert by_file[str(folder / "broken.json")].startswith("INVALID")
    assert "HEATER_BAD: Load capacitance (load.c_nom): must be above 0 F" in by_file[str(folder / "broken.json")]
    assert by_file[str(folder / "heater.json")].startswith("PASS")
    assert by_file[str(folder / "compute" / "som.json")].startswith("MARGINAL")
    assert "worst: Junction temperature in retry" in by_file[str(folder / "compute" / "som.json")]
    fan = by_file[str(folder / "compute" / "fan.json")]
    assert fan.startswith("FAIL") and "worst: Junction temperature in retry (pulse train)" in fan
    assert "4 rails in 4 files: 1 pass, 1 marginal, 1 fail, 1 invalid" in lines
    assert lines[-1] == "exit 2: a document is invalid"

    xml = JUnitXml.fromfile(str(report))  # a JUnit parser reads it
    suites = {s.name: s for s in xml}
    assert len(suites) == 4
    invalid = suites[f"{folder / 'broken.json'}: HEATER_BAD"]
    (case,) = list(invalid)
    assert [type(r) for r in case.result] == [Error] and "load.c_nom" in case.result[0].text
    som = suites[f"{folder / 'compute' / 'som.json'}: SOM_12V"]
    assert som.failures == 0 and som.tests == 17  # marginal passes without --strict (17 checks)
    fan_suite = suites[f"{folder / 'compute' / 'fan.json'}: PSE_PORT_24V"]
    failed = [c.name for c in fan_suite if any(isinstance(r, Failure) for r in c.result)]
    assert failed == ["Junction temperature in retry (pulse train)"]
    heater = suites[f"{folder / 'heater.json'}: HEATER_24V"]  # a hard switch: no limit, timer or retry
    skipped = [c.name for c in heater if any(isinstance(r, Skipped) for r in c.result)]
    assert len(skipped) == heater.skipped > 0
    assert xml.tests == sum(s.tests for s in xml) == 17 * 3 + 1
    assert xml.failures == 1 and xml.errors == 1


def test_the_junit_report_follows_the_junit_schema_structure(folder, tmp_path, capsys):
    # The element and attribute structure of the JUnit XML schema (junit-10.xsd as Jenkins and
    # most CI systems read it): testsuites > testsuite > properties?, testcase*; a testcase
    # holds at most one of skipped / error / failure, then system-out.
    report = tmp_path / "junit.xml"
    _run(capsys, folder, "--junit", report, "--strict")
    root = ET.parse(report).getroot()
    assert root.tag == "testsuites"
    for suite in root:
        assert suite.tag == "testsuite"
        for attr in ("name", "tests", "failures", "errors", "skipped"):
            assert attr in suite.attrib
        float(suite.get("time"))
        tags = [child.tag for child in suite]
        assert set(tags) <= {"properties", "testcase"} and "properties" not in tags[1:]
        assert int(suite.get("tests")) == tags.count("testcase")
        outcomes = {"failure": 0, "error": 0, "skipped": 0}
        for case in suite.iter("testcase"):
            assert case.get("name") and case.get("classname")
            kinds = [c.tag for c in case if c.tag in outcomes]
            assert len(kinds) <= 1
            for kind in kinds:
                outcomes[kind] += 1
            assert all(c.tag in {"failure", "error", "skipped", "system-out"} for c in case)
        assert (outcomes["failure"], outcomes["error"], outcomes["skipped"]) == \
            (int(suite.get("failures")), int(suite.get("errors")), int(suite.get("skipped")))


def test_exit_codes_fail_then_marginal_under_strict(folder, tmp_path, capsys):
    (folder / "broken.json").unlink()
    code, lines = _run(capsys, folder)
    assert code == gate.EXIT_FAILING_CHECK and lines[-1] == "exit 1: a check fails"
    (folder / "compute" / "fan.json").unlink()
    code, lines = _run(capsys, folder)
    assert code == gate.EXIT_OK
    assert lines[-1] == "exit 0: no check fails; marginal checks pass without --strict"
    report = tmp_path / "strict.xml"
    code, lines = _run(capsys, folder, "--strict", "--junit", report)
    assert code == gate.EXIT_FAILING_CHECK
    assert lines[-1] == "exit 1: a marginal check is not accepted by the baseline (--strict)"
    som = next(s for s in JUnitXml.fromfile(str(report)) if s.name.endswith("SOM_12V"))
    failures = [r for c in som for r in c.result if isinstance(r, Failure)]
    assert [f.type for f in failures] == ["marginal"]
    (folder / "compute" / "som.json").unlink()
    assert _run(capsys, folder, "--strict")[0] == gate.EXIT_OK


def test_a_baseline_accepts_marginal_checks_of_that_document_only_and_never_a_fail(folder, tmp_path, capsys):
    (folder / "broken.json").unlink()
    baseline = tmp_path / "accepted.json"
    code, lines = _run(capsys, folder, "--strict", "--write-baseline", baseline)
    assert code == gate.EXIT_FAILING_CHECK  # the failing rail: fails cannot be baselined
    written = json.loads(baseline.read_text())
    assert written["schema"] == gate.BASELINE_SCHEMA
    assert [(a["rail"], a["check"]) for a in written["accepted"]] == [("SOM_12V", "retry_tj")]
    # a failing check written into the baseline by hand is still a failure
    fan = gate.run_check([folder / "compute" / "fan.json"]).rails[0]
    written["accepted"].append({"sha256": fan.sha256, "check": "supply_dip"})
    baseline.write_text(json.dumps(written))
    assert _run(capsys, folder, "--strict", "--baseline", baseline)[0] == gate.EXIT_FAILING_CHECK

    (folder / "compute" / "fan.json").unlink()
    code, lines = _run(capsys, folder, "--strict", "--baseline", baseline)
    assert code == gate.EXIT_OK
    assert any(line.startswith("MARGINAL") and "(accepted by the baseline)" in line for line in lines)
    assert "2 rails in 2 files: 1 pass, 1 marginal (1 accepted by the baseline), 0 fail, 0 invalid" in lines
    # the baseline covers that document only: any change to it needs a new acceptance
    changed = demo_doc(MARGINAL)
    changed["load"]["esr"] = 0.011
    _write(folder / "compute" / "som.json", changed)
    assert _run(capsys, folder, "--strict", "--baseline", baseline)[0] == gate.EXIT_FAILING_CHECK
    # the baseline file may live among the rail files: it is left out, and said so
    (folder / "accepted.json").write_text(baseline.read_text())
    code, lines = _run(capsys, folder)
    assert code == gate.EXIT_OK
    assert any(line.startswith("left out (baseline files") and "accepted.json" in line for line in lines)


def test_a_bundle_counts_each_rail_and_bad_paths_exit_2(tmp_path, capsys):
    entries = [{"document": demo_doc(n), "part": None, "exported_from": None} for n in (PASSING, MARGINAL)]
    bundle = {"schema": "railsign.bundle/2", "product": {"name": "Gate test"},
              "boards": [{"name": "Main", "revision": "A", "rails": entries}]}
    _write(tmp_path / "board.json", bundle)
    code, lines = _run(capsys, tmp_path / "board.json")
    assert code == gate.EXIT_OK
    assert sum(line.startswith(("PASS", "MARGINAL")) and "[Main A]" in line for line in lines) == 2
    assert "2 rails in 1 files: 1 pass, 1 marginal, 0 fail, 0 invalid" in lines
    code, quiet = _run(capsys, tmp_path / "board.json", "--quiet")
    assert [line.split()[0] for line in quiet[:-2]] == ["MARGINAL"]  # only what does not pass, then the summary
    code, lines = _run(capsys, tmp_path / "board.json", tmp_path / "missing")
    assert code == gate.EXIT_INVALID and any("missing: document: no such file or folder" in x for x in lines)
    (tmp_path / "empty").mkdir()
    code, lines = _run(capsys, tmp_path / "empty")
    assert code == gate.EXIT_INVALID and lines[-1] == "exit 2: no rail document found"


def test_a_bad_baseline_file_exits_2(folder, tmp_path, capsys):
    bad = tmp_path / "baseline.json"
    bad.write_text(json.dumps({"accepted": []}))
    assert main(["check", str(folder), "--baseline", str(bad)]) == gate.EXIT_INVALID
    assert "railsign.baseline/1" in capsys.readouterr().err
