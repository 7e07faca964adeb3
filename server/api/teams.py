"""Teams, their members and their workflow: /api/v1/teams."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Response

from server.api.common import IdPath, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.schemas.accounts import MemberIn, TeamIn
from server.schemas.responses import Listing, SignoffRulesOut, Team, TeamSummary, Workflow, WorkflowReplaced
from server.schemas.signoff import SignoffRulesIn, WorkflowIn
from server.services import governance, teams, workflows
from server.services.access import Actor, Permission

router = APIRouter(prefix="/teams", tags=["teams"], route_class=TypedRoute)
Admin = Annotated[Actor, Depends(require(Permission.ADMIN))]


@router.get("", response_model=Listing[TeamSummary], responses=errors(401, 403))
def list_teams(session: SessionDep, actor: Admin) -> dict:
    rows = teams.list_teams(session=session, actor=actor)
    return {"items": [teams.team_dict(session, t) for t in rows], "total": len(rows)}


@router.post("", status_code=201, response_model=Team, responses=errors(400, 401, 403, 409, 422))
def create_team(body: TeamIn, session: SessionDep, actor: Admin, response: Response) -> dict:
    team = teams.create_team(session=session, actor=actor, name=body.name)
    response.headers["Location"] = f"/api/v1/teams/{team.id}"
    return teams.team_dict(session, team, members=True)


@router.get("/{team_id}", response_model=Team, responses=errors(401, 403, 404, 422))
def get_team(team_id: IdPath, session: SessionDep, actor: Admin) -> dict:
    return teams.team_dict(session, teams.get_team(session=session, actor=actor, team_id=team_id), members=True)


@router.post("/{team_id}/members", response_model=Team, responses=errors(400, 401, 403, 404, 422))
def add_member(team_id: IdPath, body: MemberIn, session: SessionDep, actor: Admin) -> dict:
    team = teams.add_member(session=session, actor=actor, team_id=team_id, user_id=body.user_id)
    return teams.team_dict(session, team, members=True)


@router.delete("/{team_id}/members/{user_id}", response_model=Team, responses=errors(401, 403, 404, 422))
def remove_member(team_id: IdPath, user_id: IdPath, session: SessionDep, actor: Admin) -> dict:
    team = teams.remove_member(session=session, actor=actor, team_id=team_id, user_id=user_id)
    return teams.team_dict(session, team, members=True)


@router.get("/{team_id}/workflow", response_model=Workflow, responses=errors(401, 404, 422))
def get_workflow(team_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """The team's sign-off workflow (members of the team and admins)."""
    return workflows.get_workflow(session=session, actor=actor, team_id=team_id)


@router.put("/{team_id}/workflow", response_model=WorkflowReplaced, responses=errors(400, 401, 403, 404, 422))
def set_workflow(team_id: IdPath, body: WorkflowIn, session: SessionDep, actor: Admin) -> dict:
    """Replace the team's workflow; rails in states it no longer has go to its initial state."""
    return workflows.set_workflow(session=session, actor=actor, team_id=team_id, definition=body.definition)


@router.get("/{team_id}/signoff-rules", response_model=SignoffRulesOut, responses=errors(401, 404, 422))
def get_signoff_rules(team_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """The team's waiver rules: the two-person rule and the role that may waive failing checks."""
    return governance.get_rules(session=session, actor=actor, team_id=team_id)


@router.put("/{team_id}/signoff-rules", response_model=SignoffRulesOut,
            responses=errors(400, 401, 403, 404, 409, 422))
def set_signoff_rules(team_id: IdPath, body: SignoffRulesIn, session: SessionDep, actor: Admin) -> dict:
    """Replace the team's waiver rules (admins)."""
    return governance.set_rules(session=session, actor=actor, team_id=team_id, two_person=body.two_person,
                                fail_waiver_role=body.fail_waiver_role, expected_version=body.expected_version)
