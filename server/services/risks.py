"""The risk view: what stands between each rail and a defensible sign-off, technical risk apart from paperwork.

For every rail, against its current revision:

- **technical risks** (the design itself may not hold): failing and marginal checks that no
  waiver covers, checks accepted by a waiver (with its reason), a result only of an older
  engine version (outdated result, with that engine's verdict), the current revision not
  analysed, the rail never analysed, and a pinned library part whose newer revision the
  library holds (outdated part);
- **process state** (the paperwork is not done): approvals of earlier revisions not renewed
  (stale sign-off), the rail waiting for an approval that a transition of its state demands
  (awaiting review), and the rail not in a signed-off state (not signed off).

:data:`RISK_KINDS` lists the kinds worst first; a rail's severity is its worst kind, and the
view lists rails by severity. Counts over time come from daily snapshots of each product's
counts (:class:`server.models.RiskSnapshot`), taken by the first view of a day
(:func:`note_snapshots`) and by ``railsign risks snapshot`` (:func:`snapshot_all`).

Everything is read with a fixed number of queries however many rails (the checks of stored
results through :mod:`server.services.result_parts`), and nothing is recomputed: the check
records are the analysis' own.

Provides :func:`risk_view` (the rails of every product the actor sees, filtered),
:func:`product_risks` (one product per board, the API's answer), :func:`risk_csv`,
:func:`trend`, :func:`note_snapshots`, :func:`snapshot_all`; :func:`owner_actions` (a designer's own rails
that need their action, from the same entries).
"""

from __future__ import annotations

import csv
import io
import math
import threading
from collections import OrderedDict, defaultdict
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session, aliased

from server.models import (AnalysisResult, Approval, Board, Part, PartRevision, Product, Rail, RailRevision,
                           RailState, RiskSnapshot, Waiver, utcnow)
from server.services import engine_change, results, workflows
from server.services.access import Actor, Permission, scoped_products
from server.services.errors import Invalid, NotFound
from server.services.result_parts import ResultKey, ResultParts, result_parts
from server.services.signoff import covering_waivers, waiver_dict
from server.workflow import ApprovalFact, RailFacts, WorkflowDef, current_approvers, outstanding_stale

__all__ = ["TECHNICAL_KINDS", "PROCESS_KINDS", "RISK_KINDS", "COUNT_KEYS", "CAUTION", "risk_view", "product_risks",
           "risk_csv", "CSV_COLUMNS", "trend", "note_snapshots", "snapshot_all", "TREND_DAYS", "owner_actions",
           "ACTION_WORDS"]

# Worst first: the order of the view, of each rail's list of kinds, and of the counts.
TECHNICAL_KINDS = ("failing_check", "never_analysed", "not_analysed", "marginal_check", "outdated_result",
                   "waived_check", "outdated_part")
PROCESS_KINDS = ("stale_signoff", "awaiting_review", "missing_signoff")
RISK_KINDS = TECHNICAL_KINDS + PROCESS_KINDS
_RANK = {kind: k for k, kind in enumerate(RISK_KINDS)}
COUNT_KEYS = RISK_KINDS + ("rails", "signed_off", "failing_checks", "marginal_checks", "waived_checks",
                           "rails_at_risk", "rails_at_technical_risk")
CAUTION = ("Margins are computed from the stored design data against the team's limits, which are common practice, "
           "not a standard. A sign-off here does not certify hardware: verify on hardware.")
TREND_DAYS = 90


# --- reading every rail of some products ---------------------------------------------------


@dataclass
class _Rows:
    """What the queries of :func:`_entries` read, by rail id."""

    rails: list[Any]
    checks: dict[int, ResultParts]
    outdated: dict[str, dict[str, str]]
    ever: set[int]
    states: dict[int, str]
    approvals: dict[int, list[ApprovalFact]]
    waivers: dict[int, list[Waiver]]


def _visible_products(session: Session, actor: Actor, product_id: int | None) -> list[Any]:
    stmt = scoped_products(select(Product.id, Product.name, Product.team_id), actor).order_by(Product.name)
    if product_id is not None:
        stmt = stmt.where(Product.id == product_id)
    rows = list(session.execute(stmt))
    if product_id is not None and not rows:
        raise NotFound(f"no product {product_id}")
    return rows


