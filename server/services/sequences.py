"""A board's power-up sequence: its document and revisions, its analysis, its approvals.

The sequence (schema ``railsign.sequence/1``, :mod:`server.analysis.sequence`) is a board-level
document with its own revisions, like a rail's. Its rails are the board's rails named by
``ref`` (the rail's name; the rail's head revision is read) or written inline. A save that
the analysis core refuses (an unknown supply or rail, a cycle in the enable chain, a
threshold outside (0, 1), a negative time) is refused with every field named, and nothing is
stored.

The result belongs to the sequence revision *and* the rails as they are: its key
(``inputs_sha256``) is the sequence revision's sha256 with every referenced rail's head
sha256. It is computed by a job (kind ``sequence``, :mod:`server.services.jobs`): a sequence save
queues it, and so does every change of the board's rails that changes the key (a rail's new
revision, retirement, restoration or deletion: :func:`on_rail_change`, called by
:mod:`server.services.rail_edits` in the change's transaction), together with making the
sequence's approvals stale (no other rail's approvals change). A worker computes it
(:func:`job_inputs`, :func:`analyse`, :func:`finish_job`: the one write path of
``board_sequence_results``). A read never writes: it shows the stored result of the current key,
or says its job is queued or running and shows the last result of older inputs as outdated
(:func:`sequence_dict`). Approving (:func:`approve`) follows a rail's rules: the result of the
current key only, not by the author of the current revision.

Waivers (:func:`waive`, the one write path of ``board_sequence_waivers``) follow the rail waivers' rules, the
team's waiver rules of :mod:`server.services.governance` read by the same functions of
:mod:`server.workflow`: reviewers waive a marginal check, a failing one only the role the team names (nobody by
default); never the sequence's author (of its first or its current revision); under the two-person rule (on by
default) a reviewer who waived a check of the current inputs does not approve them, nor waives after approving
them. A waiver belongs to the inputs it was made on (``inputs_sha256``) and goes stale with the approvals when
they change. A check is its ``id`` with its ``subject`` (``supply_uvlo:harness12``: both corners and every
threshold on that supply). :func:`approve` is refused while a failing or marginal check of the current result
has no waiver of the current inputs that covers it (a rail's sign-off demands the same of its checks).

Workflow state: the sequence stands in a state of its team's workflow (the board's product's team), as a rail
does (``board_sequence_states``, written only by :func:`_set_state`). A new sequence starts in the workflow's
initial state; a new sequence revision, and a change of a rail it names (one that changes its inputs), moves it
to the workflow's ``on_edit`` state, recorded in the audit trail. :func:`take_transition` moves it along a
transition when the actor's role may and :func:`server.workflow.blockers` finds the demands met, for the facts
:func:`sequence_facts` reads: the current result's checks (by the key a waiver names), the approvals (those of
other inputs as stale) and the waivers of the current inputs. A sequence without a state row (saved before
there were sequence states), or in a state its workflow no longer has, stands in the initial state.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select, text
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from server.analysis.errors import DocumentError
from server.analysis.sequence import analyze_sequence, read_sequence
from server.models import (Board, BoardSequence, BoardSequenceApproval, BoardSequenceResult, BoardSequenceRevision,
                           BoardSequenceState, BoardSequenceWaiver, Job, JobKind, Product, Rail, RailRevision, utcnow)
from server.schemas.rail import canonical_json
from server.services import engine_change, governance, jobs, workflows
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.catalog import get_board
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict
from server.services.rails import diff_documents, normalize_document
from server.services.results import engine_version
from server.services.signoff import TransitionBlocked, covering_waivers, transition_dicts
from server.workflow import (FAIL_WAIVER_ROLES, PROBLEM_VERDICTS, SEVERITY, ApprovalFact, Blocker, CheckFact,
                             RailFacts, WaiverRules, WorkflowDef, blockers, two_person_refusal, waiver_covers,
                             waiver_refusal)

__all__ = ["sequence_dict", "approval_dict", "get_sequence", "save_sequence", "current_result", "on_rail_revision",
           "on_rail_change", "approve", "JobInputs", "Superseded", "job_inputs", "analyse", "finish_job",
           "enqueue_outdated", "waiver_dict", "waive", "list_waivers", "check_key", "check_document",
           "board_sequence", "take_transition", "sequence_facts", "revision_dict", "list_revisions", "get_revision",
           "diff_revisions", "revision_history"]


def _sha256(data: Any) -> str:
    return hashlib.sha256(canonical_json(data).encode()).hexdigest()


def _board_rails(session: Session, board: Board) -> dict[str, tuple[Rail, RailRevision]]:
    """The board's rails in use (not retired) by name, each with its head revision."""
    rows = session.execute(select(Rail, RailRevision).join(RailRevision, (RailRevision.rail_id == Rail.id)
                                                           & (RailRevision.n == Rail.head_n))
                           .where(Rail.board_id == board.id, Rail.retired_at.is_(None))).all()
    return {rail.name: (rail, rev) for rail, rev in rows}


def _refs(document: dict[str, Any]) -> list[str]:
    return sorted({r["ref"] for r in document.get("rails", []) if isinstance(r, dict) and isinstance(r.get("ref"), str)})


def _inputs_sha256(rev: BoardSequenceRevision, rails: dict[str, tuple[Rail, RailRevision]]) -> str:
    return _sha256({"sequence": rev.sha256, "rails": {name: rails[name][1].sha256 for name in _refs(rev.document)
                                                      if name in rails}})


def _invalid(exc: DocumentError) -> Invalid:
    return Invalid(f"invalid board sequence: {exc}",
                   details=[{"field": f"document.{e.field}", "message": f"{e.title}: {e.reason}"} for e in exc.errors])


def _get(session: Session, board: Board) -> BoardSequence | None:
    return session.scalar(select(BoardSequence).where(BoardSequence.board_id == board.id))


def _head(session: Session, seq: BoardSequence) -> BoardSequenceRevision:
    return session.scalar(select(BoardSequenceRevision).where(BoardSequenceRevision.sequence_id == seq.id,
                                                              BoardSequenceRevision.n == seq.head_n))


