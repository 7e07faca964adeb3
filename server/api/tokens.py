"""API tokens: /api/v1/tokens. Owners manage their own, admins anyone's; a token is shown once."""

from __future__ import annotations

from fastapi import APIRouter, Response
from sqlalchemy.orm import Session

from server.api.common import IdPath, IdQuery, TypedRoute, errors
from server.auth import CurrentActor
from server.db import SessionDep
from server.schemas.accounts import TokenIn
from server.schemas.responses import Listing, NewToken, Token
from server.services import users
from server.services.access import Actor

router = APIRouter(prefix="/tokens", tags=["tokens"], route_class=TypedRoute)


def _username(session: Session, actor: Actor, user_id: int | None) -> str:
    """The owner a request names (default: the caller); naming someone else needs an admin."""
    if user_id is None or user_id == actor.user_id:
        return actor.name
    return users.get_user(session=session, actor=actor, user_id=user_id).username


@router.get("", response_model=Listing[Token], responses=errors(401, 403, 404, 422))
def list_tokens(session: SessionDep, actor: CurrentActor, user_id: IdQuery = None) -> dict:
    username = _username(session, actor, user_id)
    rows = users.list_tokens(session=session, actor=actor, username=username)
    return {"items": [users.token_dict(t, username) for t in rows], "total": len(rows)}


@router.post("", status_code=201, response_model=NewToken, responses=errors(400, 401, 403, 404, 422))
def create_token(body: TokenIn, session: SessionDep, actor: CurrentActor, response: Response) -> dict:
    username = _username(session, actor, body.user_id)
    token, clear = users.create_token(session=session, actor=actor, username=username, name=body.name)
    response.headers["Cache-Control"] = "no-store"
    return {**users.token_dict(token, username), "token": clear,
            "note": "shown once: store it now; railsign keeps only its hash"}


@router.delete("/{token_id}", response_model=Token, responses=errors(401, 403, 404, 422))
def revoke_token(token_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return users.token_dict(users.revoke_token(session=session, actor=actor, token_id=token_id))
