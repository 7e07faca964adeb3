"""A board's sign-off report, and its archived copies.

The report of a board holds, per rail: the inputs of its current revision, the check table
of that revision's stored result (value, limit, margin, nominal reading, the worst case's
corner in words), the key figures, the stored start-up waveforms for the plots, the revision
number and sha256, the workflow state, the approvals and waivers of that revision with names
and times; and for the board: the team's workflow (its sign-off rules) as it stands, the
analysis engine version and the caution. Every number is read from the stored records and
turned into text by the analysis core's formatters: nothing is recomputed here.

:func:`board_report` is the read model both renderers take: the report page
(``server/pages/reports.py``) and the PDF (:mod:`server.report_pdf`, made on the server).

The board's power-up sequence is read by :mod:`server.services.sequences`, which sits above this
module (it queues jobs, whose completion reaches the sign-off, which archives here): the caller of
:func:`live_pdf` passes the sequence as :func:`server.services.sequences.sequence_dict` reads it,
and this module puts it in words (:func:`sequence_part`). An archived copy, made inside a sign-off
transition, cannot read it: it says that the board has a sequence and that the copy leaves it out.

Archiving (:func:`archive_on_entry`, a step the sign-off calls when a rail enters a state
that "archives the record"): once every rail of the board stands in such a state, the PDF of
the report as it reads then is stored with its sha256 in ``archived_reports``. Archived
copies are append-only: this module only adds them (the database refuses changes and
deletions), and a later edit of a rail changes the live report, never an archived copy.
"""

from __future__ import annotations

import hashlib
import re
import threading
from collections import OrderedDict
from datetime import datetime
from typing import Any

from sqlalchemy import Text, func, select, type_coerce
from sqlalchemy.dialects import postgresql
from sqlalchemy.orm import Session

from server import report_pdf
from server.analysis import CAUTION, derated_soa_curves
from server.analysis.report import bank_view, limit_text, margin_text, value_text
from server.analysis.words import rule_title
from server.models import (AnalysisResult, Approval, ArchivedReport, Board, BoardSequence, JsonType, Product, Rail,
                           RailRevision, RailState, Team, Waiver, Workflow, utcnow)
from server.services import workflows
from server.services.access import Actor
from server.services.audit import record
from server.services.catalog import get_board
from server.services.errors import NotFound
from server.services.rails import input_sections
from server.services.results import ReadingHead, engine_version, reading_heads
from server.workflow import WorkflowDef

__all__ = ["CAUTION", "board_report", "live_pdf", "archive_on_entry", "archive_dict", "list_archives",
           "get_archive", "archive_pdf", "when", "sequence_part"]

BASIS_WORDS = {"standard": "standard", "common practice": "common practice, not a standard",
               "physical limit": "physical limit"}
FOUND_BY_WORDS = {"corner": "a tolerance corner", "search": "the search inside the tolerance box",
                  "nominal": "the nominal point"}
VERDICT_WORDS = {"fail": "fail", "marginal": "marginal", "pass": "pass", "n/a": "n/a", None: "not analysed"}


def when(dt: datetime | None) -> str:
    """A time as people read it in the report (UTC)."""
    return dt.strftime("%Y-%m-%d %H:%M UTC") if dt else "-"


def _check_row(c: dict[str, Any]) -> dict[str, Any]:
    """One check of the stored record in words (texts from the record's fields, nothing recomputed)."""
    unit = c.get("unit") or ""
    corner = c.get("corner") or ""
    found = FOUND_BY_WORDS.get(c.get("found_by") or "")
    return {"id": str(c.get("id")), "title": c.get("title") or str(c.get("id")), "verdict": c.get("verdict"),
            "value": value_text(c.get("value"), unit), "limit": limit_text(c), "margin": margin_text(c.get("margin")),
            "nominal": value_text((c.get("nominal") or {}).get("value"), unit),
            "corner": corner or "nominal point", "found_by": found or "",
            "basis": BASIS_WORDS.get(c.get("basis") or "", c.get("basis") or "")}


def _figure_rows(result: dict[str, Any]) -> list[dict[str, str]]:
    return [{"title": f.get("title", ""), "nominal": value_text(f.get("nominal"), f.get("unit", "")),
             "worst": value_text(f.get("worst"), f.get("unit", "")) if f.get("worst") is not None else "-",
             "corner": f.get("corner") or ""} for f in result.get("figures") or []]


