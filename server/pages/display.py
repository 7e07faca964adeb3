"""How results read on the pages: verdict words and styles, check rows, margins, input listings.

Provides
--------
VERDICT_STYLES, verdict_style(verdict)
    Every verdict's word, its CSS class and a shape, kept together in one place: a verdict
    is always shown in words as well as colour.
check_sense(check_id), check_margin(check, t_ambient)
    Which way a check's limit points, and a normalised margin (>= 1: inside the team limit).
check_rows(checks, t_ambient), worst_check(checks, t_ambient)
    The checks table of the rail page, and the check with the least margin.
input_sections(document)
    The rail document as sections of engineering-notation values, titled from
    ``server.analysis.words.FIELD_TITLES``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

from server.analysis.words import FIELD_TITLES
from server.units import format_quantity

__all__ = ["VerdictStyle", "VERDICT_STYLES", "VERDICT_ORDER", "verdict_style", "check_sense", "check_margin",
           "check_rows", "worst_check", "fmt", "input_sections", "BASIS_TEXT", "UNIT_KIND"]


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
}
# worst first: the order of counts and of "what needs attention"
VERDICT_ORDER: list[str | None] = ["fail", "marginal", None, "pass", "n/a"]

BASIS_TEXT = {
    "standard": "standard",
    "common practice": "common practice, not a standard",
    "physical limit": "physical limit",
}

# unit of a check (as the analysis names it) -> quantity kind of server.units
UNIT_KIND = {"V": "V", "A": "A", "degC": "degC", "ratio": "ratio", "s": "s", "K": "K", "W": "W", "J": "J",
             "F": "F"}


def verdict_style(verdict: str | None) -> VerdictStyle:
    return VERDICT_STYLES.get(verdict, VERDICT_STYLES[None])


fmt = format_quantity  # engineering notation of an SI value for display; '-' when there is none


@lru_cache(maxsize=1)
def _specs() -> dict[str, Any]:
    from server.analysis import CHECKS

    return {c.id: c for c in CHECKS}


def check_sense(check_id: str) -> str:
    """'at_least', 'at_most' or 'flag' (unknown checks read as flags)."""
    spec = _specs().get(check_id)
    return spec.sense if spec is not None else "flag"


def check_margin(check: dict[str, Any], t_ambient: float | None = None) -> float | None:
    """How far a check sits inside its limit, as a ratio: >= 1 within the team limit, < 1 beyond it.

    at_least: value / limit. at_most: limit / value, and for temperatures the allowed rise
    over the ambient against the actual rise. Flags and missing values have no margin (None).
    """
    value, limit = check.get("value"), check.get("limit")
    if value is None or limit is None:
        return None
    sense = check_sense(check["id"])
    if sense == "at_least":
        return value / limit if limit > 0 else None
    if sense == "at_most":
        if check.get("unit") == "degC":
            if t_ambient is None:
                return None
            rise = value - t_ambient
            return (limit - t_ambient) / rise if rise > 0 else None
        return limit / value if value > 0 else None
    return None


def _limit_text(check: dict[str, Any]) -> str:
    kind = UNIT_KIND.get(check.get("unit") or "", "ratio")
    if check.get("limit") is None:
        return "-"
    sign = {"at_least": "\u2265 ", "at_most": "\u2264 "}.get(check_sense(check["id"]), "")
    return sign + fmt(check["limit"], kind)


def check_rows(checks: list[dict[str, Any]], t_ambient: float | None = None) -> list[dict[str, Any]]:
    """The rows of the checks table, in the analysis' order."""
    rows = []
    for c in checks:
        kind = UNIT_KIND.get(c.get("unit") or "", "ratio")
        margin = check_margin(c, t_ambient)
        rows.append({
            "id": c["id"], "title": c.get("title", c["id"]), "verdict": c.get("verdict"),
            "value": fmt(c.get("value"), kind), "limit": _limit_text(c),
            "unit": {"ratio": "ratio", "degC": "\u00b0C"}.get(kind, c.get("unit") or ""),
            "basis": c.get("basis", ""), "basis_text": BASIS_TEXT.get(c.get("basis", ""), c.get("basis", "")),
            "detail": c.get("detail") or "", "corner": c.get("corner"),
            "margin": margin, "margin_text": "-" if margin is None else f"{margin:.3g}\u00d7",
        })
    return rows


def worst_check(checks: list[dict[str, Any]] | None, t_ambient: float | None = None) -> dict[str, Any] | None:
    """The check to look at first, as a row of the checks table: the worst verdict, then the smallest margin."""
    candidates = [c for c in checks or [] if c.get("verdict") != "n/a"]
    if not candidates:
        return None

    def key(c: dict[str, Any]) -> tuple[int, float]:
        m = check_margin(c, t_ambient)
        return (-verdict_style(c.get("verdict")).severity, m if m is not None and math.isfinite(m) else math.inf)

    return check_rows([min(candidates, key=key)], t_ambient)[0]


# The inputs listed on the rail page: (section path, the fields shown); titles and unit kinds
# come from FIELD_TITLES, the one table of words of the rail document.
_INPUTS: list[tuple[str, tuple[str, ...]]] = [
    ("supply", ("v_min", "v_nom", "v_max", "r_source", "l_source", "i_max", "uvlo", "uvlo_filter", "c_in")),
    ("path", ("r", "l")),
    ("load", ("c_nom", "c_tol", "esr", "model", "i_nom", "v_on")),
    ("switch", ("mode", "t_on", "dvdt", "i_limit", "i_limit_tol", "p_limit")),
    ("switch.timer", ("c", "c_tol", "i_charge", "i_charge_tol", "v_trip", "v_trip_tol", "after_fault", "retry_off")),
    ("environment", ("t_ambient",)),
    ("fet", ("name", "vds_max", "id_pulse_max", "rds_on", "rds_on_alpha", "tj_max", "rth_ja")),
]


def _section(document: dict[str, Any], path: str) -> dict[str, Any] | None:
    node: Any = document
    for key in path.split("."):
        node = node.get(key) if isinstance(node, dict) else None
    return node


def _items(section: dict[str, Any], path: str, keys: tuple[str, ...]) -> list[tuple[str, str]]:
    out = []
    for key in keys:
        value = section.get(key)
        if value is None:
            continue
        words = FIELD_TITLES[f"{path}.{key}"]
        out.append((words.title, str(value).replace("_", " ") if words.kind is None else fmt(value, words.kind)))
    return out


def input_sections(document: dict[str, Any]) -> list[dict[str, Any]]:
    """The inputs of a rail, grouped, titled and in engineering notation (fields left unset are left out)."""
    sections = []
    for path, keys in _INPUTS:
        section = _section(document, path)
        title = FIELD_TITLES[path].title
        if path == "switch.timer" and not section:
            sections.append({"title": title, "items": [(title, "none")]})
            continue
        sections.append({"title": title, "items": _items(section or {}, path, keys)})
    return sections
