"""Benchmark of the job queue: submit-to-done latency and throughput of worker processes.

Run: ``python tests/benchmarks/bench_jobs.py [--samples N] [--jobs N]``.
1. Latency of a nominal+corners single-rail job with in-process worker threads (goal: p95
   under 150 ms), on SQLite and PostgreSQL: wall time from the POST to seeing the job done
   (polling every 2 ms), and the queue's own created -> finished time from the job row.
2. Jobs per second with 1 and with 2 `railsign worker` processes draining the same queue
   on PostgreSQL, measured from the first claim to the last finish (process start excluded).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from fastapi.testclient import TestClient  # noqa: E402
from sqlalchemy import func, select  # noqa: E402

from server.app import create_app  # noqa: E402
from server.models import Job  # noqa: E402
from server.services import catalog, rail_edits, users  # noqa: E402
from server.services.access import Actor  # noqa: E402
from tests.benchmarks.common import SECRET, database, settings_for, summary_ms  # noqa: E402
from tests.factories import rail_doc  # noqa: E402


def _seed(factory, n_rails: int) -> tuple[int, str]:
    system = Actor.system("bench")
    with factory() as s:
        users.create_user(session=s, actor=system, username="bench", role="designer", password=None,
                          teams=["bench-team"])
        _, token = users.create_token(session=s, actor=system, username="bench", name="bench")
        team_id = users.get_user_by_name(session=s, username="bench").teams[0].id
        product = catalog.create_product(session=s, actor=system, name="Bench", team_id=team_id)
        board = catalog.create_board(session=s, actor=system, product_id=product.id, name="Main")
        for k in range(n_rails):
            rail_edits.create_rail(session=s, actor=system, board_id=board.id,
                              document=rail_doc(f"R{k:04d}", load={"c_nom": 220e-6 + k * 1e-6}))
    return board.id, token


def latency(engine_name: str, samples: int) -> None:
    with database(engine_name) as url:
        app = create_app(settings_for(url, worker_threads=2))
        with TestClient(app) as client:
            _, token = _seed(app.state.sessionmaker, 1)
            h = {"Authorization": f"Bearer {token}"}
            rail_id = client.get("/api/v1/rails", headers=h).json()["items"][0]["id"]
            time.sleep(1.0)  # let the automatic first analysis finish
            walls, queue_times = [], []
            for _ in range(samples):
                t0 = time.perf_counter()
                job = client.post(f"/api/v1/rails/{rail_id}/analyses", json={"force": True}, headers=h).json()
                while job["state"] not in ("done", "failed"):
                    time.sleep(0.002)
                    job = client.get(f"/api/v1/jobs/{job['id']}", headers=h).json()
                walls.append(time.perf_counter() - t0)
                assert job["state"] == "done", job
                with app.state.sessionmaker() as s:
                    row = s.get(Job, job["id"])
                    queue_times.append((row.finished_at - row.created_at).total_seconds())
            print(f"{engine_name}: nominal job, in-process workers")
            print(f"  submit -> seen done (wall)   {summary_ms(walls)}   goal p95 < 150 ms")
            print(f"  created -> finished (queue)  {summary_ms(queue_times)}")


def throughput(n_jobs: int, processes: int) -> float:
    with database("postgres") as url:
        factory = create_app(settings_for(url)).state.sessionmaker
        _seed(factory, n_jobs)
        env = {**os.environ, "RAILSIGN_DATABASE_URL": url, "RAILSIGN_SECRET_KEY": SECRET}
        procs = [subprocess.Popen([sys.executable, "-m", "server", "--log-level", "WARNING", "worker", "--poll", "0.05",
                                   "--exit-when-empty"], cwd=REPO, env=env, stdout=subprocess.DEVNULL)
                 for _ in range(processes)]
        for p in procs:
            p.wait(600)
        with factory() as s:
            first = s.scalar(select(func.min(Job.started_at)))
            last = s.scalar(select(func.max(Job.finished_at)))
            done = s.scalar(select(func.count()).select_from(Job).where(Job.state == "done"))
        assert done == n_jobs, f"{done} of {n_jobs} done"
        elapsed = (last - first).total_seconds()
        rate = n_jobs / elapsed
        print(f"  {processes} worker process(es): {n_jobs} jobs in {elapsed:.2f} s = {rate:.1f} jobs/s")
        return rate


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=100)
    parser.add_argument("--jobs", type=int, default=200)
    args = parser.parse_args()
    for engine_name in ("sqlite", "postgres"):
        latency(engine_name, args.samples)
    print("postgres: throughput of worker processes (nominal+corners jobs)")
    one = throughput(args.jobs, 1)
    two = throughput(args.jobs, 2)
    print(f"  ratio 2 processes / 1 process: {two / one:.2f}x (2 cores)")


if __name__ == "__main__":
    main()
