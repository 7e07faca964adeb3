"""Errors raised by the analysis.

Provides
--------
DocumentError
    Bad input: a field of the rail document is missing, malformed or inconsistent.
    ``.field`` holds the dotted path of the field (``"switch.i_limit"``).
AnalysisError
    A well-formed rail that the analysis cannot solve (for example a transient that
    does not settle within the bounded step count). The message says so; the analysis
    never returns a number it could not establish.
"""

from __future__ import annotations

__all__ = ["DocumentError", "AnalysisError"]


class DocumentError(ValueError):
    """A field of the rail document is missing, malformed or inconsistent.

    Parameters
    ----------
    field : str
        Dotted path of the offending field, e.g. ``"fet.soa.curves[1].points[0]"``.
    reason : str
        What is wrong, in words a designer understands.
    """

    def __init__(self, field: str, reason: str) -> None:
        self.field = field
        self.reason = reason
        super().__init__(f"{field}: {reason}")


class AnalysisError(Exception):
    """The analysis cannot establish a result for a well-formed rail."""
