"""Request plumbing around the routes: the request body size limit (413) and the methods a path allows
(OPTIONS, and the Allow header of a 405).

Both are plain ASGI middleware, so that an oversized body is refused before any of it is parsed and
an OPTIONS request is answered before authentication (it reveals only the methods, which the
OpenAPI description shows anyway).

Pages take the same care through :func:`page_inputs`, a dependency of every page route: a number in
the path or the query beyond the database's integers is not found (404) or not valid (422), and a
form field with a control character is not valid (422, naming the field), before any page code runs.

Provides :class:`BodyLimit`, :class:`OptionsAnswer`, :func:`allowed_methods` and :func:`page_inputs`.
"""

from __future__ import annotations

import json
import re
from typing import Any

import fastapi.routing
from fastapi import HTTPException, Request
from starlette.routing import Mount, Router
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from server.analysis.bounds import text_problem
from server.schemas.fields import ID_MAX

__all__ = ["BodyLimit", "OptionsAnswer", "allowed_methods", "too_large_body", "page_inputs"]

_INTEGER = re.compile(r"^[-+]?\d+$")
_FORM_TYPES = ("application/x-www-form-urlencoded", "multipart/form-data")


def too_large_body(limit: int) -> dict[str, Any]:
    """The one error shape of the API for a body over the limit."""
    message = f"the request body is larger than the limit of {limit} bytes"
    return {"error": {"status": 413, "code": "too_large", "message": message, "details": []}}


async def _send_json(send: Send, status: int, body: dict[str, Any], headers: list[tuple[bytes, bytes]] = ()) -> None:
    data = json.dumps(body).encode()
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(data)).encode()),
                            *headers]})
    await send({"type": "http.response.body", "body": data})


class BodyLimit:
    """Refuse a request body over ``limit`` bytes with 413: at once when Content-Length says so, else
    once the body read so far passes the limit (the body is then buffered, at most ``limit`` bytes)."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] in ("GET", "HEAD", "OPTIONS"):
            await self.app(scope, receive, send)
            return
        length = dict(scope["headers"]).get(b"content-length")
        if length is not None:
            if not length.isdigit() or int(length) > self.limit:
                await _send_json(send, 413, too_large_body(self.limit), [(b"connection", b"close")])
                return
            await self.app(scope, receive, send)
            return
        chunks: list[bytes] = []
        size = 0
        while True:
            message = await receive()
            if message["type"] != "http.request":  # the client went away
                return
            chunks.append(message.get("body", b""))
            size += len(chunks[-1])
            if size > self.limit:
                await _send_json(send, 413, too_large_body(self.limit), [(b"connection", b"close")])
                return
            if not message.get("more_body", False):
                break
        body = b"".join(chunks)
        sent = False

        async def replay() -> Message:
            nonlocal sent
            if sent:
                return await receive()
            sent = True
            return {"type": "http.request", "body": body, "more_body": False}

        await self.app(scope, replay, send)


def _routes(router: Router) -> list[Any]:
    """Every route of the table, included routers flattened (FastAPI nests them)."""
    iterate = getattr(fastapi.routing, "iter_route_contexts", None)
    return list(iterate(router.routes)) if iterate else list(router.routes)


def allowed_methods(router: Router, scope: Scope) -> list[str]:
    """The methods the routes serve at the request's path (OPTIONS included), or [] when none serves it."""
    path = scope["path"]
    methods: set[str] = set()
    for route in _routes(router):
        if isinstance(getattr(route, "original_route", route), Mount) or isinstance(route, Mount):
            if path.startswith(route.path.rstrip("/") + "/"):  # static files: reading only
                methods.update({"GET", "HEAD"})
        elif (regex := getattr(route, "path_regex", None)) is not None and regex.match(path):
            methods.update(route.methods or ())
    return sorted(methods | {"OPTIONS"}) if methods else []


class OptionsAnswer:
    """OPTIONS on a path a route serves: 204 with ``Allow`` naming its methods (404 elsewhere)."""

    def __init__(self, app: ASGIApp, router: Router) -> None:
        self.app = app
        self.router = router

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] != "OPTIONS":
            await self.app(scope, receive, send)
            return
        methods = allowed_methods(self.router, scope)
        if not methods:
            await self.app(scope, receive, send)  # the app's own 404
            return
        await send({"type": "http.response.start", "status": 204,
                    "headers": [(b"allow", ", ".join(methods).encode())]})
        await send({"type": "http.response.body", "body": b""})


def _beyond_ids(value: str) -> bool:
    return bool(_INTEGER.match(value.strip())) and abs(int(value)) > ID_MAX


async def page_inputs(request: Request) -> None:
    """Refuse what no page can use: ids beyond the database's integers in the path (404) or the query
    (422), and control characters in a form field (422, naming the field)."""
    if any(_beyond_ids(str(v)) for v in request.path_params.values()):
        raise HTTPException(404, "not found: no such id")
    for name, value in request.query_params.multi_items():
        if _beyond_ids(value):
            raise HTTPException(422, f"{name}: the number is beyond any id or count railsign keeps")
        if (problem := text_problem(value, one_line=False)) is not None:
            raise HTTPException(422, f"{name}: {problem}")
    content_type = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if request.method in ("POST", "PUT", "PATCH") and content_type in _FORM_TYPES:
        form = await request.form()
        for name, value in form.multi_items():
            if isinstance(value, str) and (problem := text_problem(value, one_line=False)) is not None:
                raise HTTPException(422, f"{name}: {problem}")
