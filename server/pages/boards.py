"""The board page: its rails in a sortable, filterable table, whole-board analysis, the supply budget."""

from __future__ import annotations

import json
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from server.services import jobs
from server.auth import CurrentActor, require, require_any
from server.db import SessionDep
from server.pages import signoff_view
from server.analysis.sequence import SEQUENCE_UNITS, sequence_title, timeline_csv
from server.analysis.words import generic_path
from server.pages.display import VERDICT_ORDER, check_records, fmt, verdict_style, worst_check
from server.pages.history import diff_value
from server.pages.page_cache import cached_page
from server.pages.plots import budget_figure, sequence_figure
from server.pages.rendering import page_context, redirect, render
from server.services import budget, live, overview, reviews, sequences
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Invalid, NotFound, ServiceError
from server.workflow import FAIL_WAIVER_ROLES, WaiverRules, waiver_refusal

router = APIRouter(include_in_schema=False)
Analyst = Annotated[Actor, Depends(require(Permission.ANALYZE))]
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
Reviewer = Annotated[Actor, Depends(require(Permission.REVIEW))]
Mover = Annotated[Actor, Depends(require(Permission.ADVANCE))]
# reviewers, or the role a team names for failing checks: the sequence service applies the team's rules
Waiving = Annotated[Actor, Depends(require_any(Permission.REVIEW, *FAIL_WAIVER_ROLES))]
MODES = ("hard", "slew", "current_limit", "power_limit")


def supply_text(supply: dict[str, Any]) -> str:
    text = f"{fmt(supply.get('v_nom'), 'V')} ({fmt(supply.get('v_min'), 'V')} to {fmt(supply.get('v_max'), 'V')})"
    return text


def _row(r: dict[str, Any], so: dict[str, Any]) -> dict[str, Any]:
    worst = worst_check(check_records(r["checks"]))
    return {
        "id": r["id"], "name": r["name"], "mode": r["mode"], "head_n": r["head_n"],
        "supply": supply_text(r["supply"]), "supply_sort": r["supply"].get("v_nom") or 0,
        "c": fmt(r["c_load"], "F"), "c_sort": r["c_load"] or 0,
        "verdict": r["verdict"], "verdict_sort": verdict_style(r["verdict"]).severity, "outdated": r.get("outdated"),
        "worst": worst, "worst_sort": worst["margin"] if worst and worst["margin"] is not None else "",
        "state": so["state"], "signed_off": so["signed_off"], "approvals": so["approvals"], "stale": so["stale"],
        "waivers": so["waivers"], "analysed_at": r["analysed_at"],
        "analysed_sort": r["analysed_at"].isoformat() if r["analysed_at"] else "",
    }


def _budget_title(entry: dict[str, Any]) -> tuple[str, str]:
    """Title of a supply's budget plot, and its verdict in words."""
    s = entry["supply"]
    name = f"{fmt(s.get('v_nom'), 'V')} supply ({len(entry['rails'])} rail{'' if len(entry['rails']) == 1 else 's'})"
    if entry["peak"] is None:
        return name, "no start-up results yet"
    if entry["i_max"] is None:
        words = f"peak {fmt(entry['peak'], 'A')}; the supply gives no i_max to compare with"
    else:
        words = (f"peak {fmt(entry['peak'], 'A')} at {fmt(entry['t_peak'], 's')} against i_max "
                 f"{fmt(entry['i_max'], 'A')}: {'over budget' if entry['over'] else 'within budget'}")
    return name, words


