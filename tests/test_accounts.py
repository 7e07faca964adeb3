"""Users, teams, team workflows (API) and the command line, on SQLite and PostgreSQL (the admin pages:
tests/pages/test_admin_pages.py)."""

from __future__ import annotations

import time

import copy
import io
import re
import sys
from datetime import timedelta

import pytest
from sqlalchemy import select, update

from server.__main__ import main
from server.credentials import verify_password
from server.demo import DEMO_PASSWORD, DEMO_USERS, seed_if_empty
from server.models import ApiToken, AuditEntry, User
from server.pages.common import safe_next
from server.workflow import DEFAULT_WORKFLOW
from tests.conftest import TEST_SECRET
from tests.signoff_support import edit_rail, make_board, make_rail


def _trail(session_factory) -> list[tuple[str, str, str]]:
    with session_factory() as session:
        return [(e.action, e.object_type, e.object_repr) for e in
                session.scalars(select(AuditEntry).order_by(AuditEntry.id))]


def test_admins_create_users_and_teams_and_each_new_team_gets_the_default_workflow(client, people, session_factory):
    admin = people.headers("admin")
    before = len(_trail(session_factory))
    team = client.post("/api/v1/teams", json={"name": "gamma"}, headers=admin)
    assert team.status_code == 201, team.text
    team_id = team.json()["id"]
    assert client.post("/api/v1/teams", json={"name": "gamma"}, headers=admin).status_code == 409
    user = client.post("/api/v1/users", json={"username": "gail", "role": "reviewer", "teams": ["gamma"]},
                       headers=admin)
    assert user.status_code == 201 and user.json()["teams"] == ["gamma"]
    assert client.post("/api/v1/users", json={"username": "gail", "role": "viewer"}, headers=admin).status_code == 409
    assert client.post("/api/v1/users", json={"username": "x", "role": "boss"}, headers=admin).status_code == 422
    assert client.post("/api/v1/users", json={"username": "y", "role": "viewer", "password": "short"},
                       headers=admin).status_code == 422
    moved = client.post(f"/api/v1/teams/{team_id}/members", json={"user_id": people.ids["viewer"]}, headers=admin)
    assert [m["username"] for m in moved.json()["members"]] == ["gail", "viewer"]
    dropped = client.delete(f"/api/v1/teams/{team_id}/members/{people.ids['viewer']}", headers=admin)
    assert [m["username"] for m in dropped.json()["members"]] == ["gail"]
    assert client.delete(f"/api/v1/teams/{team_id}/members/{people.ids['viewer']}", headers=admin).status_code == 404
    role = client.patch(f"/api/v1/users/{user.json()['id']}", json={"role": "manager"}, headers=admin)
    assert role.json()["role"] == "manager"
    workflow = client.get(f"/api/v1/teams/{team_id}/workflow", headers=admin).json()
    assert workflow["version"] == 1 and workflow["definition"] == DEFAULT_WORKFLOW
    assert [t["name"] for t in client.get("/api/v1/teams", headers=admin).json()["items"]] == ["alpha", "beta",
                                                                                                "gamma"]
    assert _trail(session_factory)[before:] == [
        ("create", "team", "gamma"), ("create", "workflow", "gamma: margin review"), ("create", "user", "gail"),
        ("add_member", "team", "gamma"), ("add_member", "team", "gamma"), ("remove_member", "team", "gamma"),
        ("update", "user", "gail")]


def test_me_tells_who_you_are_and_what_you_may_do(client, people):
    me = client.get("/api/v1/me", headers=people.headers("reviewer")).json()
    assert me["username"] == "reviewer" and me["auth"] == "token" and "csrf_token" not in me
    assert me["teams"] == [{"id": people.team_ids["alpha"], "name": "alpha"}]
    assert me["permissions"] == ["advance", "analyze", "read", "review"]


def test_an_invalid_workflow_is_refused_with_its_fields_and_nothing_changes(client, people, session_factory):
    team = people.team_ids["alpha"]
    before = len(_trail(session_factory))
    broken = copy.deepcopy(DEFAULT_WORKFLOW)
    broken["states"][1]["initial"] = True
    broken["transitions"][0]["to"] = "nowhere"
    r = client.put(f"/api/v1/teams/{team}/workflow", json={"definition": broken}, headers=people.headers("admin"))
    assert r.status_code == 422
    fields = {d["field"] for d in r.json()["error"]["details"]}
    assert {"definition.states", "definition.transitions[0].to"} <= fields
    assert client.get(f"/api/v1/teams/{team}/workflow", headers=people.headers("viewer")).json()["version"] == 1
    assert len(_trail(session_factory)) == before
    assert client.put(f"/api/v1/teams/{team}/workflow", json={"definition": DEFAULT_WORKFLOW},
                      headers=people.headers("manager")).status_code == 403


