"""Boards: /api/v1/boards."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, IdQuery, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.api import BoardIn, BoardPatch
from server.schemas.responses import Board, Page
from server.services import catalog
from server.services.access import Actor, Permission

router = APIRouter(prefix="/boards", tags=["boards"], route_class=TypedRoute)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]


@router.get("", response_model=Page[Board], responses=errors(401, 422))
def list_boards(session: SessionDep, actor: CurrentActor, page: PageDep, product_id: IdQuery = None,
                q: SearchText = None) -> dict:
    rows, total = catalog.list_boards(session=session, actor=actor, product_id=product_id, q=q,
                                      limit=page.limit, offset=page.offset)
    return page.answer([catalog.board_dict(b) for b in rows], total)


@router.post("", status_code=201, response_model=Board, responses=errors(400, 401, 403, 404, 409, 422))
def create_board(body: BoardIn, session: SessionDep, actor: Editor, response: Response) -> dict:
    board = catalog.create_board(session=session, actor=actor, **body.model_dump())
    response.headers["Location"] = f"/api/v1/boards/{board.id}"
    return catalog.board_dict(board)


@router.get("/{board_id}", response_model=Board, responses=errors(401, 404, 422))
def get_board(board_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return catalog.board_dict(catalog.get_board(session=session, actor=actor, board_id=board_id))


@router.patch("/{board_id}", response_model=Board, responses=errors(400, 401, 403, 404, 409, 422))
def update_board(board_id: IdPath, body: BoardPatch, session: SessionDep, actor: Editor) -> dict:
    board = catalog.update_board(session=session, actor=actor, board_id=board_id,
                                 **body.model_dump(exclude_unset=True))
    return catalog.board_dict(board)


@router.delete("/{board_id}", status_code=204, response_class=Response, responses=errors(401, 403, 404, 409, 422))
def delete_board(board_id: IdPath, session: SessionDep, actor: Editor) -> Response:
    catalog.delete_board(session=session, actor=actor, board_id=board_id)
    return Response(status_code=204)
