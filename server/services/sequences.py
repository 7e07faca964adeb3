"""A board's power-up sequence: its document and revisions, its analysis, its approvals.

The sequence (schema ``railsign.sequence/1``, :mod:`server.analysis.sequence`) is a board-level
document with its own revisions, like a rail's. Its rails are the board's rails named by
``ref`` (the rail's name; the rail's head revision is read) or written inline. A save that
the analysis core refuses (an unknown supply or rail, a cycle in the enable chain, a
threshold outside (0, 1), a negative time) is refused with every field named, and nothing is
stored.

The result belongs to the sequence revision *and* the rails as they are: its key
(``inputs_sha256``) is the sequence revision's sha256 with every referenced rail's head
sha256. A save computes it at once; after a rail's new revision the key changes and the next
read computes it again (:func:`current_result`), so the board page always shows the board as
it is. A rail's new revision (:func:`on_rail_revision`, called by :mod:`server.services.rail_edits`
in the save's transaction) makes the sequence's approvals stale, and touches no other rail's
approvals. Approving (:func:`approve`) follows a rail's rules: the current result only, not by
the author of the current revision.
"""

from __future__ import annotations

import hashlib
import time
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.analysis.errors import DocumentError
from server.analysis.sequence import analyze_sequence, read_sequence
from server.models import (Board, BoardSequence, BoardSequenceApproval, BoardSequenceResult, BoardSequenceRevision, Rail,
                           RailRevision, utcnow)
from server.schemas.rail import canonical_json
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.catalog import get_board
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict
from server.services.rails import normalize_document
from server.services.results import engine_version

__all__ = ["sequence_dict", "approval_dict", "get_sequence", "save_sequence", "current_result", "on_rail_revision",
           "approve"]


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


def _run(session: Session, seq: BoardSequence, rev: BoardSequenceRevision,
         rails: dict[str, tuple[Rail, RailRevision]]) -> BoardSequenceResult:
    """Analyse the revision with the rails as they are, and store the result (once per inputs and engine)."""
    key, engine = _inputs_sha256(rev, rails), engine_version()
    row = session.scalar(select(BoardSequenceResult).where(BoardSequenceResult.sequence_id == seq.id,
                                                           BoardSequenceResult.inputs_sha256 == key,
                                                           BoardSequenceResult.engine_version == engine))
    if row is not None:
        return row
    started = time.perf_counter()
    try:
        result = analyze_sequence(rev.document, {name: r[1].document for name, r in rails.items()})
    except DocumentError as exc:  # a referenced rail retired, renamed or deleted since the save
        result = {"schema": "railsign.sequence-result/1", "verdict": "fail", "checks": [], "corners": [],
                  "error": str(exc)}
    row = BoardSequenceResult(sequence_id=seq.id, revision_n=rev.n, inputs_sha256=key, engine_version=engine,
                              verdict=result["verdict"], result=result,
                              duration_s=time.perf_counter() - started)
    session.add(row)
    session.flush()
    return row


def current_result(session: Session, seq: BoardSequence) -> BoardSequenceResult:
    """The result of the head revision with the board's rails as they are now: stored, or computed now."""
    board = session.get(Board, seq.board_id)
    return _run(session, seq, _head(session, seq), _board_rails(session, board))


def approval_dict(a: BoardSequenceApproval, current_key: str | None = None) -> dict[str, Any]:
    return {"id": a.id, "revision_n": a.revision_n, "reviewer": a.reviewer_name, "comment": a.comment,
            "created_at": a.created_at.isoformat(), "stale": a.stale_at is not None, "stale_reason": a.stale_reason,
            "current": a.stale_at is None and (current_key is None or a.inputs_sha256 == current_key)}


def sequence_dict(session: Session, seq: BoardSequence, *, with_result: bool = True) -> dict[str, Any]:
    head = _head(session, seq)
    out: dict[str, Any] = {"board_id": seq.board_id, "n": head.n, "sha256": head.sha256, "author": head.author_name,
                           "message": head.message, "created_at": head.created_at.isoformat(),
                           "document": head.document}
    key = None
    if with_result:
        row = current_result(session, seq)
        key = row.inputs_sha256
        out["result"] = {"id": row.id, "engine_version": row.engine_version, "verdict": row.verdict,
                         "duration_s": row.duration_s, **row.result}
    approvals = session.scalars(select(BoardSequenceApproval).where(BoardSequenceApproval.sequence_id == seq.id)
                                .order_by(BoardSequenceApproval.id)).all()
    out["approvals"] = [approval_dict(a, key) for a in approvals]
    return out


def get_sequence(*, session: Session, actor: Actor, board_id: int) -> BoardSequence:
    board = get_board(session=session, actor=actor, board_id=board_id)
    seq = _get(session, board)
    if seq is None or seq.head_n == 0:
        raise NotFound(f"board '{board.name}' has no power-up sequence yet")
    return seq


def _make_stale(session: Session, seq: BoardSequence, reason: str) -> int:
    rows = session.scalars(select(BoardSequenceApproval).where(BoardSequenceApproval.sequence_id == seq.id,
                                                               BoardSequenceApproval.stale_at.is_(None))).all()
    for a in rows:
        a.stale_at, a.stale_reason = utcnow(), reason
    return len(rows)


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
    """Save a new revision of the board's sequence and analyse it; (sequence, revision, created).

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
    _make_stale(session, seq, f"the sequence has a newer revision ({rev.n})")
    record(session, actor, action="update" if rev.n > 1 else "create", object_type="board_sequence",
           object_id=seq.id, object_repr=f"{board.name} power-up sequence", product_id=board.product_id,
           after={"n": rev.n, "sha256": sha})
    _run(session, seq, rev, rails)
    session.commit()
    return seq, rev, True


def on_rail_revision(session: Session, actor: Actor, rail: Rail) -> None:
    """A rail's new revision: the approvals of its board's sequence go stale when the sequence names the
    rail (its result is computed again at the next read); no other rail's approvals change. A step of the
    caller's transaction: the caller commits."""
    seq = session.scalar(select(BoardSequence).where(BoardSequence.board_id == rail.board_id))
    if seq is None or seq.head_n == 0:
        return
    if rail.name in _refs(_head(session, seq).document):
        _make_stale(session, seq, f"rail '{rail.name}' has a newer revision ({rail.head_n})")


def approve(*, session: Session, actor: Actor, board_id: int, sha256: str, comment: str = "") -> BoardSequenceApproval:
    """Approve the board's sequence as its current result reads it (the head revision, named by sha256)."""
    actor.require(Permission.REVIEW)
    seq = get_sequence(session=session, actor=actor, board_id=board_id)
    head = _head(session, seq)
    if sha256 != head.sha256:
        raise Conflict(f"the sequence's current revision is {head.n}; approve that one (its sha256)")
    if head.author_id is not None and head.author_id == actor.user_id:
        raise Forbidden("you saved the sequence's current revision: someone else approves it")
    row = current_result(session, seq)
    approval = BoardSequenceApproval(sequence_id=seq.id, revision_n=head.n, inputs_sha256=row.inputs_sha256,
                                     result_id=row.id, reviewer_id=actor.user_id, reviewer_name=actor.name,
                                     comment=comment)
    session.add(approval)
    session.flush()
    board = session.get(Board, seq.board_id)
    record(session, actor, action="approve", object_type="board_sequence", object_id=seq.id,
           object_repr=f"{board.name} power-up sequence", product_id=board.product_id,
           after={"n": head.n, "result_id": row.id, "verdict": row.verdict})
    session.commit()
    return approval
