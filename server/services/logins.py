"""Logging in with a password; failed attempts are slowed per account and per address, and refused
per account at one address.

The counters are rows of ``login_throttles`` (one per account, one per address and one per
account at an address), so every web process of a deployment counts the same failures. After
a failure, the next attempt on that account or from that address waits ``login_slowdown_s``
(doubling with each further recent failure, at most 16 times), which slows password spraying
over many accounts as well as guessing at one. After ``login_max_failures`` failures of one
account from one address, that account is refused at that address for ``login_lockout_s``,
even with the right password: failures from one address never lock out other accounts behind
it, and no one can lock a named user out from elsewhere. Failures older than
``login_lockout_s`` are forgotten. Every login, failed login, lock and refusal is an
audit entry written in the same transaction as the counters. The password is only ever
compared with its Argon2 hash: it is not stored, logged or put in an audit entry.
"""

from __future__ import annotations

import secrets
import time
from collections.abc import Callable
from datetime import datetime, timedelta
from functools import lru_cache

from sqlalchemy import select
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session

from server.credentials import hash_password, verify_password
from server.config import Settings
from server.models import LoginThrottle, User, utcnow
from server.services.access import Actor
from server.services.audit import record
from server.services import users
from server.services.errors import TooManyRequests, Unauthenticated

__all__ = ["WRONG_LOGIN", "delay_s", "throttle_keys", "log_in", "log_out"]

WRONG_LOGIN = "the user name or the password is not right"
MAX_DOUBLINGS = 4


def delay_s(failures: int, base_s: float) -> float:
    """Seconds an attempt waits after ``failures`` recent failures: 0, base, 2 base, 4 base ... 16 base."""
    if failures <= 0 or base_s <= 0:
        return 0.0
    return base_s * 2 ** min(failures - 1, MAX_DOUBLINGS)


def throttle_keys(username: str, address: str) -> tuple[str, str, str]:
    """The counter keys of an attempt: its account (case-insensitive), its address, and the two together.

    The first two slow attempts down; only the third refuses them."""
    account, where = username.strip().casefold()[:150], (address or "unknown")[:150]
    return "account:" + account, "address:" + where, f"pair:{account}@{where}"


@lru_cache(maxsize=1)
def _decoy_hash() -> str:
    """A hash of a random secret, verified for unknown users so that they take as long as known ones."""
    return hash_password(secrets.token_urlsafe(32))


def _anonymous(request_id: str) -> Actor:
    """Who the audit entry of a failed or refused attempt names: nobody is logged in."""
    actor = Actor(user=None, name="(not logged in)")
    if request_id:
        actor.request_id = request_id
    return actor


def _recent(row: LoginThrottle | None, now: datetime, window_s: float) -> int:
    if row is None or row.last_failure_at is None:
        return 0
    return row.failures if (now - row.last_failure_at).total_seconds() <= window_s else 0


def _locked(rows: dict[str, LoginThrottle], pair_key: str, now: datetime) -> LoginThrottle | None:
    """The account-at-address counter when it refuses attempts now, else None."""
    row = rows.get(pair_key)
    return row if row is not None and row.locked_until is not None and row.locked_until > now else None


def _read(session: Session, keys: tuple[str, ...]) -> dict[str, LoginThrottle]:
    return {r.key: r for r in session.scalars(select(LoginThrottle).where(LoginThrottle.key.in_(keys)))}


def _lock_rows(session: Session, keys: tuple[str, ...]) -> dict[str, LoginThrottle]:
    """The counter rows of ``keys``, created when missing, locked for this transaction."""
    insert = pg_insert if session.get_bind().dialect.name == "postgresql" else sqlite_insert
    session.execute(insert(LoginThrottle).values([{"key": k, "failures": 0} for k in keys])
                    .on_conflict_do_nothing(index_elements=["key"]))
    rows = session.scalars(select(LoginThrottle).where(LoginThrottle.key.in_(keys))
                           .with_for_update().execution_options(populate_existing=True))
    return {r.key: r for r in rows}


