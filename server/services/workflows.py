"""Team workflows in the database: the default for a new team, reading, replacing, rail states.

The rules of a definition live in :mod:`server.workflow` (pure); this module stores it per
team, keeps every rail's current state, and records every change in the audit trail.
"""

from __future__ import annotations

import copy
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import Board, Product, Rail, RailRevision, RailState, Team, Workflow, utcnow
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound
from server.workflow import DEFAULT_WORKFLOW, WorkflowDef, WorkflowInvalid, parse_workflow

__all__ = ["ensure_default", "definition_for_team", "workflow_dict", "get_workflow", "set_workflow", "list_workflows",
           "team_of_rail", "place_new_rail", "state_of", "move_rail", "rail_states"]


def ensure_default(session: Session, actor: Actor, team: Team) -> Workflow:
    """Give ``team`` the default workflow unless it has one (the caller commits)."""
    row = session.scalar(select(Workflow).where(Workflow.team_id == team.id))
    if row is not None:
        return row
    row = Workflow(team_id=team.id, definition=copy.deepcopy(DEFAULT_WORKFLOW), version=1, updated_by=actor.name)
    session.add(row)
    session.flush()
    record(session, actor, action="create", object_type="workflow", object_id=row.id,
           object_repr=f"{team.name}: {DEFAULT_WORKFLOW['name']}", after={"team": team.name, "definition": row.definition})
    return row


def _row(session: Session, team_id: int) -> Workflow | None:
    return session.scalar(select(Workflow).where(Workflow.team_id == team_id))


def definition_for_team(session: Session, team_id: int) -> WorkflowDef:
    """The team's workflow (the default when none is stored)."""
    row = _row(session, team_id)
    return parse_workflow(row.definition if row is not None else DEFAULT_WORKFLOW)


def workflow_dict(team: Team, row: Workflow | None) -> dict[str, Any]:
    definition = parse_workflow(row.definition if row is not None else DEFAULT_WORKFLOW).as_dict()
    return {"team_id": team.id, "team": team.name, "version": row.version if row else 0,
            "updated_at": row.updated_at.isoformat() if row else None, "updated_by": row.updated_by if row else "",
            "definition": definition}


def _team(session: Session, actor: Actor, team_id: int) -> Team:
    team = session.get(Team, team_id)
    if team is None or not actor.sees_team(team_id):
        raise NotFound(f"no team {team_id}")
    return team


def get_workflow(*, session: Session, actor: Actor, team_id: int) -> dict[str, Any]:
    """The workflow of one of the actor's teams (another team's: not found)."""
    team = _team(session, actor, team_id)
    return workflow_dict(team, _row(session, team.id))


def list_workflows(*, session: Session, actor: Actor) -> list[dict[str, Any]]:
    actor.require(Permission.ADMIN)
    teams = session.scalars(select(Team).order_by(Team.name)).all()
    return [workflow_dict(t, _row(session, t.id)) for t in teams]


def set_workflow(*, session: Session, actor: Actor, team_id: int, definition: Any,
                 expected_version: int | None = None) -> dict[str, Any]:
    """Replace a team's workflow (admins). Rails in a state that no longer exists go to the initial state.

    ``expected_version`` (the version an editor was opened on; 0 for the default never replaced)
    refuses the change with a conflict when someone saved another version meanwhile.
    """
    actor.require(Permission.ADMIN)
    try:
        wf = parse_workflow(definition)
    except WorkflowInvalid as exc:
        raise Invalid(str(exc), details=[{**e, "field": f"definition.{e['field']}".rstrip(".")}
                                         for e in exc.errors]) from None
    team = _team(session, actor, team_id)
    # locked (PostgreSQL; SQLite's write sessions hold the write lock): two saves of one version cannot both pass
    row = session.scalar(select(Workflow).where(Workflow.team_id == team.id).with_for_update())
    current = row.version if row is not None else 0
    if expected_version is not None and expected_version != current:
        raise Conflict(f"{row.updated_by if row else 'someone'} saved version {current} of the workflow of "
                       f"{team.name} after version {expected_version} was opened")
    before = row.definition if row is not None else None
    if row is None:
        row = Workflow(team_id=team.id, definition=wf.as_dict(), version=1, updated_by=actor.name)
        session.add(row)
    else:
        row.definition, row.version = wf.as_dict(), row.version + 1
        row.updated_at, row.updated_by = utcnow(), actor.name
    session.flush()
    record(session, actor, action="update", object_type="workflow", object_id=row.id,
           object_repr=f"{team.name}: {wf.name}", before={"definition": before} if before else None,
           after={"version": row.version, "definition": row.definition})
    moved = []
    stmt = (select(RailState, Rail, Board.product_id).join(Rail, Rail.id == RailState.rail_id)
            .join(Board, Board.id == Rail.board_id).join(Product, Product.id == Board.product_id)
            .where(Product.team_id == team.id).order_by(Rail.id))
    for state, rail, product_id in session.execute(stmt).all():
        if not wf.has_state(state.state):
            moved.append({"rail_id": rail.id, "from": state.state, "to": wf.initial})
            move_rail(session, actor, rail, state, wf.initial, product_id=product_id, action="reset_state",
                      note=f"state '{state.state}' is not in the new workflow")
    session.commit()
    return {**workflow_dict(team, row), "moved_rails": moved}


def team_of_rail(session: Session, rail: Rail) -> tuple[int, int]:
    """(team id, product id) of a rail."""
    board = rail.board
    product = session.get(Product, board.product_id)
    return product.team_id, product.id


def place_new_rail(session: Session, actor: Actor, rail: Rail, revision: RailRevision) -> RailState:
    """Put a new rail in its team's initial state (the caller commits)."""
    team_id, _ = team_of_rail(session, rail)
    wf = definition_for_team(session, team_id)
    state = RailState(rail_id=rail.id, state=wf.initial, revision_n=revision.n, changed_by=actor.name)
    session.add(state)
    return state


def state_of(session: Session, rail: Rail, wf: WorkflowDef) -> RailState:
    """The rail's state row; a rail without one (or in a state the workflow lost) stands in the initial state."""
    row = session.get(RailState, rail.id)
    if row is None:
        row = RailState(rail_id=rail.id, state=wf.initial, revision_n=rail.head_n, changed_by="railsign")
        session.add(row)
    elif not wf.has_state(row.state):
        row.state = wf.initial
    return row


def move_rail(session: Session, actor: Actor, rail: Rail, row: RailState, target: str, *, product_id: int,
              action: str = "transition", note: str = "", extra: dict[str, Any] | None = None) -> None:
    """Move a rail to ``target`` and record it (the caller commits)."""
    before = {"state": row.state, "revision": row.revision_n}
    row.state, row.revision_n, row.since, row.changed_by = target, rail.head_n, utcnow(), actor.name
    after: dict[str, Any] = {"state": target, "revision": rail.head_n, **(extra or {})}
    if note:
        after["note"] = note
    record(session, actor, action=action, object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=product_id, before=before, after=after)


def rail_states(session: Session, rail_ids: list[int]) -> dict[int, str]:
    """Current workflow state name of each rail id (for list pages)."""
    if not rail_ids:
        return {}
    rows = session.execute(select(RailState.rail_id, RailState.state).where(RailState.rail_id.in_(rail_ids)))
    return {rail_id: state for rail_id, state in rows}
