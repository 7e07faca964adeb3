"""The managers' risk view: /api/v1/products/{id}/risks."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends

from server.api.common import IdPath, TypedRoute, errors
from server.auth import require
from server.db import SessionDep
from server.schemas.responses import ProductRisks
from server.services import risks
from server.services.access import Actor, Permission

router = APIRouter(tags=["risks"], route_class=TypedRoute)
RiskReader = Annotated[Actor, Depends(require(Permission.RISK))]


@router.get("/products/{product_id}/risks", response_model=ProductRisks, responses=errors(401, 403, 404, 422))
def product_risks(product_id: IdPath, session: SessionDep, actor: RiskReader) -> dict:
    """Per board: failing and marginal checks, waivers, stale or missing sign-offs, rails not analysed."""
    return risks.product_risks(session=session, actor=actor, product_id=product_id)