def _waiving(actor: Actor, rules: dict[str, Any], checks: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The failing or marginal checks of the current result, each with why the actor may not waive it (None: they
    may; the team's rules, read by the rail sign-off's function)."""
    team = WaiverRules(two_person=rules["two_person"], fail_waiver_role=rules["fail_waiver_role"])
    may = actor.can(Permission.REVIEW) or (actor.role in FAIL_WAIVER_ROLES and actor.role == team.fail_waiver_role)
    return [{**c, "refusal": waiver_refusal(team, actor.role, c["verdict"]) if may else None, "may": may}
            for c in checks]


_FRACTIONS = ("rails[].power_good", "rails[].enable.threshold")


def sequence_value(path: str, value: Any) -> str:
    """A value of the sequence document as a person reads it: engineering notation with its unit, a power-good
    threshold as a percentage of the rail's output; inside an inline rail, as the rail's history shows it."""
    head, sep, inner = path.partition(".rail.")
    if sep and head.startswith("rails["):
        return diff_value(inner, value)
    generic = generic_path(path)
    numeric = isinstance(value, (int, float)) and not isinstance(value, bool)
    if generic in _FRACTIONS and numeric:
        return f"{value:.0%} of the rail's output"
    kind = SEQUENCE_UNITS.get(generic)
    if kind is not None and numeric:
        return fmt(float(value), kind, 4)
    if kind is not None and isinstance(value, list) and all(isinstance(v, (int, float)) for v in value):
        return ", ".join(fmt(float(v), kind, 4) for v in value) or "(none)"
    return diff_value(path, value) if not isinstance(value, str) else value


def sequence_history(session: Session, actor: Actor, board_id: int) -> list[dict[str, Any]]:
    """The sequence's latest revisions, each with its changes from the one before in words."""
    history = sequences.revision_history(session=session, actor=actor, board_id=board_id)
    for rev in history:
        if rev["changes"] is not None:
            rev["changes"] = [{"field": c["field"], "title": sequence_title(c["field"]), "change": c["change"],
                               "old": sequence_value(c["field"], c["old"]),
                               "new": sequence_value(c["field"], c["new"])} for c in rev["changes"]]
    return history


def sequence_context(session: Session, actor: Actor, board_id: int, *, text: str | None = None,
                     error: dict[str, Any] | None = None,
                     signoff_error: dict[str, Any] | None = None) -> dict[str, Any]:
    """The board's power-up sequence as the page shows it: the stored result's checks and timelines
    (one per corner), its failing checks with their waivers, its approvals and waivers, and its document as JSON
    for editing. While the result of the rails as they are now is computed, its job, and the last result of older
    inputs marked outdated. ``signoff_error``: a refused waiver or approval, shown beside its form. Reads only."""
    try:
        seq = sequences.get_sequence(session=session, actor=actor, board_id=board_id)
    except NotFound:
        return {"exists": False, "text": text or "", "error": error}
    data = sequences.sequence_dict(session, seq, actor=actor)
    outdated = data["outdated_result"] if data["result"] is None else None
    shown = data["result"] or outdated or {}
    corners = []
    for c in shown.get("corners", []):
        title = f"Board start-up at the {c['title']}"
        corners.append({"id": f"sequence-{c['id']}", "title": title, "figure": sequence_figure(c, title),
                        "checks": [ch for ch in shown["checks"] if ch["corner"] == c["id"]],
                        "finished": c["finished"]})
    job = data["analysis"]["job"]
    return {"exists": True, "n": data["n"], "sha256": data["sha256"], "author": data["author"],
            "verdict": data["result"]["verdict"] if data["result"] else None, "current": data["result"] is not None,
            "analysis": data["analysis"]["state"], "job": job,
            "outdated": outdated and {"verdict": outdated["verdict"], "revision_n": outdated["revision_n"],
                                      "because": outdated["outdated_because"], "computed_at": outdated["computed_at"]},
            "corners": corners, "approvals": data["approvals"], "inputs_sha256": data["inputs_sha256"],
            "waivers": data["waivers"], "problem_checks": _waiving(actor, data["rules"], data["problem_checks"]),
            "blocked": data["approval_blocked"], "rules": data["rules"], "signoff_error": signoff_error,
            "workflow": data["workflow"], "state": data["state"], "transitions": data["transitions"],
            "conventions": shown.get("conventions", []), "caution": shown.get("caution"),
            "problem": shown.get("error"), "duration_s": shown.get("duration_s"),
            "history": sequence_history(session, actor, board_id),
            "text": text if text is not None else json.dumps(data["document"], indent=2), "error": error}


def board_context(session: Session, actor: Actor, board_id: int, *, q: str = "", verdict: str = "",
                  mode: str = "", sequence: dict[str, Any] | None = None) -> dict[str, Any]:
    data = overview.board_rails(session=session, actor=actor, board_id=board_id)
    signoffs = signoff_view.board_signoff(session, board_id, data["product"].team_id)
    rows = [_row(r, signoffs[r["id"]]) for r in data["rails"]]
    counts = {}
    for r in rows:
        counts[r["verdict"]] = counts.get(r["verdict"], 0) + 1
    shown = [r for r in rows if (not q or q.lower() in r["name"].lower())
             and (not verdict or verdict_style(r["verdict"]).word == verdict) and (not mode or r["mode"] == mode)]
    supplies = []
    for k, entry in enumerate(budget.board_budget(session=session, actor=actor, board_id=board_id,
                                                  rails=data["rails"])):
        name, words = _budget_title(entry)
        supplies.append({"id": f"budget-{k}", "name": name, "words": words, "over": entry["over"],
                         "missing": entry["missing"], "figure": budget_figure(entry, f"{name}: {words}"),
                         "rails": entry["rails"]})
    job = overview.active_job(session=session, board_id=board_id, kind="board")
    assigns_others = actor.can(Permission.RISK) or actor.can(Permission.ADMIN)
    team_id = data["product"].team_id
    review = {"assigned": reviews.list_assignments(session=session, actor=actor, board_id=board_id),
              "reviewers": reviews.team_reviewers(session=session, actor=actor, team_id=team_id)
              if assigns_others else [],
              "may_take": actor.can(Permission.REVIEW)}
    review["may_take"] = review["may_take"] and not any(a["reviewer_id"] == actor.user_id for a in review["assigned"])
    return {"board": data["board"], "product": data["product"], "rows": shown, "total": len(rows),
            "retired": data["retired"], "review": review,
            "counts": [(v, counts[v]) for v in VERDICT_ORDER if counts.get(v)], "supplies": supplies,
            "job": job, "filters": {"q": q, "verdict": verdict, "mode": mode}, "modes": MODES,
            "sequence": sequence or sequence_context(session, actor, board_id),
            "live": live.board_state(session=session, actor=actor, board_id=board_id),
            "verdict_words": [verdict_style(v).word for v in VERDICT_ORDER]}


@router.get("/boards/{board_id}", response_class=HTMLResponse)
def board_page(board_id: int, request: Request, session: SessionDep, actor: CurrentActor, q: str = "",
               verdict: str = "", mode: str = "") -> Response:
    return cached_page(request, actor, "board.html",
                       lambda: board_context(session, actor, board_id, q=q, verdict=verdict, mode=mode))


@router.get("/boards/{board_id}/sequence.csv")
def sequence_csv(board_id: int, session: SessionDep, actor: CurrentActor) -> Response:
    """The time lines of the sequence's stored result of the board as it is now, as CSV (never an outdated one)."""
    seq = sequences.get_sequence(session=session, actor=actor, board_id=board_id)
    row = sequences.current_result(session, seq)
    if row is None:
        raise NotFound("the power-up sequence of the board as it is now has no result yet: its analysis is queued "
                       "or running")
    return Response(timeline_csv(row.result), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="sequence-board-{board_id}-'
                                                    f'revision-{seq.head_n}.csv"'})