def _read(session: Session, product_ids: list[int]) -> _Rows:
    head = aliased(RailRevision)
    pinned = aliased(PartRevision)
    current = (AnalysisResult.sha256 == Rail.head_sha256) & \
              (AnalysisResult.engine_version == results.engine_version()) & \
              (AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS))
    stmt = (select(Rail.id, Rail.name, Rail.mode, Rail.head_n, Rail.head_sha256, Rail.board_id,
                   Board.name.label("board_name"), Board.revision.label("board_revision"), Board.product_id,
                   head.author_name, AnalysisResult.id.label("result_id"), AnalysisResult.created_at.label("result_at"),
                   Part.name.label("part_name"), pinned.n.label("part_n"), Part.head_n.label("part_head"))
            .join(Board, Board.id == Rail.board_id)
            .join(head, (head.rail_id == Rail.id) & (head.n == Rail.head_n))
            .outerjoin(AnalysisResult, current)
            .outerjoin(pinned, pinned.id == head.part_revision_id).outerjoin(Part, Part.id == pinned.part_id)
            .where(Board.product_id.in_(product_ids), Rail.retired_at.is_(None)).order_by(Rail.id))
    rails = list(session.execute(stmt))
    in_products = select(Rail.id).join(Board, Board.id == Rail.board_id).where(Board.product_id.in_(product_ids),
                                                                                Rail.retired_at.is_(None))
    parts = result_parts(session, [ResultKey(r.result_id, r.head_sha256, r.result_at)
                                   for r in rails if r.result_id is not None])
    checks = {r.id: parts[r.result_id] for r in rails if r.result_id in parts}
    outdated = results.outdated_verdicts(session, [r.head_sha256 for r in rails if r.result_id is None])
    unread = [r.id for r in rails if r.result_id is None and r.head_sha256 not in outdated]
    ever: set[int] = set()
    if unread:
        ever = set(session.scalars(select(RailRevision.rail_id).distinct().where(
            RailRevision.rail_id.in_(unread), RailRevision.sha256.in_(select(AnalysisResult.sha256)))))
    approvals: dict[int, list[ApprovalFact]] = defaultdict(list)
    for rail_id, reviewer_id, reviewer, n, stale_at in session.execute(
            select(Approval.rail_id, Approval.reviewer_id, Approval.reviewer_name, Approval.revision_n,
                   Approval.stale_at).where(Approval.rail_id.in_(in_products)).order_by(Approval.id)):
        approvals[rail_id].append(ApprovalFact(reviewer_id, reviewer, n, stale_at is not None))
    waivers: dict[int, list[Waiver]] = defaultdict(list)
    for w in session.scalars(select(Waiver).join(Rail, (Rail.id == Waiver.rail_id) & (Waiver.revision_n == Rail.head_n))
                             .where(Waiver.rail_id.in_(in_products)).order_by(Waiver.id)):
        waivers[w.rail_id].append(w)
    states = dict(session.execute(select(RailState.rail_id, RailState.state)
                                  .where(RailState.rail_id.in_(in_products))).all())
    return _Rows(rails, checks, outdated, ever, states, approvals, waivers)


# The failing and marginal rows of each stored result, split once: {id(parts): (parts, failing, marginal)}.
# A stored result never changes; the parts object is kept in the entry so that its id is not reused.
_SPLIT: OrderedDict[int, tuple[ResultParts, list, list]] = OrderedDict()
_SPLIT_LOCK = threading.Lock()
_SPLIT_MAX = 20_000


def _split(parts: ResultParts) -> tuple[list, list]:
    """(failing, marginal) rows of a result without waivers, each check once per verdict; shared: never changed."""
    with _SPLIT_LOCK:
        hit = _SPLIT.get(id(parts))
        if hit is not None and hit[0] is parts:
            return hit[1], hit[2]
    failing, marginal = [], []
    seen: set[tuple[str, Any]] = set()
    for c in parts.problems:
        key = (str(c.get("id")), c.get("verdict"))
        if key not in seen:
            seen.add(key)
            (failing if c.get("verdict") == "fail" else marginal).append(
                {**c, "title": c.get("title", ""), "waiver": None})
    with _SPLIT_LOCK:
        _SPLIT[id(parts)] = (parts, failing, marginal)
        while len(_SPLIT) > _SPLIT_MAX:
            _SPLIT.popitem(last=False)
    return failing, marginal


