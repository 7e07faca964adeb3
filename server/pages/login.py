"""Logging in and out: GET/POST /login, POST /logout."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from server.auth import LOGIN_CSRF_COOKIE, SESSION_COOKIE, CurrentActor, optional_actor
from server.db import SessionDep
from server.pages.common import client_address, page_context, render, safe_next
from server.services import logins
from server.services.access import Actor
from server.services.errors import TooManyRequests, Unauthenticated

router = APIRouter(include_in_schema=False)


def login_context(request: Request, *, next_path: str, csrf_token: str, error: str = "",
                  username: str = "") -> dict:
    return page_context(request, None, csrf_token=csrf_token, next=safe_next(next_path), error=error,
                        username=username)


def _login_token(request: Request) -> tuple[str, str | None]:
    """The login form's CSRF token, and a new cookie value when the client has no valid one."""
    cookie = request.app.state.session_cookie
    token = cookie.load_login_csrf(request.cookies.get(LOGIN_CSRF_COOKIE))
    if token:
        return token, None
    value, token = cookie.dump_login_csrf()
    return token, value


def _login_page(request: Request, *, next_path: str, error: str = "", username: str = "",
                status_code: int = 200) -> Response:
    token, cookie_value = _login_token(request)
    response = render(request, "login.html", login_context(request, next_path=next_path, csrf_token=token,
                                                           error=error, username=username), status_code)
    if cookie_value:
        response.set_cookie(LOGIN_CSRF_COOKIE, cookie_value, **request.app.state.session_cookie.login_csrf_kwargs())
    response.headers["Cache-Control"] = "no-store"
    return response


@router.get("/login", response_class=HTMLResponse)
def login_form(request: Request, actor: Annotated[Actor | None, Depends(optional_actor)],
               next: str = "/") -> Response:
    if actor is not None:
        return RedirectResponse(safe_next(next), status_code=303)
    return _login_page(request, next_path=next)


@router.post("/login", response_class=HTMLResponse)
def login_submit(request: Request, session: SessionDep, username: Annotated[str, Form()] = "",
                 password: Annotated[str, Form()] = "", next: Annotated[str, Form()] = "/") -> Response:
    try:
        user = logins.log_in(session=session, settings=request.app.state.settings, username=username,
                             password=password, address=client_address(request),
                             request_id=request.state.request_id)
    except (Unauthenticated, TooManyRequests) as exc:
        response = _login_page(request, next_path=next, error=exc.message, username=username,
                               status_code=exc.status)
        if isinstance(exc, TooManyRequests):
            response.headers["Retry-After"] = str(exc.extra.get("retry_after_s", 60))
        return response
    cookie = request.app.state.session_cookie
    value, _ = cookie.dump(user.id, user.password_hash, user.session_generation)
    response = RedirectResponse(safe_next(next), status_code=303)
    response.set_cookie(SESSION_COOKIE, value, **cookie.cookie_kwargs())
    response.delete_cookie(LOGIN_CSRF_COOKIE, path="/")
    return response


@router.post("/logout")
def logout(request: Request, session: SessionDep, actor: CurrentActor) -> Response:
    logins.log_out(session=session, actor=actor)
    response = RedirectResponse("/login", status_code=303)
    kwargs = request.app.state.session_cookie.cookie_kwargs()
    response.delete_cookie(SESSION_COOKIE, path="/", secure=kwargs["secure"], httponly=True, samesite="lax")
    return response

