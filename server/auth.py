"""Authentication: password hashes, API tokens, signed session cookies, the current actor.

Every route except ``/healthz`` and the login page depends on :func:`current_actor`; routes
that need more than reading declare it with :func:`require` (``Depends(require("edit"))``),
so the permission a route needs is written on the route and checked in one place.
"""

from __future__ import annotations

import hashlib
import logging
import secrets
from typing import Annotated, Any

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError
from fastapi import Depends, Request
from itsdangerous import BadSignature, SignatureExpired, URLSafeTimedSerializer
from sqlalchemy import select, update
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session

from server.config import Settings
from server.db import SessionDep
from server.models import ApiToken, User, utcnow
from server.services.access import Actor
from server.services.errors import Forbidden, Unauthenticated

__all__ = ["hash_password", "verify_password", "new_token", "token_digest", "SessionCookie", "SESSION_COOKIE",
           "LOGIN_CSRF_COOKIE", "user_from_token", "current_actor", "optional_actor", "CurrentActor", "require"]

log = logging.getLogger("railsign.auth")
SESSION_COOKIE = "railsign_session"
LOGIN_CSRF_COOKIE = "railsign_login_csrf"
LOGIN_CSRF_MAX_AGE_S = 3600
TOKEN_PREFIX = "rsk_"
_hasher = PasswordHasher()


def hash_password(password: str) -> str:
    """Argon2id hash (argon2-cffi defaults, RFC 9106 parameters)."""
    return _hasher.hash(password)


def verify_password(password_hash: str | None, password: str) -> bool:
    if not password_hash:
        return False
    try:
        return _hasher.verify(password_hash, password)
    except (VerificationError, InvalidHashError):
        return False


def new_token() -> str:
    """A fresh API token (shown once to its owner; only its digest is stored)."""
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def token_digest(token: str) -> str:
    """SHA-256 of a token: tokens are long random strings, so a fast hash is enough."""
    return hashlib.sha256(token.encode()).hexdigest()


def password_fingerprint(password_hash: str | None) -> str:
    """A short digest of the stored hash: a session ends when its user's password changes."""
    return hashlib.sha256((password_hash or "").encode()).hexdigest()[:16]


class SessionCookie:
    """Signed, timestamped cookie holding the user id and the session's CSRF token.

    The cookie also holds a fingerprint of the user's password hash, so that setting a new
    password ends every session of the old one. Before login, a second short-lived signed
    cookie (:data:`LOGIN_CSRF_COOKIE`) carries the login form's CSRF token.
    """

    def __init__(self, settings: Settings) -> None:
        self._serializer = URLSafeTimedSerializer(settings.secret_key, salt="railsign-session")
        self._login_serializer = URLSafeTimedSerializer(settings.secret_key, salt="railsign-login-csrf")
        self.max_age_s = settings.session_max_age_s
        self.secure = settings.cookie_secure

    def dump(self, user_id: int, password_hash: str | None = None) -> tuple[str, str]:
        csrf = secrets.token_urlsafe(24)
        data = {"uid": user_id, "csrf": csrf, "pw": password_fingerprint(password_hash)}
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


def user_from_token(session: Session, token: str) -> User | None:
    row = session.scalar(select(ApiToken).where(ApiToken.token_sha256 == token_digest(token)))
    if row is None or row.revoked_at is not None:
        return None
    user = session.get(User, row.user_id)
    if user is None or not user.active:
        return None
    session.info["railsign_token"] = (row.id, row.last_used_at)
    return user


def _touch_token(request: Request, session: Session, token_id: int, last_used_at) -> None:  # noqa: ANN001
    """Record when a token was last used, at most once a minute; advisory, it never fails a request.

    A request that may write records it in its own session. A GET on SQLite has a read-only
    session and records it in a short write transaction of its own.
    """
    now = utcnow()
    if last_used_at is not None and (now - last_used_at).total_seconds() < 60:
        return
    bind = session.get_bind()
    read_only = bind.dialect.name == "sqlite" and not bind.get_execution_options().get("sqlite_write")
    try:
        if read_only:
            with request.app.state.sessionmaker() as write:
                write.execute(update(ApiToken).where(ApiToken.id == token_id).values(last_used_at=now))
                write.commit()
        else:
            session.execute(update(ApiToken).where(ApiToken.id == token_id).values(last_used_at=now))
            session.commit()
    except OperationalError:
        session.rollback()
        log.warning("could not record the use of API token %s", token_id)


def current_actor(request: Request, session: SessionDep) -> Actor:
    """The logged-in user (API token or session cookie) as an Actor; 401 otherwise."""
    request_id = request.state.request_id if hasattr(request.state, "request_id") else None
    header = request.headers.get("authorization", "")
    user: User | None = None
    if header.lower().startswith("bearer "):
        user = user_from_token(session, header[7:].strip())
        if user is None:
            raise Unauthenticated("the API token is unknown or revoked")
        _touch_token(request, session, *session.info.pop("railsign_token"))
        request.state.auth = "token"
    else:
        data = request.app.state.session_cookie.load(request.cookies.get(SESSION_COOKIE))
        if data is not None:
            candidate = session.get(User, data["uid"])
            if candidate is not None and candidate.active and \
                    data.get("pw") == password_fingerprint(candidate.password_hash):
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


def optional_actor(request: Request, session: SessionDep) -> Actor | None:
    """The logged-in actor, or None (for the login page, which anyone may open)."""
    try:
        return current_actor(request, session)
    except Unauthenticated:
        return None


def require(permission: str):
    """Dependency factory: the current actor, refused with 403 unless the role has ``permission``."""

    def _dependency(actor: CurrentActor) -> Actor:
        if not actor.can(permission):
            raise Forbidden(f"your role ({actor.role}) may not do this (needs '{permission}')")
        return actor

    _dependency.permission = permission  # read by the route-permission test
    return _dependency
