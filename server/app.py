"""The FastAPI application factory: routers, middleware, error shape, templates, static files."""

from __future__ import annotations

import asyncio
import base64
import hashlib
import logging
import re
import time
import uuid
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

import fastapi_offline
from fastapi import Depends, FastAPI, Request
from starlette.middleware.gzip import GZipMiddleware
from fastapi.exceptions import RequestValidationError
from fastapi.openapi.docs import get_swagger_ui_html, get_swagger_ui_oauth2_redirect_html
from fastapi.responses import HTMLResponse, JSONResponse, RedirectResponse, Response
from fastapi.staticfiles import StaticFiles
from starlette.datastructures import MutableHeaders
from starlette.exceptions import HTTPException as StarletteHTTPException

from server import __version__
from server.api import api_router
from server.auth import ActorCache, SessionCookie, TokenUse
from server.config import WEB_DIR, Settings, get_settings
from server.csrf import csrf_guard, masked
from server.db import UNREACHABLE_ERRORS, OutageLog, is_busy, make_engine, make_sessionmaker, ping
from server.limits import BodyLimit, OptionsAnswer, allowed_methods
from server.pages import assets, page_router
from server.pages.common import login_url
from server.pages.page_cache import PageCache
from server.services import jobs, sequences
from server.schemas.responses import DatabaseHealth, Health
from server.services.errors import ServiceError, Unauthenticated
from server.templating import templates
from server.worker import WorkerPool

log = logging.getLogger("railsign.http")
# Swagger UI 5 (it reads OpenAPI 3.1, which FastAPI writes), as packaged for offline use by fastapi-offline.
DOCS_ASSETS_DIR = Path(fastapi_offline.__file__).parent / "static"


def error_body(status: int, code: str, message: str, details: list[dict[str, Any]] | None = None,
               **extra: Any) -> dict[str, Any]:
    """The one error shape of the API: {"error": {status, code, message, details, ...}}."""
    return {"error": {"status": status, "code": code, "message": message, "details": details or [], **extra}}


def _field_path(loc: tuple[Any, ...]) -> str:
    parts = [p for p in loc if p not in ("body", "query", "path", "header")]
    text = ""
    for p in parts:
        text += f"[{p}]" if isinstance(p, int) else ("." if text else "") + str(p)
    return text


def is_page_request(request: Request) -> bool:
    """Pages answer errors with HTML (and a login redirect); the API and /healthz with JSON."""
    path = request.url.path
    return not (path.startswith("/api/") or path == "/healthz" or path.startswith("/static/"))


PAGE_ERROR_TITLES = {403: "Not allowed", 404: "Not found", 409: "Conflict", 422: "Not valid",
                     429: "Too many attempts", 503: "Not available just now"}
# Seconds a client is asked to wait when the database does not answer
RETRY_AFTER_S = 5
UNAVAILABLE = ("the database does not answer at the moment; nothing was changed by this request. "
               f"Try again in {RETRY_AFTER_S} seconds")
# ... and when the server is saturated (no turn within the bounded wait)
BUSY_RETRY_AFTER_S = 1
BUSY = ("the server is busy at the moment; nothing was changed by this request. "
        f"Try again in {BUSY_RETRY_AFTER_S} second")


def unavailable_response(request: Request, *, busy: bool) -> Response:
    """503 with Retry-After: for pages an HTML page, for the API the error body."""
    retry_s, message = (BUSY_RETRY_AFTER_S, BUSY) if busy else (RETRY_AFTER_S, UNAVAILABLE)
    headers = {"Retry-After": str(retry_s)}
    if is_page_request(request):
        return _error_page(request, 503, message, headers=headers)
    return JSONResponse(error_body(503, "busy" if busy else "unavailable", message, retry_after_s=retry_s),
                        status_code=503, headers=headers)


