"""Products and boards: create, read, update, delete, scoped to the actor's teams."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import ArchivedReport, Board, Product, Rail, Team
from server.services.access import Actor, Permission, scoped_boards, scoped_products
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound, flush_or_conflict

__all__ = ["product_dict", "board_dict", "list_products", "get_product", "create_product", "update_product",
           "delete_product", "list_boards", "get_board", "create_board", "update_board", "delete_board"]


def product_dict(p: Product) -> dict:
    return {"id": p.id, "team_id": p.team_id, "name": p.name, "description": p.description,
            "created_at": p.created_at.isoformat()}


def board_dict(b: Board) -> dict:
    return {"id": b.id, "product_id": b.product_id, "name": b.name, "revision": b.revision,
            "description": b.description, "created_at": b.created_at.isoformat()}


def list_products(*, session: Session, actor: Actor, q: str | None = None, limit: int = 50,
                  offset: int = 0) -> tuple[list[Product], int]:
    stmt = scoped_products(select(Product), actor)
    if q:
        stmt = stmt.where(Product.name.ilike(f"%{q}%"))
    total = session.scalar(select(func.count()).select_from(stmt.subquery())) or 0
    rows = session.scalars(stmt.order_by(Product.name).limit(limit).offset(offset)).all()
    return list(rows), total


def get_product(*, session: Session, actor: Actor, product_id: int) -> Product:
    product = session.scalar(scoped_products(select(Product).where(Product.id == product_id), actor))
    if product is None:
        raise NotFound(f"no product {product_id}")
    return product


def _team_for_new_product(session: Session, actor: Actor, team_id: int | None) -> int:
    if team_id is None:
        if actor.user is None or len(actor.team_ids) != 1:
            raise Invalid("team_id is required: say which team owns the product",
                          details=[{"field": "team_id", "message": "is required"}])
        return next(iter(actor.team_ids))
    if session.get(Team, team_id) is None or not actor.sees_team(team_id):
        raise NotFound(f"no team {team_id}")
    return team_id


def create_product(*, session: Session, actor: Actor, name: str, description: str = "",
                   team_id: int | None = None) -> Product:
    actor.require(Permission.EDIT)
    product = Product(name=name, description=description,
                      team_id=_team_for_new_product(session, actor, team_id))
    session.add(product)
    flush_or_conflict(session, f"a product named '{name}' exists already")
    record(session, actor, action="create", object_type="product", object_id=product.id,
           object_repr=name, product_id=product.id, after=product_dict(product))
    session.commit()
    return product


def update_product(*, session: Session, actor: Actor, product_id: int, name: str | None = None,
                   description: str | None = None) -> Product:
    actor.require(Permission.EDIT)
    product = get_product(session=session, actor=actor, product_id=product_id)
    before = product_dict(product)
    if name is not None:
        product.name = name
    if description is not None:
        product.description = description
    flush_or_conflict(session, f"a product named '{name}' exists already")
    record(session, actor, action="update", object_type="product", object_id=product.id,
           object_repr=product.name, product_id=product.id, before=before, after=product_dict(product))
    session.commit()
    return product


def delete_product(*, session: Session, actor: Actor, product_id: int) -> None:
    actor.require(Permission.EDIT)
    product = get_product(session=session, actor=actor, product_id=product_id)
    if session.scalar(select(func.count()).select_from(Board).where(Board.product_id == product_id)):
        raise Conflict(f"product '{product.name}' still has boards: delete them first")
    record(session, actor, action="delete", object_type="product", object_id=product.id,
           object_repr=product.name, product_id=product.id, before=product_dict(product))
    session.delete(product)
    session.commit()


def list_boards(*, session: Session, actor: Actor, product_id: int | None = None, q: str | None = None,
                limit: int = 50, offset: int = 0) -> tuple[list[Board], int]:
    stmt = scoped_boards(select(Board), actor)
    if product_id is not None:
        stmt = stmt.where(Board.product_id == product_id)
    if q:
        stmt = stmt.where(Board.name.ilike(f"%{q}%"))
    total = session.scalar(select(func.count()).select_from(stmt.subquery())) or 0
    rows = session.scalars(stmt.order_by(Board.name, Board.revision).limit(limit).offset(offset)).all()
    return list(rows), total


def get_board(*, session: Session, actor: Actor, board_id: int) -> Board:
    board = session.scalar(scoped_boards(select(Board).where(Board.id == board_id), actor))
    if board is None:
        raise NotFound(f"no board {board_id}")
    return board


def create_board(*, session: Session, actor: Actor, product_id: int, name: str, revision: str = "A",
                 description: str = "") -> Board:
    actor.require(Permission.EDIT)
    product = get_product(session=session, actor=actor, product_id=product_id)
    board = Board(product_id=product.id, name=name, revision=revision, description=description)
    session.add(board)
    flush_or_conflict(session, f"board '{name}' revision {revision} exists already in '{product.name}'")
    record(session, actor, action="create", object_type="board", object_id=board.id,
           object_repr=f"{name} rev {revision}", product_id=product.id, after=board_dict(board))
    session.commit()
    return board


def update_board(*, session: Session, actor: Actor, board_id: int, name: str | None = None,
                 revision: str | None = None, description: str | None = None) -> Board:
    actor.require(Permission.EDIT)
    board = get_board(session=session, actor=actor, board_id=board_id)
    before = board_dict(board)
    for attr, value in (("name", name), ("revision", revision), ("description", description)):
        if value is not None:
            setattr(board, attr, value)
    flush_or_conflict(session, "a board with that name and revision exists already in this product")
    record(session, actor, action="update", object_type="board", object_id=board.id,
           object_repr=f"{board.name} rev {board.revision}", product_id=board.product_id,
           before=before, after=board_dict(board))
    session.commit()
    return board


def delete_board(*, session: Session, actor: Actor, board_id: int) -> None:
    actor.require(Permission.EDIT)
    board = get_board(session=session, actor=actor, board_id=board_id)
    if session.scalar(select(func.count()).select_from(Rail).where(Rail.board_id == board_id)):
        raise Conflict(f"board '{board.name}' still has rails: delete them first")
    if session.scalar(select(func.count()).select_from(ArchivedReport).where(ArchivedReport.board_id == board_id)):
        raise Conflict(f"board '{board.name}' has archived sign-off reports: they are kept, and the board with them")
    record(session, actor, action="delete", object_type="board", object_id=board.id,
           object_repr=f"{board.name} rev {board.revision}", product_id=board.product_id,
           before=board_dict(board))
    session.delete(board)
    session.commit()


