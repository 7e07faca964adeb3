"""The pages of sign-off governance, on SQLite and PostgreSQL: the admin's waiver rules form, the rail page's
header and its refusals beside their forms, retiring from the pages, the reviewer's home."""

from __future__ import annotations

import re

import pytest

from tests.pages.helpers import log_in, seed_board


@pytest.fixture
def seeded(people, session_factory) -> dict:
    return seed_board(session_factory, analysed=1, unanalysed=0)


def _sha(html: str) -> str:
    return re.search(r'name="sha256" value="([0-9a-f]{64})"', html).group(1)


def test_the_admin_edits_the_waiver_rules_and_a_stale_form_keeps_what_was_typed(client, app, people):
    team = people.team_ids["alpha"]
    csrf = log_in(client, app, people.ids["admin"])
    page = client.get(f"/admin/teams/{team}/signoff-rules")
    assert page.status_code == 200 and "the safe defaults, never changed" in page.text
    assert re.search(r'id="two-person" name="two_person" checked', page.text)
    saved = client.post(f"/admin/teams/{team}/signoff-rules",
                        data={"csrf_token": csrf, "version": "0", "fail_waiver_role": "manager"})
    assert saved.status_code == 200 and "Saved as version 1" in saved.text
    assert 'id="two-person" name="two_person">' in saved.text           # unticked: the rule is off now
    stale = client.post(f"/admin/teams/{team}/signoff-rules",
                        data={"csrf_token": csrf, "version": "0", "two_person": "on", "fail_waiver_role": ""})
    assert stale.status_code == 409 and 'id="error-summary"' in stale.text
    assert re.search(r'id="two-person" name="two_person" checked', stale.text)    # as typed
    bad = client.post(f"/admin/teams/{team}/signoff-rules",
                      data={"csrf_token": csrf, "version": "1", "fail_waiver_role": "viewer"})
    assert bad.status_code == 422 and 'id="fail-waiver-role-error"' in bad.text
    listing = client.get("/admin/workflows")
    assert re.search(r"two-person rule off;\s+failing checks waived by manager", listing.text)
    log_in(client, app, people.ids["manager"])
    assert client.get(f"/admin/teams/{team}/signoff-rules").status_code == 403


def test_the_header_offers_the_next_step_and_an_empty_reason_is_refused_beside_its_field(
        client, app, people, seeded):
    rail_id = seeded["rail_ids"][0]
    csrf = log_in(client, app, people.ids["designer"])
    page = client.get(f"/rails/{rail_id}")
    assert 'id="signoff-header"' in page.text and 'id="act-transition-1"' in page.text
    assert page.text.index('id="signoff-header"') < page.text.index('id="results"')   # sign-off first
    assert client.post(f"/rails/{rail_id}/transitions", data={"csrf_token": csrf, "sha256": _sha(page.text),
                                                             "transition": "submit for review"}).status_code == 200
    csrf = log_in(client, app, people.ids["reviewer"])
    page = client.get(f"/rails/{rail_id}")
    assert 'id="act-approve"' in page.text
    refused = client.post(f"/rails/{rail_id}/waivers", data={"csrf_token": csrf, "sha256": _sha(page.text),
                                                            "check_id": "supply_dip", "reason": ""})
    assert refused.status_code == 422 and 'id="waive-reason-error"' in refused.text
    assert "a waiver needs a reason" in refused.text.split('id="waive-reason-error"')[1][:200]
    failing = client.post(f"/rails/{rail_id}/waivers", data={"csrf_token": csrf, "sha256": _sha(page.text),
                                                            "check_id": "supply_dip", "reason": "fuse clears it"})
    assert failing.status_code == 403 and 'id="waive-error"' in failing.text
    assert "past the physical edge" in failing.text.split('id="waive-error"')[1][:300]
    home = client.get("/")
    assert 'id="team-queue-table"' in home.text and f'data-rail="{rail_id}"' in home.text


def test_retiring_from_the_pages_hides_the_rail_and_restoring_brings_it_back(client, app, people, seeded):
    rail_id, board_id = seeded["rail_ids"][0], seeded["board_id"]
    csrf = log_in(client, app, people.ids["designer"])
    r = client.post(f"/rails/{rail_id}/retire", data={"csrf_token": csrf, "reason": "merged"}, follow_redirects=False)
    assert r.status_code == 303
    assert 'id="retired-notice"' in client.get(f"/rails/{rail_id}").text
    board = client.get(f"/boards/{board_id}").text
    assert 'id="retired-rails"' in board and "RAIL_0" not in board.split('id="retired-rails"')[0].split(
        'id="rail-table"')[1]
    again = client.post(f"/rails/{rail_id}/retire", data={"csrf_token": csrf}, follow_redirects=False)
    assert again.status_code == 409 and 'id="header-error"' in again.text
    assert client.post(f"/rails/{rail_id}/restore", data={"csrf_token": csrf}, follow_redirects=False).status_code == 303
    assert 'id="retired-notice"' not in client.get(f"/rails/{rail_id}").text
