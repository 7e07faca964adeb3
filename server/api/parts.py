"""The part library: /api/v1/parts."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.api import PartCreate, PartSave
from server.schemas.responses import Page, Part, PartDetail, PartRevision, PartSummary
from server.services import parts
from server.services.access import Actor, Permission

router = APIRouter(prefix="/parts", tags=["parts"], route_class=TypedRoute)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]


@router.get("", response_model=Page[PartSummary], responses=errors(401, 422))
def list_parts(session: SessionDep, actor: CurrentActor, page: PageDep, q: SearchText = None) -> dict:
    rows, total = parts.list_parts(session=session, actor=actor, q=q, limit=page.limit, offset=page.offset)
    return page.answer([parts.part_dict(p) for p in rows], total)


@router.post("", status_code=201, response_model=Part, responses=errors(400, 401, 403, 409, 422))
def create_part(body: PartCreate, session: SessionDep, actor: Editor, response: Response) -> dict:
    rev = parts.create_part(session=session, actor=actor, document=body.document, message=body.message)
    response.headers["Location"] = f"/api/v1/parts/{rev.part_id}"
    return parts.part_dict(parts.get_part(session=session, actor=actor, part_id=rev.part_id), rev)


@router.get("/{part_id}", response_model=PartDetail, responses=errors(401, 404, 422))
def get_part(part_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    part = parts.get_part(session=session, actor=actor, part_id=part_id)
    head = parts.get_part_revision(session=session, actor=actor, part_id=part_id)
    out = parts.part_dict(part, head)
    out["used_by"] = parts.part_usage(session=session, actor=actor, part_id=part_id)
    out["warnings"] = parts.soa_warnings(head.document)
    return out


@router.put("/{part_id}", response_model=Part, responses=errors(400, 401, 403, 404, 409, 422))
def save_part(part_id: IdPath, body: PartSave, session: SessionDep, actor: Editor) -> dict:
    rev = parts.save_part(session=session, actor=actor, part_id=part_id, document=body.document,
                          base_n=body.base_revision, message=body.message)
    return parts.part_dict(parts.get_part(session=session, actor=actor, part_id=part_id), rev)


@router.get("/{part_id}/revisions/{n}", response_model=PartRevision, responses=errors(401, 404, 422))
def get_part_revision(part_id: IdPath, n: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return parts.part_revision_dict(parts.get_part_revision(session=session, actor=actor, part_id=part_id, n=n))
