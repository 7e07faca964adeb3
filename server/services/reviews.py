"""Review assignments (their one write path) and the review queue: what awaits each reviewer.

A reviewer is assigned to one rail or to every rail of a board (by a manager or an admin, or
by themself: taking a rail from the team queue). A rail *awaits review* while it stands in a
state that one of its workflow's transitions leaves demanding more approvals of the current
revision than it has. The queue of a reviewer lists, oldest first (by the time the rail
entered its state):

- ``assigned``: rails awaiting review assigned to them (directly or through their board);
- ``team``: rails of their teams awaiting review that nobody is assigned to (the team queue).

Neither ever offers a reviewer a revision they authored, a rail they already approved at its
current revision, nor a retired rail. Each entry carries its verdict, its failing and marginal
checks (the stored records), and, for the entries of the page, what changed since the last
approved revision: its inputs (field by field) and its results (check by check). Everything is
read with a fixed number of queries for the list; the changes are read for the page only.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

from sqlalchemy import and_, or_, select
from sqlalchemy.orm import Session, aliased

from server.models import (AnalysisResult, Approval, Board, Product, Rail, RailRevision, RailState, ReviewAssignment,
                           Team, User, Waiver)
from server.services import results, workflows
from server.services.access import Actor, Permission
from server.services.audit import record
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict
from server.services.governance import rules_for_team
from server.services.rails import diff_documents, get_rail
from server.services.result_parts import ResultKey, result_parts
from server.services.signoff import covering_waivers
from server.workflow import SEVERITY, ApprovalFact, RailFacts, counted_approvers

__all__ = ["assign", "unassign", "list_assignments", "assignment_dict", "team_reviewers", "review_queue",
           "QUEUE_PAGE"]

QUEUE_PAGE = 50


# --- assignments ---------------------------------------------------------------------------


def assignment_dict(a: ReviewAssignment, reviewer: str, target: str) -> dict[str, Any]:
    return {"id": a.id, "reviewer_id": a.reviewer_id, "reviewer": reviewer, "rail_id": a.rail_id,
            "board_id": a.board_id, "target": target, "assigned_by": a.assigned_by,
            "created_at": a.created_at.isoformat()}


def _board(session: Session, actor: Actor, board_id: int) -> tuple[Board, int]:
    row = session.execute(select(Board, Product.team_id).join(Product, Product.id == Board.product_id)
                          .where(Board.id == board_id)).first()
    if row is None or not actor.sees_team(row[1]):
        raise NotFound(f"no board {board_id}")
    return row[0], row[1]


def _target(session: Session, actor: Actor, rail_id: int | None, board_id: int | None) -> tuple[str, int, int | None]:
    """(words naming the target, its team id, its product id)."""
    if (rail_id is None) == (board_id is None):
        raise Invalid("assign a reviewer to a rail or to a board (one of the two)",
                      details=[{"field": "rail_id", "message": "give rail_id or board_id, not both"}])
    if rail_id is not None:
        rail = get_rail(session=session, actor=actor, rail_id=rail_id)
        team_id, product_id = workflows.team_of_rail(session, rail)
        return f"rail {rail.name}", team_id, product_id
    board, team_id = _board(session, actor, board_id)
    return f"board {board.name} rev {board.revision}", team_id, board.product_id


def assign(*, session: Session, actor: Actor, reviewer_id: int | None = None, rail_id: int | None = None,
           board_id: int | None = None) -> dict[str, Any]:
    """Assign a reviewer of the team to a rail or a board. Managers and admins assign anyone; a reviewer
    assigns only themself (taking a rail or a board from the team queue)."""
    reviewer_id = actor.user_id if reviewer_id is None else reviewer_id
    if not (actor.can(Permission.RISK) or actor.can(Permission.ADMIN)):
        actor.require(Permission.REVIEW)
        if reviewer_id != actor.user_id:
            raise Forbidden("a reviewer takes reviews for themself; managers and admins assign others")
    what, team_id, product_id = _target(session, actor, rail_id, board_id)
    reviewer = session.get(User, reviewer_id) if reviewer_id is not None else None
    if reviewer is None or not reviewer.active or team_id not in reviewer.team_ids:
        raise Invalid(f"user {reviewer_id} is not an active member of the team of {what}",
                      details=[{"field": "reviewer_id", "message": "is not an active member of the team"}])
    if reviewer.role != "reviewer":
        raise Invalid(f"{reviewer.username} is a {reviewer.role}: only reviewers are assigned reviews",
                      details=[{"field": "reviewer_id", "message": "is not a reviewer"}])
    exists = session.scalar(select(ReviewAssignment.id).where(
        ReviewAssignment.reviewer_id == reviewer.id,
        ReviewAssignment.rail_id.is_(None) if rail_id is None else ReviewAssignment.rail_id == rail_id,
        ReviewAssignment.board_id.is_(None) if board_id is None else ReviewAssignment.board_id == board_id))
    if exists is not None:
        raise Conflict(f"{reviewer.username} is assigned to {what} already")
    row = ReviewAssignment(reviewer_id=reviewer.id, rail_id=rail_id, board_id=board_id, assigned_by=actor.name)
    session.add(row)
    flush_or_conflict(session, f"{reviewer.username} is assigned to {what} already")
    record(session, actor, action="assign_review", object_type="rail" if rail_id else "board",
           object_id=rail_id or board_id, object_repr=what, product_id=product_id,
           after={"assignment": row.id, "reviewer": reviewer.username, "reviewer_id": reviewer.id})
    session.commit()
    return assignment_dict(row, reviewer.username, what)


def unassign(*, session: Session, actor: Actor, assignment_id: int) -> None:
    """End an assignment (managers and admins; a reviewer ends their own)."""
    row = session.get(ReviewAssignment, assignment_id)
    if row is None:
        raise NotFound(f"no review assignment {assignment_id}")
    what, _team, product_id = _target(session, actor, row.rail_id, row.board_id)   # not found outside the team
    if not (actor.can(Permission.RISK) or actor.can(Permission.ADMIN)):
        actor.require(Permission.REVIEW)
        if row.reviewer_id != actor.user_id:
            raise Forbidden("a reviewer ends only their own assignments")
    record(session, actor, action="unassign_review", object_type="rail" if row.rail_id else "board",
           object_id=row.rail_id or row.board_id, object_repr=what, product_id=product_id,
           before={"assignment": row.id, "reviewer_id": row.reviewer_id})
    session.delete(row)
    session.commit()


def list_assignments(*, session: Session, actor: Actor, rail_id: int | None = None,
                     board_id: int | None = None) -> list[dict[str, Any]]:
    """The assignments of a rail (its own and its board's) or of a board."""
    if rail_id is not None:
        rail = get_rail(session=session, actor=actor, rail_id=rail_id)
        cond = or_(ReviewAssignment.rail_id == rail.id, ReviewAssignment.board_id == rail.board_id)
        names = {("rail", rail.id): f"rail {rail.name}"}
        board_name = f"board {rail.board.name} rev {rail.board.revision}"
        names[("board", rail.board_id)] = board_name
    elif board_id is not None:
        board, _ = _board(session, actor, board_id)
        cond = ReviewAssignment.board_id == board.id
        names = {("board", board.id): f"board {board.name} rev {board.revision}"}
    else:
        raise Invalid("name a rail or a board", details=[{"field": "rail_id", "message": "is required"}])
    rows = session.execute(select(ReviewAssignment, User.username).join(User, User.id == ReviewAssignment.reviewer_id)
                           .where(cond).order_by(ReviewAssignment.id)).all()
    return [assignment_dict(a, name, names[("rail", a.rail_id) if a.rail_id else ("board", a.board_id)])
            for a, name in rows]


def team_reviewers(*, session: Session, actor: Actor, team_id: int) -> list[dict[str, Any]]:
    """The active reviewers of one of the actor's teams, by name (what an assignment form offers)."""
    if not actor.sees_team(team_id):
        raise NotFound(f"no team {team_id}")
    rows = session.scalars(select(User).where(User.role == "reviewer", User.active.is_(True)).order_by(User.username))
    return [{"id": u.id, "name": u.username} for u in rows if team_id in u.team_ids]


# --- the queue -------------------------------------------------------------------------------


def _worst_by_check(checks: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    worst: dict[str, dict[str, Any]] = {}
    for c in checks:
        cid = str(c.get("id"))
        if cid not in worst or SEVERITY.get(str(c.get("verdict")), 3) > SEVERITY.get(str(worst[cid].get("verdict")), 3):
            worst[cid] = c
    return worst


def _check_brief(c: dict[str, Any], waiver: Any = None) -> dict[str, Any]:
    out = {"id": str(c.get("id")), "title": c.get("title", ""), "verdict": c.get("verdict"), "value": c.get("value"),
           "limit": c.get("limit"), "unit": c.get("unit"), "margin": c.get("margin"), "corner": c.get("corner")}
    if waiver is not None:
        out["waived_by"] = waiver.reviewer_name
    return out


def _changes(session: Session, entries: list[dict[str, Any]], rows: dict[int, Any]) -> None:
    """Fill ``changes`` of each entry: inputs and results since the newest approved earlier revision."""
    since: dict[int, int] = {}
    for rail_id, n in session.execute(
            select(Approval.rail_id, Approval.revision_n).where(Approval.rail_id.in_([e["rail"]["id"] for e in entries]))):
        if n < rows[rail_id].head_n and n > since.get(rail_id, 0):
            since[rail_id] = n
    wanted = [(rid, n) for rid, n in since.items()] + [(e["rail"]["id"], rows[e["rail"]["id"]].head_n)
                                                       for e in entries if e["rail"]["id"] in since]
    docs: dict[tuple[int, int], tuple[dict, str]] = {}
    if wanted:
        cond = or_(*[and_(RailRevision.rail_id == rid, RailRevision.n == n) for rid, n in wanted])
        for rid, n, doc, sha in session.execute(select(RailRevision.rail_id, RailRevision.n, RailRevision.document,
                                                       RailRevision.sha256).where(cond)):
            docs[(rid, n)] = (doc, sha)
    shas = [sha for _doc, sha in docs.values()]
    stored = {}
    if shas:
        stmt = select(AnalysisResult.id, AnalysisResult.sha256, AnalysisResult.created_at).where(
            AnalysisResult.sha256.in_(shas), AnalysisResult.engine_version == results.engine_version(),
            AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS))
        keys = [ResultKey(i, s, t) for i, s, t in session.execute(stmt)]
        parts = result_parts(session, keys)
        stored = {k.sha256: parts[k.id] for k in keys if k.id in parts}
    for e in entries:
        rid = e["rail"]["id"]
        if rid not in since:
            e["changes"] = {"since": None, "inputs": [], "results": []}
            continue
        old, new = docs.get((rid, since[rid])), docs.get((rid, rows[rid].head_n))
        inputs = diff_documents(old[0], new[0]) if old and new else []
        result_changes = []
        if old and new and old[1] in stored and new[1] in stored:
            a, b = _worst_by_check(stored[old[1]].checks), _worst_by_check(stored[new[1]].checks)
            for cid in list(b) + [c for c in a if c not in b]:
                before, after = a.get(cid), b.get(cid)
                if before is None or after is None or before.get("verdict") != after.get("verdict") \
                        or before.get("value") != after.get("value"):
                    result_changes.append({"id": cid, "title": (after or before).get("title", ""),
                                           "old_verdict": before.get("verdict") if before else None,
                                           "new_verdict": after.get("verdict") if after else None,
                                           "old_value": before.get("value") if before else None,
                                           "new_value": after.get("value") if after else None,
                                           "unit": (after or before).get("unit")})
        e["changes"] = {"since": since[rid], "inputs": inputs, "results": result_changes,
                        "results_known": bool(old and new and old[1] in stored and new[1] in stored)}


def review_queue(*, session: Session, actor: Actor, limit: int = QUEUE_PAGE) -> dict[str, Any]:
    """The rails awaiting the actor's review (``assigned``) and the team queue (``team``), oldest first.

    Reviewers only; each list holds at most ``limit`` entries (``totals`` counts them all); the
    entries shown carry what changed since the last approved revision.
    """
    actor.require(Permission.REVIEW)
    team_ids = [t for t in actor.team_ids] if not actor.all_teams else \
        list(session.scalars(select(Team.id)))
    if not team_ids:
        return {"assigned": [], "team": [], "totals": {"assigned": 0, "team": 0}}
    flows = {t: workflows.definition_for_team(session, t) for t in team_ids}
    rules = {t: rules_for_team(session, t) for t in team_ids}
    # the states a transition leaves demanding approvals, per team
    waiting_states = {t: {s.name: max((tr.demands.approvals for tr in wf.transitions_from(s.name)), default=0)
                          for s in wf.states if not wf.is_signed_off(s.name)} for t, wf in flows.items()}
    candidate_states = {name for states in waiting_states.values() for name, n in states.items() if n > 0}
    if not candidate_states:
        return {"assigned": [], "team": [], "totals": {"assigned": 0, "team": 0}}
    head = aliased(RailRevision)
    current = (AnalysisResult.sha256 == Rail.head_sha256) & \
              (AnalysisResult.engine_version == results.engine_version()) & \
              (AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS))
    in_scope = (Product.team_id.in_(team_ids), Rail.retired_at.is_(None), RailState.state.in_(candidate_states))
    stmt = (select(Rail.id, Rail.name, Rail.head_n, Rail.head_sha256, Rail.board_id, Board.name.label("board_name"),
                   Board.revision.label("board_revision"), Product.id.label("product_id"),
                   Product.name.label("product_name"), Product.team_id, RailState.state, RailState.since,
                   head.author_id, head.author_name, head.created_at.label("saved_at"),
                   AnalysisResult.id.label("result_id"), AnalysisResult.verdict, AnalysisResult.created_at.label("result_at"))
            .join(Board, Board.id == Rail.board_id).join(Product, Product.id == Board.product_id)
            .join(RailState, RailState.rail_id == Rail.id)
            .join(head, (head.rail_id == Rail.id) & (head.n == Rail.head_n))
            .outerjoin(AnalysisResult, current)
            .where(*in_scope).order_by(RailState.since, Rail.id))
    rows = [r for r in session.execute(stmt)
            if waiting_states[r.team_id].get(r.state, 0) > 0 and r.author_id != actor.user_id
            and not (r.author_id is None and r.author_name == actor.name)]
    # the rails of the same scope, as a subquery (no list of ids to bind)
    scope = (select(Rail.id).join(Board, Board.id == Rail.board_id).join(Product, Product.id == Board.product_id)
             .join(RailState, RailState.rail_id == Rail.id).where(*in_scope))
    approvals: dict[int, list[ApprovalFact]] = defaultdict(list)
    waivers: dict[int, list[Any]] = defaultdict(list)
    mine: dict[int, str] = {}
    assigned_any: set[int] = set()
    if rows:
        for rail_id, reviewer_id, name, n, stale in session.execute(
                select(Approval.rail_id, Approval.reviewer_id, Approval.reviewer_name, Approval.revision_n,
                       Approval.stale_at.is_not(None)).where(Approval.rail_id.in_(scope))):
            approvals[rail_id].append(ApprovalFact(reviewer_id, name, n, bool(stale)))
        # the columns the queue reads of each waiver of a head revision (rows, not loaded objects)
        for w in session.execute(select(Waiver.rail_id, Waiver.revision_n, Waiver.check_id, Waiver.verdict,
                                        Waiver.reviewer_id, Waiver.reviewer_name)
                                 .join(Rail, (Rail.id == Waiver.rail_id) & (Waiver.revision_n == Rail.head_n))
                                 .where(Waiver.rail_id.in_(scope)).order_by(Waiver.id)):
            waivers[w.rail_id].append(w)
        by_board: dict[int, list[int]] = defaultdict(list)
        for r in rows:
            by_board[r.board_id].append(r.id)
        board_scope = select(Board.id).join(Product, Product.id == Board.product_id).where(Product.team_id.in_(team_ids))
        for reviewer_id, rail_id, board_id in session.execute(
                select(ReviewAssignment.reviewer_id, ReviewAssignment.rail_id, ReviewAssignment.board_id)
                .where(or_(ReviewAssignment.rail_id.in_(scope), ReviewAssignment.board_id.in_(board_scope)))):
            targets = [rail_id] if rail_id is not None else by_board.get(board_id, [])
            for t in targets:
                assigned_any.add(t)
                if reviewer_id == actor.user_id:
                    if rail_id is not None:
                        mine[t] = "rail"
                    else:
                        mine.setdefault(t, "board")
    parts = result_parts(session, [ResultKey(r.result_id, r.head_sha256, r.result_at)
                                   for r in rows if r.result_id is not None])
    assigned, team = [], []
    totals = {"assigned": 0, "team": 0}
    for r in rows:
        rail_approvals = approvals.get(r.id, ())
        if any(a.reviewer_id == actor.user_id and a.revision_n == r.head_n and not a.stale for a in rail_approvals):
            continue        # approved by the actor already: it waits for someone else
        if r.id in mine:
            bucket, key = assigned, "assigned"
        elif r.id not in assigned_any:
            bucket, key = team, "team"
        else:
            continue        # assigned to another reviewer
        p = parts.get(r.result_id)
        rail_waivers = waivers.get(r.id)
        covering = covering_waivers(p.problems, rail_waivers, r.head_n) if rail_waivers and p is not None else {}
        needed = waiting_states[r.team_id][r.state]
        if rail_approvals:
            counted, barred = counted_approvers(RailFacts(
                state=r.state, head_n=r.head_n, approvals=tuple(rail_approvals),
                waivers_by=frozenset(w.reviewer_id for w in covering.values()),
                two_person=rules[r.team_id].two_person))
        else:
            counted, barred = [], []
        if len(counted) >= needed:
            continue
        totals[key] += 1
        if len(bucket) >= limit:
            continue        # counted, not shown
        problems = list(_worst_by_check(p.problems).values()) if p is not None else []
        bucket.append({
            "rail": {"id": r.id, "name": r.name}, "board": {"id": r.board_id, "name": r.board_name,
                                                            "revision": r.board_revision},
            "product": {"id": r.product_id, "name": r.product_name},
            "revision": {"n": r.head_n, "sha256": r.head_sha256, "author": r.author_name,
                         "saved_at": r.saved_at.isoformat()},
            "state": r.state, "waiting_since": r.since.isoformat() if r.since else None,
            "verdict": r.verdict, "analysed": r.result_id is not None,
            "failing": [_check_brief(c, covering.get(str(c.get("id")))) for c in problems if c.get("verdict") == "fail"],
            "marginal": [_check_brief(c, covering.get(str(c.get("id")))) for c in problems
                         if c.get("verdict") == "marginal"],
            "approvals": {"counted": counted, "barred": barred, "needed": needed},
            "assigned": mine.get(r.id)})
    if assigned or team:
        _changes(session, assigned + team, {r.id: r for r in rows})
    return {"assigned": assigned, "team": team, "totals": totals}
