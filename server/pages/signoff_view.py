"""Sign-off on the pages: workflow state, approvals (stale ones marked) and waivers of rails.

The rail page shows a rail's sign-off status and offers the transitions, approval and
waivers its viewer may give; each approval and waiver says which engine's result it was
given against, and when that is not the current result. The board table and the product
overview show each rail's state and its approval and waiver counts. Everything comes from
the sign-off services.

When the head revision's only result is of an older engine, ``signoff["outdated"]`` holds
what ``partials/outdated.html`` shows ("Result of engine X; the current engine is Y: re-run
pending / re-run now"); the rail page includes it with
``{% with outdated = signoff.outdated %}{% include "partials/outdated.html" %}{% endwith %}``.

The header block at the top of the rail page (:func:`header_context`) reads the same status:
verdict, workflow state, current and stale approvals, waivers (those of failing checks marked
apart), what each transition from here still needs, and the actions this user may take now,
each a link to its form.

Provides :func:`rail_signoff`, :func:`outdated_context`, :func:`waivers_by_check`,
:func:`board_signoff`, :func:`product_states`, :func:`header_context`.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from server.services import engine_change, overview, reviews, signoff
from server.services.access import Actor, Permission
from server.workflow import waiver_refusal, WaiverRules

__all__ = ["rail_signoff", "outdated_context", "waivers_by_check", "board_signoff", "product_states",
           "header_context"]


def outdated_context(session: Session, actor: Actor, status: dict[str, Any]) -> dict[str, Any] | None:
    """What ``partials/outdated.html`` needs when the head revision's result is of another engine
    version (None otherwise): that engine and its verdict, the current engine, and whether a
    re-run at the current engine is pending, failed, or may be asked for now."""
    result = status.get("result")
    if not result or not result["outdated"]:
        return None
    head = status["head"]
    job = engine_change.rerun_job(session, rail_id=status["rail_id"], sha256=head["sha256"])
    pending = job is not None and job.state in ("queued", "running")
    return {"rail_id": status["rail_id"], "revision": head["n"], "engine_version": result["engine_version"],
            "verdict": result["verdict"], "computed_at": result["created_at"],
            "current_engine": result["current_engine"], "pending": pending,
            "job": {"id": job.id, "state": job.state, "error": job.error or None} if job is not None else None,
            "failed": job is not None and job.state == "failed",
            "may_rerun": actor.can(Permission.ANALYZE) and not pending}


def rail_signoff(session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    """The rail's sign-off status, with what this actor may do about it.

    ``may_review``: the actor reviews and did not author the current revision (approve, waive);
    ``waivable``: failing or marginal checks of the current revision without a waiver;
    ``carryable``: waivers of earlier revisions whose check still needs one now.
    """
    status = signoff.signoff_status(session=session, actor=actor, rail_id=rail_id)
    head = status["head"]
    own = head.get("author_id") is not None and head["author_id"] == actor.user_id
    current = [w for w in status["waivers"] if w.get("current")]
    waived_now = {w["check_id"] for w in current if w.get("covers") is not False}
    open_checks = [c for c in status["checks"]["checks"] if c["id"] in status["checks"]["open"]]
    seen: set[str] = set()
    waivable = []
    for c in open_checks:
        if c["id"] not in seen:
            seen.add(c["id"])
            waivable.append(c)
    carryable = [w for w in status["waivers"] if not w.get("current") and w["check_id"] in seen
                 and w["check_id"] not in waived_now]
    approved_by_me = any(a["reviewer_id"] == actor.user_id and a["revision"] == head["n"] and not a["stale"]
                         for a in status["approvals"])
    rules = WaiverRules(**status["rules"])
    # what the team's rules let this actor waive, and what they keep from them (in words)
    may_waive_role = actor.can(Permission.REVIEW) or actor.role == rules.fail_waiver_role
    not_waivable = [{**c, "why": why} for c in waivable
                    if (why := waiver_refusal(rules, actor.role, c["verdict"])) is not None]
    waivable = [c for c in waivable if waiver_refusal(rules, actor.role, c["verdict"]) is None]
    waived_by_me = [w for w in current if w.get("covers") is not False and w["reviewer_id"] == actor.user_id]
    two_person_bars_approval = rules.two_person and bool(waived_by_me)
    two_person_bars_waiver = rules.two_person and approved_by_me
    retired = status["retired"]
    return {**status, "own_revision": own, "may_review": actor.can(Permission.REVIEW) and not own and not retired,
            "may_waive": may_waive_role and not own and not retired and not two_person_bars_waiver,
            "not_waivable": not_waivable if may_waive_role and not own else [],
            "two_person_bars_approval": two_person_bars_approval, "two_person_bars_waiver": two_person_bars_waiver,
            "outdated": outdated_context(session, actor, status),
            "needs_result": status["result"] is None or status["result"]["outdated"],
            "approved_by_me": approved_by_me, "current_waivers": current, "waivable": waivable,
            "carryable": carryable,
            "current_approvals": [a for a in status["approvals"] if not a["stale"] and a["revision"] == head["n"]],
            "stale_approvals": [a for a in status["approvals"] if a["stale"]]}


def waivers_by_check(status: dict[str, Any] | None) -> dict[str, dict[str, Any]]:
    """The waivers of the rail's current revision that still cover their check, by check id (the newest)."""
    return {w["check_id"]: w for w in (status or {}).get("current_waivers", []) if w.get("covers") is not False}


