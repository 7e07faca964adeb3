"""The history of a rail: its revisions, a field-level diff between any two, and their plots overlaid."""

from __future__ import annotations

import json
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.analysis.words import field_title, field_words
from server.auth import CurrentActor
from server.db import SessionDep
from server.pages.display import fmt
from server.pages.plots import soa_overlay_figure, startup_overlay_figure
from server.pages.rendering import page_context, render
from server.schemas.result import AnalysisResult
from server.services import overview, results
from server.services.access import Actor
from server.services.rails import diff_revisions, get_rail, get_revision, list_revisions

router = APIRouter(include_in_schema=False)
REVISIONS_SHOWN = 200


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


def history_context(session: Session, actor: Actor, rail_id: int, from_n: int | None = None,
                    to_n: int | None = None) -> dict[str, Any]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    revisions, head_n = list_revisions(session=session, actor=actor, rail_id=rail_id, limit=REVISIONS_SHOWN)
    verdicts = overview.verdicts_by_sha(session, [r.sha256 for r in revisions])
    to_n = to_n if to_n is not None else head_n
    from_n = from_n if from_n is not None else max(1, to_n - 1)
    ctx: dict[str, Any] = {"rail": rail, "board": rail.board, "product": rail.board.product,
                           "revisions": [{"rev": r, "verdict": verdicts.get(r.sha256)} for r in revisions],
                           "head_n": head_n, "from_n": from_n, "to_n": to_n, "changes": [], "figures": {},
                           "missing": []}
    old = get_revision(session=session, actor=actor, rail_id=rail_id, n=from_n)
    new = get_revision(session=session, actor=actor, rail_id=rail_id, n=to_n)
    diff = diff_revisions(session=session, actor=actor, rail_id=rail_id, from_n=from_n, to_n=to_n)
    ctx["changes"] = [{"field": c["field"], "label": field_title(c["field"]), "change": c["change"],
                       "old": diff_value(c["field"], c["old"]), "new": diff_value(c["field"], c["new"])}
                      for c in diff["changes"]]
    ctx["part_changed"] = old.part_revision_id != new.part_revision_id
    pairs = []
    for rev in (old, new) if from_n != to_n else (new,):
        row = results.latest_result(session, sha256=rev.sha256)
        if row is None:
            ctx["missing"].append(rev.n)
        else:
            pairs.append((f"revision {rev.n}", AnalysisResult.model_validate(row.result), rev.document))
    if pairs:
        ctx["figures"] = {
            "startup": startup_overlay_figure([(label, res) for label, res, _ in pairs], new.document,
                                              pairs[-1][1].rules),
            "soa": soa_overlay_figure(pairs),
        }
    return ctx


@router.get("/rails/{rail_id}/history", response_class=HTMLResponse)
def history_page(rail_id: int, request: Request, session: SessionDep, actor: CurrentActor,
                 from_n: int | None = None, to_n: int | None = None) -> HTMLResponse:
    ctx = history_context(session, actor, rail_id, from_n, to_n)
    return render(request, "history.html", page_context(request, actor, **ctx))
