"""Sign-off of rail revisions: approvals, waivers, workflow transitions, and what an edit undoes.

Every approval and waiver names the revision (sha256) it is about, and the stored result
(engine version and result id) its reviewer saw: only the rail's current revision can be
approved or waived, and only once the current engine has analysed it. A reviewer never
approves or waives a revision they authored. When the rail gets a new revision
(:func:`on_new_revision`, called by :mod:`server.services.rail_edits` in the save's
transaction), approvals of older revisions become stale (kept, shown as stale, with the
reason) and the rail goes to the state its workflow names; a new engine reading the revision
worse does the same through :func:`make_stale` (see :mod:`server.services.engine_change`).
Waivers cover their revision only, and a check only while it reads no worse than the verdict
waived; :func:`carry_waiver` is the explicit act that carries one to the current revision.

The team's waiver rules (:mod:`server.services.governance`) are enforced here, for the API and
the pages alike: a waiver is never granted by the rail's author (the author of its first or
its current revision); a failing check (past the physical edge, by the stored record's own
verdict) is waived only by the role the team names, and nobody by default; under the
two-person rule (on by default) a reviewer who waived a check of a revision does not approve
it, nor waives after approving it, and such an approval does not count for a transition.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import AnalysisResult, Approval, Rail, RailRevision, Waiver, utcnow
from server.services.rails import get_rail
from server.services import governance, reports, workflows
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Forbidden, Invalid, NotFound, flush_or_conflict
from server.services.audit import record
from server.services.results import Reading, checks_for_revision, engine_version, reading
from server.workflow import (FAIL_WAIVER_ROLES, PROBLEM_VERDICTS, SEVERITY, ApprovalFact, CheckFact, RailFacts, WaiverRules,
                             WorkflowDef, blockers, two_person_refusal, waiver_covers, waiver_refusal)

__all__ = ["TransitionBlocked", "NotAnalysed", "approval_dict", "waiver_dict", "result_note", "on_new_revision",
           "make_stale", "approve", "list_approvals", "waive", "carry_waiver", "list_waivers", "take_transition",
           "signoff_status", "rail_facts", "current_reading", "covering_waivers", "RailRetired", "transition_dicts"]


class TransitionBlocked(Conflict):
    code = "transition_blocked"


class NotAnalysed(Conflict):
    code = "not_analysed"


class RailRetired(Conflict):
    code = "rail_retired"


def result_note(engine_version: str | None, result_id: int | None, current: Reading | None) -> str | None:
    """Words for an approval or waiver given against another result than the revision's current one.

    None when it was given for the current result at the current engine (nothing to say), or
    when nothing is known of the revision's current result.
    """
    if current is None:
        return None
    if result_id is None:
        return (f"given before approvals and waivers kept the result they saw; the current result is engine "
                f"{current.engine_version}")
    if result_id != current.row.id:
        return (f"given for the result of engine {engine_version or 'unknown'}; the current result is engine "
                f"{current.engine_version}")
    if current.outdated:
        return (f"given for the result of engine {engine_version}; the current engine is {current.current_engine} "
                "and has not read this revision yet")
    return None


def approval_dict(a: Approval, current: Reading | None = None, head_n: int | None = None) -> dict[str, Any]:
    """An approval as the API and the pages read it.

    ``current``: the current reading of the rail's head revision, ``head_n`` its number; with
    them, an approval of the head revision given against another result carries ``result_note``.
    """
    out = {"id": a.id, "rail_id": a.rail_id, "revision": a.revision_n, "sha256": a.sha256,
           "reviewer": a.reviewer_name, "reviewer_id": a.reviewer_id, "comment": a.comment,
           "created_at": a.created_at.isoformat(), "stale": a.stale_at is not None,
           "stale_since": a.stale_at.isoformat() if a.stale_at else None, "stale_reason": a.stale_reason or None,
           "engine_version": a.engine_version, "result_id": a.result_id}
    if current is not None and head_n is not None and a.revision_n == head_n:
        out["for_current_result"] = a.result_id == current.row.id and not current.outdated
        out["result_note"] = result_note(a.engine_version, a.result_id, current)
    return out


def waiver_dict(w: Waiver, head_n: int | None = None, current: Reading | None = None,
                covers: bool | None = None) -> dict[str, Any]:
    """A waiver as the API and the pages read it; ``covers``: whether it still covers its check's current verdict."""
    out = {"id": w.id, "rail_id": w.rail_id, "revision": w.revision_n, "sha256": w.sha256, "check_id": w.check_id,
           "check_title": w.check_title, "verdict": w.verdict, "reason": w.reason, "reviewer": w.reviewer_name,
           "reviewer_id": w.reviewer_id, "created_at": w.created_at.isoformat(), "carried_from": w.carried_from_id,
           "engine_version": w.engine_version, "result_id": w.result_id,
           # a waiver of a failing check (past the physical edge): marked apart wherever waivers are shown
           "past_edge": w.verdict == "fail"}
    if head_n is not None:
        out["current"] = w.revision_n == head_n
        if current is not None and w.revision_n == head_n:
            out["for_current_result"] = w.result_id == current.row.id and not current.outdated
            out["result_note"] = result_note(w.engine_version, w.result_id, current)
    if covers is not None:
        out["covers"] = covers
    return out


