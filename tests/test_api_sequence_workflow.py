"""The board power-up sequence in its team's workflow through the REST API, on SQLite and PostgreSQL: placed in
the initial state when created, transitions refused naming each unmet demand (the rail's rules of
server/workflow.py's blockers()), taken through to a signed-off state by the roles the workflow names, and moved
back to the workflow's editing state by a new sequence revision or a new revision of a rail it names."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from server.models import AuditEntry
from server.workflow import DEFAULT_WORKFLOW
from tests.factories import rail_doc
from tests.sequence_support import make_board
from tests.job_support import run_queued_jobs

INITIAL = next(s["name"] for s in DEFAULT_WORKFLOW["states"] if s["initial"])
ON_EDIT = DEFAULT_WORKFLOW["on_edit"]


@pytest.fixture
def board(client, people) -> dict:
    # VFAN: a rail the sequence does not name
    return make_board(client, people, "Sequence workflow", ("VMAIN", "VAUX", "VFAN"))


def _sequence(i_max: float, delay: float = 1e-3) -> dict:
    """Invented supply figures: i_max 10 A carries both rails' inrush, 0.05 A does not."""
    return {"schema": "railsign.sequence/1", "name": "Main power-up",
            "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02,
                          "i_max": i_max}],
            "rails": [{"id": "main", "ref": "VMAIN", "supply": "in12", "enable": {"at": 0.0}},
                      {"id": "aux", "ref": "VAUX", "supply": "in12",
                       "enable": {"after": "main", "threshold": 0.9, "delay": delay}}]}


