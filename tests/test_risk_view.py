"""The risk view across products: technical risks apart from process state, worst first, filters, CSV,
daily snapshots and the trend, on SQLite and PostgreSQL."""

from __future__ import annotations

import csv
import io
import json
import re
from datetime import timedelta

from sqlalchemy import func, select

from server.__main__ import main
from server.models import RiskSnapshot, utcnow
from server.services import parts, risks
from tests.conftest import TEST_SECRET
from tests.factories import fet_doc, rail_doc
from tests.pages.helpers import actor_of, log_in
from tests.signoff_support import FAILING, PASSING, check, make_board, make_rail, store_checks


def _submit(client, people, rail):
    r = client.post(f"/api/v1/rails/{rail['id']}/transitions",
                    json={"transition": "submit for review", "sha256": rail["head"]["sha256"]},
                    headers=people.headers("designer"))
    assert r.status_code == 200, r.text


def _scene(client, people, session_factory) -> dict:
    """Two products of team alpha and one of team beta, rails in every kind of state."""
    gateway = make_board(client, people, name="Harbour gateway")
    sensor = make_board(client, people, name="Soil sensor")
    hidden = make_board(client, people, name="Beta's own", designer="outsider")
    failing = make_rail(client, people, gateway, name="V_MOTOR")
    store_checks(session_factory, failing["head"]["sha256"], FAILING)
    passing = make_rail(client, people, gateway, name="V_LOGIC")
    store_checks(session_factory, passing["head"]["sha256"], PASSING)
    _submit(client, people, passing)                                   # process state only
    marginal = make_rail(client, people, sensor, name="V_PROBE", designer="admin")
    store_checks(session_factory, marginal["head"]["sha256"],
                 [check("startup_soa", "pass", 2.0), check("fault_margin", "marginal", 1.3)])
    never = make_rail(client, people, sensor, name="V_RADIO")
    beta = make_rail(client, people, hidden, name="V_SECRET", designer="outsider")
    store_checks(session_factory, beta["head"]["sha256"], FAILING)
    return {"gateway": gateway, "sensor": sensor, "failing": failing, "passing": passing, "marginal": marginal,
            "never": never}


def test_one_view_of_every_product_the_manager_sees_worst_first(client, people, session_factory):
    scene = _scene(client, people, session_factory)
    with session_factory() as s:
        view = risks.risk_view(session=s, actor=actor_of(s, "manager"))
    assert [p["name"] for p in view["products"]] == ["Harbour gateway", "Soil sensor"]    # not team beta's
    assert [r["name"] for r in view["rails"]] == ["V_MOTOR", "V_RADIO", "V_PROBE", "V_LOGIC"]
    motor, radio, probe, logic = view["rails"]
    assert motor["technical"] == ["failing_check", "marginal_check"] and motor["process"] == ["missing_signoff"]
    assert radio["technical"] == ["never_analysed"]
    assert probe["owner"] == "admin" and probe["technical"] == ["marginal_check"]
    assert logic["technical"] == [] and logic["process"] == ["awaiting_review", "missing_signoff"]
    assert logic["state"] == "awaiting review"
    assert view["totals"]["rails"] == 4 and view["totals"]["rails_at_technical_risk"] == 3
    assert view["totals"]["awaiting_review"] == 1 and view["totals"]["failing_checks"] == 1
    # the check records as the analysis stored them, nothing recomputed
    assert motor["failing"][0]["value"] == 0.9 and motor["failing"][0]["limit"] == 1.5

    with session_factory() as s:
        manager = actor_of(s, "manager")
        by_product = risks.risk_view(session=s, actor=manager, product_id=scene["sensor"]["product_id"])
        by_board = risks.risk_view(session=s, actor=manager, board_id=scene["gateway"]["id"])
        by_state = risks.risk_view(session=s, actor=manager, state="awaiting review")
        by_owner = risks.risk_view(session=s, actor=manager, owner="admin")
        technical = risks.risk_view(session=s, actor=manager, kind="technical")
        process_only = risks.risk_view(session=s, actor=manager, kind="awaiting_review")
        everything = risks.risk_view(session=s, actor=manager, include_clear=True)
    assert [r["name"] for r in by_product["rails"]] == ["V_RADIO", "V_PROBE"]
    assert [r["name"] for r in by_board["rails"]] == ["V_MOTOR", "V_LOGIC"]
    assert [r["name"] for r in by_state["rails"]] == ["V_LOGIC"]
    assert [r["name"] for r in by_owner["rails"]] == ["V_PROBE"] and by_owner["totals"]["rails"] == 1
    assert [r["name"] for r in technical["rails"]] == ["V_MOTOR", "V_RADIO", "V_PROBE"]
    assert [r["name"] for r in process_only["rails"]] == ["V_LOGIC"]
    assert len(everything["rails"]) == 4
    assert by_product["choices"]["owners"] == ["admin", "designer"]


