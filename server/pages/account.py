"""The account page: who you are, your teams, your API tokens (created here, shown once)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from server.auth import CurrentActor
from server.db import SessionDep
from server.pages.common import page_context, render
from server.services import users
from server.services.access import Actor

router = APIRouter(include_in_schema=False)


def account_context(session: Session, actor: Actor, *, new_token: dict | None = None, error: str = "") -> dict:
    tokens = users.list_tokens(session=session, actor=actor, username=actor.name) if actor.user else []
    return {"me": users.me_dict(actor), "tokens": [users.token_dict(t) for t in tokens], "new_token": new_token,
            "error": error}


@router.get("/account", response_class=HTMLResponse)
def account(request: Request, session: SessionDep, actor: CurrentActor) -> Response:
    return render(request, "account.html", page_context(request, actor, **account_context(session, actor)))


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


__all__ = ["router", "account_context"]
