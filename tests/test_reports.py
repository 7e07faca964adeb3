"""The board sign-off report: its PDF (one section per rail, the revision hashes in its text), the
page, and the archived copies made when every rail of the board enters a state that archives the
record: append-only through the API, the pages and the database, their sha256 that of the bytes a
download gives, untouched by a later edit while the live report follows it."""

from __future__ import annotations

import hashlib
import io
import re

import pytest
from pypdf import PdfReader
from sqlalchemy import select, text, update
from sqlalchemy.exc import DBAPIError

from server import analysis
from server.analysis.report import value_text
from server.demo import seed
from server.models import AnalysisResult, ArchivedReport, Board, BoardSequenceResult
from server.services import reports, results, users
from server.services.access import Actor
from server.services.users import get_user_by_name
from server.workflow import DEFAULT_WORKFLOW, WorkflowInvalid, parse_workflow
from tests.job_support import run_queued_jobs
from tests.pages.helpers import log_in
from tests.report_support import freeze, pdf_outline, pdf_pages, store_real_result
from tests.signoff_support import PASSING, edit_rail, make_board, make_rail, store_checks


@pytest.fixture
def board(client, people) -> dict:
    return make_board(client, people)


def _archives(client, people, board_id: int, who: str = "viewer") -> list[dict]:
    r = client.get(f"/api/v1/boards/{board_id}/archived-reports", headers=people.headers(who))
    assert r.status_code == 200, r.text
    return r.json()["items"]


def test_the_pdf_has_a_section_per_rail_with_its_revision_hash(client, people, board):
    rails = [make_rail(client, people, board, name=name) for name in ("VOUT_12V", "VAUX_5V", "VCORE")]
    for rail in rails[:2]:
        store_real_result(client.app.state.sessionmaker, rail["head"]["sha256"])
    r = client.get(f"/api/v1/boards/{board['id']}/report.pdf", headers=people.headers("viewer"))
    assert r.status_code == 200 and r.headers["content-type"] == "application/pdf"
    assert r.content.startswith(b"%PDF-")
    pages = pdf_pages(r.content)
    whole = "\n".join(pages)
    names = sorted(x["name"] for x in rails)
    starts = []
    for k, name in enumerate(names, start=1):
        found = [n for n, p in enumerate(pages) if f"Rail {k} of 3: {name}" in p]
        assert len(found) == 1, f"rail {name}: {len(found)} section starts"
        starts += found
    assert starts == sorted(set(starts)) and starts[0] > 0                  # each rail on pages of its own
    assert pdf_outline(r.content) == ["Sign-off report"] + [f"{k}. {n} (revision 1)" for k, n in
                                                             enumerate(names, start=1)]
    for rail in rails:
        assert rail["head"]["sha256"] in whole.replace("\n", "")
    first, flat = " ".join(pages[0].split()), " ".join(whole.split())
    assert "Caution:" in first and "stored energy and high currents" in flat
    assert "Team sign-off rules in force" in first and "frozen for build" in first
    assert "signed off, archives the record" in first
    assert "Not analysed: this revision has no stored result." in flat               # VCORE
    # the check table is the stored record's, in words: the worst case's corner and the formatted value
    stored = client.get(f"/api/v1/rails/{rails[0]['id']}/results/latest", headers=people.headers("viewer")).json()
    check = next(c for c in stored["result"]["checks"] if c["corner"] and c["verdict"] == "pass")
    assert check["title"] in flat and check["corner"] in flat


def test_the_report_page_shows_every_rail_and_prints_without_navigation(client, people, board):
    rails = [make_rail(client, people, board, name=name) for name in ("VOUT_12V", "VAUX_5V")]
    store_real_result(client.app.state.sessionmaker, rails[0]["head"]["sha256"])
    board_page = client.get(f"/boards/{board['id']}", headers=people.headers("viewer")).text
    assert f'href="/boards/{board["id"]}/report"' in board_page and "Sign-off report" in board_page
    html = client.get(f"/boards/{board['id']}/report", headers=people.headers("viewer")).text
    assert len(re.findall(r'<section class="report-rail"', html)) == 2
    for rail in rails:
        assert rail["head"]["sha256"] in html
    assert "Team sign-off rules in force" in html and "Caution:" in html and 'href="/static/report.css"' in html
    assert html.count('class="plot-frame"') == 2                                      # start-up and SOA of one rail
    assert f'href="/boards/{board["id"]}/report.pdf"' in html
    css = client.get("/static/report.css").text.split("@media print", 1)[1]    # the browser test prints it
    assert ".topbar" in css and "form" in css and ".report-rail { break-before: page" in css
    pdf = client.get(f"/boards/{board['id']}/report.pdf", headers=people.headers("viewer"))
    assert pdf.status_code == 200 and pdf.content.startswith(b"%PDF-")


