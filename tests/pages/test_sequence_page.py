"""The board page's power-up sequence: the JSON form, a refusal naming the field, the timelines and checks,
the approval form; the demo's failing sequence waived under the team's rules before it is approved."""

from __future__ import annotations

import csv
import io
import json
import re

import pytest

from sqlalchemy import func, select

from server.demo import seed_if_empty
from server.models import Board, BoardSequenceResult, Job, Product, Rail, RailRevision, User
from server.services import governance, rail_edits
from server.services.access import Actor
from tests.job_support import run_queued_jobs
from tests.pages.helpers import log_in, seed_board


@pytest.fixture
def seeded(people, session_factory) -> dict:
    return seed_board(session_factory, analysed=0, unanalysed=2)


def _sequence(**enable_0) -> dict:
    return {"schema": "railsign.sequence/1", "name": "Power-up",
            "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.05,
                          "i_max": 6.0, "uvlo": [10.0]}],
            "rails": [{"id": "first", "ref": "RAIL_0", "supply": "in12", "enable": enable_0 or {"at": 0.0}},
                      {"id": "second", "ref": "RAIL_1", "supply": "in12",
                       "enable": {"after": "first", "threshold": 0.9, "delay": 2e-3}}]}


def test_the_sequence_form_refuses_a_cycle_then_saves_and_the_page_shows_the_timelines(client, app, people,
                                                                                      seeded):
    board = seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    page = client.get(f"/boards/{board}")
    assert "No power-up sequence yet" in page.text and 'id="sequence-document"' in page.text
    bad = json.dumps(_sequence(after="second", threshold=0.9))
    r = client.post(f"/boards/{board}/sequence", data={"document": bad, "csrf_token": csrf})
    assert r.status_code == 422
    assert "document.rails[0].enable.after" in r.text and "cycle in the enable chain" in r.text
    assert "No power-up sequence yet" in r.text  # nothing stored; the typed text stays
    assert "&#34;after&#34;: &#34;second&#34;" in r.text or "&quot;after&quot;: &quot;second&quot;" in r.text
    r = client.post(f"/boards/{board}/sequence", data={"document": json.dumps(_sequence()), "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303, r.text[:2000]
    page = client.get(f"/boards/{board}")  # the save queued the analysis: the page names its job
    with app.state.sessionmaker() as s:
        job = s.scalar(select(Job).where(Job.kind == "sequence"))
    assert 'id="sequence-pending"' in page.text and f'href="/api/v1/jobs/{job.id}"' in page.text
    assert 'id="sequence-nominal"' not in page.text and 'id="sequence-outdated"' not in page.text
    assert client.get(f"/boards/{board}/sequence.csv").status_code == 404  # no result of these inputs yet
    assert run_queued_jobs(app) == [job.id]
    page = client.get(f"/boards/{board}")
    assert 'id="sequence-pending"' not in page.text
    assert 'id="sequence-nominal"' in page.text and 'id="sequence-supply_low"' in page.text
    assert "Rail second reaches power-good (nominal supply)" in page.text
    # the time lines download as CSV from the stored result: a row per instant of each corner
    assert f'href="/boards/{board}/sequence.csv"' in page.text
    table = client.get(f"/boards/{board}/sequence.csv")
    assert table.status_code == 200 and table.headers["content-type"].startswith("text/csv")
    lines = list(csv.reader(io.StringIO(table.text)))
    assert lines[0][:3] == ["Corner", "Time (s)", "12 V input: voltage (V)"]
    assert "Rail second (RAIL_1): input current (A)" in lines[0]
    with app.state.sessionmaker() as s:
        stored = s.scalar(select(BoardSequenceResult)).result
    corners = [c["title"] for c in stored["corners"]]
    assert {row[0] for row in lines[1:]} == set(corners)
    assert len(lines) - 1 == sum(len(c["series"]["t"]) for c in stored["corners"])
    first = next(row for row in lines[1:] if row[0] == corners[0] and float(row[1]) > 0)
    k = stored["corners"][0]["series"]["t"].index(float(first[1]))
    assert float(first[2]) == stored["corners"][0]["series"]["supplies"]["in12"]["v"][k]
    assert "does not certify hardware" in page.text
    assert 'id="approve-sequence"' not in page.text  # a designer does not review


def test_the_page_lists_the_sequence_revisions_with_their_changes_in_words(client, app, people, seeded):
    board = seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    first = _sequence()
    second = _sequence()
    second["supplies"][0]["i_max"] = 4.5
    second["rails"][1]["enable"]["threshold"] = 0.8
    for doc, message in ((first, "first cut"), (second, "smaller adapter")):
        r = client.post(f"/boards/{board}/sequence", data={"document": json.dumps(doc), "message": message,
                                                          "csrf_token": csrf}, follow_redirects=False)
        assert r.status_code == 303, r.text[:2000]
    html = client.get(f"/boards/{board}").text
    assert "Revisions of the sequence (2)" in html
    newest = html[html.index('id="sequence-revision-2"'):html.index('id="sequence-revision-1"')]
    assert "smaller adapter" in newest and "Changed from revision 1" in newest
    rows = dict(re.findall(r'<tr data-field="([^"]+)"><td>([^<]+)</td>', newest))
    # the fields in words, the values in engineering notation with their units
    assert rows == {"supplies[0].i_max": "Shared supply 1 current capability",
                    "rails[1].enable.threshold": "Sequence rail 2 enabling power-good threshold"}
    assert "6 A" in newest and "4.5 A" in newest and "90% of the rail&#39;s output" in newest
    oldest = html[html.index('id="sequence-revision-1"'):]
    assert "first cut" in oldest and "The first revision." in oldest


def test_a_reviewer_approves_the_sequence_from_the_page(client, app, people, seeded):
    board = seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    client.post(f"/boards/{board}/sequence", data={"document": json.dumps(_sequence()), "csrf_token": csrf})
    csrf = log_in(client, app, people.ids["reviewer"])
    assert 'id="approve-sequence"' not in client.get(f"/boards/{board}").text  # no result yet: nothing to approve
    run_queued_jobs(app)
    page = client.get(f"/boards/{board}")
    sha = page.text.split('name="sha256" value="')[1].split('"')[0]
    r = client.post(f"/boards/{board}/sequence/approvals", data={"sha256": sha, "comment": "dips checked",
                                                                "csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    page = client.get(f"/boards/{board}")
    assert "reviewer, revision 1: dips checked" in page.text


def _transition_buttons(html: str) -> list[str]:
    """The names of the sequence's transition buttons on the board page."""
    section = html.split('id="sequence-transitions"')[1].split("</ul>\n")[0] if 'id="sequence-transitions"' in html \
        else ""
    return re.findall(r'name="transition" value="([^"]+)"', section)


def test_the_page_shows_the_sequence_state_its_blockers_and_a_button_per_transition(client, app, people, seeded):
    board = seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    client.post(f"/boards/{board}/sequence", data={"document": json.dumps(_sequence()), "csrf_token": csrf})
    run_queued_jobs(app)
    page = client.get(f"/boards/{board}")
    state = page.text.split('id="sequence-state"')[1].split("</p>")[0]
    assert '<span class="tag">in design</span>' in state and "(signed off)" not in state
    assert _transition_buttons(page.text) == ["submit for review"]
    sha = page.text.split('name="sha256" value="')[1].split('"')[0]
    r = client.post(f"/boards/{board}/sequence/transitions", follow_redirects=False,
                    data={"sha256": sha, "transition": "submit for review", "comment": "", "csrf_token": csrf})
    assert r.status_code == 303, r.text[:2000]
    log_in(client, app, people.ids["viewer"])
    page = client.get(f"/boards/{board}")
    assert '<span class="tag">awaiting review</span>' in page.text.split('id="sequence-state"')[1].split("</p>")[0]
    assert _transition_buttons(page.text) == []  # viewers read the state, and take nothing
    csrf = log_in(client, app, people.ids["reviewer"])
    page = client.get(f"/boards/{board}")
    assert "not yet: needs 1 approval of revision 1 by reviewers; it has 0" in page.text
    assert "accept margins" not in _transition_buttons(page.text) and "send back" in _transition_buttons(page.text)
    refused = client.post(f"/boards/{board}/sequence/transitions",
                          data={"sha256": sha, "transition": "accept margins", "comment": "", "csrf_token": csrf})
    assert refused.status_code == 409
    assert "cannot be taken yet: needs 1 approval" in refused.text and 'role="alert"' in refused.text
    csrf2 = log_in(client, app, people.ids["reviewer2"])
    r = client.post(f"/boards/{board}/sequence/approvals", follow_redirects=False,
                    data={"sha256": sha, "comment": "dips checked", "csrf_token": csrf2})
    assert r.status_code == 303
    csrf = log_in(client, app, people.ids["reviewer"])
    assert "accept margins" in _transition_buttons(client.get(f"/boards/{board}").text)
    r = client.post(f"/boards/{board}/sequence/transitions", follow_redirects=False,
                    data={"sha256": sha, "transition": "accept margins", "comment": "ok", "csrf_token": csrf})
    assert r.status_code == 303
    state = client.get(f"/boards/{board}").text.split('id="sequence-state"')[1].split("</p>")[0]
    assert '<span class="tag">margins accepted</span> (signed off)' in state and "by reviewer (revision 1)" in state


def test_the_board_report_carries_the_sequence_timeline_and_checks(client, app, people, seeded):
    board = seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    assert 'id="report-sequence"' not in client.get(f"/boards/{board}/report").text  # no sequence yet
    client.post(f"/boards/{board}/sequence", data={"document": json.dumps(_sequence()), "csrf_token": csrf})
    pending = client.get(f"/boards/{board}/report")
    assert 'id="report-sequence-pending"' in pending.text and 'id="report-sequence-nominal"' not in pending.text
    run_queued_jobs(app)
    report = client.get(f"/boards/{board}/report")
    assert report.status_code == 200 and 'id="report-sequence-pending"' not in report.text
    assert 'id="report-sequence"' in report.text and 'id="report-sequence-nominal"' in report.text
    assert "Rail first reaches power-good (supply-low corner)" in report.text


def test_after_a_rail_edit_the_page_shows_the_queued_job_and_the_last_result_as_outdated(client, app, people,
                                                                                        seeded):
    board, rail_id = seeded["board_id"], seeded["rail_ids"][0]
    csrf = log_in(client, app, people.ids["designer"])
    client.post(f"/boards/{board}/sequence", data={"document": json.dumps(_sequence()), "csrf_token": csrf})
    run_queued_jobs(app)
    r = client.put(f"/api/v1/rails/{rail_id}", json={"document": _rail_with_part(client, people, rail_id),
                                                     "base_revision": 1}, headers=people.headers("designer"))
    assert r.status_code == 200, r.text
    with app.state.sessionmaker() as s:
        rows = s.scalar(select(func.count()).select_from(BoardSequenceResult))
        job = s.scalar(select(Job).where(Job.kind == "sequence", Job.state == "queued"))
    page = client.get(f"/boards/{board}")
    assert 'id="sequence-pending"' in page.text and f'href="/api/v1/jobs/{job.id}"' in page.text
    assert 'id="sequence-outdated"' in page.text and "Outdated" in page.text
    assert 'id="sequence-nominal"' in page.text  # the last result's time line, marked outdated above it
    with app.state.sessionmaker() as s:  # the page read wrote nothing
        assert s.scalar(select(func.count()).select_from(BoardSequenceResult)) == rows
    run_queued_jobs(app)
    page = client.get(f"/boards/{board}")
    assert 'id="sequence-pending"' not in page.text and 'id="sequence-outdated"' not in page.text


def _rail_with_part(client, people, rail_id) -> dict:
    """The rail's head document with a larger load capacitance (the pinned part kept)."""
    doc = client.get(f"/api/v1/rails/{rail_id}", headers=people.headers("viewer")).json()["document"]
    return {**doc, "load": {**doc["load"], "c_nom": 1e-3}}


def _demo_ids(app) -> tuple[int, dict[str, int]]:
    """The demo's "Sensor head" board and its users by name (the demo seeded into the empty database)."""
    with app.state.sessionmaker() as s:
        seed_if_empty(s)
        board = s.scalar(select(Board).where(Board.name == "Sensor head"))
        users = {u.username: u.id for u in s.scalars(select(User))}
    return board.id, users


def _log_in_demo(client, app, user_id: int) -> str:
    """As log_in, for a demo user (who has a password: the session cookie carries its fingerprint)."""
    with app.state.sessionmaker() as s:
        user = s.get(User, user_id)
        value, csrf = app.state.session_cookie.dump(user.id, user.password_hash, user.session_generation)
    client.cookies.set("railsign_session", value)
    return csrf


def _form_values(html: str, form_class: str) -> list[dict[str, str]]:
    """The hidden and text inputs of each form of ``form_class`` on the page."""
    out = []
    for chunk in html.split(f'class="filters {form_class}"')[1:]:
        body = chunk.split("</form>")[0]
        out.append({name: value for name, value in re.findall(r'name="([a-z_0-9]+)" value="([^"]*)"', body)})
    return out


def test_the_demo_sensor_head_cannot_be_approved_until_its_harness_dip_is_waived_by_another_reviewer(client, app):
    board, users = _demo_ids(app)
    run_queued_jobs(app)
    csrf = _log_in_demo(client, app, users["ravi"])
    page = client.get(f"/boards/{board}").text
    problems = page.split('id="sequence-problem-checks"')[1].split("</ul>")[0]
    # the failing UVLO dip of the harness is named, approval is hidden and the page says why
    assert "12 V harness down the mast stays above the UVLO 10.5 V" in problems
    assert 'id="approve-sequence"' not in page and 'id="sequence-approval-blocked"' in page
    blocked = page.split('id="sequence-approval-blocked"')[1].split("</p>")[0]
    assert "without a waiver" in blocked and "stays above the UVLO 10.5 V" in blocked
    # the demo team's rules are the defaults: nobody waives a failing check, and the page says so
    assert "let nobody waive a failing check" in problems and 'class="filters sequence-waive"' not in page
    # an admin lets reviewers waive failing checks (two-person rule on)
    with app.state.sessionmaker() as s:
        team_id = s.scalar(select(Product).join(Board, Board.product_id == Product.id)
                           .where(Board.id == board)).team_id
        governance.set_rules(session=s, actor=Actor.system("test-setup"), team_id=team_id, two_person=True,
                             fail_waiver_role="reviewer")
    page = client.get(f"/boards/{board}").text
    forms = _form_values(page, "sequence-waive")
    assert forms and all(f["check_id"] for f in forms)
    empty = client.post(f"/boards/{board}/sequence/waivers", data={**forms[0], "reason": "", "csrf_token": csrf})
    assert empty.status_code == 422 and "needs a reason" in empty.text
    for f in forms:
        r = client.post(f"/boards/{board}/sequence/waivers", follow_redirects=False,
                        data={**f, "reason": "the converter rides through on its hold-up; bench capture",
                              "csrf_token": csrf})
        assert r.status_code == 303, r.text[:2000]
    page = client.get(f"/boards/{board}").text
    waivers = page.split('id="sequence-waivers"')[1].split("</ul>")[0]
    assert waivers.count("ravi, revision 1") == len(forms) and "bench capture" in waivers and "past the edge" in waivers
    assert 'id="sequence-approval-blocked"' not in page and 'id="approve-sequence"' in page
    # the reviewer who waived does not approve: the refusal is shown beside the form
    own = client.post(f"/boards/{board}/sequence/approvals",
                      data={"sha256": forms[0]["sha256"], "comment": "dip waived", "csrf_token": csrf})
    assert own.status_code == 403 and 'id="sequence-approve-error"' in own.text and "two-person rule" in own.text
    csrf = _log_in_demo(client, app, users["rosa"])
    r = client.post(f"/boards/{board}/sequence/approvals", follow_redirects=False,
                    data={"sha256": forms[0]["sha256"], "comment": "waived dip read", "csrf_token": csrf})
    assert r.status_code == 303
    assert "rosa, revision 1: waived dip read" in client.get(f"/boards/{board}").text


def test_a_rail_edit_marks_the_sequence_waiver_stale_on_the_page(client, app):
    board, users = _demo_ids(app)
    run_queued_jobs(app)
    with app.state.sessionmaker() as s:
        team_id = s.scalar(select(Product).join(Board, Board.product_id == Product.id)
                           .where(Board.id == board)).team_id
        governance.set_rules(session=s, actor=Actor.system("test-setup"), team_id=team_id, two_person=True,
                             fail_waiver_role="reviewer")
        lidar = s.scalar(select(Rail).where(Rail.board_id == board, Rail.name == "LIDAR_12V"))
        lidar_id = lidar.id
    csrf = _log_in_demo(client, app, users["ravi"])
    form = _form_values(client.get(f"/boards/{board}").text, "sequence-waive")[0]
    client.post(f"/boards/{board}/sequence/waivers", data={**form, "reason": "held up", "csrf_token": csrf})
    with app.state.sessionmaker() as s:
        dana = Actor.for_user(s.get(User, users["dana"]))
        rail = s.get(Rail, lidar_id)
        doc = s.scalar(select(RailRevision).where(RailRevision.rail_id == lidar_id,
                                                  RailRevision.n == rail.head_n)).document
        rail_edits.save_rail(session=s, actor=dana, rail_id=lidar_id,
                             document={**doc, "load": {**doc["load"], "c_nom": 3.3e-3}},
                             base_n=rail.head_n, message="smaller bulk capacitor")
    page = client.get(f"/boards/{board}").text
    waivers = page.split('id="sequence-waivers"')[1].split("</ul>")[0]
    assert "held up" in waivers and "stale" in waivers and "LIDAR_12V" in waivers
