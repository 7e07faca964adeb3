"""REST API under /api/v1: one router per resource."""

from __future__ import annotations

from fastapi import APIRouter

from server.api import boards, jobs, parts, products, rails

api_router = APIRouter(prefix="/api/v1")
for module in (products, boards, parts, rails, jobs):
    api_router.include_router(module.router)
