"""The managers' risk view of a product: per board, what stands between its rails and a defensible sign-off.

For every rail, against its current revision: failing and marginal checks that no waiver
covers, checks accepted by a waiver (with its reason), approvals not renewed (stale sign-off:
of earlier revisions, or of a result a new engine reads worse), rails not in a signed-off
state (missing sign-off), rails whose current revision has only a result of another engine
version (outdated result, with that engine version and verdict), and rails whose current
revision (or any revision) has not been analysed. The rails an engine change moved out of
their signed-off state are listed beside. :func:`product_risks` returns a plain dict for the
API and the page.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import AnalysisResult, Approval, Board, Product, Rail, RailRevision, Waiver, utcnow
from server.services import engine_change, results, workflows
from server.services.access import Actor, Permission, scoped_products
from server.services.errors import NotFound
from server.services.results import checks_for_revision
from server.services.signoff import covering_waivers, rail_facts, waiver_dict
from server.workflow import outstanding_stale

__all__ = ["RISK_KINDS", "CAUTION", "product_risks"]

RISK_KINDS = ("failing_check", "marginal_check", "waived_check", "stale_signoff", "missing_signoff", "outdated_result",
              "not_analysed", "never_analysed")
CAUTION = ("Margins are computed from the stored design data against the team's limits, which are common practice, "
           "not a standard. A sign-off here does not certify hardware: verify on hardware.")


def _check_row(c: dict[str, Any], waiver: Waiver | None) -> dict[str, Any]:
    """The check record as the analysis wrote it, with its waiver (nothing recomputed)."""
    return {**c, "title": c.get("title", ""), "waiver": waiver_dict(waiver) if waiver else None}


def _rail_entry(session: Session, rail: Rail, state: str, signed_off: bool, approvals: list[Approval],
                waivers: list[Waiver], ever_analysed: bool, outdated: dict[str, Any] | None) -> dict[str, Any]:
    checks = checks_for_revision(session, sha256=rail.head_sha256)
    head_waivers = covering_waivers(checks, waivers, rail.head_n)
    failing, marginal, waived = [], [], []
    seen: set[tuple[str, Any]] = set()
    for c in checks or []:
        cid = str(c.get("id"))
        if c.get("verdict") not in ("fail", "marginal") or (cid, c.get("verdict")) in seen:
            continue
        seen.add((cid, c.get("verdict")))
        row = _check_row(c, head_waivers.get(cid))
        (waived if row["waiver"] else failing if c.get("verdict") == "fail" else marginal).append(row)
    facts = rail_facts(session, rail, state, approvals=approvals, waivers=waivers, checks=checks)
    stale = [{"reviewer": a.reviewer_name, "revision": a.revision_n} for a in outstanding_stale(facts)]
    kinds = []
    if failing:
        kinds.append("failing_check")
    if marginal:
        kinds.append("marginal_check")
    if waived:
        kinds.append("waived_check")
    if stale:
        kinds.append("stale_signoff")
    if not signed_off:
        kinds.append("missing_signoff")
    if checks is None:
        kinds.append("outdated_result" if outdated else "not_analysed" if ever_analysed else "never_analysed")
    return {"id": rail.id, "name": rail.name, "mode": rail.mode, "head": {"n": rail.head_n, "sha256": rail.head_sha256},
            "state": state, "signed_off": signed_off, "analysed": checks is not None, "ever_analysed": ever_analysed,
            "outdated": outdated if checks is None else None,
            "failing": failing, "marginal": marginal, "waived": waived, "stale_approvals": stale,
            "current_approvals": sum(1 for a in approvals if a.revision_n == rail.head_n and a.stale_at is None),
            "risks": kinds}


def _counts(rails: list[dict[str, Any]]) -> dict[str, int]:
    counts = {kind: sum(1 for r in rails if kind in r["risks"]) for kind in RISK_KINDS}
    counts["rails"] = len(rails)
    counts["signed_off"] = sum(1 for r in rails if r["signed_off"])
    counts["failing_checks"] = sum(len(r["failing"]) for r in rails)
    counts["marginal_checks"] = sum(len(r["marginal"]) for r in rails)
    counts["waived_checks"] = sum(len(r["waived"]) for r in rails)
    counts["rails_at_risk"] = sum(1 for r in rails if r["risks"])
    return counts


def product_risks(*, session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    """Open risks of a product, per board (managers and admins); another team's product is not found."""
    actor.require(Permission.RISK)
    product = session.scalar(scoped_products(select(Product).where(Product.id == product_id), actor))
    if product is None:
        raise NotFound(f"no product {product_id}")
    wf = workflows.definition_for_team(session, product.team_id)
    boards = session.scalars(select(Board).where(Board.product_id == product.id)
                             .order_by(Board.name, Board.revision, Board.id)).all()
    rails = session.scalars(select(Rail).join(Board, Board.id == Rail.board_id)
                            .where(Board.product_id == product.id).order_by(Rail.name, Rail.id)).all()
    ids = [r.id for r in rails]
    approvals: dict[int, list[Approval]] = defaultdict(list)
    waivers: dict[int, list[Waiver]] = defaultdict(list)
    analysed_shas: set[str] = set()
    shas_by_rail: dict[int, set[str]] = defaultdict(set)
    outdated: dict[str, dict[str, Any]] = {}
    if ids:
        for a in session.scalars(select(Approval).where(Approval.rail_id.in_(ids)).order_by(Approval.id)):
            approvals[a.rail_id].append(a)
        for w in session.scalars(select(Waiver).where(Waiver.rail_id.in_(ids)).order_by(Waiver.id)):
            waivers[w.rail_id].append(w)
        revision_shas = select(RailRevision.sha256).where(RailRevision.rail_id.in_(ids))
        analysed_shas = set(session.scalars(select(AnalysisResult.sha256).distinct()
                                            .where(AnalysisResult.sha256.in_(revision_shas))))
        for rail_id, sha in session.execute(select(RailRevision.rail_id, RailRevision.sha256)
                                            .where(RailRevision.rail_id.in_(ids))):
            shas_by_rail[rail_id].add(sha)
        outdated = results.outdated_verdicts(session, [r.head_sha256 for r in rails])
    states = workflows.rail_states(session, ids)
    by_board: dict[int, list[dict[str, Any]]] = defaultdict(list)
    for rail in rails:
        state = states.get(rail.id)
        if state is None or not wf.has_state(state):
            state = wf.initial
        ever = bool(shas_by_rail[rail.id] & analysed_shas)
        by_board[rail.board_id].append(_rail_entry(session, rail, state, wf.is_signed_off(state),
                                                   approvals[rail.id], waivers[rail.id], ever,
                                                   outdated.get(rail.head_sha256)))
    board_entries = []
    for b in boards:
        entries = by_board.get(b.id, [])
        board_entries.append({"id": b.id, "name": b.name, "revision": b.revision, "counts": _counts(entries),
                              "rails": entries})
    everything = [r for b in board_entries for r in b["rails"]]
    return {"product": {"id": product.id, "name": product.name, "team_id": product.team_id},
            "workflow": wf.name, "signed_off_states": [s.name for s in wf.states if s.signed_off],
            "generated_at": utcnow().isoformat(), "caution": CAUTION, "totals": _counts(everything),
            "boards": board_entries, "current_engine": results.engine_version(),
            "engine_moves": engine_change.moved_rails(session=session, actor=actor, product_id=product.id, limit=50)}

