"""A database outage, made real: PostgreSQL reached through a TCP relay the test cuts and restores.

While the relay is cut, pages and the API answer 503 with Retry-After (pages in HTML), the web
process and the workers each log one line for the outage, not one per request or poll, and the
workers space their polls out; once it is back, the next request is served as before.
"""

from __future__ import annotations

import logging
import socket
import threading
import time

import pytest
from fastapi.testclient import TestClient
from sqlalchemy.engine import make_url

from server.app import RETRY_AFTER_S, create_app
from server.worker import WorkerPool
from tests.conftest import make_settings


class Relay:
    """Forwards TCP connections from a local port to ``target``; ``cut`` drops them all and refuses new ones."""

    def __init__(self, target: tuple[str, int]) -> None:
        self.target = target
        self._open: list[socket.socket] = []
        self._lock = threading.Lock()
        probe = socket.socket()
        probe.bind(("127.0.0.1", 0))
        self.port = probe.getsockname()[1]
        probe.close()
        self._listener: socket.socket | None = None
        self.restore()

    def restore(self) -> None:
        listener = socket.socket()
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(32)
        self._listener = listener
        threading.Thread(target=self._accept, args=(listener,), daemon=True).start()

    def cut(self) -> None:
        listener, self._listener = self._listener, None
        if listener is not None:
            try:
                listener.shutdown(socket.SHUT_RDWR)  # wakes the thread blocked in accept(); close() alone does not
            except OSError:
                pass
            listener.close()
        with self._lock:
            for s in self._open:
                try:
                    s.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass
                s.close()
            self._open.clear()

    def _accept(self, listener: socket.socket) -> None:
        while True:
            try:
                client, _ = listener.accept()
            except OSError:
                return
            upstream = socket.create_connection(self.target)
            with self._lock:
                self._open += [client, upstream]
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pipe, args=(a, b), daemon=True).start()

    @staticmethod
    def _pipe(source: socket.socket, sink: socket.socket) -> None:
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        finally:
            for s in (source, sink):
                try:
                    s.close()
                except OSError:
                    pass


@pytest.fixture
def relayed(postgres_database):
    """An app on the test's PostgreSQL database through a relay that can be cut."""
    url = make_url(postgres_database)
    relay = Relay((url.host or "127.0.0.1", url.port or 5432))
    settings = make_settings(url.set(host="127.0.0.1", port=relay.port).render_as_string(hide_password=False))
    app = create_app(settings)
    yield app, relay, settings
    relay.cut()
    app.state.engine.dispose()


def _outage_lines(caplog, logger: str) -> list[str]:
    return [r.getMessage() for r in caplog.records if r.name == logger and "database" in r.getMessage()]


def test_pages_and_api_answer_503_while_the_database_is_away_and_recover_at_once(relayed, caplog):
    from tests.conftest import People

    app, relay, _ = relayed
    people = People(app.state.sessionmaker)
    headers = people.headers("designer")
    with TestClient(app) as client:
        assert client.get("/api/v1/products", headers=headers).status_code == 200
        caplog.set_level(logging.WARNING, logger="railsign.http")
        relay.cut()
        answers = [client.get("/api/v1/products", headers=headers) for _ in range(5)]
        page = client.get("/parts", headers=headers)
        health = client.get("/healthz")
        for r in answers:
            assert r.status_code == 503 and r.headers["retry-after"] == str(RETRY_AFTER_S)
            assert r.json()["error"]["code"] == "unavailable"
            assert "does not answer" in r.json()["error"]["message"]
        assert page.status_code == 503 and page.headers["content-type"].startswith("text/html")
        assert "Not available just now" in page.text and page.headers["retry-after"] == str(RETRY_AFTER_S)
        assert health.status_code == 503
        assert len(_outage_lines(caplog, "railsign.http")) == 1  # one line for the outage, not one per request
        assert not any(r.exc_info for r in caplog.records)  # and no traceback
        relay.restore()
        assert client.get("/api/v1/products", headers=headers).status_code == 200


def test_workers_log_one_line_per_outage_and_back_off(relayed, caplog):
    app, relay, settings = relayed
    caplog.set_level(logging.WARNING, logger="railsign.worker")
    relay.cut()
    pool = WorkerPool(app.state.sessionmaker, settings, threads=2, poll_s=0.05).start()
    try:
        time.sleep(1.5)
        lines = _outage_lines(caplog, "railsign.worker")
        assert len(lines) == 1 and "does not answer" in lines[0]
        assert not any(r.exc_info for r in caplog.records)
        relay.restore()
        deadline = time.monotonic() + 15  # the backoff is at most 10 s
        while time.monotonic() < deadline and len(_outage_lines(caplog, "railsign.worker")) < 2:
            time.sleep(0.1)
        assert "answers again" in _outage_lines(caplog, "railsign.worker")[-1]
    finally:
        pool.stop()
