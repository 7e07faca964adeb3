"""Rail edits: create a rail, save a new revision with conflict detection, retire and restore, delete.

A retired rail keeps its revisions, results, sign-off and audit trail; it leaves the lists,
the review queue and the risk view, takes no new revision and no sign-off, and is restored by
the same people who edit rails.

A save names the revision it was based on (sha256 or number). When the rail has moved on
since, the save is refused with :class:`Conflict` carrying the current revision, and
nothing is written. On SQLite the save's session holds the write lock from the start of its
transaction (:func:`server.db.make_sessionmaker`), on PostgreSQL the rail row is locked
(``FOR UPDATE``); the unique (rail, n) constraint backs both.

A new revision does two more things in the same transaction, called here one after the
other: its analysis is queued (:func:`server.services.jobs.enqueue_for_revision`), then the
sign-off reacts (:func:`server.services.signoff.on_new_revision`: older approvals go stale,
the rail moves to the state its team's workflow names), and the board's power-up sequence reacts
(:func:`server.services.sequences.on_rail_change`: its analysis is queued and its approvals go
stale when the sequence names the rail; retiring, restoring and deleting a rail do the same). The
lookups these build on are in :mod:`server.services.rails`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.analysis.bank import document_capacitance
from server.models import PartRevision, Rail, RailRevision, utcnow
from server.schemas.rail import RAIL_FET_KEYS, document_sha256, part_data
from server.services import jobs, sequences, signoff
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.catalog import get_board
from server.services.errors import Conflict, Invalid, NotFound, PreconditionRequired, flush_or_conflict
from server.services.parts import get_part_revision
from server.services.rails import diff_documents, get_rail, normalize_document, revision_dict

__all__ = ["KEEP_PART", "PartRef", "create_rail", "save_rail", "delete_rail", "retire_rail", "restore_rail"]


class _Keep:
    def __repr__(self) -> str:
        return "KEEP_PART"


KEEP_PART: Any = _Keep()   # save_rail(part=KEEP_PART): the new revision pins the part the head pins


@dataclass(frozen=True)
class PartRef:
    """A pinned part: its id and revision number (None: the part's newest revision)."""

    id: int
    revision: int | None = None


def _after_new_revision(session: Session, actor: Actor, rail: Rail, revision: RailRevision, *,
                        previous: RailRevision | None) -> None:
    """What a new revision sets going in its own transaction: its analysis is queued, then the
    sign-off reacts (approvals of older revisions stale, the rail to its workflow's state), and the
    approvals of its board's power-up sequence go stale when the sequence uses the rail."""
    jobs.enqueue_for_revision(session, actor, rail, revision)
    signoff.on_new_revision(session, actor, rail, revision, previous=previous)
    sequences.on_rail_revision(session, actor, rail)


def _summary(doc: dict) -> dict:
    c_nom = document_capacitance(doc["load"], doc["environment"]["t_ambient"])
    return {"v_nom": doc["supply"]["v_nom"], "c_nom": c_nom, "load_model": doc["load"]["model"],
            "fet": doc["fet"]["name"]}


def _resolve_part(session: Session, actor: Actor, ref: PartRef | None) -> PartRevision | None:
    if ref is None:
        return None
    try:
        return get_part_revision(session=session, actor=actor, part_id=ref.id, n=ref.revision)
    except NotFound as exc:
        raise Invalid(exc.message, details=[{"field": "part", "message": exc.message}]) from None


def _document_with_part(data: Any, part_rev: PartRevision | None) -> dict[str, Any]:
    """Normalise ``data``; a pinned part supplies the FET, and an inline FET must match it."""
    if part_rev is not None and isinstance(data, dict) and data.get("fet") is None:
        data = {**data, "fet": part_rev.document}
    elif part_rev is not None and isinstance(data, dict) and isinstance(data.get("fet"), dict) \
            and set(data["fet"]) <= RAIL_FET_KEYS:
        # only the rail's own figures (the parallel count): the part supplies the rest
        data = {**data, "fet": {**part_rev.document, **data["fet"]}}
    doc = normalize_document(data)
    if part_rev is not None and part_data(doc["fet"]) != part_data(part_rev.document):
        message = (f"differs from part '{part_rev.document['name']}' revision {part_rev.n} that this rail uses: "
                   "edit the part in the library, or send part: null to use a FET of this rail's own")
        raise Invalid(f"fet {message}", details=[{"field": "document.fet", "message": message}])
    return doc


def create_rail(*, session: Session, actor: Actor, board_id: int, document: Any,
                part: PartRef | None = None, message: str = "") -> tuple[Rail, RailRevision]:
    """Create a rail on a board from its document: revision 1."""
    actor.require(Permission.EDIT)
    board = get_board(session=session, actor=actor, board_id=board_id)
    part_rev = _resolve_part(session, actor, part)
    doc = _document_with_part(document, part_rev)
    rail = Rail(board_id=board.id, name=doc["name"], mode=doc["switch"]["mode"], head_n=1, summary=_summary(doc),
                head_sha256=document_sha256(doc), part_id=part_rev.part_id if part_rev else None)
    session.add(rail)
    flush_or_conflict(session, f"board '{board.name}' has a rail named '{doc['name']}' already")
    rev = RailRevision(rail_id=rail.id, n=1, document=doc, sha256=rail.head_sha256,
                       part_revision_id=part_rev.id if part_rev else None, author_id=actor.user_id,
                       author_name=actor.name, message=message or "created")
    session.add(rev)
    session.flush()
    record(session, actor, action="create", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=board.product_id, after={"n": 1, "sha256": rev.sha256, "document": doc})
    _after_new_revision(session, actor, rail, rev, previous=None)
    session.commit()
    return rail, rev


def save_rail(*, session: Session, actor: Actor, rail_id: int, document: Any, base_sha256: str | None = None,
              base_n: int | None = None, part: PartRef | None | Any = KEEP_PART,
              message: str = "") -> tuple[Rail, RailRevision, bool]:
    """Save a new revision; returns (rail, revision, created). An unchanged document creates nothing."""
    actor.require(Permission.EDIT)
    if base_sha256 is None and base_n is None:
        raise PreconditionRequired(
            "say which revision your edit is based on: an If-Match header with its sha256, or base_revision")
    rail = get_rail(session=session, actor=actor, rail_id=rail_id, for_update=True)
    if rail.retired_at is not None:
        raise signoff.RailRetired(f"rail '{rail.name}' is retired: restore it before saving a new revision")
    head = session.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == rail.head_n))
    stale = (base_sha256 is not None and base_sha256 != rail.head_sha256) or \
            (base_n is not None and base_n != rail.head_n)
    if stale:
        raise Conflict(
            f"rail '{rail.name}' was saved as revision {head.n} by {head.author_name} after the revision your "
            "edit started from; nothing was saved. Merge your change into the current revision and save again.",
            extra={"current": revision_dict(head)})
    if part is KEEP_PART:
        part_rev = head.part_revision
    else:
        part_rev = _resolve_part(session, actor, part)
    doc = _document_with_part(document, part_rev)
    sha = document_sha256(doc)
    part_rev_id = part_rev.id if part_rev else None
    if sha == head.sha256 and part_rev_id == head.part_revision_id:
        session.rollback()
        return rail, head, False
    before = {"n": head.n, "sha256": head.sha256}
    rail.head_n, rail.head_sha256 = head.n + 1, sha
    rail.name, rail.mode, rail.updated_at = doc["name"], doc["switch"]["mode"], utcnow()
    rail.summary = _summary(doc)
    rail.part_id = part_rev.part_id if part_rev else None
    rev = RailRevision(rail_id=rail.id, n=rail.head_n, document=doc, sha256=sha, part_revision_id=part_rev_id,
                       author_id=actor.user_id, author_name=actor.name, message=message)
    session.add(rev)
    flush_or_conflict(session, f"rail '{rail.name}' was saved by someone else at the same moment, or its new name "
                       "is taken on this board; nothing was saved")
    record(session, actor, action="update", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=rail.board.product_id, before=before,
           after={"n": rev.n, "sha256": sha, "changes": diff_documents(head.document, doc)})
    _after_new_revision(session, actor, rail, rev, previous=head)
    session.commit()
    return rail, rev, True


