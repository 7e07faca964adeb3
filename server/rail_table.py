"""The rail table: many rails in one CSV file or spreadsheet workbook (.xlsx), read without a database.

The column set (README, "Importing a table of rails"):

- ``board`` (required): the board's name in the product the table is imported into;
  ``board_revision`` (optional, "A" when blank);
- ``part`` and ``part_revision`` (optional): a library part by name and revision number (the
  newest when the revision is blank); the rail's MOSFET is that part's, and the ``fet.*``
  columns stay empty;
- one column per field of the rail document (DESIGN.md section 3), named by its path
  (``supply.v_min``, ``switch.timer.c``, ``fet.rds_on``, ``rules.soa_margin``) or by its title in
  :data:`server.analysis.words.FIELD_TITLES` ("Supply minimum"), case aside;
- a unit in square brackets after the name (``load.c_nom [uF]``) applies to bare numbers of
  the column; a cell may carry its own unit ("680uF") instead; a bare number without either is
  in SI units;
- list-valued fields, ``fet.zth`` (Foster stages), ``fet.zth_points`` (the Zth curve points the
  stages were fitted to), ``fet.soa.curves`` (SOA curves), ``fet.rds_on_curve`` (R_DS(on) /
  R_DS(on) at 25 degC against T_j) and ``switch.foldback`` (the foldback current limit), as a
  JSON cell (``[{"r": 0.5, "tau": "1ms"}]``; ``[["10us", 0.02], ["1ms", 0.3]]``;
  ``[{"t_pulse": "10ms", "points": [[1, 100], [30, 3]]}]``; ``[[25, 1.0], [100, 1.4], [150, 1.75]]``;
  ``[["2V", "5A"], [10, 1]]``), or, in a workbook, on a second sheet named after the field:
  ``fet.zth`` with columns ``board``, ``rail``, ``r``, ``tau`` (one stage per row, in order),
  ``fet.zth_points`` with columns ``board``, ``rail``, ``t``, ``zth``, ``fet.soa.curves`` with
  columns ``board``, ``rail``, ``t_pulse``, ``v_ds``, ``i_d`` (one point per row; the rows of one
  pulse width make its curve, curves and points in the order of the sheet; ``DC`` or a blank
  pulse width is the DC curve), ``fet.rds_on_curve`` with columns ``board``, ``rail``, ``tj``,
  ``ratio`` and ``switch.foldback`` with columns ``board``, ``rail``, ``v_ds``, ``i_limit`` (one
  point per row, in order);
- ``load.bank`` (a capacitor bank: groups of identical capacitors) as a JSON cell holding the
  document's list of groups (``[{"refs": "C1-C4", "count": 4, "c_nom": "22uF", "dielectric": "x7r",
  "v_rated": "25V", "dc_bias": [[0, 1], [12, 0.45]]}]``), or, in a workbook, on a sheet ``load.bank``
  with columns ``board``, ``rail``, ``count``, ``c_nom``, ``dielectric``, ``v_rated`` and optional
  ``refs``, ``c_tol``, ``esr``, ``tempco``, ``dc_bias`` and ``derating`` (the last two JSON lists),
  one group per row, in order;
- ``fet.count`` (parallel FETs) is the rail's own figure: it may be given beside a ``part``.

Blank rows and rows whose first cell starts with ``#`` are skipped. The first sheet of a
workbook holds the table; numbers count from the table's header (row 1), as a spreadsheet
shows them. Reading never validates the physics: :mod:`server.transfer` plans each row
through the same validation as every other path.

Provides :class:`TableRow`, :class:`RailTable`, :class:`TableInvalid`, :func:`read_csv`,
:func:`read_xlsx`, :func:`read_table`, :data:`LIST_FIELDS`, :func:`columns`, :func:`template_csv`, and
:func:`write_csv` (rails as a table of this column set, reading back to the same documents).
"""

from __future__ import annotations

import csv
import io
import json
import re
import zipfile
from dataclasses import dataclass, field
from typing import Any

from openpyxl import load_workbook

from server.analysis.words import FIELD_TITLES
from server.schemas.rail import SCHEMA_ID