# --- what a new revision undoes ------------------------------------------------------------


def make_stale(session: Session, actor: Actor, rail: Rail, approvals: list[Approval], *, reason: str,
               product_id: int, revision_n: int) -> None:
    """Mark ``approvals`` stale with ``reason`` in words and record it (the caller commits)."""
    if not approvals:
        return
    now = utcnow()
    for approval in approvals:
        approval.stale_at, approval.stale_reason = now, reason[:1000]
    record(session, actor, action="approvals_stale", object_type="rail", object_id=rail.id,
           object_repr=rail.name, product_id=product_id,
           before={"approvals": [{"id": a.id, "reviewer": a.reviewer_name, "revision": a.revision_n,
                                  "engine_version": a.engine_version, "result_id": a.result_id} for a in approvals]},
           after={"stale": [a.id for a in approvals], "revision": revision_n, "reason": reason})


def on_new_revision(session: Session, actor: Actor, rail: Rail, revision: RailRevision, *,
                    previous: RailRevision | None) -> None:
    """New rail: initial state. New revision: approvals of older revisions stale, rail to ``on_edit``
    (recorded; the caller commits)."""
    if previous is None:
        workflows.place_new_rail(session, actor, rail, revision)
        return
    team_id, product_id = workflows.team_of_rail(session, rail)
    stale = list(session.scalars(select(Approval).where(Approval.rail_id == rail.id, Approval.stale_at.is_(None),
                                                        Approval.revision_n < revision.n)))
    make_stale(session, actor, rail, stale, reason=f"the rail changed after it: revision {revision.n} was saved",
               product_id=product_id, revision_n=revision.n)
    wf = workflows.definition_for_team(session, team_id)
    row = workflows.state_of(session, rail, wf)
    if row.state != wf.on_edit:
        workflows.move_rail(session, actor, rail, row, wf.on_edit, product_id=product_id, action="reset_state",
                            note=f"revision {revision.n} saved")
    else:
        row.revision_n = revision.n


# --- facts and status ----------------------------------------------------------------------


def _head(session: Session, rail: Rail) -> RailRevision:
    return session.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == rail.head_n))


def _approvals(session: Session, rail_id: int) -> list[Approval]:
    return list(session.scalars(select(Approval).where(Approval.rail_id == rail_id).order_by(Approval.id)))


def _waivers(session: Session, rail_id: int) -> list[Waiver]:
    return list(session.scalars(select(Waiver).where(Waiver.rail_id == rail_id).order_by(Waiver.id)))


def current_reading(session: Session, rail: Rail) -> Reading | None:
    """The reading of the rail's head revision: its current-engine result, else an outdated one, else None."""
    return reading(session, sha256=rail.head_sha256)


def _waived_verdicts(waivers: list[Waiver], head_n: int) -> dict[str, str]:
    """Check id -> the most severe verdict waived for it on the head revision."""
    out: dict[str, str] = {}
    for w in waivers:
        if w.revision_n == head_n and SEVERITY.get(w.verdict, 3) >= SEVERITY.get(out.get(w.check_id, "n/a"), 3):
            out[w.check_id] = w.verdict
    return out