def _problem_checks(parts: ResultParts | None, waivers: list[Waiver],
                    head_n: int) -> tuple[list, list, list]:
    """(failing, marginal, waived) check records of the head revision, each with the waiver that covers it.

    The lists may be shared between calls: callers read them and never change them.
    """
    if parts is None or not parts.problems:
        return [], [], []
    failing, marginal = _split(parts)
    covering = covering_waivers(parts.problems, waivers, head_n) if waivers else {}
    if not covering:
        return failing, marginal, []
    open_failing, open_marginal, waived = [], [], []
    for c in failing + marginal:
        w = covering.get(str(c.get("id")))
        if w is None:
            (open_failing if c.get("verdict") == "fail" else open_marginal).append(c)
        else:
            waived.append({**c, "waiver": waiver_dict(w)})
    return open_failing, open_marginal, waived


@dataclass(frozen=True)
class _Flow:
    """What the view asks of a team's workflow, answered once per team rather than once per rail."""

    initial: str
    states: frozenset[str]
    signed_off: frozenset[str]
    approvals_wanted: dict[str, int]   # state -> the most approvals a transition out of it demands

    @classmethod
    def of(cls, wf: WorkflowDef) -> "_Flow":
        wanted = {s.name: max((t.demands.approvals for t in wf.transitions_from(s.name)), default=0)
                  for s in wf.states}
        return cls(wf.initial, frozenset(s.name for s in wf.states),
                   frozenset(s.name for s in wf.states if s.signed_off), wanted)


def _worst_margin(rows: list[dict[str, Any]]) -> float:
    margins = [c.get("margin") for c in rows if isinstance(c.get("margin"), (int, float))]
    return min((m for m in margins if math.isfinite(m)), default=math.inf)


def _entry(r: Any, data: _Rows, flow: _Flow, product: dict[str, Any], board: dict[str, Any]) -> dict[str, Any]:
    state = data.states.get(r.id)
    if state is None or state not in flow.states:
        state = flow.initial
    checks = data.checks.get(r.id)
    failing, marginal, waived = _problem_checks(checks, data.waivers.get(r.id, []), r.head_n)
    approvals = data.approvals.get(r.id)
    if approvals:
        facts = RailFacts(state=state, head_n=r.head_n, approvals=tuple(approvals))
        stale = [{"reviewer": a.reviewer_name, "revision": a.revision_n} for a in outstanding_stale(facts)]
        current = len(current_approvers(facts))
    else:
        stale, current = [], 0
    signed_off = state in flow.signed_off
    outdated = data.outdated.get(r.head_sha256) if checks is None else None
    ever = checks is not None or outdated is not None or r.id in data.ever
    part = None
    if r.part_name is not None and r.part_head > r.part_n:
        part = {"name": r.part_name, "pinned_revision": r.part_n, "latest_revision": r.part_head}
    flags = {
        "failing_check": bool(failing), "marginal_check": bool(marginal), "waived_check": bool(waived),
        "outdated_result": outdated is not None, "not_analysed": checks is None and outdated is None and ever,
        "never_analysed": not ever, "outdated_part": part is not None,
        "stale_signoff": bool(stale),
        # a transition out of its state waits for approvals of the current revision
        "awaiting_review": not signed_off and flow.approvals_wanted.get(state, 0) > current,
        "missing_signoff": not signed_off,
    }
    kinds = [k for k in RISK_KINDS if flags[k]]
    return {"id": r.id, "name": r.name, "mode": r.mode, "head": {"n": r.head_n, "sha256": r.head_sha256},
            "product": product, "board": board,
            "owner": r.author_name, "state": state, "signed_off": signed_off, "analysed": checks is not None,
            "ever_analysed": ever, "outdated": outdated, "outdated_part": part,
            "failing": failing, "marginal": marginal, "waived": waived, "stale_approvals": stale,
            "current_approvals": current, "risks": kinds,
            "technical": [k for k in kinds if k in TECHNICAL_KINDS], "process": [k for k in kinds if k in PROCESS_KINDS]}


def _entries(session: Session, products: list[Any]) -> list[dict[str, Any]]:
    if not products:
        return []
    names = {p.id: p.name for p in products}
    team_of = {p.id: p.team_id for p in products}
    flows = {team: _Flow.of(workflows.definition_for_team(session, team)) for team in set(team_of.values())}
    data = _read(session, list(names))
    product_dicts = {pid: {"id": pid, "name": name} for pid, name in names.items()}
    boards: dict[int, dict[str, Any]] = {}
    out = []
    for r in data.rails:
        board = boards.get(r.board_id)
        if board is None:
            board = boards[r.board_id] = {"id": r.board_id, "name": r.board_name, "revision": r.board_revision}
        out.append(_entry(r, data, flows[team_of[r.product_id]], product_dicts[r.product_id], board))
    return out


