"""Server-rendered pages (Jinja2) over the same service functions as the API."""

from __future__ import annotations

from fastapi import APIRouter

from server.pages import account, admin, login

page_router = APIRouter()
for module in (login, account, admin):
    page_router.include_router(module.router)
