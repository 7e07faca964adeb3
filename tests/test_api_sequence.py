"""A board's power-up sequence through the REST API, on SQLite and PostgreSQL: revisions, the analysis,
refusals naming the field, approvals that a rail's new revision makes stale (and no other rail's)."""

from __future__ import annotations

import time

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import func, select

import server.analysis
from server.app import create_app

from server.models import BoardSequenceResult, Job
from server.services import jobs, sequences
from server.services.access import Actor
from tests.conftest import make_settings
from tests.factories import rail_doc
from tests.sequence_support import make_board
from tests.job_support import run_queued_jobs
from tests.signoff_support import PASSING, store_checks


@pytest.fixture
def board(client, people) -> dict:
    return make_board(client, people, "Sequence gateway", ("VMAIN", "VAUX"))


def _sequence(**supply) -> dict:
    return {"schema": "railsign.sequence/1", "name": "Main power-up",
            "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02,
                          "i_max": 10.0, **supply}],
            "rails": [{"id": "main", "ref": "VMAIN", "supply": "in12", "enable": {"at": 0.0}},
                      {"id": "aux", "ref": "VAUX", "supply": "in12",
                       "enable": {"after": "main", "threshold": 0.9, "delay": 1e-3}}]}


def _sequence_jobs(session_factory) -> list[Job]:
    with session_factory() as s:
        return list(s.scalars(select(Job).where(Job.kind == "sequence").order_by(Job.id)))


def _result_rows(session_factory) -> int:
    with session_factory() as s:
        return s.scalar(select(func.count()).select_from(BoardSequenceResult))


