"""Products and boards made and renamed in the pages, and many rails imported from a table (CSV or .xlsx).

The forms call the same services as the API (:mod:`server.services.catalog`); a refused
name (taken already, or empty) is shown beside its field. A rail table is uploaded, read
(:mod:`server.rail_table`) and planned row by row (:func:`server.transfer.plan_table`): the
preview shows each bad row's problems on their fields in words, and nothing is stored while
any row is bad, unless the user chooses to import the good rows only. The preview carries
the uploaded file along (base64 in a hidden field), so the import stores exactly the table
that was previewed, planned again at that moment.
"""

from __future__ import annotations

import base64
import binascii
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response
from sqlalchemy.orm import Session
from starlette.datastructures import UploadFile

from server import transfer
from server.auth import require
from server.db import SessionDep
from server.pages.rendering import FormDep, form_dict, page_context, redirect, render
from server.rail_table import LIST_FIELDS, MAX_ROWS, TableInvalid, columns, read_table, template_csv
from server.analysis.words import FIELD_TITLES
from server.services import catalog
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Invalid, NotFound
from server.services.teams import list_teams

router = APIRouter(include_in_schema=False)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
MAX_UPLOAD_BYTES = 5_000_000
PREVIEW_ROWS = 500


# --- products and boards ---------------------------------------------------------------------


def _teams(session: Session, actor: Actor) -> list[dict[str, Any]]:
    """The teams a new product may belong to: the actor's own (an admin's: every team)."""
    if actor.can(Permission.ADMIN):
        return [{"id": t.id, "name": t.name} for t in list_teams(session=session, actor=actor)]
    return sorted(({"id": t.id, "name": t.name} for t in (actor.user.teams if actor.user else [])),
                  key=lambda t: t["name"])


def catalog_form_context(session: Session, actor: Actor, what: str, *, product_id: int | None = None,
                         board_id: int | None = None, values: dict[str, str] | None = None,
                         errors: dict[str, str] | None = None) -> dict[str, Any]:
    """The form of a new product (``what="new_product"``), a product's name (``"product"``), a new board of a
    product (``"new_board"``) or a board's name (``"board"``)."""
    ctx: dict[str, Any] = {"what": what, "errors": errors or {}, "teams": [], "product": None, "board": None}
    if what == "new_product":
        ctx["teams"] = _teams(session, actor)
        ctx.update(title="New product", action="/products/new", fields=["name", "description", "team"])
        default = {"team": str(ctx["teams"][0]["id"])} if len(ctx["teams"]) == 1 else {}
    elif what in ("product", "new_board"):
        product = catalog.get_product(session=session, actor=actor, product_id=product_id)
        ctx["product"] = product
        if what == "product":
            ctx.update(title=f"Rename {product.name}", action=f"/products/{product.id}/edit",
                       fields=["name", "description"])
            default = {"name": product.name, "description": product.description}
        else:
            ctx.update(title=f"New board of {product.name}", action=f"/products/{product.id}/boards/new",
                       fields=["name", "revision", "description"])
            default = {"revision": "A"}
    else:
        board = catalog.get_board(session=session, actor=actor, board_id=board_id)
        ctx.update(board=board, product=board.product, title=f"Rename {board.name} rev {board.revision}",
                   action=f"/boards/{board.id}/edit", fields=["name", "revision", "description"])
        default = {"name": board.name, "revision": board.revision, "description": board.description}
    ctx["values"] = {**default, **(values or {})}
    return ctx


def _required(form: dict[str, str], names: tuple[str, ...]) -> dict[str, str]:
    return {n: "is required" for n in names if not form.get(n, "").strip()}


