"""Sign-off through the API on SQLite and PostgreSQL: approvals bound to revisions, waivers, transitions,
team scoping, and the audit trail they leave."""

from __future__ import annotations

import copy

import pytest
from sqlalchemy import text
from sqlalchemy.exc import DBAPIError

from server.models import AuditEntry
from server.services import users as user_service
from server.services.access import Actor
from server.workflow import DEFAULT_WORKFLOW
from tests.signoff_support import allow_fail_waivers, FAILING, PASSING, edit_rail, make_board, make_rail, store_checks


@pytest.fixture(autouse=True)
def _rules_these_tests_were_written_under(session_factory, people):
    """A reviewer may waive a failing check and approve alone here: the waiver rules are tests/test_governance.py's."""
    allow_fail_waivers(session_factory, people.team_ids["alpha"])


@pytest.fixture
def board(client, people) -> dict:
    return make_board(client, people)


@pytest.fixture
def rail(client, people, board) -> dict:
    return make_rail(client, people, board)


def _status(client, people, rail_id, who="viewer"):
    r = client.get(f"/api/v1/rails/{rail_id}/signoff", headers=people.headers(who))
    assert r.status_code == 200, r.text
    return r.json()


def _move(client, people, rail_id, name, who, sha):
    return client.post(f"/api/v1/rails/{rail_id}/transitions", json={"transition": name, "sha256": sha},
                       headers=people.headers(who))


def _approve(client, people, rail_id, who, sha, comment="checked the startup and fault margins"):
    return client.post(f"/api/v1/rails/{rail_id}/approvals", json={"sha256": sha, "comment": comment},
                       headers=people.headers(who))


def _audit_actions(client, people, rail_id) -> list[str]:
    r = client.get(f"/api/v1/rails/{rail_id}/audit", headers=people.headers("viewer"))
    assert r.status_code == 200, r.text
    return [e["action"] for e in r.json()["items"]]


def _add_user(session_factory, name, role, team):
    with session_factory() as session:
        system = Actor.system("test-setup")
        user_service.create_user(session=session, actor=system, username=name, role=role, password=None, teams=[team])
        _, token = user_service.create_token(session=session, actor=system, username=name, name="tests")
    return {"Authorization": f"Bearer {token}"}


def test_a_new_rail_starts_in_the_initial_state_with_what_it_may_do_next(client, people, rail):
    status = _status(client, people, rail["id"], "designer")
    assert status["state"]["name"] == "in design" and status["state"]["signed_off"] is False
    assert status["head"]["sha256"] == rail["head"]["sha256"]
    offered = {t["name"]: t for t in status["transitions"]}
    assert list(offered) == ["submit for review"]
    assert offered["submit for review"]["you_may_take"] is True
    assert status["checks"]["analysed"] is False


def test_self_approval_is_refused(client, people, rail):
    sha = rail["head"]["sha256"]
    promoted = client.patch(f"/api/v1/users/{people.ids['designer']}", json={"role": "reviewer"},
                            headers=people.headers("admin"))
    assert promoted.status_code == 200 and promoted.json()["role"] == "reviewer"
    own = _approve(client, people, rail["id"], "designer", sha)
    assert own.status_code == 403, own.text
    assert "you authored revision 1" in own.json()["error"]["message"]
    store_checks(client.app.state.sessionmaker, sha, FAILING)
    own_waiver = client.post(f"/api/v1/rails/{rail['id']}/waivers",
                             json={"sha256": sha, "check_id": "startup_soa", "reason": "fine on the bench"},
                             headers=people.headers("designer"))
    assert own_waiver.status_code == 403
    assert _status(client, people, rail["id"])["approvals"] == []
    assert _status(client, people, rail["id"])["waivers"] == []
    other = _approve(client, people, rail["id"], "reviewer", sha)
    assert other.status_code == 201, other.text
    assert other.json()["revision"] == 1 and other.json()["sha256"] == sha and other.json()["stale"] is False


