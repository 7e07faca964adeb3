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
           "UNREACHABLE_ERRORS", "OutageLog"]

# What the driver raises when the database does not answer (down, unreachable, every connection
# busy, on SQLite a write lock not granted in time): answered 503 with Retry-After, never 500.
UNREACHABLE_ERRORS: tuple[type[Exception], ...] = (OperationalError, InterfaceError, PoolTimeout)


def make_engine(settings: Settings) -> Engine:
    """Create the engine for ``settings.database_url``."""
    url = settings.database_url
    if settings.is_sqlite:
        engine = create_engine(
            url,
            echo=settings.sql_echo,
            connect_args={"check_same_thread": False, "timeout": 30},
        )

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn, _record) -> None:  # noqa: ANN001
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.execute("PRAGMA busy_timeout=30000")
            cur.close()

        # pysqlite's own transaction handling defers BEGIN; emit it ourselves so that
        # a write transaction takes its lock at the start (no lost updates under load).
        @event.listens_for(engine, "connect")
        def _no_pysqlite_begin(dbapi_conn, _record) -> None:  # noqa: ANN001
            dbapi_conn.isolation_level = None

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn) -> None:  # noqa: ANN001
            immediate = conn.get_execution_options().get("sqlite_write")
            conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")

        return engine
    return create_engine(
        url, echo=settings.sql_echo, pool_pre_ping=True, pool_size=10, max_overflow=20,
        connect_args={"connect_timeout": 5},
    )


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
