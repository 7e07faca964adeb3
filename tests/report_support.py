"""Helpers of the report tests: boards whose rails carry a real stored result of the engine."""

from __future__ import annotations

import copy
import functools
import io
from typing import Any

from pypdf import PdfReader

from server.analysis import analyze_rail
from server.schemas.rail import normalize
from server.schemas.validation import parse_rail_document
from server.services.results import NOMINAL_OPTIONS, store_result
from tests.factories import rail_doc


@functools.lru_cache(maxsize=1)
def _real() -> dict[str, Any]:
    """A real nominal+corners result of the engine for the test rail, with its start-up waveforms."""
    return analyze_rail(normalize(parse_rail_document(rail_doc())))


def store_real_result(session_factory, sha256: str) -> int:
    """Store the real result for a revision, as the worker would; returns its id."""
    with session_factory() as session:
        row = store_result(session, sha256=sha256, options=NOMINAL_OPTIONS, result=copy.deepcopy(_real()),
                           duration_s=0.3)
        session.commit()
        return row.id


def pdf_pages(data: bytes) -> list[str]:
    """The text of each page of a PDF."""
    return [page.extract_text() or "" for page in PdfReader(io.BytesIO(data)).pages]


def pdf_outline(data: bytes) -> list[str]:
    """The titles of the PDF's top-level bookmarks."""
    return [item.title for item in PdfReader(io.BytesIO(data)).outline if not isinstance(item, list)]