def test_rails_in_a_removed_state_go_back_to_the_initial_state(client, people):
    board = make_board(client, people)
    rail = make_rail(client, people, board)
    moved = client.post(f"/api/v1/rails/{rail['id']}/transitions",
                        json={"transition": "submit for review", "sha256": rail["head"]["sha256"]},
                        headers=people.headers("designer"))
    assert moved.status_code == 200
    smaller = copy.deepcopy(DEFAULT_WORKFLOW)
    smaller["states"] = [s for s in smaller["states"] if s["name"] != "awaiting review"]
    smaller["transitions"] = [t for t in smaller["transitions"] if "awaiting review" not in (t["from"], t["to"])]
    smaller["transitions"].append({"name": "accept margins", "from": "in design", "to": "margins accepted",
                                   "roles": ["reviewer"], "demands": {"approvals": 1, "checks_pass": True}})
    r = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/workflow", json={"definition": smaller},
                   headers=people.headers("admin"))
    assert r.status_code == 200, r.text
    assert r.json()["moved_rails"] == [{"rail_id": rail["id"], "from": "awaiting review", "to": "in design"}]
    status = client.get(f"/api/v1/rails/{rail['id']}/signoff", headers=people.headers("viewer")).json()
    assert status["state"]["name"] == "in design"
    assert [t["name"] for t in status["transitions"]] == ["accept margins"]
    audit = client.get(f"/api/v1/rails/{rail['id']}/audit", headers=people.headers("viewer")).json()["items"]
    assert [e["action"] for e in audit] == ["create", "transition", "reset_state"]
    assert "not in the new workflow" in audit[-1]["after"]["note"]


@pytest.mark.parametrize("target,expected", [("/rails/3?tab=history", "/rails/3?tab=history"),
                                             ("//elsewhere.example/x", "/"), ("https://elsewhere.example/", "/"),
                                             ("/\\elsewhere", "/"), ("account", "/"), ("", "/")])
def test_after_login_only_local_paths(target, expected):
    assert safe_next(target) == expected


def test_the_risk_view_and_audit_export_are_for_managers_and_admins(client, people):
    board = make_board(client, people)
    rail = make_rail(client, people, board)
    edit_rail(client, people, rail, "1 mF")
    product = board["product_id"]
    for who, status in (("viewer", 403), ("designer", 403), ("reviewer", 403), ("manager", 200), ("admin", 200)):
        assert client.get(f"/api/v1/products/{product}/risks", headers=people.headers(who)).status_code == status
        assert client.get(f"/api/v1/products/{product}/audit.csv", headers=people.headers(who)).status_code == status


# --- command line -------------------------------------------------------------------------


@pytest.fixture
def cli(database_url, monkeypatch, capsys):
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)

    def run(*argv: str, stdin: str = "") -> tuple[int, str, str]:
        monkeypatch.setattr(sys, "stdin", io.StringIO(stdin))
        code = main(list(argv))
        out = capsys.readouterr()
        return code, out.out, out.err

    return run


def test_the_command_line_manages_users_and_tokens(cli, session_factory, client):
    code, out, _ = cli("user", "add", "nora", "--role", "designer", "--team", "delta", "--password-stdin",
                       stdin="copper-pour-2024\n")
    assert code == 0 and out.strip() == "added nora (designer; teams: delta)"
    code, out, _ = cli("user", "list")
    assert code == 0 and re.search(r"^nora\s+designer\s+active\s+delta$", out, re.M)
    code, out, _ = cli("user", "set-role", "nora", "--role", "reviewer")
    assert code == 0 and "nora is now reviewer" in out
    code, out, err = cli("token", "create", "nora")
    assert code == 0 and "shown once" in err
    clear = out.strip()
    assert clear.startswith("rsk_")
    me = client.get("/api/v1/me", headers={"Authorization": f"Bearer {clear}"})
    assert me.status_code == 200 and me.json()["username"] == "nora" and me.json()["role"] == "reviewer"
    code, out, _ = cli("token", "list", "nora")
    token_id = int(out.split()[0])
    assert code == 0 and "command line" in out and "active" in out and clear not in out
    assert cli("token", "revoke", str(token_id))[0] == 0
    assert client.get("/api/v1/me", headers={"Authorization": f"Bearer {clear}"}).status_code == 401
    assert cli("user", "add", "nora", "--role", "viewer")[0] == 2          # exists already
    assert cli("user", "set-password", "nora", stdin="\n")[0] == 2          # no password given
    assert cli("user", "set-password", "nora", stdin="short\n")[0] == 2     # too short
    assert cli("user", "disable", "nora")[0] == 0
    with session_factory() as session:
        nora = session.scalar(select(User).where(User.username == "nora"))
        assert nora.active is False and nora.password_hash.startswith("$argon2id$")
        assert "copper-pour-2024" not in nora.password_hash
        assert session.scalar(select(ApiToken).where(ApiToken.id == token_id)).revoked_at is not None


