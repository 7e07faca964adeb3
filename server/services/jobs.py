"""Durable job queue over the database: enqueue, claim, heartbeat, finish, fail, cancel.

Every analysis the service runs is a job row. Workers (threads in the web process, or
``railsign worker`` processes on any host) claim jobs: on PostgreSQL with
``SELECT ... FOR UPDATE SKIP LOCKED``, on SQLite under its single write lock. A running
job carries a heartbeat; when it is older than the lease (``RAILSIGN_JOB_LEASE_S``) the
worker is taken for gone and the job is claimed again, until ``max_attempts``. A worker
writes its outcome only while it still owns the attempt it claimed (state, worker and
attempt number must match), so each job's result is written exactly once. Results
themselves are stored once per (sha256, engine version, options).

Board jobs are containers: they hold one rail job per rail, and their progress and
state follow their children.

Sequence jobs compute a board's power-up sequence with the rails as they are: ``sha256`` is the
inputs key (:mod:`server.services.sequences` queues them with :func:`enqueue_sequence` and
writes their result; ``result_id`` stays empty, the result is the board sequence's).

A new engine version: :func:`enqueue_outdated` queues the analysis of every head revision
whose results are all of another engine version (the app calls it once as it starts; it is
idempotent and serialised across processes), and :func:`finish` lets
:func:`server.services.engine_change.on_new_result` react, in the same transaction, to a
result that reads a signed-off rail worse than before.
"""

from __future__ import annotations

import logging
import threading
from dataclasses import dataclass
from datetime import timedelta
from typing import Any

from sqlalchemy import event, func, select, text, update
from sqlalchemy.orm import Session

from server.models import Board, Job, JobKind, JobState, Product, Rail, RailRevision, utcnow
from server.services import engine_change, results
from server.services.access import Actor, Permission
from server.services.catalog import get_board
from server.services.errors import Conflict, NotFound
from server.services.rails import get_rail, get_revision, list_rails

__all__ = ["ACTIVE", "job_dict", "enqueue_rail", "enqueue_for_revision", "enqueue_board", "enqueue_sequence",
           "get_job", "list_jobs", "cancel_job", "retry_job", "claim_next", "Claim", "heartbeat", "finish", "fail",
           "owned_job", "mark_done", "supersede", "release_expired", "wakeup", "enqueue_outdated"]

log = logging.getLogger("railsign.jobs")
ACTIVE = (JobState.queued.value, JobState.running.value)
FINAL = (JobState.done.value, JobState.failed.value, JobState.cancelled.value)

# Worker threads in this process wait on this event; enqueueing sets it so a job starts at once.
wakeup = threading.Event()


@event.listens_for(Session, "after_commit")
def _wake_workers_after_commit(session: Session) -> None:
    """A rail save queues its analysis inside the save's transaction; wake workers once it commits."""
    if session.info.pop("railsign_wakeup", False):
        wakeup.set()


def _result_link(job: Job) -> dict[str, str]:
    if job.kind == JobKind.sequence.value:
        return {"result": f"/api/v1/boards/{job.board_id}/sequence"} if job.state == JobState.done.value else {}
    return {"result": f"/api/v1/results/{job.result_id}"} if job.result_id else {}


def job_dict(job: Job) -> dict[str, Any]:
    sequence = job.kind == JobKind.sequence.value
    return {"id": job.id, "kind": job.kind, "state": job.state, "progress": round(job.progress, 4),
            "rail_id": job.rail_id, "board_id": job.board_id, "parent_id": job.parent_id,
            "revision": job.revision_n, "sha256": job.sha256, "engine_version": job.engine_version,
            "options": None if sequence else job.options, "attempts": job.attempts, "max_attempts": job.max_attempts,
            "error": job.error or None, "worker": job.worker or None, "result_id": job.result_id,
            "requested_by": job.requested_by, "created_at": job.created_at.isoformat(),
            "started_at": job.started_at.isoformat() if job.started_at else None,
            "finished_at": job.finished_at.isoformat() if job.finished_at else None,
            "links": {"self": f"/api/v1/jobs/{job.id}", **_result_link(job)}}