def save_catalog_form(session: Session, actor: Actor, what: str, form: dict[str, str], *, product_id: int | None = None,
                      board_id: int | None = None) -> tuple[str | None, dict[str, str]]:
    """Store a submitted product or board form: (where to go next, errors by field)."""
    name, description = form.get("name", "").strip(), form.get("description", "").strip()
    revision = form.get("revision", "").strip()
    errors = _required(form, ("name", "revision") if what in ("new_board", "board") else ("name",))
    if errors:
        return None, errors
    try:
        if what == "new_product":
            team = form.get("team", "").strip()
            product = catalog.create_product(session=session, actor=actor, name=name, description=description,
                                             team_id=int(team) if team.isdigit() else None)
            return f"/products/{product.id}", {}
        if what == "product":
            catalog.update_product(session=session, actor=actor, product_id=product_id, name=name,
                                   description=description)
            return f"/products/{product_id}", {}
        if what == "new_board":
            board = catalog.create_board(session=session, actor=actor, product_id=product_id, name=name,
                                         revision=revision, description=description)
            return f"/boards/{board.id}", {}
        catalog.update_board(session=session, actor=actor, board_id=board_id, name=name, revision=revision,
                             description=description)
        return f"/boards/{board_id}", {}
    except Conflict as exc:
        session.rollback()
        return None, {"name": exc.message}
    except (Invalid, NotFound) as exc:
        session.rollback()
        if what == "new_product" and (isinstance(exc, NotFound) or "team" in exc.message):
            return None, {"team": exc.message}
        raise


def _form_page(request: Request, session: Session, actor: Actor, what: str, **ids: int) -> HTMLResponse:
    return render(request, "catalog_form.html",
                  page_context(request, actor, **catalog_form_context(session, actor, what, **ids)))


async def _submit(request: Request, session: Session, actor: Actor, form, what: str, **ids: int):  # noqa: ANN001
    values = form_dict(form)
    target, errors = save_catalog_form(session, actor, what, values, **ids)
    if target is not None:
        return redirect(target)
    ctx = catalog_form_context(session, actor, what, values=values, errors=errors, **ids)
    return render(request, "catalog_form.html", page_context(request, actor, **ctx), status_code=422)


