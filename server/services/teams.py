"""Teams and their members (admins). A new team gets the default workflow in the same transaction."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import Product, Team, TeamMember, User
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound
from server.services.users import get_or_create_team

__all__ = ["team_dict", "list_teams", "get_team", "create_team", "add_member", "remove_member"]


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


def create_team(*, session: Session, actor: Actor, name: str) -> Team:
    actor.require(Permission.ADMIN)
    name = " ".join((name or "").split())
    if not name:
        raise Invalid("a team needs a name", details=[{"field": "name", "message": "is required"}])
    if session.scalar(select(Team.id).where(Team.name == name)) is not None:
        raise Conflict(f"a team named '{name}' exists already")
    team = get_or_create_team(session=session, actor=actor, name=name)
    session.commit()
    return team


def _member_change(session: Session, actor: Actor, team: Team, user: User, action: str) -> None:
    record(session, actor, action=action, object_type="team", object_id=team.id, object_repr=team.name,
           after={"user": user.username, "user_id": user.id})


def add_member(*, session: Session, actor: Actor, team_id: int, user_id: int) -> Team:
    team = get_team(session=session, actor=actor, team_id=team_id)
    user = session.get(User, user_id)
    if user is None:
        raise Invalid(f"no user {user_id}", details=[{"field": "user_id", "message": "names no user"}])
    if session.get(TeamMember, (team.id, user.id)) is None:
        session.add(TeamMember(team_id=team.id, user_id=user.id))
        _member_change(session, actor, team, user, "add_member")
    session.commit()
    return team


def remove_member(*, session: Session, actor: Actor, team_id: int, user_id: int) -> Team:
    team = get_team(session=session, actor=actor, team_id=team_id)
    member = session.get(TeamMember, (team.id, user_id))
    if member is None:
        raise NotFound(f"user {user_id} is not a member of team '{team.name}'")
    user = session.get(User, user_id)
    session.delete(member)
    _member_change(session, actor, team, user, "remove_member")
    session.commit()
    return team

