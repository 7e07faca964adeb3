"""Workers that run queued analyses: threads in the web process, or `railsign worker` processes.

Each worker thread loops: claim a job, run the pure analysis on the revision's stored
document (or, for a sequence job, on the board sequence revision and the rail documents it
reads: :mod:`server.services.sequences`), store the result. While a job runs, a heartbeat thread refreshes its lease and
its progress, and notices when the job was cancelled or taken over (the analysis is then
stopped through its progress callback). Errors of the analysis itself (bad numbers, no
convergence) fail the job at once; other errors (a lost database connection) give it
back to the queue while attempts remain.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time
import traceback
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from server.analysis import AnalysisError, DocumentError, analyze_rail
from server.config import Settings
from server.db import UNREACHABLE_ERRORS, OutageLog
from server.models import Job, JobKind, RailRevision
from server.services import jobs, sequences

__all__ = ["JobStopped", "run_analysis", "WorkerPool"]

log = logging.getLogger("railsign.worker")
# Longest pause between polls while the database does not answer
MAX_BACKOFF_S = 10.0


class JobStopped(Exception):
    """The job was cancelled or claimed by another worker while it ran."""


def run_analysis(document: dict[str, Any], options: dict[str, Any], progress=None) -> dict[str, Any]:
    """Run the analysis core with a job's options (kept in one place for workers and benchmarks)."""
    return analyze_rail(document, corners=options["corners"], monte_carlo=options["monte_carlo"],
                        seed=options["seed"], distribution=options["distribution"], waveforms=True,
                        progress=progress)


# Errors of the analysis itself: the same document fails the same way again, so no retry.
DETERMINISTIC_ERRORS: tuple[type[BaseException], ...] = (AnalysisError, DocumentError, ValueError, ArithmeticError)


class _Heartbeat(threading.Thread):
    """Refreshes one claim's lease and progress until stopped; flags a lost claim."""

    def __init__(self, factory: sessionmaker[Session], claim: jobs.Claim, interval_s: float) -> None:
        super().__init__(name=f"heartbeat-{claim.job_id}", daemon=True)
        self.factory, self.claim, self.interval_s = factory, claim, interval_s
        self.progress: float | None = None
        self.lost = threading.Event()
        self._stop = threading.Event()

    def run(self) -> None:
        while not self._stop.wait(self.interval_s):
            try:
                with self.factory() as session:
                    if not jobs.heartbeat(session, self.claim, self.progress):
                        self.lost.set()
                        return
            except Exception:  # a missed beat is not fatal; the lease allows several
                log.warning("heartbeat for job %s failed", self.claim.job_id, exc_info=True)

    def stop(self) -> None:
        self._stop.set()


