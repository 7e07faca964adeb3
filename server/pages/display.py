"""How results read on the pages: verdict words and styles, check rows, input listings.

Provides
--------
VERDICT_STYLES, verdict_style(verdict)
    Every verdict's word, its CSS class and a shape, kept together in one place: a verdict
    is always shown in words as well as colour.
check_records(checks), check_row(check), check_rows(checks), worst_check(checks), check_text(check)
    A check record of the analysis (:class:`server.schemas.result.CheckRecord`) as the pages
    show it. Everything comes from the record (value, limit with its direction, normalised
    margin, nominal reading, worst case in words) through the same formatters as the
    command-line report: nothing is recomputed. ``check_records`` reads stored check dicts
    of the current engine into records.
input_sections(document)
    The rail document as sections of engineering-notation values, titled from
    ``server.analysis.words.FIELD_TITLES``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from server.analysis.report import bank_view, limit_text, margin_text, value_text  # noqa: F401 (bank_view: for the pages)
from server.schemas.result import AnalysisResult, CheckRecord
from server.units import format_quantity
from server.services.rails import input_sections  # the inputs in words (the report reads them too)

__all__ = ["VerdictStyle", "VERDICT_STYLES", "VERDICT_ORDER", "verdict_style", "check_records", "check_row",
           "check_rows", "worst_check", "check_text", "fmt", "input_sections", "BASIS_TEXT", "UNIT_TEXT",
           "read_result", "bank_view"]


@dataclass(frozen=True)
class VerdictStyle:
    word: str        # the text shown, always
    css: str         # the colour class
    shape: str       # a second cue besides colour
    severity: int    # sort order: higher is worse


VERDICT_STYLES: dict[str | None, VerdictStyle] = {
    "fail": VerdictStyle("fail", "verdict-fail", "\u2716", 4),
    "marginal": VerdictStyle("marginal", "verdict-marginal", "\u25b2", 3),
    None: VerdictStyle("not analysed", "verdict-none", "\u25cb", 2),
    "pass": VerdictStyle("pass", "verdict-pass", "\u2714", 1),
    "n/a": VerdictStyle("n/a", "verdict-na", "\u2013", 0),
    # a result of an older engine version, not yet read by the current one
    "outdated": VerdictStyle("result of an older engine", "verdict-none", "\u25cc", 2),
}
# worst first: the order of counts and of "what needs attention"
VERDICT_ORDER: list[str | None] = ["fail", "marginal", None, "pass", "n/a"]

BASIS_TEXT = {
    "standard": "standard",
    "common practice": "common practice, not a standard",
    "physical limit": "physical limit",
}
# unit of a check as people read it
UNIT_TEXT = {"ratio": "ratio", "degC": "\u00b0C"}
FOUND_BY_TEXT = {"corner": "tolerance corner", "search": "search inside the tolerance box", "nominal": "nominal point"}


def verdict_style(verdict: str | None) -> VerdictStyle:
    return VERDICT_STYLES.get(verdict, VERDICT_STYLES[None])


fmt = format_quantity  # engineering notation of an SI value for display; '-' when there is none


def read_result(raw: dict[str, Any]) -> tuple[AnalysisResult, dict[str, Any] | None]:
    """A stored result of the current engine as the typed record, and its capacitor bank section as stored
    (``result["bank"]``: the bank's C(v), its groups and notes; None without a bank), never recomputed."""
    return AnalysisResult.model_validate(raw), raw.get("bank")


def check_records(checks: list[dict[str, Any]] | None) -> list[CheckRecord]:
    """Stored check dicts (of a current-engine result) as typed records; a renamed key fails here."""
    return [CheckRecord.model_validate(c) for c in checks or []]


def check_row(c: CheckRecord) -> dict[str, Any]:
    """One check record as the pages show it (texts from the record, nothing recomputed)."""
    return {
        "id": c.id, "title": c.title, "verdict": c.verdict,
        "value": value_text(c.value, c.unit), "limit": limit_text(c.model_dump(include={"limit", "direction", "unit"})),
        "unit": UNIT_TEXT.get(c.unit, c.unit), "margin": c.margin, "margin_text": margin_text(c.margin),
        "basis": c.basis, "basis_text": BASIS_TEXT.get(c.basis, c.basis),
        "detail": c.detail, "corner": c.corner, "found_by": c.found_by,
        "found_by_text": FOUND_BY_TEXT.get(c.found_by or "", ""),
        "nominal_value": value_text(c.nominal.value, c.unit), "nominal_verdict": c.nominal.verdict,
        "t_start": value_text(c.t_start, "degC") if c.t_start is not None else None,
        "rds_on": fmt(c.rds_on, "ohm") if getattr(c, "rds_on", None) is not None else None,
    }


def check_rows(checks: list[CheckRecord]) -> list[dict[str, Any]]:
    """The rows of the checks table, in the analysis' order."""
    return [check_row(c) for c in checks]


def check_text(c: CheckRecord) -> str:
    """A check in one line: "title: value (limit ≥ 1.5)"."""
    row = check_row(c)
    return f"{row['title']}: {row['value']} (limit {row['limit']})"


def worst_check(checks: list[CheckRecord]) -> dict[str, Any] | None:
    """The check to look at first, as a row of the checks table: the worst verdict, then the
    smallest normalised margin of the record."""
    candidates = [c for c in checks if c.verdict != "n/a"]
    if not candidates:
        return None

    def key(c: CheckRecord) -> tuple[int, float]:
        m = c.margin
        return (-verdict_style(c.verdict).severity, m if m is not None and math.isfinite(m) else math.inf)

    return check_row(min(candidates, key=key))