def board_signoff(session: Session, board_id: int, team_id: int) -> dict[int, dict[str, Any]]:
    """Workflow state, current and stale approvals and current waivers of each rail of a board."""
    return overview.signoff_summary(session, team_id=team_id, board_id=board_id)


def product_states(session: Session, product_id: int, team_id: int) -> dict[str, int]:
    """A product's rails counted by workflow state."""
    counts: dict[str, int] = {}
    for entry in overview.signoff_summary(session, team_id=team_id, product_id=product_id).values():
        counts[entry["state"]] = counts.get(entry["state"], 0) + 1
    return counts


def _transition_needs(t: dict[str, Any]) -> dict[str, Any]:
    return {"name": t["name"], "to": t["to"], "roles": t["roles"], "ready": not t["blockers"],
            "needs": [b["message"] for b in t["blockers"]], "you_may_take": t["you_may_take"]}


def header_context(session: Session, actor: Actor, so: dict[str, Any], *, verdict: str | None) -> dict[str, Any]:
    """The sign-off header of the rail page: the status in a few lines, and what this user may do now.

    ``actions``: (label, href, id) links to the sign-off forms further down the page, in the order a
    person would take them (editing, copying and the history are the page's own buttons below it).
    """
    head_n = so["head"]["n"]
    current = so["current_approvals"]
    stale = [a for a in so["stale_approvals"]]
    renewed = {a["reviewer_id"] for a in current}
    stale_open = [a for a in stale if a["reviewer_id"] not in renewed]
    waivers = [w for w in so["current_waivers"] if w.get("covers") is not False]
    actions: list[dict[str, str]] = []
    retired = so["retired"]
    if not retired:
        for k, t in enumerate(so["transitions"], start=1):
            if t["you_may_take"]:
                actions.append({"label": t["name"].capitalize(), "href": f"#transition-{k}", "id": f"act-transition-{k}"})
        if so["may_review"] and not so["approved_by_me"] and not so["needs_result"] \
                and not so["two_person_bars_approval"]:
            actions.append({"label": f"Approve revision {head_n}", "href": "#approve-form", "id": "act-approve"})
        if so["may_waive"] and so["waivable"]:
            actions.append({"label": "Waive a check", "href": "#waive-form", "id": "act-waive"})
    notes = []
    if so["two_person_bars_approval"]:
        notes.append(f"You waived a check of revision {head_n}: under the team's two-person rule another reviewer "
                     "approves it.")
    if so["two_person_bars_waiver"] and so["checks"]["open"]:
        notes.append(f"You approved revision {head_n}: under the team's two-person rule another reviewer waives "
                     "its checks.")
    if so["own_revision"] and actor.can(Permission.REVIEW):
        notes.append(f"You authored revision {head_n}: another reviewer approves it and waives its checks.")
    assigned = reviews.list_assignments(session=session, actor=actor, rail_id=so["rail_id"])
    assigns_others = actor.can(Permission.RISK) or actor.can(Permission.ADMIN)
    reviewers = reviews.team_reviewers(session=session, actor=actor, team_id=so["team_id"]) \
        if assigns_others and not retired else []
    return {"verdict": verdict, "head_n": head_n, "state": so["state"], "current": current, "stale": stale_open,
            "waivers": waivers, "past_edge": [w for w in waivers if w.get("past_edge")],
            "open_checks": so["checks"]["open"], "next": [_transition_needs(t) for t in so["transitions"]],
            "actions": actions, "notes": notes, "rules": so["rules"], "retired": retired,
            "assigned": assigned, "reviewers": reviewers, "may_take": actor.can(Permission.REVIEW) and not so["own_revision"]
            and not retired and not any(a["reviewer_id"] == actor.user_id for a in assigned)}
