"""Admin pages: the teams' workflows, each edited as a form of states and transitions, with its diagram;
and each team's waiver rules (the two-person rule, who may waive a failing check)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session

from server.auth import require
from server.db import SessionDep
from server.pages.common import FormDep, page_context, render
from server.pages.workflow_diagram import workflow_svg
from server.pages.workflow_form import (FIELD_WORDS, PlacedErrors, WorkflowForm, definition_of, form_from_definition,
                                        place_errors, read_form)
from server.services import governance, workflows
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Invalid
from server.workflow import FAIL_WAIVER_ROLES, MAX_APPROVALS, TRANSITION_ROLES

router = APIRouter(prefix="/admin", include_in_schema=False)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]


def state_options(form: WorkflowForm) -> list[dict[str, Any]]:
    """The states a transition (or the on-edit choice) picks from: every state row, by its number."""
    return [{"value": i, "label": s.name or f"State {i + 1} (not named yet)"} for i, s in enumerate(form.states)]


def workflow_page_context(session: Session, actor: Actor, team_id: int, *, form: WorkflowForm | None = None,
                          errors: PlacedErrors | None = None, saved: dict | None = None,
                          conflict: str = "") -> dict[str, Any]:
    """The editor: the stored workflow's diagram, and its form (the stored definition, or the rows as typed)."""
    stored = workflows.get_workflow(session=session, actor=actor, team_id=team_id)
    shown = form if form is not None else form_from_definition(stored["definition"], stored["version"])
    if conflict:
        shown.version = stored["version"]       # saving again replaces what the other admin saved
    return {"team": {"id": stored["team_id"], "name": stored["team"]}, "version": stored["version"],
            "updated_by": stored["updated_by"], "definition": stored["definition"],
            "diagram": workflow_svg(stored["definition"], title=f"Workflow of team {stored['team']}"),
            "form": shown, "state_options": state_options(shown), "roles": list(TRANSITION_ROLES),
            "max_approvals": MAX_APPROVALS, "field_words": FIELD_WORDS, "errors": errors or PlacedErrors(),
            "saved": saved, "conflict": conflict}


def workflows_context(session: Session, actor: Actor) -> dict[str, Any]:
    rules = {r["team_id"]: r for r in governance.list_rules(session=session, actor=actor)}
    return {"workflows": workflows.list_workflows(session=session, actor=actor), "rules": rules}


def rules_page_context(session: Session, actor: Actor, team_id: int, *, typed: dict[str, Any] | None = None,
                       error: dict[str, str] | None = None, saved: bool = False) -> dict[str, Any]:
    """The waiver rules form of one team: what is stored, or what was typed when it was refused."""
    actor.require(Permission.ADMIN)
    stored = governance.get_rules(session=session, actor=actor, team_id=team_id)
    shown = typed if typed is not None else {"two_person": stored["two_person"],
                                             "fail_waiver_role": stored["fail_waiver_role"] or "",
                                             "version": stored["version"]}
    return {"team": {"id": stored["team_id"], "name": stored["team"]}, "rules": stored, "form": shown,
            "fail_roles": list(FAIL_WAIVER_ROLES), "error": error, "saved": saved}


@router.get("/workflows", response_class=HTMLResponse)
def workflow_list(request: Request, session: SessionDep, actor: Admin) -> Response:
    return render(request, "admin_workflows.html", page_context(request, actor, **workflows_context(session, actor)))


@router.get("/teams/{team_id}/workflow", response_class=HTMLResponse)
def workflow_form(request: Request, team_id: int, session: SessionDep, actor: Admin) -> Response:
    context = workflow_page_context(session, actor, team_id)
    return render(request, "admin_workflow.html", page_context(request, actor, **context))


@router.post("/teams/{team_id}/workflow", response_class=HTMLResponse)
def workflow_save(request: Request, team_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    typed = read_form(form)
    definition, state_rows, transition_rows = definition_of(typed)
    try:
        saved = workflows.set_workflow(session=session, actor=actor, team_id=team_id, definition=definition,
                                       expected_version=typed.version)
    except Invalid as exc:
        session.rollback()
        errors = place_errors(exc.details, state_rows, transition_rows)
        context = workflow_page_context(session, actor, team_id, form=typed, errors=errors)
        return render(request, "admin_workflow.html", page_context(request, actor, **context), 422)
    except Conflict as exc:
        session.rollback()
        context = workflow_page_context(session, actor, team_id, form=typed, conflict=exc.message)
        return render(request, "admin_workflow.html", page_context(request, actor, **context), 409)
    context = workflow_page_context(session, actor, team_id, saved=saved)
    return render(request, "admin_workflow.html", page_context(request, actor, **context))


@router.get("/teams/{team_id}/signoff-rules", response_class=HTMLResponse)
def rules_form(request: Request, team_id: int, session: SessionDep, actor: Admin) -> Response:
    context = rules_page_context(session, actor, team_id)
    return render(request, "admin_signoff_rules.html", page_context(request, actor, **context))


@router.post("/teams/{team_id}/signoff-rules", response_class=HTMLResponse)
def rules_save(request: Request, team_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    f = {k: v for k, v in form.items() if isinstance(v, str)}
    try:
        version = int(f.get("version", "0") or 0)
    except ValueError:
        version = -1
    typed = {"two_person": f.get("two_person") == "on", "fail_waiver_role": f.get("fail_waiver_role", ""),
             "version": version}
    try:
        governance.set_rules(session=session, actor=actor, team_id=team_id, two_person=typed["two_person"],
                             fail_waiver_role=typed["fail_waiver_role"] or None, expected_version=version)
    except (Invalid, Conflict) as exc:
        session.rollback()
        field = exc.details[0]["field"] if getattr(exc, "details", None) else "form"
        context = rules_page_context(session, actor, team_id, typed=typed,
                                     error={"field": field, "message": exc.message})
        return render(request, "admin_signoff_rules.html", page_context(request, actor, **context),
                      exc.status)
    context = rules_page_context(session, actor, team_id, saved=True)
    return render(request, "admin_signoff_rules.html", page_context(request, actor, **context))


__all__ = ["router", "workflow_page_context", "workflows_context", "state_options", "rules_page_context"]
