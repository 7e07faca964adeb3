"""A CI gate over rail files: analyse every rail document under some paths and judge the lot.

Every ``*.json`` file under the given folders (recursively; hidden files and folders left
out) and every file given by name is read as a rail document or a bundle; each rail is
analysed on the sign-off basis (the tolerance corners and the worst-case search) with the
default team rules (common practice, not a standard) and the document's own overrides.

The run's exit code: 2 when any document is invalid (or no rail was found), else 1 when any
check fails, else 1 under ``strict`` when a marginal check is not accepted by the baseline,
else 0. A baseline (schema ``railsign.baseline/1``) accepts marginal checks by document
sha256 and check id; a failing check is never accepted.

Provides :func:`run_check` (-> :class:`CheckRun`), :func:`junit_xml`, :func:`load_baseline`
and :func:`baseline_dict`.
"""

from __future__ import annotations

import json
import time
import xml.etree.ElementTree as ET
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from server.analysis import AnalysisError, DocumentError, analyze_rail
from server.analysis.report import limit_text, margin_text, value_text
from server.bundle import BoardInfo, load_json, read_rail_file
from server.schemas.rail import document_sha256, normalize
from server.schemas.result import AnalysisResult, CheckRecord
from server.schemas.validation import DocumentInvalid, FieldError, parse_rail_document

__all__ = ["BASELINE_SCHEMA", "EXIT_OK", "EXIT_FAILING_CHECK", "EXIT_INVALID", "BaselineInvalid", "RailOutcome",
           "CheckRun", "rail_files", "run_check", "junit_xml", "load_baseline", "baseline_dict", "write_json"]

BASELINE_SCHEMA = "railsign.baseline/1"
EXIT_OK, EXIT_FAILING_CHECK, EXIT_INVALID = 0, 1, 2
_SEVERITY = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}

Accepted = set[tuple[str, str]]  # (document sha256, check id)


class BaselineInvalid(ValueError):
    """A baseline file that cannot be read."""


@dataclass
class RailOutcome:
    """One rail of the run: its analysis, or why its document is invalid."""

    file: str
    location: str = ""
    board: BoardInfo | None = None
    name: str | None = None
    sha256: str | None = None
    result: AnalysisResult | None = None
    errors: list[FieldError] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def invalid(self) -> bool:
        return self.result is None

    @property
    def where(self) -> str:
        """The file, and the board in a bundle, in words."""
        if self.board is None:
            return self.file
        return f"{self.file} [{self.board.name} {self.board.revision}]"

    def unaccepted_marginals(self, accepted: Accepted) -> list[CheckRecord]:
        if self.result is None:
            return []
        return [c for c in self.result.checks if c.verdict == "marginal" and (self.sha256, c.id) not in accepted]

    def worst_check(self) -> CheckRecord | None:
        """The check that reads worst: the worst verdict, then the smallest margin."""
        if self.result is None:
            return None
        applying = [c for c in self.result.checks if c.verdict != "n/a"]
        if not applying:
            return None
        return max(applying, key=lambda c: (_SEVERITY[c.verdict], -(c.margin if c.margin is not None else 1e300)))


def _check_words(c: CheckRecord) -> str:
    text = f"{c.title}: {value_text(c.value, c.unit)}"
    if c.limit is not None:
        text += f" against {limit_text(c.model_dump())}"
    if c.margin is not None:
        text += f", margin {margin_text(c.margin)}"
    if c.corner:
        text += f", at {c.corner}"
    return text


