"""The rail and board pages' event streams: the state once as JSON, or pushed as server-sent events."""

from __future__ import annotations

import json
import threading

from server.services.access import Actor
from server.services import jobs
from tests.pages.helpers import log_in, seed_board


def _events(lines, wanted: int) -> list[dict]:
    out = []
    for line in lines:
        if line.startswith("data: "):
            out.append(json.loads(line[6:]))
            if len(out) == wanted:
                return out
    return out


def test_the_state_once_as_json_and_a_new_job_moves_the_digest(client, app, people, session_factory):
    ids = seed_board(session_factory, analysed=1, unanalysed=1)
    log_in(client, app, people.ids["viewer"])
    rail_id = ids["rail_ids"][1]
    page = client.get(f"/rails/{rail_id}")
    before = client.get(f"/rails/{rail_id}/events").json()
    assert f'data-version="{before["version"]}"' in page.text
    board = client.get(f"/boards/{ids['board_id']}/events").json()
    with session_factory() as s:
        job = jobs.enqueue_rail(session=s, actor=Actor.system("test"), rail_id=rail_id, force=True)
        s.commit()
        job_id = job.id
    after = client.get(f"/rails/{rail_id}/events").json()
    assert after["version"] != before["version"] and job_id in [j["id"] for j in after["jobs"]]
    assert job_id not in [j["id"] for j in before["jobs"]]
    assert client.get(f"/boards/{ids['board_id']}/events").json()["version"] != board["version"]
    # another team's rail is not found; no login: to the login page
    log_in(client, app, people.ids["outsider"])
    assert client.get(f"/rails/{rail_id}/events").status_code == 404
    client.cookies.clear()
    assert client.get(f"/rails/{rail_id}/events", follow_redirects=False).status_code == 303


def test_the_stream_pushes_the_new_state_when_a_job_is_queued(client, app, people, session_factory):
    ids = seed_board(session_factory, analysed=1, unanalysed=0)
    log_in(client, app, people.ids["viewer"])
    rail_id = ids["rail_ids"][0]
    got: list[dict] = []

    def change_when_first_arrives() -> None:
        with session_factory() as s:
            jobs.enqueue_rail(session=s, actor=Actor.system("test"), rail_id=rail_id, force=True)
            s.commit()

    with client.stream("GET", f"/rails/{rail_id}/events", headers={"Accept": "text/event-stream"}) as r:
        assert r.status_code == 200 and r.headers["content-type"].startswith("text/event-stream")
        assert "content-encoding" not in r.headers
        lines = r.iter_lines()
        got += _events(lines, 1)
        writer = threading.Thread(target=change_when_first_arrives)
        writer.start()
        got += _events(lines, 1)
        writer.join()
    assert len(got[1]["jobs"]) == len(got[0]["jobs"]) + 1 and got[1]["version"] != got[0]["version"]
