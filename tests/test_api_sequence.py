"""A board's power-up sequence through the REST API, on SQLite and PostgreSQL: revisions, the analysis,
refusals naming the field, approvals that a rail's new revision makes stale (and no other rail's)."""

from __future__ import annotations

import time

import pytest

from tests.factories import rail_doc
from tests.signoff_support import PASSING, store_checks


@pytest.fixture
def board(client, people) -> dict:
    h = people.headers("designer")
    product = client.post("/api/v1/products", json={"name": "Sequence gateway"}, headers=h)
    board = client.post("/api/v1/boards", json={"product_id": product.json()["id"], "name": "Main"}, headers=h)
    assert board.status_code == 201, board.text
    rails = {}
    for name in ("VMAIN", "VAUX"):
        r = client.post("/api/v1/rails", json={"board_id": board.json()["id"], "document": rail_doc(name=name)},
                        headers=h)
        assert r.status_code == 201, r.text
        rails[name] = r.json()
    return {**board.json(), "rails": rails}


def _sequence(**supply) -> dict:
    return {"schema": "railsign.sequence/1", "name": "Main power-up",
            "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02,
                          "i_max": 10.0, **supply}],
            "rails": [{"id": "main", "ref": "VMAIN", "supply": "in12", "enable": {"at": 0.0}},
                      {"id": "aux", "ref": "VAUX", "supply": "in12",
                       "enable": {"after": "main", "threshold": 0.9, "delay": 1e-3}}]}


def test_a_sequence_is_saved_analysed_and_read_back(client, people, board):
    url = f"/api/v1/boards/{board['id']}/sequence"
    assert client.get(url, headers=people.headers("viewer")).status_code == 404
    r = client.put(url, json={"document": _sequence(), "message": "first"}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["n"] == 1 and body["result"]["verdict"] == "pass"
    rails = {x["id"]: x for x in body["result"]["corners"][0]["rails"]}
    assert rails["aux"]["t_enable"] == pytest.approx(rails["main"]["t_power_good"] + 1e-3)
    # the same document again: no new revision
    again = client.put(url, json={"document": _sequence()}, headers=people.headers("designer")).json()
    assert again["n"] == 1
    read = client.get(url, headers=people.headers("viewer")).json()
    assert read["result"]["id"] == body["result"]["id"]


def test_a_cycle_is_refused_naming_the_field_and_nothing_is_stored(client, people, board):
    url = f"/api/v1/boards/{board['id']}/sequence"
    doc = _sequence()
    doc["rails"][0]["enable"] = {"after": "aux", "threshold": 0.9}
    r = client.put(url, json={"document": doc}, headers=people.headers("designer"))
    assert r.status_code == 422, r.text
    fields = [d["field"] for d in r.json()["error"]["details"]]
    assert "document.rails[0].enable.after" in fields
    assert client.get(url, headers=people.headers("viewer")).status_code == 404


def test_a_rail_edit_makes_the_sequence_approval_stale_and_the_result_is_computed_again(client, people, board,
                                                                                        session_factory):
    url = f"/api/v1/boards/{board['id']}/sequence"
    saved = client.put(url, json={"document": _sequence()}, headers=people.headers("designer")).json()
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
    for _ in range(5):  # the read computes the board again and stores it: a busy answer (503) is retried
        answer = client.get(url, headers=people.headers("viewer"))
        if answer.status_code != 503:
            break
        time.sleep(float(answer.headers.get("retry-after", "1")))
    assert answer.status_code == 200, answer.text
    read = answer.json()
    assert read["approvals"][0]["stale"] is True and "VMAIN" in read["approvals"][0]["stale_reason"]
    assert read["result"]["id"] != saved["result"]["id"]  # computed again with the new rail
    assert read["result"]["corners"][0]["rails"][0]["i_peak"] > 0
    aux_approvals = client.get(f"/api/v1/rails/{aux['id']}/approvals", headers=people.headers("viewer")).json()
    assert aux_approvals["total"] == 1 and not aux_approvals["items"][0]["stale"]


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
