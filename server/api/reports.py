"""Board sign-off reports: the PDF of the live report, and the archived copies (read-only).

There is deliberately no route that replaces or deletes an archived copy.
"""

from __future__ import annotations

from fastapi import APIRouter, Response

from server.api.common import TypedRoute, errors
from server.auth import CurrentActor
from server.db import SessionDep
from server.schemas.responses import ArchivedReport, Listing
from server.services import reports, sequences

router = APIRouter(tags=["reports"], route_class=TypedRoute)
PDF_BODY = {200: {"description": "The report as PDF", "content": {"application/pdf": {"schema": {
    "type": "string", "format": "binary"}}}}}


class PdfResponse(Response):
    media_type = "application/pdf"


def pdf_answer(data: bytes, filename: str, sha256: str | None = None) -> PdfResponse:
    headers = {"Content-Disposition": f'attachment; filename="{filename}"'}
    if sha256:
        headers["ETag"] = f'"{sha256}"'
        headers["X-Content-SHA256"] = sha256
    return PdfResponse(data, headers=headers)


@router.get("/boards/{board_id}/report.pdf", response_class=PdfResponse,
            responses=PDF_BODY | errors(401, 404, 422, json_success=False))
def live_report(board_id: int, session: SessionDep, actor: CurrentActor) -> PdfResponse:
    """The board's sign-off report as it reads now, as PDF (made on the server)."""
    sequence = sequences.board_sequence(session=session, actor=actor, board_id=board_id)
    data, filename = reports.live_pdf(session=session, actor=actor, board_id=board_id, sequence=sequence)
    return pdf_answer(data, filename)


@router.get("/boards/{board_id}/archived-reports", response_model=Listing[ArchivedReport],
            responses=errors(401, 404, 422))
def list_archived(board_id: int, session: SessionDep, actor: CurrentActor) -> dict:
    """The archived copies of the board's report, newest first."""
    items = reports.list_archives(session=session, actor=actor, board_id=board_id)
    return {"items": items, "total": len(items)}


@router.get("/archived-reports/{archive_id}", response_model=ArchivedReport, responses=errors(401, 404, 422))
def get_archived(archive_id: int, session: SessionDep, actor: CurrentActor) -> dict:
    return reports.get_archive(session=session, actor=actor, archive_id=archive_id)


@router.get("/archived-reports/{archive_id}/pdf", response_class=PdfResponse,
            responses=PDF_BODY | errors(401, 404, 422, json_success=False))
def archived_pdf(archive_id: int, session: SessionDep, actor: CurrentActor) -> PdfResponse:
    """The stored bytes of an archived copy; their sha256 is the copy's ``sha256`` (also sent as ETag)."""
    data, meta, filename = reports.archive_pdf(session=session, actor=actor, archive_id=archive_id)
    return pdf_answer(data, filename, meta["sha256"])
