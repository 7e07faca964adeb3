"""What the open rail and board pages follow while they are open: a short digest of what they show that
others change (revisions, results, jobs, sign-off state, approvals, waivers) and the progress of the
active jobs. A page holds the digest it was drawn with; a different one means "draw me again".

Reads only, a few aggregate statements over indexed columns; scoped to the actor's teams (another
team's rail or board is not found).
"""

from __future__ import annotations

import hashlib
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import AnalysisResult, Approval, Job, Rail, RailState, Waiver
from server.services.catalog import get_board
from server.services.rails import get_rail
from server.services.access import Actor

__all__ = ["rail_state", "board_state"]

_ACTIVE = ("queued", "running")


def _state(session: Session, rails_where, jobs_where) -> dict[str, Any]:  # noqa: ANN001
    rail_ids = select(Rail.id).where(rails_where).scalar_subquery()
    rails = session.execute(select(func.count(Rail.id), func.coalesce(func.sum(Rail.head_n), 0),
                                   func.max(Rail.updated_at), func.count(Rail.retired_at)).where(rails_where)).one()
    result = session.scalar(select(func.max(AnalysisResult.id)).join(
        Rail, Rail.head_sha256 == AnalysisResult.sha256).where(rails_where))
    approvals = session.execute(select(func.max(Approval.id), func.count(Approval.stale_at))
                                .where(Approval.rail_id.in_(rail_ids))).one()
    waiver = session.scalar(select(func.max(Waiver.id)).where(Waiver.rail_id.in_(rail_ids)))
    states = session.execute(select(func.max(RailState.since), func.count(RailState.rail_id))
                             .where(RailState.rail_id.in_(rail_ids))).one()
    jobs = session.execute(select(Job.id, Job.kind, Job.state, Job.progress, Job.rail_id)
                           .where(jobs_where, Job.state.in_(_ACTIVE)).order_by(Job.id)).all()
    last_job = session.scalar(select(func.max(Job.id)).where(jobs_where))
    facts = (tuple(rails), result, tuple(approvals), waiver, tuple(states), last_job,
             tuple((j.id, j.state) for j in jobs))
    return {"version": hashlib.sha256(repr(facts).encode()).hexdigest()[:20],
            "jobs": [{"id": j.id, "kind": j.kind, "state": j.state, "progress": round(j.progress, 3),
                      "rail_id": j.rail_id} for j in jobs]}


def rail_state(*, session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    """The digest and active jobs of one rail's page."""
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    return _state(session, Rail.id == rail.id, Job.rail_id == rail.id)


def board_state(*, session: Session, actor: Actor, board_id: int) -> dict[str, Any]:
    """The digest and active jobs of a board's page (its rails' and the board's own)."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    return _state(session, Rail.board_id == board.id, Job.board_id == board.id)