@router.post("/boards/{board_id}/analyses")
def analyse_board(board_id: int, session: SessionDep, actor: Analyst) -> RedirectResponse:
    """Queue every rail of the board; the board page shows the progress."""
    jobs.enqueue_board(session=session, actor=actor, board_id=board_id)
    return redirect(f"/boards/{board_id}#analysis")


@router.post("/boards/{board_id}/sequence", response_class=HTMLResponse)
def save_sequence(board_id: int, request: Request, session: SessionDep, actor: Editor,
                  document: Annotated[str, Form()] = "", message: Annotated[str, Form()] = "") -> Any:
    """Save the board's power-up sequence from its JSON form; a document that cannot be read is shown again
    with every problem named, and nothing is stored."""
    try:
        parsed = json.loads(document)
    except json.JSONDecodeError as exc:
        error = {"message": f"The sequence is not valid JSON: {exc}", "details": []}
    else:
        try:
            sequences.save_sequence(session=session, actor=actor, board_id=board_id, document=parsed,
                                    message=message[:500])
            return redirect(f"/boards/{board_id}#sequence")
        except (Invalid, Conflict) as exc:
            session.rollback()
            error = {"message": exc.message, "details": exc.details}
    ctx = board_context(session, actor, board_id,
                        sequence=sequence_context(session, actor, board_id, text=document, error=error))
    return render(request, "board.html", page_context(request, actor, **ctx), 422)


