"""The part library: MOSFET entries with their SOA curves and Foster stages, who uses them, and the part form."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session

from server.analysis.words import FIELD_TITLES
from server.analysis.zth_fit import BOARD_TAU_DEFAULT, BOARD_TAU_WORDS, FIT_STAGES, METHOD, zth_deviation
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.pages.display import fmt
from server.pages.part_forms import (FIT_FIELDS, PART_FIELDS, RDS_CURVE_FIELD, ZTH_FIELD, ZTH_POINTS_FIELD,
                                     curve_slots, document_from_part_form, parse_pairs, part_errors,
                                     part_field_titles, part_form_from_document, stage_lines)
from server.pages.plots import part_soa_figure, pulse_label, zth_figure, zth_fit_figure
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.services import overview
from server.services import parts as part_service
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Invalid
from server.units import UnitError, parse_quantity

router = APIRouter(include_in_schema=False)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
PARTS_SHOWN = 500
USAGE_SHOWN = 100  # rails listed on a part's page; all of them are counted


def parts_context(session: Session, actor: Actor, q: str = "") -> dict[str, Any]:
    rows, total = part_service.list_parts(session=session, actor=actor, q=q or None, limit=PARTS_SHOWN)
    items = []
    for p in rows:
        head = part_service.get_part_revision(session=session, actor=actor, part_id=p.id)
        d = head.document
        items.append({"part": p, "vds_max": fmt(d["vds_max"], "V"), "rds_on": fmt(d["rds_on"], "ohm"),
                      "tj_max": fmt(d["tj_max"], "degC"), "curves": len(d["soa"]["curves"]),
                      "stages": len(d["zth"])})
    return {"items": items, "total": total, "q": q}


# the ratings listed on the part page (paths in the part document), worded by FIELD_TITLES
_RATINGS = ["vds_max", "id_pulse_max", "e_avalanche", "rds_on", "rds_on_max", "rds_on_alpha", "tj_max", "rth_ja",
            "soa.t_case"]


def _get(doc: dict[str, Any], path: str) -> Any:
    for key in path.split("."):
        doc = (doc or {}).get(key)
    return doc


def part_context(session: Session, actor: Actor, part_id: int, n: int | None = None) -> dict[str, Any]:
    part = part_service.get_part(session=session, actor=actor, part_id=part_id)
    rev = part_service.get_part_revision(session=session, actor=actor, part_id=part_id, n=n)
    doc = rev.document
    all_usage = part_service.part_usage(session=session, actor=actor, part_id=part_id)
    by_revision: dict[int, int] = {}
    for u in all_usage:
        by_revision[u["part_revision"]] = by_revision.get(u["part_revision"], 0) + 1
    usage = all_usage[:USAGE_SHOWN]
    labels = overview.board_labels(session=session, actor=actor, board_ids=[u["board_id"] for u in usage])
    for u in usage:
        b = labels.get(u["board_id"], {})
        u["board"] = f"{b.get('product', '')} / {b.get('name', '')} rev {b.get('revision', '')}"
        u["newest"] = u["part_revision"] == part.head_n
    ratings = [(w.title, fmt(_get(doc, path), w.kind)) for path in _RATINGS for w in [FIELD_TITLES[f"fet.{path}"]]]
    curves = [{"label": pulse_label(c["t_pulse"]), "points": len(c["points"]),
               "range": f"{fmt(c['points'][0][0], 'V')} to {fmt(c['points'][-1][0], 'V')}",
               "i_max": fmt(max(p[1] for p in c["points"]), "A")}
              for c in sorted(doc["soa"]["curves"], key=lambda c: float("inf") if c["t_pulse"] is None else c["t_pulse"])]
    stages = [{"k": k + 1, "r": fmt(s["r"], "K/W"), "tau": fmt(s["tau"], "s")} for k, s in enumerate(doc["zth"])]
    zsum = sum(s["r"] for s in doc["zth"])
    rds_curve = [{"tj": fmt(t, "degC"), "ratio": f"{k:.4g}"} for t, k in (doc.get("rds_on_curve") or [])]
    return {"part": part, "rev": rev, "document": doc, "ratings": ratings, "curves": curves, "stages": stages,
            "rds_curve": rds_curve,
            "zth_sum": fmt(zsum, "K/W"), "zth_points": _zth_points_summary(doc),
            "soa_envelope": part_service.SOA_ENVELOPE, "soa_warnings": part_service.soa_warnings(doc),
            "revisions": part_service.list_part_revisions(session=session, actor=actor, part_id=part_id),
            "usage": usage, "usage_total": len(all_usage), "usage_by_revision": sorted(by_revision.items()),
            "figures": {"soa": part_soa_figure(doc), "zth": zth_figure(doc["zth"], doc.get("zth_points"))}}


def _zth_points_summary(doc: dict[str, Any]) -> dict[str, Any] | None:
    """The Zth points the stages were fitted to, in words: how many, over what time, how close the stages lie."""
    points = doc.get("zth_points")
    if not points:
        return None
    seen = zth_deviation(doc["zth"], points)
    return {"n": len(points), "from": fmt(points[0][0], "s"), "to": fmt(points[-1][0], "s"),
            "below": f"{seen['below']:.1%}", "below_at": fmt(seen["below_at"], "s"),
            "above": f"{seen['above']:.1%}", "above_at": fmt(seen["above_at"], "s")}


def part_form_context(*, values: dict[str, str], errors: dict[str, str], other: list[str], part=None,
                      base_n: int | None = None, conflict: str | None = None,
                      fit: dict[str, Any] | None = None) -> dict[str, Any]:
    slots = curve_slots(values) or [0]
    return {"part": part, "values": values, "errors": errors, "other_errors": other, "fields": PART_FIELDS,
            "zth_field": ZTH_FIELD, "slots": slots, "base_n": base_n, "conflict": conflict,
            "titles": part_field_titles(slots) | {"message": "What changed and why"},
            "labels": {f.name: f.html_id for f in PART_FIELDS} | {ZTH_FIELD: "f-zth", ZTH_POINTS_FIELD: "f-zth-points"}
            | {RDS_CURVE_FIELD: "f-rds-on-curve"} | {name: "f-" + name.replace("_", "-") for name in FIT_FIELDS} | {
                f"soa.curves[{k}].{p}": f"f-curve-{k}-{p.replace('_', '-')}" for k in slots
                for p in ("t_pulse", "points")},
            "fit_stage_choices": FIT_STAGES, "board_tau_default": fmt(BOARD_TAU_DEFAULT, "s"),
            "board_tau_words": BOARD_TAU_WORDS, "fit": fit,
            "action": f"/parts/{part.id}/edit" if part else "/parts/new"}


def new_part_context() -> dict[str, Any]:
    return part_form_context(values=part_form_from_document(None), errors={}, other=[])


def edit_part_context(session: Session, actor: Actor, part_id: int) -> dict[str, Any]:
    part = part_service.get_part(session=session, actor=actor, part_id=part_id)
    head = part_service.get_part_revision(session=session, actor=actor, part_id=part_id)
    return part_form_context(values=part_form_from_document(head.document), errors={}, other=[], part=part,
                             base_n=head.n)


def submit_part(session: Session, actor: Actor, form: dict[str, str], part_id: int | None = None
                ) -> tuple[int | None, dict[str, Any]]:
    """Create or save a part from its form: (part id, {}) or (None, the form again with its errors)."""
    doc, errors, mapping = document_from_part_form(form)
    part = part_service.get_part(session=session, actor=actor, part_id=part_id) if part_id else None
    base_n = None
    conflict = None
    if part_id:
        try:
            base_n = int(form.get("base_revision", ""))
        except ValueError:
            base_n = 0
    if not errors:
        try:
            if part_id is None:
                rev = part_service.create_part(session=session, actor=actor, document=doc,
                                               message=form.get("message", ""))
            else:
                rev = part_service.save_part(session=session, actor=actor, part_id=part_id, document=doc,
                                             base_n=base_n, message=form.get("message", ""))
            return rev.part_id, {}
        except Invalid as exc:
            session.rollback()
            errors, other = part_errors(exc.details or [{"field": "", "message": exc.message}], mapping)
            return None, part_form_context(values=form, errors=errors, other=other, part=part, base_n=base_n)
        except Conflict as exc:
            session.rollback()
            if part_id is None:
                errors = {"name": exc.message}
            else:
                conflict = exc.message
                current = (exc.extra or {}).get("current") or {}
                base_n = current.get("n", base_n)
    return None, part_form_context(values=form, errors=errors, other=[], part=part, base_n=base_n,
                                   conflict=conflict)


def _fit_inputs(form: dict[str, str]) -> tuple[list, int | None, float | None, float | None, dict[str, str]]:
    """The points, the number of stages, R_th junction-ambient and the board time constant of a fit request,
    and the problems found reading them (by form field)."""
    errors: dict[str, str] = {}
    points: list = []
    try:
        points = part_service.zth_points_from_text(form.get(ZTH_POINTS_FIELD, ""))
    except Invalid as exc:
        errors[ZTH_POINTS_FIELD] = exc.details[0]["message"]
    if not errors and not points:
        errors[ZTH_POINTS_FIELD] = "paste the Zth curve's points to fit, one “t, Zth” pair a line"
    n_stages = int(form["fit_stages"]) if form.get("fit_stages", "").strip() in {str(n) for n in FIT_STAGES} else None
    if n_stages is None:
        errors["fit_stages"] = f"choose {FIT_STAGES[0]} to {FIT_STAGES[-1]} stages"
    rth_ja = board_tau = None
    try:
        rth_ja = parse_quantity(form.get("rth_ja", "").strip(), "K/W") if form.get("rth_ja", "").strip() else None
    except UnitError as exc:
        errors["rth_ja"] = str(exc)
    if rth_ja is None and "rth_ja" not in errors:
        errors["rth_ja"] = "is needed to add the board stage: Zth at long times reaches it"
    try:
        raw = form.get("fit_board_tau", "").strip()
        board_tau = parse_quantity(raw, "s") if raw else None
    except UnitError as exc:
        errors["fit_board_tau"] = str(exc)
    return points, n_stages, rth_ja, board_tau, errors


def fit_part_form(session: Session, actor: Actor, form: dict[str, str], part_id: int | None = None
                  ) -> tuple[bool, dict[str, Any]]:
    """Fit Foster stages to the form's Zth points (nothing is saved): (fitted, the form again).

    On success the stages' text box holds the fitted stages and the board stage, and the form shows the fit
    over the points with its largest error; saving the form then stores them with the points."""
    part = part_service.get_part(session=session, actor=actor, part_id=part_id) if part_id else None
    base_n = int(form["base_revision"]) if form.get("base_revision", "").isdigit() else None
    points, n_stages, rth_ja, board_tau, errors = _fit_inputs(form)
    fit = None
    if not errors:
        try:
            fit = part_service.fit_zth_points(points, n_stages, rth_ja, board_tau)
        except Invalid as exc:
            lines = [n for _, _, n in parse_pairs(form.get(ZTH_POINTS_FIELD, ""))[0]]
            errors, _ = part_errors([{"field": d["field"].replace("fit.", "fit_").removeprefix("fet."),
                                      "message": d["message"]} for d in exc.details],
                                    {"curves": {}, "zth_lines": [], "points_lines": {}, "zth_points_lines": lines})
    if fit is None:
        return False, part_form_context(values=form, errors=errors, other=[], part=part, base_n=base_n)
    values = {**form, ZTH_FIELD: stage_lines(fit.all_stages, fit.rth_ja)}
    r_b, tau_b = fit.board
    shown = {"figure": zth_fit_figure(fit), "n_points": len(fit.points), "n_stages": len(fit.stages),
             "largest_error": f"{fit.largest_error:.2%}", "at": fmt(fit.largest_error_at, "s"),
             "fitted_total": fmt(fit.fitted_total, "K/W"), "rth_ja": fmt(fit.rth_ja, "K/W"),
             "stages": [{"k": k, "r": fmt(r, "K/W"), "tau": fmt(tau, "s")}
                        for k, (r, tau) in enumerate(fit.stages, start=1)],
             "board": {"r": fmt(r_b, "K/W"), "tau": fmt(tau_b, "s"),
                       "words": BOARD_TAU_WORDS if fit.board_tau_default else "as given"},
             "method": METHOD}
    return True, part_form_context(values=values, errors={}, other=[], part=part, base_n=base_n, fit=shown)


def _fit_or_save(request: Request, session: Session, actor: Actor, form: dict[str, str],
                 part_id: int | None) -> Response:
    """The part form's two buttons: fit the stages (the form again, nothing saved), or save the part."""
    if form.get("action") == "fit":
        fitted, ctx = fit_part_form(session, actor, form, part_id)
        return render(request, "part_form.html", page_context(request, actor, **ctx),
                      status_code=200 if fitted else 422)
    saved_id, ctx = submit_part(session, actor, form, part_id)
    if saved_id is not None:
        return redirect(f"/parts/{saved_id}")
    return render(request, "part_form.html", page_context(request, actor, **ctx),
                  status_code=409 if ctx.get("conflict") else 422)


