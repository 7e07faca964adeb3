"""Admin pages: the teams' workflows, each edited as a plain form of states and transitions."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session

from server.auth import require
from server.db import SessionDep
from server.pages.common import FormDep, page_context, render
from server.services import workflows
from server.services.access import Actor, Permission
from server.services.errors import Invalid
from server.workflow import MAX_STATES, MAX_TRANSITIONS, TRANSITION_ROLES

router = APIRouter(prefix="/admin", include_in_schema=False)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]
EXTRA_STATES = 2
EXTRA_TRANSITIONS = 3


def _text(form: Mapping[str, Any], key: str) -> str:
    value = form.get(key)
    return value.strip() if isinstance(value, str) else ""


def _count(form: Mapping[str, Any], key: str, cap: int) -> int:
    try:
        return max(0, min(int(_text(form, key) or 0), cap))
    except ValueError:
        return 0


def definition_from_form(form: Any) -> dict[str, Any]:
    """The workflow definition typed into the page's form; rows with an empty name are left out."""
    states = []
    for i in range(_count(form, "state_count", MAX_STATES + EXTRA_STATES)):
        name = _text(form, f"state-{i}-name")
        if name:
            states.append({"name": name, "initial": _text(form, "initial") == str(i),
                           "signed_off": _text(form, f"state-{i}-signed_off") == "on",
                           "description": _text(form, f"state-{i}-description")})
    transitions = []
    for i in range(_count(form, "transition_count", MAX_TRANSITIONS + EXTRA_TRANSITIONS)):
        name = _text(form, f"tr-{i}-name")
        if not name:
            continue
        raw = _text(form, f"tr-{i}-approvals") or "0"
        approvals: Any = int(raw) if raw.isdigit() else raw
        roles = form.getlist(f"tr-{i}-roles") if hasattr(form, "getlist") else form.get(f"tr-{i}-roles", [])
        transitions.append({"name": name, "from": _text(form, f"tr-{i}-from"), "to": _text(form, f"tr-{i}-to"),
                            "roles": [r for r in roles if isinstance(r, str)],
                            "demands": {"approvals": approvals,
                                        "checks_pass": _text(form, f"tr-{i}-checks_pass") == "on",
                                        "no_stale_approvals": _text(form, f"tr-{i}-no_stale") == "on"}})
    return {"name": _text(form, "name"), "states": states, "transitions": transitions,
            "on_edit": _text(form, "on_edit")}


def workflow_page_context(session: Session, actor: Actor, team_id: int, *, definition: dict | None = None,
                          errors: list[dict] | None = None, saved: dict | None = None) -> dict[str, Any]:
    """The rows the form shows: the stored (or just typed) definition plus a few empty rows to add with."""
    stored = workflows.get_workflow(session=session, actor=actor, team_id=team_id)
    shown = definition if definition is not None else stored["definition"]
    blank_state = {"name": "", "initial": False, "signed_off": False, "description": ""}
    blank_transition = {"name": "", "from": "", "to": "", "roles": [],
                        "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}}
    return {"team": {"id": stored["team_id"], "name": stored["team"]}, "version": stored["version"],
            "definition": shown, "states": list(shown["states"]) + [blank_state] * EXTRA_STATES,
            "transitions": list(shown["transitions"]) + [blank_transition] * EXTRA_TRANSITIONS,
            "state_names": [s["name"] for s in shown["states"]], "roles": list(TRANSITION_ROLES),
            "errors": errors or [], "saved": saved}


@router.get("/workflows", response_class=HTMLResponse)
def workflow_list(request: Request, session: SessionDep, actor: Admin) -> Response:
    items = workflows.list_workflows(session=session, actor=actor)
    return render(request, "admin_workflows.html", page_context(request, actor, workflows=items))


@router.get("/teams/{team_id}/workflow", response_class=HTMLResponse)
def workflow_form(request: Request, team_id: int, session: SessionDep, actor: Admin) -> Response:
    context = workflow_page_context(session, actor, team_id)
    return render(request, "admin_workflow.html", page_context(request, actor, **context))


@router.post("/teams/{team_id}/workflow", response_class=HTMLResponse)
def workflow_save(request: Request, team_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    definition = definition_from_form(form)
    try:
        saved = workflows.set_workflow(session=session, actor=actor, team_id=team_id, definition=definition)
    except Invalid as exc:
        session.rollback()
        context = workflow_page_context(session, actor, team_id, definition=definition, errors=exc.details)
        return render(request, "admin_workflow.html", page_context(request, actor, **context), 422)
    context = workflow_page_context(session, actor, team_id, saved=saved)
    return render(request, "admin_workflow.html", page_context(request, actor, **context))
