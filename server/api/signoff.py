"""Sign-off of rails: /api/v1/rails/{id}/signoff, approvals, waivers, transitions."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends

from server.api.common import IdPath, TypedRoute, errors
from server.auth import CurrentActor, require, require_any
from server.db import SessionDep
from server.schemas.responses import Approval, Listing, SignoffStatus, TransitionTaken, Waiver
from server.schemas.signoff import ApprovalIn, TransitionIn, WaiverCarry, WaiverIn
from server.services import signoff
from server.services.access import Actor, Permission
from server.workflow import FAIL_WAIVER_ROLES

router = APIRouter(prefix="/rails", tags=["sign-off"], route_class=TypedRoute)
Reviewer = Annotated[Actor, Depends(require(Permission.REVIEW))]
Mover = Annotated[Actor, Depends(require(Permission.ADVANCE))]
# reviewers, and the roles a team may name for failing checks: the sign-off service applies the team's rules
Waiving = Annotated[Actor, Depends(require_any(Permission.REVIEW, *FAIL_WAIVER_ROLES))]


@router.get("/{rail_id}/signoff", response_model=SignoffStatus, responses=errors(401, 404, 422))
def signoff_status(rail_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """State, approvals (current and stale), waivers, checks and the transitions on offer with what blocks them."""
    return signoff.signoff_status(session=session, actor=actor, rail_id=rail_id)


@router.get("/{rail_id}/approvals", response_model=Listing[Approval], responses=errors(401, 404, 422))
def list_approvals(rail_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """Every approval of the rail, each with the engine version and result it was given against."""
    rows, head_n, now = signoff.list_approvals(session=session, actor=actor, rail_id=rail_id)
    return {"items": [signoff.approval_dict(a, now, head_n) for a in rows], "total": len(rows)}


@router.post("/{rail_id}/approvals", status_code=201, response_model=Approval,
             responses=errors(400, 401, 403, 404, 409, 422))
def approve(rail_id: IdPath, body: ApprovalIn, session: SessionDep, actor: Reviewer) -> dict:
    """Approve the rail's current revision, named by its sha256 (never one you authored)."""
    approval = signoff.approve(session=session, actor=actor, rail_id=rail_id, sha256=body.sha256,
                               comment=body.comment)
    return signoff.approval_dict(approval)


@router.get("/{rail_id}/waivers", response_model=Listing[Waiver], responses=errors(401, 404, 422))
def list_waivers(rail_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    rows, head_n, now = signoff.list_waivers(session=session, actor=actor, rail_id=rail_id)
    return {"items": [signoff.waiver_dict(w, head_n, now) for w in rows], "total": len(rows)}


@router.post("/{rail_id}/waivers", status_code=201, response_model=Waiver,
             responses=errors(400, 401, 403, 404, 409, 422))
def waive(rail_id: IdPath, body: WaiverIn, session: SessionDep, actor: Waiving) -> dict:
    """Waive a failing or marginal check of the current revision, with a reason.

    The team's waiver rules apply: never by the rail's author; a failing check only by the role
    the team names (nobody by default); under the two-person rule not by a reviewer who approved
    the revision. Reviewers waive marginal checks."""
    waiver = signoff.waive(session=session, actor=actor, rail_id=rail_id, sha256=body.sha256,
                           check_id=body.check_id, reason=body.reason)
    return signoff.waiver_dict(waiver, waiver.revision_n)


@router.post("/{rail_id}/waivers/{waiver_id}/carry", status_code=201, response_model=Waiver,
             responses=errors(400, 401, 403, 404, 409, 422))
def carry_waiver(rail_id: IdPath, waiver_id: IdPath, body: WaiverCarry, session: SessionDep, actor: Waiving) -> dict:
    """Carry a waiver of an earlier revision to the current one (the check must still fail or be marginal)."""
    waiver = signoff.carry_waiver(session=session, actor=actor, rail_id=rail_id, waiver_id=waiver_id,
                                  sha256=body.sha256, reason=body.reason)
    return signoff.waiver_dict(waiver, waiver.revision_n)


@router.post("/{rail_id}/transitions", response_model=TransitionTaken, responses=errors(400, 401, 403, 404, 409, 422))
def take_transition(rail_id: IdPath, body: TransitionIn, session: SessionDep, actor: Mover) -> dict:
    """Move the rail along a transition of its team's workflow (the transition names who may)."""
    return signoff.take_transition(session=session, actor=actor, rail_id=rail_id, transition=body.transition,
                                   sha256=body.sha256, comment=body.comment)
