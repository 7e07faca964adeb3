"""What else happens, in the same transaction, when a rail gets a new revision.

Called explicitly by :mod:`server.services.rails` after the revision row is added and
before the commit. Each step is named here so the order is plain to read.
"""

from __future__ import annotations

from sqlalchemy.orm import Session

from server.models import Rail, RailRevision
from server.services import signoff
from server.services.access import Actor

__all__ = ["run"]


def run(session: Session, actor: Actor, rail: Rail, revision: RailRevision, *,
        previous: RailRevision | None) -> None:
    """Side effects of a new revision (queued analyses, workflow state) go here, in order."""
    signoff.on_new_revision(session, actor, rail, revision, previous=previous)
