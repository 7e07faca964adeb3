"""The shared part library: MOSFET entries whose document is the rail document's ``fet``.

Every save makes a new immutable part revision; rails pin the revision they used.
"""

from __future__ import annotations

import re
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.analysis import DocumentError
from server.analysis.soa import ENVELOPE, soa_curve_warnings
from server.analysis.zth_fit import ZthFit, fit_zth
from server.models import Part, PartRevision, Rail, RailRevision, utcnow
from server.schemas.rail import document_sha256, part_document
from server.schemas.validation import DocumentInvalid, parse_fet
from server.services.access import Actor, Permission, scoped_rails
from server.services.audit import record
from server.services.errors import Conflict, Invalid, NotFound, flush_or_conflict
from server.units import UnitError, parse_quantity

__all__ = ["normalize_fet", "part_dict", "part_revision_dict", "list_parts", "get_part", "get_part_revision",
           "list_part_revisions", "create_part", "save_part", "part_usage", "soa_warnings", "SOA_ENVELOPE",
           "zth_points_from_text", "fit_zth_points"]

SOA_ENVELOPE = ENVELOPE
_SPLIT = re.compile(r"\s*[,;\t]\s*")


def normalize_fet(data: Any, prefix: str = "document") -> dict[str, Any]:
    """Validate a FET document and return its canonical SI form (raises Invalid)."""
    try:
        fet = parse_fet(data, prefix)
    except DocumentInvalid as exc:
        raise Invalid(str(exc), details=[e.as_dict() for e in exc.errors]) from None
    return part_document(fet)


def part_revision_dict(rev: PartRevision, *, with_document: bool = True) -> dict:
    out = {"part_id": rev.part_id, "n": rev.n, "sha256": rev.sha256, "author": rev.author_name,
           "message": rev.message, "created_at": rev.created_at.isoformat()}
    if with_document:
        out["document"] = rev.document
    return out


def part_dict(part: Part, head: PartRevision | None = None) -> dict:
    out = {"id": part.id, "name": part.name, "kind": part.kind, "head_n": part.head_n,
           "created_at": part.created_at.isoformat(), "updated_at": part.updated_at.isoformat()}
    if head is not None:
        out["head"] = part_revision_dict(head)
    return out


def list_parts(*, session: Session, actor: Actor, q: str | None = None, limit: int = 50,
               offset: int = 0) -> tuple[list[Part], int]:
    actor.require(Permission.READ)
    stmt = select(Part)
    if q:
        stmt = stmt.where(Part.name.ilike(f"%{q}%"))
    total = session.scalar(select(func.count()).select_from(stmt.subquery())) or 0
    return list(session.scalars(stmt.order_by(Part.name).limit(limit).offset(offset))), total


def get_part(*, session: Session, actor: Actor, part_id: int) -> Part:
    actor.require(Permission.READ)
    part = session.get(Part, part_id)
    if part is None:
        raise NotFound(f"no part {part_id}")
    return part


def get_part_revision(*, session: Session, actor: Actor, part_id: int, n: int | None = None) -> PartRevision:
    part = get_part(session=session, actor=actor, part_id=part_id)
    rev = session.scalar(select(PartRevision).where(PartRevision.part_id == part.id,
                                                    PartRevision.n == (n if n is not None else part.head_n)))
    if rev is None:
        raise NotFound(f"part {part_id} has no revision {n}")
    return rev


def list_part_revisions(*, session: Session, actor: Actor, part_id: int) -> list[PartRevision]:
    """Every revision of a part, newest first."""
    part = get_part(session=session, actor=actor, part_id=part_id)
    return list(session.scalars(select(PartRevision).where(PartRevision.part_id == part.id)
                                .order_by(PartRevision.n.desc())))


def create_part(*, session: Session, actor: Actor, document: Any, message: str = "") -> PartRevision:
    """Create a part from its FET document (its name is the document's ``name``): revision 1."""
    actor.require(Permission.EDIT)
    fet = normalize_fet(document)
    part = Part(name=fet["name"], head_n=1)
    session.add(part)
    flush_or_conflict(session, f"a part named '{fet['name']}' exists already")
    rev = PartRevision(part_id=part.id, n=1, document=fet, sha256=document_sha256(fet), author_id=actor.user_id,
                       author_name=actor.name, message=message or "created")
    session.add(rev)
    record(session, actor, action="create", object_type="part", object_id=part.id, object_repr=part.name,
           after={"n": 1, "sha256": rev.sha256, "document": fet})
    session.commit()
    return rev


