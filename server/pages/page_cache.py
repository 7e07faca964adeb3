"""Pages drawn once for as long as nothing they show has changed, and answered 304 when the browser
has them already.

A page's body is a function of the database's contents, the user (their rows: role, teams, name,
sessions), the request's path and query, and the code (the application and engine versions). The
database's contents are named by a *change token* (:class:`ChangeClock`) that moves with every
commit of any process:

- SQLite: ``PRAGMA data_version`` on a connection of the clock's own that never writes; SQLite
  gives a new value there after any other connection (any process) committed.
- PostgreSQL: a count of the ``railsign_change`` notices heard on a connection of the clock's own;
  every writing transaction of the app sends one, delivered when it commits (:mod:`server.db`).

The token is read before the page, so a page drawn from newer data than its token is only ever
kept under an older token, which no later request reads again after that change. A page is kept
under (path, query, user rows, change token, versions) in a bounded LRU shared by the threads of
the process, its CSRF token left as a placeholder that each response fills with a copy masked anew
(:func:`server.csrf.masked`). Its ETag (weak: the masked token differs in every body) is a digest
of the kept body, the versions and the session's token, so it covers the result, the workflow
state, approvals, waivers, the user and the application version; ``If-None-Match`` with it is
answered 304. No Last-Modified: the page has no one modification time (the ETag is exact).
"""

from __future__ import annotations

import hashlib
import logging
import sqlite3
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from typing import Any

import psycopg
from fastapi import Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy import Engine

from server import __version__
from server.csrf import masked
from server.db import CHANGE_CHANNEL
from server.pages.rendering import page_context
from server.services.access import Actor
from server.services.results import engine_version
from server.templating import templates

__all__ = ["LruCache", "ChangeClock", "PageCache", "cached_page", "CSRF_PLACEHOLDER"]

log = logging.getLogger("railsign.pages")
CSRF_PLACEHOLDER = "csrf-placeholder-0b7e4c2d9a61f385"


class LruCache:
    """A bounded mapping, least recently used first out, shared safely between threads. Bounded by the
    sum of the entries' weights (``weight(value)``, bytes for bodies; 1 each by default)."""

    def __init__(self, max_weight: int, weight: Callable[[Any], int] = lambda _v: 1) -> None:
        self.max_weight, self.weight = max_weight, weight
        self._items: OrderedDict[Hashable, tuple[Any, int]] = OrderedDict()
        self._total = 0
        self._lock = threading.Lock()
        self.hits = self.misses = 0

    def get(self, key: Hashable) -> Any | None:
        with self._lock:
            item = self._items.get(key)
            if item is None:
                self.misses += 1
                return None
            self._items.move_to_end(key)
            self.hits += 1
            return item[0]

    def put(self, key: Hashable, value: Any) -> None:
        w = self.weight(value)
        if w > self.max_weight:
            return
        with self._lock:
            old = self._items.pop(key, None)
            if old is not None:
                self._total -= old[1]
            self._items[key] = (value, w)
            self._total += w
            while self._total > self.max_weight:
                _, (_, gone) = self._items.popitem(last=False)
                self._total -= gone

    def get_or_make(self, key: Hashable, make: Callable[[], Any]) -> Any:
        value = self.get(key)
        if value is None:
            value = make()
            self.put(key, value)
        return value

    def __len__(self) -> int:
        return len(self._items)

    @property
    def total_weight(self) -> int:
        return self._total

    def clear(self) -> None:
        with self._lock:
            self._items.clear()
            self._total = 0


