"""Waivers of a board power-up sequence's failing checks through the REST API, on SQLite and PostgreSQL: the
team's waiver rules as for a rail's (tests/test_governance.py), approval refused while a failing check has no
waiver of the current inputs, waivers going stale with the inputs."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from server.models import AuditEntry
from tests.factories import rail_doc
from tests.sequence_support import make_board
from tests.job_support import run_queued_jobs


@pytest.fixture
def board(client, people) -> dict:
    return make_board(client, people, "Sequence waivers", ("VMAIN", "VAUX"))


def _sequence(i_max: float) -> dict:
    return {"schema": "railsign.sequence/1", "name": "Main power-up",
            "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02,
                          "i_max": i_max}],
            "rails": [{"id": "main", "ref": "VMAIN", "supply": "in12", "enable": {"at": 0.0}},
                      {"id": "aux", "ref": "VAUX", "supply": "in12",
                       "enable": {"after": "main", "threshold": 0.9, "delay": 1e-3}}]}


def _saved(client, app, people, board, i_max: float) -> dict:
    r = client.put(board["url"], json={"document": _sequence(i_max)}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    run_queued_jobs(app)
    read = client.get(board["url"], headers=people.headers("viewer")).json()
    assert read["result"] is not None
    return read


def _failing(client, app, people, board) -> dict:
    """A sequence whose supply (capability 0.05 A, invented) cannot deliver the rails' inrush: its current check
    fails, and that is its only problem."""
    read = _saved(client, app, people, board, 0.05)
    assert read["result"]["verdict"] == "fail"
    assert [p["check_id"] for p in read["problem_checks"]] == ["supply_current:in12"]
    return read


def _rules(client, people, **rules) -> None:
    r = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/signoff-rules", json=rules,
                   headers=people.headers("admin"))
    assert r.status_code == 200, r.text


def _waive(client, people, board, read, who, check_id="supply_current:in12", reason="bench supply is a stand-in"):
    return client.post(f"{board['url']}/waivers", headers=people.headers(who),
                       json={"sha256": read["sha256"], "inputs_sha256": read["inputs_sha256"], "check_id": check_id,
                             "reason": reason})


def _approve(client, people, board, read, who):
    return client.post(f"{board['url']}/approvals", headers=people.headers(who),
                       json={"sha256": read["sha256"], "comment": "inrush and dips checked"})


def test_approving_a_failing_sequence_is_refused_naming_the_check_and_nobody_waives_it_by_default(
        client, app, people, board):
    read = _failing(client, app, people, board)
    titles = read["problem_checks"][0]["titles"]
    assert titles and all("peak total current" in t for t in titles)
    assert read["approval_blocked"] and all(t in read["approval_blocked"] for t in titles)
    refused = _approve(client, people, board, read, "reviewer")
    assert refused.status_code == 409, refused.text
    message = refused.json()["error"]["message"]
    assert "without a waiver" in message and all(t in message for t in titles)
    # the team's defaults: nobody waives a failing check, whatever their role
    for who in ("reviewer", "reviewer2", "manager"):
        r = _waive(client, people, board, read, who)
        assert r.status_code == 403, r.text
    assert "past the physical edge" in _waive(client, people, board, read, "reviewer").json()["error"]["message"]
    assert _waive(client, people, board, read, "viewer").status_code == 403
    assert client.get(f"{board['url']}/waivers", headers=people.headers("viewer")).json()["total"] == 0


def test_the_reviewer_who_waived_does_not_approve_and_a_second_reviewer_gets_it_through(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=True, fail_waiver_role="reviewer")
    waived = _waive(client, people, board, read, "reviewer")
    assert waived.status_code == 201, waived.text
    w = waived.json()
    assert (w["verdict"], w["past_edge"], w["current"], w["reviewer"]) == ("fail", True, True, "reviewer")
    assert w["inputs_sha256"] == read["inputs_sha256"] and "peak total current" in w["check_title"]
    assert _waive(client, people, board, read, "reviewer2").status_code == 409  # it has a waiver already
    now = client.get(board["url"], headers=people.headers("viewer")).json()
    assert now["approval_blocked"] is None and now["problem_checks"][0]["waiver"]["id"] == w["id"]
    own = _approve(client, people, board, read, "reviewer")
    assert own.status_code == 403, own.text
    assert "two-person rule" in own.json()["error"]["message"]
    second = _approve(client, people, board, read, "reviewer2")
    assert second.status_code == 201, second.text
    assert second.json()["current"] is True
    with client.app.state.sessionmaker() as s:
        actions = [a.action for a in s.scalars(select(AuditEntry).where(AuditEntry.object_type == "board_sequence")
                                               .order_by(AuditEntry.id))]
    assert actions[-2:] == ["waive", "approve"]


def test_without_the_two_person_rule_the_waiver_author_approves_as_for_a_rail(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=False, fail_waiver_role="reviewer")
    assert _waive(client, people, board, read, "reviewer").status_code == 201
    assert _approve(client, people, board, read, "reviewer").status_code == 201


def test_a_team_naming_managers_lets_a_manager_waive_and_not_a_reviewer(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=True, fail_waiver_role="manager")
    refused = _waive(client, people, board, read, "reviewer")
    assert refused.status_code == 403 and "only the manager role" in refused.json()["error"]["message"]
    assert _waive(client, people, board, read, "manager").status_code == 201
    assert _approve(client, people, board, read, "reviewer").status_code == 201


def test_the_sequences_author_never_waives_and_bad_requests_name_their_field(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=True, fail_waiver_role="reviewer")
    promoted = client.patch(f"/api/v1/users/{people.ids['designer']}", json={"role": "reviewer"},
                            headers=people.headers("admin"))
    assert promoted.status_code == 200, promoted.text
    own = _waive(client, people, board, read, "designer")
    assert own.status_code == 403 and "someone else waives" in own.json()["error"]["message"]
    unknown = _waive(client, people, board, read, "reviewer", check_id="supply_current:nowhere")
    assert unknown.status_code == 422 and unknown.json()["error"]["details"][0]["field"] == "check_id"
    passing = _waive(client, people, board, read, "reviewer", check_id="power_good:main")
    assert passing.status_code == 422 and "neither failing nor marginal" in passing.text
    empty = _waive(client, people, board, read, "reviewer", reason="")
    assert empty.status_code == 422
    other_inputs = client.post(f"{board['url']}/waivers", headers=people.headers("reviewer"),
                               json={"sha256": read["sha256"], "inputs_sha256": "0" * 64,
                                     "check_id": "supply_current:in12", "reason": "seen"})
    assert other_inputs.status_code == 409


def test_a_rail_edit_makes_the_waiver_stale_and_approval_is_refused_again(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=True, fail_waiver_role="reviewer")
    assert _waive(client, people, board, read, "reviewer").status_code == 201
    main = board["rails"]["VMAIN"]
    edit = client.put(f"/api/v1/rails/{main['id']}", json={"document": rail_doc(name="VMAIN", load={"c_nom": "1mF"}),
                                                           "base_revision": 1}, headers=people.headers("designer"))
    assert edit.status_code == 200, edit.text
    waivers = client.get(f"{board['url']}/waivers", headers=people.headers("viewer")).json()["items"]
    assert [(w["stale"], w["current"]) for w in waivers] == [(True, False)]
    assert "VMAIN" in waivers[0]["stale_reason"]
    assert _approve(client, people, board, read, "reviewer2").status_code == 409  # no result of the new inputs yet
    run_queued_jobs(app)
    after = client.get(board["url"], headers=people.headers("viewer")).json()
    assert after["inputs_sha256"] != read["inputs_sha256"] and after["result"]["verdict"] == "fail"
    assert after["problem_checks"][0]["waiver"] is None and after["approval_blocked"]
    refused = _approve(client, people, board, after, "reviewer2")
    assert refused.status_code == 409 and "peak total current" in refused.json()["error"]["message"]
    with client.app.state.sessionmaker() as s:
        stale = s.scalar(select(AuditEntry).where(AuditEntry.action == "waivers_stale"))
    assert stale is not None and stale.after["stale"] == [waivers[0]["id"]]
    # a fresh waiver of the new inputs gets it through again, by the second reviewer
    assert _waive(client, people, board, after, "reviewer").status_code == 201
    assert _approve(client, people, board, after, "reviewer2").status_code == 201


def test_a_new_sequence_revision_makes_its_waivers_stale(client, app, people, board):
    read = _failing(client, app, people, board)
    _rules(client, people, two_person=True, fail_waiver_role="reviewer")
    assert _waive(client, people, board, read, "reviewer").status_code == 201
    again = _saved(client, app, people, board, 0.06)
    assert again["n"] == 2 and again["approval_blocked"]
    assert [(w["stale"], "newer revision (2)" in w["stale_reason"]) for w in again["waivers"]] == [(True, True)]


def test_a_passing_sequence_approves_as_before(client, app, people, board):
    read = _saved(client, app, people, board, 10.0)
    assert read["result"]["verdict"] == "pass"
    assert read["problem_checks"] == [] and read["approval_blocked"] is None and read["waivers"] == []
    assert _waive(client, people, board, read, "reviewer", check_id="supply_current:in12").status_code == 422
    r = _approve(client, people, board, read, "reviewer")
    assert r.status_code == 201 and r.json()["current"] is True
