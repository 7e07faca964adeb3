"""Server-rendered pages (Jinja2) over the same service functions as the API."""

from __future__ import annotations

from fastapi import APIRouter, Depends

from server.limits import page_inputs
from server.pages import (account, admin, admin_users, boards, catalog_forms, history, home, live, login, parts,
                          rail_form, rails, reports, risks, signoff)

page_router = APIRouter(include_in_schema=False, dependencies=[Depends(page_inputs)])
for module in (login, account, admin, admin_users, catalog_forms, home, boards, rails, rail_form, history, parts,
               signoff, risks, reports, live):
    page_router.include_router(module.router)
