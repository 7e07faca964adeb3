"""Read models of the overview pages: rails with their head revision's verdict, per board and product.

One query per view, joining each rail's head revision to its stored nominal+corners result
at the current engine version (a rail whose head has no such result reads as not analysed;
``outdated`` counts apart those of them whose head has a result of another engine version,
waiting to be read again by the current one).
Only the parts of a result a view needs are read from the database (the checks, or the
start-up current), never whole results with their waveforms.

Provides :func:`home_products`, :func:`product_overview`, :func:`board_rails`,
:func:`active_job`, :func:`outdated_counts`.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.analysis.bank import document_capacitance
from server.models import AnalysisResult, Approval, Board, Job, Product, Rail, RailRevision, RailState, Waiver
from server.services import results, workflows
from server.services.access import Actor, scoped_products
from server.services.catalog import get_board, get_product
from server.services.engine_change import head_is_outdated
from server.services.result_parts import ResultKey, result_parts

__all__ = ["nominal_result_of_head", "verdicts_by_sha", "signoff_summary", "board_labels", "home_products",
           "product_overview", "board_rails", "active_job", "outdated_counts", "ATTENTION_LIMIT"]

ATTENTION_LIMIT = 12
_ACTIVE = ("queued", "running")


def nominal_result_of_head():
    """Join condition: the rail's head revision's nominal+corners result at the current engine version."""
    return ((AnalysisResult.sha256 == Rail.head_sha256)
            & (AnalysisResult.engine_version == results.engine_version())
            & (AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS)))


def verdicts_by_sha(session: Session, shas: list[str]) -> dict[str, str]:
    """The verdict of the nominal+corners result (current engine) of each revision hash that has one."""
    if not shas:
        return {}
    stmt = select(AnalysisResult.sha256, AnalysisResult.verdict).where(
        AnalysisResult.sha256.in_(set(shas)), AnalysisResult.engine_version == results.engine_version(),
        AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS))
    return dict(session.execute(stmt).all())


def signoff_summary(session: Session, *, team_id: int, board_id: int | None = None,
                    product_id: int | None = None) -> dict[int, dict[str, Any]]:
    """Each rail of a board (or of a product): its workflow state (and whether that counts as signed
    off), its approvals of the current revision, its stale approvals and the waivers of its current
    revision. Three queries however many rails."""
    wf = workflows.definition_for_team(session, team_id)
    rails = select(Rail.id, Rail.head_n).join(Board, Board.id == Rail.board_id).where(Rail.retired_at.is_(None))
    if board_id is not None:
        rails = rails.where(Rail.board_id == board_id)
    if product_id is not None:
        rails = rails.where(Board.product_id == product_id)
    scope = rails.subquery()
    out: dict[int, dict[str, Any]] = {}
    for rid, _head, state in session.execute(select(scope.c.id, scope.c.head_n, RailState.state)
                                             .outerjoin(RailState, RailState.rail_id == scope.c.id)):
        state = state if state is not None and wf.has_state(state) else wf.initial
        out[rid] = {"state": state, "signed_off": wf.is_signed_off(state), "approvals": 0, "stale": 0, "waivers": 0}
    for rid, n, head, stale_at in session.execute(
            select(Approval.rail_id, Approval.revision_n, scope.c.head_n, Approval.stale_at)
            .join(scope, scope.c.id == Approval.rail_id)):
        if stale_at is not None:
            out[rid]["stale"] += 1
        elif n == head:
            out[rid]["approvals"] += 1
    for rid, n, head in session.execute(select(Waiver.rail_id, Waiver.revision_n, scope.c.head_n)
                                        .join(scope, scope.c.id == Waiver.rail_id)):
        if n == head:
            out[rid]["waivers"] += 1
    return out


def outdated_counts(session: Session, *, product_ids: list[int] | None = None,
                    board_id: int | None = None) -> dict[int, dict[int, int]]:
    """Rails whose head revision has only results of another engine version: {product id: {board id: count}}.

    These rails also count as not analysed (``None``) in ``by_verdict``, which reads the current
    engine only; a page shows them apart as outdated.
    """
    stmt = (select(Board.product_id, Rail.board_id, func.count()).select_from(Rail)
            .join(Board, Board.id == Rail.board_id).where(head_is_outdated(), Rail.retired_at.is_(None))
            .group_by(Board.product_id, Rail.board_id))
    if product_ids is not None:
        if not product_ids:
            return {}
        stmt = stmt.where(Board.product_id.in_(product_ids))
    if board_id is not None:
        stmt = stmt.where(Rail.board_id == board_id)
    out: dict[int, dict[int, int]] = {}
    for pid, bid, n in session.execute(stmt):
        out.setdefault(pid, {})[bid] = n
    return out


def board_labels(*, session: Session, actor: Actor, board_ids: list[int]) -> dict[int, dict[str, Any]]:
    """Name, revision and product of boards the actor can see, by id."""
    if not board_ids:
        return {}
    stmt = select(Board.id, Board.name, Board.revision, Product.name.label("product")).join(
        Product, Product.id == Board.product_id)
    if not actor.all_teams:
        stmt = stmt.where(Product.team_id.in_(actor.team_ids or {-1}))
    rows = session.execute(stmt.where(Board.id.in_(set(board_ids)))).all()
    return {r.id: {"name": r.name, "revision": r.revision, "product": r.product} for r in rows}


def home_products(*, session: Session, actor: Actor) -> list[dict[str, Any]]:
    """The actor's products, each with its board count and its rails counted by verdict (None: not analysed)."""
    products = list(session.scalars(scoped_products(select(Product), actor).order_by(Product.name)))
    ids = [p.id for p in products]
    boards = dict(session.execute(select(Board.product_id, func.count()).where(Board.product_id.in_(ids))
                                  .group_by(Board.product_id)).all()) if ids else {}
    counts: dict[int, Counter] = {pid: Counter() for pid in ids}
    if ids:
        stmt = (select(Board.product_id, AnalysisResult.verdict, func.count())
                .select_from(Rail).join(Board, Board.id == Rail.board_id)
                .outerjoin(AnalysisResult, nominal_result_of_head())
                .where(Board.product_id.in_(ids), Rail.retired_at.is_(None))
                .group_by(Board.product_id, AnalysisResult.verdict))
        for pid, verdict, n in session.execute(stmt):
            counts[pid][verdict] += n
    outdated = outdated_counts(session, product_ids=ids)
    return [{"product": p, "boards": boards.get(p.id, 0), "rails": sum(counts[p.id].values()),
             "by_verdict": dict(counts[p.id]), "outdated": sum(outdated.get(p.id, {}).values())} for p in products]


