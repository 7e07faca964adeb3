"""Rails, revisions, conflicts and diffs through the REST API, on SQLite and PostgreSQL."""

from __future__ import annotations

import hashlib
import json
import threading

import pytest
from fastapi.testclient import TestClient

from tests.factories import fet_doc, rail_doc


@pytest.fixture
def board(client, people) -> dict:
    h = people.headers("designer")
    product = client.post("/api/v1/products", json={"name": "Test gateway"}, headers=h)
    assert product.status_code == 201, product.text
    board = client.post("/api/v1/boards", json={"product_id": product.json()["id"], "name": "Main", "revision": "B"},
                        headers=h)
    assert board.status_code == 201, board.text
    return board.json()


def _create(client, people, board, doc=None, **extra):
    body = {"board_id": board["id"], "document": doc or rail_doc(), **extra}
    return client.post("/api/v1/rails", json=body, headers=people.headers("designer"))


def _count_revisions(client, people, rail_id) -> int:
    return client.get(f"/api/v1/rails/{rail_id}/revisions", headers=people.headers("viewer")).json()["total"]


def test_create_stores_revision_one_in_si_units(client, people, board):
    r = _create(client, people, board)
    assert r.status_code == 201, r.text
    body = r.json()
    assert body["head"]["n"] == 1
    assert body["head"]["author"] == "designer"
    doc = body["document"]
    assert doc["load"]["c_nom"] == pytest.approx(680e-6)
    assert doc["fet"]["rds_on"] == pytest.approx(5e-3)
    assert doc["supply"]["l_source"] == pytest.approx(100e-9)
    assert doc["switch"]["timer"]["c"] == pytest.approx(100e-9)
    assert r.headers["ETag"] == f'"{body["head"]["sha256"]}"'
    assert r.headers["Location"] == f"/api/v1/rails/{body['id']}"


def test_sha256_is_of_the_canonical_document(client, people, board):
    body = _create(client, people, board).json()
    # Canonical form as documented: sorted keys, compact separators, SI numbers.
    text = json.dumps(body["document"], sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert body["head"]["sha256"] == hashlib.sha256(text.encode()).hexdigest()


def test_same_document_in_other_notation_hashes_the_same(client, people, board):
    first = _create(client, people, board).json()
    doc = rail_doc(name="VOUT_12V_B", load={"c_nom": 680e-6})
    second = _create(client, people, board, doc=rail_doc(name="VOUT_12V_B")).json()
    third = _create(client, people, board, doc={**doc, "name": "VOUT_12V_C"}).json()
    assert first["head"]["sha256"] != second["head"]["sha256"]  # names differ
    second_doc = {**second["document"], "name": "VOUT_12V_C"}
    assert second_doc == third["document"]


BAD_INPUTS = [
    ("load.c_nom", lambda d: d["load"].update(c_nom=-1e-6), "must be above 0 F"),
    ("load.c_nom", lambda d: d["load"].update(c_nom=0), "must be above 0 F"),
    ("supply.v_min", lambda d: d["supply"].update(v_min=13.0), "above the supply maximum"),
    ("fet.soa.curves[0].points[1]", lambda d: d["fet"]["soa"]["curves"][0].update(points=[[1, 10], [0.5, 5]]),
     "increase"),
    ("fet.soa.curves[1].points[0]", lambda d: d["fet"]["soa"]["curves"][1].update(points=[[-1, 10], [5, 5]]),
     "positive"),
    ("fet.soa.curves[2].points[1]", lambda d: d["fet"]["soa"]["curves"][2].update(points=[[1, 10], [5, 0]]),
     "positive"),
    ("fet.soa.curves", lambda d: d["fet"]["soa"].update(curves=d["fet"]["soa"]["curves"][:1]), "two pulse widths"),
    ("load.c_nom", lambda d: d["load"].update(c_nom="nan"), "finite"),
    ("supply.v_max", lambda d: d["supply"].update(v_max="inf"), "finite"),
    ("load.esr", lambda d: d["load"].update(esr="10 mH"), "unit"),
    ("load.c_nom", lambda d: d["load"].update(c_nom="680 uQ"), "unit"),
    ("load.v_on", lambda d: d["load"].update(model="constant_power", i_nom=1.0, v_on=0), "constant-power"),
    ("switch.i_limit", lambda d: d["switch"].pop("i_limit"), "required"),
    ("load.c_tol", lambda d: d["load"].update(c_tol=1.5), "tolerance"),
    ("load.capacitance", lambda d: d["load"].update(capacitance=1e-3), "not a known field"),
    # Caught by the analysis core's own reading of the document, after the schema:
    ("fet.zth_points[1]", lambda d: d["fet"].update(zth_points=[[1e-3, 0.5], [1e-2, 0.4]]), "must not fall"),
]


@pytest.mark.parametrize("field,mutate,words", BAD_INPUTS, ids=[f"{b[0]}-{i}" for i, b in enumerate(BAD_INPUTS)])
def test_bad_document_is_refused_with_its_field_and_nothing_is_stored(client, people, board, field, mutate, words):
    doc = rail_doc()
    mutate(doc)
    r = _create(client, people, board, doc=doc)
    assert r.status_code == 422, r.text
    error = r.json()["error"]
    assert error["status"] == 422
    fields = {d["field"]: d["message"] for d in error["details"]}
    assert f"document.{field}" in fields, fields
    assert words in fields[f"document.{field}"]
    listing = client.get("/api/v1/rails", headers=people.headers("viewer")).json()
    assert listing["total"] == 0


# Designs that cannot work are analysed and fail their checks; they are not bad input.
CANNOT_WORK = [
    ("load turns on above the supply minimum", {"load": {"model": "constant_current", "i_nom": 1.0, "v_on": 11.5}}),
    ("upstream UVLO above the supply minimum", {"supply": {"uvlo": 12.0}}),
    ("current limit below the load current", {"switch": {"i_limit": "1 A"}, "load": {"i_nom": 3.0}}),
]


@pytest.mark.parametrize("sections", [c[1] for c in CANNOT_WORK], ids=[c[0] for c in CANNOT_WORK])
def test_a_design_that_cannot_work_is_stored_not_refused(client, people, board, sections):
    r = _create(client, people, board, doc=rail_doc(**sections))
    assert r.status_code == 201, r.text


def test_bad_document_on_save_keeps_the_old_revision(client, people, board):
    rail = _create(client, people, board).json()
    doc = rail_doc()
    doc["load"]["c_nom"] = "-5 uF"
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": doc, "base_revision": 1},
                   headers=people.headers("designer"))
    assert r.status_code == 422
    assert _count_revisions(client, people, rail["id"]) == 1


