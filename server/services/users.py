"""Users, teams and API tokens."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.auth import hash_password, new_token, token_digest
from server.models import ApiToken, Role, Team, TeamMember, User, utcnow
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services import workflows
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict

__all__ = ["ROLES", "user_dict", "get_or_create_team", "create_user", "set_role", "list_users", "get_user_by_name",
           "create_token", "revoke_token", "list_tokens", "add_to_team", "get_user", "update_user", "me_dict",
           "token_dict"]

ROLES = [r.value for r in Role]


def user_dict(u: User) -> dict:
    return {"id": u.id, "username": u.username, "display_name": u.display_name, "role": u.role,
            "active": u.active, "teams": sorted(t.name for t in u.teams)}


def _check_role(role: str) -> None:
    if role not in ROLES:
        raise Invalid(f"unknown role '{role}': use one of {', '.join(ROLES)}",
                      details=[{"field": "role", "message": f"must be one of {', '.join(ROLES)}"}])


def get_or_create_team(*, session: Session, actor: Actor, name: str) -> Team:
    team = session.scalar(select(Team).where(Team.name == name))
    if team is None:
        actor.require(Permission.ADMIN)
        team = Team(name=name)
        session.add(team)
        session.flush()
        record(session, actor, action="create", object_type="team", object_id=team.id, object_repr=name,
               after={"name": name})
        workflows.ensure_default(session, actor, team)
    return team


def create_user(*, session: Session, actor: Actor, username: str, role: str, password: str | None,
                display_name: str = "", teams: list[str] = ()) -> User:
    actor.require(Permission.ADMIN)
    _check_role(role)
    if password is not None:
        _check_password(password)
    user = User(username=username, display_name=display_name or username, role=role,
                password_hash=hash_password(password) if password else None)
    session.add(user)
    flush_or_conflict(session, f"a user named '{username}' exists already")
    for name in teams:
        team = get_or_create_team(session=session, actor=actor, name=name)
        session.add(TeamMember(team_id=team.id, user_id=user.id))
    session.flush()
    session.refresh(user)
    record(session, actor, action="create", object_type="user", object_id=user.id, object_repr=username,
           after=user_dict(user))
    session.commit()
    return user


def add_to_team(*, session: Session, actor: Actor, username: str, team: str) -> User:
    actor.require(Permission.ADMIN)
    user = get_user_by_name(session=session, username=username)
    t = get_or_create_team(session=session, actor=actor, name=team)
    if t.id not in user.team_ids:
        before = user_dict(user)
        session.add(TeamMember(team_id=t.id, user_id=user.id))
        session.flush()
        session.refresh(user)
        record(session, actor, action="update", object_type="user", object_id=user.id, object_repr=username,
               before=before, after=user_dict(user))
    session.commit()
    return user


def get_user_by_name(*, session: Session, username: str) -> User:
    user = session.scalar(select(User).where(User.username == username))
    if user is None:
        raise NotFound(f"no user '{username}'")
    return user


def set_role(*, session: Session, actor: Actor, username: str, role: str) -> User:
    actor.require(Permission.ADMIN)
    _check_role(role)
    user = get_user_by_name(session=session, username=username)
    before = user_dict(user)
    user.role = role
    record(session, actor, action="update", object_type="user", object_id=user.id, object_repr=username,
           before=before, after=user_dict(user))
    session.commit()
    return user


def list_users(*, session: Session, actor: Actor) -> list[User]:
    actor.require(Permission.ADMIN)
    return list(session.scalars(select(User).order_by(User.username)))


def create_token(*, session: Session, actor: Actor, username: str, name: str) -> tuple[ApiToken, str]:
    """Create an API token for ``username`` (its owner or an admin); the clear token is returned once."""
    user = get_user_by_name(session=session, username=username)
    if actor.user_id != user.id and not actor.can(Permission.ADMIN):
        raise Forbidden("only the token's owner or an admin may create it")
    clear = new_token()
    token = ApiToken(user_id=user.id, name=name, token_sha256=token_digest(clear))
    session.add(token)
    session.flush()
    record(session, actor, action="create", object_type="api_token", object_id=token.id,
           object_repr=f"{username}/{name}", after={"user": username, "name": name})
    session.commit()
    return token, clear


def list_tokens(*, session: Session, actor: Actor, username: str) -> list[ApiToken]:
    user = get_user_by_name(session=session, username=username)
    if actor.user_id != user.id and not actor.can(Permission.ADMIN):
        raise Forbidden("only the owner or an admin may list tokens")
    return list(session.scalars(select(ApiToken).where(ApiToken.user_id == user.id).order_by(ApiToken.id)))


def revoke_token(*, session: Session, actor: Actor, token_id: int) -> ApiToken:
    token = session.get(ApiToken, token_id)
    if token is None or (actor.user_id != token.user_id and not actor.can(Permission.ADMIN)):
        raise NotFound(f"no token {token_id}")
    if token.revoked_at is None:
        token.revoked_at = utcnow()
        owner = session.get(User, token.user_id)
        record(session, actor, action="revoke", object_type="api_token", object_id=token.id,
               object_repr=f"{owner.username if owner else token.user_id}/{token.name}", before={"revoked": False},
               after={"revoked": True})
    session.commit()
    return token


def _check_password(password: str) -> None:
    if len(password) < 8:
        raise Invalid("a password needs at least 8 characters",
                      details=[{"field": "password", "message": "needs at least 8 characters"}])


def get_user(*, session: Session, actor: Actor, user_id: int) -> User:
    actor.require(Permission.ADMIN)
    user = session.get(User, user_id)
    if user is None:
        raise NotFound(f"no user {user_id}")
    return user


def update_user(*, session: Session, actor: Actor, user_id: int, role: str | None = None,
                display_name: str | None = None, active: bool | None = None, password: str | None = None) -> User:
    """Change a user's role, name, whether they may log in, or password (admins). The audit shows no password."""
    actor.require(Permission.ADMIN)
    user = get_user(session=session, actor=actor, user_id=user_id)
    before = user_dict(user)
    if role is not None:
        _check_role(role)
        user.role = role
    if display_name is not None:
        user.display_name = display_name
    if active is not None:
        if not active and user.id == actor.user_id:
            raise Conflict("you cannot disable your own account")
        user.active = active
    if password is not None:
        _check_password(password)
        user.password_hash = hash_password(password)
    after = user_dict(user)
    if password is not None:
        after["password"] = "changed"
    record(session, actor, action="update", object_type="user", object_id=user.id, object_repr=user.username,
           before=before, after=after)
    session.commit()
    return user


def me_dict(actor: Actor, *, auth: str | None = None, csrf_token: str | None = None) -> dict:
    """Who the actor is, their teams (with ids) and what their role allows."""
    from server.services.access import ROLE_PERMISSIONS

    user = actor.user
    out = {"id": actor.user_id, "username": actor.name, "display_name": user.display_name if user else actor.name,
           "role": actor.role, "permissions": sorted(ROLE_PERMISSIONS.get(actor.role, ())),
           "teams": sorted(({"id": t.id, "name": t.name} for t in user.teams), key=lambda t: t["name"]) if user else [],
           "auth": auth}
    if csrf_token:
        out["csrf_token"] = csrf_token
    return out


def token_dict(t: ApiToken, owner: str | None = None) -> dict:
    return {"id": t.id, "name": t.name, "user_id": t.user_id, **({"user": owner} if owner else {}),
            "created_at": t.created_at.isoformat(), "last_used_at": t.last_used_at.isoformat() if t.last_used_at else None,
            "revoked": t.revoked_at is not None, "revoked_at": t.revoked_at.isoformat() if t.revoked_at else None}
