"""A capacitor bank from a bill of materials: the CSV lines of the capacitors on a rail's net.

Pure functions over text (no I/O, no database): the rail form fills its bank rows from what
:func:`parse_bom` returns, the person reviews them and saves; ``railsign bom-import`` prints
the same groups as the document's ``load.bank``.

Columns (the first line is the header; names matched case-insensitively, with synonyms):
reference designators, value, dielectric, rating, count (count may be left out where the
designators are listed: "C1, C3-C5" counts 4), and optionally tolerance and ESR. Values take
engineering notation ("22u", "22uF", "4.7 µF", "25V", "20%", "4 mOhm"). A comma, semicolon
or tab separates the cells (the header decides which); a cell holding the separator is quoted
as CSV does ("C1, C2"). Rows with the same value, dielectric, rating, tolerance and ESR merge
into one group (counts added, designators joined). Dielectric words map to the document's
ids ("X7R" -> x7r, "aluminium electrolytic" -> electrolytic, "NP0" -> c0g); a word not known
is read as ``other``, with a warning.

Provides :func:`parse_bom`, :class:`BomImport`, :class:`BomProblem`, :func:`count_refs`,
:func:`dielectric_id`, :data:`COLUMNS`.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field
from typing import Any

from server.analysis.bank import DIELECTRIC_WORDS, DIELECTRICS, MAX_BANK_GROUPS, MAX_GROUP_COUNT
from server.units import UnitError, format_quantity, parse_quantity

__all__ = ["parse_bom", "BomImport", "BomProblem", "count_refs", "dielectric_id", "COLUMNS", "MAX_LINES"]

MAX_LINES = 5000  # lines of one BOM read; a net's capacitors are far fewer

# column -> the header names read as it (after lower case, "_"/"-"/"." as spaces, a unit in brackets dropped)
COLUMNS: dict[str, tuple[str, ...]] = {
    "refs": ("reference designators", "reference designator", "references", "reference", "refdes", "ref des",
             "refs", "ref", "designators", "designator", "parts", "components"),
    "value": ("value", "capacitance", "cap", "c", "c nom", "nominal", "nominal value", "nominal capacitance"),
    "dielectric": ("dielectric", "type", "material", "tc", "temperature characteristic", "technology"),
    "rating": ("rating", "voltage", "rated voltage", "voltage rating", "v rated", "vrated", "rated", "v",
               "working voltage"),
    "count": ("count", "qty", "quantity", "number", "pcs", "n"),
    "tolerance": ("tolerance", "tol", "c tol"),
    "esr": ("esr", "esr each", "esr per capacitor"),
}
_TITLES = {"refs": "reference designators", "value": "value", "dielectric": "dielectric", "rating": "rating",
           "count": "count", "tolerance": "tolerance", "esr": "ESR"}
_BY_HEADER = {name: column for column, names in COLUMNS.items() for name in names}

# dielectric words (lower case, without spaces, hyphens or dots) -> the document's id
_DIELECTRIC_EXACT = {
    "c0g": "c0g", "cog": "c0g", "np0": "c0g", "npo": "c0g", "c0gnp0": "c0g", "np0c0g": "c0g", "classi": "c0g",
    "x5r": "x5r", "x7r": "x7r",
    "alu": "electrolytic", "al": "electrolytic", "aluminium": "electrolytic", "aluminum": "electrolytic",
    "elco": "electrolytic", "elcap": "electrolytic", "ecap": "electrolytic", "electrolytic": "electrolytic",
    "polymer": "polymer", "film": "film", "polypropylene": "film", "pp": "film", "polyester": "film",
    "pet": "film", "pen": "film", "pps": "film", "other": "other",
}
_SPLIT_REFS = re.compile(r"[,;\s]+")
_RANGE = re.compile(r"^(?P<a>[A-Za-z_]*)(?P<i>\d+)\s*(?:-|\u2013|\.\.|:)\s*(?P<b>[A-Za-z_]*)(?P<j>\d+)$")
_SINGLE = re.compile(r"^[A-Za-z_]*\d+[A-Za-z]?$")
_INTEGER = re.compile(r"^\+?\d+(\.0*)?$")
_PLUS_MINUS = re.compile(r"^(\u00b1|\+/-|\+-)\s*")


@dataclass(frozen=True)
class BomProblem:
    """A line the import could not read: its line number (1: the header), the column, what is wrong."""

    line: int
    column: str | None
    message: str

    def __str__(self) -> str:
        where = f"line {self.line}" + (f", column {self.column}" if self.column else "")
        return f"{where}: {self.message}"


@dataclass(frozen=True)
class BomImport:
    """The bank the BOM gives: ``groups`` (document ``load.bank`` groups, SI), ``warnings`` for the
    person to review, ``errors`` (lines not read; with any, the groups are those of the good lines)."""

    groups: list[dict[str, Any]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    errors: list[BomProblem] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.errors and bool(self.groups)


def _header_name(cell: str) -> str:
    text = re.sub(r"\(.*?\)|\[.*?\]", " ", cell.strip().lower())
    text = re.sub(r"[_\-.]+", " ", text)
    return " ".join(text.split())


def dielectric_id(word: str) -> tuple[str, bool]:
    """The document's dielectric id for a BOM's word, and whether the word was known (an unknown
    or blank word is ``other``, not known)."""
    key = re.sub(r"[\s\-_.]+", "", word.strip().lower())
    if not key:
        return "other", False
    if key in _DIELECTRIC_EXACT:
        return _DIELECTRIC_EXACT[key], True
    if "polymer" in key:  # aluminium polymer, tantalum polymer, polymer electrolytic
        return "polymer", True
    if "electrolytic" in key or key.startswith(("alu", "aluminium", "aluminum")):
        return "electrolytic", True
    if key.startswith(("x7r", "x5r")):  # "X7R ceramic", "X5R MLCC"
        return key[:3], True
    if key.startswith(("c0g", "cog", "np0", "npo")):
        return "c0g", True
    if key.endswith("film") or key.startswith("film"):
        return "film", True
    return "other", False


def count_refs(refs: str) -> int:
    """How many capacitors a designator list names: "C1, C3-C5" -> 4. Ranges (C3-C5, C3..C5, C3-5) need
    a common prefix and a rising number. ValueError naming the part of the list not read."""
    n = 0
    for token in _designators(refs):
        m = _RANGE.match(token)
        if m:
            a, b = m["a"], m["b"] or m["a"]
            if a.upper() != b.upper():
                raise ValueError(f"the range {token} has no common prefix ({a} and {b})")
            i, j = int(m["i"]), int(m["j"])
            if j < i:
                raise ValueError(f"the range {token} runs backwards")
            n += j - i + 1
        elif _SINGLE.match(token):
            n += 1
        else:
            raise ValueError(f"{token!r} is not a designator (e.g. C12) or a range (e.g. C14-C20)")
    return n


def _designators(refs: str) -> list[str]:
    # "C3 - C5" written with spaces around the dash: close them up before splitting
    text = re.sub(r"\s*(-|\u2013|\.\.)\s*", r"\1", refs.strip())
    return [t for t in _SPLIT_REFS.split(text) if t]


def _expanded(refs: str) -> list[str]:
    """Every designator of a list, ranges expanded (for spotting one listed twice)."""
    out = []
    for token in _designators(refs):
        m = _RANGE.match(token)
        if m:
            out += [f"{m['a'].upper()}{k}" for k in range(int(m["i"]), int(m["j"]) + 1)]
        else:
            out.append(token.upper())
    return out


def _delimiter(header: str) -> str:
    for d in ("\t", ";"):
        if d in header:
            return d
    return ","


def _cells(line: str, delimiter: str) -> list[str]:
    return [c.strip() for c in next(csv.reader([line], delimiter=delimiter, skipinitialspace=True), [])]


def _quantity(cell: str, kind: str) -> float:
    return parse_quantity(_PLUS_MINUS.sub("", cell.strip()), kind)


def parse_bom(text: str) -> BomImport:
    """The capacitor bank a BOM's CSV text gives (see the module's description)."""
    lines = text.splitlines()
    errors: list[BomProblem] = []
    warnings: list[str] = []
    numbered = [(k + 1, ln) for k, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        return BomImport(errors=[BomProblem(1, None, "no header line: the first line names the columns "
                                                     "(reference designators, value, dielectric, rating, count)")])
    if len(numbered) > MAX_LINES + 1:
        return BomImport(errors=[BomProblem(MAX_LINES + 2, None, f"more than {MAX_LINES} lines; split the BOM")])
    (header_no, header), rows = numbered[0], numbered[1:]
    delimiter = _delimiter(header)
    columns: dict[str, int] = {}
    for k, cell in enumerate(_cells(header, delimiter)):
        column = _BY_HEADER.get(_header_name(cell))
        if column is None:
            if cell:
                warnings.append(f"Column “{cell}” (line {header_no}) is not read.")
        elif column in columns:
            errors.append(BomProblem(header_no, cell, f"a second {_TITLES[column]} column"))
        else:
            columns[column] = k
    missing = [c for c in ("value", "dielectric", "rating") if c not in columns]
    if "refs" not in columns and "count" not in columns:
        missing.append("count (or reference designators)")
    if missing:
        errors.append(BomProblem(header_no, None, "no column for " + ", ".join(_TITLES.get(m, m) for m in missing)
                                 + "; the header names the columns, e.g. “refdes, value, dielectric, rating, qty”"))
    if errors:
        return BomImport(warnings=warnings, errors=errors)
    if "tolerance" not in columns:
        warnings.append("No tolerance column: every group is read at 0 % tolerance, so the corners and the Monte "
                        "Carlo do not move the bank; give each part's tolerance before saving.")

    groups: dict[tuple, dict[str, Any]] = {}
    seen: dict[str, int] = {}
    for line_no, line in rows:
        cells = _cells(line, delimiter)
        row = {c: (cells[k] if k < len(cells) else "") for c, k in columns.items()}
        group = _read_row(line_no, row, errors, warnings)
        if group is None:
            continue
        for ref in _expanded(group.get("refs") or ""):
            if ref in seen:
                warnings.append(f"{ref} is listed on line {seen[ref]} and again on line {line_no}.")
            else:
                seen[ref] = line_no
        key = (group["c_nom"], group["dielectric"], group["v_rated"], group["c_tol"], group["esr"])
        if key in groups:
            into = groups[key]
            into["count"] += group["count"]
            refs = ", ".join(r for r in (into.get("refs"), group.get("refs")) if r)
            if refs:
                into["refs"] = refs
        else:
            groups[key] = group
    out = list(groups.values())
    if not out and not errors:
        errors.append(BomProblem(header_no, None, "no capacitor lines below the header"))
    if len(out) > MAX_BANK_GROUPS:
        errors.append(BomProblem(rows[-1][0], None, f"{len(out)} different capacitors; a bank holds at most "
                                                    f"{MAX_BANK_GROUPS} groups"))
    for g in out:
        if g["count"] > MAX_GROUP_COUNT:
            errors.append(BomProblem(header_no, "count", f"{g['count']} capacitors of "
                                     f"{format_quantity(g['c_nom'], 'F')} in one group; at most {MAX_GROUP_COUNT}"))
    return BomImport(groups=out, warnings=warnings, errors=errors)


def _read_row(line_no: int, row: dict[str, str], errors: list[BomProblem],
              warnings: list[str]) -> dict[str, Any] | None:
    """One BOM line as a bank group (count, value, ...), or None with its problems added to ``errors``."""
    before = len(errors)

    def fail(column: str, message: str) -> None:
        errors.append(BomProblem(line_no, _TITLES[column], message))

    def quantity(column: str, kind: str, required: bool) -> float | None:
        cell = row.get(column, "")
        if not cell:
            if required:
                fail(column, "is blank")
            return None
        try:
            return _quantity(cell, kind)
        except UnitError as exc:
            fail(column, f"“{cell}”: {exc}")
            return None

    c_nom = quantity("value", "F", True)
    v_rated = quantity("rating", "V", True)
    c_tol = quantity("tolerance", "fraction", False)
    if c_tol is None and "tolerance" in row:
        warnings.append(f"Line {line_no}: no tolerance given; read as 0 % (the corners do not move this group).")
    esr = quantity("esr", "ohm", False)
    refs = row.get("refs", "").strip()
    listed = None
    if refs:
        try:
            listed = count_refs(refs)
        except ValueError as exc:
            fail("refs", str(exc))
    count = None
    cell = row.get("count", "")
    if cell:
        if not _INTEGER.match(cell):
            fail("count", f"“{cell}” is not a whole number of capacitors")
        else:
            count = int(float(cell))
            if count < 1:
                fail("count", "must be 1 or more")
    elif listed is not None:
        count = listed
    elif not refs:
        fail("count", "is blank and no reference designators are listed to count")
    if count is not None and listed is not None and listed != count and len(errors) == before:
        warnings.append(f"Line {line_no}: {listed} designator{'s' if listed != 1 else ''} listed but count "
                        f"{count}; the count is taken.")
    word = row.get("dielectric", "")
    dielectric, known = dielectric_id(word)
    if len(errors) > before:
        return None
    if not known:
        warnings.append(f"Line {line_no}: dielectric “{word}” is not one the analysis knows; read as other "
                        f"({', '.join(DIELECTRIC_WORDS[d] for d in DIELECTRICS if d != 'other')} are known)."
                        if word else f"Line {line_no}: no dielectric given; read as other.")
    group: dict[str, Any] = {"count": count, "c_nom": c_nom, "c_tol": c_tol or 0.0, "dielectric": dielectric,
                             "v_rated": v_rated, "esr": esr or 0.0}
    if refs:
        group = {"refs": refs, **group}
    return group