@router.get("/parts", response_class=HTMLResponse)
def parts_page(request: Request, session: SessionDep, actor: CurrentActor, q: str = "") -> HTMLResponse:
    return render(request, "parts.html", page_context(request, actor, **parts_context(session, actor, q)))


@router.get("/parts/new", response_class=HTMLResponse)
def new_part_form(request: Request, actor: Editor) -> HTMLResponse:
    return render(request, "part_form.html", page_context(request, actor, **new_part_context()))


@router.post("/parts/new", response_class=HTMLResponse)
def create_part_from_form(request: Request, session: SessionDep, actor: Editor, form: FormDep) -> Response:
    return _fit_or_save(request, session, actor, form_dict(form), None)


@router.get("/parts/{part_id}", response_class=HTMLResponse)
def part_page(part_id: int, request: Request, session: SessionDep, actor: CurrentActor,
              revision: int | None = None) -> HTMLResponse:
    ctx = part_context(session, actor, part_id, revision)
    return render(request, "part.html", page_context(request, actor, **ctx))


@router.get("/parts/{part_id}/edit", response_class=HTMLResponse)
def edit_part_form(part_id: int, request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return render(request, "part_form.html", page_context(request, actor, **edit_part_context(session, actor, part_id)))


@router.post("/parts/{part_id}/edit", response_class=HTMLResponse)
def save_part_from_form(part_id: int, request: Request, session: SessionDep, actor: Editor,
                        form: FormDep) -> Response:
    return _fit_or_save(request, session, actor, form_dict(form), part_id)
