"""Validating documents and turning every problem into a field path and a sentence an engineer reads.

Pydantic (:mod:`server.schemas.rail`) checks shape and units; then the analysis core's reader
(:mod:`server.analysis.document`), the home of every physics rule, reads the normalised
document, and its errors are reported on their fields. Each error keeps the API's shape
(field path + message) and has a title in words (``text``: "Supply minimum (supply.v_min):
must be above 0 V").

Provides :class:`FieldError`, :class:`DocumentInvalid`, :func:`field_errors`,
:func:`parse_rail_document`, :func:`parse_fet` and :func:`parse_model`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from server.analysis.document import read_fet, read_rail
from server.analysis.errors import DocumentError
from server.analysis.words import FIELD_TITLES, field_title, generic_path
from server.schemas.rail import Fet, RailDocument, normalize, part_document
from server.units import UnitError, parse_quantity

__all__ = ["FieldError", "DocumentInvalid", "field_errors", "parse_rail_document", "parse_fet", "parse_model"]

M = TypeVar("M", bound=BaseModel)


@dataclass(frozen=True)
class FieldError:
    """One problem: ``field`` (the full path, prefix included), ``message`` and the field's ``title``."""

    field: str
    message: str
    title: str = ""

    def as_dict(self) -> dict[str, str]:
        """The API's error detail: ``{"field": path, "message": sentence}``."""
        return {"field": self.field, "message": self.message}

    @property
    def text(self) -> str:
        """The field in words first, then its path: ``"Supply minimum (supply.v_min): must be above 0 V"``."""
        path = self.field or "document"
        if not self.title or self.title == path:
            return f"{path}: {self.message}"
        return f"{self.title} ({path}): {self.message}"


class DocumentInvalid(ValueError):
    """A document that fails validation; ``errors`` names each field and the reason."""

    def __init__(self, errors: list[FieldError], what: str = "rail document") -> None:
        self.errors = errors
        self.what = what
        summary = "; ".join(e.text for e in errors[:5])
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
    """Pydantic's shape errors in words (bounds and physics are the analysis reader's)."""
    kind, ctx = err["type"], err.get("ctx") or {}
    value = err.get("input")
    got = f" (got {value!r})" if not isinstance(value, (dict, list)) and value is not None else ""
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return "is not a known field here (check the spelling)"
    if kind == "literal_error":
        return f"must be one of {ctx.get('expected')}{got}"
    if kind in ("float_type", "float_parsing"):
        return f"expected a number{got}"
    if kind == "string_type":
        return f"expected text{got}"
    if kind in ("list_type", "tuple_type"):
        return "expected a list"
    if kind in ("too_short", "too_long"):
        loc = tuple(err["loc"])
        if _is_point(loc):
            return "must be a [V_DS, I_D] pair"
        return "must be a [t, Zth] pair" if _is_zth_point(loc) else err["msg"]
    if kind in ("model_type", "dict_type", "model_attributes_type"):
        return "expected an object with named fields"
    if kind == "value_error":
        return str(ctx.get("error", err["msg"]))
    return err["msg"]


def _is_point(loc: tuple[Any, ...]) -> bool:
    return len(loc) >= 2 and loc[-2] == "points" and isinstance(loc[-1], int)


def _is_zth_point(loc: tuple[Any, ...]) -> bool:
    return len(loc) >= 2 and loc[-2] == "zth_points" and isinstance(loc[-1], int)


def field_errors(exc: ValidationError, prefix: str = "", title_prefix: str = "") -> list[FieldError]:
    """One :class:`FieldError` per pydantic error, with a dotted path like ``load.c_nom``.

    An error inside a ``[V_DS, I_D]`` pair is reported on the point, naming the value.
    ``title_prefix`` turns the path into a rail-document path for its title ("fet" for a part).
    """
    out: list[FieldError] = []
    for err in exc.errors(include_url=False):
        loc = tuple(err["loc"])
        message = _sentence(err)
        if len(loc) >= 3 and isinstance(loc[-1], int) and _is_point(loc[:-1]):
            message = f"{'V_DS' if loc[-1] == 0 else 'I_D'}: {message}"
            loc = loc[:-1]
        elif len(loc) >= 3 and isinstance(loc[-1], int) and _is_zth_point(loc[:-1]):
            message = f"{'t' if loc[-1] == 0 else 'Zth'}: {message}"
            loc = loc[:-1]
        error = _error(_path(loc), message, prefix, title_prefix)
        same = next((k for k, e in enumerate(out) if e.field == error.field), None)
        if same is None:
            out.append(error)
        else:  # both values of one [V_DS, I_D] point: one error for the point
            out[same] = FieldError(error.field, f"{out[same].message}; {error.message}", error.title)
    return out


def _join(*parts: str) -> str:
    return ".".join(p for p in parts if p)


