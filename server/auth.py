"""Authentication: API tokens and signed session cookies to the current actor; route permissions.

Every route except ``/healthz`` and the login page depends on :func:`current_actor`; routes
that need more than reading declare it with :func:`require` (``Depends(require("edit"))``),
so the permission a route needs is written on the route and checked in one place.
"""

from __future__ import annotations

import logging
import secrets
import threading
import time
from collections import OrderedDict
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime, timezone
from typing import Annotated, Any

from fastapi import Depends, Request
from itsdangerous import BadSignature, SignatureExpired, URLSafeTimedSerializer
from sqlalchemy import Engine, bindparam, create_engine, select
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from server.config import Settings
from server.credentials import password_fingerprint, token_digest
from server.db import UNREACHABLE_ERRORS
from server.models import ApiToken, Team, TeamMember, User
from server.services import users
from server.services.access import Actor
from server.services.errors import Unauthenticated

__all__ = ["require_any", "SessionCookie", "ActorCache", "TokenUse", "SESSION_COOKIE", "LOGIN_CSRF_COOKIE", "current_actor", "optional_actor", "CurrentActor",
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
        self._seen: dict[str, tuple[dict[str, Any], float]] = {}
        self._seen_lock = threading.Lock()

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
        """The data of a valid, unexpired cookie, else None. A cookie string seen before is not verified
        again (its signature gives the same answer every time): its data and signing time are kept in a
        small table, and only its age is checked anew."""
        if not value:
            return None
        known = self._seen.get(value)
        if known is not None:
            data, signed_at = known
            return data if time.time() - signed_at <= self.max_age_s else None
        try:
            data, signed = self._serializer.loads(value, max_age=self.max_age_s, return_timestamp=True)
        except (BadSignature, SignatureExpired):
            return None
        if not (isinstance(data, dict) and "uid" in data):
            return None
        with self._seen_lock:
            if len(self._seen) >= 4096:
                self._seen.clear()
            self._seen[value] = (data, signed.timestamp())
        return data

    def cookie_kwargs(self) -> dict[str, Any]:
        return {"max_age": self.max_age_s, "httponly": True, "samesite": "lax", "secure": self.secure,
                "path": "/"}


# The user's row and teams as one read: what an Actor is made of and what pages show of the user. A cached
# user is used again only while this read gives the same rows, so a change of role, team, name, password,
# activity or session generation is seen by the next request, whichever process made it.
_USER_ROWS = (select(User.id, User.username, User.display_name, User.role, User.active, User.password_hash,
                     User.session_generation, Team.id, Team.name)
              .select_from(User).outerjoin(TeamMember, TeamMember.user_id == User.id)
              .outerjoin(Team, Team.id == TeamMember.team_id)
              .where(User.id == bindparam("uid")).order_by(Team.id))
_TOKEN_ROW = select(ApiToken.id, ApiToken.user_id, ApiToken.revoked_at, ApiToken.last_used_at).where(
    ApiToken.token_sha256 == bindparam("digest"))


class ActorCache:
    """Users as loaded for earlier requests, by user id, checked against their rows on every use.

    Loading a user through the ORM (the row, then its teams) is most of an authenticated request's
    cost; reading the same facts as plain rows is a fraction of it. Each request reads the rows
    (:data:`_USER_ROWS`) in one statement and takes the cached user only when they are unchanged,
    else loads the user again: no permission, team or session outlives its change, in this process or
    another. The loaded users are detached (their session closed) and only read. Bounded (LRU),
    shared between threads."""

    def __init__(self, engine: Engine, size: int = 1024) -> None:
        self.engine, self.size = engine, size
        self._lock = threading.Lock()
        self._users: OrderedDict[int, tuple[tuple, User]] = OrderedDict()
        self._compiled: dict[int, tuple[str, list[str] | None]] = {}
        # PostgreSQL: a small pool of its own without the ping before each use (one round trip, not two)
        self._reader = engine if engine.dialect.name == "sqlite" else create_engine(
            engine.url, pool_size=4, max_overflow=8, pool_timeout=engine.pool.timeout(), pool_pre_ping=False,
            connect_args={"connect_timeout": 5})
        self.hits = self.misses = 0

    def _read(self, stmt, params: dict[str, Any]) -> list[tuple]:  # noqa: ANN001
        """Rows of one read statement, straight through the driver on a pooled connection (the statement is
        compiled once; the pool ends the driver's transaction when the connection goes back)."""
        sql, names = self._compiled.get(id(stmt), (None, None))
        if sql is None:
            compiled = stmt.compile(dialect=self.engine.dialect)
            names = list(compiled.positiontup or []) if compiled.positional else None
            sql = str(compiled)
            self._compiled[id(stmt)] = (sql, names)
        args = [params[n] for n in names] if names is not None else params
        dbapi_error = self._reader.dialect.loaded_dbapi.Error
        try:
            return self._read_once(sql, args)
        except dbapi_error as exc:  # as SQLAlchemy wraps it elsewhere: a database that does not answer is a 503
            raise DBAPIError.instance(sql, args, exc, dbapi_error) from exc

    def _read_once(self, sql: str, args: Any) -> list[tuple]:  # noqa: ANN401
        for attempt in (1, 2):
            conn = self._reader.raw_connection()
            try:
                cursor = conn.cursor()
                cursor.execute(sql, args)
                rows = [tuple(r) for r in cursor.fetchall()]
                cursor.close()
                return rows
            except Exception as exc:
                # the reader's pool does not ping before each use: a connection the server dropped fails
                # here once, is thrown away, and the read is made again on a fresh one
                if attempt == 2 or not self._reader.dialect.is_disconnect(
                        getattr(exc, "orig", exc), conn.dbapi_connection, None):
                    raise
                conn.invalidate()
            finally:
                conn.close()
        raise AssertionError("unreachable")

    def rows(self, uid: int) -> tuple:
        return tuple(self._read(_USER_ROWS, {"uid": uid}))

    def token_row(self, token: str) -> tuple | None:
        """(id, user_id, revoked_at, last_used_at) of an API token, or None."""
        found = self._read(_TOKEN_ROW, {"digest": token_digest(token)})
        return found[0] if found else None

    def user(self, uid: int, rows: tuple, load) -> User | None:  # noqa: ANN001
        """The user of ``rows`` (as read just now): the cached one when its rows are these, else ``load()``."""
        with self._lock:
            cached = self._users.get(uid)
            if cached is not None and cached[0] == rows:
                self._users.move_to_end(uid)
                self.hits += 1
                return cached[1]
        user = load()
        if user is None:
            return None
        with self._lock:
            self.misses += 1
            self._users[uid] = (rows, user)
            self._users.move_to_end(uid)
            while len(self._users) > self.size:
                self._users.popitem(last=False)
        return user

    def close(self) -> None:
        if self._reader is not self.engine:
            self._reader.dispose()

    def forget(self, uid: int | None = None) -> None:
        with self._lock:
            if uid is None:
                self._users.clear()
            else:
                self._users.pop(uid, None)


class TokenUse:
    """A token's last use written at most once a minute, by a thread of its own: never inside a request's
    transaction, never on the request's time. Advisory: a busy or absent database only skips the stamp."""

    def __init__(self, sessionmaker, interval_s: float = users.TOKEN_USE_INTERVAL_S) -> None:  # noqa: ANN001
        self.sessionmaker, self.interval_s = sessionmaker, interval_s
        self._lock = threading.Lock()
        self._next: dict[int, float] = {}  # token id -> monotonic time before which no stamp is written
        self._writer = ThreadPoolExecutor(max_workers=1, thread_name_prefix="railsign-token-use")
        self.clock = time.monotonic

    def note(self, token_id: int, last_used_at: datetime | None) -> bool:
        """Queue the stamp of a use of ``token_id`` unless one was written (or queued) within the minute."""
        now = self.clock()
        with self._lock:
            if self._next.get(token_id, 0.0) > now:
                return False
            self._next[token_id] = now + self.interval_s
            if len(self._next) > 10_000:
                self._next = {k: v for k, v in self._next.items() if v > now}
        self._writer.submit(self._write, token_id, last_used_at)
        return True

    def _write(self, token_id: int, last_used_at: datetime | None) -> None:
        try:
            with self.sessionmaker() as write:
                users.note_token_use(session=write, token_id=token_id, last_used_at=last_used_at)
        except UNREACHABLE_ERRORS:
            log.warning("could not record the use of API token %s", token_id)
        except Exception:  # advisory: logged, never raised into anyone's request
            log.exception("could not record the use of API token %s", token_id)

    def flush(self) -> None:
        """Wait for the stamps queued so far (tests, shutdown)."""
        self._writer.submit(lambda: None).result()

    def close(self) -> None:
        self._writer.shutdown(wait=True)


def _as_datetime(value: Any) -> datetime | None:
    """A timestamp as the driver gave it (SQLite: text), as the aware UTC datetime the models use."""
    if value is None or isinstance(value, datetime):
        return value if value is None or value.tzinfo else value.replace(tzinfo=timezone.utc)
    parsed = datetime.fromisoformat(str(value))
    return parsed if parsed.tzinfo else parsed.replace(tzinfo=timezone.utc)


def _load_user(request: Request, uid: int) -> User | None:
    with request.app.state.read_sessionmaker() as session:
        user = session.get(User, uid)
        return user if user is not None and user.active else None


def current_actor(request: Request) -> Actor:
    """The logged-in user (API token or session cookie) as an Actor; 401 otherwise.

    The user's rows are read in one statement on a connection of its own, closed before the endpoint
    runs (a request holds no database connection, and on SQLite no write lock, while it waits between
    the two); the user object is taken from :class:`ActorCache` while those rows are unchanged."""
    if hasattr(request.state, "actor"):
        return request.state.actor
    return _actor_of(request)


def _actor_of(request: Request) -> Actor:
    state = request.app.state
    cache: ActorCache = state.actor_cache
    request_id = request.state.request_id if hasattr(request.state, "request_id") else None
    header = request.headers.get("authorization", "")
    user: User | None = None
    if header.lower().startswith("bearer "):
        token = cache.token_row(header[7:].strip())
        token_id, uid, revoked_at, last_used_at = token or (None, None, None, None)
        rows = cache.rows(uid) if token is not None and revoked_at is None else ()
        if not rows or not rows[0][4]:  # unknown or revoked token, or a user who may not log in
            raise Unauthenticated("the API token is unknown or revoked")
        user = cache.user(uid, rows, lambda: _load_user(request, uid))
        if user is None:
            raise Unauthenticated("the API token is unknown or revoked")
        state.token_use.note(token_id, _as_datetime(last_used_at))
        request.state.auth = "token"
        request.state.user_rows = rows
    else:
        data = state.session_cookie.load(request.cookies.get(SESSION_COOKIE))
        if data is not None and isinstance(data["uid"], int):
            rows = cache.rows(data["uid"])
            # rows[0]: id, username, display_name, role, active, password_hash, session_generation, ...
            if rows and rows[0][4] and data.get("pw") == password_fingerprint(rows[0][5]) \
                    and data.get("gen") == rows[0][6]:
                user = cache.user(data["uid"], rows, lambda: _load_user(request, data["uid"]))
                if user is not None:
                    request.state.auth = "cookie"
                    request.state.user_rows = rows
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