__all__ = ["TableRow", "RailTable", "TableInvalid", "read_csv", "read_xlsx", "read_table", "LIST_FIELDS",
           "META_COLUMNS", "columns", "template_csv", "MAX_ROWS", "write_csv", "BANK_OPTIONAL"]

MAX_ROWS = 5000
META_COLUMNS = ("board", "board_revision", "part", "part_revision")
LIST_FIELDS = {"fet.zth": ("r", "tau"), "fet.zth_points": ("t", "zth"), "fet.soa.curves": ("t_pulse", "v_ds", "i_d"),
               "fet.rds_on_curve": ("tj", "ratio"), "switch.foldback": ("v_ds", "i_limit"),
               "load.bank": ("count", "c_nom", "dielectric", "v_rated")}
# columns a ``load.bank`` sheet may add to its required ones: plain values, and two JSON lists
BANK_OPTIONAL = ("refs", "c_tol", "esr", "tempco", "dc_bias", "derating")
_SECTIONS = ("supply", "path", "load", "switch", "environment")
_HEADER = re.compile(r"^\s*(?P<name>.*?)\s*(?:\[(?P<unit>[^\]]*)\])?\s*$")
_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")


def _value_paths() -> list[str]:
    """Every document path a column may name: fields with a value, and the two list fields."""
    out = []
    for path, words in FIELD_TITLES.items():
        if "[" in path or path in ("document", "schema"):
            continue
        is_section = any(other.startswith(path + ".") for other in FIELD_TITLES)
        if path in LIST_FIELDS or not is_section:
            out.append(path)
    return out


_PATHS = _value_paths()
_BY_NAME = {p.lower(): p for p in _PATHS} | {FIELD_TITLES[p].title.lower(): p for p in _PATHS} | \
    {m: m for m in META_COLUMNS}


def columns() -> list[str]:
    """The column set: the meta columns, then every document path a column may name, in document order."""
    return list(META_COLUMNS) + _PATHS


class TableInvalid(ValueError):
    """A table that cannot be read at all (not a CSV or workbook, unknown columns, no board column)."""

    def __init__(self, problems: list[str]) -> None:
        self.problems = problems
        super().__init__("; ".join(problems))


@dataclass
class TableRow:
    """One rail of the table: where it goes, its part, its document as typed, problems of reading it."""

    number: int                   # the row's number in the sheet (the header is row 1)
    board: str
    board_revision: str
    part: str
    part_revision: int | None
    document: dict[str, Any]
    errors: list[dict[str, str]] = field(default_factory=list)   # [{field, message}] found while reading

    @property
    def name(self) -> str:
        return str(self.document.get("name") or "")


@dataclass
class RailTable:
    rows: list[TableRow]
    columns: list[str]            # the document paths and meta columns of the header, in order
    source: str                   # "CSV" or "workbook"


def _header(cells: list[Any]) -> tuple[list[tuple[str, str] | None], list[str]]:
    """Each column's (path, unit) from the header row; the problems of the header."""
    out: list[tuple[str, str] | None] = []
    problems = []
    for k, cell in enumerate(cells):
        text = "" if cell is None else str(cell).strip()
        if not text:
            out.append(None)
            continue
        m = _HEADER.match(text)
        name, unit = m["name"], (m["unit"] or "").strip()
        path = _BY_NAME.get(name.lower())
        if path is None:
            problems.append(f"column {k + 1} '{text}' names no field of the rail document (see the column set)")
            out.append(None)
            continue
        if unit and (path in META_COLUMNS or path in LIST_FIELDS or FIELD_TITLES[path].kind is None):
            problems.append(f"column {k + 1} '{text}': {path} takes no unit")
        out.append((path, unit))
    seen = [c[0] for c in out if c]
    for path in sorted({p for p in seen if seen.count(p) > 1}):
        problems.append(f"two columns name {path}")
    if "board" not in seen:
        problems.append("the table has no 'board' column: each row names the board its rail goes on")
    return out, problems


def _put(doc: dict[str, Any], path: str, value: Any) -> None:
    *heads, last = path.split(".")
    node = doc
    for h in heads:
        node = node.setdefault(h, {})
    node[last] = value