def _rule_rows(result: dict[str, Any], document: dict[str, Any]) -> list[dict[str, str]]:
    """The team limits the result was computed with, and whether the rail overrides them."""
    own = document.get("rules") or {}
    kinds = {"tj_headroom": "K"}
    return [{"title": rule_title(name),
             "value": f"{value:.4g} K" if kinds.get(name) == "K" else f"{value:.4g}",
             "source": "set on this rail" if name in own else "team default"}
            for name, value in sorted((result.get("rules") or {}).items())]


def _basis_words(result: dict[str, Any]) -> str:
    wc = result.get("worst_case") or {}
    if result.get("basis") == "nominal":
        return "nominal point only (a quick look, not a sign-off verdict)"
    return (f"worst case over {wc.get('corners', 0)} tolerance corners and {wc.get('search_points', 0)} points "
            "searched inside the tolerance box")


def _approval_row(a: Approval) -> dict[str, Any]:
    return {"reviewer": a.reviewer_name, "at": when(a.created_at), "created_at": a.created_at.isoformat(),
            "comment": a.comment, "engine_version": a.engine_version or "-", "stale": a.stale_at is not None,
            "stale_reason": a.stale_reason or ""}


def _waiver_row(w: Waiver) -> dict[str, Any]:
    return {"check": w.check_title or w.check_id, "check_id": w.check_id, "verdict": w.verdict,
            "reason": w.reason, "reviewer": w.reviewer_name, "at": when(w.created_at),
            "created_at": w.created_at.isoformat(), "engine_version": w.engine_version or "-",
            "carried": w.carried_from_id is not None}


def _plots(result: dict[str, Any], document: dict[str, Any]) -> dict[str, Any] | None:
    """The stored arrays the PDF's plots draw: the start-up waveforms, the SOA curves at the rail's
    ambient and the stored start-up pulse and short-circuit points."""
    startup = result.get("startup") or {}
    waves = startup.get("waveforms")
    if not waves or not waves.get("t"):
        return None
    fet = document.get("fet") or {}
    t_amb = (document.get("environment") or {}).get("t_ambient", 25.0)
    try:
        curves = derated_soa_curves(fet, t_amb) if fet.get("soa") else []
    except (KeyError, TypeError, ValueError):
        curves = []
    sc = result.get("short_circuit") or {}
    points = []
    if sc.get("applies"):
        for label, p in (("short circuit, nominal", sc), ("short circuit, worst case", sc.get("worst") or {})):
            if p.get("v_ds") and p.get("i"):
                points.append({"label": label, "v_ds": p["v_ds"], "i": p["i"]})
    return {"waves": waves, "tj_max": fet.get("tj_max"), "tj_headroom": (result.get("rules") or {}).get("tj_headroom"),
            "t_trip": startup.get("t_trip"), "soa_curves": curves,
            "pulse": {"v_ds": startup.get("pulse_v_ds"), "i": startup.get("pulse_i")}, "points": points}


def _workflow_rules(wf: WorkflowDef, row: Workflow | None) -> dict[str, Any]:
    """The team's sign-off rules as they stand, in words."""
    states = []
    for s in wf.states:
        flags = [w for flag, w in ((s.initial, "initial"), (s.signed_off, "signed off"),
                                   (s.archives, "archives the record")) if flag]
        states.append({"name": s.name, "flags": ", ".join(flags), "description": s.description})
    transitions = []
    for t in wf.transitions:
        demands = []
        if t.demands.approvals:
            demands.append(f"{t.demands.approvals} approval{'s' if t.demands.approvals != 1 else ''} "
                           "of the current revision")
        if t.demands.checks_pass:
            demands.append("every check passes or has a waiver")
        if t.demands.no_stale_approvals:
            demands.append("no stale approval left unrenewed")
        transitions.append({"name": t.name, "source": t.source, "target": t.target, "roles": ", ".join(t.roles),
                            "demands": "; ".join(demands) or "none"})
    return {"name": wf.name, "version": row.version if row is not None else 0,
            "updated_by": row.updated_by if row is not None else "", "updated_at": when(row.updated_at if row else None),
            "states": states, "transitions": transitions, "on_edit": wf.on_edit}


# The parts of a stored result the report reads; the rest (the list of corners above all, most of
# a result's bytes: the report shows the worst case each check record names) stays in the database.
REPORT_PARTS = ("verdict", "basis", "worst_case", "checks", "figures", "rules")
PLOT_PARTS = ("startup", "short_circuit")
RESULT_PARTS = ("engine_version", "name", "verdict", "basis", "signoff", "checks", "figures", "startup",
                "short_circuit", "timer", "retry", "steady", "headroom", "worst_case", "corners", "monte_carlo",
                "rules", "conventions", "notes", "caution")