def _stored(session: Session, seq: BoardSequence, key: str) -> BoardSequenceResult | None:
    """The stored result of these inputs at this engine."""
    return session.scalar(select(BoardSequenceResult).where(BoardSequenceResult.sequence_id == seq.id,
                                                            BoardSequenceResult.inputs_sha256 == key,
                                                            BoardSequenceResult.engine_version == engine_version()))


def _enqueue(session: Session, actor: Actor, seq: BoardSequence, rev: BoardSequenceRevision,
             rails: dict[str, tuple[Rail, RailRevision]]) -> Job | None:
    """Queue the analysis of ``rev`` with ``rails`` unless its result is stored (then None); an equal queued or
    running job is reused. A step of the caller's transaction."""
    key = _inputs_sha256(rev, rails)
    if _stored(session, seq, key) is not None:
        return None
    return jobs.enqueue_sequence(session, actor, board_id=seq.board_id, inputs_sha256=key, revision_n=rev.n)


def current_result(session: Session, seq: BoardSequence) -> BoardSequenceResult | None:
    """The stored result of the head revision with the board's rails as they are now, at this engine; None
    while its job has not stored it. Reads only."""
    board = session.get(Board, seq.board_id)
    return _stored(session, seq, _inputs_sha256(_head(session, seq), _board_rails(session, board)))


# --- the job: inputs read in one transaction, the pure analysis, the result written -----------------


class Superseded(Exception):
    """The job's inputs are no longer the sequence's current ones (a newer job computes those)."""


@dataclass(frozen=True)
class JobInputs:
    """What a sequence job computes: the revision's document and the rail documents it reads, as they were read."""

    sequence_id: int
    revision_n: int
    inputs_sha256: str
    document: dict[str, Any]
    rails: dict[str, Any]


def job_inputs(session: Session, job: Job) -> JobInputs:
    """The inputs of a claimed sequence job, read now; :class:`Superseded` when they are no longer the ones the
    job was queued for (the sequence or one of its rails changed since, and that change queued its own job)."""
    board = session.get(Board, job.board_id)
    seq = _get(session, board) if board is not None else None
    if seq is None or seq.head_n == 0:
        raise Superseded("the board has no power-up sequence any more")
    if seq.head_n != job.revision_n:
        raise Superseded(f"the sequence has a newer revision ({seq.head_n}) than the one queued ({job.revision_n})")
    rev, rails = _head(session, seq), _board_rails(session, board)
    key = _inputs_sha256(rev, rails)
    if key != job.sha256:
        raise Superseded("a rail the sequence names changed since the job was queued; its change queued the "
                         "analysis of the rails as they are now")
    return JobInputs(sequence_id=seq.id, revision_n=rev.n, inputs_sha256=key, document=rev.document,
                     rails={name: r[1].document for name, r in rails.items()})


def analyse(inputs: JobInputs) -> dict[str, Any]:
    """The board start-up of the inputs (pure: no database). A rail the document names that is gone (retired,
    renamed, deleted since the save) gives a failing result that says so."""
    try:
        return analyze_sequence(inputs.document, inputs.rails)
    except DocumentError as exc:
        return {"schema": "railsign.sequence-result/1", "verdict": "fail", "checks": [], "corners": [],
                "error": str(exc)}


def finish_job(session: Session, claim: jobs.Claim, inputs: JobInputs, *, result: dict[str, Any],
               duration_s: float) -> bool:
    """Store the job's result (once per sequence, inputs and engine) and mark the job done, if the attempt is
    still ours. Returns whether it was. The one place that writes ``board_sequence_results``."""
    job = jobs.owned_job(session, claim)
    if job is None:
        return False
    row = BoardSequenceResult(sequence_id=inputs.sequence_id, revision_n=inputs.revision_n,
                              inputs_sha256=inputs.inputs_sha256, engine_version=job.engine_version,
                              verdict=result["verdict"], result=result, duration_s=duration_s)
    exists = select(BoardSequenceResult.id).where(BoardSequenceResult.sequence_id == row.sequence_id,
                                                  BoardSequenceResult.inputs_sha256 == row.inputs_sha256,
                                                  BoardSequenceResult.engine_version == row.engine_version)
    if session.scalar(exists) is None:
        try:
            with session.begin_nested():  # another job of equal inputs may store it at the same moment
                session.add(row)
        except IntegrityError:
            pass
    jobs.mark_done(job)
    session.commit()
    return True


# PostgreSQL advisory lock key serialising enqueue_outdated between processes (crc32 of
# "railsign.sequences.enqueue_outdated"; SQLite's write lock does the same there).
_OUTDATED_LOCK_KEY = 0xF8EE_C20C


def enqueue_outdated(*, session: Session, actor: Actor | None = None) -> list[Job]:
    """Queue the analysis of every board sequence whose current inputs have no result at this engine and no job
    at this engine yet (after a new engine version, or rails changed before sequence analyses were jobs);
    returns the jobs queued. Idempotent, as :func:`server.services.jobs.enqueue_outdated` (``actor``: who queues,
    default the engine's system actor); commits."""
    actor = actor or engine_change.engine_actor()
    actor.require(Permission.ANALYZE)
    if session.get_bind().dialect.name == "postgresql":  # web processes starting together queue in turn
        session.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": _OUTDATED_LOCK_KEY})
    queued = []
    for seq in session.scalars(select(BoardSequence).where(BoardSequence.head_n > 0).order_by(BoardSequence.id)):
        board = session.get(Board, seq.board_id)
        rev = _head(session, seq)
        key = _inputs_sha256(rev, _board_rails(session, board))
        if _stored(session, seq, key) is not None or _job_for(session, seq, key) is not None:
            continue
        queued.append(jobs.enqueue_sequence(session, actor, board_id=seq.board_id, inputs_sha256=key,
                                            revision_n=rev.n))
    session.commit()
    return queued