def _cell_value(raw: Any, unit: str) -> Any:
    """A cell as the schema reads it: numbers stay numbers unless the header gives a unit."""
    if isinstance(raw, bool):
        return raw
    if isinstance(raw, (int, float)):
        return f"{raw!r} {unit}" if unit else raw
    text = str(raw).strip()
    if unit and _NUMBER.match(text):
        return f"{text} {unit}"
    return text


def _list_cell(raw: Any, path: str) -> tuple[Any, str | None]:
    try:
        value = json.loads(str(raw))
    except json.JSONDecodeError as exc:
        return None, f"is not JSON ({exc.msg} at character {exc.pos + 1}): write a list as JSON, see the column set"
    if not isinstance(value, list):
        return None, "must be a JSON list"
    return value, None


def _text(raw: Any) -> str:
    if raw is None:
        return ""
    if isinstance(raw, float) and raw.is_integer():
        return str(int(raw))
    return str(raw).strip()


def _row(number: int, cells: list[Any], header: list[tuple[str, str] | None]) -> TableRow:
    doc: dict[str, Any] = {"schema": SCHEMA_ID, **{s: {} for s in _SECTIONS}}
    meta = {m: "" for m in META_COLUMNS}
    errors: list[dict[str, str]] = []
    timer = any(h and h[0].startswith("switch.timer.") and _text(cells[k] if k < len(cells) else None)
                for k, h in enumerate(header))
    for k, column in enumerate(header):
        raw = cells[k] if k < len(cells) else None
        if column is None or _text(raw) == "":
            continue
        path, unit = column
        if path in META_COLUMNS:
            meta[path] = _text(raw)
        elif path in LIST_FIELDS:
            value, problem = _list_cell(raw, path)
            if problem:
                errors.append({"field": path, "message": problem})
            else:
                _put(doc, path, value)
        elif isinstance(raw, str) and "," in raw and FIELD_TITLES[path].kind is not None:
            # a number reader takes "1,5" for fifteen: a decimal comma is refused here, not misread
            errors.append({"field": path, "message": f"'{raw.strip()}' holds a comma: write decimals with a point "
                                                     "(1.5) and no thousands separators"})
        elif not path.startswith("switch.timer.") or timer:
            _put(doc, path, _cell_value(raw, unit))
    revision = None
    if meta["part_revision"]:
        try:
            revision = int(meta["part_revision"])
        except ValueError:
            errors.append({"field": "part_revision", "message": "must be a whole number (blank: the newest)"})
    return TableRow(number, meta["board"], meta["board_revision"] or "A", meta["part"], revision, doc, errors)


def _is_blank(cells: list[Any]) -> bool:
    return all(_text(c) == "" for c in cells) or _text(cells[0] if cells else "").startswith("#")


def _rows(lines: list[list[Any]], source: str) -> RailTable:
    if not lines or _is_blank(lines[0]):
        raise TableInvalid(["the table is empty: its first row names the columns"])
    header, problems = _header(list(lines[0]))
    if problems:
        raise TableInvalid(problems)
    rows = [_row(k + 1, list(cells), header) for k, cells in enumerate(lines) if k > 0 and not _is_blank(list(cells))]
    if len(rows) > MAX_ROWS:
        raise TableInvalid([f"the table has {len(rows)} rails; import at most {MAX_ROWS} at a time"])
    return RailTable(rows, [h[0] for h in header if h], source)


def read_csv(data: bytes | str) -> RailTable:
    """A CSV table (UTF-8, with or without a byte-order mark; comma, semicolon or tab separated)."""
    if isinstance(data, bytes):
        try:
            text = data.decode("utf-8-sig")
        except UnicodeDecodeError:
            raise TableInvalid(["the file is not UTF-8 text: save the CSV as UTF-8"]) from None
    else:
        text = data.removeprefix("\ufeff")
    first = text.split("\n", 1)[0]
    delimiter = max((",", ";", "\t"), key=first.count)
    return _rows(list(csv.reader(io.StringIO(text), delimiter=delimiter)), "CSV")


def _sheet_lines(sheet) -> list[list[Any]]:  # noqa: ANN001
    return [list(r) for r in sheet.iter_rows(values_only=True)]


