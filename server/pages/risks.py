"""The risk pages: every product the user sees on one page (``/risks``), one product's (``/products/{id}/risks``),
and the same rails as CSV (``/risks.csv``).

Technical risks and process state are shown apart, rails worst first, filterable by product,
board, workflow state, owner and kind of risk; the counts over time are drawn from the daily
snapshots of :mod:`server.services.risks`. The first view of a day takes that day's snapshot
of the products it covers. Every check is rendered from its stored record by
:func:`server.pages.display.check_row`, as on every other page.
"""

from __future__ import annotations

import logging
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session

from server.auth import require
from server.db import SessionDep
from server.pages.display import check_row, check_text
from server.pages.plots import PALETTE, VERDICT_COLOURS, risk_trend_figure
from server.pages.rendering import page_context, render
from server.schemas.responses import RiskCheck
from server.services import risks
from server.services.access import Actor, Permission
from server.services.errors import Invalid

router = APIRouter(include_in_schema=False)
RiskReader = Annotated[Actor, Depends(require(Permission.RISK))]
log = logging.getLogger(__name__)

ROWS_SHOWN = 100

# One rail's kinds of risk in words (worst first, as risks.RISK_KINDS)
RISK_WORDS = {
    "failing_check": "failing check without a waiver",
    "never_analysed": "never analysed",
    "not_analysed": "current revision not analysed",
    "marginal_check": "marginal check without a waiver",
    "outdated_result": "only a result of an older engine version",
    "waived_check": "check accepted by a waiver",
    "outdated_part": "the library holds a newer revision of its part",
    "stale_signoff": "approval of an earlier revision not renewed",
    "awaiting_review": "awaiting a reviewer's approval",
    "missing_signoff": "not signed off",
}
# The counts of each group in words (rails, unless said otherwise)
COUNT_WORDS = {
    "failing_check": "with a failing check", "never_analysed": "never analysed",
    "not_analysed": "current revision not analysed", "marginal_check": "with a marginal check",
    "outdated_result": "with only a result of an older engine", "waived_check": "with a waived check",
    "outdated_part": "on an older revision of their part",
    "stale_signoff": "with approvals not renewed", "awaiting_review": "awaiting review",
    "missing_signoff": "not signed off",
}
KIND_CHOICES = [("", "any open risk"), ("technical", "any technical risk"), ("process", "any process state")] + \
    [(k, RISK_WORDS[k]) for k in risks.RISK_KINDS]
# The trend chart's lines: technical risks solid, process state dashed
TREND_LINES = [("failing_check", "Failing checks (rails)", VERDICT_COLOURS["fail"], "solid"),
               ("marginal_check", "Marginal checks (rails)", VERDICT_COLOURS["marginal"], "solid"),
               ("waived_check", "Waived checks (rails)", PALETTE[3], "solid"),
               ("not_analysed", "Not analysed (rails, never or current revision)", PALETTE[4], "solid"),
               ("outdated_result", "Older engine only (rails)", PALETTE[1], "solid"),
               ("outdated_part", "Older part revision (rails)", PALETTE[6], "solid"),
               ("awaiting_review", "Awaiting review (rails)", PALETTE[0], "dash"),
               ("stale_signoff", "Approvals not renewed (rails)", PALETTE[5], "dash"),
               ("missing_signoff", "Not signed off (rails)", "#5c6b7a", "dot")]


def _int_or_none(value: str | int | None, name: str) -> int | None:
    if value is None or value == "":
        return None
    try:
        return int(value)
    except (TypeError, ValueError):
        raise Invalid(f"{name} must be a number", details=[{"field": name, "message": "must be a number"}]) from None


