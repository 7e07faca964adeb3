"""Sign-off actions from the rail page: approve, waive a check, carry a waiver, take a transition.

Each posts a form with the sha256 of the revision the page showed, so an approval or waiver
can only be about what its reviewer saw; the sign-off services refuse it otherwise. A
refusal shows the rail page again with the reason beside its sign-off section.
"""

from __future__ import annotations

from typing import Annotated, Callable

from fastapi import APIRouter, Depends, Request
from fastapi.responses import Response

from server.auth import CurrentActor, require
from server.db import SessionDep
from server.pages.rails import rail_context
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.services import signoff
from server.services.access import Actor, Permission
from server.services.errors import ServiceError

router = APIRouter(include_in_schema=False)
Reviewer = Annotated[Actor, Depends(require(Permission.REVIEW))]
Advancer = Annotated[Actor, Depends(require(Permission.ADVANCE))]
Waiver = CurrentActor   # reviewers, or the role a team names for failing checks: the sign-off service decides


def _act(request: Request, session, actor: Actor, rail_id: int, action: Callable[[], object]) -> Response:
    try:
        action()
    except ServiceError as exc:
        session.rollback()
        ctx = rail_context(session, actor, rail_id)
        ctx["signoff_error"] = exc.message
        return render(request, "rail.html", page_context(request, actor, **ctx), status_code=exc.status)
    return redirect(f"/rails/{rail_id}#signoff")


@router.post("/rails/{rail_id}/approvals")
def approve(rail_id: int, request: Request, session: SessionDep, actor: Reviewer, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.approve(
        session=session, actor=actor, rail_id=rail_id, sha256=f.get("sha256", ""), comment=f.get("comment", "")))


@router.post("/rails/{rail_id}/waivers")
def waive(rail_id: int, request: Request, session: SessionDep, actor: Waiver, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.waive(
        session=session, actor=actor, rail_id=rail_id, sha256=f.get("sha256", ""), check_id=f.get("check_id", ""),
        reason=f.get("reason", "")))


@router.post("/rails/{rail_id}/waivers/{waiver_id}/carry")
def carry(rail_id: int, waiver_id: int, request: Request, session: SessionDep, actor: Waiver,
          form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.carry_waiver(
        session=session, actor=actor, rail_id=rail_id, waiver_id=waiver_id, sha256=f.get("sha256", ""),
        reason=f.get("reason") or None))


@router.post("/rails/{rail_id}/transitions")
def transition(rail_id: int, request: Request, session: SessionDep, actor: Advancer, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.take_transition(
        session=session, actor=actor, rail_id=rail_id, transition=f.get("transition", ""),
        sha256=f.get("sha256", ""), comment=f.get("comment", "")))
