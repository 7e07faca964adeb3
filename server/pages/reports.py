"""The board's sign-off report as a printable page, its PDF, and the archived copies.

The page and the PDF read the same report (``services.reports.board_report``): every number
comes from the stored results. The page draws its plots with the rail page's figure builders
from the stored result; the print stylesheet (``web/static/report.css``) leaves out the
navigation, buttons and forms and starts each rail on a new page.
"""

from __future__ import annotations

import functools
import json
import threading
from collections import OrderedDict
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response
from jinja2.utils import htmlsafe_json_dumps
from markupsafe import Markup
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages.plots import sequence_figure, soa_figure, startup_figure
from server.pages.rendering import page_context, render
from server.pages.display import read_result
from server.services import catalog, reports, results, sequences
from server.services.access import Actor
from server.services.errors import NotFound
from server.templating import templates

router = APIRouter(include_in_schema=False)
_BODY = templates.get_template("partials/report_rail_body.html")


def _pdf(data: bytes, filename: str, sha256: str | None = None) -> Response:
    headers = {"Content-Disposition": f'attachment; filename="{filename}"'}
    if sha256:
        headers["ETag"] = f'"{sha256}"'
        headers["X-Content-SHA256"] = sha256
    return Response(data, media_type="application/pdf", headers=headers)


# A stored result never changes, and the body of a rail's section (inputs, limits, checks, key
# figures, plots) is drawn from it and from the revision's document (named by its sha256): it is
# rendered once per (database, rail, revision, result, engine) and kept in a bounded
# least-recently-used store, so a report of many rails renders and encodes each body once.
_BODIES: OrderedDict[tuple, Markup] = OrderedDict()
_BODIES_MAX = 1000
_lock = threading.Lock()
_dumps = functools.partial(json.dumps, separators=(",", ":"))
PAPER_WIDTH_PX = 680   # an A4 page's text width: the report's plots print as they show


def _paper(figure: dict[str, Any]) -> dict[str, Any]:
    """A figure of a fixed width, so that printing does not cut it (a page narrower than the screen)."""
    figure["layout"] = {**figure["layout"], "width": PAPER_WIDTH_PX, "autosize": False}
    return figure


def _figures(session: Session, entry: dict[str, Any]) -> dict[str, Markup | None]:
    """The rail page's start-up and SOA figures of the rail's stored current-engine result, as JSON."""
    res = entry["result"]
    if res is None or res["outdated"]:
        return {}
    result = read_result(results.stored_result(session, res["id"]))[0]
    return {name: htmlsafe_json_dumps(_paper(fig), dumps=_dumps) if fig else None
            for name, fig in (("startup", startup_figure(result, entry["document"])),
                              ("soa", soa_figure(result, entry["document"])))}


def _body_html(session: Session, entry: dict[str, Any], plots: bool) -> Markup:
    res = entry["result"]
    key = (str(session.get_bind().url), entry["id"], entry["sha256"], res["id"] if res else None,
           results.engine_version(), plots)
    with _lock:
        found = _BODIES.get(key)
        if found is not None:
            _BODIES.move_to_end(key)
            return found
    html = Markup(_BODY.render(e=entry, figures=_figures(session, entry) if plots else {}))
    with _lock:
        _BODIES[key] = html
        while len(_BODIES) > _BODIES_MAX:
            _BODIES.popitem(last=False)
    return html


def report_context(session: Session, actor: Actor, board_id: int, *, plots: bool = True) -> dict[str, Any]:
    report = reports.board_report(session=session, actor=actor, board_id=board_id, plots=False)
    for entry in report["rails"]:
        entry["body_html"] = _body_html(session, entry, plots)
    return {"report": report, "board": report["board"], "product": report["product"],
            "sequence": _sequence_section(session, actor, board_id, plots),
            "archived": reports.list_archives(session=session, actor=actor, board_id=board_id)}


def _sequence_section(session: Session, actor: Actor, board_id: int, plots: bool) -> dict[str, Any] | None:
    """The board's power-up sequence in the report: its revision, verdict, checks and timelines per corner
    (the stored result of the board as it is now; while its job computes it, only that: no older result is
    reported). None when the board has no sequence. Reads only."""
    try:
        seq = sequences.get_sequence(session=session, actor=actor, board_id=board_id)
    except NotFound:
        return None
    data = sequences.sequence_dict(session, seq)
    result = data["result"] or {}
    corners = [{"id": f"report-sequence-{c['id']}", "title": f"Board start-up at the {c['title']}",
                "figure": sequence_figure(c, f"Board start-up at the {c['title']}") if plots else None,
                "checks": [ch for ch in result["checks"] if ch["corner"] == c["id"]]}
               for c in result.get("corners", [])]
    return {"n": data["n"], "sha256": data["sha256"], "verdict": result.get("verdict"), "corners": corners,
            "current": data["result"] is not None, "analysis": data["analysis"]["state"],
            "job": data["analysis"]["job"], "conventions": result.get("conventions", []),
            "problem": result.get("error"), "approvals": data["approvals"]}


@router.get("/boards/{board_id}/report", response_class=HTMLResponse)
def report_page(board_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    return render(request, "report.html", page_context(request, actor, **report_context(session, actor, board_id)))


@router.get("/boards/{board_id}/report.pdf")
def report_pdf(board_id: int, session: SessionDep, actor: CurrentActor) -> Response:
    sequence = sequences.board_sequence(session=session, actor=actor, board_id=board_id)
    data, filename = reports.live_pdf(session=session, actor=actor, board_id=board_id, sequence=sequence)
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