def _rail_row(r: dict[str, Any]) -> dict[str, Any]:
    """A rail of the view as the table shows it (the service's check lists are shared: read, never changed)."""
    r = dict(r)
    r["checks"] = []
    for c in r["failing"] + r["marginal"] + r["waived"]:
        record = RiskCheck.model_validate(c)
        r["checks"].append({"id": c["id"], "verdict": c["verdict"], "waiver": c["waiver"], "text": check_text(record),
                            "row": check_row(record)})
    r["technical_words"] = [RISK_WORDS[k] for k in r["technical"]]
    r["process_words"] = [RISK_WORDS[k] for k in r["process"]]
    worst = r["risks"][0] if r["risks"] else None
    r["severity"] = {"kind": worst, "words": RISK_WORDS.get(worst, "no open risk"),
                     "technical": worst in risks.TECHNICAL_KINDS}
    return r


def risks_context(session: Session, actor: Actor, *, product_id: int | str | None = None,
                  board: int | str | None = None, state: str = "", owner: str = "", kind: str = "",
                  show: str = "") -> dict[str, Any]:
    """The risk page: every product the actor sees (or one), filtered; at most :data:`ROWS_SHOWN` rails
    unless ``show == "all"``."""
    pid = _int_or_none(product_id, "product")
    data = risks.risk_view(session=session, actor=actor, product_id=pid, board_id=_int_or_none(board, "board"),
                           state=state or None, owner=owner or None, kind=kind or None)
    everything = data["rails"]
    shown = everything if show == "all" else everything[:ROWS_SHOWN]
    data["rails"] = [_rail_row(r) for r in shown]
    data["rail_count"] = len(everything)
    totals = data["totals"]
    data["technical_counts"] = [(k, COUNT_WORDS[k], totals[k]) for k in risks.TECHNICAL_KINDS]
    data["process_counts"] = [(k, COUNT_WORDS[k], totals[k]) for k in risks.PROCESS_KINDS]
    data["trend_figure"] = risk_trend_figure(data["trend"], TREND_LINES)
    data["trend_days"] = sum(1 for p in data["trend"][:-1])
    data["kind_choices"] = KIND_CHOICES
    data["product"] = data["products"][0] if pid is not None else None
    data["query"] = {k: v for k, v in (("product", pid), ("board", data["filters"]["board_id"]), ("state", state),
                                       ("owner", owner), ("kind", kind)) if v not in (None, "")}
    return data


def _snapshot(session: Session, actor: Actor, ctx: dict[str, Any]) -> None:
    """Today's snapshot of the products on the page, when the first view of the day takes it."""
    try:
        risks.note_snapshots(session=session, actor=actor, view=ctx)
    except SQLAlchemyError as exc:   # a page is worth more than one day's point of a chart
        session.rollback()
        log.warning("risk snapshot not taken: %s", exc)


@router.get("/risks", response_class=HTMLResponse)
def risks_page(request: Request, session: SessionDep, actor: RiskReader, product: str = "", board: str = "",
               state: str = "", owner: str = "", kind: str = "", show: str = "") -> HTMLResponse:
    ctx = risks_context(session, actor, product_id=product, board=board, state=state, owner=owner, kind=kind,
                        show=show)
    _snapshot(session, actor, ctx)
    return render(request, "risks.html", page_context(request, actor, **ctx))


@router.get("/products/{product_id}/risks", response_class=HTMLResponse)
def product_risks_page(product_id: int, request: Request, session: SessionDep, actor: RiskReader, board: str = "",
                       state: str = "", owner: str = "", kind: str = "", show: str = "") -> HTMLResponse:
    ctx = risks_context(session, actor, product_id=product_id, board=board, state=state, owner=owner, kind=kind,
                        show=show)
    _snapshot(session, actor, ctx)
    return render(request, "risks.html", page_context(request, actor, **ctx))


@router.get("/risks.csv")
def risks_csv(session: SessionDep, actor: RiskReader, product: str = "", board: str = "", state: str = "",
              owner: str = "", kind: str = "") -> Response:
    """The rails of the risk page with the same filters, every one of them, as CSV."""
    data = risks.risk_view(session=session, actor=actor, product_id=_int_or_none(product, "product"),
                           board_id=_int_or_none(board, "board"), state=state or None, owner=owner or None,
                           kind=kind or None)
    name = f"risks-product-{data['filters']['product_id']}.csv" if data["filters"]["product_id"] else "risks.csv"
    return Response(risks.risk_csv(data), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="{name}"'})