def _job_for(session: Session, seq: BoardSequence, key: str) -> Job | None:
    """The newest job of these inputs at this engine, in any state."""
    return session.scalar(select(Job).where(Job.kind == JobKind.sequence.value, Job.board_id == seq.board_id,
                                            Job.sha256 == key, Job.engine_version == engine_version())
                          .order_by(Job.id.desc()).limit(1))


def _result_dict(row: BoardSequenceResult) -> dict[str, Any]:
    return {"id": row.id, "engine_version": row.engine_version, "verdict": row.verdict, "duration_s": row.duration_s,
            **row.result}


def approval_dict(a: BoardSequenceApproval, current_key: str | None = None) -> dict[str, Any]:
    return {"id": a.id, "revision_n": a.revision_n, "reviewer": a.reviewer_name, "comment": a.comment,
            "created_at": a.created_at.isoformat(), "stale": a.stale_at is not None, "stale_reason": a.stale_reason,
            "current": a.stale_at is None and (current_key is None or a.inputs_sha256 == current_key)}


def sequence_dict(session: Session, seq: BoardSequence, *, actor: Actor | None = None) -> dict[str, Any]:
    """The head revision, its result with the rails as they are now (None while it is computed: ``analysis``
    says how far its job is, ``outdated_result`` is the last result of older inputs), its approvals and waivers;
    with a result, its failing or marginal checks (``problem_checks``, each with the waiver that covers it) and
    why it cannot be approved yet (``approval_blocked``, None: it can); its workflow ``state`` and the
    ``transitions`` leaving it, each with what blocks it and whether ``actor`` may take it now. Reads only."""
    head = _head(session, seq)
    board = session.get(Board, seq.board_id)
    key = _inputs_sha256(head, _board_rails(session, board))
    out: dict[str, Any] = {"board_id": seq.board_id, "n": head.n, "sha256": head.sha256, "author": head.author_name,
                           "message": head.message, "created_at": head.created_at.isoformat(),
                           "document": head.document, "inputs_sha256": key, "result": None, "outdated_result": None}
    row = _stored(session, seq, key)
    if row is not None:
        out["result"] = _result_dict(row)
        out["analysis"] = {"state": "done", "job": None}
    else:
        job = _job_for(session, seq, key)
        out["analysis"] = {"state": job.state if job is not None else "not_queued",
                           "job": jobs.job_dict(job) if job is not None else None}
        old = session.scalar(select(BoardSequenceResult).where(BoardSequenceResult.sequence_id == seq.id)
                             .order_by(BoardSequenceResult.id.desc()).limit(1))
        if old is not None:
            out["outdated_result"] = {**_result_dict(old), "revision_n": old.revision_n,
                                      "inputs_sha256": old.inputs_sha256, "computed_at": old.created_at.isoformat(),
                                      "outdated_because": _outdated_because(old, head)}
    approvals = session.scalars(select(BoardSequenceApproval).where(BoardSequenceApproval.sequence_id == seq.id)
                                .order_by(BoardSequenceApproval.id)).all()
    out["approvals"] = [approval_dict(a, key) for a in approvals]
    waivers = session.scalars(select(BoardSequenceWaiver).where(BoardSequenceWaiver.sequence_id == seq.id)
                              .order_by(BoardSequenceWaiver.id)).all()
    out["waivers"] = [waiver_dict(w, key) for w in waivers]
    out["problem_checks"], out["approval_blocked"] = [], None
    out["rules"] = _board_rules(session, board).as_dict()
    if row is not None:
        covered = _covering(row, list(waivers))
        out["problem_checks"] = [{**g, "waiver": waiver_dict(covered[k], key) if k in covered else None}
                                 for k, g in _problem_checks(list(row.result.get("checks", []))).items()]
        out["approval_blocked"] = _approval_blocked(row, list(waivers))
    wf = _workflow(session, board)
    state_row = session.get(BoardSequenceState, seq.id)
    name = _state_name(state_row, wf)
    known = state_row is not None and state_row.state == name
    out["workflow"] = wf.name
    out["state"] = {"name": name, "signed_off": wf.is_signed_off(name),
                    "since": state_row.since.isoformat() if known else None,
                    "revision": state_row.revision_n if known else None, "by": state_row.changed_by if known else None}
    facts = _facts(session, seq, board, head, key, row, name)
    out["transitions"] = [{**t, "blockers": [b.as_dict() for b in _words([Blocker(d["field"], d["message"])
                                                                          for d in t["blockers"]], facts)]}
                          for t in transition_dicts(wf, facts, actor)]
    return out


def _outdated_because(old: BoardSequenceResult, head: BoardSequenceRevision) -> str:
    if old.revision_n != head.n:
        return f"computed for revision {old.revision_n} of the sequence; the current one is {head.n}"
    if old.engine_version != engine_version():
        return f"computed by engine {old.engine_version}; the current engine is {engine_version()}"
    return "computed with the rails as they were before a later change of one of them"


def get_sequence(*, session: Session, actor: Actor, board_id: int) -> BoardSequence:
    board = get_board(session=session, actor=actor, board_id=board_id)
    seq = _get(session, board)
    if seq is None or seq.head_n == 0:
        raise NotFound(f"board '{board.name}' has no power-up sequence yet")
    return seq


def revision_dict(rev: BoardSequenceRevision, *, board_id: int, with_document: bool = True) -> dict[str, Any]:
    out = {"board_id": board_id, "n": rev.n, "sha256": rev.sha256, "author": rev.author_name,
           "author_id": rev.author_id, "message": rev.message, "created_at": rev.created_at.isoformat()}
    if with_document:
        out["document"] = rev.document
    return out


def list_revisions(*, session: Session, actor: Actor, board_id: int, limit: int = 50,
                   offset: int = 0) -> tuple[list[BoardSequenceRevision], int]:
    """The sequence's revisions, newest first, and how many there are (the head's number). Reads only."""
    seq = get_sequence(session=session, actor=actor, board_id=board_id)
    rows = session.scalars(select(BoardSequenceRevision).where(BoardSequenceRevision.sequence_id == seq.id)
                           .order_by(BoardSequenceRevision.n.desc()).limit(limit).offset(offset)).all()
    return list(rows), seq.head_n


