"""What a new analysis engine version changes: outdated results, their re-runs, and sign-offs it undoes.

A stored result belongs to one revision's sha256 and one engine version. When the engine
changes, the results of the old one stay, read as *outdated* with their engine version
(:func:`server.services.results.reading`), and the head revisions whose nominal+corners
results are all outdated are analysed again (:func:`outdated_heads`; the jobs are queued by
:func:`server.services.jobs.enqueue_outdated` when the service starts, and by ``railsign jobs
rerun-outdated``).

When the new result of a signed-off rail's head revision reads worse than the result its
approvals were given for (or, for approvals that did not keep it, than the revision's newest
outdated result), :func:`on_new_result` moves the rail back to its workflow's ``on_edit``
state through the workflow service, marks those approvals stale with the reason in words and
records both in the audit trail, in the transaction that stores the result.
:func:`moved_rails` lists those moves for the rails' authors and for managers.

"Outdated" means computed by another engine version than the running one: in practice an
older one (after a downgrade, the newer one's results read as outdated the same way).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import Select, exists, select
from sqlalchemy.orm import Session, defer

from server.models import AnalysisResult, Approval, AuditEntry, Board, Job, JobState, Product, Rail, RailRevision
from server.services import results, signoff, workflows
from server.services.access import Actor, scoped_rails
from server.workflow import SEVERITY, worse

__all__ = ["ENGINE_ACTOR", "MOVED", "engine_actor", "head_is_outdated", "outdated_heads", "rerun_job",
           "on_new_result", "reason_text", "moved_rails"]

ENGINE_ACTOR = "railsign-engine"   # the name the engine's own changes are recorded under
MOVED = "engine_moved"             # audit action of a rail moved out of its signed-off state by a new engine


def engine_actor() -> Actor:
    return Actor.system(ENGINE_ACTOR)


# --- outdated head revisions ----------------------------------------------------------------


def _nominal(result_sha, *conditions):
    return exists().where(AnalysisResult.sha256 == result_sha,
                          AnalysisResult.options_key == results.options_key(results.NOMINAL_OPTIONS), *conditions)


def head_is_outdated():
    """Condition on Rail: its head revision has a nominal+corners result of another engine version and
    none of the current one (it reads as outdated, not as not analysed)."""
    current = results.engine_version()
    return _nominal(Rail.head_sha256, AnalysisResult.engine_version != current) & \
        ~_nominal(Rail.head_sha256, AnalysisResult.engine_version == current)


def outdated_heads(session: Session, *, actor: Actor | None = None,
                   without_job: bool = False) -> list[tuple[Rail, RailRevision]]:
    """Rails (with their head revision, document not loaded) whose head has a nominal+corners result of
    another engine version and none of the current one, by rail id.

    ``without_job``: leave out heads that have a job at the current engine already (queued, running,
    done or failed; a failed one is queued again by ``railsign jobs retry``, not at every start).
    """
    current = results.engine_version()
    stmt: Select = (select(Rail, RailRevision)
                    .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
                    .where(head_is_outdated()).options(defer(RailRevision.document)).order_by(Rail.id))
    if without_job:
        stmt = stmt.where(~exists().where(
            Job.rail_id == Rail.id, Job.sha256 == Rail.head_sha256, Job.engine_version == current,
            Job.options_key == results.options_key(results.NOMINAL_OPTIONS),
            Job.state != JobState.cancelled.value))
    if actor is not None:
        stmt = stmt.where(Rail.id.in_(scoped_rails(select(Rail.id), actor)))
    return [(rail, rev) for rail, rev in session.execute(stmt).all()]


def rerun_job(session: Session, *, rail_id: int, sha256: str) -> Job | None:
    """The newest nominal+corners job of the current engine for one revision of a rail (any state)."""
    return session.scalar(select(Job).where(
        Job.rail_id == rail_id, Job.sha256 == sha256, Job.engine_version == results.engine_version(),
        Job.options_key == results.options_key(results.NOMINAL_OPTIONS)).order_by(Job.id.desc()).limit(1))


# --- a new result that reads worse ----------------------------------------------------------


def _worst_by_check(checks: list[dict]) -> dict[str, dict]:
    out: dict[str, dict] = {}
    for c in checks:
        cid = str(c.get("id"))
        if cid not in out or SEVERITY.get(str(c.get("verdict")), 3) > SEVERITY.get(str(out[cid].get("verdict")), 3):
            out[cid] = c
    return out


def _worst_new_check(before: AnalysisResult, after: AnalysisResult) -> dict | None:
    """The check of ``after`` that reads worst, preferring one that reads worse than it did in ``before``."""
    old = _worst_by_check(list(before.result.get("checks", [])))
    new = _worst_by_check(list(after.result.get("checks", [])))
    ranked = sorted(new.values(), key=lambda c: -SEVERITY.get(str(c.get("verdict")), 3))
    got_worse = [c for c in ranked if worse(c.get("verdict"), (old.get(str(c.get("id"))) or {}).get("verdict", "n/a"))]
    return (got_worse or ranked or [None])[0]


def reason_text(before: AnalysisResult, after: AnalysisResult) -> str:
    """In words: "engine 2.0.0 reads fail where engine 1.1.0 read pass: <title of the worst check>"."""
    check = _worst_new_check(before, after)
    text = f"engine {after.engine_version} reads {after.verdict} where engine {before.engine_version} read {before.verdict}"
    if check is not None:
        text += f": {check.get('title') or check.get('id')}"
    return text


def _earlier_results(session: Session, approvals: list[Approval], sha256: str,
                     new: AnalysisResult) -> list[AnalysisResult]:
    """The results the current approvals were given for; else the revision's newest outdated result."""
    ids = {a.result_id for a in approvals if a.result_id is not None and a.result_id != new.id}
    if ids:
        return list(session.scalars(select(AnalysisResult).where(AnalysisResult.id.in_(ids))))
    if any(a.result_id == new.id for a in approvals):
        return []   # given for this very result: nothing changed under them
    old = results.latest_outdated_result(session, sha256=sha256)
    return [] if old is None else [old]


