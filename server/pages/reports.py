"""The board's sign-off report as a printable page, its PDF, and the archived copies.

The page and the PDF read the same report (``services.reports.board_report``): every number
comes from the stored results. The page draws its plots with the rail page's figure builders
from the stored result; the print stylesheet (``web/static/report.css``) leaves out the
navigation, buttons and forms and starts each rail on a new page.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages.plots import soa_figure, startup_figure
from server.pages.rendering import page_context, render
from server.schemas.result import AnalysisResult
from server.services import catalog, reports
from server.services.access import Actor

router = APIRouter(include_in_schema=False)


def _pdf(data: bytes, filename: str, sha256: str | None = None) -> Response:
    headers = {"Content-Disposition": f'attachment; filename="{filename}"'}
    if sha256:
        headers["ETag"] = f'"{sha256}"'
        headers["X-Content-SHA256"] = sha256
    return Response(data, media_type="application/pdf", headers=headers)


def _figures(entry: dict[str, Any]) -> dict[str, Any]:
    """The rail page's start-up and SOA figures of the rail's stored current-engine result."""
    res = entry["result"]
    if res is None or res["outdated"] or not entry["stored_result"]:
        return {}
    result = AnalysisResult.model_validate(entry["stored_result"])
    return {"startup": startup_figure(result, entry["document"]), "soa": soa_figure(result, entry["document"])}


def report_context(session: Session, actor: Actor, board_id: int, *, plots: bool = True) -> dict[str, Any]:
    report = reports.board_report(session=session, actor=actor, board_id=board_id, plots=False)
    for entry in report["rails"]:
        entry["figures_page"] = _figures(entry) if plots else {}
    return {"report": report, "board": report["board"], "product": report["product"],
            "archived": reports.list_archives(session=session, actor=actor, board_id=board_id)}


@router.get("/boards/{board_id}/report", response_class=HTMLResponse)
def report_page(board_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    return render(request, "report.html", page_context(request, actor, **report_context(session, actor, board_id)))


@router.get("/boards/{board_id}/report.pdf")
def report_pdf(board_id: int, session: SessionDep, actor: CurrentActor) -> Response:
    data, filename = reports.live_pdf(session=session, actor=actor, board_id=board_id)
    return _pdf(data, filename)


@router.get("/boards/{board_id}/archived-reports", response_class=HTMLResponse)
def archived_page(board_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    board = catalog.get_board(session=session, actor=actor, board_id=board_id)
    archived = reports.list_archives(session=session, actor=actor, board_id=board_id)
    return render(request, "archived_reports.html",
                  page_context(request, actor, board=board, product=board.product, archived=archived))


@router.get("/archived-reports/{archive_id}.pdf")
def archived_pdf(archive_id: int, session: SessionDep, actor: CurrentActor) -> Response:
    data, meta, filename = reports.archive_pdf(session=session, actor=actor, archive_id=archive_id)
    return _pdf(data, filename, meta["sha256"])
