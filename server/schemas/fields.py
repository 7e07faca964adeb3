"""The field types every request shares: ids within the database's integers, texts without control
characters and with a length limit, lists of distinct items.

An id beyond the database's integers (PostgreSQL ``integer``: 2^31 - 1) is refused before it reaches a
query (it would overflow there); a text holding NUL or another control character is refused on its
field (PostgreSQL cannot store NUL in text, and none belongs in a name or a comment); a list naming
one item twice is refused rather than guessed at.

Provides :data:`ID_MAX`, :data:`Id`, :func:`line`, :func:`prose`, :func:`no_repeats`,
:data:`TEXT_PATTERN`, :data:`LINE_PATTERN`, :func:`check_line`.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Annotated, Any, TypeVar

from pydantic import AfterValidator, Field

from server.analysis.bounds import text_problem

__all__ = ["ID_MAX", "Id", "SEED_MAX", "LINE_PATTERN", "TEXT_PATTERN", "line", "prose", "check_line", "check_prose",
           "no_repeats", "MESSAGE_MAX", "COMMENT_MAX"]

ID_MAX = 2**31 - 1  # the database's integer columns (PostgreSQL integer)
SEED_MAX = 2**32 - 1
MESSAGE_MAX = 2000  # a revision message
COMMENT_MAX = 4000  # a comment, reason or description

# The same rule as server.analysis.bounds, written for the OpenAPI description (clients and generators read it).
LINE_PATTERN = "^[^\\x00-\\x1f\\x7f]*$"
TEXT_PATTERN = "^[^\\x00-\\x08\\x0b\\x0c\\x0e-\\x1f\\x7f]*$"

Id = Annotated[int, Field(ge=1, le=ID_MAX)]


def check_line(value: str | None) -> str | None:
    """A one-line text (a name): no control characters, no line breaks."""
    if value is not None and (problem := text_problem(value, one_line=True)) is not None:
        raise ValueError(problem)
    return value


def check_prose(value: str | None) -> str | None:
    """A text of several lines (a comment): line breaks and tabs, no other control characters."""
    if value is not None and (problem := text_problem(value, one_line=False)) is not None:
        raise ValueError(problem)
    return value


def line(max_length: int, min_length: int = 0) -> Any:
    """A one-line text type of at most ``max_length`` characters."""
    return Annotated[str, Field(min_length=min_length, max_length=max_length,
                                json_schema_extra={"pattern": LINE_PATTERN}), AfterValidator(check_line)]


def prose(max_length: int, min_length: int = 0) -> Any:
    """A text of several lines of at most ``max_length`` characters."""
    return Annotated[str, Field(min_length=min_length, max_length=max_length,
                                json_schema_extra={"pattern": TEXT_PATTERN}), AfterValidator(check_prose)]


H = TypeVar("H", bound=Hashable)


def no_repeats(items: Sequence[H]) -> Sequence[H]:
    """A list that names each item once (refused otherwise, naming the first item given twice)."""
    seen: set[H] = set()
    for item in items:
        if item in seen:
            raise ValueError(f"names {item!r} twice: give each once")
        seen.add(item)
    return items
