"""The FastAPI application factory: routers, middleware, error shape, templates, static files."""

from __future__ import annotations

import logging
import time
import uuid
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

import fastapi_offline
import plotly
from fastapi import Depends, FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.openapi.docs import get_swagger_ui_html, get_swagger_ui_oauth2_redirect_html
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, RedirectResponse, Response
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException

from server import __version__
from server.api import api_router
from server.auth import SessionCookie
from server.config import WEB_DIR, Settings, get_settings
from server.csrf import csrf_guard
from server.db import make_engine, make_sessionmaker, ping
from server.limits import BodyLimit, OptionsAnswer, allowed_methods
from server.pages import page_router
from server.pages.common import login_url
from server.services import jobs
from server.schemas.responses import DatabaseHealth, Health
from server.services.errors import ServiceError, Unauthenticated
from server.templating import templates
from server.worker import WorkerPool

log = logging.getLogger("railsign.http")
PLOTLY_DIR = Path(plotly.__file__).parent / "package_data"
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
                     429: "Too many attempts"}


def _error_page(request: Request, status: int, message: str) -> Response:
    context = {"actor": getattr(request.state, "actor_summary", None),
               "csrf_token": getattr(request.state, "csrf_token", ""),
               "status": status, "title": PAGE_ERROR_TITLES.get(status, "Something went wrong"), "message": message}
    return templates.TemplateResponse(request, "error.html", context, status_code=status)


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

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        return JSONResponse(error_body(500, "internal_error", "an unexpected error occurred; it has been logged",
                                       request_id=getattr(request.state, "request_id", "")), status_code=500)


def queue_outdated(factory) -> int:  # noqa: ANN001
    """As the app starts: queue the re-run of head revisions whose results are all of another engine
    version (idempotent, serialised between processes; see :func:`server.services.jobs.enqueue_outdated`).
    A failure is logged, not fatal: ``railsign jobs rerun-outdated`` does the same by hand."""
    try:
        with factory() as session:
            return len(jobs.enqueue_outdated(session=session))
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
        engine.dispose()

    app = FastAPI(title="railsign", version=__version__, lifespan=lifespan,
                  description="Design sign-off for switched power rails. All numbers are SI units.",
                  dependencies=[Depends(csrf_guard)], docs_url=None, redoc_url=None)
    app.state.settings = settings
    app.state.engine = engine
    app.state.sessionmaker = make_sessionmaker(engine)
    app.state.read_sessionmaker = make_sessionmaker(engine, read_only=True)
    app.state.session_cookie = SessionCookie(settings)

    @app.middleware("http")
    async def _request_id_and_timing(request: Request, call_next):
        request.state.request_id = request.headers.get("x-request-id") or uuid.uuid4().hex[:16]
        start = time.perf_counter()
        response = await call_next(request)
        elapsed_ms = (time.perf_counter() - start) * 1000
        response.headers["X-Request-ID"] = request.state.request_id
        response.headers["Server-Timing"] = f"app;dur={elapsed_ms:.2f}"
        log.debug("%s %s -> %s in %.1f ms", request.method, request.url.path, response.status_code, elapsed_ms)
        return response

    _install_error_handlers(app)
    app.add_middleware(BodyLimit, limit=settings.max_request_bytes)
    app.add_middleware(OptionsAnswer, router=app.router)
    app.include_router(api_router)
    app.include_router(page_router)

    @app.get("/healthz", tags=["health"], response_model=Health,
             responses={503: {"model": Health, "description": "The database does not answer (status degraded)"}})
    def healthz() -> JSONResponse:
        """Whether the service and its database answer (no login needed)."""
        problem = ping(engine)
        database = DatabaseHealth(reachable=problem is None, engine=engine.dialect.name,
                                  **({"error": problem} if problem else {}))
        body = Health(status="ok" if problem is None else "degraded", version=__version__, database=database)
        return JSONResponse(body.model_dump(exclude_unset=True), status_code=200 if problem is None else 503)

    @app.get("/static/vendor/plotly.min.js", include_in_schema=False)
    def plotly_js() -> FileResponse:
        """The plotting library's JavaScript, served from the installed plotly package (no CDN)."""
        return FileResponse(PLOTLY_DIR / "plotly.min.js", media_type="application/javascript",
                            headers={"Cache-Control": "public, max-age=86400"})

    @app.get("/docs", include_in_schema=False)
    def api_docs() -> HTMLResponse:
        """The interactive API description, its JavaScript served from here (no CDN)."""
        return get_swagger_ui_html(openapi_url=app.openapi_url, title="railsign API",
                                   oauth2_redirect_url="/docs/oauth2-redirect",
                                   swagger_js_url="/static/docs/swagger-ui-bundle.js",
                                   swagger_css_url="/static/docs/swagger-ui.css",
                                   swagger_favicon_url="data:,")

    @app.get("/docs/oauth2-redirect", include_in_schema=False)
    def api_docs_redirect() -> HTMLResponse:
        return get_swagger_ui_oauth2_redirect_html()

    app.mount("/static/docs", StaticFiles(directory=DOCS_ASSETS_DIR), name="docs-assets")
    app.mount("/static", StaticFiles(directory=WEB_DIR / "static"), name="static")
    return app
