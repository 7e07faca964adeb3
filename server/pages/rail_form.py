"""The rail form: a new rail (blank or copied from another), and editing one with conflict handling.

The MOSFET of a rail is chosen from the part library (its newest revision, or the revision
the rail pins now), or is the rail's own FET carried over from the revision being edited
or copied (choice values ``part:ID``, ``part:ID:N`` and ``own:RAIL:N``).
"""

from __future__ import annotations

import re
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session
from starlette.datastructures import FormData, UploadFile

from server.auth import require
from server.db import SessionDep
from server.pages.forms import (MAX_BANK_GROUPS, OWN_FET, PART_FIELD, RAIL_SECTIONS, bank_fields, bank_names,
                                bank_rows, bank_values, compact_bank, compare_rows, document_from_form,
                                field_titles, form_from_document, place_errors, rail_fields)
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.services import parts as part_service
from server.services.bom_import import parse_bom
from server.services.access import Actor, Permission
from server.services.catalog import get_board
from server.services.errors import Conflict, Invalid
from server.services.rail_edits import PartRef, create_rail, save_rail
from server.services.rails import document_warnings, get_rail, get_revision

router = APIRouter(include_in_schema=False)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
COPY_SUFFIX = "_COPY"


def fet_choice_of(rev) -> str:
    """The form's MOSFET choice for a revision: its pinned part revision, or its own FET."""
    if rev.part_revision is not None:
        return f"part:{rev.part_revision.part_id}:{rev.part_revision.n}"
    return f"{OWN_FET}:{rev.rail_id}:{rev.n}"


def fet_options(session: Session, actor: Actor, current: str | None) -> list[tuple[str, str]]:
    """(value, label) of every MOSFET choice: library parts at their newest revision, plus the current one."""
    rows, _ = part_service.list_parts(session=session, actor=actor, limit=500)
    options = [(f"part:{p.id}", f"{p.name} (library, newest revision {p.head_n})") for p in rows]
    if current and current.startswith("part:") and current.count(":") == 2:
        _, pid, n = current.split(":")
        name = next((p.name for p in rows if str(p.id) == pid), f"part {pid}")
        options.insert(0, (current, f"{name}, keep revision {n}"))
    elif current and current.startswith(OWN_FET + ":"):
        options.insert(0, (current, "this rail's own MOSFET (as stored, not from the library)"))
    return options


def resolve_fet_choice(session: Session, actor: Actor, value: str) -> tuple[PartRef | None, dict | None]:
    """(part reference, own FET document) for a MOSFET choice; Invalid at the field when it is not one."""
    try:
        kind, *rest = value.split(":")
        if kind == "part" and len(rest) in (1, 2):
            return PartRef(int(rest[0]), int(rest[1]) if len(rest) == 2 else None), None
        if kind == OWN_FET and len(rest) == 2:
            rev = get_revision(session=session, actor=actor, rail_id=int(rest[0]), n=int(rest[1]))
            return None, rev.document["fet"]
    except ValueError:
        pass
    raise Invalid("choose a MOSFET", details=[{"field": PART_FIELD, "message": "choose a MOSFET from the library"}])


BANK_ACTION = "bank_action"   # the bank editor's buttons: add a group, remove one, fill from a BOM (nothing saved)
BOM_TEXT, BOM_FILE = "bom_text", "bom_file"
MAX_BOM_BYTES = 1_000_000
_COUNT_PATH = re.compile(r"^(document\.)?load\.bank\[\d+\]\.count$")


def _bank_groups(values: dict[str, str]) -> int:
    return len(bank_rows(values))


def _all_fields(values: dict[str, str]) -> list:
    return rail_fields() + [f for k in range(_bank_groups(values)) for f in bank_fields(k)]


def _labels(values: dict[str, str]) -> dict[str, str]:
    return ({f.name: f.html_id for f in _all_fields(values)}
            | {PART_FIELD: "f-part", "message": "f-message", "load.bank": "bank-editor", "bom": "f-bom-text"})


