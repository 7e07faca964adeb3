"""Shared pieces of the page routes: the base context every template gets, rendering, form data.

A page is a template plus a context built by a plain function (each page module has one,
testable without HTTP); the route only parses the request, calls that function and renders.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse
from starlette.datastructures import FormData

from server.pages.display import fmt, verdict_style
from server.services.access import Actor, Permission
from server.templating import templates

__all__ = ["page_context", "render", "redirect", "FormDep", "form_dict", "NAV_ITEMS"]

templates.env.globals.update(verdict_style=verdict_style, fmt=fmt)

# The main navigation: (label, path); the current section is marked with aria-current.
NAV_ITEMS = [("Products", "/"), ("Part library", "/parts")]


def page_context(request: Request, actor: Actor | None, **extra: Any) -> dict[str, Any]:
    """What every page template may use: the actor, the CSRF token for its forms, what the actor may do."""
    can = {p: bool(actor and actor.can(p)) for p in
           (Permission.EDIT, Permission.ANALYZE, Permission.REVIEW, Permission.RISK, Permission.ADMIN)}
    return {"actor": actor, "csrf_token": getattr(request.state, "csrf_token", ""),
            "is_admin": can[Permission.ADMIN], "can": can, "nav_items": NAV_ITEMS,
            "path": request.url.path, **extra}


def render(request: Request, name: str, context: dict[str, Any], status_code: int = 200) -> HTMLResponse:
    return templates.TemplateResponse(request, name, context, status_code=status_code)


def redirect(path: str) -> RedirectResponse:
    """After a successful POST: see the result with a GET (303)."""
    return RedirectResponse(path, status_code=303)


async def _form(request: Request) -> FormData:
    return await request.form()


FormDep = Annotated[FormData, Depends(_form)]


def form_dict(form: FormData) -> dict[str, str]:
    """The text fields of a submitted form (last value wins; the CSRF token left out)."""
    return {k: v for k, v in form.items() if isinstance(v, str) and k != "csrf_token"}