def _bodies(session: Session, ids: list[int], *, plots: bool) -> dict[int, dict[str, Any]]:
    """The parts the report reads of the stored results ``ids`` (with the start-up waveforms and the
    short-circuit points for ``plots``)."""
    if not ids:
        return {}
    keep = REPORT_PARTS + (PLOT_PARTS if plots else ())
    drop = [k for k in RESULT_PARTS if k not in keep]
    if session.get_bind().dialect.name == "postgresql":
        body = type_coerce(AnalysisResult.result.op("-")(postgresql.array(drop, type_=Text)), JsonType)
    else:
        body = type_coerce(func.json_remove(AnalysisResult.result, *(f"$.{k}" for k in drop)), JsonType)
    return dict(session.execute(select(AnalysisResult.id, body).where(AnalysisResult.id.in_(ids))).all())


# The texts a stored result and its revision's document give (inputs, basis, checks, key figures,
# limits) never change: they are kept per (database, result, revision) in a bounded
# least-recently-used store, and a result's body is read again only for rows not seen before.
_PARTS: OrderedDict[tuple, dict[str, Any]] = OrderedDict()
_PARTS_MAX = 5000
_lock = threading.Lock()


def _parts(doc: dict[str, Any], result: dict[str, Any] | None) -> dict[str, Any]:
    if result is None:
        return {"inputs": input_sections(doc), "basis": "", "checks": [], "figures": [], "rules": [], "bank": None}
    return {"inputs": input_sections(doc), "basis": _basis_words(result),
            "checks": [_check_row(c) for c in result.get("checks") or []], "figures": _figure_rows(result),
            "rules": _rule_rows(result, doc), "bank": bank_view(result.get("bank"))}


def _rail_entry(rail: Rail, head: RailRevision, state: RailState | None, wf: WorkflowDef,
                approvals: list[Approval], waivers: list[Waiver], now: ReadingHead | None,
                parts: dict[str, Any], plots: dict[str, Any] | None) -> dict[str, Any]:
    state_name = state.state if state is not None and wf.has_state(state.state) else wf.initial
    entry: dict[str, Any] = {
        "id": rail.id, "name": rail.name, "mode": rail.mode.replace("_", " "),
        "revision": head.n, "sha256": head.sha256, "author": head.author_name, "saved_at": when(head.created_at),
        "message": head.message,
        "state": {"name": state_name, "signed_off": wf.is_signed_off(state_name),
                  "since": when(state.since if state is not None else None),
                  "by": state.changed_by if state is not None else ""},
        "inputs": parts["inputs"], "result": None, "checks": [], "figures": [], "rules": [], "bank": None,
        "plots": plots,
        "approvals": [_approval_row(a) for a in approvals if a.revision_n == head.n],
        "waivers": [_waiver_row(w) for w in waivers if w.revision_n == head.n],
        "document": head.document,
    }
    if now is not None:
        entry["result"] = {"id": now.id, "engine_version": now.engine_version, "outdated": now.outdated,
                           "verdict": now.verdict, "computed_at": when(now.created_at), "basis": parts["basis"]}
        entry.update(checks=parts["checks"], figures=parts["figures"], rules=parts["rules"], bank=parts.get("bank"))
    return entry


def board_report(*, session: Session, actor: Actor, board_id: int, plots: bool = True) -> dict[str, Any]:
    """The sign-off report of a board as it reads now (any member of the board's team may read it).

    ``plots``: with the stored arrays the PDF's plots draw (the page draws its own from the result).
    """
    board = get_board(session=session, actor=actor, board_id=board_id)
    return _report(session, board, plots=plots)


