"""Export and import of rail documents as JSON files.

A file holds either one rail document (schema "railsign.rail/1") or a bundle
(schema "railsign.bundle/1"): a product with its boards and their rails' documents.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import Board, Product, Rail, Team
from server.services import catalog, rail_edits, rails
from server.services.access import Actor
from server.services.errors import Invalid, NotFound

__all__ = ["BUNDLE_SCHEMA", "export_rail", "export_product", "export_board", "import_data"]

BUNDLE_SCHEMA = "railsign.bundle/1"


def export_rail(*, session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    return rails.get_revision(session=session, actor=actor, rail_id=rail_id).document


def _board_entry(session: Session, actor: Actor, board: Board) -> dict[str, Any]:
    rows, _ = rails.list_rails(session=session, actor=actor, board_id=board.id, limit=10_000)
    return {"name": board.name, "revision": board.revision, "description": board.description,
            "rails": [head.document for _, head in rows]}


def export_product(*, session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    product = catalog.get_product(session=session, actor=actor, product_id=product_id)
    boards, _ = catalog.list_boards(session=session, actor=actor, product_id=product.id, limit=10_000)
    return {"schema": BUNDLE_SCHEMA, "product": {"name": product.name, "description": product.description},
            "boards": [_board_entry(session, actor, b) for b in boards]}


def export_board(*, session: Session, actor: Actor, board_id: int) -> dict[str, Any]:
    board = catalog.get_board(session=session, actor=actor, board_id=board_id)
    product = catalog.get_product(session=session, actor=actor, product_id=board.product_id)
    return {"schema": BUNDLE_SCHEMA, "product": {"name": product.name, "description": product.description},
            "boards": [_board_entry(session, actor, board)]}


def _upsert_rail(session: Session, actor: Actor, board: Board, document: Any, message: str) -> str:
    name = document.get("name") if isinstance(document, dict) else None
    existing = session.scalar(select(Rail).where(Rail.board_id == board.id, Rail.name == name)) if name else None
    if existing is None:
        rail_edits.create_rail(session=session, actor=actor, board_id=board.id, document=document, message=message)
        return "created"
    _, _, created = rail_edits.save_rail(session=session, actor=actor, rail_id=existing.id, document=document,
                                         base_n=existing.head_n, part=None, message=message)
    return "updated" if created else "unchanged"


def import_data(*, session: Session, actor: Actor, data: Any, board_id: int | None = None,
                team: str | None = None, message: str = "imported") -> dict[str, int]:
    """Import one rail document (needs ``board_id``) or a bundle; returns counts per outcome.

    Every document is validated before anything is stored, so a bad file stores nothing.
    """
    counts = {"created": 0, "updated": 0, "unchanged": 0}
    if isinstance(data, dict) and data.get("schema") == BUNDLE_SCHEMA:
        boards = data.get("boards") or []
        for b, entry in enumerate(boards):
            for r, doc in enumerate(entry.get("rails") or []):
                rails.normalize_document(doc, prefix=f"boards[{b}].rails[{r}]")
        product = _product_for_bundle(session, actor, data.get("product") or {}, team)
        for entry in boards:
            board = session.scalar(select(Board).where(Board.product_id == product.id, Board.name == entry["name"],
                                                       Board.revision == entry.get("revision", "A")))
            if board is None:
                board = catalog.create_board(session=session, actor=actor, product_id=product.id,
                                             name=entry["name"], revision=entry.get("revision", "A"),
                                             description=entry.get("description", ""))
            for doc in entry.get("rails") or []:
                counts[_upsert_rail(session, actor, board, doc, message)] += 1
        return counts
    rails.normalize_document(data, prefix="")
    if board_id is None:
        raise Invalid("a single rail document needs a board: give --board ID")
    board = catalog.get_board(session=session, actor=actor, board_id=board_id)
    counts[_upsert_rail(session, actor, board, data, message)] += 1
    return counts


def _product_for_bundle(session: Session, actor: Actor, meta: dict[str, Any], team: str | None) -> Product:
    name = meta.get("name")
    if not name:
        raise Invalid("the bundle has no product name", details=[{"field": "product.name", "message": "is required"}])
    product = session.scalar(select(Product).where(Product.name == name))
    if product is not None:
        return catalog.get_product(session=session, actor=actor, product_id=product.id)
    team_id = None
    if team:
        row = session.scalar(select(Team).where(Team.name == team))
        if row is None:
            raise NotFound(f"no team '{team}'")
        team_id = row.id
    elif actor.user is None:
        raise Invalid(f"product '{name}' is new: say which team owns it with --team NAME")
    return catalog.create_product(session=session, actor=actor, name=name,
                                  description=meta.get("description", ""), team_id=team_id)
