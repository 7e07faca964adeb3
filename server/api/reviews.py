"""The review queue and review assignments: /api/v1/reviews."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, IdQuery, TypedRoute, errors
from server.auth import CurrentActor, require_any
from server.db import SessionDep
from server.schemas.responses import Listing, ReviewAssignmentOut, ReviewQueue
from server.schemas.signoff import AssignmentIn
from server.services import reviews
from server.services.access import Actor, Permission

router = APIRouter(prefix="/reviews", tags=["sign-off"], route_class=TypedRoute)
# reviewers take reviews for themselves; managers and admins assign them (the service checks which)
Assigner = Annotated[Actor, Depends(require_any(Permission.REVIEW, "manager", "admin"))]


@router.get("/queue", response_model=ReviewQueue, responses=errors(401, 403))
def review_queue(session: SessionDep, actor: CurrentActor) -> dict:
    """What awaits you (reviewers), oldest first, and the team queue nobody is assigned to; never your own
    revisions. Each entry: verdict, failing and marginal checks, what changed since the last approved revision."""
    return reviews.review_queue(session=session, actor=actor)


@router.get("/assignments", response_model=Listing[ReviewAssignmentOut], responses=errors(401, 404, 422))
def list_assignments(session: SessionDep, actor: CurrentActor, rail_id: IdQuery = None,
                     board_id: IdQuery = None) -> dict:
    """The reviewers assigned to a rail (directly or through its board) or to a board."""
    items = reviews.list_assignments(session=session, actor=actor, rail_id=rail_id, board_id=board_id)
    return {"items": items, "total": len(items)}


@router.post("/assignments", status_code=201, response_model=ReviewAssignmentOut,
             responses=errors(400, 401, 403, 404, 409, 422))
def assign(body: AssignmentIn, session: SessionDep, actor: Assigner) -> dict:
    """Assign a reviewer to a rail or a board (managers, admins); a reviewer takes one for themself."""
    return reviews.assign(session=session, actor=actor, reviewer_id=body.reviewer_id, rail_id=body.rail_id,
                          board_id=body.board_id)


@router.delete("/assignments/{assignment_id}", status_code=204, response_class=Response,
               responses=errors(401, 403, 404, 422))
def unassign(assignment_id: IdPath, session: SessionDep, actor: Assigner) -> Response:
    reviews.unassign(session=session, actor=actor, assignment_id=assignment_id)
    return Response(status_code=204)
