"""Users and their API tokens: the one write path of the ``users`` and ``api_tokens`` tables.

A user's role, name, password and whether they may log in are written by one step,
``_apply_changes``, behind two commands: :func:`update_user` (admins, any of them) and
:func:`change_own_password` (a user, their own password, giving the current one). Their teams
change through :mod:`server.services.teams`. Tokens are made, revoked and marked used here
(:func:`note_token_use`, for :mod:`server.auth`).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from server.credentials import hash_password, new_token, token_digest, verify_password
from server.models import ApiToken, Role, User, utcnow
from server.services.access import ROLE_PERMISSIONS, Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict
from server.services.teams import join_teams

__all__ = ["ROLES", "TOKEN_USE_INTERVAL_S", "user_dict", "create_user", "end_sessions", "list_users", "get_user_by_name",
           "create_token", "revoke_token", "list_tokens", "user_for_token", "note_token_use", "get_user",
           "update_user", "change_own_password", "me_dict", "token_dict"]

ROLES = [r.value for r in Role]


def user_dict(u: User) -> dict:
    return {"id": u.id, "username": u.username, "display_name": u.display_name, "role": u.role,
            "active": u.active, "teams": sorted(t.name for t in u.teams)}


def _check_role(role: str) -> None:
    if role not in ROLES:
        raise Invalid(f"unknown role '{role}': use one of {', '.join(ROLES)}",
                      details=[{"field": "role", "message": f"must be one of {', '.join(ROLES)}"}])


def create_user(*, session: Session, actor: Actor, username: str, role: str, password: str | None,
                display_name: str = "", teams: Sequence[str] = ()) -> User:
    """A new user (admins), put in the teams named (a team that does not exist yet is created), in one
    transaction: the user's audit entry, then each membership's (:func:`server.services.teams.join_teams`)."""
    actor.require(Permission.ADMIN)
    _check_role(role)
    if password is not None:
        _check_password(password)
    user = User(username=username, display_name=display_name or username, role=role,
                password_hash=hash_password(password) if password else None)
    session.add(user)
    flush_or_conflict(session, f"a user named '{username}' exists already")
    record(session, actor, action="create", object_type="user", object_id=user.id, object_repr=username,
           after={**user_dict(user), "teams": sorted(set(teams))})
    join_teams(session, actor, user, teams)
    session.commit()
    return user


def get_user_by_name(*, session: Session, username: str) -> User:
    """A user by name, whoever asks (the command line names the user it acts as)."""
    user = session.scalar(select(User).where(User.username == username))
    if user is None:
        raise NotFound(f"no user '{username}'")
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


def user_for_token(*, session: Session, token: str) -> tuple[User, ApiToken] | None:
    """The active user an API token belongs to, with the token's row; None for an unknown or
    revoked token or a disabled user (authentication: nobody is acting yet)."""
    row = session.scalar(select(ApiToken).where(ApiToken.token_sha256 == token_digest(token)))
    if row is None or row.revoked_at is not None:
        return None
    user = session.get(User, row.user_id)
    if user is None or not user.active:
        return None
    return user, row


TOKEN_USE_INTERVAL_S = 60.0   # a token's last use is written at most this often


def note_token_use(*, session: Session, token_id: int, last_used_at: datetime | None,
                   now: datetime | None = None) -> bool:
    """Record when a token was last used, at most once a minute; True when it wrote (and committed).

    A usage stamp, not a change anyone made: no audit entry. ``last_used_at`` is what the
    caller read with the token, so a token used again within the minute costs no write.
    """
    now = now or utcnow()
    if last_used_at is not None and (now - last_used_at).total_seconds() < TOKEN_USE_INTERVAL_S:
        return False
    session.execute(update(ApiToken).where(ApiToken.id == token_id).values(last_used_at=now))
    session.commit()
    return True


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


def _apply_changes(session: Session, actor: Actor, user: User, *, role: str | None = None,
                   display_name: str | None = None, active: bool | None = None, password: str | None = None) -> None:
    """Write a user's role, name, whether they may log in, or password, with one audit entry that shows
    no password: the one writer of these columns (the caller checks who may, and commits).

    A new password ends every session of the old one (session cookies carry a fingerprint of the
    password hash, :mod:`server.auth`)."""
    before = user_dict(user)
    if role is not None:
        _check_role(role)
        if role != user.role and user.id == actor.user_id:
            raise Conflict("you cannot change your own role: ask another admin")
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


def update_user(*, session: Session, actor: Actor, user_id: int, role: str | None = None,
                display_name: str | None = None, active: bool | None = None, password: str | None = None) -> User:
    """Change a user's role, name, whether they may log in, or password (admins); an admin keeps their own
    role and cannot disable themself."""
    actor.require(Permission.ADMIN)
    user = get_user(session=session, actor=actor, user_id=user_id)
    _apply_changes(session, actor, user, role=role, display_name=display_name, active=active, password=password)
    session.commit()
    return user


def end_sessions(*, session: Session, user_id: int) -> None:
    """End every session cookie of the user issued so far (logout): their generation moves on.
    The caller commits, with its audit entry."""
    user = session.get(User, user_id)
    if user is not None:
        user.session_generation = (user.session_generation or 0) + 1


def change_own_password(*, session: Session, actor: Actor, current_password: str, new_password: str) -> User:
    """Set the actor's own password, given their current one (any role).

    A wrong current password is refused (422 on ``current_password``) and recorded as
    ``password_change_refused``; a new password must differ from the current one. The caller
    renews the session it came from: the change ends every session of the old password.
    """
    user = session.get(User, actor.user_id) if actor.user_id is not None else None
    if user is None or not user.active:
        raise Forbidden("only a user who is logged in can change their own password")
    if not user.password_hash:
        raise Invalid("your account has no password to change: an admin sets the first one",
                      details=[{"field": "current_password", "message": "your account has no password yet"}])
    if not verify_password(user.password_hash, current_password or ""):
        record(session, actor, action="password_change_refused", object_type="user", object_id=user.id,
               object_repr=user.username, after={"reason": "wrong current password"})
        session.commit()
        raise Invalid("the current password is not right",
                      details=[{"field": "current_password", "message": "is not your current password"}])
    if verify_password(user.password_hash, new_password or ""):
        raise Invalid("the new password is the current one",
                      details=[{"field": "new_password", "message": "must differ from the current password"}])
    try:
        _check_password(new_password or "")
    except Invalid as exc:
        raise Invalid(exc.message, details=[{"field": "new_password", "message": "needs at least 8 characters"}]) \
            from None
    _apply_changes(session, actor, user, password=new_password)
    session.commit()
    return user


def me_dict(actor: Actor, *, auth: str | None = None, csrf_token: str | None = None) -> dict:
    """Who the actor is, their teams (with ids) and what their role allows."""
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
