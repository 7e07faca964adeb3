"""The parts of stored results that the overview pages read again and again, kept in the process.

A stored result never changes: it is one row per (revision hash, engine version, options),
written once. So the few parts of it a board table or a supply budget needs (the checks and
the start-up current waveform) can be read from the database once and kept, keyed by the
row's identity (database, id, hash, creation time), in a bounded least-recently-used store.
A database answers only for rows it has not answered for before.

Provides :class:`ResultParts`, :func:`result_parts`, :func:`clear`, :data:`MAX_ENTRIES`.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from dataclasses import dataclass
from functools import cached_property
from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.models import AnalysisResult

__all__ = ["ResultParts", "ResultKey", "result_parts", "clear", "MAX_ENTRIES"]

MAX_ENTRIES = 20_000
_lock = threading.Lock()
_store: OrderedDict[tuple, "ResultParts"] = OrderedDict()


@dataclass(frozen=True)
class ResultParts:
    checks: list[dict[str, Any]]
    t: list[float] | None      # start-up waveform time, s
    i: list[float] | None      # start-up current, A

    @cached_property
    def problems(self) -> list[dict[str, Any]]:
        """The failing and marginal rows of ``checks``, picked once per stored result (the risk view's)."""
        return [c for c in self.checks if c.get("verdict") in ("fail", "marginal")]


@dataclass(frozen=True)
class ResultKey:
    """What identifies a stored result row for good."""

    id: int
    sha256: str
    created_at: datetime


def _key(database: str, k: ResultKey) -> tuple:
    return (database, k.id, k.sha256, k.created_at.isoformat())


def result_parts(session: Session, keys: list[ResultKey]) -> dict[int, ResultParts]:
    """The checks and start-up current of each result, by result id (read from the database once)."""
    out: dict[int, ResultParts] = {}
    missing: list[ResultKey] = []
    database = str(session.get_bind().url)   # once per call: rendering the URL is not free
    with _lock:
        for k in keys:
            key = _key(database, k)
            hit = _store.get(key)
            if hit is None:
                missing.append(k)
            else:
                _store.move_to_end(key)
                out[k.id] = hit
    if missing:
        stmt = select(AnalysisResult.id, AnalysisResult.result["checks"],
                      AnalysisResult.result[("startup", "waveforms", "t")],
                      AnalysisResult.result[("startup", "waveforms", "i")]).where(
            AnalysisResult.id.in_([k.id for k in missing]))
        fetched = {rid: ResultParts(list(checks or []), t, i) for rid, checks, t, i in session.execute(stmt)}
        with _lock:
            for k in missing:
                if k.id in fetched:
                    out[k.id] = fetched[k.id]
                    _store[_key(database, k)] = fetched[k.id]
            while len(_store) > MAX_ENTRIES:
                _store.popitem(last=False)
    return out


def clear() -> None:
    with _lock:
        _store.clear()