@router.get("/products/new", response_class=HTMLResponse)
def new_product_page(request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return _form_page(request, session, actor, "new_product")


@router.post("/products/new")
async def new_product(request: Request, session: SessionDep, actor: Editor, form: FormDep):
    return await _submit(request, session, actor, form, "new_product")


@router.get("/products/{product_id}/edit", response_class=HTMLResponse)
def product_form_page(product_id: int, request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return _form_page(request, session, actor, "product", product_id=product_id)


@router.post("/products/{product_id}/edit")
async def edit_product(product_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep):
    return await _submit(request, session, actor, form, "product", product_id=product_id)


@router.get("/products/{product_id}/boards/new", response_class=HTMLResponse)
def new_board_page(product_id: int, request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return _form_page(request, session, actor, "new_board", product_id=product_id)


@router.post("/products/{product_id}/boards/new")
async def new_board(product_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep):
    return await _submit(request, session, actor, form, "new_board", product_id=product_id)


@router.get("/boards/{board_id}/edit", response_class=HTMLResponse)
def board_form_page(board_id: int, request: Request, session: SessionDep, actor: Editor) -> HTMLResponse:
    return _form_page(request, session, actor, "board", board_id=board_id)


@router.post("/boards/{board_id}/edit")
async def edit_board(board_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep):
    return await _submit(request, session, actor, form, "board", board_id=board_id)


# --- a table of rails ------------------------------------------------------------------------


def _column_help() -> list[dict[str, str]]:
    """The column set as the import page lists it: name, title, unit kind."""
    out = []
    for name in columns():
        words = FIELD_TITLES.get(name)
        title = {"board": "Board name (required)", "board_revision": "Board revision letter (A when blank)",
                 "part": "Library part name", "part_revision": "Library part revision (newest when blank)"}.get(
                     name, words.title if words else name)
        note = "JSON list, or a sheet of its own in a workbook" if name in LIST_FIELDS else \
            (words.kind if words and words.kind else "")
        out.append({"name": name, "title": title, "note": note})
    return out


def import_context(session: Session, actor: Actor, product_id: int, *, filename: str = "", data: bytes | None = None,
                   problems: list[str] | None = None, good_rows_only: bool = False,
                   commit: bool = False) -> dict[str, Any]:
    """The import page of a product: the upload form; with ``data``, the preview of the table (or, with
    ``commit``, its import: every row when all are good, the good ones when ``good_rows_only``)."""
    product = catalog.get_product(session=session, actor=actor, product_id=product_id)
    ctx: dict[str, Any] = {"product": product, "problems": problems or [], "plan": None, "rows": [],
                           "filename": filename, "payload": "", "columns": _column_help(), "max_rows": MAX_ROWS,
                           "report": None, "refused": False}
    if data is None or ctx["problems"]:
        return ctx
    try:
        table = read_table(filename, data)
    except TableInvalid as exc:
        ctx["problems"] = exc.problems
        return ctx
    if commit:
        plan, report = transfer.import_table(session=session, actor=actor, product_id=product.id, table=table,
                                             good_rows_only=good_rows_only)
        ctx["report"], ctx["refused"] = report, report is None
    else:
        plan = transfer.plan_table(session=session, actor=actor, product_id=product.id, table=table)
    rows = [r.as_dict() for r in plan.rows]
    ctx.update(plan=plan, rows=rows[:PREVIEW_ROWS], row_count=len(rows), good=len(plan.good), bad=len(plan.bad),
               new_boards=[f"{n} rev {r}" for n, r in plan.new_boards], source=plan.source,
               payload=base64.b64encode(data).decode("ascii"))
    return ctx


async def _upload(form) -> tuple[str, bytes | None, list[str]]:  # noqa: ANN001
    """(file name, bytes, problems) of the uploaded table, or of the table a preview carried along."""
    upload = form.get("table")
    if isinstance(upload, UploadFile) and upload.filename:
        data = await upload.read(MAX_UPLOAD_BYTES + 1)
        name = upload.filename
    elif form.get("payload"):
        try:
            data = base64.b64decode(str(form.get("payload")), validate=True)
        except (binascii.Error, ValueError):
            return "", None, ["the previewed table did not come back intact: upload it again"]
        name = str(form.get("filename", ""))
    else:
        return "", None, ["choose a CSV file or an .xlsx workbook to upload"]
    if len(data) > MAX_UPLOAD_BYTES:
        return name, None, [f"the file is larger than {MAX_UPLOAD_BYTES // 1_000_000} MB"]
    return name, data, []


@router.get("/products/{product_id}/import", response_class=HTMLResponse)
def import_page(product_id: int, request: Request, session: SessionDep, actor: Editor, created: int | None = None,
                boards: int = 0, skipped: int = 0) -> HTMLResponse:
    ctx = import_context(session, actor, product_id)
    ctx["done"] = None if created is None else {"created": created, "boards": boards, "skipped": skipped}
    return render(request, "import.html", page_context(request, actor, **ctx))


@router.post("/products/{product_id}/import")
async def import_table(product_id: int, request: Request, session: SessionDep, actor: Editor, form: FormDep):
    name, data, problems = await _upload(form)
    step = str(form.get("step", "preview"))
    ctx = import_context(session, actor, product_id, filename=name, data=data, problems=problems,
                         commit=step in ("import", "import_good"), good_rows_only=step == "import_good")
    if ctx["report"] is not None:
        report = ctx["report"]
        return redirect(f"/products/{product_id}/import?created={report.created}&boards={report.boards_created}"
                        f"&skipped={len(report.skipped)}")
    status = 422 if ctx["problems"] or (ctx["plan"] is not None and ctx["bad"]) else 200
    return render(request, "import.html", page_context(request, actor, **ctx), status_code=status)


@router.get("/rail-table-template.csv")
def table_template(actor: Annotated[Actor, Depends(require(Permission.READ))]) -> Response:
    """A CSV template of the rail table: the usual columns with units, one invented example row."""
    return Response(template_csv(), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": 'attachment; filename="railsign-rail-table.csv"'})