def _by_rail(lines: list[list[Any]], sheet: str, wanted: tuple[str, ...]) -> dict[tuple[str, str], list[dict]]:
    """The rows of a list sheet grouped by (board, rail), each a dict of the ``wanted`` columns."""
    if not lines:
        return {}
    names = [_text(c).lower() for c in lines[0]]
    missing = [c for c in ("board", "rail", *wanted) if c not in names]
    if missing:
        raise TableInvalid([f"sheet '{sheet}' has no column {', '.join(missing)} (its columns are board, rail, "
                            f"{', '.join(wanted)})"])
    out: dict[tuple[str, str], list[dict]] = {}
    for cells in lines[1:]:
        if _is_blank(list(cells)):
            continue
        item = {n: (cells[k] if k < len(cells) else None) for k, n in enumerate(names)}
        out.setdefault((_text(item["board"]), _text(item["rail"])), []).append(item)
    return out


def _stages(items: list[dict]) -> list[dict[str, Any]]:
    return [{"r": _cell_value(i["r"], ""), "tau": _cell_value(i["tau"], "")} for i in items]


def _rds_points(items: list[dict]) -> list[list[Any]]:
    return [[_cell_value(i["tj"], ""), _cell_value(i["ratio"], "")] for i in items]
def _zth_points(items: list[dict]) -> list[list[Any]]:
    return [[_cell_value(i["t"], ""), _cell_value(i["zth"], "")] for i in items]


def _curves(items: list[dict]) -> list[dict[str, Any]]:
    curves: dict[str, dict[str, Any]] = {}
    for i in items:
        key = _text(i["t_pulse"]) or "DC"
        curve = curves.setdefault(key, {"t_pulse": None if key.upper() == "DC" else _cell_value(i["t_pulse"], ""),
                                        "points": []})
        curve["points"].append([_cell_value(i["v_ds"], ""), _cell_value(i["i_d"], "")])
    return list(curves.values())


def _foldback(items: list[dict]) -> list[list[Any]]:
    return [[_cell_value(i["v_ds"], ""), _cell_value(i["i_limit"], "")] for i in items]


def _json_or_text(raw: Any) -> Any:
    """A JSON list cell of a sheet (a DC-bias curve, a derating range); text the schema then refuses otherwise."""
    try:
        return json.loads(str(raw))
    except json.JSONDecodeError:
        return _text(raw)


def _bank(items: list[dict]) -> list[dict[str, Any]]:
    groups = []
    for i in items:
        group = {k: _cell_value(i[k], "") for k in ("count", "c_nom", "dielectric", "v_rated")}
        for k in BANK_OPTIONAL:
            if _text(i.get(k)) != "":
                group[k] = _json_or_text(i[k]) if k in ("dc_bias", "derating") else _cell_value(i[k], "")
        if "refs" in group:
            group["refs"] = _text(i["refs"])
        groups.append(group)
    return groups


def read_xlsx(data: bytes) -> RailTable:
    """A workbook: the table on its first sheet; Foster stages, Zth points and SOA curves on sheets
    ``fet.zth``, ``fet.zth_points`` and ``fet.soa.curves`` (or as JSON cells of the table)."""
    try:
        book = load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except (zipfile.BadZipFile, KeyError, ValueError, OSError) as exc:
        raise TableInvalid([f"the file is not a readable .xlsx workbook ({type(exc).__name__})"]) from None
    try:
        sheets = book.sheetnames
        table = _rows(_sheet_lines(book[sheets[0]]), "workbook")
        lists = {path: _by_rail(_sheet_lines(book[path]), path, LIST_FIELDS[path]) for path in LIST_FIELDS
                 if path in sheets[1:]}
    finally:
        book.close()
    build = {"fet.zth": _stages, "fet.zth_points": _zth_points, "fet.soa.curves": _curves,
             "fet.rds_on_curve": _rds_points, "switch.foldback": _foldback, "load.bank": _bank}
    for path, groups in lists.items():
        for row in table.rows:
            items = groups.get((row.board, row.name))
            if items is None:
                continue
            if path in table.columns and _get(row.document, path) is not None:
                row.errors.append({"field": path, "message": f"is given both in its column and on sheet '{path}'"})
            elif path == "load.bank" and _get(row.document, "load.c_nom") is not None:
                row.errors.append({"field": path, "message": "sheet 'load.bank' gives a capacitor bank, but the row "
                                                            "also gives load.c_nom: leave it blank with a bank"})
            elif row.part and path.startswith("fet."):
                row.errors.append({"field": path, "message": f"sheet '{path}' gives it, but the rail uses part "
                                                            f"'{row.part}': a part brings its own MOSFET"})
            else:
                _put(row.document, path, build[path](items))
    return table


