"""`railsign worker` processes: a killed worker's job is finished by another; two drain a queue.

These start real worker processes against the test database (SQLite and PostgreSQL), so a
job's lease, its heartbeat and FOR UPDATE SKIP LOCKED are exercised for real.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from sqlalchemy import func, select

from server.models import AnalysisResult, Job
from server.services import catalog, jobs, rail_edits, results, teams
from server.services.access import Actor
from tests.conftest import TEST_SECRET
from tests.factories import rail_doc

REPO = Path(__file__).resolve().parent.parent


def _worker(url: str, *args: str, lease_s: float = 2.0) -> subprocess.Popen:
    env = {**os.environ, "RAILSIGN_DATABASE_URL": url, "RAILSIGN_SECRET_KEY": TEST_SECRET,
           "RAILSIGN_JOB_LEASE_S": str(lease_s), "RAILSIGN_WORKER_THREADS": "0"}
    return subprocess.Popen([sys.executable, "-m", "server", "--log-level", "WARNING", "worker", "--poll", "0.1",
                             *args], cwd=REPO, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)


def _board(session_factory) -> int:
    system = Actor.system("test")
    with session_factory() as s:
        team = teams.create_team(session=s, actor=system, name="alpha")
        product = catalog.create_product(session=s, actor=system, name="Workers", team_id=team.id)
        return catalog.create_board(session=s, actor=system, product_id=product.id, name="Main").id


def _wait(predicate, timeout_s: float, what: str) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def _job(session_factory, job_id) -> Job:
    with session_factory() as s:
        return s.get(Job, job_id)


@pytest.mark.slow
def test_a_job_of_a_killed_worker_is_finished_by_another_exactly_once(settings, session_factory):
    system = Actor.system("test")
    board_id = _board(session_factory)
    with session_factory() as s:
        rail, _ = rail_edits.create_rail(session=s, actor=system, board_id=board_id, document=rail_doc())
        job = jobs.enqueue_rail(session=s, actor=system, rail_id=rail.id,
                                options={"monte_carlo": 150_000, "seed": 7})  # long enough to be caught mid-run
        job_id = job.id
    first = _worker(settings.database_url)
    try:
        _wait(lambda: _job(session_factory, job_id).state == "running" and
              _job(session_factory, job_id).progress > 0, 60, "the first worker to start the Monte Carlo job")
        first.send_signal(signal.SIGKILL)
        first.wait(10)
        assert _job(session_factory, job_id).state == "running"  # nobody has written it off yet
    finally:
        if first.poll() is None:
            first.kill()
    second = _worker(settings.database_url, "--exit-when-empty")
    try:
        _wait(lambda: _job(session_factory, job_id).state == "done", 120, "the second worker to finish the job")
        assert second.wait(30) == 0
    finally:
        if second.poll() is None:
            second.kill()
    done = _job(session_factory, job_id)
    assert done.attempts == 2
    assert done.worker.split(":")[1].split("/")[0] == str(second.pid)
    with session_factory() as s:
        stored = s.scalars(select(AnalysisResult).where(AnalysisResult.sha256 == done.sha256,
                                                        AnalysisResult.options_key == done.options_key)).all()
    assert len(stored) == 1 and stored[0].id == done.result_id
    assert stored[0].result["monte_carlo"]["n"] == 150_000


@pytest.mark.slow
@pytest.mark.parametrize("database_url", ["postgres"], indirect=True)
def test_two_workers_drain_200_jobs_each_exactly_once(settings, session_factory):
    system = Actor.system("test")
    board_id = _board(session_factory)
    with session_factory() as s:
        for k in range(200):
            rail_edits.create_rail(session=s, actor=system, board_id=board_id,
                              document=rail_doc(f"R{k:03d}", load={"c_nom": 200e-6 + k * 5e-6}))
        assert s.scalar(select(func.count()).select_from(Job).where(Job.state == "queued")) == 200
    workers = [_worker(settings.database_url, "--exit-when-empty", "--concurrency", "1", lease_s=30)
               for _ in range(2)]
    try:
        for w in workers:
            assert w.wait(300) == 0, w.stdout.read()
    finally:
        for w in workers:
            if w.poll() is None:
                w.kill()
    with session_factory() as s:
        all_jobs = s.scalars(select(Job)).all()
        n_results = s.scalar(select(func.count()).select_from(AnalysisResult))
    assert len(all_jobs) == 200
    assert {j.state for j in all_jobs} == {"done"}
    assert all(j.attempts == 1 for j in all_jobs), "a job was claimed twice"
    assert len({j.result_id for j in all_jobs}) == 200 and n_results == 200
    by_worker = {w.pid: sum(1 for j in all_jobs if j.worker.split(":")[1].split("/")[0] == str(w.pid))
                 for w in workers}
    assert sum(by_worker.values()) == 200
    assert all(count > 0 for count in by_worker.values()), by_worker
    assert results.NOMINAL_OPTIONS == all_jobs[0].options
