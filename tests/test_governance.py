"""Waiver rules through the API on SQLite and PostgreSQL: the two-person rule, fails past the physical edge,
the rail's author, the team's rules edited by admins; retiring a rail; the review queue and its assignments."""

from __future__ import annotations

import pytest

from tests.signoff_support import FAILING, PASSING, check, edit_rail, make_board, make_rail, store_checks

# one marginal check (fault timer margin) and everything else passing
MARGINAL = [check("startup_soa", "pass", 2.1), check("fault_margin", "marginal", 1.2),
            check("vds_derating", "pass", 0.6, 0.8, "fraction")]


@pytest.fixture
def board(client, people) -> dict:
    return make_board(client, people)


@pytest.fixture
def rail(client, people, board) -> dict:
    return make_rail(client, people, board)


def _post(client, people, path, who, body):
    return client.post(path, json=body, headers=people.headers(who))


def _waive(client, people, rail_id, who, sha, check_id, reason="bench capture shows the margin holds"):
    return _post(client, people, f"/api/v1/rails/{rail_id}/waivers", who,
                 {"sha256": sha, "check_id": check_id, "reason": reason})


def _approve(client, people, rail_id, who, sha):
    return _post(client, people, f"/api/v1/rails/{rail_id}/approvals", who,
                 {"sha256": sha, "comment": "start-up and fault margins checked"})


def _move(client, people, rail_id, name, who, sha):
    return _post(client, people, f"/api/v1/rails/{rail_id}/transitions", who, {"transition": name, "sha256": sha})


def _status(client, people, rail_id):
    r = client.get(f"/api/v1/rails/{rail_id}/signoff", headers=people.headers("viewer"))
    assert r.status_code == 200, r.text
    return r.json()


def _set_rules(client, people, team_id, **rules):
    r = client.put(f"/api/v1/teams/{team_id}/signoff-rules", json=rules, headers=people.headers("admin"))
    assert r.status_code == 200, r.text
    return r.json()


def _submitted(client, people, rail, checks) -> str:
    sha = rail["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha, checks)
    assert _move(client, people, rail["id"], "submit for review", "designer", sha).status_code == 200
    return sha


def test_the_rules_default_to_the_safe_ones(client, people):
    r = client.get(f"/api/v1/teams/{people.team_ids['alpha']}/signoff-rules", headers=people.headers("viewer"))
    assert r.status_code == 200, r.text
    assert (r.json()["two_person"], r.json()["fail_waiver_role"], r.json()["version"]) == (True, None, 0)
    other = client.get(f"/api/v1/teams/{people.team_ids['beta']}/signoff-rules", headers=people.headers("viewer"))
    assert other.status_code == 404
    refused = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/signoff-rules",
                         json={"two_person": False}, headers=people.headers("manager"))
    assert refused.status_code == 403
    bad = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/signoff-rules",
                     json={"two_person": True, "fail_waiver_role": "designer"}, headers=people.headers("admin"))
    assert bad.status_code == 422 and bad.json()["error"]["details"][0]["field"] == "fail_waiver_role"


def test_the_reviewer_who_waived_does_not_approve_and_another_does(client, people, rail):
    sha = _submitted(client, people, rail, MARGINAL)
    waived = _waive(client, people, rail["id"], "reviewer", sha, "fault_margin")
    assert waived.status_code == 201, waived.text
    assert waived.json()["past_edge"] is False and waived.json()["verdict"] == "marginal"
    own = _approve(client, people, rail["id"], "reviewer", sha)
    assert own.status_code == 403, own.text
    assert "two-person rule" in own.json()["error"]["message"] and "fault margin" in own.json()["error"]["message"]
    blocked = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert blocked.status_code == 409 and blocked.json()["error"]["code"] == "transition_blocked"
    assert _approve(client, people, rail["id"], "reviewer2", sha).status_code == 201
    # and the one who approved does not waive what the approval would rely on
    store = _status(client, people, rail["id"])
    assert [a["reviewer"] for a in store["approvals"]] == ["reviewer2"]
    accepted = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert accepted.status_code == 200, accepted.text
    assert accepted.json()["signed_off"] is True


def test_an_approver_does_not_then_waive_under_the_two_person_rule(client, people, rail):
    sha = _submitted(client, people, rail, MARGINAL)
    assert _approve(client, people, rail["id"], "reviewer", sha).status_code == 201
    late = _waive(client, people, rail["id"], "reviewer", sha, "fault_margin")
    assert late.status_code == 403 and "two-person rule" in late.json()["error"]["message"]
    assert _waive(client, people, rail["id"], "reviewer2", sha, "fault_margin").status_code == 201


