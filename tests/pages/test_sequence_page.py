"""The board page's power-up sequence: the JSON form, a refusal naming the field, the timelines and checks,
the approval form."""

from __future__ import annotations

import json

import pytest

from sqlalchemy import func, select

from server.models import BoardSequenceResult, Job
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
    assert run_queued_jobs(app) == [job.id]
    page = client.get(f"/boards/{board}")
    assert 'id="sequence-pending"' not in page.text
    assert 'id="sequence-nominal"' in page.text and 'id="sequence-supply_low"' in page.text
    assert "Rail second reaches power-good (nominal supply)" in page.text
    assert "does not certify hardware" in page.text
    assert 'id="approve-sequence"' not in page.text  # a designer does not review


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