def _kind_for(options: dict[str, Any]) -> str:
    return JobKind.monte_carlo.value if options["monte_carlo"] > 0 else JobKind.rail.value


def _new_rail_job(session: Session, actor: Actor, rail: Rail, rev: RailRevision, options: dict[str, Any], *,
                  force: bool, parent_id: int | None = None, reuse_active: bool = True) -> Job:
    """A job for one revision: an equal queued/running job is reused, a stored result answers at once."""
    options = results.normalize_options(options)
    version = results.engine_version()
    key = results.options_key(options)
    if parent_id is None and reuse_active:
        same = session.scalar(select(Job).where(
            Job.sha256 == rev.sha256, Job.rail_id == rail.id, Job.options_key == key,
            Job.engine_version == version, Job.state.in_(ACTIVE)).order_by(Job.id).limit(1))
        if same is not None and not force:
            return same
    job = Job(kind=_kind_for(options), rail_id=rail.id, board_id=rail.board_id, parent_id=parent_id,
              sha256=rev.sha256, revision_n=rev.n, engine_version=version, options=options, options_key=key,
              requested_by_id=actor.user_id, requested_by=actor.name)
    stored = None if force else results.find_result(session, sha256=rev.sha256, options=options)
    if stored is not None:
        job.state, job.progress, job.result_id = JobState.done.value, 1.0, stored.id
        job.started_at = job.finished_at = utcnow()
    session.add(job)
    session.flush()
    return job


def enqueue_for_revision(session: Session, actor: Actor, rail: Rail, rev: RailRevision) -> Job:
    """Queue the nominal + corners analysis of a new revision, inside the save's transaction (the caller commits)."""
    # A revision just made has no job yet (a stored result of an equal document still answers at once).
    job = _new_rail_job(session, actor, rail, rev, results.NOMINAL_OPTIONS, force=False, reuse_active=False)
    session.info["railsign_wakeup"] = True
    return job


def enqueue_rail(*, session: Session, actor: Actor, rail_id: int, options: dict[str, Any] | None = None,
                 revision: int | None = None, force: bool = False) -> Job:
    actor.require(Permission.ANALYZE)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    rev = get_revision(session=session, actor=actor, rail_id=rail_id, n=revision)
    job = _new_rail_job(session, actor, rail, rev, options or results.NOMINAL_OPTIONS, force=force)
    session.commit()
    wakeup.set()
    log.info("job %s queued: %s analysis of rail %s revision %s (%s)", job.id, job.kind, rail.id, rev.n, job.state)
    return job


def enqueue_board(*, session: Session, actor: Actor, board_id: int, options: dict[str, Any] | None = None,
                  force: bool = False) -> Job:
    """A board job with one child job per rail (head revisions); stored results count as done."""
    actor.require(Permission.ANALYZE)
    board = get_board(session=session, actor=actor, board_id=board_id)
    options = results.normalize_options(options)
    parent = Job(kind=JobKind.board.value, board_id=board.id, engine_version=results.engine_version(),
                 options=options, options_key=results.options_key(options), state=JobState.running.value,
                 requested_by_id=actor.user_id, requested_by=actor.name,
                 started_at=utcnow())
    session.add(parent)
    session.flush()
    rows, _ = list_rails(session=session, actor=actor, board_id=board.id, limit=100_000)
    for rail, head in rows:
        _new_rail_job(session, actor, rail, head, options, force=force, parent_id=parent.id)
    session.flush()
    _refresh_parent_row(session, parent)
    session.commit()
    wakeup.set()
    log.info("job %s queued: board %s, %s rails", parent.id, board.id, len(rows))
    return parent


# Sequence jobs have no analysis options; this stands in their options_key.
SEQUENCE_OPTIONS_KEY = "sequence"