def _severity_key(e: dict[str, Any]) -> tuple:
    ranks = [_RANK[k] for k in e["risks"]] or [len(RISK_KINDS)]
    return (ranks, -len(e["failing"]), _worst_margin(e["failing"] + e["marginal"]), e["product"]["name"],
            e["board"]["name"], e["board"]["revision"], e["name"])


def _counts(rails: list[dict[str, Any]]) -> dict[str, int]:
    counts = {kind: 0 for kind in RISK_KINDS}
    for r in rails:
        for kind in r["risks"]:
            counts[kind] += 1
    counts["rails"] = len(rails)
    counts["signed_off"] = sum(1 for r in rails if r["signed_off"])
    counts["failing_checks"] = sum(len(r["failing"]) for r in rails)
    counts["marginal_checks"] = sum(len(r["marginal"]) for r in rails)
    counts["waived_checks"] = sum(len(r["waived"]) for r in rails)
    counts["rails_at_risk"] = sum(1 for r in rails if r["risks"])
    counts["rails_at_technical_risk"] = sum(1 for r in rails if r["technical"])
    return counts


# --- the views -----------------------------------------------------------------------------


def risk_view(*, session: Session, actor: Actor, product_id: int | None = None, board_id: int | None = None,
              state: str | None = None, owner: str | None = None, kind: str | None = None,
              include_clear: bool = False) -> dict[str, Any]:
    """The rails of every product the actor sees (or of one), worst first, with the filters applied.

    ``kind`` is a kind of :data:`RISK_KINDS`, or ``"technical"`` / ``"process"`` for any of
    that group. Rails without an open risk are left out unless ``include_clear``. The answer
    also holds the totals of the filtered rails, each product's unfiltered counts
    (``products``, what a snapshot stores), the choices of each filter, and the trend of the
    products in the product filter.
    """
    actor.require(Permission.RISK)
    if kind and kind not in RISK_KINDS and kind not in ("technical", "process"):
        raise Invalid(f"unknown kind of risk '{kind}'", details=[{"field": "kind", "message": "is not a kind of risk"}])
    products = _visible_products(session, actor, product_id)
    entries = _entries(session, products)
    per_product: dict[int, list[dict[str, Any]]] = defaultdict(list)
    for e in entries:
        per_product[e["product"]["id"]].append(e)
    boards = sorted({(e["board"]["id"], e["product"]["name"], e["board"]["name"], e["board"]["revision"])
                     for e in entries}, key=lambda b: b[1:])
    choices = {"boards": [{"id": b[0], "label": f"{b[1]}: {b[2]} rev {b[3]}"} for b in boards],
               "states": sorted({e["state"] for e in entries}), "owners": sorted({e["owner"] for e in entries})}
    shown = [e for e in entries if (board_id is None or e["board"]["id"] == board_id)
             and (not state or e["state"] == state) and (not owner or e["owner"] == owner)]
    totals = _counts(shown)
    if kind == "technical":
        shown = [e for e in shown if e["technical"]]
    elif kind == "process":
        shown = [e for e in shown if e["process"]]
    elif kind:
        shown = [e for e in shown if kind in e["risks"]]
    elif not include_clear:
        shown = [e for e in shown if e["risks"]]
    shown.sort(key=_severity_key)
    live = {p.id: _counts(per_product.get(p.id, [])) for p in products}
    return {"products": [{"id": p.id, "name": p.name, "counts": live[p.id]} for p in products],
            "filters": {"product_id": product_id, "board_id": board_id, "state": state or "", "owner": owner or "",
                        "kind": kind or ""},
            "choices": choices, "rails": shown, "totals": totals, "generated_at": utcnow().isoformat(),
            "caution": CAUTION, "current_engine": results.engine_version(),
            "trend": trend(session, live), "engine_moves": engine_change.moved_rails(
                session=session, actor=actor, product_id=product_id, limit=20)}


