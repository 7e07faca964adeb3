"""What the product pages share beyond :mod:`server.pages.common`: what the actor may do,
the navigation and the helpers their templates use, redirects after a POST, form values.

A page is a template plus a context built by a plain function (each page module has one,
testable without HTTP); the route only parses the request, calls that function and renders.
"""

from __future__ import annotations

from typing import Any

from fastapi import Request
from fastapi.responses import RedirectResponse
from starlette.datastructures import FormData

from server.pages import common
from server.pages.common import FormDep, render
from server.pages.display import fmt, verdict_style
from server.services.access import Actor, Permission
from server.templating import templates

__all__ = ["page_context", "render", "redirect", "FormDep", "form_dict", "NAV_ITEMS"]

# The main navigation of every page: (label, path, permission needed or None); the current
# section is marked with aria-current.
NAV_ITEMS = [("Products", "/", None), ("Part library", "/parts", None), ("Risks", "/risks", Permission.RISK),
             ("Workflows", "/admin/workflows", Permission.ADMIN), ("Users", "/admin/users", Permission.ADMIN)]
templates.env.globals.update(verdict_style=verdict_style, fmt=fmt, nav_items=NAV_ITEMS)


def page_context(request: Request, actor: Actor | None, **extra: Any) -> dict[str, Any]:
    """The shared page context, plus ``can``: which of the permissions the actor has."""
    can = {p: bool(actor and actor.can(p)) for p in
           (Permission.EDIT, Permission.ANALYZE, Permission.REVIEW, Permission.RISK, Permission.ADMIN)}
    return common.page_context(request, actor, can=can, **extra)


def redirect(path: str) -> RedirectResponse:
    """After a successful POST: see the result with a GET (303)."""
    return RedirectResponse(path, status_code=303)


def form_dict(form: FormData) -> dict[str, str]:
    """The text fields of a submitted form (last value wins; the CSRF token left out)."""
    return {k: v for k, v in form.items() if isinstance(v, str) and k != "csrf_token"}