def _saved(client, app, people, board, i_max: float, delay: float = 1e-3) -> dict:
    r = client.put(board["url"], json={"document": _sequence(i_max, delay)}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    run_queued_jobs(app)
    read = client.get(board["url"], headers=people.headers("designer")).json()
    assert read["result"] is not None
    return read


def _move(client, people, board, read, who, transition):
    return client.post(f"{board['url']}/transitions", headers=people.headers(who),
                       json={"transition": transition, "sha256": read["sha256"], "comment": "as agreed"})


def _state(client, people, board, who="viewer") -> dict:
    return client.get(board["url"], headers=people.headers(who)).json()


def _sequence_audit(client) -> list[AuditEntry]:
    with client.app.state.sessionmaker() as s:
        return list(s.scalars(select(AuditEntry).where(AuditEntry.object_type == "board_sequence")
                              .order_by(AuditEntry.id)))


def test_a_new_sequence_stands_in_the_initial_state_with_its_transitions_offered(client, app, people, board):
    read = _saved(client, app, people, board, 10.0)
    assert read["state"]["name"] == INITIAL and read["state"]["signed_off"] is False
    assert read["workflow"] == DEFAULT_WORKFLOW["name"]
    offered = {t["name"]: t for t in read["transitions"]}
    expected = {t["name"] for t in DEFAULT_WORKFLOW["transitions"] if t["from"] == INITIAL}
    assert set(offered) == expected and offered["submit for review"]["you_may_take"] is True
    as_viewer = {t["name"]: t for t in _state(client, people, board, "viewer")["transitions"]}
    assert as_viewer["submit for review"]["you_may_take"] is False  # viewers only read


def test_a_transition_with_unmet_demands_is_refused_naming_them(client, app, people, board):
    read = _saved(client, app, people, board, 0.05)  # its supply current check fails
    assert read["result"]["verdict"] == "fail"
    assert _move(client, people, board, read, "designer", "submit for review").status_code == 200
    wrong_role = _move(client, people, board, read, "designer", "accept margins")
    assert wrong_role.status_code == 403 and "your role is designer" in wrong_role.json()["error"]["message"]
    refused = _move(client, people, board, read, "reviewer", "accept margins")
    assert refused.status_code == 409, refused.text
    error = refused.json()["error"]
    assert sorted(d["field"] for d in error["details"]) == ["approvals", "checks"]
    titles = read["problem_checks"][0]["titles"]
    assert "needs 1 approval" in error["message"] and "without a waiver" in error["message"]
    assert all(t in error["message"] for t in titles)
    now = _state(client, people, board, "reviewer")
    assert now["state"]["name"] == "awaiting review"
    accept = next(t for t in now["transitions"] if t["name"] == "accept margins")
    assert accept["you_may_take"] is False and {b["field"] for b in accept["blockers"]} == {"approvals", "checks"}
    unknown = _move(client, people, board, read, "reviewer", "no such step")
    assert unknown.status_code == 422 and "offers no transition" in unknown.json()["error"]["message"]


def test_the_right_people_take_it_to_signed_off_and_an_old_revision_is_refused(client, app, people, board):
    read = _saved(client, app, people, board, 10.0)
    assert read["approval_blocked"] is None
    assert _move(client, people, board, read, "designer", "submit for review").status_code == 200
    approved = client.post(f"{board['url']}/approvals", headers=people.headers("reviewer2"),
                           json={"sha256": read["sha256"], "comment": "order and dips checked"})
    assert approved.status_code == 201, approved.text
    taken = _move(client, people, board, read, "reviewer", "accept margins")
    assert taken.status_code == 200, taken.text
    assert taken.json() == {"board_id": board["id"], "from": "awaiting review", "to": "margins accepted",
                            "transition": "accept margins", "revision": read["n"], "signed_off": True}
    frozen = _move(client, people, board, read, "manager", "freeze for build")
    assert frozen.status_code == 200 and frozen.json()["to"] == "frozen for build"
    now = _state(client, people, board)
    assert (now["state"]["name"], now["state"]["signed_off"], now["state"]["by"]) == ("frozen for build", True,
                                                                                      "manager")
    moves = [a for a in _sequence_audit(client) if a.action == "transition"]
    assert [(m.before["state"], m.after["state"], m.after["transition"]) for m in moves] == [
        (INITIAL, "awaiting review", "submit for review"), ("awaiting review", "margins accepted", "accept margins"),
        ("margins accepted", "frozen for build", "freeze for build")]
    # a new revision of the sequence moves it back; the old revision's sha256 is refused with the current one named
    newer = _saved(client, app, people, board, 10.0, delay=2e-3)
    assert newer["n"] == read["n"] + 1 and newer["state"]["name"] == ON_EDIT
    old = _move(client, people, board, read, "designer", "submit for review")
    assert old.status_code == 409 and old.json()["error"]["current"]["n"] == newer["n"]
    reset = [a for a in _sequence_audit(client) if a.action == "reset_state"]
    assert reset[-1].before["state"] == "frozen for build" and reset[-1].after["state"] == ON_EDIT
    assert f"revision {newer['n']}" in reset[-1].after["note"]


def test_a_rail_edit_moves_the_sequence_back_but_an_unnamed_rail_does_not(client, app, people, board):
    read = _saved(client, app, people, board, 10.0)
    assert _move(client, people, board, read, "designer", "submit for review").status_code == 200
    fan = board["rails"]["VFAN"]
    r = client.put(f"/api/v1/rails/{fan['id']}", json={"document": rail_doc(name="VFAN", load={"c_nom": "1mF"}),
                                                       "base_revision": 1}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    assert _state(client, people, board)["state"]["name"] == "awaiting review"  # VFAN is not in the sequence
    main = board["rails"]["VMAIN"]
    r = client.put(f"/api/v1/rails/{main['id']}", json={"document": rail_doc(name="VMAIN", load={"c_nom": "1mF"}),
                                                        "base_revision": 1}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    now = _state(client, people, board)
    assert now["state"]["name"] == ON_EDIT and now["state"]["by"] == "designer"
    reset = [a for a in _sequence_audit(client) if a.action == "reset_state"]
    assert len(reset) == 1 and reset[0].before["state"] == "awaiting review"
    assert "VMAIN" in reset[0].after["note"] and reset[0].after["inputs_sha256"] == now["inputs_sha256"]


def test_retiring_a_named_rail_moves_it_back_and_a_start_up_that_cannot_be_computed_blocks_sign_off(
        client, app, people, board):
    read = _saved(client, app, people, board, 10.0)
    assert _move(client, people, board, read, "designer", "submit for review").status_code == 200
    aux = board["rails"]["VAUX"]
    r = client.post(f"/api/v1/rails/{aux['id']}/retire", json={"reason": "not fitted"},
                    headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    queued = _state(client, people, board, "designer")
    assert queued["state"]["name"] == ON_EDIT and queued["result"] is None
    submit = next(t for t in queued["transitions"] if t["name"] == "submit for review")
    assert submit["blockers"] == [] and submit["you_may_take"] is True
    assert _move(client, people, board, read, "designer", "submit for review").status_code == 200
    # before its job ran: no result of the inputs as they are, said in words
    early = _move(client, people, board, read, "reviewer", "accept margins")
    assert early.status_code == 409 and "no result yet" in early.json()["error"]["message"]
    run_queued_jobs(app)
    gone = _state(client, people, board, "reviewer")
    assert gone["result"]["error"] and "VAUX" in gone["result"]["error"]
    refused = _move(client, people, board, read, "reviewer", "accept margins")
    assert refused.status_code == 409
    assert "the board start-up could not be computed" in refused.json()["error"]["message"]
