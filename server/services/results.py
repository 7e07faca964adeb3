"""Stored analysis results: one per (revision sha256, engine version, options).

A result belongs to the hash of the revision it was computed from and to the engine
version that computed it, so a cached result is never shown for a changed document,
and a new engine version computes afresh. Until it has, a revision's result of another
engine version is *outdated*: kept and shown with its engine version, never taken for the
current engine's (:func:`reading`).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from server import analysis
from server.analysis.montecarlo import distributions_for
from server.models import AnalysisResult, Rail, RailRevision
from server.services.access import Actor, scoped_rails
from server.services.errors import NotFound

__all__ = ["NOMINAL_OPTIONS", "engine_version", "normalize_options", "options_key", "find_result", "store_result",
           "latest_result", "latest_outdated_result", "outdated_verdicts", "Reading", "reading", "checks_for_revision", "result_dict",
           "get_result", "ReadingHead", "reading_heads", "stored_result"]

NOMINAL_OPTIONS: dict[str, Any] = {"corners": True, "monte_carlo": 0, "seed": 0, "distribution": "uniform"}


def engine_version() -> str:
    """The running analysis engine's version (read at each call: tests run flows at another one)."""
    return analysis.ENGINE_VERSION


def normalize_options(options: dict[str, Any] | None) -> dict[str, Any]:
    """Fill the defaults; the seed and distribution only matter for a Monte Carlo run."""
    out = {**NOMINAL_OPTIONS, **(options or {})}
    out = {k: out[k] for k in NOMINAL_OPTIONS}
    out["corners"], out["monte_carlo"], out["seed"] = bool(out["corners"]), int(out["monte_carlo"]), int(out["seed"])
    if out["monte_carlo"] == 0:
        out["seed"], out["distribution"] = 0, "uniform"
    else:
        out["distribution"] = _distribution_option(out["distribution"])
    return out


def _distribution_option(distribution: Any) -> str | dict[str, str]:
    """One word when every parameter takes the same distribution, else the full per-parameter dict."""
    kinds = distributions_for(distribution)
    words = set(kinds.values())
    return words.pop() if len(words) == 1 else dict(sorted(kinds.items()))


def options_key(options: dict[str, Any]) -> str:
    text = json.dumps(normalize_options(options), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def find_result(session: Session, *, sha256: str, options: dict[str, Any],
                version: str | None = None) -> AnalysisResult | None:
    return session.scalar(select(AnalysisResult).where(
        AnalysisResult.sha256 == sha256, AnalysisResult.engine_version == (version or engine_version()),
        AnalysisResult.options_key == options_key(options)))


def store_result(session: Session, *, sha256: str, options: dict[str, Any], result: dict[str, Any],
                 duration_s: float, version: str | None = None) -> AnalysisResult:
    """Insert the result (the caller commits); when an equal one exists already, return that one."""
    version = version or engine_version()
    row = AnalysisResult(sha256=sha256, engine_version=version, options_key=options_key(options),
                         options=normalize_options(options), verdict=result.get("verdict", "n/a"), result=result,
                         duration_s=duration_s)
    try:
        with session.begin_nested():
            session.add(row)
    except IntegrityError:
        existing = find_result(session, sha256=sha256, options=options, version=version)
        assert existing is not None
        return existing
    return row


def latest_result(session: Session, *, sha256: str, monte_carlo: bool = False,
                  current_engine_only: bool = True) -> AnalysisResult | None:
    """The newest stored result for a revision: nominal+corners, or the newest Monte Carlo run."""
    stmt = select(AnalysisResult).where(AnalysisResult.sha256 == sha256)
    if current_engine_only:
        stmt = stmt.where(AnalysisResult.engine_version == engine_version())
    if monte_carlo:
        # read the options of the candidates first, and then only the one whole result that is wanted
        candidates = session.execute(stmt.with_only_columns(AnalysisResult.id, AnalysisResult.options).where(
            AnalysisResult.options_key != options_key(NOMINAL_OPTIONS))
            .order_by(AnalysisResult.created_at.desc(), AnalysisResult.id.desc())).all()
        wanted = next((rid for rid, opts in candidates if (opts or {}).get("monte_carlo", 0) > 0), None)
        return None if wanted is None else session.get(AnalysisResult, wanted)
    stmt = stmt.where(AnalysisResult.options_key == options_key(NOMINAL_OPTIONS))
    return session.scalar(stmt.order_by(AnalysisResult.created_at.desc(), AnalysisResult.id.desc()).limit(1))


def latest_outdated_result(session: Session, *, sha256: str) -> AnalysisResult | None:
    """The newest nominal+corners result of a revision computed by another engine version than the current one."""
    return session.scalar(select(AnalysisResult).where(
        AnalysisResult.sha256 == sha256, AnalysisResult.engine_version != engine_version(),
        AnalysisResult.options_key == options_key(NOMINAL_OPTIONS))
        .order_by(AnalysisResult.created_at.desc(), AnalysisResult.id.desc()).limit(1))


def outdated_verdicts(session: Session, shas: list[str]) -> dict[str, dict[str, str]]:
    """Per revision hash: engine version and verdict of its newest nominal+corners result of another engine
    version than the current one (for lists; whether the current engine has one is the caller's look-up)."""
    if not shas:
        return {}
    rows = session.execute(select(AnalysisResult.sha256, AnalysisResult.engine_version, AnalysisResult.verdict)
                           .where(AnalysisResult.sha256.in_(set(shas)), AnalysisResult.engine_version != engine_version(),
                                  AnalysisResult.options_key == options_key(NOMINAL_OPTIONS))
                           .order_by(AnalysisResult.created_at, AnalysisResult.id)).all()
    return {sha: {"engine_version": version, "verdict": verdict} for sha, version, verdict in rows}


@dataclass(frozen=True)
class Reading:
    """A revision's nominal+corners result as it stands: the current engine's, or else an outdated one."""

    row: AnalysisResult
    outdated: bool        # computed by another engine version than the current one
    current_engine: str   # the engine version running now

    @property
    def engine_version(self) -> str:
        return self.row.engine_version

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.row.id, "engine_version": self.row.engine_version, "verdict": self.row.verdict,
                "outdated": self.outdated, "current_engine": self.current_engine,
                "created_at": self.row.created_at.isoformat()}