def test_every_way_into_a_team_is_recorded_the_same_way(cli, session_factory, client, people):
    """The teams API, a new user's teams and the command line all write a membership through the
    teams service: one audit entry of the team, naming the user, in the transaction of the change."""
    def members(team_name: str) -> list[tuple[str, dict]]:
        with session_factory() as session:
            return [(e.action, e.after) for e in session.scalars(
                select(AuditEntry).where(AuditEntry.object_type == "team", AuditEntry.object_repr == team_name)
                .order_by(AuditEntry.id))]

    admin = people.headers("admin")
    team_id = client.post("/api/v1/teams", json={"name": "kappa"}, headers=admin).json()["id"]
    added = client.post(f"/api/v1/teams/{team_id}/members", json={"user_id": people.ids["viewer"]}, headers=admin)
    assert added.status_code == 200
    made = client.post("/api/v1/users", json={"username": "kai", "role": "designer", "teams": ["kappa"]},
                       headers=admin)
    assert made.status_code == 201 and made.json()["teams"] == ["kappa"]
    code, out, _ = cli("user", "add-team", "manager", "--team", "kappa")
    assert code == 0 and out.strip() == "manager is in alpha, kappa"
    assert cli("user", "add-team", "manager", "--team", "kappa")[0] == 0     # a member already: nothing written
    assert members("kappa") == [("create", {"name": "kappa"}),
                                ("add_member", {"user": "viewer", "user_id": people.ids["viewer"]}),
                                ("add_member", {"user": "kai", "user_id": made.json()["id"]}),
                                ("add_member", {"user": "manager", "user_id": people.ids["manager"]})]
    # a team named on the command line that does not exist yet is made, with its workflow, in the same step
    assert cli("user", "add-team", "kai", "--team", "lambda")[0] == 0
    assert [a for a, _ in members("lambda")] == ["create", "add_member"]
    workflow = client.get("/api/v1/teams", headers=admin).json()["items"]
    assert "lambda" in [t["name"] for t in workflow]


def test_a_role_changes_through_one_function_whichever_way_it_comes(cli, session_factory, client, people):
    def role_changes() -> list[tuple[str | None, str | None]]:
        with session_factory() as session:
            return [((e.before or {}).get("role"), (e.after or {}).get("role")) for e in session.scalars(
                select(AuditEntry).where(AuditEntry.action == "update", AuditEntry.object_type == "user",
                                         AuditEntry.object_repr == "viewer").order_by(AuditEntry.id))]

    assert cli("user", "set-role", "viewer", "--role", "reviewer")[0] == 0
    patched = client.patch(f"/api/v1/users/{people.ids['viewer']}", json={"role": "manager"},
                           headers=people.headers("admin"))
    assert patched.status_code == 200 and patched.json()["role"] == "manager"
    assert client.patch(f"/api/v1/users/{people.ids['viewer']}", json={"role": "boss"},
                        headers=people.headers("admin")).status_code == 422
    assert role_changes() == [("viewer", "reviewer"), ("reviewer", "manager")]


def test_a_token_use_is_written_at_most_once_a_minute(client, people, session_factory):
    def last_used():
        with session_factory() as session:
            return session.scalar(select(ApiToken.last_used_at).where(ApiToken.user_id == people.ids["reviewer"]))

    token_use = client.app.state.token_use  # writes the stamps in a thread of its own, off the request
    assert last_used() is None
    assert client.get("/api/v1/me", headers=people.headers("reviewer")).status_code == 200   # a read-only request
    token_use.flush()
    first = last_used()
    assert first is not None
    assert client.get("/api/v1/me", headers=people.headers("reviewer")).status_code == 200
    token_use.flush()
    assert last_used() == first                                  # within the minute: not written again
    with session_factory() as session:
        session.execute(update(ApiToken).where(ApiToken.user_id == people.ids["reviewer"])
                        .values(last_used_at=first - timedelta(seconds=61)))
        session.commit()
    token_use.clock = lambda: time.monotonic() + 61
    assert client.post("/api/v1/teams", json={"name": "x"}, headers=people.headers("reviewer")).status_code == 403
    token_use.flush()
    assert last_used() > first                                   # a minute later, a writing request: written


def test_the_demo_seeds_one_user_of_each_role_once(session_factory):
    with session_factory() as session:
        assert seed_if_empty(session) is True
        assert seed_if_empty(session) is False
        rows = session.scalars(select(User).order_by(User.id)).all()
        assert sorted({u.role for u in rows}) == ["admin", "designer", "manager", "reviewer", "viewer"]
        assert [u.username for u in rows] == [name for name, _, _ in DEMO_USERS]
        assert verify_password(rows[0].password_hash, DEMO_PASSWORD)