# Security headers of every response. Scripts only from this server's files: no inline script, no eval.
# Styles also inline: the plotting library sets style attributes and <style> elements as it draws,
# which it cannot be told not to do. A response that brings its own policy (the API docs) keeps it.
CONTENT_SECURITY_POLICY = (
    "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; "
    "font-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'self'; form-action 'self'; "
    "frame-ancestors 'none'")
SECURITY_HEADERS = {"X-Frame-Options": "DENY", "X-Content-Type-Options": "nosniff",
                    "Referrer-Policy": "same-origin"}
HSTS = "max-age=31536000; includeSubDomains"


def _inline_script_policy(html: str) -> str:
    """The policy for a page of a library whose inline scripts we cannot move: each one allowed by its hash."""
    hashes = " ".join(f"'sha256-{base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()}'"
                      for body in re.findall(r"<script>(.*?)</script>", html, re.S))
    return CONTENT_SECURITY_POLICY.replace("script-src 'self'", f"script-src 'self' {hashes}")


class HeadAsGet:
    """Every GET route answers HEAD: the request is served as a GET and its body left out (the headers,
    Content-Length included, are those of the GET)."""

    def __init__(self, app) -> None:  # noqa: ANN001
        self.app = app

    async def __call__(self, scope, receive, send) -> None:  # noqa: ANN001
        if scope["type"] != "http" or scope["method"] != "HEAD":
            await self.app(scope, receive, send)
            return

        async def send_headers_only(message) -> None:  # noqa: ANN001
            if message["type"] == "http.response.body":
                message = {**message, "body": b""}
            await send(message)

        await self.app({**scope, "method": "GET", "railsign.head": True}, receive, send_headers_only)


class ResponseHeaders:
    """Every response: its request id (``X-Request-ID``, taken from the request or made), the app's own
    time (``Server-Timing``, to the start of the response) and the security headers."""

    def __init__(self, app, cookie_secure: bool) -> None:  # noqa: ANN001
        self.app, self.cookie_secure = app, cookie_secure

    async def __call__(self, scope, receive, send) -> None:  # noqa: ANN001
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        request_id = ""
        for name, value in scope["headers"]:
            if name == b"x-request-id":
                request_id = value.decode("latin-1")
                break
        request_id = request_id or uuid.uuid4().hex[:16]
        scope.setdefault("state", {})["request_id"] = request_id

        async def send_with_headers(message) -> None:  # noqa: ANN001
            if message["type"] == "http.response.start":
                elapsed_ms = (time.perf_counter() - start) * 1000
                headers = MutableHeaders(scope=message)
                headers["X-Request-ID"] = request_id
                headers["Server-Timing"] = f"app;dur={elapsed_ms:.2f}"
                headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
                for name, value in SECURITY_HEADERS.items():
                    headers[name] = value
                if self.cookie_secure:
                    headers["Strict-Transport-Security"] = HSTS
                log.debug("%s %s -> %s in %.1f ms", scope["method"], scope["path"], message["status"], elapsed_ms)
            await send(message)

        await self.app(scope, receive, send_with_headers)


class Admission:
    """At most ``slots`` requests at work in this process; a request waits ``wait_s`` at most for a
    turn, else it is answered 503 at once (instead of queueing in the thread pool behind the others).

    Static files need no turn. Event streams (paths ending in ``/events``) stay open for minutes, so
    they take no request slot but one of ``stream_slots`` of their own; with none free they are
    answered 503 at once (the page then falls back to polling)."""

    def __init__(self, app, slots: int, wait_s: float, stream_slots: int = 64) -> None:  # noqa: ANN001
        self.app = app
        self.slots, self.wait_s = slots, wait_s
        self.stream_slots, self.streams = stream_slots, 0
        self._free: asyncio.Semaphore | None = None  # made in the server's event loop

    async def enter(self) -> bool:
        if self._free is None:
            self._free = asyncio.Semaphore(self.slots)
        try:
            await asyncio.wait_for(self._free.acquire(), self.wait_s)
        except TimeoutError:
            return False
        return True

    def leave(self) -> None:
        assert self._free is not None
        self._free.release()

    async def __call__(self, scope, receive, send) -> None:  # noqa: ANN001
        if scope["type"] != "http" or scope["path"].startswith("/static/"):
            await self.app(scope, receive, send)
            return
        if scope["path"].endswith("/events") and scope["method"] in ("GET", "HEAD"):
            if self.streams >= self.stream_slots:
                await unavailable_response(Request(scope), busy=True)(scope, receive, send)
                return
            self.streams += 1
            try:
                await self.app(scope, receive, send)
            finally:
                self.streams -= 1
            return
        if not await self.enter():
            await unavailable_response(Request(scope), busy=True)(scope, receive, send)
            return
        try:
            await self.app(scope, receive, send)
        finally:
            self.leave()


