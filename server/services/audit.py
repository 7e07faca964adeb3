"""The append-only audit trail: one entry per change, added in the change's own transaction.

Entries are only ever added: no service, route or page changes or deletes one, and the
database refuses UPDATE and DELETE on ``audit_entries`` (triggers made by migration 0003).
"""

from __future__ import annotations

import csv
import io
import json
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import AuditEntry, Product, Rail
from server.services.access import Actor, Permission, scoped_products, scoped_rails
from server.services.errors import NotFound

__all__ = ["record", "entry_dict", "list_entries", "product_entries", "rail_entries", "product_csv", "CSV_COLUMNS"]

CSV_COLUMNS = ["id", "at", "user", "user_id", "request_id", "action", "object_type", "object_id", "object",
               "before", "after"]


def record(
    session: Session,
    actor: Actor,
    *,
    action: str,
    object_type: str,
    object_id: int | None,
    object_repr: str = "",
    product_id: int | None = None,
    before: dict[str, Any] | None = None,
    after: dict[str, Any] | None = None,
) -> AuditEntry:
    """Add an audit entry to ``session``; the caller's commit writes it with the change."""
    entry = AuditEntry(
        user_id=actor.user_id, user_name=actor.name, request_id=actor.request_id, action=action,
        object_type=object_type, object_id=object_id, object_repr=object_repr[:300],
        product_id=product_id, before=before, after=after,
    )
    session.add(entry)
    return entry


def entry_dict(e: AuditEntry) -> dict[str, Any]:
    return {"id": e.id, "at": e.at.isoformat(), "user": e.user_name, "user_id": e.user_id, "request_id": e.request_id,
            "action": e.action, "object_type": e.object_type, "object_id": e.object_id, "object": e.object_repr,
            "product_id": e.product_id, "before": e.before, "after": e.after}


def _page(session: Session, stmt, limit: int, offset: int) -> tuple[list[AuditEntry], int]:
    total = session.scalar(select(func.count()).select_from(stmt.subquery())) or 0
    rows = session.scalars(stmt.order_by(AuditEntry.id).limit(limit).offset(offset)).all()
    return list(rows), total


def list_entries(*, session: Session, actor: Actor, action: str | None = None, object_type: str | None = None,
                 user: str | None = None, limit: int = 100, offset: int = 0) -> tuple[list[AuditEntry], int]:
    """The whole trail, oldest first (admins: it includes logins and changes to users and teams)."""
    actor.require(Permission.ADMIN)
    stmt = select(AuditEntry)
    if action:
        stmt = stmt.where(AuditEntry.action == action)
    if object_type:
        stmt = stmt.where(AuditEntry.object_type == object_type)
    if user:
        stmt = stmt.where(AuditEntry.user_name == user)
    return _page(session, stmt, limit, offset)


def _product(session: Session, actor: Actor, product_id: int) -> Product:
    product = session.scalar(scoped_products(select(Product).where(Product.id == product_id), actor))
    if product is None:
        raise NotFound(f"no product {product_id}")
    return product


def product_entries(*, session: Session, actor: Actor, product_id: int, limit: int = 100,
                    offset: int = 0) -> tuple[list[AuditEntry], int]:
    """Everything recorded about one product, its boards and rails, oldest first (managers and admins)."""
    actor.require(Permission.RISK)
    product = _product(session, actor, product_id)
    return _page(session, select(AuditEntry).where(AuditEntry.product_id == product.id), limit, offset)


def rail_entries(*, session: Session, actor: Actor, rail_id: int, limit: int = 100,
                 offset: int = 0) -> tuple[list[AuditEntry], int]:
    """One rail's history: edits, approvals, waivers and transitions, oldest first."""
    rail = session.scalar(scoped_rails(select(Rail).where(Rail.id == rail_id), actor))
    if rail is None:
        raise NotFound(f"no rail {rail_id}")
    stmt = select(AuditEntry).where(AuditEntry.object_type == "rail", AuditEntry.object_id == rail.id)
    return _page(session, stmt, limit, offset)


def _cell(value: Any) -> str:
    """A CSV cell; text a spreadsheet would run as a formula is prefixed with an apostrophe."""
    text = "" if value is None else value if isinstance(value, str) else json.dumps(value, sort_keys=True)
    return "'" + text if text[:1] in ("=", "+", "-", "@", "\t", "\r") else text


def product_csv(*, session: Session, actor: Actor, product_id: int) -> tuple[str, str]:
    """(file name, CSV text) of the product's whole trail, oldest first (managers and admins)."""
    actor.require(Permission.RISK)
    product = _product(session, actor, product_id)
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(CSV_COLUMNS)
    rows = session.scalars(select(AuditEntry).where(AuditEntry.product_id == product.id).order_by(AuditEntry.id))
    numbers = {"id", "user_id", "object_id"}
    for e in rows:
        d = entry_dict(e)
        writer.writerow([("" if d[c] is None else str(d[c])) if c in numbers else _cell(d[c]) for c in CSV_COLUMNS])
    return f"product-{product.id}-audit.csv", out.getvalue()