def get_revision(*, session: Session, actor: Actor, board_id: int, n: int) -> BoardSequenceRevision:
    seq = get_sequence(session=session, actor=actor, board_id=board_id)
    rev = session.scalar(select(BoardSequenceRevision).where(BoardSequenceRevision.sequence_id == seq.id,
                                                             BoardSequenceRevision.n == n))
    if rev is None:
        raise NotFound(f"the board's power-up sequence has no revision {n}")
    return rev


def revision_history(*, session: Session, actor: Actor, board_id: int, limit: int = 20) -> list[dict[str, Any]]:
    """The newest ``limit`` revisions of the sequence, newest first, each with the field-level changes from the
    revision before it (``changes``; the first revision has none). Reads only."""
    rows, _ = list_revisions(session=session, actor=actor, board_id=board_id, limit=limit + 1)
    out = []
    for k, rev in enumerate(rows[:limit]):
        before = rows[k + 1] if k + 1 < len(rows) else None
        out.append({**revision_dict(rev, board_id=board_id, with_document=False),
                    "changes": diff_documents(before.document, rev.document) if before is not None else None})
    return out


def diff_revisions(*, session: Session, actor: Actor, board_id: int, from_n: int, to_n: int) -> dict[str, Any]:
    """The field-level changes of the sequence document from revision ``from_n`` to ``to_n``."""
    old = get_revision(session=session, actor=actor, board_id=board_id, n=from_n)
    new = get_revision(session=session, actor=actor, board_id=board_id, n=to_n)
    return {"board_id": board_id, "from": revision_dict(old, board_id=board_id, with_document=False),
            "to": revision_dict(new, board_id=board_id, with_document=False),
            "changes": diff_documents(old.document, new.document)}


def _make_stale(session: Session, actor: Actor, seq: BoardSequence, reason: str, *, key: str | None = None) -> None:
    """The sequence's approvals and waivers of other inputs than ``key`` (None: all of them) go stale with
    ``reason``; waivers going stale are recorded (a step of the caller's transaction)."""
    now = utcnow()
    approvals = select(BoardSequenceApproval).where(BoardSequenceApproval.sequence_id == seq.id,
                                                    BoardSequenceApproval.stale_at.is_(None))
    waivers = select(BoardSequenceWaiver).where(BoardSequenceWaiver.sequence_id == seq.id,
                                                BoardSequenceWaiver.stale_at.is_(None))
    if key is not None:
        approvals = approvals.where(BoardSequenceApproval.inputs_sha256 != key)
        waivers = waivers.where(BoardSequenceWaiver.inputs_sha256 != key)
    for a in session.scalars(approvals).all():
        a.stale_at, a.stale_reason = now, reason
    stale = session.scalars(waivers.order_by(BoardSequenceWaiver.id)).all()
    for w in stale:
        w.stale_at, w.stale_reason = now, reason[:1000]
    if stale:
        board = session.get(Board, seq.board_id)
        record(session, actor, action="waivers_stale", object_type="board_sequence", object_id=seq.id,
               object_repr=f"{board.name} power-up sequence", product_id=board.product_id,
               before={"waivers": [{"id": w.id, "reviewer": w.reviewer_name, "check_id": w.check_id,
                                    "revision_n": w.revision_n, "inputs_sha256": w.inputs_sha256} for w in stale]},
               after={"stale": [w.id for w in stale], "reason": reason})


def _inline_rails_in_si(document: Any) -> Any:
    """The sequence with its inline rail documents validated and in SI numbers, as a rail's save stores them
    (engineering notation such as "680uF" read); a bad one is refused naming its fields (:class:`Invalid`)."""
    rails = document.get("rails") if isinstance(document, dict) else None
    if not isinstance(rails, list):
        return document
    items = [{**item, "rail": normalize_document(item["rail"], prefix=f"document.rails[{k}].rail")}
             if isinstance(item, dict) and isinstance(item.get("rail"), dict) else item
             for k, item in enumerate(rails)]
    return {**document, "rails": items}


def save_sequence(*, session: Session, actor: Actor, board_id: int, document: Any, base_sha256: str | None = None,
                  message: str = "") -> tuple[BoardSequence, BoardSequenceRevision, bool]:
    """Save a new revision of the board's sequence and queue its analysis; (sequence, revision, created).

    An unchanged document creates nothing. ``base_sha256``, when given, must be the current head's
    (else :class:`Conflict`, nothing saved). The document is refused (:class:`Invalid`, every field
    named) when the analysis core cannot read it with the board's rails.
    """
    actor.require(Permission.EDIT)
    board = get_board(session=session, actor=actor, board_id=board_id)
    rails = _board_rails(session, board)
    document = _inline_rails_in_si(document)
    try:
        read_sequence(document, {name: r[1].document for name, r in rails.items()})
    except DocumentError as exc:
        raise _invalid(exc) from None
    seq = _get(session, board)
    if seq is None:
        seq = BoardSequence(board_id=board.id, head_n=0, head_sha256="")
        session.add(seq)
        flush_or_conflict(session, f"board '{board.name}' got a sequence at the same moment; nothing was saved")
    if base_sha256 is not None and base_sha256 != seq.head_sha256:
        raise Conflict(f"the sequence of board '{board.name}' was saved as revision {seq.head_n} after the revision "
                       "your edit started from; nothing was saved")
    sha = _sha256(document)
    if sha == seq.head_sha256:
        session.rollback()
        return seq, _head(session, seq), False
    seq.head_n, seq.head_sha256, seq.updated_at = seq.head_n + 1, sha, utcnow()
    rev = BoardSequenceRevision(sequence_id=seq.id, n=seq.head_n, document=document, sha256=sha,
                                author_id=actor.user_id, author_name=actor.name, message=message or "saved")
    session.add(rev)
    flush_or_conflict(session, f"the sequence of board '{board.name}' was saved by someone else at the same moment")
    _make_stale(session, actor, seq, f"the sequence has a newer revision ({rev.n})")
    record(session, actor, action="update" if rev.n > 1 else "create", object_type="board_sequence",
           object_id=seq.id, object_repr=f"{board.name} power-up sequence", product_id=board.product_id,
           after={"n": rev.n, "sha256": sha})
    key = _inputs_sha256(rev, rails)
    if rev.n == 1:
        _set_state(session, actor, seq, board, None, _workflow(session, board).initial, key=key, quiet=True)
    else:
        _on_edit(session, actor, seq, board, key, note=f"revision {rev.n} of the sequence saved")
    _enqueue(session, actor, seq, rev, rails)
    session.commit()
    return seq, rev, True