def _get(doc: dict[str, Any], path: str) -> Any:
    node: Any = doc
    for key in path.split("."):
        node = node.get(key) if isinstance(node, dict) else None
    return node


def read_table(filename: str, data: bytes) -> RailTable:
    """A CSV file or a workbook, told apart by its name (``.xlsx``) or its first bytes (a zip archive)."""
    if filename.lower().endswith(".xlsx") or data[:2] == b"PK":
        return read_xlsx(data)
    return read_csv(data)


def template_csv() -> str:
    """A CSV template: the usual columns with units in the header, and one invented example row whose
    MOSFET is given in its own columns (Foster stages and SOA curves as JSON cells)."""
    head = ["board", "board_revision", "part", "part_revision", "name", "supply.v_min [V]", "supply.v_nom [V]",
            "supply.v_max [V]", "supply.r_source [mOhm]", "supply.i_max [A]", "load.c_nom [uF]", "load.c_tol [%]",
            "load.esr [mOhm]", "load.model", "load.i_nom [A]", "switch.mode", "switch.i_limit [A]",
            "switch.i_limit_tol [%]", "environment.t_ambient [degC]", "fet.name", "fet.vds_max [V]",
            "fet.rds_on [mOhm]", "fet.tj_max [degC]", "fet.rth_ja [K/W]", "fet.zth", "fet.soa.curves"]
    zth = [{"r": 0.2, "tau": "20us"}, {"r": 1.8, "tau": "2ms"}, {"r": 8, "tau": 0.1}, {"r": 30, "tau": 5}]
    soa = [{"t_pulse": "100us", "points": [[0.5, 150], [10, 150], [30, 40]]},
           {"t_pulse": "10ms", "points": [[0.5, 60], [2, 60], [30, 4]]},
           {"t_pulse": None, "points": [[0.5, 20], [1, 20], [30, 0.7]]}]
    example = ["Main", "A", "", "", "VOUT_EXAMPLE", "11.4", "12", "12.6", "20", "10", "680", "20", "10",
               "resistive", "2", "current_limit", "4", "10", "55", "Example N30", "30", "5", "150", "40",
               json.dumps(zth), json.dumps(soa)]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(head)
    writer.writerow(example)
    return out.getvalue()


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, (list, dict)):
        return json.dumps(value, ensure_ascii=False, allow_nan=False)
    if isinstance(value, float):
        return repr(value)
    return str(value)


def write_csv(entries: list[dict[str, Any]]) -> str:
    """Rails as a CSV table of this column set: each entry ``{"board", "board_revision", "part",
    "part_revision", "document"}`` (a stored, canonical rail document: SI numbers). Values are written
    as SI numbers that read back exactly, list fields (``load.bank``, the FET's curves) as JSON cells;
    a rail on a library ``part`` leaves the ``fet.*`` columns blank but ``fet.count``. Only columns some
    rail fills are written, in the order of :func:`columns`."""
    rows = []
    for e in entries:
        doc = e["document"]
        row = {"board": e["board"], "board_revision": e.get("board_revision") or "", "part": e.get("part") or "",
               "part_revision": "" if e.get("part_revision") is None else str(e["part_revision"])}
        for path in _PATHS:
            if e.get("part") and path.startswith("fet.") and path != "fet.count":
                continue
            value = _get(doc, path)
            if value is not None:
                row[path] = _cell(value)
        rows.append(row)
    head = [c for c in columns() if c in META_COLUMNS or any(c in r for r in rows)]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(head)
    for r in rows:
        writer.writerow([r.get(c, "") for c in head])
    return out.getvalue()