def _head_waiver_dict(w: Waiver, head_n: int, now: Reading | None, reads: str | None) -> dict[str, Any]:
    """A waiver with, when it is of the head revision and the head has a current result, whether it
    still covers its check (``covers``) and what the check reads now (``now_reads``)."""
    if w.revision_n != head_n or reads is None:
        return waiver_dict(w, head_n, now)
    return {**waiver_dict(w, head_n, now, covers=waiver_covers(w.verdict, reads)), "now_reads": reads}


def _worst_verdicts(checks: list[dict] | None) -> dict[str, str]:
    """Check id -> its most severe verdict over the rows (corners) of ``checks``."""
    worst: dict[str, str] = {}
    for c in checks or []:
        cid, verdict = str(c.get("id")), str(c.get("verdict"))
        if cid not in worst or SEVERITY.get(verdict, 3) > SEVERITY.get(worst[cid], 3):
            worst[cid] = verdict
    return worst


def covering_waivers(checks: list[dict] | None, waivers: list[Waiver], head_n: int) -> dict[str, Waiver]:
    """Check id -> the newest waiver of the head revision that still covers the check's worst current verdict.

    A check that is not in ``checks`` (or reads no problem) needs no waiver and gets none here.
    """
    worst = {cid: v for cid, v in _worst_verdicts(checks).items() if v in PROBLEM_VERDICTS}
    out: dict[str, Waiver] = {}
    for w in waivers:
        if w.revision_n == head_n and w.check_id in worst and waiver_covers(w.verdict, worst[w.check_id]):
            out[w.check_id] = w
    return out


def rail_facts(session: Session, rail: Rail, state: str, *, approvals: list[Approval] | None = None,
               waivers: list[Waiver] | None = None, checks: list[dict] | None | Any = ...,
               rules: WaiverRules | None = None) -> RailFacts:
    """What the workflow rules need to know about ``rail`` in ``state`` (with the team's waiver rules)."""
    approvals = _approvals(session, rail.id) if approvals is None else approvals
    waivers = _waivers(session, rail.id) if waivers is None else waivers
    if checks is ...:
        checks = checks_for_revision(session, sha256=rail.head_sha256)
    if rules is None:
        rules = governance.rules_for_team(session, workflows.team_of_rail(session, rail)[0])
    return RailFacts(
        waivers_by=frozenset(w.reviewer_id for w in covering_waivers(checks, waivers, rail.head_n).values()),
        two_person=rules.two_person,
        state=state, head_n=rail.head_n,
        approvals=tuple(ApprovalFact(a.reviewer_id, a.reviewer_name, a.revision_n, a.stale_at is not None)
                        for a in approvals),
        checks=None if checks is None else tuple(CheckFact(str(c.get("id")), str(c.get("verdict")),
                                                         str(c.get("title") or "")) for c in checks),
        waived=_waived_verdicts(waivers, rail.head_n))


def transition_dicts(wf: WorkflowDef, facts: RailFacts, actor: Actor | None) -> list[dict[str, Any]]:
    """The transitions leaving ``facts.state``, each with its unmet demands and whether ``actor`` may take it now
    (None: nobody reads as the actor, so nobody may). Reads only."""
    out = []
    for t in wf.transitions_from(facts.state):
        problems = blockers(t, facts)
        out.append({"name": t.name, "to": t.target, "roles": list(t.roles),
                    "demands": {"approvals": t.demands.approvals, "checks_pass": t.demands.checks_pass,
                                "no_stale_approvals": t.demands.no_stale_approvals},
                    "blockers": [b.as_dict() for b in problems],
                    "you_may_take": actor is not None and t.allows(actor.role) and actor.can(Permission.ADVANCE)
                    and not problems})
    return out


