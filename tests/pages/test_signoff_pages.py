"""Sign-off on the pages: state, transitions, approvals (stale ones marked) and waivers on the rail
page and the board table, and the managers' risk page."""

from __future__ import annotations

import re

import pytest
from sqlalchemy import select

from server.models import Approval, Waiver
from server.pages.forms import form_from_document
from server.services.rails import normalize_document
from tests.factories import rail_doc
from tests.pages.helpers import Page, log_in, seed_board
from tests.signoff_support import allow_fail_waivers


@pytest.fixture(autouse=True)
def _rules_these_tests_were_written_under(session_factory, people):
    """A reviewer may waive a failing check and approve alone here: the waiver rules are tests/test_governance.py's."""
    allow_fail_waivers(session_factory, people.team_ids["alpha"])


@pytest.fixture
def seeded(people, session_factory) -> dict:
    return seed_board(session_factory, analysed=1, unanalysed=0)


def _sha(html: str) -> str:
    return re.search(r'name="sha256" value="([0-9a-f]{64})"', html).group(1)


def test_a_reviewer_approves_and_waives_from_the_rail_page_and_an_edit_makes_the_approval_stale(
        client, app, people, seeded, session_factory):
    rail_id = seeded["rail_ids"][0]
    csrf = log_in(client, app, people.ids["reviewer"])
    page = client.get(f"/rails/{rail_id}")
    assert 'id="approve-form"' in page.text and 'id="waive-form"' in page.text
    assert "in design" in page.text and "not signed off" in page.text
    sha = _sha(page.text)
    r = client.post(f"/rails/{rail_id}/approvals", data={"csrf_token": csrf, "sha256": sha, "comment": "SOA fine"},
                    follow_redirects=False)
    assert r.status_code == 303
    check_id = re.search(r'<select id="waive-check" name="check_id"><option value="([a-z_]+)"', page.text).group(1)
    r = client.post(f"/rails/{rail_id}/waivers", data={"csrf_token": csrf, "sha256": sha, "check_id": check_id,
                                                      "reason": "measured on the bench"}, follow_redirects=False)
    assert r.status_code == 303
    after = client.get(f"/rails/{rail_id}")
    assert "SOA fine" in after.text and "measured on the bench" in after.text
    row = re.search(rf'<tr id="check-{check_id}"[^>]*>.*?</tr>', after.text, re.S).group(0)
    assert "waived by reviewer: measured on the bench" in row
    again = client.post(f"/rails/{rail_id}/approvals", data={"csrf_token": csrf, "sha256": sha, "comment": "twice"})
    assert again.status_code == 409 and "approved revision 1 already" in again.text  # beside the sign-off section

    designer_csrf = log_in(client, app, people.ids["designer"])
    values = form_from_document(normalize_document(rail_doc("RAIL_0", load={"c_nom": "1 mF"})))
    client.post(f"/rails/{rail_id}/edit", data={**values, "csrf_token": designer_csrf, "base_revision": "1",
                                                "part": f"part:{seeded['part_id']}:1"})
    log_in(client, app, people.ids["reviewer"])
    stale = client.get(f"/rails/{rail_id}")
    approvals = re.search(r'<table id="approval-table">.*?</table>', stale.text, re.S).group(0)
    assert "stale" in approvals and "the rail changed after it" in approvals
    assert "revision 1 only" in stale.text  # the waiver covered revision 1 only
    with session_factory() as s:
        assert s.scalar(select(Approval)).stale_at is not None and s.scalar(select(Waiver)).revision_n == 1


def test_the_author_is_not_offered_an_approval_and_a_designer_submits_for_review(client, app, people, seeded):
    rail_id = seeded["rail_ids"][0]
    csrf = log_in(client, app, people.ids["designer"])
    page = client.get(f"/rails/{rail_id}")
    assert 'id="approve-form"' not in page.text
    assert "submit for review" in page.text
    r = client.post(f"/rails/{rail_id}/transitions", data={"csrf_token": csrf, "sha256": _sha(page.text),
                                                          "transition": "submit for review", "comment": "ready"},
                    follow_redirects=False)
    assert r.status_code == 303
    after = client.get(f"/rails/{rail_id}")
    assert re.search(r'id="workflow-state">awaiting review<', after.text)
    board = client.get(f"/boards/{seeded['board_id']}")
    assert "awaiting review" in board.text
    stale_sha = client.post(f"/rails/{rail_id}/transitions", data={"csrf_token": csrf, "sha256": "0" * 64,
                                                                  "transition": "send back"})
    assert stale_sha.status_code == 422
    beside = stale_sha.text.split('<li class="card transition"')   # the refusal sits in its transition's card
    assert any('id="transition-send-back-error"' in card and "send back" in card for card in beside)


def test_the_risk_page_lists_open_risks_for_managers_only(client, app, people, seeded):
    log_in(client, app, people.ids["manager"])
    r = client.get(f"/products/{seeded['product_id']}/risks")
    assert r.status_code == 200
    page = Page(r.text)
    assert page.headings[0] == (1, "Risks of Tideline buoy")
    assert '<li class="risk-word">not signed off</li>' in r.text
    assert re.search(r'<dt>Rails not signed off</dt><dd data-count="missing_signoff">1</dd>', r.text)
    assert client.get("/risks").status_code == 200
    log_in(client, app, people.ids["designer"])
    assert client.get(f"/products/{seeded['product_id']}/risks").status_code == 403