def test_an_outdated_part_revision_and_the_approval_awaited_are_risks_of_their_kind(client, people, session_factory):
    board = make_board(client, people, name="Tidal logger")
    with session_factory() as s:
        part = parts.create_part(session=s, actor=actor_of(s, "designer"), document=fet_doc("Risk N30"))
        part_id = part.part_id
    doc = rail_doc("V_PUMP")
    doc.pop("fet")
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": doc, "part": {"id": part_id}},
                    headers=people.headers("designer"))
    assert r.status_code == 201, r.text
    rail = r.json()
    store_checks(session_factory, rail["head"]["sha256"], PASSING)
    _submit(client, people, rail)
    with session_factory() as s:
        before = risks.risk_view(session=s, actor=actor_of(s, "manager"))["rails"][0]
        parts.save_part(session=s, actor=actor_of(s, "designer"), part_id=part_id,
                        document=fet_doc("Risk N30", rds_on="4 mOhm"), base_n=1)
    assert before["risks"] == ["awaiting_review", "missing_signoff"]
    r = client.post(f"/api/v1/rails/{rail['id']}/approvals",
                    json={"sha256": rail["head"]["sha256"], "comment": "all corners checked"},
                    headers=people.headers("reviewer"))
    assert r.status_code == 201, r.text
    with session_factory() as s:
        after = risks.risk_view(session=s, actor=actor_of(s, "manager"))["rails"][0]
    assert after["risks"] == ["outdated_part", "missing_signoff"]       # approved: no longer awaiting review
    assert after["outdated_part"] == {"name": "Risk N30", "pinned_revision": 1, "latest_revision": 2}
    api = client.get(f"/api/v1/products/{board['product_id']}/risks", headers=people.headers("manager")).json()
    assert api["totals"]["outdated_part"] == 1 and api["boards"][0]["rails"][0]["outdated_part"]["latest_revision"] == 2


def test_the_page_shows_both_groups_and_the_csv_holds_every_rail_of_the_filter(client, app, people, session_factory):
    scene = _scene(client, people, session_factory)
    log_in(client, app, people.ids["manager"])
    page = client.get("/risks")
    assert page.status_code == 200, page.text
    html = page.text
    assert "Technical risks" in html and "Process state" in html
    assert re.search(r'<dd data-count="failing_check">1</dd>', html)
    assert re.search(r'<dd data-count="awaiting_review">1</dd>', html)
    rows = re.findall(r'<tr data-rail="(\d+)" data-severity="([a-z_]*)">', html)
    assert [int(r) for r, _ in rows] == [scene[k]["id"] for k in ("failing", "never", "marginal", "passing")]
    assert [kind for _, kind in rows] == ["failing_check", "never_analysed", "marginal_check", "awaiting_review"]
    assert "Beta" not in html
    one = client.get(f"/products/{scene['sensor']['product_id']}/risks?kind=technical").text
    assert re.findall(r'<tr data-rail="(\d+)"', one) == [str(scene["never"]["id"]), str(scene["marginal"]["id"])]
    assert "Risks of Soil sensor" in one

    export = client.get(f"/risks.csv?board={scene['gateway']['id']}")
    assert export.status_code == 200 and export.headers["content-type"].startswith("text/csv")
    table = list(csv.DictReader(io.StringIO(export.text)))
    assert [(r["rail"], r["severity"]) for r in table] == [("V_MOTOR", "failing_check"),
                                                            ("V_LOGIC", "awaiting_review")]
    assert table[0]["failing_checks"].startswith("startup_soa (fail, margin 0.6")
    assert table[0]["technical_risks"] == "failing_check marginal_check"
    assert table[1]["process_risks"] == "awaiting_review missing_signoff" and table[1]["state"] == "awaiting review"
    assert client.get("/risks?board=x").status_code == 422


def test_the_first_view_of_a_day_takes_the_snapshot_and_the_daily_command_renews_it(
        client, app, people, session_factory, database_url, monkeypatch, capsys):
    scene = _scene(client, people, session_factory)
    gateway = scene["gateway"]["product_id"]
    with session_factory() as s:   # an earlier day's snapshot, as the timer would have left it
        s.add(RiskSnapshot(product_id=gateway, day=utcnow().date() - timedelta(days=3),
                           counts={"failing_check": 4, "rails": 9}))
        s.commit()
    log_in(client, app, people.ids["manager"])
    first = client.get("/risks").text
    with session_factory() as s:
        today = {pid: counts for pid, counts in s.execute(
            select(RiskSnapshot.product_id, RiskSnapshot.counts).where(RiskSnapshot.day == utcnow().date()))}
    assert set(today) == {gateway, scene["sensor"]["product_id"]}           # not team beta's product
    assert today[gateway]["failing_check"] == 1 and today[gateway]["awaiting_review"] == 1
    figure = json.loads(re.search(r'<script type="application/json" id="plot-risk-trend-data">(.*?)</script>',
                                  first, re.S).group(1))
    failing = next(t for t in figure["data"] if t["name"].startswith("Failing checks"))
    assert failing["y"] == [4, 1] and len(failing["x"]) == 2
    assert all(t["name"] for t in figure["data"])

    make_rail(client, people, scene["gateway"], name="V_FAN")         # never analysed: one more at risk
    client.get("/risks")
    with session_factory() as s:
        assert s.scalar(select(func.count()).select_from(RiskSnapshot)) == 3     # no second snapshot of today
        kept = s.scalar(select(RiskSnapshot.counts).where(RiskSnapshot.product_id == gateway,
                                                          RiskSnapshot.day == utcnow().date()))
    assert kept["never_analysed"] == 0
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)
    assert main(["risks", "snapshot"]) == 0
    assert "taken for 3 product(s)" in capsys.readouterr().out                # the command sees every team
    with session_factory() as s:
        renewed = s.scalar(select(RiskSnapshot.counts).where(RiskSnapshot.product_id == gateway,
                                                             RiskSnapshot.day == utcnow().date()))
        assert s.scalar(select(func.count()).select_from(RiskSnapshot)) == 4
    assert renewed["never_analysed"] == 1
