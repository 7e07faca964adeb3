"""Admin pages: users (add one; set the role, name and teams; disable or enable; set a password;
revoke API tokens) and teams (add one).

Each form writes through the service that owns its table: :func:`server.services.users.create_user`
and :func:`~server.services.users.update_user` (the one writer of a role), :func:`~server.services.users.revoke_token`,
:func:`server.services.teams.set_memberships` and :func:`~server.services.teams.create_team`, each with its audit
entry in its own transaction. A form's fields are checked by the API's request bodies
(:mod:`server.schemas.accounts`), so the pages and the API accept the same values.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from pydantic import ValidationError
from sqlalchemy.orm import Session

from server.auth import require
from server.db import SessionDep
from server.pages.common import FormDep, page_context, render
from server.pages.rendering import redirect
from server.schemas.accounts import TeamIn, UserIn, UserPatch
from server.services import teams, users
from server.services.access import Actor, Permission, role_abilities
from server.services.errors import Conflict, Invalid, NotFound

router = APIRouter(prefix="/admin", include_in_schema=False)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]

# What a person reads when a field is refused (the request body's rules, in words).
FIELD_PROBLEMS = {
    "username": "is required: letters, digits and . _ @ - only, at most 64 characters",
    "display_name": "is at most 200 characters",
    "role": "choose one of the roles",
    "password": "needs at least 8 characters",
    "name": "is required: at most 100 characters",
}
# Notices after a change, by the word the redirect carries (nothing typed is ever echoed).
NOTICES = {
    "created": "The user was added.",
    "profile": "Name and role saved.",
    "teams": "Teams saved.",
    "disabled": "The user is disabled: they can no longer log in, their sessions have ended and their API tokens "
                "are refused.",
    "enabled": "The user is enabled again: they can log in, and their API tokens that were not revoked work again.",
    "password": "New password set. Every session of the old password has ended.",
    "revoked": "The token was revoked: it is refused from now on.",
    "team": "The team was added, with the default workflow.",
}


def _problems(exc: ValidationError) -> dict[str, str]:
    out: dict[str, str] = {}
    for error in exc.errors():
        name = str(error["loc"][0]) if error["loc"] else ""
        out.setdefault(name, FIELD_PROBLEMS.get(name, error["msg"]))
    return out


def _details(exc: Invalid | Conflict, default: str) -> dict[str, str]:
    """A service's refusal as field problems (its details), or on ``default`` when it names no field."""
    if exc.details:
        return {d["field"]: d["message"] for d in exc.details}
    return {default: exc.message}


def roles_in_words() -> list[dict[str, Any]]:
    return [{"role": role, "abilities": role_abilities(role)} for role in users.ROLES]


def _team_choices(session: Session, actor: Actor) -> list[dict[str, Any]]:
    return [{"id": t.id, "name": t.name} for t in teams.list_teams(session=session, actor=actor)]


def users_context(session: Session, actor: Actor, *, values: dict[str, Any] | None = None,
                  errors: dict[str, str] | None = None, team_name: str = "", team_errors: dict[str, str] | None = None,
                  done: str = "") -> dict[str, Any]:
    """The users page: every user with their teams and active tokens, the roles in words, the forms to add."""
    rows = []
    for u in users.list_users(session=session, actor=actor):
        tokens = users.list_tokens(session=session, actor=actor, username=u.username)
        rows.append({**users.user_dict(u), "tokens": sum(1 for t in tokens if t.revoked_at is None),
                     "created_at": u.created_at})
    return {"users": rows, "roles": roles_in_words(), "role_names": list(users.ROLES),
            "teams": _team_choices(session, actor), "values": values or {"role": "designer", "teams": []},
            "errors": errors or {}, "team_name": team_name, "team_errors": team_errors or {},
            "notice": NOTICES.get(done, "")}


def user_context(session: Session, actor: Actor, user_id: int, *, errors: dict[str, dict[str, str]] | None = None,
                 values: dict[str, Any] | None = None, done: str = "") -> dict[str, Any]:
    """One user's page: their facts, the forms that change them, their API tokens."""
    user = users.get_user(session=session, actor=actor, user_id=user_id)
    tokens = users.list_tokens(session=session, actor=actor, username=user.username)
    return {"user": {**users.user_dict(user), "created_at": user.created_at, "has_password": bool(user.password_hash),
                     "team_ids": sorted(user.team_ids), "abilities": role_abilities(user.role)},
            "is_self": user.id == actor.user_id, "tokens": [users.token_dict(t) for t in tokens],
            "roles": roles_in_words(), "role_names": list(users.ROLES), "teams": _team_choices(session, actor),
            "errors": errors or {}, "values": values or {}, "notice": NOTICES.get(done, "")}


def _render_users(request: Request, session: Session, actor: Actor, status: int = 200, **extra: Any) -> Response:
    return render(request, "admin_users.html", page_context(request, actor, **users_context(session, actor, **extra)),
                  status)


def _render_user(request: Request, session: Session, actor: Actor, user_id: int, status: int = 200,
                 **extra: Any) -> Response:
    context = user_context(session, actor, user_id, **extra)
    return render(request, "admin_user.html", page_context(request, actor, **context), status)


def _ints(values: list[Any]) -> list[int]:
    return [int(v) for v in values if isinstance(v, str) and v.isdigit()]


@router.get("/users", response_class=HTMLResponse)
def user_list(request: Request, session: SessionDep, actor: Admin, done: str = "") -> Response:
    return _render_users(request, session, actor, done=done)