class WorkerPool:
    """``threads`` worker threads claiming jobs from the database until :meth:`stop`."""

    def __init__(self, factory: sessionmaker[Session], settings: Settings, *, threads: int,
                 poll_s: float = 1.0, name: str | None = None) -> None:
        self.factory, self.settings, self.threads_wanted, self.poll_s = factory, settings, threads, poll_s
        self.name = name or f"{socket.gethostname()}:{os.getpid()}"
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []
        self.jobs_done = 0
        self._count_lock = threading.Lock()
        self.outage_log = OutageLog(log)

    def start(self) -> "WorkerPool":
        for k in range(self.threads_wanted):
            t = threading.Thread(target=self._loop, args=(f"{self.name}/{k}",), name=f"railsign-worker-{k}",
                                 daemon=True)
            t.start()
            self._threads.append(t)
        log.info("worker pool %s started with %s threads", self.name, self.threads_wanted)
        return self

    def stop(self, timeout_s: float = 30.0) -> None:
        self._stop.set()
        jobs.wakeup.set()
        deadline = time.monotonic() + timeout_s
        for t in self._threads:
            t.join(max(0.0, deadline - time.monotonic()))
        log.info("worker pool %s stopped after %s jobs", self.name, self.jobs_done)

    def wait(self) -> None:
        for t in self._threads:
            while t.is_alive():
                t.join(0.5)

    def _loop(self, worker: str) -> None:
        backoff_s = self.poll_s
        while not self._stop.is_set():
            try:
                with self.factory() as session:
                    claim = jobs.claim_next(session, worker=worker, lease_s=self.settings.job_lease_s,
                                            max_attempts=self.settings.job_max_attempts)
            except UNREACHABLE_ERRORS as exc:  # one line per outage (shared by the threads), polls spaced out
                self.outage_log.failed(exc)
                self._stop.wait(backoff_s)
                backoff_s = min(2 * backoff_s, MAX_BACKOFF_S)
                continue
            except Exception:
                log.exception("worker %s could not claim a job; retrying", worker)
                self._stop.wait(self.poll_s)
                continue
            self.outage_log.answered()
            backoff_s = self.poll_s
            if claim is None:
                jobs.wakeup.wait(self.poll_s)
                jobs.wakeup.clear()
                continue
            self.run_claim(claim)

    def run_claim(self, claim: jobs.Claim) -> None:
        started = time.perf_counter()
        beat = _Heartbeat(self.factory, claim, interval_s=min(0.5, self.settings.job_lease_s / 4))
        try:
            if claim.kind == JobKind.sequence.value:
                self._run_sequence(claim, beat, started)
                return
            with self.factory() as session:
                job = session.get(Job, claim.job_id)
                rev = session.scalar(select(RailRevision).where(RailRevision.rail_id == job.rail_id,
                                                                RailRevision.n == job.revision_n))
                if rev is None or rev.sha256 != job.sha256:
                    raise ValueError(f"revision {job.revision_n} of rail {job.rail_id} is not the one queued")
                document, options, kind = rev.document, dict(job.options), job.kind
            log.info("job %s started: %s, rail %s revision %s, attempt %s, on %s", claim.job_id, kind,
                     job.rail_id, job.revision_n, claim.attempt, claim.worker)
            beat.start()

            def progress(fraction: float) -> None:
                beat.progress = fraction
                if beat.lost.is_set() or (self._stop.is_set() and kind == "monte_carlo"):
                    raise JobStopped()

            result = run_analysis(document, options, progress)
            if beat.lost.is_set():
                raise JobStopped()
            beat.stop()
            elapsed = time.perf_counter() - started
            with self.factory() as session:
                written = jobs.finish(session, claim, result=result, duration_s=elapsed)
            if written:
                with self._count_lock:
                    self.jobs_done += 1
                log.info("job %s done in %.1f ms: verdict %s", claim.job_id, elapsed * 1000,
                         result.get("verdict"))
            else:
                log.info("job %s finished on %s but is no longer its own; result not written", claim.job_id,
                         claim.worker)
        except JobStopped:
            log.info("job %s stopped on %s (cancelled, taken over or shutting down)", claim.job_id, claim.worker)
            if self._stop.is_set() and not beat.lost.is_set():
                with self.factory() as session:
                    jobs.fail(session, claim, error="worker shut down during the run", retry=True)
        except Exception as exc:
            elapsed = time.perf_counter() - started
            deterministic = isinstance(exc, DETERMINISTIC_ERRORS)
            message = f"{type(exc).__name__}: {exc}"
            log.error("job %s failed after %.1f ms on %s: %s", claim.job_id, elapsed * 1000, claim.worker, message)
            if not deterministic:
                log.debug("%s", traceback.format_exc())
            try:
                with self.factory() as session:
                    jobs.fail(session, claim, error=message, retry=not deterministic)
            except Exception:
                log.exception("job %s: could not record its failure; the lease will expire", claim.job_id)
        finally:
            beat.stop()

    def _run_sequence(self, claim: jobs.Claim, beat: _Heartbeat, started: float) -> None:
        """A board sequence job: its inputs read in one transaction, the board start-up computed, the result
        stored (errors are handled by :meth:`run_claim`)."""
        try:
            with self.factory() as session:
                job = session.get(Job, claim.job_id)
                board_id = job.board_id
                inputs = sequences.job_inputs(session, job)
        except sequences.Superseded as exc:
            with self.factory() as session:
                jobs.supersede(session, claim, reason=str(exc))
            log.info("job %s superseded: %s", claim.job_id, exc)
            return
        log.info("job %s started: sequence, board %s revision %s, attempt %s, on %s", claim.job_id, board_id,
                 inputs.revision_n, claim.attempt, claim.worker)
        beat.start()
        result = sequences.analyse(inputs)
        if beat.lost.is_set():
            raise JobStopped()
        beat.stop()
        elapsed = time.perf_counter() - started
        with self.factory() as session:
            written = sequences.finish_job(session, claim, inputs, result=result, duration_s=elapsed)
        if written:
            with self._count_lock:
                self.jobs_done += 1
            log.info("job %s done in %.1f ms: verdict %s", claim.job_id, elapsed * 1000, result.get("verdict"))
        else:
            log.info("job %s finished on %s but is no longer its own; result not written", claim.job_id,
                     claim.worker)
