"""The rail page: inputs, checks, headroom, the plots, Monte Carlo; and queueing its analyses.

The page reads the stored result of the head revision through the typed
:class:`~server.schemas.result.AnalysisResult`. A result of another engine version is not
read as one: it stays a plain dict, and the page shows it as outdated (the sign-off
context's ``outdated``, ``partials/outdated.html``; for Monte Carlo, a notice).
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from server import models
from server.services import jobs
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.pages import signoff_view
from server.analysis.report import margin_text, value_text
from server.pages.display import bank_view, check_rows, input_sections, read_result, worst_check
from server.pages.plots import (bank_figure, monte_carlo_figure, soa_figure, startup_figure, timer_figure,
                                timer_limits)
from server.pages.page_cache import LruCache, cached_page
from server.pages.rendering import FormDep, form_dict, redirect
from server.schemas.result import AnalysisResult, MonteCarlo
from server.services import live, overview, results
from server.services.access import Actor, Permission
from server.services.errors import Invalid
from server.services.parts import SOA_ENVELOPE
from server.services.rails import document_warnings, get_rail, get_revision, part_status

router = APIRouter(include_in_schema=False)
Analyst = Annotated[Actor, Depends(require(Permission.ANALYZE))]
MC_SAMPLES = (1000, 5000, 20000)
# toleranced parameters whose Monte Carlo distribution the form sets, with their words
MC_PARAMETERS = {"v_s": "Supply voltage", "c": "Load capacitance", "i_limit": "Current limit",
                 "timer_c": "Timer capacitor", "i_charge": "Timer charge current", "v_trip": "Timer trip voltage"}
# drawn only for a rail whose part gives an R_DS(on) maximum (its form shows the choice only then)
MC_SPREAD_PARAMETERS = {"rds_on": "MOSFET R_DS(on)"}


def _key_figures(result: AnalysisResult) -> list[dict[str, Any]]:
    """The key figures, nominal and worst case side by side, as the record holds them."""
    return [{"title": f.title, "nominal": value_text(f.nominal, f.unit),
             "worst": value_text(f.worst, f.unit) if f.worst is not None else "-",
             "corner": f.corner or "", "found_by": f.found_by} for f in result.figures]


def _headroom(result: AnalysisResult) -> list[dict[str, Any]]:
    out = []
    for h in (result.headroom.c_max, result.headroom.limit_max, result.headroom.load_max):
        if h is None:  # the largest load that starts: with a foldback limit only
            continue
        value = value_text(h.value, h.unit) if h.value is not None else None
        out.append({"title": h.title, "value": value, "note": h.note, "status": h.status})
    return out


def _monte_carlo_row(session: Session, sha256: str) -> models.AnalysisResult | None:
    """The newest Monte Carlo run of a revision at the current engine, else its newest of another engine."""
    return (results.latest_result(session, sha256=sha256, monte_carlo=True)
            or results.latest_result(session, sha256=sha256, monte_carlo=True, current_engine_only=False))


# What a stored result renders to. A result row never changes (one revision hash, one engine version, one set
# of options), and the rail document the figures read is the revision's, named by its hash: kept by those,
# bounded, shared by the threads of the process.
RENDERED = LruCache(256)


def _identity(row: models.AnalysisResult) -> tuple:
    """What names a stored result beyond its id (an id may name another result in another database)."""
    return (row.id, row.sha256, row.engine_version, row.options_key, row.created_at, row.verdict)


def _result_parts(row: models.AnalysisResult, sha256: str, doc: dict[str, Any]) -> dict[str, Any]:
    """The rail page's pieces of a stored result at the current engine: drawn once per (result, revision)."""

    def make() -> dict[str, Any]:
        result, bank = read_result(row.result)
        return {"result": result, "checks": check_rows(result.checks), "worst": worst_check(result.checks),
                "key_figures": _key_figures(result), "headroom": _headroom(result),
                "figures": {"startup": startup_figure(result, doc), "soa": soa_figure(result, doc),
                            "timer": timer_figure(result, doc), "bank": bank_figure(bank)},
                "bank": bank_view(bank),
                "timer": result.timer, "timer_limits": timer_limits(result)}

    return RENDERED.get_or_make(("rail", *_identity(row), sha256), make)


def _mc_context(mc_row) -> dict[str, Any] | None:
    if mc_row is None:
        return None
    return RENDERED.get_or_make(("monte-carlo", *_identity(mc_row), results.engine_version()),
                                lambda: _mc_parts(mc_row))


def _mc_parts(mc_row) -> dict[str, Any] | None:
    if mc_row.engine_version != results.engine_version():  # a run of an older engine, in the shape of its time
        return {"outdated": True, "n": mc_row.options.get("monte_carlo"), "engine_version": mc_row.engine_version,
                "created_at": mc_row.created_at}
    mc: MonteCarlo | None = read_result(mc_row.result)[0].monte_carlo
    if mc is None:
        return None
    lo, hi = mc.yield_ci95[:2]
    rows = [{"title": m.title, "applies": m.applies, "fail": m.fail_share, "marginal": m.marginal_share,
             "lowest": margin_text(m.margin.min if m.margin else None),
             "median": margin_text(m.margin.p50 if m.margin else None),
             "worst_case": margin_text(m.worst_case_margin), "beaten": m.beaten}
            for m in mc.checks.values() if m.applies]
    return {"outdated": False, "n": mc.n, "seed": mc.seed, "distributions": mc.distributions,
            "yield": mc.yield_, "lo": lo, "hi": hi, "yield_no_fail": mc.yield_no_fail,
            "created_at": mc_row.created_at, "figure": monte_carlo_figure(mc), "rows": rows,
            "flags": mc.flags, "flag_tolerance": mc.flag_tolerance}


