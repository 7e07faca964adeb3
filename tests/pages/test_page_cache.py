"""Pages drawn once while nothing they show changes; ETag and 304; never a stale sign-off state."""

from __future__ import annotations

import re
import threading

import pytest

from server.csrf import unmasked
from server.pages.page_cache import CSRF_PLACEHOLDER, LruCache
from tests.pages.helpers import log_in, seed_board
from tests.signoff_support import allow_fail_waivers


@pytest.fixture
def seeded(people, session_factory) -> dict:
    allow_fail_waivers(session_factory, people.team_ids["alpha"])
    return seed_board(session_factory, analysed=1, unanalysed=0)


def _sha(html: str) -> str:
    return re.search(r'name="sha256" value="([0-9a-f]{64})"', html).group(1)


def test_an_unchanged_page_is_answered_304_and_not_after_an_approval(client, app, people, seeded):
    rail_id, board_id = seeded["rail_ids"][0], seeded["board_id"]
    csrf = log_in(client, app, people.ids["reviewer"])
    first = client.get(f"/rails/{rail_id}")
    etag = first.headers["etag"]
    assert first.status_code == 200 and etag.startswith('W/"') and "no-cache" in first.headers["cache-control"]
    again = client.get(f"/rails/{rail_id}", headers={"If-None-Match": etag})
    assert again.status_code == 304 and again.content == b"" and again.headers["etag"] == etag
    board = client.get(f"/boards/{board_id}")
    assert client.get(f"/boards/{board_id}", headers={"If-None-Match": board.headers["etag"]}).status_code == 304

    approved = client.post(f"/rails/{rail_id}/approvals", follow_redirects=False,
                           data={"csrf_token": csrf, "sha256": _sha(first.text), "comment": "inrush fine"})
    assert approved.status_code == 303
    after = client.get(f"/rails/{rail_id}", headers={"If-None-Match": etag})
    assert after.status_code == 200 and after.headers["etag"] != etag and "inrush fine" in after.text
    board_after = client.get(f"/boards/{board_id}", headers={"If-None-Match": board.headers["etag"]})
    assert board_after.status_code == 200 and board_after.headers["etag"] != board.headers["etag"]


def test_a_kept_page_carries_a_csrf_token_masked_anew_and_belongs_to_its_user(client, app, people, seeded):
    rail_id = seeded["rail_ids"][0]
    csrf = log_in(client, app, people.ids["reviewer"])
    pages = [client.get(f"/rails/{rail_id}") for _ in range(3)]
    assert app.state.page_cache.pages.hits >= 2
    tokens = [re.search(r'name="csrf_token" value="([^"]+)"', p.text).group(1) for p in pages]
    assert len(set(tokens)) == 3 and {unmasked(t) for t in tokens} == {csrf}
    assert all(CSRF_PLACEHOLDER not in p.text for p in pages)
    # another user (another role): another page and another ETag, never the reviewer's
    log_in(client, app, people.ids["viewer"])
    theirs = client.get(f"/rails/{rail_id}", headers={"If-None-Match": pages[0].headers["etag"]})
    assert theirs.status_code == 200 and theirs.headers["etag"] != pages[0].headers["etag"]
    assert 'id="approve-form"' in pages[0].text and 'id="approve-form"' not in theirs.text
    # HEAD of a kept page: its headers, no body
    head = client.head(f"/rails/{rail_id}")
    assert head.status_code == 200 and head.content == b"" and head.headers["etag"] == theirs.headers["etag"]


def test_the_lru_is_bounded_and_shared_between_threads():
    cache = LruCache(1000, weight=len)
    def fill(k: int) -> None:
        for n in range(500):
            cache.put((k, n), b"x" * 50)
            cache.get((k, n - 1))
    threads = [threading.Thread(target=fill, args=(k,)) for k in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert cache.total_weight <= 1000 and len(cache) == 20
    assert cache.get((0, 0)) is None
