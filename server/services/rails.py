"""Rails and their immutable revisions: create, save with conflict detection, list, diff.

A save names the revision it was based on (sha256 or number). When the rail has moved on
since, the save is refused with :class:`Conflict` carrying the current revision, and
nothing is written. On SQLite the write lock is taken at the start of the save
(:func:`server.db.begin_write`), on PostgreSQL the rail row is locked (``FOR UPDATE``);
the unique (rail, n) constraint backs both.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session, defer

from server.db import begin_write
from server.models import Board, Part, PartRevision, Rail, RailRevision, utcnow
from server.schemas.rail import document_sha256, normalize
from server.schemas.validation import DocumentInvalid, parse_rail_document
from server.services import revision_hooks
from server.services.access import Actor, Permission, scoped_rails
from server.services.audit import record
from server.services.catalog import get_board
from server.services.errors import Conflict, Invalid, NotFound, PreconditionRequired, flush_or_conflict
from server.services.parts import get_part_revision

__all__ = ["KEEP_PART", "PartRef", "normalize_document", "revision_dict", "rail_dict", "rail_dicts", "list_rails", "get_rail",
           "get_revision", "list_revisions", "create_rail", "save_rail", "delete_rail", "diff_documents",
           "diff_revisions",
           "part_status"]


class _Keep:
    def __repr__(self) -> str:
        return "KEEP_PART"


KEEP_PART: Any = _Keep()


@dataclass(frozen=True)
class PartRef:
    """A pinned part: its id and revision number (None: the part's newest revision)."""

    id: int
    revision: int | None = None


def normalize_document(data: Any, prefix: str = "document") -> dict[str, Any]:
    """Validate a rail document and return its canonical SI form (raises Invalid with field paths)."""
    try:
        return normalize(parse_rail_document(data, prefix))
    except DocumentInvalid as exc:
        raise Invalid(str(exc), details=[e.as_dict() for e in exc.errors]) from None


def revision_dict(rev: RailRevision, *, with_document: bool = True) -> dict:
    out = {"rail_id": rev.rail_id, "n": rev.n, "sha256": rev.sha256, "author": rev.author_name,
           "author_id": rev.author_id, "message": rev.message, "created_at": rev.created_at.isoformat(),
           "part_revision_id": rev.part_revision_id}
    if with_document:
        out["document"] = rev.document
    return out


def _part_statuses(session: Session, revs: list[RailRevision]) -> dict[int, dict]:
    """Pinned part of each revision (by part revision id), with two queries for any number of rails."""
    ids = {r.part_revision_id for r in revs if r.part_revision_id is not None}
    if not ids:
        return {}
    rows = session.execute(select(PartRevision.id, PartRevision.n, Part.id, Part.name, Part.head_n)
                           .join(Part, Part.id == PartRevision.part_id).where(PartRevision.id.in_(ids))).all()
    return {rid: {"id": pid, "name": name, "pinned_revision": n, "latest_revision": head_n,
                  "newer_available": head_n > n} for rid, n, pid, name, head_n in rows}


def part_status(session: Session, rev: RailRevision) -> dict | None:
    """The pinned part of a revision and whether the library holds a newer revision of it."""
    return _part_statuses(session, [rev]).get(rev.part_revision_id) if rev.part_revision_id else None


def _summary(doc: dict) -> dict:
    return {"v_nom": doc["supply"]["v_nom"], "c_nom": doc["load"]["c_nom"], "load_model": doc["load"]["model"],
            "fet": doc["fet"]["name"]}


def _rail_dict(rail: Rail, head: RailRevision, product_id: int, part: dict | None, with_document: bool) -> dict:
    out = {"id": rail.id, "board_id": rail.board_id, "product_id": product_id, "name": rail.name,
           "mode": rail.mode, "created_at": rail.created_at.isoformat(), "updated_at": rail.updated_at.isoformat(),
           "head": revision_dict(head, with_document=False), "summary": rail.summary, "part": part}
    if with_document:
        out["document"] = head.document
    return out


def rail_dict(session: Session, rail: Rail, head: RailRevision, *, with_document: bool = True) -> dict:
    return _rail_dict(rail, head, rail.board.product_id, part_status(session, head), with_document)


def rail_dicts(session: Session, rows: list[tuple[Rail, RailRevision]], *, with_document: bool = False) -> list[dict]:
    """``rail_dict`` for a list of (rail, head) pairs, with a fixed number of queries."""
    parts = _part_statuses(session, [head for _, head in rows])
    board_ids = {rail.board_id for rail, _ in rows}
    products = dict(session.execute(select(Board.id, Board.product_id).where(Board.id.in_(board_ids))).all()) \
        if board_ids else {}
    return [_rail_dict(rail, head, products[rail.board_id], parts.get(head.part_revision_id), with_document)
            for rail, head in rows]


def list_rails(*, session: Session, actor: Actor, product_id: int | None = None, board_id: int | None = None,
               mode: str | None = None, q: str | None = None, limit: int = 50, offset: int = 0,
               with_documents: bool = True) -> tuple[list[tuple[Rail, RailRevision]], int]:
    """Rails with their head revisions, filtered and paginated, ordered by board then name.

    ``with_documents=False`` leaves the revisions' documents unread (``Rail.summary`` has
    the figures a list shows); reading ``head.document`` then loads it on demand.
    """
    ids = scoped_rails(select(Rail.id), actor)
    if product_id is not None:
        if actor.all_teams:
            ids = ids.join(Board, Board.id == Rail.board_id)
        ids = ids.where(Board.product_id == product_id)
    if board_id is not None:
        ids = ids.where(Rail.board_id == board_id)
    if mode:
        ids = ids.where(Rail.mode == mode)
    if q:
        ids = ids.where(Rail.name.ilike(f"%{q}%"))
    total = session.scalar(select(func.count()).select_from(ids.subquery())) or 0
    # The page's ids first, in the order of the (board_id, name) unique index; then their heads.
    page = list(session.scalars(ids.order_by(Rail.board_id, Rail.name).limit(limit).offset(offset)))
    if not page:
        return [], total
    stmt = select(Rail, RailRevision).join(
        RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n)).where(Rail.id.in_(page))
    if not with_documents:
        stmt = stmt.options(defer(RailRevision.document))
    heads = {rail.id: (rail, head) for rail, head in session.execute(stmt).all()}
    return [heads[i] for i in page if i in heads], total


