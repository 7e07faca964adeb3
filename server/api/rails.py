"""Rails, revisions and diffs: /api/v1/rails."""

from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Header, Query, Response

from server.api.common import ID_MAX, IdPath, IdQuery, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.api import RailCreate, RailSave
from server.schemas.signoff import RetireIn
from server.schemas.responses import Page, Rail, RailListItem, RailSaved, Revision, RevisionDiff, RevisionSummary
from server.services import rail_edits, rails
from server.services.access import Actor, Permission

router = APIRouter(prefix="/rails", tags=["rails"], route_class=TypedRoute)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
Mode = Literal["hard", "slew", "current_limit", "power_limit"]


def _etag(sha256: str) -> str:
    return f'"{sha256}"'


@router.get("", response_model=Page[RailListItem], responses=errors(401, 422))
def list_rails(session: SessionDep, actor: CurrentActor, page: PageDep, product_id: IdQuery = None,
               board_id: IdQuery = None, mode: Mode | None = None,
               q: SearchText = None,
               retired: Annotated[bool, Query(description="true: the retired rails instead")] = False) -> dict:
    rows, total = rails.list_rails(session=session, actor=actor, product_id=product_id, board_id=board_id,
                                   mode=mode, q=q, limit=page.limit, offset=page.offset, with_documents=False,
                                   retired=retired)
    return page.answer(rails.rail_dicts(session, rows), total)


@router.post("", status_code=201, response_model=Rail, responses=errors(400, 401, 403, 404, 409, 422))
def create_rail(body: RailCreate, session: SessionDep, actor: Editor, response: Response) -> dict:
    part = rail_edits.PartRef(body.part.id, body.part.revision) if body.part else None
    rail, rev = rail_edits.create_rail(session=session, actor=actor, board_id=body.board_id,
                                       document=body.document, part=part, message=body.message)
    response.headers["Location"] = f"/api/v1/rails/{rail.id}"
    response.headers["ETag"] = _etag(rev.sha256)
    return rails.rail_dict(session, rail, rev)


@router.get("/{rail_id}", response_model=Rail, responses=errors(401, 404, 422))
def get_rail(rail_id: IdPath, session: SessionDep, actor: CurrentActor, response: Response) -> dict:
    rail = rails.get_rail(session=session, actor=actor, rail_id=rail_id)
    head = rails.get_revision(session=session, actor=actor, rail_id=rail_id)
    response.headers["ETag"] = _etag(head.sha256)
    return rails.rail_dict(session, rail, head)


@router.put("/{rail_id}", response_model=RailSaved, responses=errors(400, 401, 403, 404, 409, 422, 428))
def save_rail(rail_id: IdPath, body: RailSave, session: SessionDep, actor: Editor, response: Response,
              if_match: Annotated[str | None, Header(description="sha256 of the base revision")] = None) -> dict:
    if "part" not in body.model_fields_set:
        part = rail_edits.KEEP_PART
    else:
        part = rail_edits.PartRef(body.part.id, body.part.revision) if body.part else None
    base_sha = if_match.strip().strip('"').removeprefix("W/").strip('"') if if_match else None
    rail, rev, created = rail_edits.save_rail(session=session, actor=actor, rail_id=rail_id,
                                              document=body.document, base_sha256=base_sha,
                                              base_n=body.base_revision, part=part, message=body.message)
    response.headers["ETag"] = _etag(rev.sha256)
    out = rails.rail_dict(session, rail, rev)
    out["created_revision"] = created
    return out


@router.delete("/{rail_id}", status_code=204, response_class=Response, responses=errors(401, 403, 404, 422))
def delete_rail(rail_id: IdPath, session: SessionDep, actor: Editor) -> Response:
    rail_edits.delete_rail(session=session, actor=actor, rail_id=rail_id)
    return Response(status_code=204)


@router.get("/{rail_id}/revisions", response_model=Page[RevisionSummary], responses=errors(401, 404, 422))
def list_revisions(rail_id: IdPath, session: SessionDep, actor: CurrentActor, page: PageDep) -> dict:
    rows, total = rails.list_revisions(session=session, actor=actor, rail_id=rail_id, limit=page.limit,
                                       offset=page.offset)
    return page.answer([rails.revision_dict(r, with_document=False) for r in rows], total)


@router.get("/{rail_id}/revisions/{n}", response_model=Revision, responses=errors(401, 404, 422))
def get_revision(rail_id: IdPath, n: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return rails.revision_dict(rails.get_revision(session=session, actor=actor, rail_id=rail_id, n=n))


@router.get("/{rail_id}/diff", response_model=RevisionDiff, responses=errors(401, 404, 422))
def diff(rail_id: IdPath, session: SessionDep, actor: CurrentActor,
         from_n: Annotated[int, Query(alias="from", ge=1, le=ID_MAX)],
         to_n: Annotated[int, Query(alias="to", ge=1, le=ID_MAX)]) -> dict:
    return rails.diff_revisions(session=session, actor=actor, rail_id=rail_id, from_n=from_n, to_n=to_n)


@router.post("/{rail_id}/retire", response_model=Rail, responses=errors(400, 401, 403, 404, 409, 422))
def retire_rail(rail_id: IdPath, body: RetireIn, session: SessionDep, actor: Editor) -> dict:
    """Retire a rail: its history stays; it leaves lists, the review queue and the risk view until restored."""
    rail = rail_edits.retire_rail(session=session, actor=actor, rail_id=rail_id, reason=body.reason)
    return rails.rail_dict(session, rail, rails.get_revision(session=session, actor=actor, rail_id=rail.id))


@router.post("/{rail_id}/restore", response_model=Rail, responses=errors(401, 403, 404, 409, 422))
def restore_rail(rail_id: IdPath, session: SessionDep, actor: Editor) -> dict:
    """Bring a retired rail back."""
    rail = rail_edits.restore_rail(session=session, actor=actor, rail_id=rail_id)
    return rails.rail_dict(session, rail, rails.get_revision(session=session, actor=actor, rail_id=rail.id))
