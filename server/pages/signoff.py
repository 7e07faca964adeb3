"""Sign-off actions from the rail page: approve, waive a check, carry a waiver, take a transition; retire
and restore a rail; assign reviewers (to a rail or a board, or take one from the team queue).

Each posts a form with the sha256 of the revision the page showed, so an approval or waiver
can only be about what its reviewer saw; the sign-off services refuse it otherwise. A
refusal shows the rail page again with the reason beside the form that was sent (beside its
field, when the refusal names one), and the page scrolls there.
"""

from __future__ import annotations

from typing import Annotated, Callable

from fastapi import APIRouter, Depends, Request
from fastapi.responses import Response

from server.auth import require, require_any
from server.db import SessionDep
from server.pages.rails import rail_context
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.services import rail_edits, reviews, signoff
from server.services.access import Actor, Permission
from server.services.errors import ServiceError
from server.workflow import FAIL_WAIVER_ROLES

router = APIRouter(include_in_schema=False)
Reviewer = Annotated[Actor, Depends(require(Permission.REVIEW))]
Advancer = Annotated[Actor, Depends(require(Permission.ADVANCE))]
# reviewers, or the role a team names for failing checks: the sign-off service applies the team's rules
Waiver = Annotated[Actor, Depends(require_any(Permission.REVIEW, *FAIL_WAIVER_ROLES))]


def _act(request: Request, session, actor: Actor, rail_id: int, action: Callable[[], object], *,
         form: str = "", typed: dict[str, str] | None = None, back: str = "#signoff") -> Response:
    """Run a sign-off action; a refusal renders the rail page with the message beside ``form`` (and its
    field, when the refusal names one) and what was typed kept."""
    try:
        action()
    except ServiceError as exc:
        session.rollback()
        ctx = rail_context(session, actor, rail_id)
        fields = [d.get("field") for d in (exc.details or []) if isinstance(d, dict)]
        ctx["signoff_error"] = exc.message
        ctx["form_error"] = {"form": form, "field": fields[0] if fields else "", "message": exc.message,
                             "typed": typed or {}}
        return render(request, "rail.html", page_context(request, actor, **ctx), status_code=exc.status)
    return redirect(f"/rails/{rail_id}{back}")


@router.post("/rails/{rail_id}/approvals")
def approve(rail_id: int, request: Request, session: SessionDep, actor: Reviewer, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.approve(
        session=session, actor=actor, rail_id=rail_id, sha256=f.get("sha256", ""), comment=f.get("comment", "")),
        form="approve", typed={"comment": f.get("comment", "")})


@router.post("/rails/{rail_id}/waivers")
def waive(rail_id: int, request: Request, session: SessionDep, actor: Waiver, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.waive(
        session=session, actor=actor, rail_id=rail_id, sha256=f.get("sha256", ""), check_id=f.get("check_id", ""),
        reason=f.get("reason", "")), form="waive", typed={"check_id": f.get("check_id", ""),
                                                          "reason": f.get("reason", "")})


@router.post("/rails/{rail_id}/waivers/{waiver_id}/carry")
def carry(rail_id: int, waiver_id: int, request: Request, session: SessionDep, actor: Waiver,
          form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.carry_waiver(
        session=session, actor=actor, rail_id=rail_id, waiver_id=waiver_id, sha256=f.get("sha256", ""),
        reason=f.get("reason") or None), form="carry")


@router.post("/rails/{rail_id}/transitions")
def transition(rail_id: int, request: Request, session: SessionDep, actor: Advancer, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: signoff.take_transition(
        session=session, actor=actor, rail_id=rail_id, transition=f.get("transition", ""),
        sha256=f.get("sha256", ""), comment=f.get("comment", "")), form="transition:" + f.get("transition", ""),
        typed={"comment": f.get("comment", "")})


Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
# reviewers take reviews for themselves, managers and admins assign: the service decides which
Assigner = Annotated[Actor, Depends(require_any(Permission.REVIEW, "manager", "admin"))]


@router.post("/rails/{rail_id}/retire")
def retire(rail_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep) -> Response:
    f = form_dict(form)
    return _act(request, session, actor, rail_id, lambda: rail_edits.retire_rail(
        session=session, actor=actor, rail_id=rail_id, reason=f.get("reason", "")), form="retire", back="")


@router.post("/rails/{rail_id}/restore")
def restore(rail_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep) -> Response:
    return _act(request, session, actor, rail_id, lambda: rail_edits.restore_rail(
        session=session, actor=actor, rail_id=rail_id), form="retire", back="")


def _reviewer_id(f: dict[str, str]) -> int | None:
    try:
        return int(f["reviewer_id"]) if f.get("reviewer_id") else None
    except ValueError:
        return -1


@router.post("/rails/{rail_id}/assignments")
def assign_rail(rail_id: int, request: Request, session: SessionDep, actor: Assigner, form: FormDep) -> Response:
    """Assign a reviewer to this rail (managers, admins), or take its review (reviewers); back to ``next``."""
    f = form_dict(form)
    back = f.get("next", "")
    if not back.startswith("/") or back.startswith("//"):
        back = f"/rails/{rail_id}"
    try:
        reviews.assign(session=session, actor=actor, reviewer_id=_reviewer_id(f), rail_id=rail_id)
    except ServiceError as exc:
        session.rollback()
        if back != f"/rails/{rail_id}":
            raise
        ctx = rail_context(session, actor, rail_id)
        ctx["form_error"] = {"form": "assign", "field": "", "message": exc.message, "typed": {}}
        return render(request, "rail.html", page_context(request, actor, **ctx), status_code=exc.status)
    return redirect(back)


@router.post("/boards/{board_id}/assignments")
def assign_board(board_id: int, session: SessionDep, actor: Assigner, form: FormDep) -> Response:
    """Assign a reviewer to every rail of a board (managers, admins; a reviewer takes the board)."""
    f = form_dict(form)
    reviews.assign(session=session, actor=actor, reviewer_id=_reviewer_id(f), board_id=board_id)
    return redirect(f"/boards/{board_id}#assignments")


@router.post("/review-assignments/{assignment_id}/delete")
def unassign(assignment_id: int, session: SessionDep, actor: Assigner, form: FormDep) -> Response:
    f = form_dict(form)
    reviews.unassign(session=session, actor=actor, assignment_id=assignment_id)
    back = f.get("next", "")
    return redirect(back if back.startswith("/") and not back.startswith("//") else "/")