def _titles(values: dict[str, str]) -> dict[str, str]:
    return field_titles(_all_fields(values)) | {PART_FIELD: "MOSFET", "message": "What changed and why",
                                                 "load.bank": "Capacitor bank", "bom": "BOM import"}


def bank_editor(values: dict[str, str], extra_rows: int = 0) -> dict[str, Any]:
    """The bank editor's rows of fields (the form's groups, plus ``extra_rows`` blank ones)."""
    n = min(_bank_groups(values) + extra_rows, MAX_BANK_GROUPS)
    return {"rows": [bank_fields(k) for k in range(n)], "max": MAX_BANK_GROUPS}


def form_context(session: Session, actor: Actor, *, board, values: dict[str, str], errors: dict[str, str],
                 other: list[str], rail=None, base_n: int | None = None, conflict: dict | None = None,
                 copied_from=None, warnings: dict[str, str] | None = None, extra_rows: int = 0,
                 bom: dict[str, Any] | None = None) -> dict[str, Any]:
    values = compact_bank(values)
    return {"board": board, "product": board.product, "rail": rail, "values": values, "errors": errors,
            "warnings": warnings or {}, "bank": bank_editor(values, extra_rows), "bom": bom or {},
            "other_errors": other, "sections": RAIL_SECTIONS, "labels": _labels(values), "titles": _titles(values),
            "fet_options": fet_options(session, actor, values.get(PART_FIELD)), "base_n": base_n,
            "conflict": conflict, "copied_from": copied_from,
            "action": f"/rails/{rail.id}/edit" if rail else f"/boards/{board.id}/rails/new"}


def new_rail_context(session: Session, actor: Actor, board_id: int, copy_from: int | None = None) -> dict[str, Any]:
    board = get_board(session=session, actor=actor, board_id=board_id)
    values: dict[str, str] = {"load.model": "none", "switch.mode": "current_limit",
                              "switch.timer.after_fault": "latch"}
    source = None
    if copy_from is not None:
        source = get_rail(session=session, actor=actor, rail_id=copy_from)
        rev = get_revision(session=session, actor=actor, rail_id=copy_from)
        values = form_from_document(rev.document)
        values["name"] = values["name"] + COPY_SUFFIX
        values[PART_FIELD] = fet_choice_of(rev)
        values["message"] = f"copied from {source.name} revision {rev.n}"
    return form_context(session, actor, board=board, values=values, errors={}, other=[], copied_from=source)