def test_save_with_if_match_makes_revision_two(client, people, board):
    rail = _create(client, people, board).json()
    doc = rail_doc(load={"c_nom": "1 mF"})
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": doc, "message": "bigger bulk"},
                   headers={**people.headers("designer"), "If-Match": f'"{rail["head"]["sha256"]}"'})
    assert r.status_code == 200, r.text
    assert r.json()["head"]["n"] == 2
    assert r.json()["head"]["message"] == "bigger bulk"
    assert r.json()["document"]["load"]["c_nom"] == pytest.approx(1e-3)
    old = client.get(f"/api/v1/rails/{rail['id']}/revisions/1", headers=people.headers("viewer")).json()
    assert old["document"]["load"]["c_nom"] == pytest.approx(680e-6)
    assert old["sha256"] == rail["head"]["sha256"]


def test_save_without_base_is_refused(client, people, board):
    rail = _create(client, people, board).json()
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(load={"c_nom": "1 mF"})},
                   headers=people.headers("designer"))
    assert r.status_code == 428
    assert _count_revisions(client, people, rail["id"]) == 1


def test_stale_save_conflicts_and_overwrites_nothing(client, people, board):
    rail = _create(client, people, board).json()
    h = people.headers("designer")
    first = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(load={"c_nom": "1 mF"}),
                                                            "base_revision": 1}, headers=h)
    assert first.status_code == 200
    stale = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(load={"c_nom": "2.2 mF"})},
                       headers={**h, "If-Match": rail["head"]["sha256"]})
    assert stale.status_code == 409, stale.text
    error = stale.json()["error"]
    assert error["code"] == "conflict"
    assert error["current"]["n"] == 2
    assert error["current"]["document"]["load"]["c_nom"] == pytest.approx(1e-3)
    head = client.get(f"/api/v1/rails/{rail['id']}", headers=h).json()
    assert head["head"]["n"] == 2
    assert head["document"]["load"]["c_nom"] == pytest.approx(1e-3)


def test_unchanged_save_creates_no_revision(client, people, board):
    rail = _create(client, people, board).json()
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail["document"], "base_revision": 1},
                   headers=people.headers("designer"))
    assert r.status_code == 200
    assert r.json()["created_revision"] is False
    assert _count_revisions(client, people, rail["id"]) == 1


def test_two_clients_saving_at_once_one_wins_one_conflicts(app, people, board):
    with TestClient(app) as setup:
        rail = _create(setup, people, board).json()
    results: list[int] = []
    barrier = threading.Barrier(2)

    def save(c_nom: str) -> None:
        with TestClient(app) as c:
            barrier.wait()
            r = c.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(load={"c_nom": c_nom}),
                                                           "base_revision": 1},
                      headers=people.headers("designer"))
            results.append(r.status_code)

    threads = [threading.Thread(target=save, args=(v,)) for v in ("1 mF", "2.2 mF")]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(results) == [200, 409]
    with TestClient(app) as c:
        revisions = c.get(f"/api/v1/rails/{rail['id']}/revisions", headers=people.headers("viewer")).json()
    assert [r["n"] for r in revisions["items"]] == [2, 1]