def _sequence_act(request: Request, session: Session, actor: Actor, board_id: int, action, *, form: str,
                  typed: dict[str, str]) -> Response:
    """Run a sign-off action on the sequence; a refusal renders the board page with the reason beside the form
    that was sent and what was typed kept."""
    try:
        action()
    except ServiceError as exc:
        session.rollback()
        failed = {"form": form, "message": exc.message, "typed": typed}
        ctx = board_context(session, actor, board_id,
                            sequence=sequence_context(session, actor, board_id, signoff_error=failed))
        return render(request, "board.html", page_context(request, actor, **ctx), exc.status)
    return redirect(f"/boards/{board_id}#sequence-signoff")


@router.post("/boards/{board_id}/sequence/approvals")
def approve_sequence(board_id: int, request: Request, session: SessionDep, actor: Reviewer,
                     sha256: Annotated[str, Form()] = "", comment: Annotated[str, Form()] = "") -> Response:
    """Approve the board's sequence as its current result reads it (a refusal says why beside the form)."""
    return _sequence_act(request, session, actor, board_id, lambda: sequences.approve(
        session=session, actor=actor, board_id=board_id, sha256=sha256, comment=comment.strip()[:2000] or "approved"),
        form="approve", typed={"comment": comment})


@router.post("/boards/{board_id}/sequence/waivers")
def waive_sequence_check(board_id: int, request: Request, session: SessionDep, actor: Waiving,
                         sha256: Annotated[str, Form()] = "", inputs_sha256: Annotated[str, Form()] = "",
                         check_id: Annotated[str, Form()] = "", reason: Annotated[str, Form()] = "") -> Response:
    """Waive a failing or marginal check of the sequence's current result, with a reason (the team's rules apply;
    a refusal says why beside the check's form)."""
    return _sequence_act(request, session, actor, board_id, lambda: sequences.waive(
        session=session, actor=actor, board_id=board_id, sha256=sha256, inputs_sha256=inputs_sha256 or None,
        check_id=check_id, reason=reason[:4000]), form=f"waive:{check_id}", typed={"reason": reason})


@router.post("/boards/{board_id}/sequence/transitions")
def take_sequence_transition(board_id: int, request: Request, session: SessionDep, actor: Mover,
                             sha256: Annotated[str, Form()] = "", transition: Annotated[str, Form()] = "",
                             comment: Annotated[str, Form()] = "") -> Response:
    """Move the board's sequence along a transition of its team's workflow (a refusal says why beside its button)."""
    return _sequence_act(request, session, actor, board_id, lambda: sequences.take_transition(
        session=session, actor=actor, board_id=board_id, transition=transition, sha256=sha256,
        comment=comment.strip()[:4000]), form=f"transition:{transition}", typed={"comment": comment})
