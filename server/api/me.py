"""Who is logged in: /api/v1/me."""

from __future__ import annotations

from fastapi import APIRouter, Request

from server.api.common import TypedRoute, errors
from server.auth import CurrentActor
from server.csrf import masked
from server.schemas.responses import Me
from server.services import users

router = APIRouter(prefix="/me", tags=["me"], route_class=TypedRoute)


@router.get("", response_model=Me, responses=errors(401))
def me(request: Request, actor: CurrentActor) -> dict:
    """Your account, teams and permissions; with a session cookie, also the CSRF token for X-CSRF-Token."""
    return users.me_dict(actor, auth=getattr(request.state, "auth", None),
                         csrf_token=masked(getattr(request.state, "csrf_token", None) or ""))
