"""Bad input to the API is refused with a clear 4xx naming the field, on SQLite and PostgreSQL, and
nothing is stored: ids beyond the database's integers, control characters in texts, overlong texts,
lists naming an item twice, bodies over the size limit. OPTIONS names the methods of a path."""

from __future__ import annotations

import pytest

from server.schemas.fields import ID_MAX, MESSAGE_MAX
from tests.factories import rail_doc
from tests.pages.helpers import log_in

HUGE = [2**31, 2**63, 2**64 + 1, 10**30]


@pytest.fixture
def board(client, people) -> dict:
    h = people.headers("designer")
    product = client.post("/api/v1/products", json={"name": "Refusals"}, headers=h).json()
    return client.post("/api/v1/boards", json={"product_id": product["id"], "name": "Main"}, headers=h).json()


def _totals(client, people) -> tuple[int, int, int]:
    h = people.headers("admin")
    return tuple(client.get(f"/api/v1/{what}", headers=h).json()["total"] for what in ("products", "boards", "rails"))


def _field_error(r, field: str, words: str) -> None:
    assert r.status_code == 422, r.text
    details = r.json()["error"]["details"]
    assert any(d["field"] == field and words in d["message"] for d in details), details


@pytest.mark.parametrize("big", HUGE)
def test_ids_beyond_the_database_integers_are_refused_in_paths_queries_and_bodies(client, people, board, big):
    h = people.headers("admin")
    for method, path in (("GET", f"/api/v1/rails/{big}"), ("DELETE", f"/api/v1/boards/{big}"),
                         ("GET", f"/api/v1/rails/1/revisions/{big}"), ("GET", f"/api/v1/jobs/{big}"),
                         ("DELETE", f"/api/v1/teams/1/members/{big}"),
                         ("DELETE", f"/api/v1/tokens/{big}")):
        r = client.request(method, path, headers=h)
        assert r.status_code == 422, (method, path, r.text)
        assert "less than or equal to 2147483647" in r.text
    _field_error(client.get("/api/v1/rails", params={"board_id": big}, headers=h), "board_id", "2147483647")
    _field_error(client.get("/api/v1/rails", params={"offset": big}, headers=h), "offset", "2147483647")
    before = _totals(client, people)
    r = client.post("/api/v1/rails", json={"board_id": big, "document": rail_doc()}, headers=h)
    _field_error(r, "board_id", "2147483647")
    r = client.post("/api/v1/boards", json={"product_id": big, "name": "X"}, headers=h)
    _field_error(r, "product_id", "2147483647")
    assert _totals(client, people) == before


def test_the_largest_id_is_read_and_simply_not_found(client, people):
    r = client.get(f"/api/v1/rails/{ID_MAX}", headers=people.headers("admin"))
    assert r.status_code == 404


@pytest.mark.parametrize("text", ["Main\x00board", "Main\x1bboard", "Main\x7f", "two\nlines"])
def test_control_characters_in_names_are_refused_naming_the_field(client, people, board, text):
    h = people.headers("admin")
    before = _totals(client, people)
    _field_error(client.post("/api/v1/products", json={"name": text}, headers=h), "name", "control characters")
    _field_error(client.post("/api/v1/boards", json={"product_id": board["product_id"], "name": text}, headers=h),
                 "name", "control characters")
    _field_error(client.patch(f"/api/v1/boards/{board['id']}", json={"name": text}, headers=h), "name",
                 "control characters")
    _field_error(client.post("/api/v1/teams", json={"name": text}, headers=h), "name", "control characters")
    _field_error(client.post("/api/v1/users", json={"username": "u1", "role": "viewer", "teams": [text]}, headers=h),
                 "teams[0]", "control characters")
    _field_error(client.get("/api/v1/rails", params={"q": text}, headers=h), "q", "control characters")
    assert _totals(client, people) == before
    assert client.get(f"/api/v1/boards/{board['id']}", headers=h).json()["name"] == "Main"


def test_control_characters_in_messages_and_reasons_are_refused_line_breaks_are_not(client, people, board):
    h = people.headers("designer")
    before = _totals(client, people)
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(), "message": "a\x00b"},
                    headers=h)
    _field_error(r, "message", "found U+0000 at position 2")
    sha = "0" * 64
    reviewer = people.headers("reviewer")
    _field_error(client.post("/api/v1/rails/1/approvals", json={"sha256": sha, "comment": "ok\x00"}, headers=reviewer),
                 "comment", "control characters")
    _field_error(client.post("/api/v1/rails/1/waivers", json={"sha256": sha, "check_id": "x", "reason": "\x08"},
                             headers=reviewer), "reason", "control characters")
    assert _totals(client, people) == before
    ok = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(),
                                            "message": "first line\nsecond line\twith a tab"}, headers=h)
    assert ok.status_code == 201, ok.text
    assert ok.json()["head"]["message"] == "first line\nsecond line\twith a tab"