def _refuse(session: Session, lock: LoginThrottle, username: str, address: str, request_id: str,
            now: datetime) -> None:
    wait_s = max(1, int((lock.locked_until - now).total_seconds() + 0.999))
    record(session, _anonymous(request_id), action="login_refused", object_type="login_throttle", object_id=lock.id,
           object_repr=lock.key, after={"username": username[:64], "address": address,
                                        "locked_until": lock.locked_until.isoformat()})
    session.commit()
    raise TooManyRequests(f"too many failed logins: try again in {_duration(wait_s)}",
                          extra={"retry_after_s": wait_s})


def _duration(seconds: float) -> str:
    seconds = int(seconds)
    if seconds < 120:
        return f"{seconds} seconds"
    return f"{(seconds + 59) // 60} minutes"


def log_in(*, session: Session, settings: Settings, username: str, password: str, address: str,
           request_id: str = "", now: datetime | None = None,
           sleep: Callable[[float], None] = time.sleep) -> User:
    """Check a user name and password; the user, or Unauthenticated / TooManyRequests (both recorded)."""
    now = now or utcnow()
    given = (username or "").strip()
    keys = throttle_keys(given, address)
    rows = _read(session, keys)
    lock = _locked(rows, keys[2], now)
    if lock is not None:
        _refuse(session, lock, given, address, request_id, now)
    failures = max((_recent(rows.get(k), now, settings.login_lockout_s) for k in keys[:2]), default=0)
    wait = delay_s(failures, settings.login_slowdown_s)
    session.rollback()  # end the read before waiting: no snapshot or lock is held while asleep
    if wait:
        sleep(wait)
    user = session.scalar(select(User).where(User.username == given)) if given else None
    matches = verify_password(user.password_hash if user and user.password_hash else _decoy_hash(), password or "")
    ok = bool(user is not None and user.password_hash and user.active and matches)

    rows = _lock_rows(session, keys)
    lock = _locked(rows, keys[2], now)
    if lock is not None:  # a parallel attempt locked it meanwhile
        _refuse(session, lock, given, address, request_id, now)
    if ok:
        for key in (keys[0], keys[2]):  # the address keeps its count: it may be spraying other accounts
            rows[key].failures, rows[key].last_failure_at = 0, None
        record(session, Actor.for_user(user, request_id), action="login", object_type="user", object_id=user.id,
               object_repr=user.username, after={"address": address, "delayed_s": wait})
        session.commit()
        return user

    reason = ("unknown user" if user is None else "account disabled" if not user.active
              else "no password set" if not user.password_hash else "wrong password")
    for key in keys:
        row = rows[key]
        row.failures, row.last_failure_at = _recent(row, now, settings.login_lockout_s) + 1, now
    record(session, _anonymous(request_id), action="login_failed", object_type="user",
           object_id=user.id if user else None, object_repr=given[:64],
           after={"username": given[:64], "address": address, "reason": reason, "delayed_s": wait,
                  "failures": {key: rows[key].failures for key in keys}})
    pair = rows[keys[2]]
    locked_now = pair.failures >= settings.login_max_failures
    if locked_now:
        pair.locked_until = now + timedelta(seconds=settings.login_lockout_s)
        record(session, _anonymous(request_id), action="login_locked", object_type="login_throttle",
               object_id=pair.id, object_repr=keys[2],
               after={"failures": pair.failures, "locked_until": pair.locked_until.isoformat()})
        pair.failures = 0
    session.commit()
    if locked_now:
        raise Unauthenticated(f"{WRONG_LOGIN}; after {settings.login_max_failures} failures, further attempts are "
                              f"refused for {_duration(settings.login_lockout_s)}")
    raise Unauthenticated(WRONG_LOGIN)


def log_out(*, session: Session, actor: Actor) -> None:
    """End the actor's sessions on the server and record it (the page also clears the cookie).

    Every session cookie of the user issued before stops opening a session, on every device:
    a copied cookie is worth nothing after logout."""
    if actor.user_id is not None:
        users.end_sessions(session=session, user_id=actor.user_id)
    record(session, actor, action="logout", object_type="user", object_id=actor.user_id, object_repr=actor.name)
    session.commit()