def test_a_failing_check_is_not_waived_by_default_whatever_its_limit_says(client, people, rail):
    sha = _submitted(client, people, rail, FAILING)
    for who in ("reviewer", "reviewer2"):
        r = _waive(client, people, rail["id"], who, sha, "startup_soa")
        assert r.status_code == 403, r.text
        assert "past the physical edge" in r.json()["error"]["message"]
    assert _status(client, people, rail["id"])["waivers"] == []
    # the marginal one of the same revision is waivable
    assert _waive(client, people, rail["id"], "reviewer", sha, "fault_margin").status_code == 201
    # a manager may not waive at all while the rules name nobody
    assert _waive(client, people, rail["id"], "manager", sha, "startup_soa").status_code == 403


def test_a_team_may_let_a_named_role_waive_a_fail_and_such_waivers_are_marked(client, people, rail):
    sha = _submitted(client, people, rail, FAILING)
    rules = _set_rules(client, people, people.team_ids["alpha"], two_person=True, fail_waiver_role="manager",
                       expected_version=0)
    assert rules["fail_waiver_role"] == "manager" and rules["version"] == 1
    stale_form = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/signoff-rules",
                            json={"two_person": True, "expected_version": 0}, headers=people.headers("admin"))
    assert stale_form.status_code == 409
    assert _waive(client, people, rail["id"], "reviewer", sha, "startup_soa").status_code == 403
    r = _waive(client, people, rail["id"], "manager", sha, "startup_soa", "bench: 40 starts at 85 °C, no damage")
    assert r.status_code == 201, r.text
    assert r.json()["past_edge"] is True and r.json()["verdict"] == "fail"
    status = _status(client, people, rail["id"])
    assert [w["past_edge"] for w in status["waivers"]] == [True]
    assert status["rules"] == {"two_person": True, "fail_waiver_role": "manager"}
    listed = client.get(f"/api/v1/rails/{rail['id']}/waivers", headers=people.headers("viewer")).json()
    assert listed["items"][0]["past_edge"] is True
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    entry = risks["boards"][0]["rails"][0]
    assert [c["waiver"]["past_edge"] for c in entry["waived"]] == [True]


def test_the_two_person_rule_may_be_turned_off_and_old_approvals_stop_counting_when_it_is_on(client, people, rail):
    sha = _submitted(client, people, rail, MARGINAL)
    _set_rules(client, people, people.team_ids["alpha"], two_person=False)
    assert _waive(client, people, rail["id"], "reviewer", sha, "fault_margin").status_code == 201
    assert _approve(client, people, rail["id"], "reviewer", sha).status_code == 201
    _set_rules(client, people, people.team_ids["alpha"], two_person=True)
    blocked = _move(client, people, rail["id"], "accept margins", "reviewer", sha)
    assert blocked.status_code == 409
    assert "reviewer waived a check of it" in blocked.json()["error"]["message"]