@dataclass
class CheckRun:
    """The outcome of a run: one entry per rail, and the baseline it was judged with."""

    rails: list[RailOutcome]
    accepted: Accepted
    strict: bool
    skipped: list[str] = field(default_factory=list)

    def counts(self) -> dict[str, int]:
        out = {"pass": 0, "marginal": 0, "fail": 0, "invalid": 0, "accepted": 0}
        for r in self.rails:
            if r.invalid:
                out["invalid"] += 1
                continue
            out[r.result.verdict if r.result.verdict in out else "pass"] += 1
            if r.result.verdict == "marginal" and not r.unaccepted_marginals(self.accepted):
                out["accepted"] += 1
        return out

    def exit_code(self) -> int:
        if not self.rails or any(r.invalid for r in self.rails):
            return EXIT_INVALID
        if any(r.result.verdict == "fail" for r in self.rails):
            return EXIT_FAILING_CHECK
        if self.strict and any(r.unaccepted_marginals(self.accepted) for r in self.rails):
            return EXIT_FAILING_CHECK
        return EXIT_OK

    def line(self, rail: RailOutcome) -> str:
        """One line for a rail: the verdict and the check that reads worst, in words."""
        if rail.invalid:
            what = "; ".join(e.text for e in rail.errors[:3])
            more = f" (and {len(rail.errors) - 3} more)" if len(rail.errors) > 3 else ""
            return f"{'INVALID':<9}{_suite_name(rail)}: {what}{more}"
        verdict = rail.result.verdict
        label = verdict.upper()
        note = ""
        if verdict == "marginal" and not rail.unaccepted_marginals(self.accepted):
            note = " (accepted by the baseline)"
        worst = rail.worst_check()
        words = _check_words(worst) if worst else "no check applies"
        lead = "worst" if verdict in ("fail", "marginal") else "least margin"
        return f"{label:<9}{rail.where}: {rail.name}{note}. {lead}: {words}"

    def summary(self) -> list[str]:
        n = self.counts()
        files = len({r.file for r in self.rails})
        marginal = f"{n['marginal']} marginal"
        if n["accepted"]:
            marginal += f" ({n['accepted']} accepted by the baseline)"
        lines = [f"{len(self.rails)} rails in {files} files: {n['pass']} pass, {marginal}, {n['fail']} fail, "
                 f"{n['invalid']} invalid"]
        if self.skipped:
            lines.append(f"left out (baseline files, not rail documents): {', '.join(self.skipped)}")
        code = self.exit_code()
        if not self.rails:
            reason = "no rail document found"
        elif n["invalid"]:
            reason = "a document is invalid"
        elif n["fail"]:
            reason = "a check fails"
        elif code:
            reason = "a marginal check is not accepted by the baseline (--strict)"
        elif n["marginal"] > n["accepted"]:
            reason = "no check fails; marginal checks pass without --strict"
        else:
            reason = "no check fails"
        lines.append(f"exit {code}: {reason}")
        return lines


# --- finding and reading the files --------------------------------------------------------------------


def _hidden(path: Path, root: Path) -> bool:
    return any(part.startswith(".") for part in path.relative_to(root).parts)


def rail_files(paths: Iterable[str | Path]) -> tuple[list[Path], list[str]]:
    """The files to read: each file given, and every ``*.json`` under each folder, sorted; and the paths missing."""
    files: list[Path] = []
    missing: list[str] = []
    for raw in paths:
        path = Path(raw)
        if path.is_dir():
            files += sorted(p for p in path.rglob("*.json") if p.is_file() and not _hidden(p, path))
        elif path.is_file():
            files.append(path)
        else:
            missing.append(str(raw))
    return list(dict.fromkeys(files)), missing


def _analyse(outcome: RailOutcome, document: Any, location: str) -> None:
    try:
        doc = normalize(parse_rail_document(document, location))
    except DocumentInvalid as exc:
        outcome.errors = exc.errors
        return
    outcome.name, outcome.sha256 = doc["name"], document_sha256(doc)
    start = time.perf_counter()
    try:
        result = analyze_rail(doc, corners=True, waveforms=False, headroom=False)
    except (AnalysisError, DocumentError) as exc:  # counted with the invalid documents: no verdict exists
        outcome.errors = [FieldError(getattr(exc, "field", ""), f"cannot be analysed: {exc}")]
        return
    finally:
        outcome.seconds = time.perf_counter() - start
    outcome.result = AnalysisResult.model_validate(result)


def _outcomes(path: Path, skipped: list[str]) -> list[RailOutcome]:
    name = str(path)
    try:
        data = load_json(path)
        if isinstance(data, dict) and data.get("schema") == BASELINE_SCHEMA:
            skipped.append(name)
            return []
        file = read_rail_file(data)
    except DocumentInvalid as exc:
        return [RailOutcome(file=name, errors=exc.errors)]
    out = []
    for entry in file.rails:
        outcome = RailOutcome(file=name, location=entry.location, board=entry.board, name=entry.name)
        _analyse(outcome, entry.document, entry.location)
        out.append(outcome)
    return out


def run_check(paths: Iterable[str | Path], *, strict: bool = False, accepted: Accepted = frozenset(),
              on_rail: Callable[[CheckRun, RailOutcome], None] | None = None) -> CheckRun:
    """Analyse every rail under ``paths`` and judge them (see the module's doc for the rules).

    ``on_rail`` is called as each rail is done (to print its line while the run goes on).
    """
    files, missing = rail_files(paths)
    run = CheckRun(rails=[], accepted=set(accepted), strict=strict)
    for name in missing:
        outcome = RailOutcome(file=name, errors=[FieldError("", "no such file or folder")])
        run.rails.append(outcome)
        if on_rail:
            on_rail(run, outcome)
    for path in files:
        for outcome in _outcomes(path, run.skipped):
            run.rails.append(outcome)
            if on_rail:
                on_rail(run, outcome)
    return run


# --- baseline ---------------------------------------------------------------------------------------------


