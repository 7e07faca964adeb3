"""Shared helpers of the benchmarks: databases on both engines, seeding, timing statistics."""

from __future__ import annotations

import contextlib
import statistics
import tempfile
import time
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path

from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from server import migrate
from server.config import Settings

POSTGRES_ADMIN_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
SECRET = "benchmark-secret-" + "y" * 32


def settings_for(url: str, **extra) -> Settings:
    return Settings(**{"database_url": url, "secret_key": SECRET, "worker_threads": 0, **extra})


@contextlib.contextmanager
def database(engine_name: str, admin_url: str = POSTGRES_ADMIN_URL) -> Iterator[str]:
    """A fresh migrated database URL on 'sqlite' or 'postgres', removed afterwards."""
    if engine_name == "sqlite":
        with tempfile.TemporaryDirectory() as tmp:
            url = f"sqlite:///{Path(tmp) / 'bench.db'}"
            migrate.upgrade(settings_for(url))
            yield url
        return
    admin = create_engine(make_url(admin_url), isolation_level="AUTOCOMMIT")
    name = f"railsign_bench_{uuid.uuid4().hex[:8]}"
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = make_url(admin_url).set(database=name).render_as_string(hide_password=False)
    try:
        migrate.upgrade(settings_for(url))
        yield url
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    k = (len(ordered) - 1) * q / 100
    lo, hi = int(k), min(int(k) + 1, len(ordered) - 1)
    return ordered[lo] + (ordered[hi] - ordered[lo]) * (k - lo)


def summary_ms(values_s: list[float]) -> str:
    ms = [v * 1000 for v in values_s]
    return (f"median {statistics.median(ms):7.2f} ms  p95 {percentile(ms, 95):7.2f} ms  "
            f"p99 {percentile(ms, 99):7.2f} ms  (n={len(ms)})")


def server_time_s(response) -> float:
    """The app's own time for a request, from its Server-Timing header."""
    header = response.headers["server-timing"]
    return float(header.split("dur=")[1].split(";")[0]) / 1000


def timed(fn: Callable[[], object], repeat: int) -> list[float]:
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return out