def enqueue_sequence(session: Session, actor: Actor, *, board_id: int, inputs_sha256: str, revision_n: int) -> Job:
    """Queue the analysis of a board's power-up sequence revision with the rails as they are (``inputs_sha256``)
    inside the caller's transaction (the caller commits; workers wake once it has). An equal queued or running
    job (same board, inputs and engine) is reused."""
    version = results.engine_version()
    same = session.scalar(select(Job).where(
        Job.kind == JobKind.sequence.value, Job.board_id == board_id, Job.sha256 == inputs_sha256,
        Job.engine_version == version, Job.state.in_(ACTIVE)).order_by(Job.id).limit(1))
    if same is not None:
        return same
    job = Job(kind=JobKind.sequence.value, board_id=board_id, sha256=inputs_sha256, revision_n=revision_n,
              engine_version=version, options={}, options_key=SEQUENCE_OPTIONS_KEY,
              requested_by_id=actor.user_id, requested_by=actor.name)
    session.add(job)
    session.flush()
    session.info["railsign_wakeup"] = True
    log.info("job %s queued: power-up sequence of board %s revision %s", job.id, board_id, revision_n)
    return job


# One constant key for PostgreSQL's transaction-scoped advisory lock that serialises enqueue_outdated
# between web processes starting together (crc32 of "railsign.enqueue_outdated").
_OUTDATED_LOCK_KEY = 0x2C1E_6A33


def enqueue_outdated(*, session: Session, actor: Actor | None = None) -> list[Job]:
    """Queue the nominal + corners analysis of every rail's head revision whose results are all of
    another engine version and that has no job at the current one yet; returns the jobs queued.

    Idempotent: a head with a queued, running, done or failed job at the current engine is left
    alone. Safe when several web processes start together: on PostgreSQL they take a
    transaction-scoped advisory lock in turn (the second then sees the first's jobs), on SQLite
    the write lock taken at the start of the transaction does the same. ``actor``: who queues
    (default: the engine's system actor, all teams); a user queues only their teams' rails.
    """
    actor = actor or engine_change.engine_actor()
    actor.require(Permission.ANALYZE)
    if session.get_bind().dialect.name == "postgresql":
        session.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": _OUTDATED_LOCK_KEY})
    heads = engine_change.outdated_heads(session, actor=actor, without_job=True)
    queued = [_new_rail_job(session, actor, rail, rev, results.NOMINAL_OPTIONS, force=False) for rail, rev in heads]
    session.commit()
    if queued:
        wakeup.set()
        log.info("queued %s analyses of head revisions whose results are of another engine than %s",
                 len(queued), results.engine_version())
    return queued


def _scoped_job(session: Session, actor: Actor, job: Job | None, job_id: int) -> Job:
    if job is None:
        raise NotFound(f"no job {job_id}")
    board_id = job.board_id
    if board_id is None:
        raise NotFound(f"no job {job_id}")
    try:
        get_board(session=session, actor=actor, board_id=board_id)
    except NotFound:  # another team's job answers exactly as a missing one: it names no board
        raise NotFound(f"no job {job_id}") from None
    return job


def get_job(*, session: Session, actor: Actor, job_id: int) -> Job:
    return _scoped_job(session, actor, session.get(Job, job_id), job_id)


def list_jobs(*, session: Session, actor: Actor, state: str | None = None, rail_id: int | None = None,
              board_id: int | None = None, limit: int = 50, offset: int = 0) -> tuple[list[Job], int]:
    stmt = select(Job)
    if not actor.all_teams:
        stmt = (stmt.join(Board, Board.id == Job.board_id).join(Product, Product.id == Board.product_id)
                .where(Product.team_id.in_(actor.team_ids or {-1})))
    if state:
        stmt = stmt.where(Job.state == state)
    if rail_id is not None:
        stmt = stmt.where(Job.rail_id == rail_id)
    if board_id is not None:
        stmt = stmt.where(Job.board_id == board_id)
    total = session.scalar(select(func.count()).select_from(stmt.subquery())) or 0
    rows = session.scalars(stmt.order_by(Job.id.desc()).limit(limit).offset(offset)).all()
    return list(rows), total


