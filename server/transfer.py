"""Export and import of rail files; the formats themselves are in `server.bundle`.

Export writes bundles (schema ``railsign.bundle/3``): each rail's head document with the
library part its revision pins (name and revision number) and the revision it comes from
(number and sha256); and a board's power-up sequence, the document of its head revision, when
the file holds the whole board (a board or a product; a one-rail file carries none, its other
rails being absent).

Import keeps what a round trip must keep:

- an unchanged document with the same part makes no revision;
- a part named in the file is linked again by name and revision number when this library
  holds that revision with the same FET; otherwise the rail keeps the part it uses here when
  that part's FET is the document's, or else the FET of its document, unlinked, and the
  report says which part could not be linked, why, and what was done instead
  (``require_parts=True``: nothing is stored then);
- a document that names no part keeps the rail's present part when its FET is that part's;
- a rail changed here since the revision the file was exported from is a conflict.

A board's sequence in the file is saved after the board's rails are stored, through the
sequence service (:func:`server.services.sequences.save_sequence`): an equal document makes no
revision (the save is not called), another one a new revision whose analysis the save queues.
A sequence that cannot be read with the board's rails as the import leaves
them is refused like a bad rail document: naming its board and field, nothing imported.

Every document (sequences included) is validated, every part looked up and every conflict
found before anything is stored.

A rail table (CSV or workbook, :mod:`server.rail_table`) is imported the same way, row by row:
:func:`plan_table` is the dry run (each row's problems on its fields, in words), and
:func:`import_table` stores new rails only when no row is bad, or the good rows when asked to.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.analysis.words import field_title
from server.bundle import PartLink, RailEntry, RailFile, bundle_dict, rail_entry_dict, read_rail_file
from server.rail_table import RailTable, TableRow
from server.models import (Board, BoardSequence, BoardSequenceRevision, Part, PartRevision, Product, Rail, RailRevision,
                           Team)
from server.schemas.rail import RAIL_FET_KEYS, document_sha256, part_data
from server.schemas.validation import DocumentInvalid
from server.services import catalog, rail_edits, rails, sequences
from server.services.access import Actor, Permission
from server.services.errors import Conflict, Invalid, NotFound

__all__ = ["export_rail", "export_board", "export_product", "import_data", "ImportReport", "PartNotLinked",
           "plan_table", "import_table", "TablePlan", "TableRowPlan", "TableReport"]

_PAGE = 1000


# --- export ----------------------------------------------------------------------------------


def _entry(session: Session, head: RailRevision) -> dict[str, Any]:
    status = rails.part_status(session, head)
    part = PartLink(name=status["name"], revision=status["pinned_revision"]) if status else None
    return rail_entry_dict(head.document, part=part, revision=head.n, sha256=head.sha256)


def _board_dict(board: Board, entries: list[dict[str, Any]], sequence: dict[str, Any] | None = None) -> dict[str, Any]:
    out = {"name": board.name, "revision": board.revision, "description": board.description, "rails": entries}
    if sequence is not None:
        out["sequence"] = sequence
    return out


def _sequence_document(session: Session, board: Board) -> dict[str, Any] | None:
    """The document of the head revision of the power-up sequence of a board the caller has found (scoped);
    None when it has none."""
    return session.scalar(select(BoardSequenceRevision.document)
                          .join(BoardSequence, (BoardSequence.id == BoardSequenceRevision.sequence_id)
                                & (BoardSequence.head_n == BoardSequenceRevision.n))
                          .where(BoardSequence.board_id == board.id))


def _whole_board(session: Session, actor: Actor, board: Board) -> dict[str, Any]:
    """A board with every rail on it and its sequence."""
    return _board_dict(board, _board_entries(session, actor, board), _sequence_document(session, board))


def _board_entries(session: Session, actor: Actor, board: Board) -> list[dict[str, Any]]:
    entries: list[dict[str, Any]] = []
    while True:
        rows, total = rails.list_rails(session=session, actor=actor, board_id=board.id, limit=_PAGE,
                                       offset=len(entries))
        entries += [_entry(session, head) for _, head in rows]
        if not rows or len(entries) >= total:
            return entries


def _product_dict(product: Product) -> dict[str, str]:
    return {"name": product.name, "description": product.description}


def export_rail(*, session: Session, actor: Actor, rail_id: int) -> dict[str, Any]:
    """A bundle with one rail: its product, its board and its head revision."""
    rail = rails.get_rail(session=session, actor=actor, rail_id=rail_id)
    head = rails.get_revision(session=session, actor=actor, rail_id=rail.id)
    board = catalog.get_board(session=session, actor=actor, board_id=rail.board_id)
    product = catalog.get_product(session=session, actor=actor, product_id=board.product_id)
    return bundle_dict(product=_product_dict(product), boards=[_board_dict(board, [_entry(session, head)])])


def export_board(*, session: Session, actor: Actor, board_id: int) -> dict[str, Any]:
    """A bundle with one board, every rail on it and its power-up sequence."""
    board = catalog.get_board(session=session, actor=actor, board_id=board_id)
    product = catalog.get_product(session=session, actor=actor, product_id=board.product_id)
    return bundle_dict(product=_product_dict(product), boards=[_whole_board(session, actor, board)])


def export_product(*, session: Session, actor: Actor, product_id: int) -> dict[str, Any]:
    """A bundle with every board of a product, every rail on them and their power-up sequences."""
    product = catalog.get_product(session=session, actor=actor, product_id=product_id)
    boards: list[Board] = []
    while True:
        rows, total = catalog.list_boards(session=session, actor=actor, product_id=product.id, limit=_PAGE,
                                          offset=len(boards))
        boards += rows
        if not rows or len(boards) >= total:
            break
    return bundle_dict(product=_product_dict(product), boards=[_whole_board(session, actor, b) for b in boards])


# --- import: the report ------------------------------------------------------------------------


@dataclass(frozen=True)
class PartNotLinked:
    """A rail whose file names a part that could not be linked here, and what was done instead."""

    rail: str
    part: PartLink
    reason: str
    instead: str


def _by_part(items: list[PartNotLinked]) -> list[tuple[PartLink, str, str, list[str]]]:
    groups: dict[tuple[PartLink, str, str], list[str]] = {}
    for n in items:
        groups.setdefault((n.part, n.reason, n.instead), []).append(n.rail)
    return [(part, reason, instead, names) for (part, reason, instead), names in groups.items()]


@dataclass
class ImportReport:
    """What an import did: rails created, updated (a new revision) and unchanged; part links."""

    created: int = 0
    updated: int = 0
    unchanged: int = 0
    linked: int = 0
    not_linked: list[PartNotLinked] = field(default_factory=list)
    sequences_saved: list[str] = field(default_factory=list)  # boards whose sequence got a new revision
    sequences_unchanged: list[str] = field(default_factory=list)

    def counts(self) -> dict[str, int]:
        return {"created": self.created, "updated": self.updated, "unchanged": self.unchanged}

    def lines(self) -> list[str]:
        """The report in words, one line per outcome and one per part that could not be linked."""
        rails_in_file = self.created + self.updated + self.unchanged
        out = [f"{self.created} created, {self.updated} updated, {self.unchanged} unchanged",
               f"{self.linked} of {rails_in_file} rails linked to a library part"]
        for part, reason, instead, names in _by_part(self.not_linked):
            out.append(f"not linked: part '{part.name}' revision {part.revision} {reason}. {instead}: "
                       + ", ".join(names) + ".")
        if self.sequences_saved:
            out.append("power-up sequence saved as a new revision: " + ", ".join(self.sequences_saved) + ".")
        if self.sequences_unchanged:
            out.append("power-up sequence unchanged: " + ", ".join(self.sequences_unchanged) + ".")
        return out

    def refusal(self) -> str:
        """Why nothing was stored when every named part had to be linked."""
        return "; ".join(f"part '{part.name}' revision {part.revision} {reason} (for " + ", ".join(names) + ")"
                         for part, reason, _, names in _by_part(self.not_linked))


# --- import: plan, then store --------------------------------------------------------------------


@dataclass
class _Plan:
    entry: RailEntry
    document: dict[str, Any]
    board_key: tuple[str, str]  # (name, revision letter) of its board, existing or to be created
    label: str
    rail: Rail | None = None
    head: RailRevision | None = None
    part: PartRevision | None = None
    outcome: str = "created"


def _label(board_key: tuple[str, str], name: str) -> str:
    return f"{name} on {board_key[0]} {board_key[1]}"


def _normalized(file: RailFile) -> list[dict[str, Any]]:
    """Every document of the file validated and normalised, before anything is looked up."""
    return [rails.normalize_document(e.document, prefix=e.location) for e in file.rails]


def _named_part(session: Session, link: PartLink, fet: dict[str, Any]) -> tuple[PartRevision | None, str]:
    """The library revision named by the file when it carries the document's FET; else why not."""
    part = session.scalar(select(Part).where(Part.name == link.name))
    if part is None:
        return None, "is not in this library"
    rev = session.scalar(select(PartRevision).where(PartRevision.part_id == part.id, PartRevision.n == link.revision))
    if rev is None:
        return None, f"is not in this library (it holds revisions 1 to {part.head_n} of that part)"
    if part_data(rev.document) != part_data(fet):
        return None, "differs here from the FET in the file"
    return rev, ""