def test_the_report_is_archived_once_every_rail_is_frozen_and_matches_its_sha256(client, people, board):
    first, second = (make_rail(client, people, board, name=n) for n in ("VOUT_12V", "VAUX_5V"))
    freeze(client, people, first)
    assert _archives(client, people, board["id"]) == []                            # one rail of two: not yet
    moved = freeze(client, people, second)
    assert moved["to"] == "frozen for build"
    [archive] = _archives(client, people, board["id"])
    assert archive["state"] == "frozen for build" and archive["created_by"] == "manager"
    assert archive["occasion"] == {"rail_id": second["id"], "rail": "VAUX_5V", "transition": "freeze for build",
                                   "state": "frozen for build"}
    assert {(r["name"], r["revision"], r["sha256"]) for r in archive["rails"]} == {
        ("VOUT_12V", 1, first["head"]["sha256"]), ("VAUX_5V", 1, second["head"]["sha256"])}
    api = client.get(archive["download"], headers=people.headers("viewer"))
    assert api.status_code == 200 and api.headers["content-type"] == "application/pdf"
    assert hashlib.sha256(api.content).hexdigest() == archive["sha256"] == api.headers["x-content-sha256"]
    assert api.headers["etag"] == f'"{archive["sha256"]}"' and len(api.content) == archive["size"]
    text_of = " ".join("\n".join(pdf_pages(api.content)).split())
    assert "Waivers of this revision" in text_of and "the bench test of the prototype covers it" in text_of
    assert "reviewer" in text_of and "checked the start-up and fault margins" in text_of
    # the pages list it and give the same bytes
    log_in(client, client.app, people.ids["viewer"])
    listing = client.get(f"/boards/{board['id']}/archived-reports").text
    assert archive["sha256"] in listing and f'href="/archived-reports/{archive["id"]}.pdf"' in listing
    page = client.get(f"/archived-reports/{archive['id']}.pdf")
    assert page.content == api.content
    actions = [e["action"] for e in client.get(f"/api/v1/products/{board['product_id']}/audit",
                                               headers=people.headers("manager")).json()["items"]]
    assert actions.count("archive_report") == 1


def test_a_later_edit_changes_the_live_report_and_leaves_the_archive_untouched(client, people, board):
    rail = make_rail(client, people, board)
    freeze(client, people, rail)
    [archive] = _archives(client, people, board["id"])
    before = client.get(archive["download"], headers=people.headers("viewer")).content
    live_before = " ".join(pdf_pages(client.get(f"/api/v1/boards/{board['id']}/report.pdf",
                                                 headers=people.headers("viewer")).content))
    edited = edit_rail(client, people, rail, "1 mF")
    new_sha = edited["head"]["sha256"]
    live = " ".join(pdf_pages(client.get(f"/api/v1/boards/{board['id']}/report.pdf",
                                          headers=people.headers("viewer")).content))
    assert new_sha in live.replace("\n", "") and new_sha not in live_before.replace("\n", "")
    assert "Revision 2" in live and "in design" in live
    after = client.get(archive["download"], headers=people.headers("viewer")).content
    assert after == before and hashlib.sha256(after).hexdigest() == archive["sha256"]
    archived_text = "\n".join(pdf_pages(after)).replace("\n", "")
    assert rail["head"]["sha256"] in archived_text and new_sha not in archived_text
    assert _archives(client, people, board["id"]) == [archive]
    html = client.get(f"/boards/{board['id']}/report", headers=people.headers("viewer")).text
    assert new_sha in html and "680 µF" not in html and "1 mF" in html