def test_approval_of_an_old_revision_is_refused(client, people, rail):
    old_sha = rail["head"]["sha256"]
    new = edit_rail(client, people, rail, "1 mF")
    r = _approve(client, people, rail["id"], "reviewer", old_sha)
    assert r.status_code == 409, r.text
    error = r.json()["error"]
    assert "not its current revision (2)" in error["message"]
    assert error["current"] == {"n": 2, "sha256": new["head"]["sha256"]}
    unknown = _approve(client, people, rail["id"], "reviewer", "0" * 64)
    assert unknown.status_code == 422
    assert _status(client, people, rail["id"])["approvals"] == []
    not_analysed = _approve(client, people, rail["id"], "reviewer", new["head"]["sha256"])
    assert not_analysed.status_code == 409, not_analysed.text
    assert not_analysed.json()["error"]["code"] == "not_analysed"
    assert "analyse the revision first" in not_analysed.json()["error"]["message"]
    store_checks(client.app.state.sessionmaker, new["head"]["sha256"], PASSING)
    assert _approve(client, people, rail["id"], "reviewer", new["head"]["sha256"]).status_code == 201
    twice = _approve(client, people, rail["id"], "reviewer", new["head"]["sha256"])
    assert twice.status_code == 409


def test_an_approval_needs_a_comment(client, people, rail):
    sha = rail["head"]["sha256"]
    assert _approve(client, people, rail["id"], "reviewer", sha, comment="").status_code == 422
    assert _approve(client, people, rail["id"], "reviewer", sha, comment="   ").status_code == 422


