"""The managers' risk view and the audit export of a product, on SQLite and PostgreSQL."""

from __future__ import annotations

import pytest

import csv
import io
import json

from server.services import risks
from server.services.access import Actor
from server.services.users import get_user_by_name
from tests.signoff_support import allow_fail_waivers, FAILING, PASSING, edit_rail, make_board, make_rail, store_checks


@pytest.fixture(autouse=True)
def _rules_these_tests_were_written_under(session_factory, people):
    """A reviewer may waive a failing check and approve alone here: the waiver rules are tests/test_governance.py's."""
    allow_fail_waivers(session_factory, people.team_ids["alpha"])


def _board(client, people, product_id, name):
    r = client.post("/api/v1/boards", json={"product_id": product_id, "name": name, "revision": "A"},
                    headers=people.headers("designer"))
    assert r.status_code == 201, r.text
    return r.json()


def _sign_off(client, people, rail, sha):
    for who, path, body in (
            ("designer", "transitions", {"transition": "submit for review", "sha256": sha}),
            ("reviewer", "approvals", {"sha256": sha, "comment": "margins checked at all corners"}),
            ("reviewer", "transitions", {"transition": "accept margins", "sha256": sha})):
        r = client.post(f"/api/v1/rails/{rail['id']}/{path}", json=body, headers=people.headers(who))
        assert r.status_code in (200, 201), r.text


def test_the_risk_view_lists_what_stands_between_each_rail_and_its_sign_off(client, people, session_factory):
    main = make_board(client, people, name="Field gateway")
    product_id = main["product_id"]
    io_board = _board(client, people, product_id, "IO")
    waived = make_rail(client, people, main, name="V_FAN")
    store_checks(session_factory, waived["head"]["sha256"], FAILING)
    r = client.post(f"/api/v1/rails/{waived['id']}/waivers",
                    json={"sha256": waived["head"]["sha256"], "check_id": "startup_soa",
                          "reason": "fan starts with its own soft start; bench capture attached"},
                    headers=people.headers("reviewer"))
    assert r.status_code == 201
    clean = make_rail(client, people, main, name="V_CORE")
    store_checks(session_factory, clean["head"]["sha256"], PASSING)
    _sign_off(client, people, clean, clean["head"]["sha256"])
    make_rail(client, people, main, name="V_AUX")
    edited = make_rail(client, people, io_board, name="V_IO")
    store_checks(session_factory, edited["head"]["sha256"], PASSING)
    _sign_off(client, people, edited, edited["head"]["sha256"])
    edit_rail(client, people, edited, "1 mF")

    view = client.get(f"/api/v1/products/{product_id}/risks", headers=people.headers("manager"))
    assert view.status_code == 200, view.text
    body = view.json()
    assert body["product"]["name"] == "Field gateway" and "not a standard" in body["caution"]
    assert [b["name"] for b in body["boards"]] == ["IO", "Main"]
    rails = {r["name"]: r for b in body["boards"] for r in b["rails"]}
    assert rails["V_CORE"]["risks"] == [] and rails["V_CORE"]["signed_off"] is True
    assert rails["V_FAN"]["risks"] == ["marginal_check", "waived_check", "missing_signoff"]
    assert [c["id"] for c in rails["V_FAN"]["marginal"]] == ["fault_margin"]
    assert rails["V_FAN"]["waived"][0]["waiver"]["reason"].startswith("fan starts with its own soft start")
    assert rails["V_FAN"]["waived"][0]["value"] == 0.9 and rails["V_FAN"]["waived"][0]["limit"] == 1.5
    assert rails["V_AUX"]["risks"] == ["never_analysed", "missing_signoff"]
    assert rails["V_AUX"]["technical"] == ["never_analysed"] and rails["V_AUX"]["process"] == ["missing_signoff"]
    assert rails["V_IO"]["risks"] == ["not_analysed", "stale_signoff", "missing_signoff"]
    assert rails["V_FAN"]["owner"] == "designer" and rails["V_FAN"]["outdated_part"] is None
    assert rails["V_IO"]["stale_approvals"] == [{"reviewer": "reviewer", "revision": 1}]
    assert rails["V_IO"]["state"] == "in design" and rails["V_IO"]["head"]["n"] == 2
    assert body["totals"] == {
        "rails": 4, "signed_off": 1, "rails_at_risk": 3, "rails_at_technical_risk": 3, "failing_check": 0,
        "marginal_check": 1, "waived_check": 1, "outdated_part": 0, "stale_signoff": 1, "awaiting_review": 0,
        "missing_signoff": 3, "outdated_result": 0, "not_analysed": 1, "never_analysed": 1, "failing_checks": 0,
        "marginal_checks": 1, "waived_checks": 1}
    main_rails = [r["name"] for r in next(b for b in body["boards"] if b["name"] == "Main")["rails"]]
    assert main_rails == ["V_AUX", "V_FAN", "V_CORE"]      # worst first: never analysed, marginal, nothing
    io_counts = next(b for b in body["boards"] if b["name"] == "IO")["counts"]
    assert io_counts["rails"] == 1 and io_counts["stale_signoff"] == 1
    unwaived = make_rail(client, people, io_board, name="V_USB")
    store_checks(session_factory, unwaived["head"]["sha256"], FAILING)
    again = client.get(f"/api/v1/products/{product_id}/risks", headers=people.headers("admin")).json()
    usb = next(r for b in again["boards"] for r in b["rails"] if r["name"] == "V_USB")
    assert usb["risks"] == ["failing_check", "marginal_check", "missing_signoff"]
    assert [c["id"] for c in usb["failing"]] == ["startup_soa"]

    with session_factory() as session:  # the same answer from the service, for the page
        actor = Actor.for_user(get_user_by_name(session=session, username="manager"))
        direct = risks.product_risks(session=session, actor=actor, product_id=product_id)
    assert direct["totals"] == again["totals"]


def test_the_audit_export_holds_the_products_trail_in_order_as_csv(client, people):
    board = make_board(client, people, name="Bench supply")
    product_id = board["product_id"]
    _board(client, people, product_id, "=SUM(A1:A9)")
    rail = make_rail(client, people, board)
    other = make_board(client, people, name="Someone else's product")  # not in this export
    edit_rail(client, people, rail, "1 mF")
    r = client.get(f"/api/v1/products/{product_id}/audit.csv", headers=people.headers("manager"))
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/csv")
    assert r.headers["content-disposition"] == f'attachment; filename="product-{product_id}-audit.csv"'
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [(row["action"], row["object_type"]) for row in rows] == [
        ("create", "product"), ("create", "board"), ("create", "board"), ("create", "rail"), ("update", "rail")]
    assert rows[2]["object"] == "'=SUM(A1:A9) rev A"          # not run as a formula by a spreadsheet
    assert [int(row["id"]) for row in rows] == sorted(int(row["id"]) for row in rows)
    assert all(row["user"] == "designer" for row in rows)
    assert json.loads(rows[4]["after"])["n"] == 2
    assert str(other["product_id"]) not in {row["object_id"] for row in rows if row["object_type"] == "product"}
    listing = client.get(f"/api/v1/products/{product_id}/audit", headers=people.headers("admin")).json()
    assert listing["total"] == len(rows)
