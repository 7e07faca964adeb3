"""The history of a rail: its revisions, any old revision opened in full, and two revisions compared.

- ``/rails/{id}/history``: the revisions (each a link), the changes of the inputs between two
  of them, their check records side by side (value, limit, margin, verdict; what changed
  highlighted), and their plots overlaid, every trace named in the legend.
- ``/rails/{id}/revisions/{n}``: one revision as it was: its inputs, the result of its time
  (the current engine's; else a result of an older engine, shown as outdated, in the shape
  that engine stored), its plots, and the approvals and waivers given for it.

Every check is rendered from its stored record by :func:`server.pages.display.check_row`; a
record of an older engine that the current record type no longer reads is shown with the
same formatters from its own fields. Nothing is recomputed.
"""

from __future__ import annotations

import json
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from pydantic import ValidationError
from sqlalchemy.orm import Session

from server.analysis.report import limit_text, margin_text, value_text
from server.analysis.words import field_title, field_words
from server.auth import CurrentActor
from server.db import SessionDep
from server.pages.display import BASIS_TEXT, check_row, fmt, input_sections, read_result
from server.pages.plots import soa_figure, soa_overlay_figure, startup_figure, startup_overlay_figure
from server.pages.rendering import page_context, render
from server.schemas.result import CheckRecord
from server.services import overview, results
from server.services.access import Actor
from server.services.rails import diff_revisions, get_rail, get_revision, list_revisions, part_status
from server.services.results import Reading
from server.services.signoff import approval_dict, list_approvals, list_waivers, waiver_dict

router = APIRouter(include_in_schema=False)
REVISIONS_SHOWN = 200
COMPARED = ("verdict", "value", "limit", "margin_text")


def diff_value(path: str, value: Any) -> str:
    """A document value as the diff shows it: engineering notation where the field has a unit."""
    if value is None:
        return "(none)"
    words = field_words(path)
    kind = words.kind if words is not None else None
    if kind is not None and isinstance(value, (int, float)) and not isinstance(value, bool):
        return fmt(float(value), kind, 4)
    if isinstance(value, (list, dict)):
        text = json.dumps(value, separators=(", ", ": "))
        return text if len(text) <= 160 else text[:157] + "..."
    return str(value)


def stored_check_row(c: dict[str, Any]) -> dict[str, Any]:
    """A stored check record as the pages show it: through the record type when it reads it (every check of
    the current engine), else with the same formatters from the fields an older engine stored."""
    try:
        return check_row(CheckRecord.model_validate(c))
    except ValidationError:
        unit = str(c.get("unit") or "")
        margin = c.get("margin") if isinstance(c.get("margin"), (int, float)) else None
        return {"id": str(c.get("id")), "title": str(c.get("title") or c.get("id")), "verdict": c.get("verdict"),
                "value": value_text(c.get("value"), unit) if isinstance(c.get("value"), (int, float)) else "-",
                "limit": limit_text(c) if isinstance(c.get("limit"), (int, float)) else "-",
                "margin": margin, "margin_text": margin_text(margin), "unit": unit,
                "basis": c.get("basis"), "basis_text": BASIS_TEXT.get(c.get("basis") or "", c.get("basis") or ""),
                "detail": c.get("detail") or "", "corner": c.get("corner"), "found_by": None, "found_by_text": "",
                "nominal_value": "-", "nominal_verdict": None}


def _reading_dict(now: Reading | None) -> dict[str, Any] | None:
    """The result of a revision as the history pages read it: checks as rows, and the typed result when it is
    the current engine's (for the plots)."""
    if now is None:
        return None
    typed = None
    if not now.outdated:
        typed = read_result(now.row.result)[0]
    checks = [stored_check_row(c) for c in now.row.result.get("checks", [])]
    return {"id": now.row.id, "engine_version": now.engine_version, "current_engine": now.current_engine,
            "outdated": now.outdated, "verdict": now.row.verdict, "created_at": now.row.created_at,
            "signoff": bool(now.row.result.get("signoff")), "checks": checks, "typed": typed}


def _merge_checks(old: dict[str, Any] | None, new: dict[str, Any] | None) -> list[dict[str, Any]]:
    """The checks of two readings side by side, in the newer one's order, each field marked when it differs."""
    a = {c["id"]: c for c in (old or {}).get("checks", [])}
    b = {c["id"]: c for c in (new or {}).get("checks", [])}
    rows = []
    for cid in list(b) + [k for k in a if k not in b]:
        left, right = a.get(cid), b.get(cid)
        changed = {f for f in COMPARED if left is None or right is None or left[f] != right[f]}
        rows.append({"id": cid, "title": (right or left)["title"], "old": left, "new": right, "changed": changed,
                     "any_changed": bool(changed)})
    return rows


