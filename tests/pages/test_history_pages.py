"""History you can read: any old revision opened in full (inputs, the result of its time, approvals), two
revisions compared with their check records side by side, overlays naming every trace."""

from __future__ import annotations

import json
import re

from server.analysis.report import margin_text, value_text
from server.pages.history import history_context, revision_context
from server.services import rail_edits
from server.services.rails import get_revision
from tests.factories import rail_doc
from tests.pages.helpers import actor_of, analyse_now, log_in
from tests.signoff_support import FAILING, PASSING, check, make_board, make_rail, store_checks


def test_an_old_revision_opens_in_full_with_its_outdated_result_and_its_stale_approval(
        client, app, people, session_factory):
    board = make_board(client, people, name="Pier lights")
    rail = make_rail(client, people, board, name="V_LAMP")
    first_sha = rail["head"]["sha256"]
    store_checks(session_factory, first_sha, PASSING)
    r = client.post(f"/api/v1/rails/{rail['id']}/approvals", json={"sha256": first_sha, "comment": "corners fine"},
                    headers=people.headers("reviewer"))
    assert r.status_code == 201, r.text
    # the same revision was read before by an older engine too; a new revision follows
    store_checks(session_factory, first_sha, FAILING, version="1.1.0")
    with session_factory() as s:
        rail_edits.save_rail(session=s, actor=actor_of(s, "designer"), rail_id=rail["id"],
                             document=rail_doc("V_LAMP", load={"c_nom": "1 mF"}), base_n=1, message="bigger bank")
    second = client.get(f"/api/v1/rails/{rail['id']}", headers=people.headers("designer")).json()["head"]
    store_checks(session_factory, second["sha256"], [check("startup_soa", "marginal", 1.2)], version="1.1.0")

    log_in(client, app, people.ids["viewer"])
    history = client.get(f"/rails/{rail['id']}/history").text
    assert f'href="/rails/{rail["id"]}/revisions/1"' in history and f'href="/rails/{rail["id"]}/revisions/2"' in history
    assert "engine 1.1.0 read marginal" in history                # revision 2 has only an older engine's result

    old = client.get(f"/rails/{rail['id']}/revisions/1")
    assert old.status_code == 200
    page = old.text
    assert "An earlier revision: the rail is at revision 2 now." in page and first_sha in page
    assert "Approved by <strong>reviewer</strong>" in page and 'class="tag stale"' in page
    assert "the rail changed after it: revision 2 was saved" in page
    assert "680 µF" in page                                          # its own inputs, not the current ones
    row = re.search(r'<tr data-check="startup_soa">(.*?)</tr>', page, re.S).group(1)
    assert '>pass<' in row and value_text(2.1, "ratio") in row      # the current engine's result of its time
    outdated = client.get(f"/rails/{rail['id']}/revisions/2").text
    assert "outdated" in outdated and "engine 1.1.0" in outdated
    assert re.search(r'<tr data-check="startup_soa">.*?>marginal<', outdated, re.S)
    assert "No approval was given for revision 2." in outdated
    assert client.get(f"/rails/{rail['id']}/revisions/9").status_code == 404


def test_two_revisions_compare_inputs_and_check_records_side_by_side(client, app, people, session_factory):
    board = make_board(client, people, name="Quay cranes")
    rail = make_rail(client, people, board, name="V_WINCH")
    store_checks(session_factory, rail["head"]["sha256"], PASSING)
    with session_factory() as s:
        rail_edits.save_rail(session=s, actor=actor_of(s, "designer"), rail_id=rail["id"],
                             document=rail_doc("V_WINCH", load={"c_nom": "2.2 mF"}), base_n=1)
    second = client.get(f"/api/v1/rails/{rail['id']}", headers=people.headers("designer")).json()["head"]
    store_checks(session_factory, second["sha256"], FAILING)
    with session_factory() as s:
        ctx = history_context(s, actor_of(s, "viewer"), rail["id"])
    rows = {r["id"]: r for r in ctx["check_rows"]}
    assert rows["startup_soa"]["changed"] == {"verdict", "value", "margin_text"}    # the limit stayed 1.5
    assert rows["vds_derating"]["changed"] == set()
    assert rows["retry_tj"]["old"] is None and rows["retry_tj"]["any_changed"]
    assert [c["field"] for c in ctx["changes"]] == ["load.c_nom"]
    log_in(client, app, people.ids["viewer"])
    page = client.get(f"/rails/{rail['id']}/history?from_n=1&to_n=2").text
    row = re.search(r'<tr data-check="startup_soa" class="check-changed">(.*?)</tr>', page, re.S).group(1)
    cells = re.findall(r'<td class="num( changed)?" data-field="(value|margin)">([^<]*)</td>', row)
    assert cells == [(" changed", "value", value_text(2.1, "ratio")), (" changed", "margin", margin_text(2.1 / 1.5)),
                     (" changed", "value", value_text(0.9, "ratio")), (" changed", "margin", margin_text(0.9 / 1.5))]
    assert '<td class="num" data-field="limit">≥ 1.5</td>' in row
    unchanged = re.search(r'<tr data-check="vds_derating">(.*?)</tr>', page, re.S).group(1)
    assert "changed" not in unchanged


def test_the_overlay_names_every_trace_with_its_revision(client, people, session_factory):
    board = make_board(client, people, name="Lock gates")
    rail = make_rail(client, people, board, name="V_GATE")
    with session_factory() as s:
        designer = actor_of(s, "designer")
        analyse_now(s, get_revision(session=s, actor=designer, rail_id=rail["id"]))
        _, rev, _ = rail_edits.save_rail(session=s, actor=designer, rail_id=rail["id"],
                                         document=rail_doc("V_GATE", load={"c_nom": "1 mF"}), base_n=1)
        analyse_now(s, rev)
        ctx = history_context(s, actor_of(s, "viewer"), rail["id"])
        full = revision_context(s, actor_of(s, "viewer"), rail["id"], 1)
    for figure in (ctx["figures"]["startup"], ctx["figures"]["soa"]):
        traces = figure["data"]
        assert traces and all(t.get("showlegend", True) and t["name"] for t in traces)
        assert len({t["name"] for t in traces}) == len(traces)          # no two traces share a name
    names = {t["name"] for t in ctx["figures"]["startup"]["data"]}
    for signal in ("Output voltage", "Switch current", "FET power", "Junction temperature"):
        assert {f"{signal} (revision 1)", f"{signal} (revision 2)"} <= names
    assert full["figures"]["startup"] and full["reading"]["outdated"] is False
    assert json.dumps(full["figures"]["soa"])