def on_rail_revision(session: Session, actor: Actor, rail: Rail) -> None:
    """A rail's new revision (see :func:`on_rail_change`). A step of the caller's transaction: the caller commits."""
    on_rail_change(session, actor, board_id=rail.board_id, reason=f"rail '{rail.name}' has a newer revision "
                                                                  f"({rail.head_n})")


def on_rail_change(session: Session, actor: Actor, *, board_id: int, reason: str) -> Job | None:
    """A change of one of the board's rails (a new revision, retired, restored, deleted): when it changes the
    inputs of the board's sequence (the sequence names the rail), the sequence's approvals and waivers of other
    inputs go stale (``reason``) and its analysis is queued (returned; None when nothing changed or its result is
    stored). No other rail's approvals change. A step of the caller's transaction: the caller commits."""
    seq = session.scalar(select(BoardSequence).where(BoardSequence.board_id == board_id))
    if seq is None or seq.head_n == 0:
        return None
    session.flush()
    head, board = _head(session, seq), session.get(Board, board_id)
    rails = _board_rails(session, board)
    key = _inputs_sha256(head, rails)
    _make_stale(session, actor, seq, reason, key=key)
    _on_edit(session, actor, seq, board, key, note=reason)
    return _enqueue(session, actor, seq, head, rails)


# --- workflow state: where the sequence stands, what moves it ----------------------------------------


def _workflow(session: Session, board: Board) -> WorkflowDef:
    """The workflow of the board's product's team (as a rail finds its team)."""
    return workflows.definition_for_team(session, session.get(Product, board.product_id).team_id)


def _state_name(row: BoardSequenceState | None, wf: WorkflowDef) -> str:
    """The sequence's state: its row's; without a row, or in a state the workflow lost, the initial one."""
    return row.state if row is not None and wf.has_state(row.state) else wf.initial


def _set_state(session: Session, actor: Actor, seq: BoardSequence, board: Board, row: BoardSequenceState | None,
               target: str, *, key: str, action: str = "transition", note: str = "",
               extra: dict[str, Any] | None = None, quiet: bool = False) -> BoardSequenceState:
    """Put the sequence in ``target`` for the inputs ``key`` at its head revision and record it in the audit trail
    (``quiet``: no record, for a new sequence's first state and for new inputs that leave the state as it is). The
    one write path of ``board_sequence_states``; a step of the caller's transaction."""
    before = {"state": row.state, "revision": row.revision_n} if row is not None else None
    if row is None:
        row = BoardSequenceState(sequence_id=seq.id, state=target, revision_n=seq.head_n, inputs_sha256=key,
                                 since=utcnow(), changed_by=actor.name)
        session.add(row)
    else:
        if row.state != target:
            row.since = utcnow()
        row.state, row.revision_n, row.inputs_sha256, row.changed_by = target, seq.head_n, key, actor.name
    if not quiet:
        after: dict[str, Any] = {"state": target, "revision": seq.head_n, "inputs_sha256": key, **(extra or {})}
        if note:
            after["note"] = note
        record(session, actor, action=action, object_type="board_sequence", object_id=seq.id,
               object_repr=f"{board.name} power-up sequence", product_id=board.product_id, before=before, after=after)
    return row


def _on_edit(session: Session, actor: Actor, seq: BoardSequence, board: Board, key: str, *, note: str) -> None:
    """The sequence's inputs are now ``key``: when they changed (a new sequence revision, a change of a rail it
    names), it goes to its workflow's ``on_edit`` state, recorded with ``note`` (already there: it stays, for the
    new inputs). A step of the caller's transaction."""
    row = session.get(BoardSequenceState, seq.id)
    wf = _workflow(session, board)
    if row is not None and row.inputs_sha256 == key and wf.has_state(row.state):
        return
    if _state_name(row, wf) != wf.on_edit or (row is not None and not wf.has_state(row.state)):
        _set_state(session, actor, seq, board, row, wf.on_edit, key=key, action="reset_state", note=note)
    else:
        _set_state(session, actor, seq, board, row, wf.on_edit, key=key, quiet=True)


def sequence_facts(session: Session, seq: BoardSequence, *, state: str) -> RailFacts:
    """What the workflow's rules need to know about the sequence in ``state``, read as a rail's: the checks of the
    current result by the key a waiver names (none: not analysed; a start-up that could not be computed is one
    failing check), every approval (one of other inputs than the current ones counts as stale), the current
    inputs' waivers, and the team's two-person rule. Reads only."""
    board = session.get(Board, seq.board_id)
    head = _head(session, seq)
    key = _inputs_sha256(head, _board_rails(session, board))
    return _facts(session, seq, board, head, key, _stored(session, seq, key), state)


