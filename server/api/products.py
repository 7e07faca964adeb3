"""Products: /api/v1/products."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.api import ProductIn, ProductPatch
from server.schemas.responses import Page, Product
from server.services import catalog
from server.services.access import Actor, Permission

router = APIRouter(prefix="/products", tags=["products"], route_class=TypedRoute)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]


@router.get("", response_model=Page[Product], responses=errors(401, 422))
def list_products(session: SessionDep, actor: CurrentActor, page: PageDep, q: SearchText = None) -> dict:
    rows, total = catalog.list_products(session=session, actor=actor, q=q, limit=page.limit, offset=page.offset)
    return page.answer([catalog.product_dict(p) for p in rows], total)


@router.post("", status_code=201, response_model=Product, responses=errors(400, 401, 403, 404, 409, 422))
def create_product(body: ProductIn, session: SessionDep, actor: Editor, response: Response) -> dict:
    product = catalog.create_product(session=session, actor=actor, **body.model_dump())
    response.headers["Location"] = f"/api/v1/products/{product.id}"
    return catalog.product_dict(product)


@router.get("/{product_id}", response_model=Product, responses=errors(401, 404, 422))
def get_product(product_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return catalog.product_dict(catalog.get_product(session=session, actor=actor, product_id=product_id))


@router.patch("/{product_id}", response_model=Product, responses=errors(400, 401, 403, 404, 409, 422))
def update_product(product_id: IdPath, body: ProductPatch, session: SessionDep, actor: Editor) -> dict:
    product = catalog.update_product(session=session, actor=actor, product_id=product_id,
                                     **body.model_dump(exclude_unset=True))
    return catalog.product_dict(product)


@router.delete("/{product_id}", status_code=204, response_class=Response, responses=errors(401, 403, 404, 409, 422))
def delete_product(product_id: IdPath, session: SessionDep, actor: Editor) -> Response:
    catalog.delete_product(session=session, actor=actor, product_id=product_id)
    return Response(status_code=204)
