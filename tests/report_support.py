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
from tests.signoff_support import allow_fail_waivers


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


def _ok(r, status: int = 200):
    assert r.status_code == status, r.text
    return r.json()


def freeze(client, people, rail: dict, *, waive: bool = True) -> dict:
    """Take a rail with its real stored result through the default workflow to "frozen for build":
    submitted, its failing and marginal checks waived (by the manager, whom the team's rules name for
    failing checks), approved by a reviewer, accepted, frozen. Returns the last move."""
    rail_id, sha = rail["id"], rail["head"]["sha256"]
    store_real_result(client.app.state.sessionmaker, sha)
    move = lambda name, who: client.post(f"/api/v1/rails/{rail_id}/transitions",  # noqa: E731
                                         json={"transition": name, "sha256": sha}, headers=people.headers(who))
    _ok(move("submit for review", "designer"))
    status = _ok(client.get(f"/api/v1/rails/{rail_id}/signoff", headers=people.headers("reviewer")))
    if waive:  # under the two-person rule: the manager (named by the team for failing checks) waives, a reviewer approves
        allow_fail_waivers(client.app.state.sessionmaker, people.team_ids["alpha"], role="manager", two_person=True)
        for check_id in status["checks"]["open"]:
            _ok(client.post(f"/api/v1/rails/{rail_id}/waivers", headers=people.headers("manager"),
                            json={"sha256": sha, "check_id": check_id,
                                  "reason": f"{check_id}: the bench test of the prototype covers it"}), 201)
    _ok(client.post(f"/api/v1/rails/{rail_id}/approvals", headers=people.headers("reviewer"),
                    json={"sha256": sha, "comment": "checked the start-up and fault margins"}), 201)
    _ok(move("accept margins", "reviewer"))
    return _ok(move("freeze for build", "manager"))
