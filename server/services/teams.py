"""Teams and their members (admins): the one write path of the ``teams`` and ``team_members`` tables.

A new team gets the default workflow in the same transaction. Every membership change is an
audit entry of the team (``add_member``, ``remove_member``, naming the user) in the
transaction of the change, whichever way it comes: the teams API, a new user's teams
(:func:`join_teams`, called by :func:`server.services.users.create_user`) or the command line.
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import Product, Team, TeamMember, User
from server.services import workflows
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound

__all__ = ["team_dict", "list_teams", "get_team", "create_team", "add_member", "join_team", "remove_member",
           "join_teams", "set_memberships"]


def team_dict(session: Session, team: Team, *, members: bool = False) -> dict:
    out = {"id": team.id, "name": team.name, "created_at": team.created_at.isoformat(),
           "products": session.scalar(select(func.count()).select_from(Product).where(Product.team_id == team.id))}
    if members:
        users = session.scalars(select(User).join(TeamMember, TeamMember.user_id == User.id)
                                .where(TeamMember.team_id == team.id).order_by(User.username)).all()
        out["members"] = [{"id": u.id, "username": u.username, "role": u.role, "active": u.active} for u in users]
    return out


def list_teams(*, session: Session, actor: Actor) -> list[Team]:
    actor.require(Permission.ADMIN)
    return list(session.scalars(select(Team).order_by(Team.name)))


def get_team(*, session: Session, actor: Actor, team_id: int) -> Team:
    actor.require(Permission.ADMIN)
    team = session.get(Team, team_id)
    if team is None:
        raise NotFound(f"no team {team_id}")
    return team


# --- the writes: one function per table ------------------------------------------------------


def _new_team(session: Session, actor: Actor, name: str) -> Team:
    """Add a team with its default workflow, both recorded (the caller commits)."""
    actor.require(Permission.ADMIN)
    team = Team(name=name)
    session.add(team)
    session.flush()
    record(session, actor, action="create", object_type="team", object_id=team.id, object_repr=name,
           after={"name": name})
    workflows.ensure_default(session, actor, team)
    return team


def _add(session: Session, actor: Actor, team: Team, user: User) -> None:
    """Put ``user`` in ``team`` unless they are in it, recorded (the caller commits)."""
    if session.get(TeamMember, (team.id, user.id)) is not None:
        return
    session.add(TeamMember(team_id=team.id, user_id=user.id))
    session.flush()
    session.expire(user, ["teams"])
    record(session, actor, action="add_member", object_type="team", object_id=team.id, object_repr=team.name,
           after={"user": user.username, "user_id": user.id})


def _team_named(session: Session, actor: Actor, name: str) -> Team:
    """The team called ``name``; created (with its default workflow) when there is none."""
    team = session.scalar(select(Team).where(Team.name == name))
    return team if team is not None else _new_team(session, actor, name)


# --- commands and steps --------------------------------------------------------------------


def create_team(*, session: Session, actor: Actor, name: str) -> Team:
    actor.require(Permission.ADMIN)
    name = " ".join((name or "").split())
    if not name:
        raise Invalid("a team needs a name", details=[{"field": "name", "message": "is required"}])
    if session.scalar(select(Team.id).where(Team.name == name)) is not None:
        raise Conflict(f"a team named '{name}' exists already")
    team = _new_team(session, actor, name)
    session.commit()
    return team


def _user(session: Session, user_id: int) -> User:
    user = session.get(User, user_id)
    if user is None:
        raise Invalid(f"no user {user_id}", details=[{"field": "user_id", "message": "names no user"}])
    return user


def add_member(*, session: Session, actor: Actor, team_id: int, user_id: int) -> Team:
    team = get_team(session=session, actor=actor, team_id=team_id)
    _add(session, actor, team, _user(session, user_id))
    session.commit()
    return team


def join_team(*, session: Session, actor: Actor, user_id: int, team_name: str) -> Team:
    """Put a user in the team called ``team_name``, creating the team when there is none (admins)."""
    actor.require(Permission.ADMIN)
    team = _team_named(session, actor, team_name)
    _add(session, actor, team, _user(session, user_id))
    session.commit()
    return team


def join_teams(session: Session, actor: Actor, user: User, names: Sequence[str]) -> None:
    """Put ``user`` in each team named, creating the teams there are none of (admins; the caller commits)."""
    for name in dict.fromkeys(names):
        _add(session, actor, _team_named(session, actor, name), user)


def _remove(session: Session, actor: Actor, team: Team, user: User, member: TeamMember) -> None:
    """Take ``user`` out of ``team``, recorded (the caller commits)."""
    session.delete(member)
    session.flush()
    session.expire(user, ["teams"])
    record(session, actor, action="remove_member", object_type="team", object_id=team.id, object_repr=team.name,
           after={"user": user.username, "user_id": user.id})


def remove_member(*, session: Session, actor: Actor, team_id: int, user_id: int) -> Team:
    team = get_team(session=session, actor=actor, team_id=team_id)
    member = session.get(TeamMember, (team.id, user_id))
    if member is None:
        raise NotFound(f"user {user_id} is not a member of team '{team.name}'")
    _remove(session, actor, team, session.get(User, user_id), member)
    session.commit()
    return team


def set_memberships(*, session: Session, actor: Actor, user_id: int, team_ids: Sequence[int]) -> User:
    """Make the user a member of exactly the teams given (admins), in one transaction: one audit entry
    per team joined or left, nothing for a team kept."""
    actor.require(Permission.ADMIN)
    user = _user(session, user_id)
    wanted = set(team_ids)
    teams = {t.id: t for t in session.scalars(select(Team).where(Team.id.in_(wanted or {-1})))}
    unknown = sorted(wanted - set(teams))
    if unknown:
        raise Invalid(f"no team {unknown[0]}", details=[{"field": "team_ids", "message": f"names no team: {unknown}"}])
    members = {m.team_id: m for m in session.scalars(select(TeamMember).where(TeamMember.user_id == user.id))}
    for team_id in sorted(set(members) - wanted):
        _remove(session, actor, session.get(Team, team_id), user, members[team_id])
    for team_id in sorted(wanted - set(members)):
        _add(session, actor, teams[team_id], user)
    session.commit()
    return user
