"""Turning pydantic's validation errors into field paths and sentences an engineer reads.

Provides :class:`FieldError`, :class:`DocumentInvalid`, :func:`field_errors`,
:func:`parse_rail_document` and :func:`parse_fet`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from server.schemas.rail import FIELD_MARK, Fet, RailDocument

__all__ = ["FieldError", "DocumentInvalid", "field_errors", "parse_rail_document", "parse_fet", "parse_model"]

M = TypeVar("M", bound=BaseModel)


@dataclass(frozen=True)
class FieldError:
    field: str
    message: str

    def as_dict(self) -> dict[str, str]:
        return asdict(self)


class DocumentInvalid(ValueError):
    """A document that fails validation; ``errors`` names each field and the reason."""

    def __init__(self, errors: list[FieldError], what: str = "rail document") -> None:
        self.errors = errors
        self.what = what
        summary = "; ".join(f"{e.field or '(document)'}: {e.message}" for e in errors[:5])
        super().__init__(f"invalid {what}: {summary}")


def _path(loc: tuple[Any, ...], prefix: str = "") -> str:
    text = prefix
    for part in loc:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += ("." if text else "") + str(part)
    return text


def _sentence(err: dict[str, Any]) -> str:
    kind, ctx, value = err["type"], err.get("ctx") or {}, err.get("input")
    got = f" (got {value!r})" if not isinstance(value, (dict, list)) and value is not None else ""
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return "is not a known field here (check the spelling)"
    if kind == "greater_than":
        return (f"must be greater than zero{got}" if ctx["gt"] == 0 else f"must be greater than {ctx['gt']}{got}")
    if kind == "greater_than_equal":
        return (f"must not be negative{got}" if ctx["ge"] == 0 else f"must be at least {ctx['ge']}{got}")
    if kind == "less_than":
        if ctx.get("lt") == 1:
            return f"a tolerance is a fraction below 1, like 0.2 or '20%'{got}"
        return f"must be less than {ctx['lt']}{got}"
    if kind == "less_than_equal":
        return f"must be at most {ctx['le']}{got}"
    if kind == "literal_error":
        return f"must be one of {ctx.get('expected')}{got}"
    if kind in ("float_type", "float_parsing"):
        return f"expected a number{got}"
    if kind in ("string_type",):
        return f"expected text{got}"
    if kind == "string_too_short":
        return "must not be empty"
    if kind == "too_short":
        return f"needs at least {ctx.get('min_length')} entries"
    if kind in ("list_type", "tuple_type"):
        return "expected a list"
    if kind in ("model_type", "dict_type", "model_attributes_type"):
        return "expected an object with named fields"
    if kind == "value_error":
        return str(ctx.get("error", err["msg"]))
    return err["msg"]


def field_errors(exc: ValidationError, prefix: str = "") -> list[FieldError]:
    """One :class:`FieldError` per pydantic error, with a dotted path like ``load.c_nom``."""
    out: list[FieldError] = []
    for err in exc.errors(include_url=False):
        loc = tuple(err["loc"])
        message = _sentence(err)
        if message.startswith(FIELD_MARK):
            field, message = message[1:].split(FIELD_MARK, 1)
            sub = tuple(int(p[1:-1]) if p.startswith("[") else p for p in _split_field(field))
            loc = loc + sub
        # Tuples of (V_ds, I_d) report the element index; name it.
        if len(loc) >= 2 and loc[-2:] and isinstance(loc[-1], int) and "points" in loc[:-1] and \
                isinstance(loc[-2], int) and loc[-1] in (0, 1):
            message = f"{'V_ds' if loc[-1] == 0 else 'I_d'}: {message}"
        out.append(FieldError(_path(loc, prefix), message))
    return out


def _split_field(field: str) -> list[str]:
    parts: list[str] = []
    for piece in field.split("."):
        while "[" in piece:
            head, rest = piece.split("[", 1)
            if head:
                parts.append(head)
            index, piece = rest.split("]", 1)
            parts.append(f"[{index}]")
        if piece:
            parts.append(piece)
    return parts


def parse_model(model: type[M], data: Any, what: str, prefix: str = "") -> M:
    if not isinstance(data, dict):
        raise DocumentInvalid([FieldError(prefix, f"expected a JSON object, got {type(data).__name__}")], what)
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise DocumentInvalid(field_errors(exc, prefix), what) from None


def parse_rail_document(data: Any, prefix: str = "") -> RailDocument:
    """Validate a rail document; raise :class:`DocumentInvalid` naming every bad field.

    The schema's own checks come first (their messages name units and values); then the
    analysis core reads the normalised document with its own validation, so that no
    document is stored that the analysis would refuse.
    """
    from server.analysis import DocumentError
    from server.analysis.document import read_rail
    from server.schemas.rail import normalize

    document = parse_model(RailDocument, data, "rail document", prefix)
    try:
        read_rail(normalize(document))
    except DocumentError as exc:
        field = f"{prefix}.{exc.field}" if prefix else exc.field
        raise DocumentInvalid([FieldError(field, exc.reason)], "rail document") from None
    return document


def parse_fet(data: Any, prefix: str = "") -> Fet:
    """Validate a FET (part) document: the schema, then the analysis core's own reading of it."""
    from server.analysis import DocumentError
    from server.analysis.document import read_fet

    fet = parse_model(Fet, data, "part", prefix)
    try:
        read_fet(fet.model_dump(mode="json"))
    except DocumentError as exc:
        field = exc.field.removeprefix("fet").lstrip(".")
        field = ".".join(p for p in (prefix, field) if p)
        raise DocumentInvalid([FieldError(field, exc.reason)], "part") from None
    return fet