def _check_summary(checks: list[dict] | None, waivers: list[Waiver], head_n: int) -> dict[str, Any]:
    """Each check with the newest waiver of the head revision that covers its reading (a waiver
    of a marginal reading does not cover a failing one); ``open``: problem checks none covers."""
    if checks is None:
        return {"analysed": False, "checks": [], "open": []}
    head = [w for w in waivers if w.revision_n == head_n]
    rows = []
    for c in checks:
        cid, verdict = str(c.get("id")), c.get("verdict")
        mine = [w for w in head if w.check_id == cid]
        covering = next((w for w in reversed(mine) if waiver_covers(w.verdict, verdict)), None) \
            if verdict in PROBLEM_VERDICTS else None
        rows.append({"id": c.get("id"), "title": c.get("title", ""), "verdict": verdict,
                     "value": c.get("value"), "limit": c.get("limit"), "unit": c.get("unit"),
                     "corner": c.get("corner"), "waiver": waiver_dict(covering) if covering else None})
    open_ids = [r["id"] for r in rows if r["verdict"] in PROBLEM_VERDICTS and r["waiver"] is None]
    return {"analysed": True, "checks": rows, "open": open_ids}


def signoff_status(*, session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    """The rail's state, approvals (current and stale), waivers, checks and the transitions it offers."""
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    team_id, product_id = workflows.team_of_rail(session, rail)
    wf = workflows.definition_for_team(session, team_id)
    row = workflows.state_of(session, rail, wf)
    approvals, waivers = _approvals(session, rail.id), _waivers(session, rail.id)
    now = current_reading(session, rail)
    checks = None if now is None or now.outdated else list(now.row.result.get("checks", []))
    rules = governance.rules_for_team(session, team_id)
    facts = rail_facts(session, rail, row.state, approvals=approvals, waivers=waivers, checks=checks, rules=rules)
    head = _head(session, rail)
    verdicts = _worst_verdicts(checks)
    return {
        "rail_id": rail.id, "product_id": product_id, "team_id": team_id,
        "head": {"n": head.n, "sha256": head.sha256, "author": head.author_name, "author_id": head.author_id},
        "state": {"name": row.state, "signed_off": wf.is_signed_off(row.state), "since": row.since.isoformat()
                  if row.since else None, "revision": row.revision_n, "by": row.changed_by},
        "workflow": wf.name, "rules": rules.as_dict(),
        "retired": rail.retired_at is not None,
        "result": now.as_dict() if now is not None else None,
        "approvals": [approval_dict(a, now, rail.head_n) for a in approvals],
        "waivers": [_head_waiver_dict(w, rail.head_n, now, None if checks is None else verdicts.get(w.check_id, "n/a"))
                    for w in waivers],
        "checks": _check_summary(checks, waivers, rail.head_n),
        "transitions": transition_dicts(wf, facts, actor),
    }


# --- approving, waiving, moving ------------------------------------------------------------


def _current_result(session: Session, rail: Rail, rev: RailRevision, what: str) -> AnalysisResult:
    """The revision's result at the current engine, which an approval or waiver is given against (409 without)."""
    now = reading(session, sha256=rev.sha256)
    if now is None or now.outdated:
        seen = f" (its last result is of engine {now.engine_version})" if now is not None else ""
        raise NotAnalysed(f"revision {rev.n} of rail '{rail.name}' has not been analysed at engine "
                          f"{engine_version()}{seen}: analyse the revision first, "
                          f"then {what} what its result shows",
                          extra={"analyse": f"/api/v1/rails/{rail.id}/analyses"})
    return now.row


def _current_revision(session: Session, rail: Rail, sha256: str, what: str) -> RailRevision:
    """The head revision, when ``sha256`` names it; refused when it names an older one."""
    sha256 = (sha256 or "").strip().lower()
    found = session.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.sha256 == sha256)
                           .order_by(RailRevision.n.desc()).limit(1))
    if found is None:
        raise Invalid(f"rail '{rail.name}' has no revision with sha256 {sha256[:12] or '(none)'}",
                      details=[{"field": "sha256", "message": "names no revision of this rail"}])
    if found.n != rail.head_n or sha256 != rail.head_sha256:
        raise Conflict(f"revision {found.n} of rail '{rail.name}' is not its current revision ({rail.head_n}): "
                       f"{what} an old revision is refused; look at revision {rail.head_n}",
                       extra={"current": {"n": rail.head_n, "sha256": rail.head_sha256}})
    return found


