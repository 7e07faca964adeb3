"""Running queued jobs inside a test, one after the other, as a worker would (no threads)."""

from __future__ import annotations

from server.services import jobs
from server.worker import WorkerPool


def run_queued_jobs(app, kinds: tuple[str, ...] | None = ("sequence",)) -> list[int]:
    """Claim and run the app's queued jobs of ``kinds`` (None: every kind a worker takes) until none is left;
    returns the ids of the jobs run."""
    settings = app.state.settings
    pool = WorkerPool(app.state.sessionmaker, settings, threads=0, name="test")
    ran = []
    while True:
        with app.state.sessionmaker() as session:
            claim = jobs.claim_next(session, worker="test/0", lease_s=settings.job_lease_s,
                                    max_attempts=settings.job_max_attempts, kinds=kinds)
        if claim is None:
            return ran
        pool.run_claim(claim)
        ran.append(claim.job_id)
