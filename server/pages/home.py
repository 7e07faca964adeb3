"""The home page and the product overview.

The home page is per role, above the user's products: a reviewer's queue (the revisions
awaiting them, oldest first, and the team queue nobody is assigned to), a designer's own rails
needing action, a manager's risk summary (the risk view's counts and its worst rails); then
the rails an engine change moved.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages import signoff_view
from server.pages.display import VERDICT_ORDER, check_records, worst_check
from server.pages.page_cache import cached_page
from server.pages.rendering import page_context, render
from server.services import engine_change, overview, reviews, risks
from server.services.access import Actor, Permission
from server.services.results import engine_version
from server.analysis.report import value_text
from server.analysis.words import field_title
from server.pages.history import diff_value
from server.pages.risks import COUNT_WORDS, RISK_WORDS

router = APIRouter(include_in_schema=False)


def _ordered_counts(by_verdict: dict) -> list[tuple[str | None, int]]:
    return [(v, by_verdict[v]) for v in VERDICT_ORDER if by_verdict.get(v)]


def _with_outdated(counts: list[tuple[str | None, int]], outdated: int) -> list[tuple[str | None, int]]:
    """Counts by verdict with the rails whose only results are of an older engine taken out of
    "not analysed" and counted as "outdated" (right after it)."""
    if not outdated:
        return counts
    out: list[tuple[str | None, int]] = []
    for v, n in counts:
        if v is None:
            if n > outdated:
                out.append((None, n - outdated))
            out.append(("outdated", outdated))
        else:
            out.append((v, n))
    return out


def engine_moves_for(session: Session, actor: Actor) -> list[dict[str, Any]]:
    """Rails an engine change moved out of their signed-off state: those of the actor's teams for
    managers and admins, otherwise those the actor authored a revision of."""
    if actor.can(Permission.RISK) or actor.user_id is None:
        return engine_change.moved_rails(session=session, actor=actor)
    return engine_change.moved_rails(session=session, actor=actor, authored_by=actor.user_id)


RISK_SUMMARY_ROWS = 8


def _queue_rows(entries: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Queue entries with their checks and changes in words (the stored records' own values and limits)."""
    out = []
    for e in entries:
        changes = e["changes"]
        inputs = [{"label": field_title(c["field"]), "old": diff_value(c["field"], c["old"]),
                   "new": diff_value(c["field"], c["new"])} for c in changes["inputs"]]
        results = [{"title": c["title"], "old": c["old_verdict"] or "none", "new": c["new_verdict"] or "none",
                    "old_value": value_text(c["old_value"], c["unit"]) if c["old_value"] is not None else "-",
                    "new_value": value_text(c["new_value"], c["unit"]) if c["new_value"] is not None else "-"}
                   for c in changes["results"]]
        out.append({**e, "inputs_changed": inputs, "results_changed": results,
                    "problem_checks": [{**c, "value_text": value_text(c["value"], c["unit"]),
                                        "limit_text": value_text(c["limit"], c["unit"])}
                                       for c in e["failing"] + e["marginal"]]})
    return out


def home_context(session: Session, actor: Actor) -> dict[str, Any]:
    products = overview.home_products(session=session, actor=actor)
    for p in products:
        p["counts"] = _with_outdated(_ordered_counts(p["by_verdict"]), p["outdated"])
    queue = None
    if actor.can(Permission.REVIEW):
        queue = reviews.review_queue(session=session, actor=actor)
        queue = {**queue, "assigned": _queue_rows(queue["assigned"]), "team": _queue_rows(queue["team"])}
    mine = risks.owner_actions(session=session, actor=actor) if actor.can(Permission.EDIT) else None
    risk = None
    if actor.can(Permission.RISK):
        view = risks.risk_view(session=session, actor=actor)
        totals = view["totals"]
        risk = {"totals": totals, "rails": [{**r, "worst": RISK_WORDS[r["risks"][0]]} for r in
                                            view["rails"][:RISK_SUMMARY_ROWS]],
                "caution": view["caution"], "rail_count": len(view["rails"]),
                "counts": [(k, COUNT_WORDS[k], totals[k]) for k in risks.RISK_KINDS if totals[k]]}
    return {"products": products, "queue": queue, "mine": mine, "risk": risk,
            "engine_moves": engine_moves_for(session, actor), "current_engine": engine_version(),
            "engine_moves_intro": "A new analysis engine read these signed-off rails worse than the result their "
                                  "approvals were given for: each left its signed-off state and its approvals went stale. "
                                  + ("Rails of your teams." if actor.can(Permission.RISK) else
                                     "Rails you authored a revision of.")}


def product_context(session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    data = overview.product_overview(session=session, actor=actor, product_id=product_id)
    for b in data["boards"]:
        b["counts"] = _with_outdated(_ordered_counts(b["by_verdict"]), b["outdated"])
    for a in data["attention"]:
        a["worst"] = worst_check(check_records(a["checks"]))
    data["counts"] = _with_outdated(_ordered_counts(data["by_verdict"]), data["outdated"])
    data["states"] = sorted(signoff_view.product_states(session, product_id, data["product"].team_id).items())
    return data


@router.get("/", response_class=HTMLResponse)
def home(request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    return render(request, "home.html", page_context(request, actor, **home_context(session, actor)))


@router.get("/products/{product_id}", response_class=HTMLResponse)
def product_page(product_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> Response:
    return cached_page(request, actor, "product.html", lambda: product_context(session, actor, product_id))