def _choose_part(session: Session, plan: _Plan, report: ImportReport) -> None:
    """The part revision the rail is stored with, noting a part the file names that cannot be linked."""
    fet = plan.document["fet"]
    present = plan.head.part_revision if plan.head is not None else None
    present_fits = present is not None and part_data(present.document) == part_data(fet)
    link = plan.entry.part
    if link is None:
        plan.part = present if present_fits else None
        return
    rev, reason = _named_part(session, link, fet)
    if rev is not None:
        plan.part = rev
        return
    if present_fits:
        plan.part = present
        instead = "These rails keep the part revision they use here, which has the same FET"
    else:
        plan.part = None
        instead = "These rails use the FET in their own document, not a library part"
    report.not_linked.append(PartNotLinked(rail=plan.label, part=link, reason=reason, instead=instead))


def _outcome(session: Session, plan: _Plan) -> str | None:
    """created / updated / unchanged; for an update, a conflict in words when the rail moved on here."""
    if plan.rail is None:
        return None
    sha = document_sha256(plan.document)
    part_id = plan.part.id if plan.part is not None else None
    if sha == plan.head.sha256 and part_id == plan.head.part_revision_id:
        plan.outcome = "unchanged"
        return None
    plan.outcome = "updated"
    source = plan.entry.exported_from
    if source is None or sha == plan.head.sha256 or source.sha256 == plan.head.sha256:
        return None
    seen = session.scalar(select(RailRevision.n).where(RailRevision.rail_id == plan.rail.id,
                                                       RailRevision.sha256 == source.sha256).limit(1))
    if seen is None:  # another history (another installation): the file's document is simply newer here
        return None
    return (f"rail {plan.label} was exported from its revision {source.revision}, and has been saved here since "
            f"(now revision {plan.head.n} by {plan.head.author_name})")