def rail_context(session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    head = get_revision(session=session, actor=actor, rail_id=rail_id)
    doc = head.document
    now = results.reading(session, sha256=head.sha256)
    row = now.row if now is not None and not now.outdated else None  # outdated: signoff["outdated"] shows it
    parts = _result_parts(row, head.sha256, doc) if row is not None else None
    result = parts["result"] if parts is not None else None
    signoff = signoff_view.rail_signoff(session, actor, rail.id)
    waivers = signoff_view.waivers_by_check(signoff)
    header = signoff_view.header_context(session, actor, signoff, verdict=result.verdict if result else None)
    ctx: dict[str, Any] = {
        "rail": rail, "head": head, "board": rail.board, "product": rail.board.product, "document": doc,
        "inputs": input_sections(doc), "part": part_status(session, head), "result_row": row, "result": result,
        "rules_overridden": doc.get("rules") or {}, "signoff": signoff, "waivers": waivers, "header": header,
        "form_error": None,
        "job": overview.active_job(session=session, board_id=rail.board_id, rail_id=rail.id, kind="rail",
                                   sha256=head.sha256),
        "mc_job": overview.active_job(session=session, board_id=rail.board_id, rail_id=rail.id,
                                      kind="monte_carlo", sha256=head.sha256),
        "mc_samples": MC_SAMPLES, "figures": {}, "checks": [], "worst": None, "bank": None,
        "mc_parameters": MC_PARAMETERS | (MC_SPREAD_PARAMETERS if (doc.get("fet") or {}).get("rds_on_max") is not None
                                          else {}),
    }
    if parts is not None:
        ctx.update({k: v for k, v in parts.items() if k != "result"})
    warnings = RENDERED.get_or_make(("warnings", head.sha256), lambda: document_warnings(doc))
    ctx["soa_warnings"] = [w for w in warnings if w["field"].startswith("fet.soa")]
    ctx["input_warnings"] = [w for w in warnings if not w["field"].startswith("fet.soa")]
    ctx["soa_envelope"] = SOA_ENVELOPE
    ctx["mc"] = _mc_context(_monte_carlo_row(session, head.sha256))
    ctx["live"] = live.rail_state(session=session, actor=actor, rail_id=rail.id)
    return ctx


@router.get("/rails/{rail_id}", response_class=HTMLResponse)
def rail_page(rail_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> Response:
    return cached_page(request, actor, "rail.html", lambda: rail_context(session, actor, rail_id))


@router.post("/rails/{rail_id}/analyses")
def analyse_rail(rail_id: int, session: SessionDep, actor: Analyst) -> RedirectResponse:
    """Queue the nominal + corners analysis of the current revision (a stored result answers at once)."""
    jobs.enqueue_rail(session=session, actor=actor, rail_id=rail_id)
    return redirect(f"/rails/{rail_id}#results")


def monte_carlo_options(form: dict[str, str]) -> dict[str, Any]:
    """The options of a Monte Carlo run from its form (Invalid naming the field otherwise)."""
    try:
        n = int(form.get("samples", ""))
    except ValueError:
        n = -1
    if n not in MC_SAMPLES:
        raise Invalid("choose a sample count", details=[{"field": "samples", "message": "choose a sample count"}])
    try:
        seed = int(form.get("seed", "0") or 0)
    except ValueError:
        seed = -1
    if seed < 0:
        raise Invalid("the seed is a whole number, 0 or more", details=[{"field": "seed", "message": "whole number"}])
    distribution = {}
    for param in MC_PARAMETERS:
        kind = form.get(f"distribution_{param}", "uniform") or "uniform"
        if kind not in ("uniform", "normal"):
            raise Invalid("unknown distribution", details=[{"field": f"distribution_{param}",
                                                             "message": "uniform or normal"}])
        distribution[param] = kind
    for param in MC_SPREAD_PARAMETERS:  # only where the form offers it
        kind = form.get(f"distribution_{param}")
        if kind:
            if kind not in ("uniform", "normal"):
                raise Invalid("unknown distribution", details=[{"field": f"distribution_{param}",
                                                                 "message": "uniform or normal"}])
            distribution[param] = kind
    return {"corners": True, "monte_carlo": n, "seed": seed, "distribution": distribution}


@router.post("/rails/{rail_id}/monte-carlo")
def run_monte_carlo(rail_id: int, session: SessionDep, actor: Analyst, form: FormDep) -> RedirectResponse:
    jobs.enqueue_rail(session=session, actor=actor, rail_id=rail_id, options=monte_carlo_options(form_dict(form)))
    return redirect(f"/rails/{rail_id}#monte-carlo")