def _facts(session: Session, seq: BoardSequence, board: Board, head: BoardSequenceRevision, key: str,
           row: BoardSequenceResult | None, state: str) -> RailFacts:
    """:func:`sequence_facts` of the inputs ``key`` and their stored result ``row`` (None: not yet), as read."""
    waivers = _current_waivers(session, seq, key)
    checks: list[CheckFact] | None = None
    waived: dict[str, str] = {}
    by: frozenset[int] = frozenset()
    if row is not None:
        rows = list(row.result.get("checks", []))
        named = {k: "; ".join(g["titles"]) for k, g in _problem_checks(rows).items()}  # a check is all its rows
        checks = [CheckFact(check_key(c), str(c.get("verdict")), named.get(check_key(c)) or str(c.get("title") or ""))
                  for c in rows]
        if row.result.get("error"):
            checks.append(CheckFact("start-up:board", "fail",
                                    f"the board start-up could not be computed ({row.result['error']})"))
        for w in waivers:
            if SEVERITY.get(w.verdict, 3) >= SEVERITY.get(waived.get(w.check_id, "n/a"), 3):
                waived[w.check_id] = w.verdict
        by = frozenset(w.reviewer_id for w in _covering(row, waivers).values())
    approvals = session.scalars(select(BoardSequenceApproval).where(BoardSequenceApproval.sequence_id == seq.id)
                                .order_by(BoardSequenceApproval.id)).all()
    return RailFacts(state=state, head_n=head.n, checks=None if checks is None else tuple(checks), waived=waived,
                     approvals=tuple(ApprovalFact(a.reviewer_id, a.reviewer_name, a.revision_n,
                                                  a.stale_at is not None or a.inputs_sha256 != key)
                                     for a in approvals),
                     waivers_by=by, two_person=_board_rules(session, board).two_person)


def _words(problems: list[Blocker], facts: RailFacts) -> list[Blocker]:
    """The blockers as the sequence's page reads them: without a result, the analysis is a queued job."""
    if facts.checks is not None:
        return problems
    return [Blocker(b.demand, f"the board start-up of revision {facts.head_n} with the rails as they are now has no "
                              "result yet: its analysis is queued; wait for it") if b.demand == "checks" else b
            for b in problems]


def take_transition(*, session: Session, actor: Actor, board_id: int, transition: str, sha256: str,
                    comment: str = "") -> dict[str, Any]:
    """Move the board's sequence along one of its team's workflow transitions (its head revision named by sha256),
    when the actor's role may and the transition's demands are met (refused naming each unmet one), as a rail's."""
    actor.require(Permission.ADVANCE)
    board = get_board(session=session, actor=actor, board_id=board_id)
    seq = session.scalar(select(BoardSequence).where(BoardSequence.board_id == board.id).with_for_update())
    if seq is None or seq.head_n == 0:
        raise NotFound(f"board '{board.name}' has no power-up sequence yet")
    head = _head(session, seq)
    sha = (sha256 or "").strip().lower()
    if sha != head.sha256:
        found = session.scalar(select(BoardSequenceRevision).where(BoardSequenceRevision.sequence_id == seq.id,
                                                                   BoardSequenceRevision.sha256 == sha)
                               .order_by(BoardSequenceRevision.n.desc()).limit(1))
        if found is None:
            raise Invalid(f"the sequence of board '{board.name}' has no revision with sha256 {sha[:12] or '(none)'}",
                          details=[{"field": "sha256", "message": "names no revision of this sequence"}])
        raise Conflict(f"revision {found.n} of the sequence is not its current revision ({head.n}): moving an old "
                       f"revision is refused; look at revision {head.n}",
                       extra={"current": {"n": head.n, "sha256": head.sha256}})
    wf = _workflow(session, board)
    row = session.get(BoardSequenceState, seq.id)
    state = _state_name(row, wf)
    step = wf.transition(state, (transition or "").strip())
    if step is None:
        offered = ", ".join(f"'{t.name}'" for t in wf.transitions_from(state)) or "none"
        raise Invalid(f"the sequence is in '{state}', which offers no transition '{transition}' (it offers "
                      f"{offered})",
                      details=[{"field": "transition", "message": "is not offered from the current state"}])
    if not step.allows(actor.role):
        raise Forbidden(f"'{step.name}' is for {', '.join(step.roles)}; your role is {actor.role}")
    facts = sequence_facts(session, seq, state=state)
    problems = _words(blockers(step, facts), facts)
    if problems:
        raise TransitionBlocked(f"'{step.name}' cannot be taken yet: " + "; ".join(b.message for b in problems),
                                details=[b.as_dict() for b in problems])
    key = _inputs_sha256(head, _board_rails(session, board))
    _set_state(session, actor, seq, board, row, step.target, key=key,
               extra={"transition": step.name, "from": state, "sha256": head.sha256,
                      "comment": (comment or "")[:4000]})
    session.commit()
    return {"board_id": board.id, "from": state, "to": step.target, "transition": step.name, "revision": head.n,
            "signed_off": wf.is_signed_off(step.target)}


# --- sign-off: checks, waivers, approvals ----------------------------------------------------------


def check_key(check: dict[str, Any]) -> str:
    """A check of a sequence result as a waiver names it: its id with its subject (``supply_uvlo:harness12``,
    ``power_good:camera``, ``power_good_order:board``); both corners' rows, and every threshold on a supply, are
    one check."""
    return f"{check.get('id')}:{check.get('subject')}"[:100]