@router.post("/users", response_class=HTMLResponse)
def user_create(request: Request, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    team_ids = _ints(form.getlist("teams"))
    values = {k: str(form.get(k) or "").strip() for k in ("username", "display_name", "role")}
    values["teams"] = team_ids
    password, repeat = str(form.get("password") or ""), str(form.get("password_repeat") or "")
    errors: dict[str, str] = {}
    names = {t["id"]: t["name"] for t in _team_choices(session, actor)}
    try:
        body = UserIn(username=values["username"], role=values["role"] or None, display_name=values["display_name"],
                      password=password or None, teams=[names[i] for i in team_ids if i in names])
    except ValidationError as exc:
        errors = _problems(exc)
    if password != repeat:
        errors.setdefault("password_repeat", "differs from the password")
    if errors:
        return _render_users(request, session, actor, 422, values=values, errors=errors)
    try:
        user = users.create_user(session=session, actor=actor, username=body.username, role=body.role,
                                 password=body.password, display_name=body.display_name, teams=body.teams)
    except (Invalid, Conflict) as exc:
        session.rollback()
        return _render_users(request, session, actor, 409 if isinstance(exc, Conflict) else 422, values=values,
                             errors=_details(exc, "username"))
    return redirect(f"/admin/users/{user.id}?done=created")


@router.post("/teams", response_class=HTMLResponse)
def team_create(request: Request, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    name = " ".join(str(form.get("name") or "").split())
    try:
        body = TeamIn(name=name)
        teams.create_team(session=session, actor=actor, name=body.name)
    except ValidationError as exc:
        return _render_users(request, session, actor, 422, team_name=name, team_errors=_problems(exc))
    except (Invalid, Conflict) as exc:
        session.rollback()
        return _render_users(request, session, actor, 409 if isinstance(exc, Conflict) else 422, team_name=name,
                             team_errors=_details(exc, "name"))
    return redirect("/admin/users?done=team")


@router.get("/users/{user_id}", response_class=HTMLResponse)
def user_page(request: Request, user_id: int, session: SessionDep, actor: Admin, done: str = "") -> Response:
    return _render_user(request, session, actor, user_id, done=done)


@router.post("/users/{user_id}/profile", response_class=HTMLResponse)
def user_profile(request: Request, user_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    user = users.get_user(session=session, actor=actor, user_id=user_id)
    values = {k: str(form.get(k) or "").strip() for k in ("display_name", "role")}
    try:
        body = UserPatch(display_name=values["display_name"] or user.username, role=values["role"] or None)
        users.update_user(session=session, actor=actor, user_id=user_id, display_name=body.display_name,
                          role=body.role)
    except ValidationError as exc:
        return _render_user(request, session, actor, user_id, 422, values=values, errors={"profile": _problems(exc)})
    except (Invalid, Conflict) as exc:
        session.rollback()
        return _render_user(request, session, actor, user_id, 409 if isinstance(exc, Conflict) else 422,
                            values=values, errors={"profile": _details(exc, "role")})
    return redirect(f"/admin/users/{user_id}?done=profile")


@router.post("/users/{user_id}/teams", response_class=HTMLResponse)
def user_teams(request: Request, user_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    users.get_user(session=session, actor=actor, user_id=user_id)          # an unknown user: not found
    try:
        teams.set_memberships(session=session, actor=actor, user_id=user_id, team_ids=_ints(form.getlist("teams")))
    except Invalid as exc:
        session.rollback()
        return _render_user(request, session, actor, user_id, 422, errors={"teams": _details(exc, "team_ids")})
    return redirect(f"/admin/users/{user_id}?done=teams")


@router.post("/users/{user_id}/access", response_class=HTMLResponse)
def user_access(request: Request, user_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    action = form.get("action")
    if action not in ("disable", "enable"):
        users.get_user(session=session, actor=actor, user_id=user_id)
        return _render_user(request, session, actor, user_id, 422,
                            errors={"access": {"action": "choose to disable or to enable the user"}})
    try:
        users.update_user(session=session, actor=actor, user_id=user_id, active=action == "enable")
    except Conflict as exc:
        session.rollback()
        return _render_user(request, session, actor, user_id, 409, errors={"access": {"action": exc.message}})
    return redirect(f"/admin/users/{user_id}?done={action}d")


@router.post("/users/{user_id}/password", response_class=HTMLResponse)
def user_password(request: Request, user_id: int, form: FormDep, session: SessionDep, actor: Admin) -> Response:
    password, repeat = str(form.get("password") or ""), str(form.get("password_repeat") or "")
    errors: dict[str, str] = {}
    try:
        body = UserPatch(password=password)
    except ValidationError as exc:
        errors = _problems(exc)
    if password != repeat:
        errors.setdefault("password_repeat", "differs from the password")
    if errors:
        users.get_user(session=session, actor=actor, user_id=user_id)
        return _render_user(request, session, actor, user_id, 422, errors={"password": errors})
    users.update_user(session=session, actor=actor, user_id=user_id, password=body.password)
    return redirect(f"/admin/users/{user_id}?done=password")


@router.post("/users/{user_id}/tokens/{token_id}/revoke", response_class=HTMLResponse)
def user_token_revoke(request: Request, user_id: int, token_id: int, session: SessionDep, actor: Admin) -> Response:
    user = users.get_user(session=session, actor=actor, user_id=user_id)
    if token_id not in {t.id for t in users.list_tokens(session=session, actor=actor, username=user.username)}:
        raise NotFound(f"user {user.username} has no token {token_id}")
    users.revoke_token(session=session, actor=actor, token_id=token_id)
    return redirect(f"/admin/users/{user_id}?done=revoked")


__all__ = ["router", "users_context", "user_context", "roles_in_words", "FIELD_PROBLEMS", "NOTICES"]
