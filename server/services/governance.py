"""A team's waiver rules in the database (their one write path): the two-person rule and who may waive a fail.

The rules themselves (what they refuse) are pure: :class:`server.workflow.WaiverRules`,
:func:`server.workflow.waiver_refusal`. A team without a stored row has the safe defaults
(two-person rule on, nobody waives a failing check). :mod:`server.services.signoff` enforces
them for the API and the pages alike.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import SignoffRules, Team, utcnow
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound
from server.workflow import FAIL_WAIVER_ROLES, WaiverRules

__all__ = ["rules_for_team", "rules_dict", "get_rules", "list_rules", "set_rules"]


def _row(session: Session, team_id: int) -> SignoffRules | None:
    return session.get(SignoffRules, team_id)


def rules_for_team(session: Session, team_id: int) -> WaiverRules:
    """The team's waiver rules (the defaults when none are stored)."""
    row = _row(session, team_id)
    if row is None:
        return WaiverRules()
    return WaiverRules(two_person=bool(row.two_person), fail_waiver_role=row.fail_waiver_role or None)


def rules_dict(team: Team, row: SignoffRules | None) -> dict[str, Any]:
    rules = WaiverRules() if row is None else WaiverRules(bool(row.two_person), row.fail_waiver_role or None)
    return {"team_id": team.id, "team": team.name, "version": row.version if row else 0,
            "updated_at": row.updated_at.isoformat() if row else None, "updated_by": row.updated_by if row else "",
            **rules.as_dict(), "defaults": WaiverRules().as_dict()}


def _team(session: Session, actor: Actor, team_id: int) -> Team:
    team = session.get(Team, team_id)
    if team is None or not actor.sees_team(team_id):
        raise NotFound(f"no team {team_id}")
    return team


def get_rules(*, session: Session, actor: Actor, team_id: int) -> dict[str, Any]:
    """The waiver rules of one of the actor's teams (another team's: not found)."""
    team = _team(session, actor, team_id)
    return rules_dict(team, _row(session, team.id))


def list_rules(*, session: Session, actor: Actor) -> list[dict[str, Any]]:
    actor.require(Permission.ADMIN)
    teams = session.scalars(select(Team).order_by(Team.name)).all()
    return [rules_dict(t, _row(session, t.id)) for t in teams]


def set_rules(*, session: Session, actor: Actor, team_id: int, two_person: bool, fail_waiver_role: str | None,
              expected_version: int | None = None) -> dict[str, Any]:
    """Replace a team's waiver rules (admins). ``expected_version`` refuses with a conflict when
    someone saved another version since the form was opened (0: the defaults never saved)."""
    actor.require(Permission.ADMIN)
    role = (fail_waiver_role or "").strip() or None
    if role is not None and role not in FAIL_WAIVER_ROLES:
        raise Invalid(f"'{role}' may not waive failing checks: choose nobody or one of {', '.join(FAIL_WAIVER_ROLES)}",
                      details=[{"field": "fail_waiver_role",
                                "message": f"must be empty (nobody) or one of {', '.join(FAIL_WAIVER_ROLES)}"}])
    if not isinstance(two_person, bool):
        raise Invalid("the two-person rule is on or off", details=[{"field": "two_person", "message": "true or false"}])
    team = _team(session, actor, team_id)
    row = session.scalar(select(SignoffRules).where(SignoffRules.team_id == team.id).with_for_update())
    current = row.version if row is not None else 0
    if expected_version is not None and expected_version != current:
        raise Conflict(f"{row.updated_by if row else 'someone'} saved version {current} of the waiver rules of "
                       f"{team.name} after version {expected_version} was opened")
    before = rules_dict(team, row) if row is not None else None
    if row is None:
        row = SignoffRules(team_id=team.id, two_person=two_person, fail_waiver_role=role, version=1,
                           updated_by=actor.name, updated_at=utcnow())
        session.add(row)
    else:
        row.two_person, row.fail_waiver_role, row.version = two_person, role, row.version + 1
        row.updated_at, row.updated_by = utcnow(), actor.name
    session.flush()
    record(session, actor, action="update", object_type="signoff_rules", object_id=team.id,
           object_repr=f"waiver rules of {team.name}",
           before={"two_person": before["two_person"], "fail_waiver_role": before["fail_waiver_role"]}
           if before else None,
           after={"version": row.version, "two_person": two_person, "fail_waiver_role": role})
    session.commit()
    return rules_dict(team, row)