def _keyed(checks: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The result's checks with ``id`` the key a waiver names (what the rail sign-off functions read)."""
    return [{**c, "id": check_key(c)} for c in checks]


def _problem_checks(checks: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """Check key -> its worst verdict and the titles and reasons of its failing or marginal rows, in the result's
    order (checks that read no problem are left out)."""
    out: dict[str, dict[str, Any]] = {}
    for c in checks:
        verdict = str(c.get("verdict"))
        if verdict not in PROBLEM_VERDICTS:
            continue
        key = check_key(c)
        group = out.setdefault(key, {"check_id": key, "verdict": verdict, "titles": [], "reasons": []})
        if SEVERITY[verdict] > SEVERITY[group["verdict"]]:
            group["verdict"] = verdict
        if str(c.get("title", "")) not in group["titles"]:
            group["titles"].append(str(c.get("title", "")))
            group["reasons"].append(str(c.get("reason", "")))
    return out


def _current_waivers(session: Session, seq: BoardSequence, key: str) -> list[BoardSequenceWaiver]:
    """The waivers of these inputs that are not stale, oldest first."""
    return list(session.scalars(select(BoardSequenceWaiver).where(BoardSequenceWaiver.sequence_id == seq.id,
                                                                  BoardSequenceWaiver.inputs_sha256 == key,
                                                                  BoardSequenceWaiver.stale_at.is_(None))
                                .order_by(BoardSequenceWaiver.id)))


def _covering(row: BoardSequenceResult, waivers: list[BoardSequenceWaiver]) -> dict[str, BoardSequenceWaiver]:
    """Check key -> the newest waiver of the result's inputs that covers the check's worst verdict (a waiver of a
    marginal reading does not cover a failing one), as a rail's sign-off reads its waivers."""
    mine = [w for w in waivers if w.inputs_sha256 == row.inputs_sha256 and w.stale_at is None]
    return covering_waivers(_keyed(list(row.result.get("checks", []))), mine, row.revision_n)


def _approval_blocked(row: BoardSequenceResult, waivers: list[BoardSequenceWaiver]) -> str | None:
    """Why the result cannot be approved yet, in words (None: it can): a start-up that could not be computed, or
    failing or marginal checks without a waiver of these inputs that covers them, each named by its title."""
    if row.result.get("error"):
        return f"the board start-up could not be computed ({row.result['error']}): change the sequence or its rails"
    covered = _covering(row, waivers)
    open_checks = [g for key, g in _problem_checks(list(row.result.get("checks", []))).items() if key not in covered]
    if not open_checks:
        return None
    listed = "; ".join(f"{title} ({g['verdict']})" for g in open_checks for title in g["titles"])
    return f"checks failing or marginal without a waiver: {listed}"


def _board_rules(session: Session, board: Board) -> WaiverRules:
    return governance.rules_for_team(session, session.get(Product, board.product_id).team_id)


def _own(actor: Actor, rev: BoardSequenceRevision) -> bool:
    return (rev.author_id is not None and rev.author_id == actor.user_id) or \
        (rev.author_id is None and rev.author_name == actor.name)


def _no_result(session: Session, seq: BoardSequence, head: BoardSequenceRevision, what: str) -> Conflict:
    board = session.get(Board, seq.board_id)
    job = _job_for(session, seq, _inputs_sha256(head, _board_rails(session, board)))
    state = f"its job {job.id} is {job.state}" if job is not None else "its analysis is not queued yet"
    return Conflict(f"the board start-up with the rails as they are now has no result yet ({state}); "
                    f"{what} once it has one")


def waiver_dict(w: BoardSequenceWaiver, current_key: str | None = None) -> dict[str, Any]:
    """A sequence waiver as the API and the pages read it; ``current``: not stale and of the current inputs."""
    return {"id": w.id, "revision_n": w.revision_n, "inputs_sha256": w.inputs_sha256, "result_id": w.result_id,
            "check_id": w.check_id, "check_title": w.check_title, "verdict": w.verdict, "reason": w.reason,
            "reviewer": w.reviewer_name, "reviewer_id": w.reviewer_id, "created_at": w.created_at.isoformat(),
            # a waiver of a failing check: marked apart wherever waivers are shown, as a rail's
            "past_edge": w.verdict == "fail", "stale": w.stale_at is not None, "stale_reason": w.stale_reason,
            "current": w.stale_at is None and (current_key is None or w.inputs_sha256 == current_key)}


def list_waivers(*, session: Session, actor: Actor, board_id: int) -> tuple[list[BoardSequenceWaiver], str]:
    """(every waiver of the board's sequence, oldest first; the key of its current inputs). Reads only."""
    seq = get_sequence(session=session, actor=actor, board_id=board_id)
    board = session.get(Board, seq.board_id)
    rows = session.scalars(select(BoardSequenceWaiver).where(BoardSequenceWaiver.sequence_id == seq.id)
                           .order_by(BoardSequenceWaiver.id)).all()
    return list(rows), _inputs_sha256(_head(session, seq), _board_rails(session, board))


def _require_waiver_role(session: Session, actor: Actor, board: Board) -> None:
    """Reviewers waive; so does the role a team names for failing checks (its rules decide per check)."""
    if actor.can(Permission.REVIEW):
        return
    if actor.role not in FAIL_WAIVER_ROLES:
        actor.require(Permission.REVIEW)
    role = _board_rules(session, board).fail_waiver_role
    if role is None or actor.role != role:
        actor.require(Permission.REVIEW)


def waive(*, session: Session, actor: Actor, board_id: int, sha256: str, check_id: str, reason: str,
          inputs_sha256: str | None = None) -> BoardSequenceWaiver:
    """Waive a failing or marginal check of the current result of the board's sequence (its head revision named
    by sha256; ``inputs_sha256``, when given, the inputs the reviewer saw), with a reason, under the team's waiver
    rules. The one write path of ``board_sequence_waivers``."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    _require_waiver_role(session, actor, board)
    reason = (reason or "").strip()
    if not reason:
        raise Invalid("a waiver needs a reason: say why the reading is acceptable",
                      details=[{"field": "reason", "message": "is required: say why the reading is acceptable"}])
    seq = session.scalar(select(BoardSequence).where(BoardSequence.board_id == board.id).with_for_update())
    if seq is None or seq.head_n == 0:
        raise NotFound(f"board '{board.name}' has no power-up sequence yet")
    head = _head(session, seq)
    if (sha256 or "").strip().lower() != head.sha256:
        raise Conflict(f"the sequence's current revision is {head.n}; waive a check of that one (its sha256)")
    if _own(actor, head):
        raise Forbidden(f"you saved revision {head.n} of the sequence: someone else waives its checks")
    first = session.scalar(select(BoardSequenceRevision).where(BoardSequenceRevision.sequence_id == seq.id)
                           .order_by(BoardSequenceRevision.n).limit(1))
    if first is not None and first.n != head.n and _own(actor, first):
        raise Forbidden(f"you created the power-up sequence of board '{board.name}': someone else waives its checks")
    row = current_result(session, seq)
    if row is None:
        raise _no_result(session, seq, head, "waive what it shows")
    seen = (inputs_sha256 or "").strip().lower()
    if seen and seen != row.inputs_sha256:
        raise Conflict("the sequence's rails changed since the result you read: waive a check of the current result")
    key = (check_id or "").strip()
    checks = list(row.result.get("checks", []))
    if not any(check_key(c) == key for c in checks):
        raise Invalid(f"the board start-up has no check '{key}'",
                      details=[{"field": "check_id", "message": "is not a check of the current result"}])
    group = _problem_checks(checks).get(key)
    if group is None:
        raise Invalid(f"check '{key}' of the board start-up reads no problem: only failing or marginal checks are "
                      "waived", details=[{"field": "check_id", "message": "is neither failing nor marginal"}])
    rules = _board_rules(session, board)
    why = waiver_refusal(rules, actor.role, group["verdict"])
    if why is not None:
        raise Forbidden(why)
    if rules.two_person:
        approved = session.scalar(select(BoardSequenceApproval.id).where(
            BoardSequenceApproval.sequence_id == seq.id, BoardSequenceApproval.inputs_sha256 == row.inputs_sha256,
            BoardSequenceApproval.reviewer_id == actor.user_id, BoardSequenceApproval.stale_at.is_(None)).limit(1))
        if approved is not None:
            raise Forbidden(two_person_refusal(rules, approving=False, revision_n=head.n))
    earlier = [w for w in _current_waivers(session, seq, row.inputs_sha256) if w.check_id == key]
    still = next((w for w in earlier if waiver_covers(w.verdict, group["verdict"])), None)
    if still is not None:
        raise Conflict(f"check '{'; '.join(group['titles'])}' has a waiver already (waiver {still.id} by "
                       f"{still.reviewer_name})")
    waiver = BoardSequenceWaiver(sequence_id=seq.id, revision_n=head.n, inputs_sha256=row.inputs_sha256,
                                 result_id=row.id, check_id=key, check_title="; ".join(group["titles"])[:200],
                                 verdict=group["verdict"], reason=reason[:4000], reviewer_id=actor.user_id,
                                 reviewer_name=actor.name)
    session.add(waiver)
    flush_or_conflict(session, f"check '{key}' of the board start-up got a waiver at the same moment")
    after = {"waiver": waiver.id, "n": head.n, "inputs_sha256": row.inputs_sha256, "result_id": row.id,
             "check_id": key, "titles": group["titles"], "verdict": waiver.verdict, "reason": waiver.reason}
    if earlier:
        after["replaces"] = [{"waiver": w.id, "verdict": w.verdict} for w in earlier]
    record(session, actor, action="waive", object_type="board_sequence", object_id=seq.id,
           object_repr=f"{board.name} power-up sequence", product_id=board.product_id, after=after)
    session.commit()
    return waiver


def approve(*, session: Session, actor: Actor, board_id: int, sha256: str, comment: str = "") -> BoardSequenceApproval:
    """Approve the board's sequence as its current result reads it (the head revision, named by sha256): refused
    while a failing or marginal check has no waiver of the current inputs that covers it, and, under the team's
    two-person rule, to a reviewer whose waiver it would rely on."""
    actor.require(Permission.REVIEW)
    seq = get_sequence(session=session, actor=actor, board_id=board_id)
    head = _head(session, seq)
    if sha256 != head.sha256:
        raise Conflict(f"the sequence's current revision is {head.n}; approve that one (its sha256)")
    if head.author_id is not None and head.author_id == actor.user_id:
        raise Forbidden("you saved the sequence's current revision: someone else approves it")
    row = current_result(session, seq)
    if row is None:
        raise _no_result(session, seq, head, "approve")
    waivers = _current_waivers(session, seq, row.inputs_sha256)
    blocked = _approval_blocked(row, waivers)
    if blocked is not None:
        raise Conflict(f"the board start-up of revision {head.n} cannot be approved yet: {blocked}",
                       details=[{"field": "checks", "message": blocked}])
    board = session.get(Board, seq.board_id)
    rules = _board_rules(session, board)
    if rules.two_person:
        mine = [w for w in _covering(row, waivers).values() if w.reviewer_id == actor.user_id]
        if mine:
            raise Forbidden(two_person_refusal(rules, approving=True, revision_n=head.n) + " (your waiver of "
                            + ", ".join(f"'{w.check_title or w.check_id}'" for w in mine) + ")")
    approval = BoardSequenceApproval(sequence_id=seq.id, revision_n=head.n, inputs_sha256=row.inputs_sha256,
                                     result_id=row.id, reviewer_id=actor.user_id, reviewer_name=actor.name,
                                     comment=comment)
    session.add(approval)
    session.flush()
    record(session, actor, action="approve", object_type="board_sequence", object_id=seq.id,
           object_repr=f"{board.name} power-up sequence", product_id=board.product_id,
           after={"n": head.n, "result_id": row.id, "verdict": row.verdict,
                  "waivers": [w.id for w in _covering(row, waivers).values()]})
    session.commit()
    return approval


def check_document(document: Any, rail_documents: dict[str, Any], *, prefix: str = "document") -> dict[str, Any]:
    """A sequence document as :func:`save_sequence` would store it (inline rails in SI numbers), read against
    ``rail_documents`` (the board's rails in use, head documents by name) as it reads them: for a caller that
    must know a save will be taken before it stores anything (an import). Raises :class:`Invalid` naming every
    field, under ``prefix`` instead of ``document``. Reads and writes nothing."""

    def under(field: str) -> str:
        return prefix + field[len("document"):] if field == "document" or field.startswith("document.") else field

    try:
        document = _inline_rails_in_si(document)
        read_sequence(document, rail_documents)
    except DocumentError as exc:
        invalid = _invalid(exc)
        raise Invalid(invalid.message, details=[{**d, "field": under(d["field"])} for d in invalid.details]) from None
    except Invalid as exc:  # an inline rail document
        raise Invalid(exc.message, details=[{**d, "field": under(d["field"])} for d in exc.details or []]) from None
    return document


def board_sequence(*, session: Session, actor: Actor, board_id: int) -> dict[str, Any] | None:
    """:func:`sequence_dict` of the board's sequence (the board scoped to the actor); None when the board has
    none. Reads only."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    seq = _get(session, board)
    return sequence_dict(session, seq) if seq is not None and seq.head_n > 0 else None