def save_part(*, session: Session, actor: Actor, part_id: int, document: Any, base_n: int,
              message: str = "") -> PartRevision:
    """Save a new revision of a part; ``base_n`` must be its head (else Conflict)."""
    actor.require(Permission.EDIT)
    fet = normalize_fet(document)
    part = get_part(session=session, actor=actor, part_id=part_id)
    head = get_part_revision(session=session, actor=actor, part_id=part_id)
    if base_n != part.head_n:
        raise Conflict(f"part '{part.name}' was saved as revision {part.head_n} since your revision {base_n}",
                       extra={"current": part_revision_dict(head)})
    sha = document_sha256(fet)
    if sha == head.sha256:
        return head
    if fet["name"] != part.name:
        part.name = fet["name"]
    part.head_n += 1
    part.updated_at = utcnow()
    rev = PartRevision(part_id=part.id, n=part.head_n, document=fet, sha256=sha, author_id=actor.user_id,
                       author_name=actor.name, message=message)
    session.add(rev)
    flush_or_conflict(session, f"part '{part.name}' was saved by someone else at the same moment")
    record(session, actor, action="update", object_type="part", object_id=part.id, object_repr=part.name,
           before={"n": head.n, "sha256": head.sha256}, after={"n": rev.n, "sha256": sha})
    session.commit()
    return rev


def part_usage(*, session: Session, actor: Actor, part_id: int) -> list[dict]:
    """Which rails (that the actor can see) use which revision of this part, head revisions only."""
    stmt = scoped_rails(
        select(Rail.id, Rail.name, Rail.board_id, PartRevision.n)
        .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
        .join(PartRevision, PartRevision.id == RailRevision.part_revision_id)
        .where(PartRevision.part_id == part_id), actor)
    return [{"rail_id": r.id, "rail_name": r.name, "board_id": r.board_id, "part_revision": r.n}
            for r in session.execute(stmt.order_by(Rail.name))]


def soa_warnings(fet: dict[str, Any]) -> list[dict[str, str]]:
    """Where the analysis reads a part's SOA curves lower than drawn (crossing curves, a current rising with
    V_DS): ``[{"field": "fet.soa.curves[k]...", "message": sentence}]``, empty for a chart that does neither."""
    return [{"field": path, "message": message} for path, message in soa_curve_warnings(fet)]


def zth_points_from_text(text: str, field: str = "zth_points") -> list[list[float]]:
    """[t s, Zth K/W] points from pasted text or a CSV file: one "t, Zth" pair a line (comma, semicolon,
    tab or spaces between), units allowed ("20 us", "0.3 K/W"); a first line without digits is a header,
    lines starting with # are skipped. Raises Invalid naming ``field`` and the line of every problem."""
    points, problems = [], []
    for n, line in enumerate(text.splitlines(), start=1):
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        if not points and not problems and not re.search(r"\d", line):
            continue  # header
        cells = [c for c in (_SPLIT.split(line) if _SPLIT.search(line) else line.split()) if c]
        if len(cells) != 2:
            problems.append(f"line {n}: expected two values, t and Zth, got {len(cells)} ('{line[:40]}')")
            continue
        try:
            points.append([parse_quantity(cells[0], "s"), parse_quantity(cells[1], "K/W")])
        except UnitError as exc:
            problems.append(f"line {n}: {exc}")
    if problems:
        raise Invalid("; ".join(problems), details=[{"field": field, "message": "; ".join(problems)}])
    return points


def fit_zth_points(points: Any, n_stages: int, rth_ja: float | None, board_tau: float | None = None) -> ZthFit:
    """Foster stages fitted to Zth points, with the board stage (`server.analysis.zth_fit.fit_zth`);
    bad input raises Invalid whose details name the field (``fet.zth_points[3]``, ``fet.rth_ja``...)."""
    try:
        return fit_zth(points, n_stages, rth_ja=rth_ja, board_tau=board_tau)
    except DocumentError as exc:
        raise Invalid(str(exc), details=[{"field": e.field, "message": e.reason} for e in exc.errors]) from None
