"""The audit trail, read-only: /api/v1/audit, /api/v1/products/{id}/audit(.csv), /api/v1/rails/{id}/audit.

There is deliberately no route that changes or deletes an entry.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.responses import AuditEntry, Page
from server.services import audit
from server.services.access import Actor, Permission

router = APIRouter(tags=["audit"], route_class=TypedRoute)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]
RiskReader = Annotated[Actor, Depends(require(Permission.RISK))]
CSV_BODY = {200: {"description": "The trail as CSV: one row per entry, before and after as JSON text",
                  "content": {"text/csv": {"schema": {"type": "string"}}}}}


class CsvResponse(Response):
    media_type = "text/csv"


@router.get("/audit", response_model=Page[AuditEntry], responses=errors(401, 403, 422))
def list_entries(session: SessionDep, actor: Admin, page: PageDep, action: SearchText = None,
                 object_type: SearchText = None, user: SearchText = None) -> dict:
    """The whole trail, oldest first, with logins and account changes (admins)."""
    rows, total = audit.list_entries(session=session, actor=actor, action=action, object_type=object_type,
                                     user=user, limit=page.limit, offset=page.offset)
    return page.answer([audit.entry_dict(e) for e in rows], total)


@router.get("/products/{product_id}/audit", response_model=Page[AuditEntry], responses=errors(401, 403, 404, 422))
def product_entries(product_id: IdPath, session: SessionDep, actor: RiskReader, page: PageDep) -> dict:
    rows, total = audit.product_entries(session=session, actor=actor, product_id=product_id, limit=page.limit,
                                        offset=page.offset)
    return page.answer([audit.entry_dict(e) for e in rows], total)


@router.get("/products/{product_id}/audit.csv", response_class=CsvResponse,
            responses=CSV_BODY | errors(401, 403, 404, 422, json_success=False))
def product_csv(product_id: IdPath, session: SessionDep, actor: RiskReader) -> CsvResponse:
    """The product's whole trail as CSV (before and after as JSON text)."""
    filename, text = audit.product_csv(session=session, actor=actor, product_id=product_id)
    return CsvResponse(text, media_type="text/csv; charset=utf-8",
                       headers={"Content-Disposition": f'attachment; filename="{filename}"'})


@router.get("/rails/{rail_id}/audit", response_model=Page[AuditEntry], responses=errors(401, 404, 422))
def rail_entries(rail_id: IdPath, session: SessionDep, actor: CurrentActor, page: PageDep) -> dict:
    """One rail's history: edits, approvals, waivers, transitions."""
    rows, total = audit.rail_entries(session=session, actor=actor, rail_id=rail_id, limit=page.limit,
                                     offset=page.offset)
    return page.answer([audit.entry_dict(e) for e in rows], total)
