"""Pushed updates of the rail and board pages: server-sent events over the app's own HTTP server.

``GET /rails/{id}/events`` and ``GET /boards/{id}/events`` with ``Accept: text/event-stream`` (what a
browser's EventSource sends) stream ``state`` events: the page's digest and its active jobs'
progress (:mod:`server.services.live`), at once and again whenever it changes. Without that header
the same URL answers the current state once as JSON: the page's fallback when the stream breaks
(``web/static/live.js``), and what HEAD and plain clients get.

A stream looks for changes every :data:`TICK_S`: it reads the process's change token
(:class:`server.pages.page_cache.ChangeClock`, shared by all streams, read at most once a tick) and
only when the database changed does it read its page's state. It holds no request slot (the
admission control gives streams slots of their own), no database connection between ticks, and
ends after :data:`STREAM_LIFE_S` or when its user's rows change (a logout, a role change), after
which the browser opens it anew with a fresh check of the session.
"""

from __future__ import annotations

import asyncio
import json
import threading
import time
from collections.abc import AsyncIterator, Callable
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, Response, StreamingResponse
from starlette.concurrency import run_in_threadpool

from server.auth import CurrentActor
from server.services import live
from server.services.access import Actor

router = APIRouter(include_in_schema=False)
TICK_S = 0.05
STREAM_LIFE_S = 25.0  # then the browser reconnects (a fresh session check); a server stopping waits no longer
KEEPALIVE_S = 15.0
RETRY_MS = 1000


class SharedToken:
    """The change token, read at most once per ``max_age_s`` for all the streams of a process."""

    def __init__(self, read: Callable[[], str | None], max_age_s: float = TICK_S) -> None:
        self.read, self.max_age_s = read, max_age_s
        self._lock = threading.Lock()
        self._value: str | None = None
        self._at = float("-inf")

    def get(self) -> str | None:
        with self._lock:
            now = time.monotonic()
            if now - self._at >= self.max_age_s:
                self._value, self._at = self.read(), now
            return self._value


def _shared_token(request: Request) -> SharedToken:
    state = request.app.state
    if getattr(state, "live_token", None) is None:
        state.live_token = SharedToken(state.page_cache.clock.token)
    return state.live_token


def _read_state(request: Request, actor: Actor, read: Callable[..., dict[str, Any]], **ids: int) -> dict[str, Any]:
    with request.app.state.read_sessionmaker() as session:
        return read(session=session, actor=actor, **ids)


_UNSEEN = object()  # a token no reading equals


def _sse(event: str, data: dict[str, Any]) -> bytes:
    return f"event: {event}\ndata: {json.dumps(data, separators=(',', ':'))}\n\n".encode()


async def _stream(request: Request, actor: Actor, first: dict[str, Any],
                  read: Callable[[], dict[str, Any]]) -> AsyncIterator[bytes]:
    token = _shared_token(request)
    cache = request.app.state.actor_cache
    uid, rows = actor.user_id, getattr(request.state, "user_rows", None)
    yield f"retry: {RETRY_MS}\n\n".encode() + _sse("state", first)
    # the first tick reads the state again whatever the token says: a change committed between the first
    # reading and the token's would otherwise be taken as seen and never pushed
    last, seen = first, _UNSEEN
    started = last_sent = time.monotonic()
    while time.monotonic() - started < STREAM_LIFE_S:
        await asyncio.sleep(TICK_S)
        now = await run_in_threadpool(token.get)
        if now is None or now != seen:
            seen = now
            if uid is not None and await run_in_threadpool(cache.rows, uid) != rows:
                return  # the session or the user changed: the browser reconnects and is checked anew
            state = await run_in_threadpool(read)
            if state != last:
                last, last_sent = state, time.monotonic()
                yield _sse("state", state)
                continue
        if time.monotonic() - last_sent > KEEPALIVE_S:
            last_sent = time.monotonic()
            yield b": keep-alive\n\n"


def _answer(request: Request, actor: Actor, read: Callable[[], dict[str, Any]]) -> Response:
    first = read()  # also the permission check: another team's page is not found
    wants_stream = "text/event-stream" in request.headers.get("accept", "")
    if not wants_stream or request.scope.get("railsign.head"):
        return JSONResponse(first, headers={"Cache-Control": "no-store"})
    return StreamingResponse(_stream(request, actor, first, read), media_type="text/event-stream",
                             headers={"Cache-Control": "no-store", "X-Accel-Buffering": "no"})


@router.get("/rails/{rail_id}/events")
def rail_events(rail_id: int, request: Request, actor: CurrentActor) -> Response:
    """The rail page's state: a stream of events, or once as JSON."""
    return _answer(request, actor, lambda: _read_state(request, actor, live.rail_state, rail_id=rail_id))


@router.get("/boards/{board_id}/events")
def board_events(board_id: int, request: Request, actor: CurrentActor) -> Response:
    """The board page's state: a stream of events, or once as JSON."""
    return _answer(request, actor, lambda: _read_state(request, actor, live.board_state, board_id=board_id))
