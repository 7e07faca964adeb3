"""Rails and their immutable revisions as the actor may see them: scoped getters, lists, diffs.

The lookups of the rail service: nothing here writes. Creating, saving and deleting rails is
:mod:`server.services.rail_edits`, which sits above the job queue and the sign-off service;
those, and everything else that needs to find a rail, import this module.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session, defer

from server.analysis.bounds import plausibility_warnings
from server.analysis.soa import soa_curve_warnings
from server.analysis.words import FIELD_TITLES
from server.models import Board, Part, PartRevision, Rail, RailRevision
from server.schemas.rail import normalize
from server.schemas.validation import DocumentInvalid, parse_rail_document
from server.services.access import Actor, scoped_rails
from server.services.errors import Invalid, NotFound
from server.units import format_quantity

__all__ = ["normalize_document", "revision_dict", "rail_dict", "rail_dicts", "list_rails", "get_rail",
           "get_revision", "list_revisions", "diff_documents", "diff_revisions", "part_status",
           "input_sections"]


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


def _rail_dict(rail: Rail, head: RailRevision, product_id: int, part: dict | None, with_document: bool) -> dict:
    out = {"id": rail.id, "board_id": rail.board_id, "product_id": product_id, "name": rail.name,
           "mode": rail.mode, "created_at": rail.created_at.isoformat(), "updated_at": rail.updated_at.isoformat(),
           "head": revision_dict(head, with_document=False), "summary": rail.summary, "part": part,
           "retired": rail.retired_at is not None,
           "retired_at": rail.retired_at.isoformat() if rail.retired_at else None, "retired_by": rail.retired_by or None}
    if with_document:
        out["document"] = head.document
        out["warnings"] = document_warnings(head.document)
    return out


def document_warnings(document: dict[str, Any]) -> list[dict[str, str]]:
    """The computable but implausible values of a stored document (the bounds table of the analysis core),
    then where the analysis reads its SOA curves lower than drawn (crossing curves, a current rising with
    V_DS: the conservative envelope)."""
    found = plausibility_warnings(document) + soa_curve_warnings(document["fet"])
    return [{"field": path, "message": message} for path, message in found]


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
               with_documents: bool = True, retired: bool = False) -> tuple[list[tuple[Rail, RailRevision]], int]:
    """Rails with their head revisions, filtered and paginated, ordered by board then name.

    ``with_documents=False`` leaves the revisions' documents unread (``Rail.summary`` has
    the figures a list shows); reading ``head.document`` then loads it on demand.
    """
    ids = scoped_rails(select(Rail.id), actor)
    ids = ids.where(Rail.retired_at.is_not(None) if retired else Rail.retired_at.is_(None))
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


# The inputs listed on the rail page and in the sign-off report: (section path, the fields shown); titles and unit kinds
# come from FIELD_TITLES, the one table of words of the rail document.
_INPUTS: list[tuple[str, tuple[str, ...]]] = [
    ("supply", ("v_min", "v_nom", "v_max", "r_source", "l_source", "i_max", "uvlo", "uvlo_filter", "c_in", "v_clamp")),
    ("path", ("r", "l")),
    ("load", ("c_nom", "c_tol", "esr", "model", "i_nom", "v_on")),
    ("switch", ("mode", "t_on", "dvdt", "i_limit", "i_limit_tol", "p_limit", "foldback", "loop_response",
                "fast_trip", "fast_trip_delay")),
    ("switch.timer", ("c", "c_tol", "i_charge", "i_charge_tol", "v_trip", "v_trip_tol", "after_fault", "retry_off",
                      "retries")),
    ("switch.gate", ("drive", "i_gate", "v_drive", "r_gate", "c_ext")),
    ("environment", ("t_ambient",)),
    ("fet", ("name", "vds_max", "id_pulse_max", "e_avalanche", "rds_on", "rds_on_max", "rds_on_alpha", "tj_max",
             "rth_ja", "count")),
    ("fet.gate", ("v_th", "k", "g_fs", "i_gfs", "c_iss", "c_rss")),
]
_SHOWN_WHEN_GIVEN = ("switch.gate", "fet.gate")  # sections listed only where the document has them


def _section(document: dict[str, Any], path: str) -> dict[str, Any] | None:
    node: Any = document
    for key in path.split("."):
        node = node.get(key) if isinstance(node, dict) else None
    return node


def _items(section: dict[str, Any], path: str, keys: tuple[str, ...]) -> list[tuple[str, str]]:
    out = []
    for key in keys:
        value = section.get(key)
        if value is None:
            continue
        words = FIELD_TITLES[f"{path}.{key}"]
        if f"{path}.{key}" == "switch.foldback":
            out.append((words.title, "; ".join(f"{format_quantity(v, 'V')}: {format_quantity(i, 'A')}"
                                               for v, i in value)))
            continue
        out.append((words.title, str(value).replace("_", " ") if words.kind is None else format_quantity(value, words.kind)))
    return out


def input_sections(document: dict[str, Any]) -> list[dict[str, Any]]:
    """The inputs of a rail, grouped, titled and in engineering notation (fields left unset are left out)."""
    sections = []
    for path, keys in _INPUTS:
        section = _section(document, path)
        title = FIELD_TITLES[path].title
        if path == "switch.timer" and not section:
            sections.append({"title": title, "items": [(title, "none")]})
            continue
        if path in _SHOWN_WHEN_GIVEN and not section:
            continue
        items = _items(section or {}, path, keys)
        if path == "fet" and (section or {}).get("rds_on_curve"):
            items.append(_rds_curve_item(section["rds_on_curve"]))
        sections.append({"title": title, "items": items})
    return sections


def _rds_curve_item(points: list) -> tuple[str, str]:
    """The R_DS(on) table over temperature as one line: "25 °C: 1, 100 °C: 1.45, ..."."""
    text = ", ".join(f"{format_quantity(t, 'degC')}: {k:.4g}" for t, k in points)
    return FIELD_TITLES["fet.rds_on_curve"].title, f"{text} (R_DS(on) / R_DS(on) at 25 \u00b0C)"