def _refuse_own(actor: Actor, rev: RailRevision, what: str) -> None:
    own = (rev.author_id is not None and rev.author_id == actor.user_id) or \
          (rev.author_id is None and rev.author_name == actor.name)
    if own:
        raise Forbidden(f"you authored revision {rev.n}: someone else must {what} it")


def _locked_rail(session: Session, actor: Actor, rail_id: int) -> Rail:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id, for_update=True)
    if rail.retired_at is not None:
        raise RailRetired(f"rail '{rail.name}' is retired: restore it before signing it off")
    return rail


def _refuse_rail_author(session: Session, actor: Actor, rail: Rail, rev: RailRevision) -> None:
    """A waiver is never granted by the rail's author: whoever wrote its first or its current revision."""
    _refuse_own(actor, rev, "waive checks of")
    first = session.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id).order_by(RailRevision.n)
                           .limit(1))
    if first is not None and first.n != rev.n:
        own = (first.author_id is not None and first.author_id == actor.user_id) or \
              (first.author_id is None and first.author_name == actor.name)
        if own:
            raise Forbidden(f"you created rail '{rail.name}': someone else waives its checks")


def _rules(session: Session, rail: Rail) -> WaiverRules:
    return governance.rules_for_team(session, workflows.team_of_rail(session, rail)[0])


def _may_waive(session: Session, actor: Actor, rail: Rail, rev: RailRevision, verdict: str) -> None:
    """The team's waiver rules for ``actor`` waiving a check reading ``verdict`` of ``rev`` (403 otherwise)."""
    rules = _rules(session, rail)
    why = waiver_refusal(rules, actor.role, verdict)
    if why is not None:
        raise Forbidden(why)
    if rules.two_person:
        approved = session.scalar(select(Approval.id).where(Approval.rail_id == rail.id, Approval.revision_n == rev.n,
                                                            Approval.reviewer_id == actor.user_id,
                                                            Approval.stale_at.is_(None)).limit(1))
        if approved is not None:
            raise Forbidden(two_person_refusal(rules, approving=False, revision_n=rev.n))


def _require_waiver_role(session: Session, actor: Actor, rail_id: int) -> None:
    """Reviewers waive; so does the role a team names for failing checks (its rules decide per check)."""
    if actor.can(Permission.REVIEW):
        return
    if actor.role not in FAIL_WAIVER_ROLES:
        actor.require(Permission.REVIEW)
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    role = _rules(session, rail).fail_waiver_role
    if role is None or actor.role != role:
        actor.require(Permission.REVIEW)


def approve(*, session: Session, actor: Actor, rail_id: int, sha256: str, comment: str) -> Approval:
    """Approve the rail's current revision (reviewers; never one's own revision)."""
    actor.require(Permission.REVIEW)
    comment = (comment or "").strip()
    if not comment:
        raise Invalid("say what you checked: an approval needs a comment",
                      details=[{"field": "comment", "message": "is required"}])
    rail = _locked_rail(session, actor, rail_id)
    rev = _current_revision(session, rail, sha256, "approving")
    _refuse_own(actor, rev, "approve")
    exists = session.scalar(select(Approval.id).where(Approval.rail_id == rail.id, Approval.revision_n == rev.n,
                                                      Approval.reviewer_id == actor.user_id,
                                                      Approval.stale_at.is_(None)))
    if exists is not None:
        raise Conflict(f"you approved revision {rev.n} already")
    result = _current_result(session, rail, rev, "approve")
    rules = _rules(session, rail)
    if rules.two_person:
        mine = [w for w in covering_waivers(list(result.result.get("checks", [])), _waivers(session, rail.id), rev.n)
                .values() if w.reviewer_id == actor.user_id]
        if mine:
            raise Forbidden(two_person_refusal(rules, approving=True, revision_n=rev.n) + " (your waiver of "
                            + ", ".join(f"'{w.check_title or w.check_id}'" for w in mine) + ")")
    approval = Approval(rail_id=rail.id, revision_n=rev.n, sha256=rev.sha256, reviewer_id=actor.user_id,
                        reviewer_name=actor.name, comment=comment[:4000], engine_version=result.engine_version,
                        result_id=result.id)
    session.add(approval)
    flush_or_conflict(session, f"you approved revision {rev.n} already")
    record(session, actor, action="approve", object_type="rail", object_id=rail.id, object_repr=rail.name,
           product_id=workflows.team_of_rail(session, rail)[1],
           after={"approval": approval.id, "revision": rev.n, "sha256": rev.sha256, "comment": approval.comment,
                  "engine_version": result.engine_version, "result_id": result.id, "verdict": result.verdict})
    session.commit()
    return approval