def test_archived_copies_cannot_be_replaced_or_deleted(client, people, board, session_factory):
    rail = make_rail(client, people, board)
    freeze(client, people, rail)
    [archive] = _archives(client, people, board["id"])
    original = client.get(archive["download"], headers=people.headers("admin")).content
    for method in ("PUT", "PATCH", "DELETE", "POST"):
        for url in (f"/api/v1/archived-reports/{archive['id']}", archive["download"],
                    f"/api/v1/boards/{board['id']}/archived-reports"):
            r = client.request(method, url, headers=people.headers("admin"), json={"sha256": "0" * 64})
            assert r.status_code == 405, (method, url, r.status_code)
    csrf = log_in(client, client.app, people.ids["admin"])
    for url in (f"/archived-reports/{archive['id']}.pdf", f"/boards/{board['id']}/archived-reports"):
        r = client.post(url, data={"csrf_token": csrf}, follow_redirects=False)
        assert r.status_code == 405, (url, r.status_code)
    # the board that holds it cannot go either, once its rails are deleted
    assert client.delete(f"/api/v1/rails/{rail['id']}", headers=people.headers("designer")).status_code == 204
    gone = client.delete(f"/api/v1/boards/{board['id']}", headers=people.headers("designer"))
    assert gone.status_code == 409 and "archived" in gone.json()["error"]["message"]
    # and the database refuses changes and deletions whoever asks
    with session_factory() as s:
        with pytest.raises(DBAPIError, match="append-only"):
            s.execute(update(ArchivedReport).values(pdf=b"%PDF-forged", sha256="0" * 64))
        s.rollback()
        with pytest.raises(DBAPIError, match="append-only"):
            s.execute(text("DELETE FROM archived_reports"))
        s.rollback()
        stored = s.scalar(select(ArchivedReport.pdf).where(ArchivedReport.id == archive["id"]))
    assert bytes(stored) == original and hashlib.sha256(original).hexdigest() == archive["sha256"]


def test_another_teams_archive_is_not_found(client, people, board):
    rail = make_rail(client, people, board)
    freeze(client, people, rail)
    [archive] = _archives(client, people, board["id"])
    for url in (f"/api/v1/archived-reports/{archive['id']}", archive["download"],
                f"/api/v1/boards/{board['id']}/archived-reports", f"/api/v1/boards/{board['id']}/report.pdf"):
        assert client.get(url, headers=people.headers("outsider")).status_code == 404, url


def test_a_workflow_without_the_flag_archives_nothing(client, people, board):
    definition = parse_workflow(DEFAULT_WORKFLOW).as_dict()
    for s in definition["states"]:
        s["archives"] = False
    r = client.put(f"/api/v1/teams/{people.team_ids['alpha']}/workflow", json={"definition": definition},
                   headers=people.headers("admin"))
    assert r.status_code == 200, r.text
    assert [s["archives"] for s in r.json()["definition"]["states"]] == [False] * 4
    freeze(client, people, make_rail(client, people, board))
    assert _archives(client, people, board["id"]) == []


def test_the_archive_flag_is_part_of_the_workflow_rules():
    wf = parse_workflow(DEFAULT_WORKFLOW)
    assert [s.name for s in wf.states if s.archives] == ["frozen for build"] and wf.archives("frozen for build")
    assert parse_workflow(wf.as_dict()) == wf
    bad = parse_workflow(DEFAULT_WORKFLOW).as_dict()
    bad["states"][1]["archives"] = True                         # "awaiting review" is not signed off
    bad["states"][2]["archives"] = "yes"
    with pytest.raises(WorkflowInvalid) as caught:
        parse_workflow(bad)
    assert {(e["field"], e["message"]) for e in caught.value.errors} >= {
        ("states[1].archives", "only a signed-off state archives the record: mark it signed off too"),
        ("states[2].archives", "must be true or false")}


def test_the_report_reads_numbers_from_the_stored_record(client, people, board, session_factory, monkeypatch):
    """Nothing is recomputed: a stored record with an invented value shows that value."""
    rail = make_rail(client, people, board)
    result_id = store_real_result(session_factory, rail["head"]["sha256"])
    monkeypatch.setattr(analysis, "analyze_rail", lambda *a, **k: pytest.fail("the report ran the analysis"))
    with session_factory() as s:
        row = s.get(AnalysisResult, result_id)
        stored = dict(row.result)
        stored["checks"] = [dict(c) for c in stored["checks"]]
        stored["checks"][0]["value"] = 12.3456
        stored["checks"][0]["unit"] = "V"
        row.result = stored
        s.commit()
        report = reports.board_report(session=s, actor=Actor.for_user(get_user_by_name(session=s, username="viewer")),
                                      board_id=board["id"])
    assert report["rails"][0]["checks"][0]["value"] == "12.3 V"