class ChangeClock:
    """A token that changes whenever any process commits to the database (see the module's words);
    None when it cannot be read (the page is then drawn and not kept)."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        self._lock = threading.Lock()
        self._conn: Any = None
        self._generation = self._notices = 0

    def _connect(self) -> Any:
        url = self.engine.url
        if url.get_backend_name() == "sqlite":
            conn = sqlite3.connect(url.database, check_same_thread=False, isolation_level=None, timeout=1.0)
            conn.execute("PRAGMA query_only=ON")
            return conn
        params = {"host": url.host, "port": url.port, "user": url.username, "password": url.password,
                  "dbname": url.database}
        conn = psycopg.connect(autocommit=True, connect_timeout=5, **{k: v for k, v in params.items() if v})
        conn.execute(f"LISTEN {CHANGE_CHANNEL}")
        self._generation += 1  # notices missed while not listening: a token never given before
        self._notices = 0
        return conn

    def token(self) -> str | None:
        with self._lock:
            try:
                if self._conn is None:
                    self._conn = self._connect()
                if isinstance(self._conn, sqlite3.Connection):
                    return f"sqlite:{self._conn.execute('PRAGMA data_version').fetchone()[0]}"
                for _ in self._conn.notifies(timeout=0):
                    self._notices += 1
                return f"pg:{self._generation}:{self._notices}"
            except Exception as exc:  # no token: no caching, the page is drawn as ever
                log.debug("no change token: %s", exc)
                self.close_locked()
                return None

    def close_locked(self) -> None:
        try:
            if self._conn is not None:
                self._conn.close()
        except Exception:  # noqa: S110 - closing a broken connection
            pass
        self._conn = None

    def close(self) -> None:
        with self._lock:
            self.close_locked()


class PageCache:
    """The drawn pages of a process (bodies with the CSRF placeholder, by key) and its change clock."""

    def __init__(self, engine: Engine, max_bytes: int = 64 * 1024 * 1024) -> None:
        self.clock = ChangeClock(engine)
        self.pages = LruCache(max_bytes, weight=lambda v: len(v[0]) + 200)
        self._drawing: dict[Hashable, threading.Lock] = {}
        self._drawing_lock = threading.Lock()

    def get_or_draw(self, key: Hashable | None, draw: Callable[[], tuple[bytes, str]]) -> tuple[bytes, str]:
        """The kept page of ``key``, else ``draw()`` it, once: requests for a page being drawn wait for that
        drawing instead of drawing it again side by side (many people opening a changed board at once)."""
        if key is None:
            return draw()
        kept = self.pages.get(key)
        if kept is not None:
            return kept
        with self._drawing_lock:
            lock = self._drawing.setdefault(key, threading.Lock())
        with lock:
            try:
                kept = self.pages.get(key)
                if kept is None:
                    kept = draw()
                    self.pages.put(key, kept)
                return kept
            finally:
                with self._drawing_lock:
                    if self._drawing.get(key) is lock:
                        self._drawing.pop(key, None)


def _etag(body: bytes, session_token: str) -> str:
    digest = hashlib.sha256(body)
    digest.update(f"\0{__version__}\0{engine_version()}\0".encode())
    digest.update(hashlib.sha256(session_token.encode()).digest())
    return f'W/"{digest.hexdigest()[:40]}"'


def _matches(request: Request, etag: str) -> bool:
    sent = request.headers.get("if-none-match", "")
    return bool(sent) and (sent.strip() == "*" or etag in [t.strip() for t in sent.split(",")])


def cached_page(request: Request, actor: Actor, name: str, build: Callable[[], dict[str, Any]]) -> Response:
    """The page ``name`` of ``build()``'s context: from the cache while nothing it shows changed, 304 when the
    browser holds it already (``If-None-Match``)."""
    cache: PageCache = request.app.state.page_cache
    session_token = getattr(request.state, "csrf_token", "") or ""
    change = cache.clock.token()
    key = None
    if change is not None:
        key = (name, request.url.path, request.url.query, actor.user_id, getattr(request.state, "user_rows", None),
               bool(session_token), change, __version__, engine_version())

    def draw() -> tuple[bytes, str]:
        context = page_context(request, actor, **build())
        if session_token:
            context["csrf_token"] = CSRF_PLACEHOLDER
        body = templates.TemplateResponse(request, name, context).body
        return body, _etag(body, session_token)

    body, etag = cache.get_or_draw(key, draw)
    headers = {"ETag": etag, "Cache-Control": "private, no-cache"}
    if _matches(request, etag):
        return Response(status_code=304, headers=headers)
    if session_token:
        body = body.replace(CSRF_PLACEHOLDER.encode(), masked(session_token).encode())
    return HTMLResponse(body, headers=headers)
