"""Overload answered, never errored: many concurrent clients against a real server started from the CLI.

Writers all save the same rail from the same base revision at once; readers read it meanwhile.
Every answer must come within 5 s and be a 2xx, a 409 (someone saved first) or a 503 with
Retry-After (busy); never a 500. A writer that honours Retry-After and merges on 409 saves in
the end, and each of their documents is saved exactly once, one revision per base.

SQLite runs one web process, PostgreSQL two. The default run uses 40 clients per engine; the
200-client run is part of the stress suite (``-m stress``).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field

import httpx
import pytest
from sqlalchemy import create_engine, select

from server.models import RailRevision
from tests.conftest import TEST_SECRET
from tests.factories import rail_doc
from tests.signoff_support import make_board, make_rail

ANSWER_WITHIN_S = 5.0
GIVE_UP_AFTER_S = 240.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _serve(database_url: str, processes: int) -> tuple[subprocess.Popen, str]:
    port = _free_port()
    env = {**os.environ, "RAILSIGN_DATABASE_URL": database_url, "RAILSIGN_SECRET_KEY": TEST_SECRET,
           "RAILSIGN_WORKER_THREADS": "0", "RAILSIGN_LOG_LEVEL": "WARNING"}
    server = subprocess.Popen([sys.executable, "-m", "server", "serve", "--port", str(port),
                               "--workers", str(processes)], env=env,
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(base + "/healthz", timeout=2).status_code == 200:
                return server, base
        except httpx.HTTPError:
            pass
        if server.poll() is not None:
            raise AssertionError(f"the server did not start: {server.stderr.read()[-2000:]}")
        time.sleep(0.2)
    server.kill()
    raise AssertionError("the server did not answer within 60 s")


@dataclass
class Tally:
    lock: threading.Lock = field(default_factory=threading.Lock)
    answers: list[tuple[int, float, bool]] = field(default_factory=list)  # status, seconds, has Retry-After
    saved: list[int] = field(default_factory=list)  # writer k, once per save it got

    def note(self, response: httpx.Response, seconds: float) -> None:
        with self.lock:
            self.answers.append((response.status_code, seconds, "retry-after" in response.headers))


def _writer(k: int, base: str, headers: dict, rail_id: int, tally: Tally, start: threading.Event) -> None:
    doc = rail_doc(load={"c_nom": f"{100 + k} uF"})
    revision = 1
    start.wait()
    with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
        deadline = time.monotonic() + GIVE_UP_AFTER_S
        while time.monotonic() < deadline:
            t0 = time.perf_counter()
            r = client.put(f"/api/v1/rails/{rail_id}", json={"document": doc, "base_revision": revision})
            tally.note(r, time.perf_counter() - t0)
            if r.status_code == 200:
                with tally.lock:
                    tally.saved.append(k)
                return
            if r.status_code == 409:  # merge into the revision that stands now, then save again
                revision = r.json()["error"]["current"]["n"]
            elif r.status_code == 503:
                time.sleep(float(r.headers.get("retry-after", "1")))
            else:
                return


def _reader(base: str, headers: dict, rail_id: int, tally: Tally, start: threading.Event, rounds: int) -> None:
    start.wait()
    with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
        for _ in range(rounds):
            t0 = time.perf_counter()
            r = client.get(f"/api/v1/rails/{rail_id}")
            tally.note(r, time.perf_counter() - t0)
            if r.status_code == 503:
                time.sleep(float(r.headers.get("retry-after", "1")))


def _percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(q * len(ordered)))]


def run_overload(client, people, database_url: str, *, writers: int, readers: int) -> dict:
    rail = make_rail(client, people, make_board(client, people))
    processes = 1 if database_url.startswith("sqlite") else 2
    server, base = _serve(database_url, processes)
    tally, start = Tally(), threading.Event()
    headers = people.headers("designer")
    threads = [threading.Thread(target=_writer, args=(k, base, headers, rail["id"], tally, start))
               for k in range(writers)]
    threads += [threading.Thread(target=_reader, args=(base, headers, rail["id"], tally, start, 3))
                for _ in range(readers)]
    try:
        for t in threads:
            t.start()
        started = time.perf_counter()
        start.set()
        for t in threads:
            t.join(GIVE_UP_AFTER_S + 30)
        wall_s = time.perf_counter() - started
    finally:
        server.terminate()
        server.wait(30)
    engine = create_engine(database_url)
    with engine.connect() as conn:
        revisions = conn.execute(select(RailRevision.n, RailRevision.document)
                                 .where(RailRevision.rail_id == rail["id"])).all()
    engine.dispose()
    statuses = [s for s, _, _ in tally.answers]
    figures = {
        "clients": writers + readers, "requests": len(statuses), "wall_s": round(wall_s, 1),
        "by_status": {s: statuses.count(s) for s in sorted(set(statuses))},
        "p50_ms": round(1000 * _percentile([t for _, t, _ in tally.answers], 0.50)),
        "p99_ms": round(1000 * _percentile([t for _, t, _ in tally.answers], 0.99)),
        "slowest_ms": round(1000 * max(t for _, t, _ in tally.answers)),
    }
    print(f"\noverload on {database_url.split(':')[0]} with {processes} web process(es): {figures}")
    assert not any(s >= 500 and s != 503 for s in statuses), figures
    assert set(statuses) <= {200, 409, 503}, figures
    assert all(has_retry for s, _, has_retry in tally.answers if s == 503), "a 503 without Retry-After"
    assert figures["slowest_ms"] <= ANSWER_WITHIN_S * 1000, figures
    assert sorted(tally.saved) == list(range(writers)), "every writer that retries saves, once"
    assert sorted(n for n, _ in revisions) == list(range(1, writers + 2)), "one revision per base"
    saved_c = sorted(doc["load"]["c_nom"] for n, doc in revisions if n > 1)
    assert len(set(saved_c)) == writers, "each writer's document is saved exactly once"
    return figures


def test_forty_clients_at_once_get_answers_never_errors(client, people, database_url):
    run_overload(client, people, database_url, writers=20, readers=20)


@pytest.mark.stress
def test_two_hundred_clients_at_once_get_answers_never_errors(client, people, database_url):
    run_overload(client, people, database_url, writers=100, readers=100)