def test_the_readings_of_many_revisions_at_once_agree_with_one_at_a_time(client, people, board, session_factory):
    rails = [make_rail(client, people, board, name=n) for n in ("A", "B", "C", "D")]
    shas = [r["head"]["sha256"] for r in rails]
    store_checks(session_factory, shas[0], PASSING)                       # current engine only
    store_checks(session_factory, shas[1], PASSING, version="1.1.0")      # an older engine only: outdated
    store_checks(session_factory, shas[2], PASSING, version="1.1.0")      # both: the current engine's wins
    store_checks(session_factory, shas[2], PASSING)
    with session_factory() as s:
        heads = results.reading_heads(s, shas)
        for sha in shas:
            one = results.reading(s, sha256=sha)
            if one is None:
                assert sha not in heads
            else:
                assert (heads[sha].id, heads[sha].outdated, heads[sha].engine_version) == \
                       (one.row.id, one.outdated, one.engine_version)
    assert set(heads) == set(shas[:3]) and heads[shas[1]].outdated and not heads[shas[2]].outdated


def _flat(pdf: bytes) -> str:
    return " ".join(" ".join(pdf_pages(pdf)).split())


def test_the_pdf_of_the_sensor_head_has_its_power_up_sequence_pending_then_computed(app, client, session_factory):
    """The demo's Sensor head board: its sequence section says the analysis is pending while the job is queued,
    then gives the verdict and every stored check in words, values with units from the stored record."""
    with session_factory() as s:
        seed(s)
        board_id = s.scalar(select(Board.id).where(Board.name == "Sensor head"))
        _, token = users.create_token(session=s, actor=Actor.system("test-setup"), username="dana", name="tests")
    headers = {"Authorization": f"Bearer {token}"}
    pending = client.get(f"/api/v1/boards/{board_id}/report.pdf", headers=headers)
    assert pending.status_code == 200, pending.text
    words = _flat(pending.content)
    assert "Power-up sequence Sensor head power-up · revision 1" in words
    assert "Analysis pending: the result of this revision with the rails' current revisions is not stored yet " \
           "(job" in words and "is queued)" in words
    assert "Verdict fail" not in words and "Power-up sequence" in pdf_outline(pending.content)
    assert run_queued_jobs(app)  # the sequence job the demo's save queued
    with session_factory() as s:
        stored = s.scalar(select(BoardSequenceResult.result))
    for url in (f"/api/v1/boards/{board_id}/report.pdf", f"/boards/{board_id}/report.pdf"):  # the API and the page
        r = client.get(url, headers=headers)
        assert r.status_code == 200 and r.content.startswith(b"%PDF-")
        words = _flat(r.content)
        assert "Analysis pending" not in words
        assert f"Verdict {stored['verdict']} with the rails' current revisions" in words
        timeline = [k for k, text in enumerate(pdf_pages(r.content)) if "Timeline" in text]
        assert len(timeline) == 1 and PdfReader(io.BytesIO(r.content)).pages[timeline[0]].images  # the plot
        for check in stored["checks"]:
            assert " ".join(check["title"].split()) in words
            if check["value"] is not None:
                assert value_text(check["value"], check["unit"]) in words
    uvlo = next(c for c in stored["checks"] if c["id"] == "supply_uvlo" and c["verdict"] == "fail")
    assert uvlo["unit"] == "V" and value_text(uvlo["value"], "V").endswith(" V")
    # a board without a sequence has no such section
    with session_factory() as s:
        other = s.scalar(select(Board.id).where(Board.name != "Sensor head").limit(1))
    assert "Power-up sequence" not in _flat(client.get(f"/api/v1/boards/{other}/report.pdf", headers=headers).content)


def test_an_archived_copy_says_it_leaves_the_boards_sequence_out(client, people, board):
    """The archive is made inside a rail's sign-off transition, below the sequence service: it cannot read the
    sequence's current result, and says so rather than being silent."""
    rail = make_rail(client, people, board, name="VMAIN")
    sequence = {"schema": "railsign.sequence/1", "name": "Main power-up",
                "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02}],
                "rails": [{"id": "main", "ref": "VMAIN", "supply": "in12", "enable": {"at": 0.0}}]}
    r = client.put(f"/api/v1/boards/{board['id']}/sequence", json={"document": sequence},
                   headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    freeze(client, people, rail)
    [archive] = _archives(client, people, board["id"])
    words = _flat(client.get(archive["download"], headers=people.headers("viewer")).content)
    assert "The board has a power-up sequence (revision 1). This archived copy, made at a sign-off transition " \
           "of a rail, leaves it out" in words
    live = _flat(client.get(f"/api/v1/boards/{board['id']}/report.pdf", headers=people.headers("viewer")).content)
    assert "Power-up sequence Main power-up · revision 1" in live and "leaves it out" not in live
