"""Database engine and sessions: one engine per settings, one session per request or job.

SQLite gets WAL journaling, foreign keys and a busy timeout on every connection;
PostgreSQL is used as it comes (psycopg 3).
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.exc import InterfaceError, OperationalError
from sqlalchemy.exc import TimeoutError as PoolTimeout
from sqlalchemy.orm import Session, sessionmaker

from server.config import Settings

__all__ = ["make_engine", "make_sessionmaker", "session_scope", "get_session", "SessionDep", "ping",
           "UNREACHABLE_ERRORS", "OutageLog", "Busy", "is_busy"]



class Busy(Exception):
    """The server is saturated: no turn (request slot, connection, SQLite write lock) within the bounded wait."""


def is_busy(exc: BaseException) -> bool:
    """Whether a database error means "busy, try again" rather than "unreachable"."""
    if isinstance(exc, (Busy, PoolTimeout)):
        return True
    return isinstance(exc, OperationalError) and (
        "database is locked" in str(exc)  # SQLite: another process's writer
        or getattr(exc.orig, "sqlstate", None) == LOCK_NOT_AVAILABLE)


LOCK_NOT_AVAILABLE = "55P03"  # PostgreSQL's SQLSTATE when lock_timeout ends a wait


# What the driver raises when the database does not answer (down, unreachable, every connection
# busy, on SQLite a write lock not granted in time): answered 503 with Retry-After, never 500.
UNREACHABLE_ERRORS: tuple[type[Exception], ...] = (OperationalError, InterfaceError, PoolTimeout, Busy)


def _install_write_gate(engine: Engine, wait_s: float) -> None:
    """Serialise SQLite write transactions of this process in a queue of their own, with a bounded wait.

    SQLite has one writer at a time. Waiting on its lock inside the driver (busy_timeout) ties up
    a pooled connection and retries blindly; here a writer waits on a semaphore before it takes
    the lock, at most ``wait_s``, then gives up with :class:`Busy` (answered 503 with Retry-After).
    The turn is held from ``BEGIN IMMEDIATE`` until the transaction ends, however it ends.
    """
    gate = threading.BoundedSemaphore(1)

    def _release(info: dict) -> None:
        if info.pop("holds_write_turn", False):
            gate.release()

    @event.listens_for(engine, "begin")
    def _sqlite_begin(conn) -> None:  # noqa: ANN001
        if not conn.get_execution_options().get("sqlite_write"):
            conn.exec_driver_sql("BEGIN")
            return
        info = conn.connection.info
        if not info.get("holds_write_turn"):
            if not gate.acquire(timeout=wait_s):
                raise Busy(f"no turn to write within {wait_s:g} s")
            info["holds_write_turn"] = True
        try:
            conn.exec_driver_sql("BEGIN IMMEDIATE")
        except BaseException:
            _release(info)
            raise

    for name in ("commit", "rollback"):
        event.listen(engine, name, lambda conn: _release(conn.connection.info))
    @event.listens_for(engine.pool, "checkin")
    def _on_checkin(_dbapi_connection, connection_record) -> None:  # noqa: ANN001
        _release(connection_record.info)

    @event.listens_for(engine.pool, "reset")
    def _on_reset(_dbapi_connection, connection_record, _reset_state) -> None:  # noqa: ANN001
        _release(connection_record.info)

    @event.listens_for(engine.pool, "invalidate")
    def _on_invalidate(_dbapi_connection, connection_record, _exception) -> None:  # noqa: ANN001
        _release(connection_record.info)


def make_engine(settings: Settings) -> Engine:
    """Create the engine for ``settings.database_url``.

    A request that finds no pooled connection within ``settings.busy_wait_s`` gets :class:`PoolTimeout`
    (answered 503 with Retry-After), never a 30 s stall."""
    url = settings.database_url
    if settings.is_sqlite:
        engine = create_engine(
            url,
            echo=settings.sql_echo,
            connect_args={"check_same_thread": False, "timeout": settings.busy_wait_s},
            pool_size=20, max_overflow=40, pool_timeout=settings.busy_wait_s,
        )

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn, _record) -> None:  # noqa: ANN001
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA synchronous=NORMAL")
            # another process's writer (a CLI command, a second web process) is waited for this long
            cur.execute(f"PRAGMA busy_timeout={int(settings.busy_wait_s * 1000)}")
            cur.close()

        # pysqlite's own transaction handling defers BEGIN; emit it ourselves so that
        # a write transaction takes its lock at the start (no lost updates under load).
        @event.listens_for(engine, "connect")
        def _no_pysqlite_begin(dbapi_conn, _record) -> None:  # noqa: ANN001
            dbapi_conn.isolation_level = None

        _install_write_gate(engine, settings.busy_wait_s)
        return engine
    # a row lock (two saves of one rail) is waited for as long as any other turn, then the request is busy
    lock_timeout_ms = int(settings.busy_wait_s * 1000)
    engine = create_engine(
        url, echo=settings.sql_echo, pool_pre_ping=True, pool_size=10, max_overflow=20,
        pool_timeout=settings.busy_wait_s,
        connect_args={"connect_timeout": 5, "options": f"-c lock_timeout={lock_timeout_ms}"},
    )
    _install_change_notices(engine)
    return engine


CHANGE_CHANNEL = "railsign_change"
_WRITES = ("INSERT", "UPDATE", "DELETE")


def _install_change_notices(engine: Engine) -> None:
    """PostgreSQL: every transaction that writes sends one ``NOTIFY railsign_change``, which the server
    delivers to the listeners when (and only if) the transaction commits. The page cache of every web
    process listens (:class:`server.pages.page_cache.ChangeClock`): a page kept from before a commit is
    not served after it. (SQLite needs nothing of the kind: ``PRAGMA data_version`` tells the same.)"""

    @event.listens_for(engine, "before_cursor_execute")
    def _notice(conn, cursor, statement, parameters, context, executemany) -> None:  # noqa: ANN001
        info = conn.connection.info
        if info.get("change_noticed") or not statement.lstrip()[:6].upper().startswith(_WRITES):
            return
        info["change_noticed"] = True
        cursor.connection.execute(f"NOTIFY {CHANGE_CHANNEL}")

    def _reset(conn) -> None:  # noqa: ANN001
        conn.connection.info.pop("change_noticed", None)

    for name in ("commit", "rollback"):
        event.listen(engine, name, _reset)

    @event.listens_for(engine.pool, "checkin")
    def _on_checkin(_dbapi_connection, connection_record) -> None:  # noqa: ANN001
        connection_record.info.pop("change_noticed", None)


def make_sessionmaker(engine: Engine, *, read_only: bool = False) -> sessionmaker[Session]:
    """Sessions on ``engine``. On SQLite every transaction of theirs takes the write lock at its
    start (``BEGIN IMMEDIATE``), unless ``read_only``: then they are plain deferred readers.

    With SQLite's deferred transactions, two writers that both read first cannot both upgrade
    to writing; one gets "database is locked" instead of waiting. Taking the lock at the start
    makes concurrent saves queue up, so the second sees the first's revision and gets a clean
    conflict. PostgreSQL needs nothing of the kind: row locks and unique constraints do the job.
    Read-only sessions serve GET and HEAD requests; the commands of the services run in the
    sessions of the other requests, of the command line and of the workers.
    """
    bind = engine if read_only else engine.execution_options(sqlite_write=True)
    return sessionmaker(bind=bind, expire_on_commit=False)


@contextmanager
def session_scope(factory: sessionmaker[Session]) -> Iterator[Session]:
    """A session for work outside a request (CLI, jobs); rolls back on error."""
    session = factory()
    try:
        yield session
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


def get_session(request: Request) -> Iterator[Session]:
    """FastAPI dependency: the request's session. Services commit; errors roll back.

    GET and HEAD requests read: on SQLite they get deferred transactions that never wait
    for a writer. Every other request may write and takes SQLite's write lock at once.
    """
    state = request.app.state
    factory = state.read_sessionmaker if request.method in ("GET", "HEAD") else state.sessionmaker
    with session_scope(factory) as session:
        yield session


SessionDep = Annotated[Session, Depends(get_session)]


def ping(engine: Engine) -> str | None:
    """None when the database answers, else the reason it does not."""
    try:
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        return None
    except Exception as exc:  # any driver error means unreachable
        return f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"


class OutageLog:
    """One log line per database outage, not one per failed request or poll.

    ``failed`` logs the first failure of an outage and then at most one reminder every
    ``remind_s``; ``answered`` logs the recovery once. Safe to share between threads.
    """

    def __init__(self, logger: logging.Logger, remind_s: float = 300.0) -> None:
        self._log, self._remind_s = logger, remind_s
        self._lock = threading.Lock()
        self._since: float | None = None
        self._last_line = 0.0

    @property
    def in_outage(self) -> bool:
        return self._since is not None

    def failed(self, exc: BaseException) -> None:
        now = time.monotonic()
        with self._lock:
            first = self._since is None
            if not first and now - self._last_line < self._remind_s:
                return
            self._since = self._since if not first else now
            self._last_line = now
            lasted = now - self._since
        reason = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else type(exc).__name__
        if first:
            self._log.warning("the database does not answer: %s", reason)
        else:
            self._log.warning("the database still does not answer after %.0f s: %s", lasted, reason)

    def answered(self) -> None:
        if self._since is None:
            return
        with self._lock:
            since, self._since = self._since, None
        if since is not None:
            self._log.warning("the database answers again after %.0f s", time.monotonic() - since)