def cancel_job(*, session: Session, actor: Actor, job_id: int) -> Job:
    """Cancel a queued or running job (and a board job's unfinished children)."""
    actor.require(Permission.ANALYZE)
    job = get_job(session=session, actor=actor, job_id=job_id)
    if job.state in FINAL:
        raise Conflict(f"job {job_id} is {job.state} already; only queued or running jobs can be cancelled")
    now = utcnow()
    targets = [job]
    if job.kind == JobKind.board.value:
        targets += list(session.scalars(select(Job).where(Job.parent_id == job.id, Job.state.in_(ACTIVE))))
    for j in targets:
        j.state, j.finished_at, j.error = JobState.cancelled.value, now, f"cancelled by {actor.name}"
    if job.parent_id is not None:
        session.flush()
        _refresh_parent_row(session, session.get(Job, job.parent_id))
    session.commit()
    log.info("job %s cancelled by %s", job.id, actor.name)
    return job


def retry_job(*, session: Session, actor: Actor, job_id: int) -> Job:
    """Queue a failed or cancelled job again, with a fresh attempt count."""
    actor.require(Permission.ANALYZE)
    job = get_job(session=session, actor=actor, job_id=job_id)
    if job.state not in (JobState.failed.value, JobState.cancelled.value) or job.kind == JobKind.board.value:
        raise Conflict(f"job {job_id} is {job.state}; only failed or cancelled rail jobs can be retried")
    job.state, job.attempts, job.error, job.worker, job.progress = JobState.queued.value, 0, "", "", 0.0
    job.started_at = job.finished_at = job.heartbeat_at = None
    session.commit()
    wakeup.set()
    return job


@dataclass(frozen=True)
class Claim:
    """What a worker owns: one attempt of one job."""

    job_id: int
    attempt: int
    worker: str
    kind: str  # the job's kind (JobKind), so a worker knows what to run without reading the job again


def release_expired(session: Session, *, lease_s: float, max_attempts: int) -> int:
    """Return jobs whose worker stopped heart-beating to the queue (or fail them when out of attempts)."""
    cutoff = utcnow() - timedelta(seconds=lease_s)
    stale = list(session.scalars(select(Job).where(Job.state == JobState.running.value,
                                                   Job.kind != JobKind.board.value, Job.heartbeat_at < cutoff)
                                 .with_for_update(skip_locked=True)))
    for job in stale:
        lost = f"worker {job.worker} stopped responding during attempt {job.attempts}"
        if job.attempts >= max_attempts:
            job.state, job.finished_at = JobState.failed.value, utcnow()
            job.error = f"{lost}; no attempts left" + (f" (last error: {job.error})" if job.error else "")
            log.warning("job %s failed: %s", job.id, job.error)
        else:
            job.state, job.error = JobState.queued.value, lost
            log.warning("job %s back in the queue: %s", job.id, lost)
    if stale:
        session.flush()
        for parent_id in {j.parent_id for j in stale if j.parent_id}:
            _refresh_parent_row(session, session.get(Job, parent_id))
    return len(stale)


def claim_next(session: Session, *, worker: str, lease_s: float, max_attempts: int,
               kinds: tuple[str, ...] | None = None) -> Claim | None:
    """Claim the oldest queued job (rail, Monte Carlo or sequence; ``kinds``: only these) for ``worker``; None when
    the queue is empty."""
    release_expired(session, lease_s=lease_s, max_attempts=max_attempts)
    wanted = Job.kind.in_(kinds) if kinds is not None else Job.kind != JobKind.board.value
    job = session.scalar(select(Job).where(Job.state == JobState.queued.value, wanted)
                         .order_by(Job.id).limit(1).with_for_update(skip_locked=True))
    if job is None:
        session.commit()
        return None
    now = utcnow()
    job.state, job.worker, job.attempts = JobState.running.value, worker, job.attempts + 1
    job.max_attempts = max_attempts
    job.started_at, job.heartbeat_at, job.progress = now, now, 0.0
    claim = Claim(job.id, job.attempts, worker, job.kind)
    session.commit()
    return claim