def list_approvals(*, session: Session, actor: Actor,
                   rail_id: int) -> tuple[list[Approval], int, Reading | None]:
    """(the rail's approvals, its head revision number, the head's current reading)."""
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    return _approvals(session, rail.id), rail.head_n, current_reading(session, rail)


def list_waivers(*, session: Session, actor: Actor, rail_id: int) -> tuple[list[Waiver], int, Reading | None]:
    """(the rail's waivers, its head revision number, the head's current reading)."""
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    return _waivers(session, rail.id), rail.head_n, current_reading(session, rail)


def _problem_check(session: Session, rail: Rail, rev: RailRevision, check_id: str) -> tuple[dict, AnalysisResult]:
    """The worst reading of a failing or marginal check in the revision's current result, and that result."""
    result = _current_result(session, rail, rev, "waive")
    checks = list(result.result.get("checks", []))
    found = [c for c in checks if str(c.get("id")) == check_id]
    if not found:
        raise Invalid(f"revision {rev.n} has no check '{check_id}'",
                      details=[{"field": "check_id", "message": f"is not a check of revision {rev.n}"}])
    worst = next((c for c in found if c.get("verdict") == "fail"), None) or \
        next((c for c in found if c.get("verdict") == "marginal"), None)
    if worst is None:
        raise Invalid(f"check '{check_id}' of revision {rev.n} is {found[0].get('verdict')}: only failing or "
                      "marginal checks are waived",
                      details=[{"field": "check_id", "message": "is neither failing nor marginal"}])
    return worst, result


def _add_waiver(session: Session, actor: Actor, rail: Rail, rev: RailRevision, found: tuple[dict, AnalysisResult],
                reason: str, carried_from: Waiver | None) -> Waiver:
    check, result = found
    check_id, verdict = str(check.get("id")), str(check.get("verdict"))
    earlier = session.scalars(select(Waiver).where(Waiver.rail_id == rail.id, Waiver.revision_n == rev.n,
                                                   Waiver.check_id == check_id).order_by(Waiver.id)).all()
    still = next((w for w in earlier if waiver_covers(w.verdict, verdict)), None)
    if still is not None:
        raise Conflict(f"check '{check_id}' of revision {rev.n} has a waiver already (waiver {still.id})")
    waiver = Waiver(rail_id=rail.id, revision_n=rev.n, sha256=rev.sha256, check_id=check_id,
                    check_title=str(check.get("title", ""))[:200], verdict=verdict,
                    reason=reason[:4000], reviewer_id=actor.user_id, reviewer_name=actor.name,
                    carried_from_id=carried_from.id if carried_from else None,
                    engine_version=result.engine_version, result_id=result.id)
    session.add(waiver)
    flush_or_conflict(session, f"check '{check_id}' of revision {rev.n} has a waiver already")
    after = {"waiver": waiver.id, "revision": rev.n, "sha256": rev.sha256, "check_id": check_id,
             "verdict": waiver.verdict, "value": check.get("value"), "limit": check.get("limit"),
             "unit": check.get("unit"), "reason": waiver.reason, "engine_version": result.engine_version,
             "result_id": result.id}
    if earlier:
        after["replaces"] = [{"waiver": w.id, "verdict": w.verdict, "engine_version": w.engine_version}
                             for w in earlier]
    if carried_from is not None:
        after["carried_from"] = {"waiver": carried_from.id, "revision": carried_from.revision_n}
    record(session, actor, action="carry_waiver" if carried_from else "waive", object_type="rail",
           object_id=rail.id, object_repr=rail.name, product_id=workflows.team_of_rail(session, rail)[1],
           after=after)
    return waiver


