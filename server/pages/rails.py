"""The rail page: inputs, checks, headroom, the plots, Monte Carlo; and queueing its analyses."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse
from sqlalchemy.orm import Session

from server import jobs
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.pages import signoff_view
from server.pages.display import check_rows, fmt, input_sections, worst_check
from server.pages.plots import monte_carlo_figure, soa_figure, startup_figure, timer_figure, timer_limits
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.services import overview, results
from server.services.access import Actor, Permission
from server.services.errors import Invalid
from server.services.rails import get_rail, get_revision, part_status

router = APIRouter(include_in_schema=False)
Analyst = Annotated[Actor, Depends(require(Permission.ANALYZE))]
MC_SAMPLES = (1000, 5000, 20000)


def _figures_list(result: dict[str, Any]) -> list[tuple[str, str]]:
    st, sc, tw = result.get("startup") or {}, result.get("short_circuit") or {}, result.get("timer") or {}
    rows = [("Inrush peak current", fmt(st.get("i_peak"), "A")), ("Time in limit", fmt(st.get("t_limit"), "s")),
            ("Settling time (within 1 %)", fmt(st.get("t_settle"), "s")), ("FET energy", fmt(st.get("e_fet"), "J")),
            ("FET peak power", fmt(st.get("p_fet_peak"), "W")),
            ("Peak junction temperature", fmt(st.get("tj_peak"), "degC")),
            ("Lowest switch input voltage", fmt(st.get("v_supply_min"), "V"))]
    if sc.get("applies"):
        allowed = "indefinitely" if sc.get("survives_indefinitely") else fmt(sc.get("t_allow"), "s")
        rows += [("Short circuit: V_DS and current", f"{fmt(sc.get('v_ds'), 'V')}, {fmt(sc.get('i'), 'A')}"),
                 ("Short circuit: time allowed", f"{allowed} (SOA {fmt(sc.get('t_soa'), 's')}, "
                                                  f"thermal {fmt(sc.get('t_thermal'), 's')})")]
    if tw:
        rows += [("Fault timer trips after", f"{fmt(tw.get('t_fault_min'), 's')} to {fmt(tw.get('t_fault_max'), 's')}"
                                             f" (nominal {fmt(tw.get('t_fault_nom'), 's')})")]
    retry = result.get("retry")
    if retry:
        rows += [("Retry: duty and average power", f"{retry.get('duty', 0) * 100:.2g} %, {fmt(retry.get('p_avg'), 'W')}"),
                 ("Retry: peak junction temperature", fmt(retry.get("tj_peak"), "degC"))]
    steady = result.get("steady") or {}
    rows += [("Steady conduction: FET power and Tj", f"{fmt(steady.get('p_fet'), 'W')}, {fmt(steady.get('tj'), 'degC')}"),
             ("Steady conduction: voltage drop", fmt(steady.get("v_drop"), "V"))]
    return rows


def _headroom(result: dict[str, Any]) -> list[tuple[str, str]]:
    h = result.get("headroom") or {}
    rows = []
    c = fmt(h.get("c_max"), "F") if h.get("c_max") is not None else "not found"
    rows.append(("Largest load capacitance that still passes", c + (f" (limited by {h['c_max_check']})"
                                                                   if h.get("c_max_check") else "")))
    if h.get("c_max_note"):
        rows.append(("", h["c_max_note"]))
    i = fmt(h.get("i_limit_max"), "A") if h.get("i_limit_max") is not None else "not found"
    rows.append(("Highest current limit the short circuit allows", i))
    if h.get("i_limit_max_note"):
        rows.append(("", h["i_limit_max_note"]))
    return rows


def _mc_context(mc_row, checks: list[dict[str, Any]]) -> dict[str, Any] | None:
    if mc_row is None:
        return None
    mc = mc_row.result.get("monte_carlo") or {}
    titles = {c["id"]: c.get("title", c["id"]) for c in checks or mc_row.result.get("checks", [])}
    lo, hi = (mc.get("yield_ci95") or [None, None])[:2]
    return {"n": mc.get("n"), "seed": mc.get("seed"), "distribution": mc.get("distribution"),
            "yield": mc.get("yield"), "lo": lo, "hi": hi, "yield_no_fail": mc.get("yield_no_fail"),
            "created_at": mc_row.created_at,
            "figure": monte_carlo_figure(mc, titles),
            "rows": [{"title": titles.get(cid, cid), **m} for cid, m in (mc.get("margins") or {}).items()]}


def rail_context(session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    head = get_revision(session=session, actor=actor, rail_id=rail_id)
    doc = head.document
    t_amb = (doc.get("environment") or {}).get("t_ambient")
    row = results.latest_result(session, sha256=head.sha256)
    result = row.result if row else None
    signoff = signoff_view.rail_signoff(session, actor, rail.id)
    waivers = signoff_view.waivers_by_check(signoff)
    ctx: dict[str, Any] = {
        "rail": rail, "head": head, "board": rail.board, "product": rail.board.product, "document": doc,
        "inputs": input_sections(doc), "part": part_status(session, head), "result_row": row, "result": result,
        "rules_overridden": doc.get("rules") or {}, "signoff": signoff, "waivers": waivers,
        "job": overview.active_job(session=session, board_id=rail.board_id, rail_id=rail.id, kind="rail",
                                   sha256=head.sha256),
        "mc_job": overview.active_job(session=session, board_id=rail.board_id, rail_id=rail.id,
                                      kind="monte_carlo", sha256=head.sha256),
        "mc_samples": MC_SAMPLES, "figures": {}, "checks": [], "worst": None,
    }
    if result is not None:
        ctx["checks"] = check_rows(result.get("checks", []), t_amb)
        ctx["worst"] = worst_check(result.get("checks", []), t_amb)
        ctx["key_figures"] = _figures_list(result)
        ctx["headroom"] = _headroom(result)
        ctx["figures"] = {"startup": startup_figure(result, doc), "soa": soa_figure(result, doc),
                          "timer": timer_figure(result, doc)}
        ctx["timer"] = result.get("timer")
        ctx["timer_limits"] = timer_limits(result)
    ctx["mc"] = _mc_context(results.latest_result(session, sha256=head.sha256, monte_carlo=True),
                            result.get("checks", []) if result else [])
    return ctx


@router.get("/rails/{rail_id}", response_class=HTMLResponse)
def rail_page(rail_id: int, request: Request, session: SessionDep, actor: CurrentActor) -> HTMLResponse:
    return render(request, "rail.html", page_context(request, actor, **rail_context(session, actor, rail_id)))


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
    distribution = form.get("distribution", "uniform")
    if distribution not in ("uniform", "normal"):
        raise Invalid("unknown distribution", details=[{"field": "distribution", "message": "uniform or normal"}])
    return {"corners": True, "monte_carlo": n, "seed": seed, "distribution": distribution}


@router.post("/rails/{rail_id}/monte-carlo")
def run_monte_carlo(rail_id: int, session: SessionDep, actor: Analyst, form: FormDep) -> RedirectResponse:
    jobs.enqueue_rail(session=session, actor=actor, rail_id=rail_id, options=monte_carlo_options(form_dict(form)))
    return redirect(f"/rails/{rail_id}#monte-carlo")