def _report(session: Session, board: Board, *, plots: bool) -> dict[str, Any]:
    product = session.get(Product, board.product_id)
    team = session.get(Team, product.team_id)
    wf = workflows.definition_for_team(session, team.id)
    wf_row = session.scalar(select(Workflow).where(Workflow.team_id == team.id))
    rails = list(session.scalars(select(Rail).where(Rail.board_id == board.id).order_by(Rail.name)))
    ids = [r.id for r in rails]
    heads = {(rev.rail_id, rev.n): rev for rev in session.scalars(
        select(RailRevision).join(Rail, (Rail.id == RailRevision.rail_id) & (Rail.head_n == RailRevision.n))
        .where(Rail.board_id == board.id))} if ids else {}
    states = {s.rail_id: s for s in session.scalars(select(RailState).where(RailState.rail_id.in_(ids)))} if ids else {}
    approvals: dict[int, list[Approval]] = {}
    waivers: dict[int, list[Waiver]] = {}
    if ids:
        for a in session.scalars(select(Approval).where(Approval.rail_id.in_(ids)).order_by(Approval.id)):
            approvals.setdefault(a.rail_id, []).append(a)
        for w in session.scalars(select(Waiver).where(Waiver.rail_id.in_(ids)).order_by(Waiver.id)):
            waivers.setdefault(w.rail_id, []).append(w)
    readings = reading_heads(session, [rev.sha256 for rev in heads.values()])
    db = str(session.get_bind().url)
    keys = {rev.sha256: (db, readings[rev.sha256].id if rev.sha256 in readings else None, rev.sha256)
            for rev in heads.values()}
    with _lock:
        known = {k: _PARTS[k] for k in keys.values() if k in _PARTS}
    wanted = [k[1] for k in keys.values() if k[1] is not None and (plots or k not in known)]
    bodies = _bodies(session, wanted, plots=plots)
    entries = []
    for r in rails:
        head = heads.get((r.id, r.head_n))
        if head is None:
            continue
        now, key = readings.get(head.sha256), keys[head.sha256]
        body = bodies.get(now.id) if now is not None else None
        parts = known.get(key)
        if parts is None:
            parts = known[key] = _parts(head.document, body)
            with _lock:
                _PARTS[key] = parts
                while len(_PARTS) > _PARTS_MAX:
                    _PARTS.popitem(last=False)
        entries.append(_rail_entry(r, head, states.get(r.id), wf, approvals.get(r.id, []), waivers.get(r.id, []),
                                   now, parts, _plots(body, head.document) if plots and body is not None else None))
    return {"board": {"id": board.id, "name": board.name, "revision": board.revision,
                      "description": board.description},
            "product": {"id": product.id, "name": product.name}, "team": team.name,
            "generated_at": when(utcnow()), "engine_version": engine_version(), "caution": CAUTION,
            "workflow": _workflow_rules(wf, wf_row), "rails": entries}


def _filename(board: Board, what: str) -> str:
    """A download's file name: plain letters, digits and dashes."""
    words = re.sub(r"[^A-Za-z0-9]+", "-", f"{board.name} rev {board.revision}").strip("-").lower() or "board"
    return f"signoff-report-{words}-{what}.pdf"


def live_pdf(*, session: Session, actor: Actor, board_id: int,
             sequence: dict[str, Any] | None = None) -> tuple[bytes, str]:
    """The PDF of the board's report as it reads now, and its file name. ``sequence``: the board's power-up
    sequence as :func:`server.services.sequences.board_sequence` reads it (None: the board has none)."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    report = _report(session, board, plots=True)
    report["sequence"] = sequence_part(sequence) if sequence is not None else None
    return report_pdf.render(report), _filename(board, "live")


# --- the board's power-up sequence in words -------------------------------------------------


def _pending_words(analysis: dict[str, Any]) -> str:
    job = analysis.get("job")
    if job is None:
        return "its analysis is not queued yet"
    return f"job {job['id']} is {job['state']}" + (f" ({job['error']})" if job.get("error") else "")


def sequence_part(data: dict[str, Any]) -> dict[str, Any]:
    """The power-up sequence section of the PDF from :func:`server.services.sequences.sequence_dict`'s read:
    the stored result of the head revision with the rails as they are now (checks in words, the stored time
    series of each corner for the timeline), or that its analysis is pending (no older result is reported,
    as on the report page). Nothing is recomputed."""
    result = data.get("result")
    out: dict[str, Any] = {"n": data["n"], "sha256": data["sha256"], "author": data["author"],
                           "name": (data.get("document") or {}).get("name") or "", "current": result is not None,
                           "pending": "" if result is not None else _pending_words(data.get("analysis") or {}),
                           "verdict": None, "problem": "", "checks": [], "corners": [], "conventions": [],
                           "approvals": [{"reviewer": a["reviewer"], "revision_n": a["revision_n"],
                                          "stale": a["stale"], "stale_reason": a["stale_reason"] or ""}
                                         for a in data.get("approvals") or []],
                           "omitted": False}
    if result is None:
        return out
    titles = {c["id"]: c["title"] for c in result.get("corners") or []}
    out.update(verdict=result.get("verdict"), problem=result.get("error") or "",
               conventions=list(result.get("conventions") or []),
               checks=[{"title": c.get("title") or str(c.get("id")), "corner": titles.get(c.get("corner"), ""),
                        "verdict": c.get("verdict"), "value": value_text(c.get("value"), c.get("unit") or ""),
                        "limit": limit_text(c), "margin": margin_text(c.get("margin")), "reason": c.get("reason") or ""}
                       for c in result.get("checks") or []],
               corners=[{"id": c["id"], "title": c["title"], "t": (c.get("series") or {}).get("t") or [],
                         "supplies": [{"name": s["name"], "uvlo": list(s.get("uvlo") or []), "i_max": s.get("i_max"),
                                       **((c.get("series") or {}).get("supplies") or {}).get(s["id"], {})}
                                      for s in c.get("supplies") or []]}
                        for c in result.get("corners") or []])
    return out


def _archived_sequence(session: Session, board: Board) -> dict[str, Any] | None:
    """What an archived copy says of the board's sequence: that it has one, left out of the copy."""
    n = session.scalar(select(BoardSequence.head_n).where(BoardSequence.board_id == board.id))
    return {"n": n, "omitted": True} if n else None