def load_baseline(path: str | Path) -> Accepted:
    """The (sha256, check id) pairs a baseline file accepts."""
    try:
        data = load_json(path)
    except (FileNotFoundError, DocumentInvalid) as exc:
        raise BaselineInvalid(f"baseline {path}: {exc}") from None
    if not isinstance(data, dict) or data.get("schema") != BASELINE_SCHEMA or not isinstance(data.get("accepted"),
                                                                                              list):
        raise BaselineInvalid(f"baseline {path}: expected an object with schema '{BASELINE_SCHEMA}' and a list "
                              "'accepted'")
    out: Accepted = set()
    for k, item in enumerate(data["accepted"]):
        if not (isinstance(item, dict) and isinstance(item.get("sha256"), str) and isinstance(item.get("check"), str)):
            raise BaselineInvalid(f"baseline {path}: accepted[{k}] needs 'sha256' and 'check'")
        out.add((item["sha256"], item["check"]))
    return out


def baseline_dict(run: CheckRun) -> dict[str, Any]:
    """A baseline accepting every marginal check of the run (never a failing one), sorted for stable diffs."""
    items = []
    for rail in run.rails:
        if rail.result is None:
            continue
        for c in rail.result.checks:
            if c.verdict == "marginal":
                items.append({"sha256": rail.sha256, "check": c.id, "rail": rail.name, "file": rail.file,
                              "title": c.title, "margin": c.margin})
    items.sort(key=lambda x: (x["file"], x["rail"] or "", x["check"]))
    return {"schema": BASELINE_SCHEMA,
            "note": "Marginal checks accepted by document sha256 and check id; a changed document or a failing "
                    "check is not covered.",
            "accepted": items}


# --- JUnit XML ---------------------------------------------------------------------------------------------


def _suite_name(rail: RailOutcome) -> str:
    return f"{rail.where}: {rail.name}" if rail.name else rail.where


def _case_text(c: CheckRecord) -> str:
    return f"{_check_words(c)}.\nverdict: {c.verdict}; basis: {c.basis}\n{c.detail}"


def _invalid_suite(rail: RailOutcome) -> ET.Element:
    suite = ET.Element("testsuite", name=_suite_name(rail), tests="1", failures="0", errors="1", skipped="0",
                       time="0")
    case = ET.SubElement(suite, "testcase", name="valid rail document", classname=_suite_name(rail), time="0")
    lines = "\n".join(e.text for e in rail.errors)
    ET.SubElement(case, "error", message="invalid rail document", type="invalid").text = lines
    return suite


def _rail_suite(rail: RailOutcome, run: CheckRun) -> ET.Element:
    result = rail.result
    unaccepted = {c.id for c in rail.unaccepted_marginals(run.accepted)}
    suite = ET.Element("testsuite", name=_suite_name(rail))
    props = ET.SubElement(suite, "properties")
    for key, value in (("verdict", result.verdict), ("sha256", rail.sha256), ("basis", result.basis),
                       ("engine_version", result.engine_version)):
        ET.SubElement(props, "property", name=key, value=str(value))
    failures = skipped = 0
    for c in result.checks:
        case = ET.SubElement(suite, "testcase", name=c.title, classname=_suite_name(rail), time="0")
        if c.verdict == "fail" or (run.strict and c.id in unaccepted):
            failures += 1
            ET.SubElement(case, "failure", message=f"{c.verdict}: {_check_words(c)}", type=c.verdict).text = \
                _case_text(c)
        elif c.verdict == "n/a":
            skipped += 1
            ET.SubElement(case, "skipped", message=f"does not apply: {c.detail}")
        else:
            note = " (accepted by the baseline)" if c.verdict == "marginal" and c.id not in unaccepted else ""
            ET.SubElement(case, "system-out").text = _case_text(c) + note
    suite.set("tests", str(len(result.checks)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped))
    suite.set("time", f"{rail.seconds:.3f}")
    return suite


def junit_xml(run: CheckRun) -> str:
    """A JUnit XML report: a test suite per rail, a test case per check (an invalid document: one error).

    Failing checks are failures, and under ``strict`` marginal checks the baseline does not
    accept; checks that do not apply are skipped.
    """
    root = ET.Element("testsuites", name="railsign check")
    totals = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
    seconds = 0.0
    for rail in run.rails:
        suite = _invalid_suite(rail) if rail.invalid else _rail_suite(rail, run)
        root.append(suite)
        for key in totals:
            totals[key] += int(suite.get(key))
        seconds += rail.seconds
    for key, value in totals.items():
        root.set(key, str(value))
    root.set("time", f"{seconds:.3f}")
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def write_json(path: str | Path, data: dict[str, Any]) -> None:
    """Write a baseline (or any JSON object) as indented UTF-8 text."""
    Path(path).write_text(json.dumps(data, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