def test_overlong_texts_are_refused_with_their_limit(client, people, board):
    h = people.headers("designer")
    before = _totals(client, people)
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(),
                                           "message": "m" * (MESSAGE_MAX + 1)}, headers=h)
    _field_error(r, "message", f"at most {MESSAGE_MAX} characters")
    _field_error(client.post("/api/v1/products", json={"name": "p", "description": "d" * 4001}, headers=h),
                 "description", "at most 4000 characters")
    assert _totals(client, people) == before


def test_a_workflow_state_named_with_a_control_character_is_refused(client, people):
    h = people.headers("admin")
    team = client.post("/api/v1/teams", json={"name": "ctl-team"}, headers=h).json()
    wf = client.get(f"/api/v1/teams/{team['id']}/workflow", headers=h).json()
    before = wf["definition"] if "definition" in wf else wf
    definition = {"states": [{"name": "draft\x00", "initial": True}, {"name": "done", "signed_off": True}],
                  "transitions": [{"name": "finish", "from": "draft\x00", "to": "done", "roles": ["designer"]}],
                  "on_edit": "draft\x00"}
    r = client.put(f"/api/v1/teams/{team['id']}/workflow", json={"definition": definition}, headers=h)
    assert r.status_code == 422, r.text
    assert any("control characters" in d["message"] for d in r.json()["error"]["details"])
    after = client.get(f"/api/v1/teams/{team['id']}/workflow", headers=h).json()
    assert (after["definition"] if "definition" in after else after) == before


def test_a_body_over_the_size_limit_is_refused_with_413_and_nothing_is_stored(client, people, board, settings):
    h = {**people.headers("designer"), "Content-Type": "application/json"}
    before = _totals(client, people)
    padding = "x" * settings.max_request_bytes
    body = ('{"board_id": %d, "message": "%s", "document": {}}' % (board["id"], padding)).encode()
    r = client.post("/api/v1/rails", content=body, headers=h)
    assert r.status_code == 413, r.text
    assert r.json()["error"]["code"] == "too_large" and str(settings.max_request_bytes) in r.json()["error"]["message"]

    def chunks():  # no Content-Length: the body is counted as it arrives
        for k in range(0, len(body), 65536):
            yield body[k:k + 65536]

    r = client.post("/api/v1/rails", content=chunks(), headers=h)
    assert r.status_code == 413, r.text
    assert _totals(client, people) == before
    small = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc()},
                        headers=people.headers("designer"))
    assert small.status_code == 201


def test_options_names_every_method_of_the_path(client, people):
    r = client.options("/api/v1/rails")
    assert r.status_code == 204 and r.headers["allow"] == "GET, OPTIONS, POST"
    r = client.options("/api/v1/rails/7")
    assert r.status_code == 204 and r.headers["allow"] == "DELETE, GET, OPTIONS, PUT"
    assert client.options("/api/v1/nowhere").status_code == 404
    wrong = client.post("/api/v1/rails/7", json={}, headers=people.headers("designer"))
    assert wrong.status_code == 405 and wrong.headers["allow"] == "DELETE, GET, OPTIONS, PUT"


def test_pages_refuse_ids_beyond_the_database_and_control_characters_in_forms(client, app, people, session_factory):
    csrf = log_in(client, app, people.ids["designer"])
    for big in HUGE:
        assert client.get(f"/rails/{big}").status_code == 404
        assert client.get(f"/boards/{big}").status_code == 404
        assert client.get(f"/rails/1/history?from={big}").status_code == 422
    before = _totals(client, people)
    r = client.post("/products/new", data={"csrf_token": csrf, "name": "Kelp\x00farm", "description": "",
                                           "team": str(people.team_ids["alpha"])}, follow_redirects=False)
    assert r.status_code == 422 and "name: must not contain control characters" in r.text
    assert _totals(client, people) == before
    made = client.post("/products/new", data={"csrf_token": csrf, "name": "Kelp farm", "description": "two\nlines",
                                              "team": str(people.team_ids["alpha"])}, follow_redirects=False)
    assert made.status_code == 303