# --- archived copies -----------------------------------------------------------------------


def archive_on_entry(session: Session, actor: Actor, rail: Rail, wf: WorkflowDef, state: str, *,
                     transition: str) -> ArchivedReport | None:
    """After ``rail`` entered ``state``: when that state archives the record and every rail of the
    board now stands in a state that does, store the board's report as a PDF with its sha256
    (recorded; the caller commits). None when nothing is archived."""
    if not wf.archives(state):
        return None
    session.flush()
    board = rail.board
    rows = session.execute(select(Rail.id, RailState.state).outerjoin(RailState, RailState.rail_id == Rail.id)
                           .where(Rail.board_id == board.id)).all()
    if not rows or not all(s is not None and wf.archives(s) for _, s in rows):
        return None
    report = _report(session, board, plots=True)
    report["sequence"] = _archived_sequence(session, board)
    pdf = report_pdf.render(report)
    digest = hashlib.sha256(pdf).hexdigest()
    row = ArchivedReport(board_id=board.id, product_id=board.product_id, created_by=actor.name, state=state,
                         rails=[{"rail_id": e["id"], "name": e["name"], "revision": e["revision"],
                                 "sha256": e["sha256"]} for e in report["rails"]],
                         occasion={"rail_id": rail.id, "rail": rail.name, "transition": transition, "state": state},
                         engine_version=report["engine_version"], sha256=digest, size=len(pdf), pdf=pdf)
    session.add(row)
    session.flush()
    record(session, actor, action="archive_report", object_type="board", object_id=board.id,
           object_repr=f"{board.name} rev {board.revision}", product_id=board.product_id,
           after={"archived_report": row.id, "sha256": digest, "size": len(pdf), "state": state,
                  "rails": row.rails, "occasion": row.occasion})
    return row


def archive_dict(row: ArchivedReport) -> dict[str, Any]:
    """An archived copy as the API and the pages read it (without its bytes)."""
    return {"id": row.id, "board_id": row.board_id, "created_at": row.created_at.isoformat(),
            "created_by": row.created_by, "state": row.state, "rails": row.rails, "occasion": row.occasion,
            "engine_version": row.engine_version, "sha256": row.sha256, "size": row.size,
            "download": f"/api/v1/archived-reports/{row.id}/pdf"}


def _meta(stmt):  # the columns of a listing: never the bytes
    return stmt.with_only_columns(*(c for c in ArchivedReport.__table__.c if c.key != "pdf"))


def list_archives(*, session: Session, actor: Actor, board_id: int) -> list[dict[str, Any]]:
    """The archived copies of a board's report, newest first."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    rows = session.execute(_meta(select(ArchivedReport)).where(ArchivedReport.board_id == board.id)
                           .order_by(ArchivedReport.id.desc())).all()
    return [archive_dict(r) for r in rows]  # type: ignore[arg-type]


def get_archive(*, session: Session, actor: Actor, archive_id: int) -> dict[str, Any]:
    """One archived copy (its board must be one the actor sees)."""
    row = session.execute(_meta(select(ArchivedReport)).where(ArchivedReport.id == archive_id)).first()
    if row is None:
        raise NotFound(f"no archived report {archive_id}")
    try:
        get_board(session=session, actor=actor, board_id=row.board_id)
    except NotFound:  # another team's board: its archive is not found either
        raise NotFound(f"no archived report {archive_id}") from None
    return archive_dict(row)  # type: ignore[arg-type]


def archive_pdf(*, session: Session, actor: Actor, archive_id: int) -> tuple[bytes, dict[str, Any], str]:
    """The stored bytes of an archived copy, its description and its file name."""
    meta = get_archive(session=session, actor=actor, archive_id=archive_id)
    pdf = session.scalar(select(ArchivedReport.pdf).where(ArchivedReport.id == archive_id))
    board = session.get(Board, meta["board_id"])
    return bytes(pdf), meta, _filename(board, f"archived-{archive_id}")
