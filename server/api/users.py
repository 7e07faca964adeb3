"""Users (admins): /api/v1/users."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, TypedRoute, errors
from server.auth import require
from server.db import SessionDep
from server.schemas.accounts import UserIn, UserPatch
from server.schemas.responses import Listing, User, UserListItem
from server.services import users
from server.services.access import Actor, Permission

router = APIRouter(prefix="/users", tags=["users"], route_class=TypedRoute)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]


@router.get("", response_model=Listing[UserListItem], responses=errors(401, 403))
def list_users(session: SessionDep, actor: Admin) -> dict:
    rows = users.list_users(session=session, actor=actor)
    return {"items": [{**users.user_dict(u), "created_at": u.created_at.isoformat()} for u in rows],
            "total": len(rows)}


@router.post("", status_code=201, response_model=User, responses=errors(400, 401, 403, 409, 422))
def create_user(body: UserIn, session: SessionDep, actor: Admin, response: Response) -> dict:
    user = users.create_user(session=session, actor=actor, username=body.username, role=body.role,
                             password=body.password, display_name=body.display_name, teams=body.teams)
    response.headers["Location"] = f"/api/v1/users/{user.id}"
    return users.user_dict(user)


@router.get("/{user_id}", response_model=User, responses=errors(401, 403, 404, 422))
def get_user(user_id: IdPath, session: SessionDep, actor: Admin) -> dict:
    return users.user_dict(users.get_user(session=session, actor=actor, user_id=user_id))


@router.patch("/{user_id}", response_model=User, responses=errors(400, 401, 403, 404, 409, 422))
def update_user(user_id: IdPath, body: UserPatch, session: SessionDep, actor: Admin) -> dict:
    user = users.update_user(session=session, actor=actor, user_id=user_id, **body.model_dump(exclude_unset=True))
    return users.user_dict(user)
