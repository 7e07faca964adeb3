"""The rail file formats, read and written without a database.

A rail file holds either

- one rail document (schema ``railsign.rail/1``, DESIGN.md section 3), or
- a bundle (schema ``railsign.bundle/3``): a product, its boards, and per rail an entry::

      {"document": {...the rail document...},
       "part": {"name": "...", "revision": 3} | null,
       "exported_from": {"revision": 7, "sha256": "..."} | null}

  ``part`` names the library part (by name and revision number) whose FET the document
  carries; ``exported_from`` is the rail revision the document was exported from.

  A board may carry its power-up sequence: ``"sequence": {...}``, the head revision's
  document (``railsign.sequence/1``, :mod:`server.analysis.sequence`; its rails named by
  ``ref`` are the board's rails in the same bundle). Optional; a board without one has no key.

Bundles of the first version (``railsign.bundle/1``) listed the bare documents of each board's
rails; they are still read, with no part and no revision. Bundles of the second version
(``railsign.bundle/2``) are the third without sequences; they are still read.

Provides :class:`RailFile`, :class:`RailEntry`, :class:`SequenceEntry`, :class:`BoardInfo`,
:class:`PartLink`, :class:`ExportedFrom`, :func:`read_rail_file` (the entries of parsed JSON),
:func:`load_json` (a file's JSON, errors in words), :func:`bundle_dict` and
:func:`rail_entry_dict` (writing).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from server.schemas.fields import COMMENT_MAX, ID_MAX, line, prose
from server.schemas.validation import DocumentInvalid, FieldError, parse_model

__all__ = ["BUNDLE_SCHEMA", "BUNDLE_SCHEMA_V1", "BUNDLE_SCHEMA_V2", "BoardInfo", "PartLink", "ExportedFrom",
           "RailEntry", "SequenceEntry", "RailFile", "read_rail_file", "load_json", "bundle_dict", "rail_entry_dict"]

# Version 3 adds one optional key, a board's "sequence". It is a new version and not that key added
# to version 2 because the reader of version 2 refuses any key it does not know on a board
# (extra="forbid" below): a version-2 reader given a bundle with a sequence would refuse it as a bad
# board ("boards[0].sequence: ... not permitted"), while a version-3 bundle is refused by its schema,
# which says what is wrong. Versions 1 and 2 are still read (neither carries a sequence).
BUNDLE_SCHEMA = "railsign.bundle/3"
BUNDLE_SCHEMA_V2 = "railsign.bundle/2"
BUNDLE_SCHEMA_V1 = "railsign.bundle/1"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class PartLink(_Strict):
    """A library part by name and revision number: how a rail names its part across installations."""

    name: line(200, min_length=1)
    revision: int = Field(ge=1, le=ID_MAX)


class ExportedFrom(_Strict):
    """The rail revision a document was exported from: its number there and its sha256."""

    revision: int = Field(ge=1, le=ID_MAX)
    sha256: str = Field(pattern=r"^[0-9a-f]{64}$")


class _EntryModel(_Strict):
    document: dict[str, Any]
    part: PartLink | None = None
    exported_from: ExportedFrom | None = None


class _BoardModel(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: line(200, min_length=1)
    revision: line(20, min_length=1) = "A"
    description: prose(COMMENT_MAX) = ""
    rails: list[Any] = Field(default_factory=list)
    sequence: dict[str, Any] | None = None  # version 3 on: the board's power-up sequence document


class _ProductModel(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: line(200, min_length=1)
    description: prose(COMMENT_MAX) = ""


class _BundleModel(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)
    schema_: Literal["railsign.bundle/1", "railsign.bundle/2", "railsign.bundle/3"] = Field(alias="schema")
    product: _ProductModel
    boards: list[_BoardModel] = Field(default_factory=list)


@dataclass(frozen=True)
class BoardInfo:
    name: str
    revision: str
    description: str = ""


@dataclass(frozen=True)
class RailEntry:
    """One rail of a file: its document as written (not yet validated) and what travels with it."""

    location: str  # JSON path of the document in its file: "" for a file that is one document
    document: Any
    board: BoardInfo | None = None
    part: PartLink | None = None
    exported_from: ExportedFrom | None = None

    @property
    def name(self) -> str | None:
        name = self.document.get("name") if isinstance(self.document, dict) else None
        return name if isinstance(name, str) else None


@dataclass(frozen=True)
class SequenceEntry:
    """A board's power-up sequence in a bundle: its document as written (not yet validated)."""

    location: str  # JSON path of the document in its file: "boards[0].sequence"
    board: BoardInfo
    document: dict[str, Any]


