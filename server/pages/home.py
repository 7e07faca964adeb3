"""The home page (the user's products, and the rails an engine change moved) and the product overview."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages import signoff_view
from server.pages.display import VERDICT_ORDER, check_records, worst_check
from server.pages.rendering import page_context, render
from server.services import engine_change, overview
from server.services.access import Actor, Permission
from server.services.results import engine_version

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


def home_context(session: Session, actor: Actor) -> dict[str, Any]:
    products = overview.home_products(session=session, actor=actor)
    for p in products:
        p["counts"] = _with_outdated(_ordered_counts(p["by_verdict"]), p["outdated"])
    return {"products": products, "engine_moves": engine_moves_for(session, actor), "current_engine": engine_version(),
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
def product_page(product_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    ctx = product_context(session, actor, product_id)
    return render(request, "product.html", page_context(request, actor, **ctx))