def test_the_rails_author_never_waives_even_after_someone_else_saved_a_revision(client, people, rail):
    promoted = client.patch(f"/api/v1/users/{people.ids['designer']}", json={"role": "reviewer"},
                            headers=people.headers("admin"))
    assert promoted.status_code == 200
    sha2 = edit_rail(client, people, rail, "1 mF", designer="admin")["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha2, MARGINAL)
    r = _waive(client, people, rail["id"], "designer", sha2, "fault_margin")
    assert r.status_code == 403 and "you created rail" in r.json()["error"]["message"]


def test_an_empty_reason_is_refused_on_its_field(client, people, rail):
    sha = _submitted(client, people, rail, MARGINAL)
    r = _waive(client, people, rail["id"], "reviewer", sha, "fault_margin", reason=" ")
    assert r.status_code == 422
    assert "reason" in str(r.json()["error"]["details"])


def test_a_retired_rail_leaves_lists_and_the_risk_view_and_comes_back(client, people, board, rail):
    sha = _submitted(client, people, rail, PASSING)
    r = _post(client, people, f"/api/v1/rails/{rail['id']}/retire", "designer", {"reason": "rail removed in rev C"})
    assert r.status_code == 200, r.text
    assert r.json()["retired"] is True and r.json()["retired_by"] == "designer"
    listed = client.get(f"/api/v1/rails?board_id={board['id']}", headers=people.headers("viewer")).json()
    assert listed["items"] == []
    retired = client.get(f"/api/v1/rails?board_id={board['id']}&retired=true", headers=people.headers("viewer")).json()
    assert [i["id"] for i in retired["items"]] == [rail["id"]]
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    assert risks["totals"]["rails"] == 0
    assert client.get(f"/api/v1/rails/{rail['id']}", headers=people.headers("viewer")).status_code == 200
    refused = _approve(client, people, rail["id"], "reviewer", sha)
    assert refused.status_code == 409 and refused.json()["error"]["code"] == "rail_retired"
    assert _post(client, people, f"/api/v1/rails/{rail['id']}/retire", "viewer", {}).status_code == 403
    back = _post(client, people, f"/api/v1/rails/{rail['id']}/restore", "designer", {})
    assert back.status_code == 200 and back.json()["retired"] is False
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    assert risks["totals"]["rails"] == 1
    actions = [e["action"] for e in client.get(f"/api/v1/rails/{rail['id']}/audit",
                                               headers=people.headers("viewer")).json()["items"]]
    assert "retire" in actions and "restore" in actions


def test_the_queue_lists_what_awaits_a_reviewer_oldest_first_and_never_their_own(client, people, board):
    first = make_rail(client, people, board, name="VOUT_5V")
    second = make_rail(client, people, board, name="VOUT_3V3")
    third = make_rail(client, people, board, name="VOUT_1V8", designer="admin")
    for r, checks in ((first, MARGINAL), (second, FAILING), (third, PASSING)):
        store_checks(client.app.state.sessionmaker, r["head"]["sha256"], checks)
        who = "admin" if r is third else "designer"
        assert _move(client, people, r["id"], "submit for review", who, r["head"]["sha256"]).status_code == 200
    queue = client.get("/api/v1/reviews/queue", headers=people.headers("reviewer")).json()
    assert queue["assigned"] == []
    assert [e["rail"]["name"] for e in queue["team"]] == ["VOUT_5V", "VOUT_3V3", "VOUT_1V8"]
    failing = queue["team"][1]
    assert [c["id"] for c in failing["failing"]] == ["startup_soa"]
    assert [c["id"] for c in failing["marginal"]] == ["fault_margin"]
    # a manager assigns reviewer to the board: the rails move to their own list, gone from reviewer2's team queue
    a = _post(client, people, "/api/v1/reviews/assignments", "manager",
              {"reviewer_id": people.ids["reviewer"], "board_id": board["id"]})
    assert a.status_code == 201, a.text
    mine = client.get("/api/v1/reviews/queue", headers=people.headers("reviewer")).json()
    assert [e["rail"]["name"] for e in mine["assigned"]] == ["VOUT_5V", "VOUT_3V3", "VOUT_1V8"]
    assert {e["assigned"] for e in mine["assigned"]} == {"board"}
    assert client.get("/api/v1/reviews/queue", headers=people.headers("reviewer2")).json()["team"] == []
    # a reviewer takes a rail for themself; assigning someone else is for managers
    assert _post(client, people, "/api/v1/reviews/assignments", "reviewer2",
                 {"reviewer_id": people.ids["reviewer"], "rail_id": first["id"]}).status_code == 403
    assert _post(client, people, "/api/v1/reviews/assignments", "reviewer2", {"rail_id": first["id"]}).status_code == 201
    assert [e["rail"]["name"] for e in client.get("/api/v1/reviews/queue",
                                                  headers=people.headers("reviewer2")).json()["assigned"]] == ["VOUT_5V"]
    # once approved by the reviewer, a rail waits for nobody
    assert _approve(client, people, first["id"], "reviewer", first["head"]["sha256"]).status_code == 201
    mine = client.get("/api/v1/reviews/queue", headers=people.headers("reviewer")).json()
    assert "VOUT_5V" not in [e["rail"]["name"] for e in mine["assigned"]]
    assert client.get("/api/v1/reviews/queue", headers=people.headers("designer")).status_code == 403


def test_the_queue_never_offers_a_reviewer_their_own_revision_and_shows_what_changed(client, people, board):
    own = make_rail(client, people, board, name="VOUT_DESIGNERS")
    store_checks(client.app.state.sessionmaker, own["head"]["sha256"], PASSING)
    assert _move(client, people, own["id"], "submit for review", "designer", own["head"]["sha256"]).status_code == 200
    promoted = client.patch(f"/api/v1/users/{people.ids['designer']}", json={"role": "reviewer"},
                            headers=people.headers("admin"))
    assert promoted.status_code == 200
    rail = make_rail(client, people, board, name="VOUT_OWN", designer="admin")
    sha1 = rail["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha1, PASSING)
    assert _move(client, people, rail["id"], "submit for review", "admin", sha1).status_code == 200
    assert _approve(client, people, rail["id"], "reviewer", sha1).status_code == 201
    sha2 = edit_rail(client, people, rail, "1 mF", designer="admin")["head"]["sha256"]
    store_checks(client.app.state.sessionmaker, sha2, MARGINAL)
    assert _move(client, people, rail["id"], "submit for review", "admin", sha2).status_code == 200
    theirs = client.get("/api/v1/reviews/queue", headers=people.headers("designer")).json()["team"]
    assert [e["rail"]["name"] for e in theirs] == ["VOUT_OWN"]     # never the revision they authored
    entry = client.get("/api/v1/reviews/queue", headers=people.headers("reviewer")).json()["team"][1]
    assert entry["rail"]["name"] == "VOUT_OWN"
    assert entry["changes"]["since"] == 1
    assert [c["field"] for c in entry["changes"]["inputs"]] == ["load.c_nom"]
    assert [(c["id"], c["old_verdict"], c["new_verdict"]) for c in entry["changes"]["results"]] == \
        [("fault_margin", "pass", "marginal")]