def edit_rail_context(session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    head = get_revision(session=session, actor=actor, rail_id=rail_id)
    values = form_from_document(head.document)
    values[PART_FIELD] = fet_choice_of(head)
    # values that compute but look like a slip of the prefix, beside their fields (never a reason to refuse)
    warnings = {w["field"]: w["message"] for w in document_warnings(head.document)}
    return form_context(session, actor, board=rail.board, values=values, errors={}, other=[], rail=rail,
                        base_n=head.n, warnings=warnings)


def _invalid(exc: Invalid, values: dict[str, str]) -> tuple[dict[str, str], list[str]]:
    names = [f.name for f in rail_fields()] + [PART_FIELD] + bank_names(values)
    details = [_worded(d) for d in (exc.details or [{"field": "", "message": exc.message}])]
    # a derating range's error ([low, high] together) beside its low end
    aliases = {"fet": PART_FIELD} | {f"load.bank[{k}].derating": f"load.bank[{k}].derating[0]"
                                     for k in range(_bank_groups(values))}
    return place_errors(details, names, aliases=aliases)


def _worded(detail: dict[str, Any]) -> dict[str, Any]:
    """A capacitor count the schema could not read as an integer, in words."""
    if _COUNT_PATH.match(str(detail.get("field") or "")) and "valid integer" in str(detail.get("message", "")):
        return {**detail, "message": "must be a whole number of capacitors, e.g. 24"}
    return detail


def bank_action(values: dict[str, str], action: str, bom_upload: str | None = None) -> tuple[dict[str, str], int,
                                                                                             dict[str, Any]]:
    """What a bank editor button does to the form's values (nothing is saved): (values, blank rows to add,
    the BOM import's outcome for the page). ``add``: one blank group; ``remove:K``: drop group K;
    ``import``: the groups of the BOM pasted (or ``bom_upload``, an uploaded file's text) replace the
    bank's rows, and the single load capacitance fields are cleared."""
    values = compact_bank(values)
    if action == "add":
        return values, 1, {}
    if action.startswith("remove:"):
        try:
            k = int(action.split(":", 1)[1])
        except ValueError:
            return values, 0, {}
        rows = [r for j, r in enumerate(bank_rows(values)) if j != k]
        rest = {key: v for key, v in values.items() if not key.startswith("load.bank[")}
        return rest | {f"load.bank[{j}].{key}": v for j, r in enumerate(rows) for key, v in r.items()}, 0, {}
    if action == "import":
        text = bom_upload if bom_upload is not None else values.get(BOM_TEXT, "")
        found = parse_bom(text)
        outcome: dict[str, Any] = {"warnings": found.warnings, "errors": [str(e) for e in found.errors],
                                   "filled": 0}
        if found.errors or not found.groups:
            return values, 0, outcome
        rest = {key: v for key, v in values.items() if not key.startswith("load.bank[")}
        rest.update({"load.c_nom": "", "load.c_tol": "", "load.esr": "", BOM_TEXT: text})
        outcome["filled"] = len(found.groups)
        outcome["count"] = sum(g["count"] for g in found.groups)
        return rest | bank_values(found.groups), 0, outcome
    return values, 0, {}


def submit_new(session: Session, actor: Actor, board_id: int, form: dict[str, str]) -> tuple[int | None, dict]:
    """Create the rail a submitted form describes: (rail id, None), or (None, the form again with errors)."""
    board = get_board(session=session, actor=actor, board_id=board_id)
    form = compact_bank(form)
    try:
        part, fet = resolve_fet_choice(session, actor, form.get(PART_FIELD, ""))
        rail, _ = create_rail(session=session, actor=actor, board_id=board.id,
                              document=document_from_form(form, fet), part=part, message=form.get("message", ""))
        return rail.id, {}
    except Invalid as exc:
        session.rollback()
        errors, other = _invalid(exc, compact_bank(form))
    except Conflict as exc:
        session.rollback()
        errors, other = {"name": exc.message}, []
    return None, form_context(session, actor, board=board, values=form, errors=errors, other=other)


def submit_edit(session: Session, actor: Actor, rail_id: int, form: dict[str, str]) -> tuple[bool, dict]:
    """Save a new revision from a submitted form: (True, {}) or (False, the form again with errors or a conflict).

    A conflict (someone saved since the revision the form started from) keeps the typed
    values, shows them beside the current revision, and bases the form on that revision,
    so that saving again is a deliberate choice made after seeing both.
    """
    rail = get_rail(session=session, actor=actor, rail_id=rail_id)
    board = rail.board
    form = compact_bank(form)
    try:
        base_n = int(form.get("base_revision", ""))
    except ValueError:
        base_n = 0
    try:
        part, fet = resolve_fet_choice(session, actor, form.get(PART_FIELD, ""))
        save_rail(session=session, actor=actor, rail_id=rail_id, document=document_from_form(form, fet),
                  base_n=base_n, part=part, message=form.get("message", ""))
        return True, {}
    except Invalid as exc:
        session.rollback()
        errors, other = _invalid(exc, compact_bank(form))
        return False, form_context(session, actor, board=board, values=form, errors=errors, other=other,
                                   rail=rail, base_n=base_n)
    except Conflict as exc:
        session.rollback()
        current = (exc.extra or {}).get("current")
        if not current:
            return False, form_context(session, actor, board=board, values=form, errors={"name": exc.message},
                                       other=[], rail=rail, base_n=base_n)
        head = get_revision(session=session, actor=actor, rail_id=rail_id)
        theirs = form_from_document(head.document)
        conflict = {"message": exc.message, "n": head.n, "author": head.author_name, "at": head.created_at,
                    "revision_message": head.message, "base_n": base_n,
                    "rows": compare_rows(form, theirs),
                    "fet_mine": form.get(PART_FIELD, ""), "fet_theirs": fet_choice_of(head)}
        return False, form_context(session, actor, board=board, values=form, errors={}, other=[], rail=rail,
                                   base_n=head.n, conflict=conflict)


def bank_context(session: Session, actor: Actor, form: dict[str, str], action: str, *, board_id: int | None = None,
                 rail_id: int | None = None, upload: tuple[str | None, str | None] = (None, None)) -> dict[str, Any]:
    """The form again after a bank editor button (a group added or removed, a BOM read): nothing saved."""
    text, problem = upload
    values, extra, outcome = bank_action(form, action, text)
    if problem:
        outcome = {"warnings": [], "errors": [problem], "filled": 0}
    if rail_id is not None:
        rail = get_rail(session=session, actor=actor, rail_id=rail_id)
        try:
            base_n: int | None = int(form.get("base_revision", ""))
        except ValueError:
            base_n = None
        return form_context(session, actor, board=rail.board, values=values, errors={}, other=[], rail=rail,
                            base_n=base_n, extra_rows=extra, bom=outcome)
    board = get_board(session=session, actor=actor, board_id=board_id)
    return form_context(session, actor, board=board, values=values, errors={}, other=[], extra_rows=extra, bom=outcome)


def uploaded_bom(form: FormData) -> tuple[str | None, str | None]:
    """(text, problem) of a BOM file sent with the form; (None, None) without one."""
    upload = form.get(BOM_FILE)
    if not isinstance(upload, UploadFile) or not upload.filename:
        return None, None
    data = upload.file.read(MAX_BOM_BYTES + 1)
    if len(data) > MAX_BOM_BYTES:
        return None, f"the BOM file is larger than {MAX_BOM_BYTES // 1000} kB"
    try:
        return data.decode("utf-8-sig"), None
    except UnicodeDecodeError:
        try:
            return data.decode("cp1252"), None
        except UnicodeDecodeError:
            return None, "the BOM file is not text (save it as CSV, UTF-8)"


@router.get("/boards/{board_id}/rails/new", response_class=HTMLResponse)
def new_rail_form(board_id: int, request: Request, session: SessionDep, actor: Editor,
                  copy_from: int | None = None) -> HTMLResponse:
    ctx = new_rail_context(session, actor, board_id, copy_from)
    return render(request, "rail_form.html", page_context(request, actor, **ctx))


@router.post("/boards/{board_id}/rails/new", response_class=HTMLResponse)
def create_rail_from_form(board_id: int, request: Request, session: SessionDep, actor: Editor,
                          form: FormDep) -> Response:
    values = form_dict(form)
    if values.get(BANK_ACTION):
        ctx = bank_context(session, actor, values, values[BANK_ACTION], board_id=board_id, upload=uploaded_bom(form))
        return render(request, "rail_form.html", page_context(request, actor, **ctx))
    rail_id, ctx = submit_new(session, actor, board_id, values)
    if rail_id is not None:
        return redirect(f"/rails/{rail_id}")
    return render(request, "rail_form.html", page_context(request, actor, **ctx), status_code=422)


@router.get("/rails/{rail_id}/edit", response_class=HTMLResponse)
def edit_rail_form(rail_id: int, request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return render(request, "rail_form.html", page_context(request, actor, **edit_rail_context(session, actor, rail_id)))


@router.post("/rails/{rail_id}/edit", response_class=HTMLResponse)
def save_rail_from_form(rail_id: int, request: Request, session: SessionDep, actor: Editor,
                        form: FormDep) -> Response:
    values = form_dict(form)
    if values.get(BANK_ACTION):
        ctx = bank_context(session, actor, values, values[BANK_ACTION], rail_id=rail_id, upload=uploaded_bom(form))
        return render(request, "rail_form.html", page_context(request, actor, **ctx))
    saved, ctx = submit_edit(session, actor, rail_id, values)
    if saved:
        return redirect(f"/rails/{rail_id}")
    return render(request, "rail_form.html", page_context(request, actor, **ctx),
                  status_code=409 if ctx.get("conflict") else 422)