def get_rail(*, session: Session, actor: Actor, rail_id: int, for_update: bool = False) -> Rail:
    stmt = scoped_rails(select(Rail).where(Rail.id == rail_id), actor)
    if for_update:
        stmt = stmt.with_for_update(of=Rail)
    rail = session.scalar(stmt)
    if rail is None:
        raise NotFound(f"no rail {rail_id}")
    return rail


def get_revision(*, session: Session, actor: Actor, rail_id: int, n: int | None = None) -> RailRevision:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    wanted = rail.head_n if n is None else n
    rev = session.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == wanted))
    if rev is None:
        raise NotFound(f"rail {rail_id} has no revision {wanted}")
    return rev


def list_revisions(*, session: Session, actor: Actor, rail_id: int, limit: int = 50,
                   offset: int = 0) -> tuple[list[RailRevision], int]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    stmt = select(RailRevision).where(RailRevision.rail_id == rail.id)
    rows = session.scalars(stmt.order_by(RailRevision.n.desc()).limit(limit).offset(offset)).all()
    return list(rows), rail.head_n


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
    doc = normalize_document(data)
    if part_rev is not None and doc["fet"] != part_rev.document:
        message = (f"differs from part '{part_rev.document['name']}' revision {part_rev.n} that this rail uses: "
                   "edit the part in the library, or send part: null to use a FET of this rail's own")
        raise Invalid(f"fet {message}", details=[{"field": "document.fet", "message": message}])
    return doc


def create_rail(*, session: Session, actor: Actor, board_id: int, document: Any,
                part: PartRef | None = None, message: str = "") -> tuple[Rail, RailRevision]:
    """Create a rail on a board from its document: revision 1."""
    actor.require(Permission.EDIT)
    begin_write(session)
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
    revision_hooks.run(session, actor, rail, rev, previous=None)
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
    begin_write(session)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id, for_update=True)
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
    revision_hooks.run(session, actor, rail, rev, previous=head)
    session.commit()
    return rail, rev, True


def delete_rail(*, session: Session, actor: Actor, rail_id: int) -> None:
    actor.require(Permission.EDIT)
    begin_write(session)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    record(session, actor, action="delete", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=rail.board.product_id, before={"n": rail.head_n, "sha256": rail.head_sha256})
    session.delete(rail)
    session.commit()


def _flatten(value: Any, path: str, out: dict[str, Any]) -> None:
    if isinstance(value, dict):
        for key in value:
            _flatten(value[key], f"{path}.{key}" if path else key, out)
    elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        for k, item in enumerate(value):
            _flatten(item, f"{path}[{k}]", out)
    else:
        out[path] = value


def diff_documents(old: dict, new: dict) -> list[dict]:
    """Field-level changes from ``old`` to ``new``: [{field, change, old, new}], in document order."""
    a: dict[str, Any] = {}
    b: dict[str, Any] = {}
    _flatten(old, "", a)
    _flatten(new, "", b)
    changes = []
    for field in list(a) + [f for f in b if f not in a]:
        if field not in b:
            changes.append({"field": field, "change": "removed", "old": a[field], "new": None})
        elif field not in a:
            changes.append({"field": field, "change": "added", "old": None, "new": b[field]})
        elif a[field] != b[field]:
            changes.append({"field": field, "change": "changed", "old": a[field], "new": b[field]})
    return changes


def diff_revisions(*, session: Session, actor: Actor, rail_id: int, from_n: int, to_n: int) -> dict:
    old = get_revision(session=session, actor=actor, rail_id=rail_id, n=from_n)
    new = get_revision(session=session, actor=actor, rail_id=rail_id, n=to_n)
    return {"rail_id": rail_id, "from": revision_dict(old, with_document=False),
            "to": revision_dict(new, with_document=False), "changes": diff_documents(old.document, new.document)}