def test_a_sequence_is_saved_its_job_analyses_it_and_it_is_read_back(client, app, people, board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    assert client.get(url, headers=people.headers("viewer")).status_code == 404
    r = client.put(url, json={"document": _sequence(), "message": "first"}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    body = r.json()
    # the save queues the analysis as a job; nothing is computed in the request
    assert body["n"] == 1 and body["result"] is None and body["outdated_result"] is None
    queued = _sequence_jobs(session_factory)
    assert [(j.state, j.board_id, j.revision_n, j.sha256) for j in queued] == [
        ("queued", board["id"], 1, body["inputs_sha256"])]
    assert body["analysis"]["state"] == "queued" and body["analysis"]["job"]["id"] == queued[0].id
    assert body["analysis"]["job"]["links"]["self"] == f"/api/v1/jobs/{queued[0].id}"
    assert _result_rows(session_factory) == 0
    assert run_queued_jobs(app) == [queued[0].id]
    job = client.get(f"/api/v1/jobs/{queued[0].id}", headers=people.headers("viewer")).json()
    assert job["kind"] == "sequence" and job["state"] == "done" and job["links"]["result"] == url
    read = client.get(url, headers=people.headers("viewer")).json()
    assert read["analysis"] == {"state": "done", "job": None} and read["result"]["verdict"] == "pass"
    rails = {x["id"]: x for x in read["result"]["corners"][0]["rails"]}
    # the enable chain as the document gives it: aux is enabled 1 ms after main reaches power-good
    assert rails["aux"]["t_enable"] == pytest.approx(rails["main"]["t_power_good"] + 1e-3)
    # the same document again: no new revision, no new job
    again = client.put(url, json={"document": _sequence()}, headers=people.headers("designer")).json()
    assert again["n"] == 1 and again["result"]["id"] == read["result"]["id"]
    assert len(_sequence_jobs(session_factory)) == 1 and _result_rows(session_factory) == 1


def test_a_cycle_is_refused_naming_the_field_and_nothing_is_stored(client, people, board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    doc = _sequence()
    doc["rails"][0]["enable"] = {"after": "aux", "threshold": 0.9}
    r = client.put(url, json={"document": doc}, headers=people.headers("designer"))
    assert r.status_code == 422, r.text
    fields = [d["field"] for d in r.json()["error"]["details"]]
    assert "document.rails[0].enable.after" in fields
    assert client.get(url, headers=people.headers("viewer")).status_code == 404
    assert _sequence_jobs(session_factory) == []


def test_a_rail_edit_queues_the_sequence_job_makes_the_approval_stale_and_the_read_does_not_write(
        client, app, people, board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    saved = client.put(url, json={"document": _sequence()}, headers=people.headers("designer")).json()
    early = client.post(f"{url}/approvals", json={"sha256": saved["sha256"], "comment": "too early"},
                        headers=people.headers("reviewer"))
    assert early.status_code == 409 and "no result yet" in early.json()["error"]["message"]
    run_queued_jobs(app)
    first = client.get(url, headers=people.headers("viewer")).json()["result"]
    own = client.post(f"{url}/approvals", json={"sha256": saved["sha256"], "comment": "mine"},
                      headers=people.headers("designer"))
    assert own.status_code == 403  # a designer does not review
    a = client.post(f"{url}/approvals", json={"sha256": saved["sha256"], "comment": "dip and order checked"},
                    headers=people.headers("reviewer"))
    assert a.status_code == 201, a.text
    assert a.json()["current"] is True
    # the other rail's own approval (its result stored as the analysis would), which must not change
    aux = board["rails"]["VAUX"]
    store_checks(session_factory, aux["head"]["sha256"], PASSING)
    ra = client.post(f"/api/v1/rails/{aux['id']}/approvals", json={"sha256": aux["head"]["sha256"], "comment": "ok"},
                     headers=people.headers("reviewer"))
    assert ra.status_code == 201, ra.text
    main = board["rails"]["VMAIN"]
    edit = client.put(f"/api/v1/rails/{main['id']}", json={"document": rail_doc(name="VMAIN", load={"c_nom": "1mF"}),
                                                           "base_revision": 1}, headers=people.headers("designer"))
    assert edit.status_code == 200, edit.text
    seq_jobs = _sequence_jobs(session_factory)
    assert [j.state for j in seq_jobs] == ["done", "queued"]  # the edit queued one sequence job
    rows_before = _result_rows(session_factory)
    answer = client.get(url, headers=people.headers("viewer"))
    assert answer.status_code == 200, answer.text
    read = answer.json()
    # the read wrote nothing: no result row, no job; it says the job is queued and shows the last result as outdated
    assert _result_rows(session_factory) == rows_before == 1
    assert len(_sequence_jobs(session_factory)) == 2
    assert read["result"] is None and read["inputs_sha256"] == seq_jobs[1].sha256 != saved["inputs_sha256"]
    assert read["analysis"]["state"] == "queued" and read["analysis"]["job"]["id"] == seq_jobs[1].id
    assert read["outdated_result"]["id"] == first["id"]
    assert "rails as they were" in read["outdated_result"]["outdated_because"]
    assert read["approvals"][0]["stale"] is True and "VMAIN" in read["approvals"][0]["stale_reason"]
    stale_approve = client.post(f"{url}/approvals", json={"sha256": saved["sha256"], "comment": "again"},
                                headers=people.headers("reviewer"))
    assert stale_approve.status_code == 409  # the result of the current inputs is not there yet
    assert run_queued_jobs(app) == [seq_jobs[1].id]
    after = client.get(url, headers=people.headers("viewer")).json()
    assert after["result"]["id"] != first["id"] and after["outdated_result"] is None
    assert after["result"]["corners"][0]["rails"][0]["i_peak"] > 0
    assert after["inputs_sha256"] == read["inputs_sha256"]
    aux_approvals = client.get(f"/api/v1/rails/{aux['id']}/approvals", headers=people.headers("viewer")).json()
    assert aux_approvals["total"] == 1 and not aux_approvals["items"][0]["stale"]
    again = client.post(f"{url}/approvals", json={"sha256": saved["sha256"], "comment": "with the new VMAIN"},
                        headers=people.headers("reviewer"))
    assert again.status_code == 201 and again.json()["current"] is True


def test_two_quick_rail_edits_compute_only_the_rails_as_they_are(client, app, people, board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    client.put(url, json={"document": _sequence()}, headers=people.headers("designer"))
    run_queued_jobs(app)
    main = board["rails"]["VMAIN"]
    for n, c in ((1, "1mF"), (2, "1.5mF")):
        r = client.put(f"/api/v1/rails/{main['id']}", json={"document": rail_doc(name="VMAIN", load={"c_nom": c}),
                                                            "base_revision": n}, headers=people.headers("designer"))
        assert r.status_code == 200, r.text
    first, second = _sequence_jobs(session_factory)[1:]
    assert run_queued_jobs(app) == [first.id, second.id]
    first_now = client.get(f"/api/v1/jobs/{first.id}", headers=people.headers("viewer")).json()
    assert first_now["state"] == "cancelled" and first_now["error"].startswith("superseded")
    read = client.get(url, headers=people.headers("viewer")).json()
    assert read["inputs_sha256"] == second.sha256 and read["result"] is not None
    assert _result_rows(session_factory) == 2  # the first save's and the last edit's


def test_an_edit_of_a_rail_the_sequence_does_not_name_queues_nothing(client, app, people, board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    client.put(url, json={"document": _sequence()}, headers=people.headers("designer"))
    fan = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(name="VFAN")},
                      headers=people.headers("designer")).json()
    run_queued_jobs(app)
    r = client.put(f"/api/v1/rails/{fan['id']}", json={"document": rail_doc(name="VFAN", load={"c_nom": "1mF"}),
                                                       "base_revision": 1}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    assert [j.state for j in _sequence_jobs(session_factory)] == ["done"]
    assert client.get(url, headers=people.headers("viewer")).json()["analysis"]["state"] == "done"


def test_an_equal_queued_sequence_job_is_reused(client, people, board, session_factory):
    client.put(f"/api/v1/boards/{board['id']}/sequence", json={"document": _sequence()},
               headers=people.headers("designer"))
    (queued,) = _sequence_jobs(session_factory)
    with session_factory() as s:
        again = jobs.enqueue_sequence(s, Actor.system(), board_id=board["id"], inputs_sha256=queued.sha256,
                                      revision_n=1)
        other = jobs.enqueue_sequence(s, Actor.system(), board_id=board["id"], inputs_sha256="0" * 64,
                                      revision_n=1)
        s.commit()
    assert again.id == queued.id and other.id != queued.id


def test_an_inline_rail_is_stored_in_si_numbers_and_a_bad_one_is_named(client, people, board):
    url = f"/api/v1/boards/{board['id']}/sequence"
    doc = _sequence()
    doc["rails"].append({"id": "fan", "rail": rail_doc(name="FAN", load={"c_nom": "100uF"}), "supply": "in12",
                         "enable": {"at": 2e-3}})
    r = client.put(url, json={"document": doc}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    assert r.json()["document"]["rails"][2]["rail"]["load"]["c_nom"] == pytest.approx(100e-6)
    doc["rails"][2]["rail"]["load"]["c_nom"] = "100 uQ"
    r = client.put(url, json={"document": doc}, headers=people.headers("designer"))
    assert r.status_code == 422
    assert any(d["field"].startswith("document.rails[2].rail.load.c_nom") for d in r.json()["error"]["details"])


def test_retiring_a_named_rail_queues_the_sequence_job_and_its_result_says_the_rail_is_gone(client, app, people,
                                                                                            board, session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    client.put(url, json={"document": _sequence()}, headers=people.headers("designer"))
    run_queued_jobs(app)
    aux = board["rails"]["VAUX"]
    r = client.post(f"/api/v1/rails/{aux['id']}/retire", json={"reason": "not fitted"},
                    headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    assert [j.state for j in _sequence_jobs(session_factory)] == ["done", "queued"]
    assert client.get(url, headers=people.headers("viewer")).json()["analysis"]["state"] == "queued"
    run_queued_jobs(app)
    result = client.get(url, headers=people.headers("viewer")).json()["result"]
    assert result["verdict"] == "fail" and "VAUX" in result["error"]


def test_a_new_engine_leaves_the_sequence_unanalysed_until_its_job_is_queued_and_run(client, app, people, board,
                                                                                     session_factory, monkeypatch):
    url = f"/api/v1/boards/{board['id']}/sequence"
    client.put(url, json={"document": _sequence()}, headers=people.headers("designer"))
    run_queued_jobs(app)
    old = client.get(url, headers=people.headers("viewer")).json()["result"]
    monkeypatch.setattr(server.analysis, "ENGINE_VERSION", server.analysis.ENGINE_VERSION + "+next")
    read = client.get(url, headers=people.headers("viewer")).json()
    assert read["result"] is None and read["analysis"] == {"state": "not_queued", "job": None}
    assert read["outdated_result"]["id"] == old["id"] and "engine" in read["outdated_result"]["outdated_because"]
    with session_factory() as s:
        queued = sequences.enqueue_outdated(session=s)
        assert len(queued) == 1 and queued[0].engine_version.endswith("+next")
        assert sequences.enqueue_outdated(session=s) == []  # idempotent
    run_queued_jobs(app)
    now = client.get(url, headers=people.headers("viewer")).json()["result"]
    assert now["engine_version"].endswith("+next") and now["id"] != old["id"]


def test_an_in_process_worker_runs_the_job_a_sequence_save_queues(database_url, people):
    app = create_app(make_settings(database_url, worker_threads=1, job_lease_s=5.0))
    try:
        with TestClient(app) as client:
            h = people.headers("designer")
            product = client.post("/api/v1/products", json={"name": "Worker gateway"}, headers=h).json()
            board = client.post("/api/v1/boards", json={"product_id": product["id"], "name": "Main"}, headers=h).json()
            for name in ("VMAIN", "VAUX"):
                r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(name=name)},
                                headers=h)
                assert r.status_code == 201, r.text
            url = f"/api/v1/boards/{board['id']}/sequence"
            saved = client.put(url, json={"document": _sequence()}, headers=h).json()
            job_id = saved["analysis"]["job"]["id"]
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline:
                job = client.get(f"/api/v1/jobs/{job_id}", headers=h).json()
                if job["state"] not in ("queued", "running"):
                    break
                time.sleep(0.05)
            assert job["state"] == "done", job
            read = client.get(url, headers=h).json()
            assert read["result"]["verdict"] == "pass" and read["inputs_sha256"] == job["sha256"]
    finally:
        app.state.engine.dispose()


def test_every_revision_is_kept_read_back_and_compared(client, people, board):
    url, h = board["url"], people.headers("designer")
    assert client.get(f"{url}/revisions", headers=people.headers("viewer")).status_code == 404
    first = _sequence()
    assert client.put(url, json={"document": first, "message": "first"}, headers=h).status_code == 200
    second = _sequence(i_max=6.0)
    second["rails"][1]["enable"]["delay"] = 2e-3
    assert client.put(url, json={"document": second, "message": "weaker supply"}, headers=h).status_code == 200
    listed = client.get(f"{url}/revisions", headers=people.headers("viewer"))
    assert listed.status_code == 200, listed.text
    body = listed.json()
    assert body["total"] == 2 and [r["n"] for r in body["items"]] == [2, 1]
    assert [r["message"] for r in body["items"]] == ["weaker supply", "first"]
    assert "document" not in body["items"][0]
    # an old revision reads back as it was saved
    old = client.get(f"{url}/revisions/1", headers=people.headers("viewer")).json()
    assert old["n"] == 1 and old["document"]["supplies"][0]["i_max"] == 10.0
    assert old["sha256"] == body["items"][1]["sha256"]
    diff = client.get(f"{url}/diff", params={"from": 1, "to": 2}, headers=people.headers("viewer")).json()
    assert diff["from"]["n"] == 1 and diff["to"]["n"] == 2
    assert {(c["field"], c["change"], c["old"], c["new"]) for c in diff["changes"]} == {
        ("supplies[0].i_max", "changed", 10.0, 6.0), ("rails[1].enable.delay", "changed", 1e-3, 2e-3)}
    missing = client.get(f"{url}/revisions/9", headers=people.headers("viewer"))
    assert missing.status_code == 404 and "no revision 9" in missing.json()["error"]["message"]