def _targets(session: Session, actor: Actor, file: RailFile, board_id: int | None,
             team: str | None) -> tuple[Product | None, dict[str, Any] | None, int | None, dict]:
    """Where the rails go: (existing product, new product's fields, new product's team, boards by key)."""
    if board_id is not None:
        if len(file.rails) != 1:
            raise Invalid(f"--board takes one rail, and this file holds {len(file.rails)}: import the bundle "
                          "without --board to place each rail on its own board")
        board = catalog.get_board(session=session, actor=actor, board_id=board_id)
        return None, None, None, {(board.name, board.revision): board}
    if not file.is_bundle:
        raise Invalid("a single rail document needs a board: give --board ID")
    name = file.product["name"]
    product = session.scalar(select(Product).where(Product.name == name))
    boards: dict[tuple[str, str], Board | None] = {(b.name, b.revision): None for b in file.boards}
    if product is not None:
        product = catalog.get_product(session=session, actor=actor, product_id=product.id)
        for key in boards:
            boards[key] = session.scalar(select(Board).where(Board.product_id == product.id, Board.name == key[0],
                                                             Board.revision == key[1]))
        return product, None, None, boards
    team_id = None
    if team:
        row = session.scalar(select(Team).where(Team.name == team))
        if row is None:
            raise NotFound(f"no team '{team}'")
        team_id = row.id
    elif actor.user is None:
        raise Invalid(f"product '{name}' is new: say which team owns it with --team NAME")
    return None, file.product, team_id, boards