def waive(*, session: Session, actor: Actor, rail_id: int, sha256: str, check_id: str, reason: str) -> Waiver:
    """Waive a failing or marginal check of the rail's current revision, with a reason (reviewers; a failing
    check only by the role the team's rules name)."""
    _require_waiver_role(session, actor, rail_id)
    reason = (reason or "").strip()
    if not reason:
        raise Invalid("a waiver needs a reason: say why the reading is acceptable",
                      details=[{"field": "reason", "message": "is required: say why the reading is acceptable"}])
    rail = _locked_rail(session, actor, rail_id)
    rev = _current_revision(session, rail, sha256, "waiving a check of")
    _refuse_rail_author(session, actor, rail, rev)
    found = _problem_check(session, rail, rev, (check_id or "").strip())
    _may_waive(session, actor, rail, rev, str(found[0].get("verdict")))
    waiver = _add_waiver(session, actor, rail, rev, found, reason, None)
    session.commit()
    return waiver


def carry_waiver(*, session: Session, actor: Actor, rail_id: int, waiver_id: int, sha256: str,
                 reason: str | None = None) -> Waiver:
    """Carry a waiver of an earlier revision to the current one (reviewers; the check must still need it, and
    the team's waiver rules apply as to a new waiver)."""
    _require_waiver_role(session, actor, rail_id)
    rail = _locked_rail(session, actor, rail_id)
    source = session.get(Waiver, waiver_id)
    if source is None or source.rail_id != rail.id:
        raise NotFound(f"rail {rail_id} has no waiver {waiver_id}")
    rev = _current_revision(session, rail, sha256, "carrying a waiver to")
    if source.revision_n == rev.n:
        raise Conflict(f"waiver {waiver_id} covers revision {rev.n} already")
    _refuse_rail_author(session, actor, rail, rev)
    found = _problem_check(session, rail, rev, source.check_id)
    _may_waive(session, actor, rail, rev, str(found[0].get("verdict")))
    text = (reason or "").strip() or source.reason
    waiver = _add_waiver(session, actor, rail, rev, found, text, source)
    session.commit()
    return waiver


def take_transition(*, session: Session, actor: Actor, rail_id: int, transition: str, sha256: str,
                    comment: str = "") -> dict[str, Any]:
    """Move the rail along one of its workflow's transitions, when the role may and its demands are met."""
    actor.require(Permission.ADVANCE)
    rail = _locked_rail(session, actor, rail_id)
    rev = _current_revision(session, rail, sha256, "moving")
    team_id, product_id = workflows.team_of_rail(session, rail)
    wf = workflows.definition_for_team(session, team_id)
    row = workflows.state_of(session, rail, wf)
    step = wf.transition(row.state, (transition or "").strip())
    if step is None:
        offered = ", ".join(f"'{t.name}'" for t in wf.transitions_from(row.state)) or "none"
        raise Invalid(f"the rail is in '{row.state}', which offers no transition '{transition}' (it offers {offered})",
                      details=[{"field": "transition", "message": "is not offered from the current state"}])
    if not step.allows(actor.role):
        raise Forbidden(f"'{step.name}' is for {', '.join(step.roles)}; your role is {actor.role}")
    problems = blockers(step, rail_facts(session, rail, row.state))
    if problems:
        raise TransitionBlocked(f"'{step.name}' cannot be taken yet: " + "; ".join(b.message for b in problems),
                                details=[b.as_dict() for b in problems])
    source = row.state
    workflows.move_rail(session, actor, rail, row, step.target, product_id=product_id,
                        extra={"transition": step.name, "sha256": rev.sha256, "comment": (comment or "")[:4000]})
    _archive_if_flagged(session, actor, rail, wf, step.target, step.name)
    session.commit()
    return {"rail_id": rail.id, "from": source, "to": step.target, "transition": step.name, "revision": rev.n,
            "signed_off": wf.is_signed_off(step.target)}


# --- archiving the record on entering a flagged state ---------------------------------------


def _archive_if_flagged(session: Session, actor: Actor, rail: Rail, wf: WorkflowDef, state: str,
                        transition: str) -> None:
    """Entering a state that "archives the record": the board's report is archived once all its rails
    stand in such a state (:func:`server.services.reports.archive_on_entry`; in this transaction)."""
    if wf.archives(state):
        reports.archive_on_entry(session, actor, rail, wf, state, transition=transition)