def product_overview(*, session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    """A product's boards with their rails counted by verdict, and the rails that need attention first.

    Attention order: failing rails, then marginal ones, then rails never analysed at their
    current revision; at most :data:`ATTENTION_LIMIT` of them, each with its checks.
    """
    product = get_product(session=session, actor=actor, product_id=product_id)
    boards = list(session.scalars(select(Board).where(Board.product_id == product.id)
                                  .order_by(Board.name, Board.revision)))
    rows = session.execute(
        select(Rail.id, Rail.name, Rail.board_id, Rail.head_n, Rail.updated_at, AnalysisResult.verdict)
        .join(Board, Board.id == Rail.board_id).outerjoin(AnalysisResult, nominal_result_of_head())
        .where(Board.product_id == product.id, Rail.retired_at.is_(None))).all()
    per_board: dict[int, Counter] = {b.id: Counter() for b in boards}
    for r in rows:
        per_board[r.board_id][r.verdict] += 1
    rank = {"fail": 0, "marginal": 1, None: 2}
    needy = sorted((r for r in rows if r.verdict in rank), key=lambda r: (rank[r.verdict], r.name))
    needy = needy[:ATTENTION_LIMIT]
    checks = _checks_of([r.id for r in needy if r.verdict is not None], session)
    board_names = {b.id: f"{b.name} rev {b.revision}" for b in boards}
    attention = [{"rail_id": r.id, "name": r.name, "board_id": r.board_id, "board": board_names[r.board_id],
                  "verdict": r.verdict, "checks": checks.get(r.id, (None, []))[1],
                  "t_ambient": checks.get(r.id, (None, []))[0]} for r in needy]
    total = Counter()
    for c in per_board.values():
        total.update(c)
    outdated = outdated_counts(session, product_ids=[product.id]).get(product.id, {})
    return {"product": product, "boards": [{"board": b, "by_verdict": dict(per_board[b.id]),
                                            "rails": sum(per_board[b.id].values()), "outdated": outdated.get(b.id, 0)}
                                           for b in boards],
            "by_verdict": dict(total), "rails": len(rows), "attention": attention,
            "outdated": sum(outdated.values())}


def _checks_of(rail_ids: list[int], session: Session) -> dict[int, tuple[float | None, list[dict]]]:
    if not rail_ids:
        return {}
    stmt = (select(Rail.id, RailRevision.document["environment"], AnalysisResult.id, AnalysisResult.sha256,
                   AnalysisResult.created_at)
            .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
            .join(AnalysisResult, nominal_result_of_head()).where(Rail.id.in_(rail_ids)))
    rows = session.execute(stmt).all()
    parts = result_parts(session, [ResultKey(r[2], r[3], r[4]) for r in rows])
    return {r[0]: ((r[1] or {}).get("t_ambient"), parts[r[2]].checks if r[2] in parts else []) for r in rows}


def board_rails(*, session: Session, actor: Actor, board_id: int) -> dict[str, Any]:
    """A board and its rails: head revision summary, verdict, checks and when they were analysed.

    Each rail also carries ``startup`` (t, i) of its result for the supply budget, and
    ``outdated`` (engine version and verdict of its newest result of another engine) when the
    current engine has not read its head revision yet.
    """
    board = get_board(session=session, actor=actor, board_id=board_id)
    doc = RailRevision.document
    stmt = (select(Rail.id, Rail.name, Rail.mode, Rail.head_n, Rail.updated_at, doc["supply"], doc["load"],
                   doc["environment"], AnalysisResult.verdict, AnalysisResult.id, Rail.head_sha256,
                   AnalysisResult.created_at)
            .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
            .outerjoin(AnalysisResult, nominal_result_of_head())
            .where(Rail.board_id == board.id, Rail.retired_at.is_(None)).order_by(Rail.name))
    rows = session.execute(stmt).all()
    parts = result_parts(session, [ResultKey(r[9], r[10], r[11]) for r in rows if r[9] is not None])
    outdated = results.outdated_verdicts(session, [r[10] for r in rows if r[9] is None])
    rails = []
    for (rid, name, mode, head_n, updated_at, supply, load, env, verdict, result_id, sha,
         analysed_at) in rows:
        p = parts.get(result_id)
        rails.append({"id": rid, "name": name, "mode": mode, "head_n": head_n, "updated_at": updated_at,
                      "supply": supply or {}, "load": load or {}, "t_ambient": (env or {}).get("t_ambient"),
                      "c_load": document_capacitance(load or {}, (env or {}).get("t_ambient", 25.0)),
                      "verdict": verdict, "analysed_at": analysed_at, "checks": p.checks if p else [],
                      "startup": (p.t, p.i) if p and p.t and p.i else None,
                      "outdated": outdated.get(sha) if verdict is None else None})
    retired = [{"id": rid, "name": name, "head_n": n, "retired_at": at, "retired_by": by} for rid, name, n, at, by in
               session.execute(select(Rail.id, Rail.name, Rail.head_n, Rail.retired_at, Rail.retired_by)
                               .where(Rail.board_id == board.id, Rail.retired_at.is_not(None)).order_by(Rail.name))]
    return {"board": board, "product": board.product, "rails": rails, "retired": retired}


def active_job(*, session: Session, board_id: int, rail_id: int | None = None, kind: str | None = None,
               sha256: str | None = None) -> Job | None:
    """The newest queued or running job of a board (or of one rail of it), optionally of one kind."""
    stmt = select(Job).where(Job.board_id == board_id, Job.state.in_(_ACTIVE))
    if rail_id is None:
        stmt = stmt.where(Job.parent_id.is_(None))
    else:
        stmt = stmt.where(Job.rail_id == rail_id)
    if kind is not None:
        stmt = stmt.where(Job.kind == kind)
    if sha256 is not None:
        stmt = stmt.where(Job.sha256 == sha256)
    return session.scalar(stmt.order_by(Job.id.desc()).limit(1))


