"""The append-only audit trail: one entry per change, added in the change's own transaction."""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from server.models import AuditEntry
from server.services.access import Actor

__all__ = ["record"]


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