def _revision_links(session: Session, revisions: list) -> list[dict[str, Any]]:
    verdicts = overview.verdicts_by_sha(session, [r.sha256 for r in revisions])
    outdated = results.outdated_verdicts(session, [r.sha256 for r in revisions if r.sha256 not in verdicts])
    return [{"rev": r, "verdict": verdicts.get(r.sha256), "outdated": outdated.get(r.sha256)
             if r.sha256 not in verdicts else None} for r in revisions]


def history_context(session: Session, actor: Actor, rail_id: int, from_n: int | None = None,
                    to_n: int | None = None) -> dict[str, Any]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    revisions, head_n = list_revisions(session=session, actor=actor, rail_id=rail_id, limit=REVISIONS_SHOWN)
    to_n = to_n if to_n is not None else head_n
    from_n = from_n if from_n is not None else max(1, to_n - 1)
    ctx: dict[str, Any] = {"rail": rail, "board": rail.board, "product": rail.board.product,
                           "revisions": _revision_links(session, revisions),
                           "head_n": head_n, "from_n": from_n, "to_n": to_n, "changes": [], "figures": {},
                           "missing": []}
    old = get_revision(session=session, actor=actor, rail_id=rail_id, n=from_n)
    new = get_revision(session=session, actor=actor, rail_id=rail_id, n=to_n)
    diff = diff_revisions(session=session, actor=actor, rail_id=rail_id, from_n=from_n, to_n=to_n)
    ctx["changes"] = [{"field": c["field"], "label": field_title(c["field"]), "change": c["change"],
                       "old": diff_value(c["field"], c["old"]), "new": diff_value(c["field"], c["new"])}
                      for c in diff["changes"]]
    ctx["part_changed"] = old.part_revision_id != new.part_revision_id
    readings = {rev.n: _reading_dict(results.reading(session, sha256=rev.sha256)) for rev in (old, new)}
    ctx["old_result"], ctx["new_result"] = readings[old.n], readings[new.n]
    ctx["check_rows"] = _merge_checks(readings[old.n], readings[new.n]) if from_n != to_n else []
    pairs = []
    for rev in (old, new) if from_n != to_n else (new,):
        reading = readings[rev.n]
        if reading is None or reading["typed"] is None:
            ctx["missing"].append(rev.n)
        else:
            pairs.append((f"revision {rev.n}", reading["typed"], rev.document))
    if pairs:
        ctx["figures"] = {
            "startup": startup_overlay_figure([(label, res) for label, res, _ in pairs], new.document,
                                              pairs[-1][1].rules),
            "soa": soa_overlay_figure(pairs),
        }
    return ctx


def revision_context(session: Session, actor: Actor, rail_id: int, n: int) -> dict[str, Any]:
    """One revision in full: inputs, the result of its time, plots, and the approvals and waivers given for it."""
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    rev = get_revision(session=session, actor=actor, rail_id=rail_id, n=n)
    reading = _reading_dict(results.reading(session, sha256=rev.sha256))
    approvals, head_n, current = list_approvals(session=session, actor=actor, rail_id=rail_id)
    waivers, _, _ = list_waivers(session=session, actor=actor, rail_id=rail_id)
    figures = {}
    if reading is not None and reading["typed"] is not None:
        figures = {"startup": startup_figure(reading["typed"], rev.document),
                   "soa": soa_figure(reading["typed"], rev.document)}
    return {"rail": rail, "board": rail.board, "product": rail.board.product, "rev": rev, "head_n": head_n,
            "document": rev.document, "inputs": input_sections(rev.document), "part": part_status(session, rev),
            "reading": reading, "figures": figures,
            "approvals": [approval_dict(a, current, head_n) for a in approvals if a.revision_n == n],
            "waivers": [waiver_dict(w, head_n, current) for w in waivers if w.revision_n == n],
            "rules_overridden": rev.document.get("rules") or {}}


@router.get("/rails/{rail_id}/history", response_class=HTMLResponse)
def history_page(rail_id: int, request: Request, session: SessionDep, actor: CurrentActor,
                 from_n: int | None = None, to_n: int | None = None) -> HTMLResponse:
    ctx = history_context(session, actor, rail_id, from_n, to_n)
    return render(request, "history.html", page_context(request, actor, **ctx))


@router.get("/rails/{rail_id}/revisions/{n}", response_class=HTMLResponse)
def revision_page(rail_id: int, n: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    ctx = revision_context(session, actor, rail_id, n)
    return render(request, "revision.html", page_context(request, actor, **ctx))