def _plan(session: Session, file: RailFile, documents: list[dict[str, Any]],
          boards: dict, single_board: bool, report: ImportReport) -> list[_Plan]:
    plans: list[_Plan] = []
    seen: dict[tuple[str, str, str], str] = {}
    for entry, doc in zip(file.rails, documents):
        key = next(iter(boards)) if single_board else (entry.board.name, entry.board.revision)
        if (*key, doc["name"]) in seen:
            raise Invalid(f"the file holds two rails named '{doc['name']}' for board '{key[0]}' revision {key[1]} "
                          f"({seen[(*key, doc['name'])]} and {entry.location}); nothing was imported")
        seen[(*key, doc["name"])] = entry.location
        board = boards[key]
        plan = _Plan(entry=entry, document=doc, board_key=key, label=_label(key, doc["name"]))
        if board is not None:
            plan.rail = session.scalar(select(Rail).where(Rail.board_id == board.id, Rail.name == doc["name"]))
            if plan.rail is not None:
                plan.head = session.scalar(select(RailRevision).where(RailRevision.rail_id == plan.rail.id,
                                                                      RailRevision.n == plan.rail.head_n))
        _choose_part(session, plan, report)
        plans.append(plan)
    return plans


@dataclass
class _SequencePlan:
    location: str
    board_key: tuple[str, str]
    document: dict[str, Any]
    unchanged: bool  # the board's sequence is this document already: nothing to save


def _board_label(key: tuple[str, str]) -> str:
    return f"board '{key[0]}' revision {key[1]}"


def _rails_after(session: Session, board: Board | None, key: tuple[str, str], plans: list[_Plan]) -> dict[str, Any]:
    """The rail documents a board will have in use once the plans are stored, by name: its rails in use now
    (not retired) with the file's documents in their place or beside them."""
    out: dict[str, Any] = {}
    if board is not None:
        rows = session.execute(select(Rail.name, RailRevision.document)
                               .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
                               .where(Rail.board_id == board.id, Rail.retired_at.is_(None))).all()
        out = {name: doc for name, doc in rows}
    out.update({p.document["name"]: p.document for p in plans if p.board_key == key})
    return out


def _plan_sequences(session: Session, file: RailFile, boards: dict, single_board: bool,
                    plans: list[_Plan]) -> list[_SequencePlan]:
    """Every sequence of the file read against its board's rails as the import leaves them, before anything is
    stored: a bad one refuses the whole import (as a bad rail document does), naming its board and fields."""
    out: list[_SequencePlan] = []
    for entry in file.sequences:
        key = next(iter(boards)) if single_board else (entry.board.name, entry.board.revision)
        board = boards[key]
        try:
            stored = sequences.check_document(entry.document, _rails_after(session, board, key, plans),
                                              prefix=entry.location)
        except Invalid as exc:
            words = "; ".join(f"{d['message']} ({d['field']})" for d in exc.details) or exc.message
            raise Invalid(f"the power-up sequence of {_board_label(key)} cannot be read with the board's rails as "
                          f"imported: {words}. Nothing was imported.", details=exc.details) from None
        # the save reads the file's document again (one write path); it is not called for an equal document
        out.append(_SequencePlan(location=entry.location, board_key=key, document=entry.document,
                                 unchanged=board is not None and _sequence_document(session, board) == stored))
    return out


def import_data(*, session: Session, actor: Actor, data: Any, board_id: int | None = None,
                team: str | None = None, message: str = "imported", require_parts: bool = False) -> ImportReport:
    """Import a rail file's parsed JSON: a bundle, or one rail (a document or a one-rail bundle) with ``board_id``.

    Parameters
    ----------
    data : Any
        The file's JSON (``server.bundle`` formats).
    board_id : int, optional
        The board for a file that holds one rail; a bundle's rails otherwise go to the
        boards it names, in its product (both created when missing).
    team : str, optional
        The team that owns a product the bundle creates.
    require_parts : bool
        Refuse the import, storing nothing, when a part the file names cannot be linked.

    Raises
    ------
    Invalid
        A bad document or bundle (naming the field), a board's sequence that cannot be read
        with the board's rails as imported (naming the board and the field), a missing board,
        or an unlinkable part under ``require_parts``; nothing is stored.
    Conflict
        A rail was saved here after the revision the file was exported from; nothing is stored.
    """
    actor.require(Permission.EDIT)
    try:
        file = read_rail_file(data)
    except DocumentInvalid as exc:
        raise Invalid(str(exc), details=[e.as_dict() for e in exc.errors]) from None
    documents = _normalized(file)
    product, new_product, team_id, boards = _targets(session, actor, file, board_id, team)
    report = ImportReport()
    plans = _plan(session, file, documents, boards, board_id is not None, report)
    sequence_plans = _plan_sequences(session, file, boards, board_id is not None, plans)
    conflicts = [c for c in (_outcome(session, p) for p in plans) if c]
    if conflicts:
        raise Conflict("; ".join(conflicts) + ". Nothing was imported: export the rails again and merge your "
                       "changes into that file.")
    if require_parts and report.not_linked:
        raise Invalid("nothing was imported: " + report.refusal() + ". Add those part revisions to the library, "
                      "or import without --require-parts to store those rails with the FET of their documents.")
    _store(session, actor, plans, product, new_product, team_id, boards, message, report)
    for seq in sequence_plans:  # after the rails: the sequence is read against them
        created = not seq.unchanged and sequences.save_sequence(
            session=session, actor=actor, board_id=boards[seq.board_key].id, document=seq.document,
            message=message)[2]
        (report.sequences_saved if created else report.sequences_unchanged).append(_board_label(seq.board_key))
    return report