def _error_page(request: Request, status: int, message: str, headers: dict[str, str] | None = None) -> Response:
    context = {"actor": getattr(request.state, "actor_summary", None),
               "csrf_token": masked(getattr(request.state, "csrf_token", "")),
               "status": status, "title": PAGE_ERROR_TITLES.get(status, "Something went wrong"), "message": message}
    return templates.TemplateResponse(request, "error.html", context, status_code=status, headers=headers)


def _install_error_handlers(app: FastAPI) -> None:
    @app.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> Response:
        if is_page_request(request):
            if isinstance(exc, Unauthenticated):
                return RedirectResponse(login_url(request), status_code=303)
            return _error_page(request, exc.status, exc.message)
        headers = {"WWW-Authenticate": "Bearer"} if isinstance(exc, Unauthenticated) else None
        return JSONResponse(error_body(exc.status, exc.code, exc.message, exc.details, **exc.extra),
                            status_code=exc.status, headers=headers)

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        details = [{"field": _field_path(tuple(e["loc"])), "message": e["msg"].removeprefix("Value error, ")}
                   for e in exc.errors()]
        message = "; ".join(f"{d['field']}: {d['message']}" for d in details[:5])
        return JSONResponse(error_body(422, "invalid", f"the request is not valid: {message}", details),
                            status_code=422)

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> Response:
        code = {404: "not_found", 405: "method_not_allowed"}.get(exc.status_code, "http_error")
        message = exc.detail if isinstance(exc.detail, str) else str(exc.detail)
        headers = getattr(exc, "headers", None)
        if exc.status_code == 405:  # every method the path serves, not only the first route's
            headers = {**(headers or {}), "Allow": ", ".join(allowed_methods(request.app.router, request.scope))}
        if is_page_request(request):
            return _error_page(request, exc.status_code, message)
        return JSONResponse(error_body(exc.status_code, code, message), status_code=exc.status_code,
                            headers=headers)

    async def _unavailable(request: Request, exc: Exception) -> Response:
        busy = is_busy(exc)
        if not busy:
            app.state.outage_log.failed(exc)
        return unavailable_response(request, busy=busy)

    for kind in UNREACHABLE_ERRORS:
        app.add_exception_handler(kind, _unavailable)

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> Response:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        request_id = getattr(request.state, "request_id", "")
        if is_page_request(request):
            return _error_page(request, 500, f"an unexpected error occurred; it has been logged (request {request_id})")
        return JSONResponse(error_body(500, "internal_error", "an unexpected error occurred; it has been logged",
                                       request_id=request_id), status_code=500)