def _owned(claim: Claim):
    return (Job.id == claim.job_id) & (Job.state == JobState.running.value) & (Job.worker == claim.worker) & \
        (Job.attempts == claim.attempt)


def heartbeat(session: Session, claim: Claim, progress: float | None = None) -> bool:
    """Refresh the lease (and progress); False when the job is no longer ours (cancelled or taken over)."""
    values: dict[str, Any] = {"heartbeat_at": utcnow()}
    if progress is not None:
        values["progress"] = max(0.0, min(1.0, progress))
    owned = session.execute(update(Job).where(_owned(claim)).values(**values)).rowcount == 1
    session.commit()
    return owned


def owned_job(session: Session, claim: Claim) -> Job | None:
    """The claimed job, locked, while the attempt is still ours; None (and the transaction rolled back) otherwise."""
    job = session.scalar(select(Job).where(_owned(claim)).with_for_update())
    if job is None:
        session.rollback()
    return job


def mark_done(job: Job) -> None:
    """A job whose result the caller has stored in the same transaction (the caller commits)."""
    job.state, job.progress, job.finished_at, job.error = JobState.done.value, 1.0, utcnow(), ""


def supersede(session: Session, claim: Claim, *, reason: str) -> bool:
    """End a job whose inputs are no longer current (a newer job computes them): cancelled, with the reason."""
    job = owned_job(session, claim)
    if job is None:
        return False
    job.state, job.finished_at, job.error = JobState.cancelled.value, utcnow(), f"superseded: {reason}"[:4000]
    session.commit()
    return True


def finish(session: Session, claim: Claim, *, result: dict[str, Any], duration_s: float) -> bool:
    """Store the result and mark the job done, if the attempt is still ours. Returns whether it was."""
    job = owned_job(session, claim)
    if job is None:
        return False
    stored = results.store_result(session, sha256=job.sha256, options=job.options, result=result,
                                  duration_s=duration_s, version=job.engine_version)
    mark_done(job)
    job.result_id = stored.id
    session.flush()
    for moved in engine_change.on_new_result(session, sha256=job.sha256, result=stored):
        log.warning("rail %s moved from '%s' to '%s': %s", moved["rail_id"], moved["from"], moved["to"],
                    moved["reason"])
    if job.parent_id:
        _refresh_parent_row(session, session.get(Job, job.parent_id))
    session.commit()
    return True


def fail(session: Session, claim: Claim, *, error: str, retry: bool) -> bool:
    """Record an attempt's error: back to the queue while attempts remain and ``retry``, else failed."""
    job = owned_job(session, claim)
    if job is None:
        return False
    job.error = error[:4000]
    if retry and job.attempts < job.max_attempts:
        job.state = JobState.queued.value
    else:
        job.state, job.finished_at = JobState.failed.value, utcnow()
    session.flush()
    if job.parent_id:
        _refresh_parent_row(session, session.get(Job, job.parent_id))
    session.commit()
    return True


def _refresh_parent_row(session: Session, parent: Job | None) -> None:
    """A board job's progress is the share of finished children; it ends when they all have."""
    if parent is None or parent.state == JobState.cancelled.value:
        return
    counts = dict(session.execute(select(Job.state, func.count()).where(Job.parent_id == parent.id)
                                  .group_by(Job.state)).all())
    total = sum(counts.values())
    finished = sum(counts.get(s, 0) for s in FINAL)
    parent.progress = 1.0 if total == 0 else finished / total
    if finished == total:
        failed = counts.get(JobState.failed.value, 0)
        parent.state = JobState.failed.value if failed else JobState.done.value
        parent.error = f"{failed} of {total} rail analyses failed" if failed else ""
        parent.finished_at = parent.finished_at or utcnow()

