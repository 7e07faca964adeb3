"""Authentication: API tokens and signed session cookies to the current actor; route permissions.

Every route except ``/healthz`` and the login page depends on :func:`current_actor`; routes
that need more than reading declare it with :func:`require` (``Depends(require("edit"))``),
so the permission a route needs is written on the route and checked in one place.
"""

from __future__ import annotations

import logging
import secrets
from datetime import datetime
from typing import Annotated, Any

from fastapi import Depends, Request
from itsdangerous import BadSignature, SignatureExpired, URLSafeTimedSerializer
from sqlalchemy.orm import Session

from server.config import Settings
from server.credentials import password_fingerprint
from server.db import UNREACHABLE_ERRORS
from server.models import User
from server.services import users
from server.services.access import Actor
from server.services.errors import Unauthenticated

__all__ = ["require_any", "SessionCookie", "SESSION_COOKIE", "LOGIN_CSRF_COOKIE", "current_actor", "optional_actor", "CurrentActor",
           "require"]

log = logging.getLogger("railsign.auth")
SESSION_COOKIE = "railsign_session"
LOGIN_CSRF_COOKIE = "railsign_login_csrf"
LOGIN_CSRF_MAX_AGE_S = 3600


class SessionCookie:
    """Signed, timestamped cookie holding the user id and the session's CSRF token.

    The cookie also holds a fingerprint of the user's password hash, so that setting a new
    password ends every session of the old one, and the user's session generation, so that
    logging out ends the session on the server (every session of that user issued before). Before login, a second short-lived signed
    cookie (:data:`LOGIN_CSRF_COOKIE`) carries the login form's CSRF token.
    """

    def __init__(self, settings: Settings) -> None:
        self._serializer = URLSafeTimedSerializer(settings.secret_key, salt="railsign-session")
        self._login_serializer = URLSafeTimedSerializer(settings.secret_key, salt="railsign-login-csrf")
        self.max_age_s = settings.session_max_age_s
        self.secure = settings.cookie_secure

    def dump(self, user_id: int, password_hash: str | None = None, generation: int = 0) -> tuple[str, str]:
        csrf = secrets.token_urlsafe(24)
        data = {"uid": user_id, "csrf": csrf, "pw": password_fingerprint(password_hash), "gen": generation}
        return self._serializer.dumps(data), csrf

    def dump_login_csrf(self) -> tuple[str, str]:
        """(cookie value, token) for a login form."""
        token = secrets.token_urlsafe(24)
        return self._login_serializer.dumps(token), token

    def load_login_csrf(self, value: str | None) -> str | None:
        if not value:
            return None
        try:
            token = self._login_serializer.loads(value, max_age=LOGIN_CSRF_MAX_AGE_S)
        except (BadSignature, SignatureExpired):
            return None
        return token if isinstance(token, str) else None

    def login_csrf_kwargs(self) -> dict[str, Any]:
        return {"max_age": LOGIN_CSRF_MAX_AGE_S, "httponly": True, "samesite": "lax", "secure": self.secure,
                "path": "/"}

    def load(self, value: str | None) -> dict[str, Any] | None:
        if not value:
            return None
        try:
            data = self._serializer.loads(value, max_age=self.max_age_s)
        except (BadSignature, SignatureExpired):
            return None
        return data if isinstance(data, dict) and "uid" in data else None

    def cookie_kwargs(self) -> dict[str, Any]:
        return {"max_age": self.max_age_s, "httponly": True, "samesite": "lax", "secure": self.secure,
                "path": "/"}


def _note_token_use(request: Request, token_id: int, last_used_at: datetime | None) -> None:
    """Have the users service record the token's use (at most once a minute), in a write session of its
    own; advisory, it never fails a request (a busy or absent database only skips the stamp)."""
    try:
        with request.app.state.sessionmaker() as write:
            users.note_token_use(session=write, token_id=token_id, last_used_at=last_used_at)
    except UNREACHABLE_ERRORS:
        log.warning("could not record the use of API token %s", token_id)


def current_actor(request: Request) -> Actor:
    """The logged-in user (API token or session cookie) as an Actor; 401 otherwise.

    Read in a short session of its own, closed before the endpoint runs: a request holds no
    database connection (and on SQLite no write lock) while it waits between the two."""
    if hasattr(request.state, "actor"):
        return request.state.actor
    with request.app.state.read_sessionmaker() as session:
        return _actor_of(request, session)


def _actor_of(request: Request, session: Session) -> Actor:
    request_id = request.state.request_id if hasattr(request.state, "request_id") else None
    header = request.headers.get("authorization", "")
    user: User | None = None
    if header.lower().startswith("bearer "):
        found = users.user_for_token(session=session, token=header[7:].strip())
        if found is None:
            raise Unauthenticated("the API token is unknown or revoked")
        user, token = found
        _note_token_use(request, token.id, token.last_used_at)
        request.state.auth = "token"
    else:
        data = request.app.state.session_cookie.load(request.cookies.get(SESSION_COOKIE))
        if data is not None:
            candidate = session.get(User, data["uid"])
            if candidate is not None and candidate.active and \
                    data.get("pw") == password_fingerprint(candidate.password_hash) and \
                    data.get("gen") == candidate.session_generation:
                user = candidate
                request.state.auth = "cookie"
                request.state.csrf_token = data.get("csrf", "")
    if user is None:
        raise Unauthenticated("log in first")
    actor = Actor.for_user(user, request_id)
    request.state.actor = actor
    # plain values for pages drawn after the request's session has closed (error pages)
    request.state.actor_summary = {"name": actor.name, "role": actor.role}
    return actor


CurrentActor = Annotated[Actor, Depends(current_actor)]


def optional_actor(request: Request) -> Actor | None:
    """The logged-in actor, or None (for the login page, which anyone may open)."""
    try:
        return current_actor(request)
    except Unauthenticated:
        return None


def require(permission: str):
    """Dependency factory: the current actor, refused with 403 unless the role has ``permission``."""

    def _dependency(actor: CurrentActor) -> Actor:
        actor.require(permission)
        return actor

    _dependency.permission = permission  # read by the route-permission test
    return _dependency


def require_any(permission: str, *roles: str):
    """Dependency factory: the current actor, refused with 403 unless the role has ``permission`` or is one of
    ``roles`` (a route whose service decides further by the team's rules, such as waiving a failing check)."""

    def _dependency(actor: CurrentActor) -> Actor:
        if actor.role not in roles:
            actor.require(permission)
        return actor

    _dependency.permission = permission
    return _dependency
