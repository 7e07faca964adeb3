"""The managers' risk pages: the open risks of a product, per board, from the risk service."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from server.auth import require
from server.db import SessionDep
from server.pages.display import check_row, check_text
from server.pages.rendering import page_context, render
from server.schemas.responses import RiskCheck
from server.services import risks
from server.services.access import Actor, Permission
from server.services.catalog import list_products

router = APIRouter(include_in_schema=False)
RiskReader = Annotated[Actor, Depends(require(Permission.RISK))]

RISK_WORDS = {
    "failing_check": "failing check without a waiver",
    "marginal_check": "marginal check without a waiver",
    "waived_check": "check accepted by a waiver",
    "stale_signoff": "approval of an earlier revision not renewed",
    "missing_signoff": "not in a signed-off state",
    "outdated_result": "only a result of an older engine version",
    "not_analysed": "current revision not analysed",
    "never_analysed": "never analysed",
}
TOTALS = [("rails", "rails"), ("rails_at_risk", "rails with an open risk"), ("signed_off", "signed off"),
          ("failing_checks", "failing checks"), ("marginal_checks", "marginal checks"),
          ("waived_checks", "waived checks"), ("stale_signoff", "stale sign-offs"),
          ("missing_signoff", "without sign-off"), ("outdated_result", "results of an older engine only"),
          ("not_analysed", "current revision not analysed"),
          ("never_analysed", "never analysed")]


def risks_index_context(session: Session, actor: Actor) -> dict[str, Any]:
    products, _ = list_products(session=session, actor=actor, limit=500)
    return {"products": products}


def product_risks_context(session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    data = risks.product_risks(session=session, actor=actor, product_id=product_id)
    for board in data["boards"]:
        for r in board["rails"]:
            r["risk_words"] = [RISK_WORDS.get(k, k) for k in r["risks"]]
            for c in r["failing"] + r["marginal"] + r["waived"]:
                record = RiskCheck.model_validate(c)
                c["text"] = check_text(record)
                c["row"] = check_row(record)
        board["at_risk"] = [r for r in board["rails"] if r["risks"]]
    data["totals_list"] = [(label, data["totals"].get(key, 0)) for key, label in TOTALS]
    return data


@router.get("/risks", response_class=HTMLResponse)
def risks_index(request: Request, session: SessionDep, actor: RiskReader) -> HTMLResponse:
    return render(request, "risks_index.html", page_context(request, actor, **risks_index_context(session, actor)))


@router.get("/products/{product_id}/risks", response_class=HTMLResponse)
def product_risks_page(product_id: int, request: Request, session: SessionDep, actor: RiskReader) -> HTMLResponse:
    ctx = product_risks_context(session, actor, product_id)
    return render(request, "risks.html", page_context(request, actor, **ctx))
