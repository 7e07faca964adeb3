"""Errors raised by the analysis.

Provides
--------
DocumentError
    Bad input: a field of the rail document is missing, malformed or inconsistent.
    ``.field`` holds the dotted path of the field (``"switch.i_limit"``), ``.title`` its
    words for people, ``.reason`` what is wrong and ``.errors`` every problem found in the
    document (this one first).
AnalysisError
    A well-formed rail that the analysis cannot solve (for example a transient that
    does not settle within the bounded step count). The message says so; the analysis
    never returns a number it could not establish.
"""

from __future__ import annotations

from .words import field_title

__all__ = ["DocumentError", "AnalysisError"]


class DocumentError(ValueError):
    """A field of the rail document is missing, malformed or inconsistent.

    Parameters
    ----------
    field : str
        Dotted path of the offending field, e.g. ``"fet.soa.curves[1].points[0]"``.
    reason : str
        What is wrong, in words a designer understands.
    errors : list of DocumentError, optional
        Every problem of the document when there are several (this one first).
    title : str, optional
        The field's words when the path is not a rail-document path (a board sequence's
        fields name their own titles); default: the rail document's title of ``field``.

    The text names the field in words first, then by path:
    ``"Supply minimum (supply.v_min): must be above 0 V"``.
    """

    def __init__(self, field: str, reason: str, errors: list[DocumentError] | None = None,
                 title: str | None = None) -> None:
        self.field = field
        self.reason = reason
        self.title = field_title(field) if title is None else title
        self.errors: list[DocumentError] = list(errors) if errors else [self]
        super().__init__("; ".join(e.text for e in self.errors))

    @property
    def text(self) -> str:
        """This problem alone: ``"Title (path): reason"`` (``"path: reason"`` for a path without a title)."""
        if self.title == self.field:
            return f"{self.field}: {self.reason}"
        return f"{self.title} ({self.field}): {self.reason}"


class AnalysisError(Exception):
    """The analysis cannot establish a result for a well-formed rail."""