def test_revision_numbers_and_hashes_are_stable(client, people, board):
    rail = _create(client, people, board).json()
    h = people.headers("designer")
    shas = [rail["head"]["sha256"]]
    for n, c in enumerate(["1 mF", "1.5 mF", "680 uF"], start=1):
        r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(load={"c_nom": c}),
                                                            "base_revision": n}, headers=h)
        shas.append(r.json()["head"]["sha256"])
    revisions = client.get(f"/api/v1/rails/{rail['id']}/revisions", headers=h).json()["items"]
    assert [r["n"] for r in revisions] == [4, 3, 2, 1]
    assert [r["sha256"] for r in reversed(revisions)] == shas
    assert shas[3] == shas[0]  # back to the first document: the same hash


def test_diff_lists_field_changes_with_old_and_new(client, people, board):
    rail = _create(client, people, board).json()
    doc = rail_doc(load={"c_nom": "1 mF", "esr": "20 mOhm"}, environment={"t_ambient": 70.0})
    doc["fet"]["zth"].append({"r": 1.0, "tau": 50.0})
    client.put(f"/api/v1/rails/{rail['id']}", json={"document": doc, "base_revision": 1},
               headers=people.headers("designer"))
    diff = client.get(f"/api/v1/rails/{rail['id']}/diff", params={"from": 1, "to": 2},
                      headers=people.headers("viewer")).json()
    changes = {c["field"]: c for c in diff["changes"]}
    assert set(changes) == {"load.c_nom", "load.esr", "environment.t_ambient", "fet.zth[4].r", "fet.zth[4].tau"}
    assert changes["load.c_nom"]["old"] == pytest.approx(680e-6)
    assert changes["load.c_nom"]["new"] == pytest.approx(1e-3)
    assert changes["load.esr"]["change"] == "changed"
    assert changes["fet.zth[4].tau"] == {"field": "fet.zth[4].tau", "change": "added", "old": None, "new": 50.0}
    back = client.get(f"/api/v1/rails/{rail['id']}/diff", params={"from": 2, "to": 1},
                      headers=people.headers("viewer")).json()
    assert {c["field"]: c["change"] for c in back["changes"]}["fet.zth[4].r"] == "removed"


def test_list_is_paginated_and_filtered(client, people, board):
    h = people.headers("designer")
    modes = ["hard", "slew", "current_limit", "power_limit"]
    for k in range(10):
        mode = modes[k % 4]
        switch = {"mode": mode, "dvdt": "1 V/ms", "i_limit": 4.0, "p_limit": 20.0}
        r = _create(client, people, board, doc=rail_doc(name=f"R{k:02d}", switch=switch))
        assert r.status_code == 201, r.text
    page = client.get("/api/v1/rails", params={"limit": 4, "offset": 4}, headers=h).json()
    assert page["total"] == 10
    assert [r["name"] for r in page["items"]] == ["R04", "R05", "R06", "R07"]
    slew = client.get("/api/v1/rails", params={"mode": "slew"}, headers=h).json()
    assert [r["name"] for r in slew["items"]] == ["R01", "R05", "R09"]
    text = client.get("/api/v1/rails", params={"q": "r0"}, headers=h).json()
    assert text["total"] == 10
    by_product = client.get("/api/v1/rails", params={"product_id": board["product_id"], "q": "R1"}, headers=h)
    assert by_product.json()["total"] == 0
    bad = client.get("/api/v1/rails", params={"mode": "warp"}, headers=h)
    assert bad.status_code == 422
    assert bad.json()["error"]["details"][0]["field"] == "mode"


def test_pinned_part_fills_the_fet_and_reports_newer_revisions(client, people, board):
    h = people.headers("designer")
    part = client.post("/api/v1/parts", json={"document": fet_doc("Library N30")}, headers=h).json()
    doc = rail_doc()
    del doc["fet"]
    rail = _create(client, people, board, doc=doc, part={"id": part["id"]}).json()
    assert rail["document"]["fet"]["name"] == "Library N30"
    assert rail["part"] == {"id": part["id"], "name": "Library N30", "pinned_revision": 1, "latest_revision": 1,
                            "newer_available": False}
    changed = client.put(f"/api/v1/parts/{part['id']}", json={"document": fet_doc("Library N30", rds_on="4 mOhm"),
                                                              "base_revision": 1}, headers=h)
    assert changed.status_code == 200 and changed.json()["head"]["n"] == 2
    again = client.get(f"/api/v1/rails/{rail['id']}", headers=h).json()
    assert again["document"]["fet"]["rds_on"] == pytest.approx(5e-3)  # pinned: unchanged
    assert again["part"]["newer_available"] is True
    used = client.get(f"/api/v1/parts/{part['id']}", headers=h).json()["used_by"]
    assert used == [{"rail_id": rail["id"], "rail_name": "VOUT_12V", "board_id": board["id"], "part_revision": 1}]
    moved = client.put(f"/api/v1/rails/{rail['id']}", json={"document": doc, "base_revision": 1,
                                                            "part": {"id": part["id"]}}, headers=h).json()
    assert moved["document"]["fet"]["rds_on"] == pytest.approx(4e-3)
    assert moved["part"]["newer_available"] is False