def on_new_result(session: Session, *, sha256: str, result: AnalysisResult) -> list[dict[str, Any]]:
    """React to a stored nominal+corners result of the current engine (called in the storing transaction).

    For every rail whose head revision has this hash (rails with equal documents share results):
    when the rail stands in a signed-off state and the new verdict is worse than the one its
    current approvals were given for (the most favourable of them; when no approval kept its
    result, the revision's newest outdated result), the rail goes to the workflow's ``on_edit``
    state, those approvals go stale with the reason, and both are recorded. Returns what was done.
    """
    if result.engine_version != results.engine_version() or \
            result.options_key != results.options_key(results.NOMINAL_OPTIONS):
        return []
    heads = select(RailRevision.rail_id).where(RailRevision.sha256 == sha256)
    rails = session.scalars(select(Rail).where(Rail.id.in_(heads), Rail.head_sha256 == sha256)
                            .order_by(Rail.id).with_for_update(of=Rail)).all()
    return [moved for rail in rails if (moved := _react(session, rail, result)) is not None]


def _react(session: Session, rail: Rail, result: AnalysisResult) -> dict[str, Any] | None:
    team_id, product_id = workflows.team_of_rail(session, rail)
    wf = workflows.definition_for_team(session, team_id)
    state = workflows.state_of(session, rail, wf)
    if not wf.is_signed_off(state.state):
        return None
    approvals = list(session.scalars(select(Approval).where(
        Approval.rail_id == rail.id, Approval.revision_n == rail.head_n, Approval.stale_at.is_(None))
        .order_by(Approval.id)))
    earlier = _earlier_results(session, approvals, rail.head_sha256, result)
    if not earlier:
        return None
    before = min(earlier, key=lambda r: (SEVERITY.get(r.verdict, 3), -r.id))
    if not worse(result.verdict, before.verdict):
        return None
    reason = reason_text(before, result)
    actor = engine_actor()
    source = state.state
    signoff.make_stale(session, actor, rail, approvals, reason=reason, product_id=product_id,
                       revision_n=rail.head_n)
    moved = {"reason": reason, "old_verdict": before.verdict, "new_verdict": result.verdict,
             "old_engine": before.engine_version, "new_engine": result.engine_version,
             "old_result_id": before.id, "result_id": result.id, "stale_approvals": [a.id for a in approvals]}
    workflows.move_rail(session, actor, rail, state, wf.on_edit, product_id=product_id, action=MOVED,
                        note=reason, extra=moved)
    return {"rail_id": rail.id, "from": source, "to": wf.on_edit, **moved}


# --- listing the moves ----------------------------------------------------------------------


def moved_rails(*, session: Session, actor: Actor, product_id: int | None = None, authored_by: int | None = None,
                limit: int = 20) -> list[dict[str, Any]]:
    """Rails an engine change moved out of their signed-off state, newest first, within the actor's teams.

    ``authored_by``: only rails with a revision by this user (the rail's owners); ``product_id``:
    only one product's rails. Each entry has the reason, the old and new verdict and engine, when,
    the state the rail is in now, and a link to the rail.
    """
    stmt = (select(AuditEntry, Rail.name, Board.id, Board.name, Board.revision, Product.id, Product.name)
            .join(Rail, Rail.id == AuditEntry.object_id).join(Board, Board.id == Rail.board_id)
            .join(Product, Product.id == Board.product_id)
            .where(AuditEntry.action == MOVED, AuditEntry.object_type == "rail",
                   Rail.id.in_(scoped_rails(select(Rail.id), actor))))
    if product_id is not None:
        stmt = stmt.where(Product.id == product_id)
    if authored_by is not None:
        stmt = stmt.where(Rail.id.in_(select(RailRevision.rail_id).where(RailRevision.author_id == authored_by)))
    rows = session.execute(stmt.order_by(AuditEntry.id.desc()).limit(limit)).all()
    states = workflows.rail_states(session, list({e.object_id for e, *_ in rows}))
    out = []
    for entry, rail_name, board_id, board_name, board_rev, pid, product_name in rows:
        after = entry.after or {}
        out.append({"rail_id": entry.object_id, "rail": rail_name, "board_id": board_id,
                    "board": f"{board_name} rev {board_rev}", "product_id": pid, "product": product_name,
                    "at": entry.at.isoformat(), "revision": after.get("revision"), "reason": after.get("reason", ""),
                    "old_verdict": after.get("old_verdict"), "new_verdict": after.get("new_verdict"),
                    "old_engine": after.get("old_engine"), "new_engine": after.get("new_engine"),
                    "from": (entry.before or {}).get("state"), "to": after.get("state"),
                    "state_now": states.get(entry.object_id), "link": f"/rails/{entry.object_id}"})
    return out