def _store(session: Session, actor: Actor, plans: list[_Plan], product: Product | None,
           new_product: dict[str, Any] | None, team_id: int | None, boards: dict, message: str,
           report: ImportReport) -> None:
    if new_product is not None:
        product = catalog.create_product(session=session, actor=actor, name=new_product["name"],
                                         description=new_product.get("description", ""), team_id=team_id)
    descriptions = {}
    for plan in plans:
        if plan.entry.board is not None:
            descriptions.setdefault(plan.board_key, plan.entry.board.description)
    for key, board in boards.items():
        if board is None:
            boards[key] = catalog.create_board(session=session, actor=actor, product_id=product.id, name=key[0],
                                               revision=key[1], description=descriptions.get(key, ""))
    for plan in plans:
        part = rail_edits.PartRef(plan.part.part_id, plan.part.n) if plan.part is not None else None
        if plan.outcome == "created":
            rail_edits.create_rail(session=session, actor=actor, board_id=boards[plan.board_key].id,
                              document=plan.document, part=part, message=message)
        elif plan.outcome == "updated":
            _, _, created = rail_edits.save_rail(session=session, actor=actor, rail_id=plan.rail.id,
                                            document=plan.document, base_n=plan.head.n, part=part, message=message)
            plan.outcome = "updated" if created else "unchanged"
        setattr(report, plan.outcome, getattr(report, plan.outcome) + 1)
        report.linked += part is not None


# --- import of a rail table (CSV or workbook): a dry run row by row, then the good rows ------------

_META_TITLES = {"board": "Board", "board_revision": "Board revision", "part": "Library part",
                "part_revision": "Library part revision"}


def _row_error(path: str, message: str) -> dict[str, str]:
    """A problem of one row: its field path, the sentence, and the text people read (title first)."""
    title = _META_TITLES.get(path) or field_title(path)
    text = f"{path}: {message}" if title == path else f"{title} ({path}): {message}"
    return {"field": path, "message": message, "text": text}


@dataclass
class TableRowPlan:
    """What importing one row of a rail table would do, or why it cannot."""

    number: int
    name: str
    board: tuple[str, str]
    part: PartRevision | None = None
    document: dict[str, Any] | None = None
    errors: list[dict[str, str]] = field(default_factory=list)
    new_board: bool = False
    part_named: str = ""

    @property
    def ok(self) -> bool:
        return not self.errors

    def as_dict(self) -> dict[str, Any]:
        return {"row": self.number, "name": self.name, "board": f"{self.board[0]} rev {self.board[1]}",
                "new_board": self.new_board, "ok": self.ok, "errors": self.errors,
                "part": f"{self.part.document['name']} revision {self.part.n}" if self.part else
                (f"{self.part_named} (not found)" if self.part_named else None),
                "mode": (self.document or {}).get("switch", {}).get("mode")}


@dataclass
class TablePlan:
    product: Product
    rows: list[TableRowPlan]
    source: str

    @property
    def good(self) -> list[TableRowPlan]:
        return [r for r in self.rows if r.ok]

    @property
    def bad(self) -> list[TableRowPlan]:
        return [r for r in self.rows if not r.ok]

    @property
    def new_boards(self) -> list[tuple[str, str]]:
        return sorted({r.board for r in self.rows if r.new_board})


def _table_part(session: Session, row: TableRow) -> tuple[PartRevision | None, dict[str, str] | None]:
    part = session.scalar(select(Part).where(Part.name == row.part))
    if part is None:
        return None, _row_error("part", f"'{row.part}' is not in the part library")
    n = row.part_revision or part.head_n
    rev = session.scalar(select(PartRevision).where(PartRevision.part_id == part.id, PartRevision.n == n))
    if rev is None:
        return None, _row_error("part_revision", f"part '{row.part}' has no revision {n} (the library holds 1 to "
                                                 f"{part.head_n})")
    return rev, None


