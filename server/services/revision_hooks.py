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
    """Side effects of a new revision, in order: its analysis is queued, then the workflow reacts
    (older approvals go stale, the rail moves to the state the team's workflow names)."""
    from server import jobs  # jobs imports the rail services; imported here to keep the import graph acyclic

    jobs.enqueue_for_revision(session, actor, rail, revision)
    signoff.on_new_revision(session, actor, rail, revision, previous=previous)
