"""The home page (the user's products) and the product overview."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages import signoff_view
from server.pages.display import VERDICT_ORDER, worst_check
from server.pages.rendering import page_context, render
from server.services import overview
from server.services.access import Actor

router = APIRouter(include_in_schema=False)


def _ordered_counts(by_verdict: dict) -> list[tuple[str | None, int]]:
    return [(v, by_verdict[v]) for v in VERDICT_ORDER if by_verdict.get(v)]


def home_context(session: Session, actor: Actor) -> dict[str, Any]:
    products = overview.home_products(session=session, actor=actor)
    for p in products:
        p["counts"] = _ordered_counts(p["by_verdict"])
    return {"products": products}


def product_context(session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    data = overview.product_overview(session=session, actor=actor, product_id=product_id)
    for b in data["boards"]:
        b["counts"] = _ordered_counts(b["by_verdict"])
    for a in data["attention"]:
        a["worst"] = worst_check(a["checks"])
    data["counts"] = _ordered_counts(data["by_verdict"])
    data["states"] = sorted(signoff_view.product_states(session, product_id, data["product"].team_id).items())
    return data


@router.get("/", response_class=HTMLResponse)
def home(request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    return render(request, "home.html", page_context(request, actor, **home_context(session, actor)))


@router.get("/products/{product_id}", response_class=HTMLResponse)
def product_page(product_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    ctx = product_context(session, actor, product_id)
    return render(request, "product.html", page_context(request, actor, **ctx))