@dataclass(frozen=True)
class RailFile:
    """A parsed rail file: a bundle (with its product) or one rail document."""

    rails: list[RailEntry]
    product: dict[str, str] | None = None
    schema: str | None = None
    boards: list[BoardInfo] = field(default_factory=list)
    sequences: list[SequenceEntry] = field(default_factory=list)

    @property
    def is_bundle(self) -> bool:
        return self.product is not None


def _is_bundle(data: Any) -> bool:
    return isinstance(data, dict) and isinstance(data.get("schema"), str) and \
        data["schema"].startswith("railsign.bundle/")


def read_rail_file(data: Any) -> RailFile:
    """The rails of a parsed rail file (a bundle or one document), documents not yet validated.

    Raises
    ------
    DocumentInvalid
        The bundle's own structure is wrong (naming the field): product, boards, entries.
        A bad rail document is not detected here; validate each entry's document.
    """
    if not _is_bundle(data):
        return RailFile(rails=[RailEntry(location="", document=data)])
    bundle = parse_model(_BundleModel, data, "bundle")
    v1 = bundle.schema_ == BUNDLE_SCHEMA_V1
    entries: list[RailEntry] = []
    boards: list[BoardInfo] = []
    sequences: list[SequenceEntry] = []
    for b, board in enumerate(bundle.boards):
        info = BoardInfo(name=board.name, revision=board.revision, description=board.description)
        boards.append(info)
        if board.sequence is not None:
            if bundle.schema_ in (BUNDLE_SCHEMA_V1, BUNDLE_SCHEMA_V2):
                raise DocumentInvalid([FieldError(f"boards[{b}].sequence", f"is read from {BUNDLE_SCHEMA} on; this "
                                                  f"bundle says {bundle.schema_}")], "bundle")
            sequences.append(SequenceEntry(location=f"boards[{b}].sequence", board=info, document=board.sequence))
        for r, raw in enumerate(board.rails):
            where = f"boards[{b}].rails[{r}]"
            if v1:
                entries.append(RailEntry(location=where, document=raw, board=info))
                continue
            entry = parse_model(_EntryModel, raw, "bundle", where)
            entries.append(RailEntry(location=f"{where}.document", document=entry.document, board=info,
                                     part=entry.part, exported_from=entry.exported_from))
    return RailFile(rails=entries, product=bundle.product.model_dump(), schema=bundle.schema_, boards=boards,
                    sequences=sequences)


def load_json(path: str | Path) -> Any:
    """A file's JSON. Raises FileNotFoundError, or DocumentInvalid saying why it is not JSON."""
    file = Path(path)
    if not file.is_file():
        raise FileNotFoundError(f"no such file: {path}")
    try:
        return json.loads(file.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise DocumentInvalid([FieldError("", f"is not UTF-8 text: {exc.reason}")], "rail file") from None
    except json.JSONDecodeError as exc:
        raise DocumentInvalid([FieldError("", f"is not valid JSON: {exc}")], "rail file") from None


def rail_entry_dict(document: dict[str, Any], *, part: PartLink | None, revision: int, sha256: str) -> dict:
    """One bundle entry: the document, its library part (or None) and the revision it comes from."""
    return {"document": document, "part": part.model_dump() if part else None,
            "exported_from": ExportedFrom(revision=revision, sha256=sha256).model_dump()}


def bundle_dict(*, product: dict[str, str], boards: list[dict[str, Any]]) -> dict[str, Any]:
    """A bundle: ``boards`` are {name, revision, description, rails: [entry, ...]} and, for a board that has
    one, ``sequence``: its power-up sequence document."""
    return {"schema": BUNDLE_SCHEMA, "product": product, "boards": boards}