def test_inline_fet_that_differs_from_the_pinned_part_is_refused(client, people, board):
    h = people.headers("designer")
    part = client.post("/api/v1/parts", json={"document": fet_doc("Library N30")}, headers=h).json()
    doc = rail_doc(fet=fet_doc("Library N30", rds_on="3 mOhm"))
    r = _create(client, people, board, doc=doc, part={"id": part["id"]})
    assert r.status_code == 422
    assert r.json()["error"]["details"][0]["field"] == "document.fet"


def test_errors_share_one_shape(client, people, board):
    h = people.headers("viewer")
    for response, status in [(client.get("/api/v1/rails/999", headers=h), 404),
                             (client.get("/api/v1/rails/abc", headers=h), 422),
                             (client.get("/api/v1/rails"), 401),
                             (client.get("/api/v1/nothing-here", headers=h), 404),
                             (client.post("/api/v1/products", json={"name": "x"}, headers=h), 403)]:
        assert response.status_code == status
        error = response.json()["error"]
        assert set(error) >= {"status", "code", "message", "details"}
        assert error["status"] == status and error["message"]


def test_healthz_reports_the_database(client):
    r = client.get("/healthz")
    assert r.status_code == 200
    assert r.json()["database"]["reachable"] is True


def test_healthz_says_when_the_database_is_unreachable(tmp_path):
    from server.app import create_app
    from tests.conftest import make_settings

    settings = make_settings("postgresql+psycopg://nobody@127.0.0.1:1/none")
    with TestClient(create_app(settings)) as c:
        r = c.get("/healthz")
    assert r.status_code == 503
    assert r.json()["database"]["reachable"] is False


def test_part_with_zth_points_the_analysis_refuses_is_not_stored(client, people):
    h = people.headers("designer")
    fet = fet_doc("Odd points", zth_points=[[1e-3, 0.5], [1e-2, 0.6], [1e-2, 0.7]])  # t repeats
    r = client.post("/api/v1/parts", json={"document": fet}, headers=h)
    assert r.status_code == 422, r.text
    assert r.json()["error"]["details"][0]["field"] == "document.zth_points[2]"
    assert client.get("/api/v1/parts", headers=h).json()["total"] == 0


def test_crossing_soa_curves_are_stored_with_warnings_naming_them_and_zth_points_round_trip(client, people, board):
    h = people.headers("designer")
    fet = fet_doc("Crossing N30", zth_points=[["10 us", 0.02], ["1 ms", 0.3], ["100 ms", 1.1]])
    fet["soa"]["curves"][3]["points"] = [[0.5, 90.0], [30.0, 30.0]]  # DC above the 1 ms and 10 ms curves
    part = client.post("/api/v1/parts", json={"document": fet}, headers=h)
    assert part.status_code == 201, part.text
    assert part.json()["head"]["document"]["zth_points"][1] == [pytest.approx(1e-3), 0.3]
    detail = client.get(f"/api/v1/parts/{part.json()['id']}", headers=h).json()
    assert {w["field"] for w in detail["warnings"]} == {"fet.soa.curves[3]"}
    assert any("the DC curve allows more current than the shorter 10 ms curve" in w["message"]
               for w in detail["warnings"])
    plain = client.post("/api/v1/parts", json={"document": fet_doc("Plain N30")}, headers=h).json()
    assert client.get(f"/api/v1/parts/{plain['id']}", headers=h).json()["warnings"] == []
    assert "zth_points" not in plain["head"]["document"]
    rail = _create(client, people, board, doc=rail_doc(fet=fet)).json()
    assert [w["field"] for w in rail["warnings"]] == ["fet.soa.curves[3]", "fet.soa.curves[3]"]
    bad = client.post("/api/v1/parts", json={"document": fet_doc("Bad N30", zth_points=[[1e-3, 0.5], [1e-4, 0.6]])},
                      headers=h)
    assert bad.status_code == 422
    assert bad.json()["error"]["details"][0]["field"] == "document.zth_points[1]"