def reading(session: Session, *, sha256: str) -> Reading | None:
    """The revision's newest result at the current engine; else its newest result of another engine
    version, marked outdated; else None (never analysed)."""
    current = engine_version()
    row = latest_result(session, sha256=sha256)
    if row is not None:
        return Reading(row, False, current)
    old = latest_outdated_result(session, sha256=sha256)
    return None if old is None else Reading(old, True, current)


@dataclass(frozen=True)
class ReadingHead:
    """What :func:`reading` answers for a revision, without the result's body."""

    id: int
    engine_version: str
    verdict: str
    created_at: Any
    outdated: bool


def reading_heads(session: Session, shas: list[str]) -> dict[str, ReadingHead]:
    """:func:`reading` for many revisions at once (the same rule: the newest current-engine
    nominal+corners result, else the newest of another engine, outdated), without reading the
    results' bodies; revisions never analysed are left out."""
    if not shas:
        return {}
    current = engine_version()
    rows = session.execute(select(AnalysisResult.id, AnalysisResult.sha256, AnalysisResult.engine_version,
                                  AnalysisResult.verdict, AnalysisResult.created_at)
                           .where(AnalysisResult.sha256.in_(set(shas)),
                                  AnalysisResult.options_key == options_key(NOMINAL_OPTIONS))
                           .order_by(AnalysisResult.created_at, AnalysisResult.id)).all()
    out: dict[str, ReadingHead] = {}
    for rid, sha, version, verdict, created in rows:   # oldest first: the newest of each kind wins
        head = ReadingHead(rid, version, verdict, created, version != current)
        if not head.outdated or sha not in out or out[sha].outdated:
            out[sha] = head
    return out


def stored_result(session: Session, result_id: int) -> dict[str, Any]:
    """The whole stored result of ``result_id`` (for a caller that has scoped already)."""
    return session.get(AnalysisResult, result_id).result


def checks_for_revision(session: Session, *, sha256: str) -> list[dict[str, Any]] | None:
    """The checks of the revision's nominal+corners result at this engine version; None if not analysed."""
    row = latest_result(session, sha256=sha256)
    return None if row is None else list(row.result.get("checks", []))


def result_dict(row: AnalysisResult, *, rail_id: int | None = None, revision: int | None = None,
                with_result: bool = True) -> dict[str, Any]:
    out = {"id": row.id, "rail_id": rail_id, "revision": revision, "sha256": row.sha256,
           "engine_version": row.engine_version, "options": row.options, "verdict": row.verdict,
           "duration_s": row.duration_s, "created_at": row.created_at.isoformat(),
           "current_engine": row.engine_version == engine_version()}
    if with_result:
        out["result"] = row.result
    return out


def get_result(*, session: Session, actor: Actor, result_id: int) -> dict[str, Any]:
    """A stored result by id, as `result_dict`, with the newest revision of the actor's rails that it
    belongs to; a result of no rail the actor can see is "not found"."""
    row = session.get(AnalysisResult, result_id)
    if row is not None:
        owner = session.execute(scoped_rails(
            select(RailRevision.rail_id, RailRevision.n).join(Rail, Rail.id == RailRevision.rail_id)
            .where(RailRevision.sha256 == row.sha256), actor)
            .order_by(RailRevision.rail_id, RailRevision.n.desc()).limit(1)).first()
        if owner is not None:
            return result_dict(row, rail_id=owner.rail_id, revision=owner.n)
    raise NotFound(f"no result {result_id}")
