"""Helpers of the sign-off tests: a product with a rail, stored analysis results, logging in with a form."""

from __future__ import annotations

import copy
import functools
import re
from typing import Any

from server.analysis import analyze_rail
from server.schemas.rail import normalize
from server.schemas.validation import parse_rail_document

from server.services import governance
from server.services.access import Actor
from server.services.results import NOMINAL_OPTIONS, store_result
from tests.factories import rail_doc


def check(check_id: str, verdict: str, value: float = 1.0, limit: float = 1.5, unit: str = "ratio",
          corner: str = "supply 12.6 V (max), load C +20 %") -> dict[str, Any]:
    """A check record as the analysis stores it (invented values; at-least sense)."""
    applies = verdict != "n/a"
    return {"id": check_id, "title": check_id.replace("_", " "), "verdict": verdict,
            "value": value if applies else None, "limit": limit if applies else None,
            "edge": 1.0 if applies else None, "unit": unit, "direction": ">=",
            "margin": value / limit if applies and limit else None,
            "margin_edge": 1.0 / limit if applies and limit else None, "basis": "common practice",
            "nominal": {"value": value if applies else None, "verdict": verdict,
                        "margin": value / limit if applies and limit else None},
            "corner": corner if applies else None, "found_by": "corner" if applies else None,
            "point": {"v_s": 12.6, "c": 1e-3, "i_limit": None, "t_fault": None} if applies else None,
            "detail": f"{check_id} at its worst case"}


PASSING = [check("startup_soa", "pass", 2.1), check("fault_margin", "pass", 1.9), check("vds_derating", "pass", 0.6,
                                                                                       0.8, "fraction")]
FAILING = [check("startup_soa", "fail", 0.9), check("fault_margin", "marginal", 1.2),
           check("vds_derating", "pass", 0.6, 0.8, "fraction"), check("retry_tj", "n/a", 0.0, 0.0, "degC")]


@functools.lru_cache(maxsize=1)
def _analysed() -> dict[str, Any]:
    """A real result of the engine (a test rail, nominal point only), whose checks the tests replace."""
    doc = normalize(parse_rail_document(rail_doc()))
    return analyze_rail(doc, corners=False, headroom=False, waveforms=False)


def result_of(checks: list[dict[str, Any]]) -> dict[str, Any]:
    """A result as the analysis returns it, with the given checks and their verdict."""
    worst = "fail" if any(c["verdict"] == "fail" for c in checks) else \
        "marginal" if any(c["verdict"] == "marginal" for c in checks) else "pass"
    return {**copy.deepcopy(_analysed()), "verdict": worst, "checks": checks}


def store_checks(session_factory, sha256: str, checks: list[dict[str, Any]], version: str | None = None) -> int:
    """Store a nominal+corners result for a revision, as the jobs worker will (``version``: of another
    engine than the current one); returns the result's id."""
    with session_factory() as session:
        row = store_result(session, sha256=sha256, options=NOMINAL_OPTIONS, result=result_of(checks),
                           duration_s=0.05, version=version)
        session.commit()
        return row.id


def make_board(client, people, *, name: str = "Test gateway", designer: str = "designer") -> dict:
    h = people.headers(designer)
    product = client.post("/api/v1/products", json={"name": name}, headers=h)
    assert product.status_code == 201, product.text
    board = client.post("/api/v1/boards", json={"product_id": product.json()["id"], "name": "Main", "revision": "B"},
                        headers=h)
    assert board.status_code == 201, board.text
    return board.json()


def make_rail(client, people, board: dict, *, name: str = "VOUT_12V", designer: str = "designer") -> dict:
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(name=name)},
                    headers=people.headers(designer))
    assert r.status_code == 201, r.text
    return r.json()


def edit_rail(client, people, rail: dict, c_nom: str, *, designer: str = "designer") -> dict:
    current = client.get(f"/api/v1/rails/{rail['id']}", headers=people.headers(designer)).json()
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": rail_doc(name=current["name"],
                                                                             load={"c_nom": c_nom}),
                                                        "base_revision": current["head"]["n"]},
                   headers=people.headers(designer))
    assert r.status_code == 200, r.text
    return r.json()


def csrf_from(html: str) -> str:
    found = re.search(r'name="csrf_token" value="([^"]+)"', html)
    assert found, "the page has no CSRF field"
    return found.group(1)


def log_in(client, username: str, password: str, next_path: str = "/account"):
    """Open the login page, then send its form as a browser would."""
    page = client.get("/login", params={"next": next_path})
    assert page.status_code == 200, page.text
    return client.post("/login", data={"username": username, "password": password, "next": next_path,
                                       "csrf_token": csrf_from(page.text)}, follow_redirects=False)


def allow_fail_waivers(session_factory, team_id: int, *, role: str = "reviewer", two_person: bool = False) -> None:
    """Team rules under which a reviewer may waive a failing check and then approve (not the defaults:
    the tests of other matters waive a failing check of FAILING and approve with one reviewer)."""
    with session_factory() as session:
        governance.set_rules(session=session, actor=Actor.system("test-setup"), team_id=team_id,
                             two_person=two_person, fail_waiver_role=role)
