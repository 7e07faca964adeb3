"""Shared pieces of the page routes: the base context, form data, safe redirects."""

from __future__ import annotations

from typing import Annotated, Any
from urllib.parse import quote

from fastapi import Depends, Request
from fastapi.responses import HTMLResponse
from starlette.datastructures import FormData

from server.csrf import masked
from server.services.access import Actor, Permission
from server.templating import templates

__all__ = ["page_context", "render", "safe_next", "login_url", "FormDep", "client_address"]


def page_context(request: Request, actor: Actor | None, **extra: Any) -> dict[str, Any]:
    """What every page template may use: the actor, the CSRF token for its forms, what the actor may do."""
    token = extra.pop("csrf_token", "") or getattr(request.state, "csrf_token", "")
    return {"actor": actor, "csrf_token": masked(token), "is_admin": bool(actor and actor.can(Permission.ADMIN)), **extra}


def render(request: Request, name: str, context: dict[str, Any], status_code: int = 200) -> HTMLResponse:
    return templates.TemplateResponse(request, name, context, status_code=status_code)


def safe_next(value: str | None) -> str:
    """A local path to go to after login: never another site (no scheme, no //host, no backslash)."""
    if not value or not value.startswith("/") or value.startswith("//") or "\\" in value or "\n" in value:
        return "/"
    return value


def login_url(request: Request) -> str:
    target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
    return "/login?next=" + quote(target, safe="/")


def client_address(request: Request) -> str:
    return request.client.host if request.client else "unknown"


async def _form(request: Request) -> FormData:
    return await request.form()


FormDep = Annotated[FormData, Depends(_form)]
