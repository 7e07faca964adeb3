"""The account page: who you are, what your role lets you do (in words), your password, your API tokens."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from server.auth import SESSION_COOKIE, CurrentActor
from server.db import SessionDep
from server.pages.common import page_context, render
from server.services import users
from server.services.access import Actor, role_abilities
from server.services.errors import Forbidden, Invalid

router = APIRouter(include_in_schema=False)
PASSWORD_CHANGED = "Your password was changed. You stay logged in here; every other login with the old password has ended."


def account_context(session: Session, actor: Actor, *, new_token: dict | None = None, error: str = "",
                    password_errors: dict[str, str] | None = None, done: str = "") -> dict:
    tokens = users.list_tokens(session=session, actor=actor, username=actor.name) if actor.user else []
    return {"me": users.me_dict(actor), "abilities": role_abilities(actor.role),
            "has_password": bool(actor.user and actor.user.password_hash),
            "tokens": [users.token_dict(t) for t in tokens], "new_token": new_token, "error": error,
            "password_errors": password_errors or {}, "notice": PASSWORD_CHANGED if done == "password" else ""}


@router.get("/account", response_class=HTMLResponse)
def account(request: Request, session: SessionDep, actor: CurrentActor, done: str = "") -> Response:
    return render(request, "account.html", page_context(request, actor, **account_context(session, actor, done=done)))


@router.post("/account/password", response_class=HTMLResponse)
def change_password(request: Request, session: SessionDep, actor: CurrentActor,
                    current_password: Annotated[str, Form()] = "", new_password: Annotated[str, Form()] = "",
                    new_password_repeat: Annotated[str, Form()] = "") -> Response:
    """Change your own password; the session it came from is renewed (a new cookie of the new password)."""
    errors: dict[str, str] = {}
    if new_password != new_password_repeat:
        errors["new_password_repeat"] = "differs from the new password"
    if not errors:
        try:
            user = users.change_own_password(session=session, actor=actor, current_password=current_password,
                                             new_password=new_password)
        except (Invalid, Forbidden) as exc:
            session.rollback()
            errors = {d["field"]: d["message"] for d in exc.details} or {"current_password": exc.message}
    if errors:
        context = account_context(session, actor, password_errors=errors)
        return render(request, "account.html", page_context(request, actor, **context), 422)
    response = RedirectResponse("/account?done=password", status_code=303)
    if getattr(request.state, "auth", None) == "cookie":
        cookie = request.app.state.session_cookie
        value, _ = cookie.dump(user.id, user.password_hash, user.session_generation)
        response.set_cookie(SESSION_COOKIE, value, **cookie.cookie_kwargs())
    return response


@router.post("/account/tokens", response_class=HTMLResponse)
def create_token(request: Request, session: SessionDep, actor: CurrentActor,
                 name: Annotated[str, Form()] = "") -> Response:
    name = name.strip()
    if not name:
        context = account_context(session, actor, error="Give the token a name, for example where it will be used.")
        return render(request, "account.html", page_context(request, actor, **context), 422)
    token, clear = users.create_token(session=session, actor=actor, username=actor.name, name=name[:100])
    context = account_context(session, actor, new_token={"id": token.id, "name": token.name, "token": clear})
    response = render(request, "account.html", page_context(request, actor, **context), 201)
    response.headers["Cache-Control"] = "no-store"
    return response


@router.post("/account/tokens/{token_id}/revoke")
def revoke_token(token_id: int, session: SessionDep, actor: CurrentActor) -> Response:
    users.revoke_token(session=session, actor=actor, token_id=token_id)
    return RedirectResponse("/account", status_code=303)


__all__ = ["router", "account_context", "PASSWORD_CHANGED"]
