"""REST API under /api/v1: one router per resource."""

from __future__ import annotations

from fastapi import APIRouter

from server.api import (audit, boards, jobs, me, parts, products, rails, reports, reviews, risks, signoff, teams,
                        tokens, users)

api_router = APIRouter(prefix="/api/v1")
for module in (products, boards, parts, rails, jobs, signoff, reviews, audit, risks, me, tokens, users, teams,
               reports):
    api_router.include_router(module.router)