def test_editing_a_signed_off_rail_makes_its_approvals_stale_and_moves_it_back(client, people, rail):
    sha1 = rail["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha1, PASSING)
    assert _move(client, people, rail["id"], "submit for review", "designer", sha1).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer", sha1).status_code == 201
    accepted = _move(client, people, rail["id"], "accept margins", "reviewer", sha1)
    assert accepted.status_code == 200, accepted.text
    assert accepted.json() == {"rail_id": rail["id"], "from": "awaiting review", "to": "margins accepted",
                               "transition": "accept margins", "revision": 1, "signed_off": True}
    assert _status(client, people, rail["id"])["state"]["signed_off"] is True

    sha2 = edit_rail(client, people, rail, "1 mF")["head"]["sha256"]
    status = _status(client, people, rail["id"])
    assert status["state"]["name"] == "in design" and status["state"]["signed_off"] is False
    assert [(a["reviewer"], a["revision"], a["stale"]) for a in status["approvals"]] == [("reviewer", 1, True)]

    store_checks(client.app.state.sessionmaker, sha2, PASSING)
    assert _move(client, people, rail["id"], "submit for review", "designer", sha2).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer2", sha2).status_code == 201
    blocked = _move(client, people, rail["id"], "accept margins", "reviewer2", sha2)
    assert blocked.status_code == 409
    assert blocked.json()["error"]["code"] == "transition_blocked"
    assert [d["field"] for d in blocked.json()["error"]["details"]] == ["stale_approvals"]
    assert "reviewer (revision 1)" in blocked.json()["error"]["message"]
    assert _approve(client, people, rail["id"], "reviewer", sha2).status_code == 201
    assert _move(client, people, rail["id"], "accept margins", "reviewer2", sha2).status_code == 200

    assert _audit_actions(client, people, rail["id"]) == [
        "create", "transition", "approve", "transition",
        "update", "approvals_stale", "reset_state",
        "transition", "approve", "approve", "transition"]
    entries = client.get(f"/api/v1/rails/{rail['id']}/audit", headers=people.headers("viewer")).json()["items"]
    reset = entries[6]
    assert reset["before"]["state"] == "margins accepted" and reset["after"]["state"] == "in design"
    assert reset["user"] == "designer"
    assert [e["id"] for e in entries] == sorted(e["id"] for e in entries)


def test_a_transition_that_demands_two_approvals_refuses_with_one(client, people, rail):
    definition = copy.deepcopy(DEFAULT_WORKFLOW)
    definition["transitions"][2]["demands"]["approvals"] = 2
    team = people.team_ids["alpha"]
    saved = client.put(f"/api/v1/teams/{team}/workflow", json={"definition": definition},
                       headers=people.headers("admin"))
    assert saved.status_code == 200, saved.text
    assert saved.json()["version"] == 2
    sha = rail["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha, PASSING)
    assert _move(client, people, rail["id"], "submit for review", "designer", sha).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer", sha).status_code == 201
    one = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert one.status_code == 409
    assert one.json()["error"]["details"] == [
        {"field": "approvals", "message": "needs 2 approvals of revision 1 by reviewers; it has 1"}]
    assert _status(client, people, rail["id"])["state"]["name"] == "awaiting review"
    assert _approve(client, people, rail["id"], "reviewer2", sha).status_code == 201
    two = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert two.status_code == 200, two.text
    assert _audit_actions(client, people, rail["id"]) == ["create", "transition", "approve", "approve", "transition"]


def test_a_transition_is_taken_only_by_its_roles_on_the_current_revision(client, people, rail):
    sha = rail["head"]["sha256"]
    assert _move(client, people, rail["id"], "submit for review", "viewer", sha).status_code == 403
    not_offered = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert not_offered.status_code == 422 and "offers no transition" in not_offered.json()["error"]["message"]
    assert _move(client, people, rail["id"], "submit for review", "reviewer", sha).status_code == 403
    new_sha = edit_rail(client, people, rail, "820uF")["head"]["sha256"]
    assert _move(client, people, rail["id"], "submit for review", "designer", sha).status_code == 409
    assert _move(client, people, rail["id"], "submit for review", "designer", new_sha).status_code == 200
    store_checks(client.app.state.sessionmaker, new_sha, PASSING)
    assert _approve(client, people, rail["id"], "reviewer", new_sha).status_code == 201
    designer_accepts = _move(client, people, rail["id"], "accept margins", "designer", new_sha)
    assert designer_accepts.status_code == 403
    assert "'accept margins' is for reviewer" in designer_accepts.json()["error"]["message"]
    assert _status(client, people, rail["id"])["state"]["name"] == "awaiting review"


def test_waivers_cover_their_revision_and_are_carried_explicitly(client, people, rail):
    sha1 = rail["head"]["sha256"]
    waive = lambda sha, check_id, reason="within margin on the bench at 70 degC", who="reviewer": client.post(  # noqa: E731
        f"/api/v1/rails/{rail['id']}/waivers", json={"sha256": sha, "check_id": check_id, "reason": reason},
        headers=people.headers(who))
    not_analysed = waive(sha1, "startup_soa")
    assert not_analysed.status_code == 409 and "not been analysed" in not_analysed.json()["error"]["message"]
    store_checks(client.app.state.sessionmaker, sha1, FAILING)
    assert waive(sha1, "startup_soa", reason="").status_code == 422
    assert waive(sha1, "vds_derating").status_code == 422           # it passes: nothing to waive
    assert waive(sha1, "no_such_check").status_code == 422
    assert waive(sha1, "startup_soa", who="designer").status_code == 403
    first = waive(sha1, "startup_soa")
    assert first.status_code == 201, first.text
    assert {k: first.json()[k] for k in ("revision", "check_id", "verdict", "reviewer", "current")} == \
        {"revision": 1, "check_id": "startup_soa", "verdict": "fail", "reviewer": "reviewer", "current": True}
    assert waive(sha1, "startup_soa", who="reviewer2").status_code == 409
    assert waive(sha1, "fault_margin", who="reviewer2").status_code == 201

    assert _move(client, people, rail["id"], "submit for review", "designer", sha1).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer", sha1).status_code == 201
    assert _move(client, people, rail["id"], "accept margins", "reviewer", sha1).status_code == 200

    sha2 = edit_rail(client, people, rail, "1 mF")["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha2, FAILING)
    status = _status(client, people, rail["id"])
    assert [w["current"] for w in status["waivers"]] == [False, False]
    assert status["checks"]["open"] == ["startup_soa", "fault_margin"]
    assert _move(client, people, rail["id"], "submit for review", "designer", sha2).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer", sha2).status_code == 201
    blocked = _move(client, people, rail["id"], "accept margins", "reviewer", sha2)
    assert blocked.status_code == 409 and "startup soa (fail)" in blocked.json()["error"]["message"]

    carry = lambda waiver_id, sha, who="reviewer": client.post(  # noqa: E731
        f"/api/v1/rails/{rail['id']}/waivers/{waiver_id}/carry", json={"sha256": sha}, headers=people.headers(who))
    assert carry(first.json()["id"], sha1).status_code == 409        # only to the current revision
    assert carry(first.json()["id"], sha2, who="designer").status_code == 403
    assert carry(first.json()["id"], sha2, who="viewer").status_code == 403
    carried = carry(first.json()["id"], sha2)
    assert carried.status_code == 201, carried.text
    assert carried.json()["revision"] == 2 and carried.json()["carried_from"] == first.json()["id"]
    assert carried.json()["reason"] == "within margin on the bench at 70 degC"
    assert carry(first.json()["id"], sha2).status_code == 409        # once
    assert carry(first.json()["id"] + 1, sha2, who="reviewer2").status_code == 201
    assert _move(client, people, rail["id"], "accept margins", "reviewer", sha2).status_code == 200

    actions = _audit_actions(client, people, rail["id"])
    assert actions == ["create", "waive", "waive", "transition", "approve", "transition", "update", "approvals_stale",
                       "reset_state", "transition", "approve", "carry_waiver", "carry_waiver", "transition"]


def test_a_waiver_is_not_carried_to_a_revision_where_the_check_passes(client, people, rail):
    sha1 = rail["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha1, FAILING)
    waiver = client.post(f"/api/v1/rails/{rail['id']}/waivers",
                         json={"sha256": sha1, "check_id": "startup_soa", "reason": "accepted for the prototype"},
                         headers=people.headers("reviewer")).json()
    sha2 = edit_rail(client, people, rail, "330uF")["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha2, PASSING)
    r = client.post(f"/api/v1/rails/{rail['id']}/waivers/{waiver['id']}/carry", json={"sha256": sha2},
                    headers=people.headers("reviewer"))
    assert r.status_code == 422 and "neither failing nor marginal" in r.json()["error"]["details"][0]["message"]


def test_another_teams_rail_by_id_is_not_found_and_cannot_be_changed(client, people, session_factory, rail):
    beta_reviewer = _add_user(session_factory, "beta-reviewer", "reviewer", "beta")
    beta_manager = _add_user(session_factory, "beta-manager", "manager", "beta")
    sha = rail["head"]["sha256"]
    store_checks(session_factory, sha, FAILING)
    before_status = _status(client, people, rail["id"])
    before_audit = client.get("/api/v1/audit", headers=people.headers("admin")).json()["total"]
    outsider = people.headers("outsider")
    rail_id, product_id = rail["id"], rail["product_id"]
    for path in (f"/api/v1/rails/{rail_id}/signoff", f"/api/v1/rails/{rail_id}/approvals",
                 f"/api/v1/rails/{rail_id}/waivers", f"/api/v1/rails/{rail_id}/audit", f"/api/v1/rails/{rail_id}"):
        assert client.get(path, headers=outsider).status_code == 404, path
    for path in (f"/api/v1/products/{product_id}/risks", f"/api/v1/products/{product_id}/audit",
                 f"/api/v1/products/{product_id}/audit.csv"):
        assert client.get(path, headers=beta_manager).status_code == 404, path
    writes = [
        client.post(f"/api/v1/rails/{rail_id}/approvals", json={"sha256": sha, "comment": "looks fine"},
                    headers=beta_reviewer),
        client.post(f"/api/v1/rails/{rail_id}/waivers", json={"sha256": sha, "check_id": "startup_soa",
                                                              "reason": "fine"}, headers=beta_reviewer),
        client.post(f"/api/v1/rails/{rail_id}/transitions", json={"transition": "submit for review",
                                                                  "sha256": sha}, headers=outsider),
        client.put(f"/api/v1/rails/{rail_id}", json={"document": rail["document"], "base_revision": 1},
                   headers=outsider),
        client.get(f"/api/v1/teams/{people.team_ids['alpha']}/workflow", headers=outsider),
    ]
    assert [w.status_code for w in writes] == [404, 404, 404, 404, 404]
    assert _status(client, people, rail["id"]) == before_status
    assert client.get("/api/v1/audit", headers=people.headers("admin")).json()["total"] == before_audit


def test_the_audit_trail_cannot_be_changed_through_the_app_or_the_database(client, people, session_factory, rail):
    from tests.test_route_matrix import all_routes

    changing = [(m, p) for m, p in all_routes(client.app) if "audit" in p and m not in ("GET", "HEAD")]
    assert changing == []
    entry_id = client.get(f"/api/v1/rails/{rail['id']}/audit", headers=people.headers("viewer")).json()["items"][0]["id"]
    for statement in ("UPDATE audit_entries SET action = 'nothing' WHERE id = :id",
                      "DELETE FROM audit_entries WHERE id = :id"):
        with session_factory() as session:
            with pytest.raises(DBAPIError, match="append-only"):
                session.execute(text(statement), {"id": entry_id})
                session.commit()
    with session_factory() as session:
        entry = session.get(AuditEntry, entry_id)
        entry.action = "rewritten"
        with pytest.raises(DBAPIError, match="append-only"):
            session.commit()
    with session_factory() as session:
        assert session.get(AuditEntry, entry_id).action == "create"