def product_risks(*, session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    """Open risks of one product, per board (managers and admins); another team's product is not found."""
    actor.require(Permission.RISK)
    product = session.scalar(scoped_products(select(Product).where(Product.id == product_id), actor))
    if product is None:
        raise NotFound(f"no product {product_id}")
    wf = workflows.definition_for_team(session, product.team_id)
    entries = _entries(session, _visible_products(session, actor, product_id))
    by_board: dict[int, list[dict[str, Any]]] = defaultdict(list)
    for e in sorted(entries, key=_severity_key):
        by_board[e["board"]["id"]].append({k: v for k, v in e.items() if k not in ("product", "board")})
    boards = session.scalars(select(Board).where(Board.product_id == product.id)
                             .order_by(Board.name, Board.revision, Board.id)).all()
    board_entries = [{"id": b.id, "name": b.name, "revision": b.revision, "counts": _counts(by_board.get(b.id, [])),
                      "rails": by_board.get(b.id, [])} for b in boards]
    return {"product": {"id": product.id, "name": product.name, "team_id": product.team_id},
            "workflow": wf.name, "signed_off_states": [s.name for s in wf.states if s.signed_off],
            "generated_at": utcnow().isoformat(), "caution": CAUTION, "totals": _counts(entries),
            "boards": board_entries, "current_engine": results.engine_version(),
            "engine_moves": engine_change.moved_rails(session=session, actor=actor, product_id=product.id, limit=50)}


# What the owner of a rail does about each kind of risk, in words (awaiting review: a reviewer's move).
ACTION_WORDS = {
    "failing_check": "failing checks: change the design (a failing check is waived only where the team's rules allow)",
    "never_analysed": "never analysed: analyse it",
    "not_analysed": "the current revision has no result yet: analyse it",
    "marginal_check": "marginal checks: change the design or ask a reviewer for a waiver",
    "outdated_result": "its result is of an older engine: re-run it",
    "outdated_part": "the part library has a newer revision of its MOSFET",
    "stale_signoff": "approvals of an earlier revision are stale: submit the current revision for review",
    "missing_signoff": "not signed off: submit it for review",
}


def owner_actions(*, session: Session, actor: Actor, limit: int = 50) -> dict[str, Any]:
    """The actor's own rails (they saved the current revision) that need their action, worst first, each with
    what to do in words; rails only waiting for a reviewer are left out. ``total`` counts them all."""
    products = _visible_products(session, actor, None)
    mine = [e for e in _entries(session, products) if e["owner"] == actor.name]
    out = []
    for e in sorted(mine, key=_severity_key):
        kinds = [k for k in e["risks"] if k in ACTION_WORDS]
        if "awaiting_review" in e["risks"] or e["current_approvals"]:
            kinds = [k for k in kinds if k != "missing_signoff"]     # a reviewer's move now
        if kinds:
            out.append({"id": e["id"], "name": e["name"], "product": e["product"], "board": e["board"],
                        "state": e["state"], "revision": e["head"]["n"], "kinds": kinds,
                        "todo": [ACTION_WORDS[k] for k in kinds], "failing": len(e["failing"]),
                        "marginal": len(e["marginal"])})
    return {"rails": out[:limit], "total": len(out)}


# --- CSV -------------------------------------------------------------------------------------

CSV_COLUMNS = ["product", "board", "board_revision", "rail", "rail_id", "revision", "owner", "state", "signed_off",
               "severity", "technical_risks", "process_risks", "failing_checks", "marginal_checks", "waived_checks",
               "outdated_engine", "outdated_part", "stale_approvals", "current_approvals", "link"]


def _cell(value: Any) -> str:
    """A CSV cell; text a spreadsheet would run as a formula is prefixed with an apostrophe."""
    text = "" if value is None else str(value)
    return "'" + text if text[:1] in ("=", "+", "-", "@", "\t", "\r") else text


def _check_list(rows: list[dict[str, Any]]) -> str:
    return "; ".join(f"{c.get('id')} ({c.get('verdict')}, margin {c.get('margin')})" for c in rows)


def risk_csv(view: dict[str, Any]) -> str:
    """The rails of a :func:`risk_view` answer as CSV (one row per rail, worst first; kinds and check ids as
    programs read them; margins as the records hold them)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(CSV_COLUMNS)
    for e in view["rails"]:
        part = e["outdated_part"]
        writer.writerow([_cell(v) for v in (
            e["product"]["name"], e["board"]["name"], e["board"]["revision"], e["name"], e["id"], e["head"]["n"],
            e["owner"], e["state"], "yes" if e["signed_off"] else "no", e["risks"][0] if e["risks"] else "",
            " ".join(e["technical"]), " ".join(e["process"]), _check_list(e["failing"]), _check_list(e["marginal"]),
            "; ".join(f"{c.get('id')} ({'failing check waived, ' if c['waiver'].get('past_edge') else ''}"
                      f"{c['waiver']['reviewer']}: {c['waiver']['reason']})" for c in e["waived"]),
            e["outdated"]["engine_version"] if e["outdated"] else "",
            f"{part['name']} {part['pinned_revision']} of {part['latest_revision']}" if part else "",
            "; ".join(f"{s['reviewer']} (revision {s['revision']})" for s in e["stale_approvals"]),
            e["current_approvals"], f"/rails/{e['id']}")])
    return out.getvalue()


# --- counts over time ------------------------------------------------------------------------


def _today() -> date:
    return utcnow().date()


def trend(session: Session, live: dict[int, dict[str, int]], days: int = TREND_DAYS) -> list[dict[str, Any]]:
    """The counts of the products in ``live`` summed per day over the last ``days`` days, oldest first:
    stored snapshots for the days before today, ``live`` (the counts now) for today. Each point
    has ``day`` (ISO date), ``counts`` and ``products`` (how many products had a snapshot that day)."""
    today = _today()
    if not live:
        return []
    stmt = select(RiskSnapshot.day, RiskSnapshot.counts).where(
        RiskSnapshot.product_id.in_(list(live)), RiskSnapshot.day >= today - timedelta(days=days),
        RiskSnapshot.day < today)
    sums: dict[date, dict[str, int]] = {}
    seen: dict[date, int] = defaultdict(int)
    for day, counts in session.execute(stmt):
        total = sums.setdefault(day, {k: 0 for k in COUNT_KEYS})
        for key in COUNT_KEYS:
            total[key] += int((counts or {}).get(key, 0))
        seen[day] += 1
    now = {k: sum(c.get(k, 0) for c in live.values()) for k in COUNT_KEYS}
    points = [{"day": d.isoformat(), "counts": sums[d], "products": seen[d]} for d in sorted(sums)]
    return points + [{"day": today.isoformat(), "counts": now, "products": len(live)}]


def _store(session: Session, counts: dict[int, dict[str, int]], *, replace: bool) -> int:
    """Insert (or with ``replace``, overwrite) today's snapshot of each product; returns the rows written."""
    if not counts:
        return 0
    today, now = _today(), utcnow()
    rows = [{"product_id": pid, "day": today, "taken_at": now, "counts": c} for pid, c in counts.items()]
    insert = pg_insert if session.get_bind().dialect.name == "postgresql" else sqlite_insert
    stmt = insert(RiskSnapshot).values(rows)
    if replace:
        stmt = stmt.on_conflict_do_update(index_elements=["product_id", "day"],
                                          set_={"counts": stmt.excluded.counts, "taken_at": stmt.excluded.taken_at})
    else:
        stmt = stmt.on_conflict_do_nothing(index_elements=["product_id", "day"])
    return session.execute(stmt).rowcount or 0


def note_snapshots(*, session: Session, actor: Actor, view: dict[str, Any]) -> int:
    """Take today's snapshot of each product of a :func:`risk_view` answer that has none yet (the first
    view of a day); returns how many were taken.

    The view's read transaction is ended first, so that on SQLite the insert is the first
    statement of its own transaction and waits for the write lock like any writer. A snapshot
    is a measurement, not a change anyone made: it has no audit entry.
    """
    actor.require(Permission.RISK)
    counts = {p["id"]: p["counts"] for p in view["products"]}
    if not counts:
        return 0
    have = set(session.scalars(select(RiskSnapshot.product_id).where(RiskSnapshot.product_id.in_(list(counts)),
                                                                     RiskSnapshot.day == _today())))
    missing = {pid: c for pid, c in counts.items() if pid not in have}
    session.commit()
    if not missing:
        return 0
    written = _store(session, missing, replace=False)
    session.commit()
    return written


def snapshot_all(*, session: Session, actor: Actor) -> int:
    """Take today's snapshot of every product the actor sees, replacing one taken earlier today (the daily
    timer's command: the counts as they stand when it runs); returns the number of products."""
    actor.require(Permission.RISK)
    products = _visible_products(session, actor, None)
    per_product: dict[int, list[dict[str, Any]]] = defaultdict(list)
    for e in _entries(session, products):
        per_product[e["product"]["id"]].append(e)
    _store(session, {p.id: _counts(per_product.get(p.id, [])) for p in products}, replace=True)
    session.commit()
    return len(products)