def queue_outdated(factory) -> int:  # noqa: ANN001
    """As the app starts: queue the re-run of head revisions whose results are all of another engine
    version (idempotent, serialised between processes; see :func:`server.services.jobs.enqueue_outdated`),
    and of board sequences without a result of their current inputs at this engine
    (:func:`server.services.sequences.enqueue_outdated`).
    A failure is logged, not fatal: ``railsign jobs rerun-outdated`` does the same by hand."""
    try:
        with factory() as session:
            return len(jobs.enqueue_outdated(session=session)) + len(sequences.enqueue_outdated(session=session))
    except Exception:
        logging.getLogger("railsign.jobs").exception(
            "could not queue the re-run of outdated results; run `railsign jobs rerun-outdated`")
        return 0


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the app for ``settings`` (default: the environment's)."""
    settings = settings or get_settings()
    settings.check_secret()
    engine = make_engine(settings)

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        queue_outdated(app.state.sessionmaker)
        pool = None
        if settings.worker_threads > 0:
            pool = WorkerPool(app.state.sessionmaker, settings, threads=settings.worker_threads).start()
        yield
        if pool is not None:
            pool.stop()
        app.state.token_use.flush()
        app.state.page_cache.clock.close()
        app.state.actor_cache.close()
        engine.dispose()

    app = FastAPI(title="railsign", version=__version__, lifespan=lifespan,
                  description="Design sign-off for switched power rails. All numbers are SI units.",
                  dependencies=[Depends(csrf_guard)], docs_url=None, redoc_url=None)
    app.state.settings = settings
    app.state.engine = engine
    app.state.sessionmaker = make_sessionmaker(engine)
    app.state.outage_log = OutageLog(log)
    app.state.read_sessionmaker = make_sessionmaker(engine, read_only=True)
    app.state.session_cookie = SessionCookie(settings)
    app.state.actor_cache = ActorCache(engine)
    app.state.token_use = TokenUse(app.state.sessionmaker)
    app.state.page_cache = PageCache(engine)

    # plain ASGI middleware (no task group and body streams of their own, as function middleware has):
    # request id, timing and security headers around admission (added last, so outside it)
    app.add_middleware(Admission, slots=settings.max_concurrent_requests, wait_s=settings.busy_wait_s)
    app.add_middleware(ResponseHeaders, cookie_secure=settings.cookie_secure)
    # compressed answers for clients that ask; CSRF tokens in bodies are masked per response (server.csrf)
    app.add_middleware(GZipMiddleware, minimum_size=1000, compresslevel=6)
    app.add_middleware(HeadAsGet)
    _install_error_handlers(app)
    app.add_middleware(BodyLimit, limit=settings.max_request_bytes)
    app.add_middleware(OptionsAnswer, router=app.router)
    app.include_router(api_router)
    app.include_router(page_router)
    app.include_router(assets.router)  # before the /static mount, which would take its paths

    @app.get("/healthz", tags=["health"], response_model=Health,
             responses={503: {"model": Health, "description": "The database does not answer (status degraded)"}})
    def healthz() -> JSONResponse:
        """Whether the service and its database answer (no login needed)."""
        problem = ping(engine)
        database = DatabaseHealth(reachable=problem is None, engine=engine.dialect.name,
                                  **({"error": problem} if problem else {}))
        body = Health(status="ok" if problem is None else "degraded", version=__version__, database=database)
        return JSONResponse(body.model_dump(exclude_unset=True), status_code=200 if problem is None else 503)

    @app.get("/docs", include_in_schema=False)
    def api_docs() -> HTMLResponse:
        """The interactive API description, its JavaScript served from here (no CDN)."""
        page = get_swagger_ui_html(openapi_url=app.openapi_url, title="railsign API",
                                   oauth2_redirect_url="/docs/oauth2-redirect",
                                   swagger_js_url="/static/docs/swagger-ui-bundle.js",
                                   swagger_css_url="/static/docs/swagger-ui.css",
                                   swagger_favicon_url="data:,")
        page.headers["Content-Security-Policy"] = _inline_script_policy(page.body.decode())
        return page

    @app.get("/docs/oauth2-redirect", include_in_schema=False)
    def api_docs_redirect() -> HTMLResponse:
        page = get_swagger_ui_oauth2_redirect_html()
        page.headers["Content-Security-Policy"] = _inline_script_policy(page.body.decode())
        return page

    app.mount("/static/docs", StaticFiles(directory=DOCS_ASSETS_DIR), name="docs-assets")
    app.mount("/static", StaticFiles(directory=WEB_DIR / "static"), name="static")
    return app