def _plan_row(session: Session, row: TableRow, boards: dict[tuple[str, str], Board | None],
              seen: dict[tuple[str, str, str], int]) -> TableRowPlan:
    key = (row.board, row.board_revision)
    plan = TableRowPlan(number=row.number, name=row.name, board=key, part_named=row.part)
    plan.errors = [_row_error(e["field"], e["message"]) for e in row.errors]
    if not row.board:
        plan.errors.append(_row_error("board", "is required: the board the rail goes on"))
    document = dict(row.document)
    if row.part:
        plan.part, problem = _table_part(session, row)
        if problem:
            plan.errors.append(problem)
        elif document.get("fet") and not set(document["fet"]) <= RAIL_FET_KEYS:
            plan.errors.append(_row_error("fet", f"the rail uses part '{row.part}', which brings its MOSFET: "
                                                 "leave the MOSFET columns empty"))
        else:  # the part's MOSFET, in the number the row gives (fet.count)
            document["fet"] = {**plan.part.document, **(document.get("fet") or {})}
    try:
        plan.document = rails.normalize_document(document, prefix="")
    except Invalid as exc:   # without the part it names, the row's missing MOSFET is no problem of its own
        plan.errors += [_row_error(d["field"], d["message"]) for d in exc.details or []
                        if not (row.part and plan.part is None and d["field"] == "fet")]
    if row.name and row.board:
        if (*key, row.name) in seen:
            plan.errors.append(_row_error("name", f"row {seen[(*key, row.name)]} has a rail of this name for the "
                                                  "same board"))
        seen.setdefault((*key, row.name), row.number)
        board = boards.get(key)
        plan.new_board = board is None
        if board is not None and session.scalar(select(Rail.id).where(Rail.board_id == board.id,
                                                                      Rail.name == row.name)) is not None:
            plan.errors.append(_row_error("name", f"board '{key[0]}' revision {key[1]} has a rail named "
                                                  f"'{row.name}' already"))
    return plan


def plan_table(*, session: Session, actor: Actor, product_id: int, table: RailTable) -> TablePlan:
    """The dry run of importing a rail table into a product: every row validated as every other path
    validates a rail document, its part looked up by name and revision, its name checked against
    its board and the other rows. Nothing is written."""
    actor.require(Permission.EDIT)
    product = catalog.get_product(session=session, actor=actor, product_id=product_id)
    boards: dict[tuple[str, str], Board | None] = {
        (b.name, b.revision): b for b in session.scalars(select(Board).where(Board.product_id == product.id))}
    seen: dict[tuple[str, str, str], int] = {}
    return TablePlan(product, [_plan_row(session, row, boards, seen) for row in table.rows], table.source)


@dataclass
class TableReport:
    created: int = 0
    boards_created: int = 0
    skipped: list[int] = field(default_factory=list)   # the numbers of the rows left out


def import_table(*, session: Session, actor: Actor, product_id: int, table: RailTable, good_rows_only: bool = False,
                 message: str = "imported from a table") -> tuple[TablePlan, TableReport | None]:
    """Plan the table, then store its rails (new boards first) through the rail service, one rail per call.

    While any row is bad nothing is stored (the report is None), unless ``good_rows_only``:
    then the good rows are stored and the bad ones are left out.
    """
    plan = plan_table(session=session, actor=actor, product_id=product_id, table=table)
    if (plan.bad and not good_rows_only) or not plan.good:
        return plan, None
    report = TableReport(skipped=[r.number for r in plan.bad])
    boards: dict[tuple[str, str], int] = {
        (b.name, b.revision): b.id for b in session.scalars(select(Board).where(Board.product_id == product_id))}
    for key in sorted({r.board for r in plan.good if r.board not in boards}):
        boards[key] = catalog.create_board(session=session, actor=actor, product_id=product_id, name=key[0],
                                           revision=key[1]).id
        report.boards_created += 1
    for row in plan.good:
        part = rail_edits.PartRef(row.part.part_id, row.part.n) if row.part is not None else None
        rail_edits.create_rail(session=session, actor=actor, board_id=boards[row.board], document=row.document,
                               part=part, message=message)
        report.created += 1
    return plan, report