def delete_rail(*, session: Session, actor: Actor, rail_id: int) -> None:
    """Delete a rail; its revisions, jobs, state, approvals and waivers go with it (stored results stay,
    keyed by document hash)."""
    actor.require(Permission.EDIT)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    record(session, actor, action="delete", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=rail.board.product_id, before={"n": rail.head_n, "sha256": rail.head_sha256})
    board_id, name = rail.board_id, rail.name
    session.delete(rail)
    sequences.on_rail_change(session, actor, board_id=board_id, reason=f"rail '{name}' was deleted")
    session.commit()


def retire_rail(*, session: Session, actor: Actor, rail_id: int, reason: str = "") -> Rail:
    """Retire a rail: kept with its history, hidden from lists, the queue and the risk view (editors)."""
    actor.require(Permission.EDIT)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id, for_update=True)
    if rail.retired_at is not None:
        raise Conflict(f"rail '{rail.name}' is retired already (by {rail.retired_by})")
    rail.retired_at, rail.retired_by = utcnow(), actor.name
    record(session, actor, action="retire", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=rail.board.product_id, after={"revision": rail.head_n, "reason": (reason or "").strip()[:1000]})
    sequences.on_rail_change(session, actor, board_id=rail.board_id, reason=f"rail '{rail.name}' was retired")
    session.commit()
    return rail


def restore_rail(*, session: Session, actor: Actor, rail_id: int) -> Rail:
    """Bring a retired rail back into the lists, the queue and the risk view (editors)."""
    actor.require(Permission.EDIT)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id, for_update=True)
    if rail.retired_at is None:
        raise Conflict(f"rail '{rail.name}' is not retired")
    before = {"retired_at": rail.retired_at.isoformat(), "retired_by": rail.retired_by}
    rail.retired_at, rail.retired_by = None, ""
    record(session, actor, action="restore", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=rail.board.product_id, before=before, after={"revision": rail.head_n})
    sequences.on_rail_change(session, actor, board_id=rail.board_id, reason=f"rail '{rail.name}' was restored")
    session.commit()
    return rail