def _title(path: str) -> str:
    """The title of a rail-document path; "" for a path that has none (an unknown key)."""
    title = field_title(path)
    return "" if title == path else title


def _error(path: str, message: str, prefix: str, title_prefix: str = "") -> FieldError:
    """A problem at ``path`` (relative to the document checked), placed under ``prefix``."""
    return FieldError(_join(prefix, path) or "document", message, _title(_join(title_prefix, path) or "document"))


def parse_model(model: type[M], data: Any, what: str, prefix: str = "", title_prefix: str = "") -> M:
    """Check ``data`` against a pydantic model (shape and units) only."""
    if not isinstance(data, dict):
        raise DocumentInvalid([_error("", f"expected a JSON object, got {type(data).__name__}", prefix)], what)
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise DocumentInvalid(field_errors(exc, prefix, title_prefix), what) from None


def _reader_errors(exc: DocumentError, prefix: str, strip: str = "") -> list[FieldError]:
    """The analysis reader's problems as field errors (``strip``: a leading path to drop)."""
    out = []
    for e in exc.errors:
        path = e.field.removeprefix(strip).lstrip(".") if strip else e.field
        out.append(FieldError(_join(prefix, path) or "document", e.reason, _title(e.field)))
    return out


def _si_numbers(value: Any, path: str) -> Any:
    """A copy of a document with every number written with units that parses turned into SI."""
    generic = generic_path(path)
    if isinstance(value, dict):
        return {k: _si_numbers(v, _join(path, str(k))) for k, v in value.items()}
    if isinstance(value, list):
        if generic == "fet.soa.curves[].points[]" and len(value) == 2:
            return [_si_number(value[0], "V"), _si_number(value[1], "A")]
        if generic == "fet.zth_points[]" and len(value) == 2:
            return [_si_number(value[0], "s"), _si_number(value[1], "K/W")]
        if generic == "switch.foldback[]" and len(value) == 2:
            return [_si_number(value[0], "V"), _si_number(value[1], "A")]
        if generic == "fet.rds_on_curve[]" and len(value) == 2:
            return [_si_number(value[0], "degC"), _si_number(value[1], "ratio")]
        if generic == "load.bank[].dc_bias[]" and len(value) == 2:
            return [_si_number(value[0], "V"), _si_number(value[1], "fraction")]
        if generic == "load.bank[].derating" and len(value) == 2:
            return [_si_number(value[0], "fraction"), _si_number(value[1], "fraction")]
        return [_si_numbers(v, f"{path}[{k}]") for k, v in enumerate(value)]
    words = FIELD_TITLES.get(generic)
    return _si_number(value, words.kind) if words is not None and words.kind else value


def _si_number(value: Any, kind: str) -> Any:
    if not isinstance(value, str):
        return value
    try:
        return parse_quantity(value, kind)
    except UnitError:
        return value  # reported by the schema


def _related(a: str, b: str) -> bool:
    """One path is the other or lies inside it."""
    return a == b or any(x.startswith(y + ".") or x.startswith(y + "[") for x, y in ((a, b), (b, a)))


def _validate(model: type[M], data: Any, what: str, prefix: str, read: Callable[[Any], Any], dump: Callable[[M], Any],
              root: str = "") -> M:
    """The schema (shape, units), then the analysis reader (every physics rule).

    When the shape or a unit is wrong, the reader still reads what did parse, so that every
    problem is reported at once; its problems on fields the schema already named are left out.
    """
    if not isinstance(data, dict):
        raise DocumentInvalid([_error("", f"expected a JSON object, got {type(data).__name__}", prefix)], what)
    try:
        value = model.model_validate(data)
    except ValidationError as exc:
        errors = field_errors(exc, prefix, root)
        try:
            read(_si_numbers(data, root))
        except DocumentError as more:
            errors += [e for e in _reader_errors(more, prefix, root)
                       if not any(_related(e.field, known.field) for known in errors)]
        raise DocumentInvalid(errors, what) from None
    try:
        read(dump(value))
    except DocumentError as exc:
        raise DocumentInvalid(_reader_errors(exc, prefix, root), what) from None
    return value


def parse_rail_document(data: Any, prefix: str = "") -> RailDocument:
    """Validate a rail document; raise :class:`DocumentInvalid` naming every bad field.

    The schema checks shape and units; the analysis core's reader checks every physics
    rule, so that no document is stored that the analysis would refuse, and a document is
    refused for the same reason and on the same field by the web and by the analysis.
    """
    return _validate(RailDocument, data, "rail document", prefix, read_rail, normalize)


def parse_fet(data: Any, prefix: str = "") -> Fet:
    """Validate a FET (part) document: the schema, then the analysis core's own reading of it."""
    return _validate(Fet, data, "part", prefix, read_fet, part_document, root="fet")
