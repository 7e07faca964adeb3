"""Every API operation answers what its OpenAPI description declares, checked strictly.

A scenario drives every operation of the API through a product's life (catalog, parts, rails
and their revisions, analyses and results, sign-off, workflows, accounts, audit, risks,
deletion), and a sweep asks every operation with ids that name nothing. Each answer is
validated again, from its JSON text, against the model its operation declares for that
status (strict types, unknown keys forbidden), and must come back from that model unchanged:
a key a service renames or adds fails here. Error answers must use a status the operation
declares, in the one error shape.
"""

from __future__ import annotations

from typing import Any

import fastapi.routing
import pytest
from fastapi.routing import APIRoute
from sqlalchemy import select

from server.models import RailRevision
from server.schemas.responses import ErrorResponse
from server.services import catalog
from tests.factories import fet_doc, rail_doc
from tests.job_support import run_queued_jobs
from tests.pages.helpers import analyse_now
from tests.report_support import freeze
from tests.signoff_support import allow_fail_waivers, FAILING, store_checks

NOBODY = 999999


@pytest.fixture(autouse=True)
def _rules_these_tests_were_written_under(session_factory, people):
    """A reviewer may waive a failing check and approve alone here: the waiver rules are tests/test_governance.py's."""
    allow_fail_waivers(session_factory, people.team_ids["alpha"])


def api_operations(app) -> dict[tuple[str, str], Any]:
    """(method, path template) -> route (its effective form inside the app), for every operation in the
    OpenAPI description."""
    iterate = getattr(fastapi.routing, "iter_route_contexts", None)
    out = {}
    for route in (iterate(app.routes) if iterate else app.routes):
        if isinstance(getattr(route, "original_route", route), APIRoute) and route.include_in_schema:
            for method in route.methods:
                out[(method, route.path_format)] = route
    return out


def declared_model(route, status: int):
    """The model an operation declares for ``status`` (None: a declared empty or non-JSON body)."""
    if status == (route.status_code or 200):
        return route.response_model
    declared = route.responses.get(status) or route.responses.get(str(status))
    assert declared is not None, f"{sorted(route.methods)} {route.path_format} answered {status}, not declared"
    return declared.get("model")


class Contract:
    """Calls the API and checks each answer against the model its operation declares."""

    def __init__(self, client, people) -> None:
        self.client = client
        self.people = people
        self.routes = api_operations(client.app)
        self.answered: set[tuple[str, str, int]] = set()

    def call(self, method: str, template: str, expect: int, *, role: str | None = "admin", json_body: Any = None,
             params: dict | None = None, headers: dict | None = None, **path: Any) -> Any:
        route = self.routes[(method, template)]
        sent = dict(headers or {})
        if role is not None:
            sent.update(self.people.headers(role))
        kwargs = {"json": json_body} if json_body is not None else {}
        r = self.client.request(method, template.format(**path), params=params, headers=sent, **kwargs)
        assert r.status_code == expect, f"{method} {template}: {r.status_code} {r.text[:2000]}"
        self.answered.add((method, template, r.status_code))
        return check_answer(route, r)


def check_answer(route, r) -> Any:
    """Validate one answer against its declared model, strictly; returns the JSON (or text)."""
    status = r.status_code
    model = declared_model(route, status)
    if status == 204:
        assert r.content == b"" and model is None
        return None
    if status >= 400:
        assert model in (ErrorResponse, None), f"{route.path_format} declares {model} for {status}"
        model = ErrorResponse  # declared by reference where the success answer is not JSON (test_openapi)
    media = r.headers["content-type"].split(";")[0]
    if model is None:
        assert media != "application/json", f"{route.path_format}: JSON without a declared model"
        return r.text
    assert media == "application/json"
    parsed = model.model_validate_json(r.content, strict=True)
    body = r.json()
    assert parsed.model_dump(mode="json", exclude_unset=True) == body, "the answer does not survive its model"
    if status >= 400:
        assert body["error"]["status"] == status
    return body


def _head(session_factory, rail_id: int) -> RailRevision:
    with session_factory() as s:
        rail_revs = s.scalars(select(RailRevision).where(RailRevision.rail_id == rail_id)
                              .order_by(RailRevision.n.desc())).all()
        s.expunge_all()
        return rail_revs[0]


def _analyse(session_factory, rail_id: int, *, monte_carlo: int = 0) -> None:
    with session_factory() as s:
        rev = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail_id).order_by(RailRevision.n.desc()))
        analyse_now(s, rev, monte_carlo=monte_carlo)


SMALL_WORKFLOW = {
    "name": "two steps",
    "states": [{"name": "in design", "initial": True, "signed_off": False, "description": "being changed"},
               {"name": "accepted", "initial": False, "signed_off": True, "description": "a reviewer accepted it"}],
    "transitions": [
        {"name": "accept", "from": "in design", "to": "accepted", "roles": ["reviewer"],
         "demands": {"approvals": 1, "checks_pass": True, "no_stale_approvals": True}},
        {"name": "reopen", "from": "accepted", "to": "in design", "roles": ["designer", "reviewer", "admin"],
         "demands": {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}}],
    "on_edit": "in design",
}


def test_every_operation_answers_its_declared_model_through_a_products_life(client, app, people, session_factory):
    api = Contract(client, people)
    call = api.call

    health = call("GET", "/healthz", 200, role=None)
    assert health["status"] == "ok"
    me = call("GET", "/api/v1/me", 200, role="viewer")
    assert me["auth"] == "token" and "csrf_token" not in me

    # catalog
    product = call("POST", "/api/v1/products", 201, role="designer", json_body={"name": "Harbour beacon"})
    call("GET", "/api/v1/products", 200, role="viewer")
    call("GET", "/api/v1/products/{product_id}", 200, role="viewer", product_id=product["id"])
    call("PATCH", "/api/v1/products/{product_id}", 200, role="designer", json_body={"description": "solar"},
         product_id=product["id"])
    board = call("POST", "/api/v1/boards", 201, role="designer",
                 json_body={"product_id": product["id"], "name": "Power", "revision": "A"})
    call("GET", "/api/v1/boards", 200, role="viewer", params={"product_id": product["id"]})
    call("GET", "/api/v1/boards/{board_id}", 200, role="viewer", board_id=board["id"])
    call("PATCH", "/api/v1/boards/{board_id}", 200, role="designer", json_body={"revision": "B"}, board_id=board["id"])

    # the part library
    part = call("POST", "/api/v1/parts", 201, role="designer", json_body={"document": fet_doc("Test N30 beacon")})
    call("PUT", "/api/v1/parts/{part_id}", 200, role="designer", part_id=part["id"],
         json_body={"document": fet_doc("Test N30 beacon", rth_ja=38.0), "base_revision": 1})
    call("GET", "/api/v1/parts", 200, role="viewer")
    call("GET", "/api/v1/parts/{part_id}/revisions/{n}", 200, role="viewer", part_id=part["id"], n=1)
    stale_part = call("PUT", "/api/v1/parts/{part_id}", 409, role="designer", part_id=part["id"],
                      json_body={"document": fet_doc("Test N30 beacon"), "base_revision": 1})
    assert stale_part["error"]["current"]["n"] == 2 and "document" in stale_part["error"]["current"]

    # rails and revisions
    doc = rail_doc("VOUT_12V")
    doc.pop("fet")
    rail = call("POST", "/api/v1/rails", 201, role="designer",
                json_body={"board_id": board["id"], "document": doc, "part": {"id": part["id"]}})
    rail_id, product_id = rail["id"], product["id"]
    assert rail["part"]["pinned_revision"] == 2
    used = call("GET", "/api/v1/parts/{part_id}", 200, role="viewer", part_id=part["id"])
    assert used["used_by"][0]["rail_id"] == rail_id
    other = call("POST", "/api/v1/rails", 201, role="designer",
                 json_body={"board_id": board["id"], "document": rail_doc("VOUT_5V")})
    waiting = call("GET", "/api/v1/rails/{rail_id}/results/latest", 404, role="viewer", rail_id=other["id"])
    assert waiting["error"]["job"]["state"] == "queued"
    unanalysed = call("POST", "/api/v1/rails/{rail_id}/approvals", 409, role="reviewer", rail_id=other["id"],
                      json_body={"sha256": other["head"]["sha256"], "comment": "looked"})
    assert unanalysed["error"]["code"] == "not_analysed" and unanalysed["error"]["analyse"]
    doc2 = rail_doc("VOUT_12V", load={"c_nom": "1 mF"})
    doc2.pop("fet")
    saved = call("PUT", "/api/v1/rails/{rail_id}", 200, role="designer", rail_id=rail_id,
                 json_body={"document": doc2, "base_revision": 1, "message": "more bulk"})
    assert saved["created_revision"] is True and saved["head"]["n"] == 2
    call("PUT", "/api/v1/rails/{rail_id}", 428, role="designer", rail_id=rail_id, json_body={"document": doc2})
    stale = call("PUT", "/api/v1/rails/{rail_id}", 409, role="designer", rail_id=rail_id,
                 json_body={"document": doc, "base_revision": 1})
    assert stale["error"]["current"]["n"] == 2
    call("GET", "/api/v1/rails", 200, role="viewer", params={"board_id": board["id"]})
    call("GET", "/api/v1/rails/{rail_id}", 200, role="viewer", rail_id=rail_id)
    call("GET", "/api/v1/rails/{rail_id}/revisions", 200, role="viewer", rail_id=rail_id)
    call("GET", "/api/v1/rails/{rail_id}/revisions/{n}", 200, role="viewer", rail_id=rail_id, n=1)
    diff = call("GET", "/api/v1/rails/{rail_id}/diff", 200, role="viewer", rail_id=rail_id,
                params={"from": 1, "to": 2})
    assert any(c["field"] == "load.c_nom" for c in diff["changes"])

    # the board's power-up sequence over its two rails
    seq_doc = {"schema": "railsign.sequence/1", "name": "Main power-up",
               "supplies": [{"id": "in12", "name": "12 V input", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02,
                             "i_max": 10.0}],
               "rails": [{"id": "main", "ref": "VOUT_12V", "supply": "in12", "enable": {"at": 0.0}},
                         {"id": "aux", "ref": "VOUT_5V", "supply": "in12",
                          "enable": {"after": "main", "threshold": 0.9, "delay": 1e-3}}]}
    call("GET", "/api/v1/boards/{board_id}/sequence", 404, role="viewer", board_id=board["id"])
    sequence = call("PUT", "/api/v1/boards/{board_id}/sequence", 200, role="designer", board_id=board["id"],
                    json_body={"document": seq_doc, "message": "first"})
    assert sequence["n"] == 1 and sequence["result"] is None and sequence["analysis"]["state"] == "queued"
    pending = call("GET", "/api/v1/boards/{board_id}/sequence", 200, role="viewer", board_id=board["id"])
    call("GET", "/api/v1/jobs/{job_id}", 200, role="viewer", job_id=pending["analysis"]["job"]["id"])
    run_queued_jobs(app)  # the save queued the analysis; a worker computes it
    done = call("GET", "/api/v1/boards/{board_id}/sequence", 200, role="viewer", board_id=board["id"])
    assert done["result"]["verdict"] in ("pass", "marginal", "fail")
    call("POST", "/api/v1/boards/{board_id}/sequence/approvals", 201, role="reviewer", board_id=board["id"],
         json_body={"sha256": sequence["sha256"], "comment": "dip and order checked"})
    # a supply that cannot deliver the inrush: its failing check is waived before the sequence is approved
    weak = {**seq_doc, "supplies": [{**seq_doc["supplies"][0], "i_max": 0.05}]}
    second = call("PUT", "/api/v1/boards/{board_id}/sequence", 200, role="designer", board_id=board["id"],
                  json_body={"document": weak, "message": "a weaker supply"})
    run_queued_jobs(app)
    failing_seq = call("GET", "/api/v1/boards/{board_id}/sequence", 200, role="viewer", board_id=board["id"])
    assert failing_seq["result"]["verdict"] == "fail" and failing_seq["approval_blocked"]
    blocked = call("POST", "/api/v1/boards/{board_id}/sequence/approvals", 409, role="reviewer",
                   board_id=board["id"], json_body={"sha256": second["sha256"], "comment": "too early"})
    assert "without a waiver" in blocked["error"]["message"]
    for problem in failing_seq["problem_checks"]:
        call("POST", "/api/v1/boards/{board_id}/sequence/waivers", 201, role="reviewer", board_id=board["id"],
             json_body={"sha256": second["sha256"], "inputs_sha256": failing_seq["inputs_sha256"],
                        "check_id": problem["check_id"], "reason": "the bench supply is a stand-in"})
    revisions = call("GET", "/api/v1/boards/{board_id}/sequence/revisions", 200, role="viewer", board_id=board["id"])
    assert [r["n"] for r in revisions["items"]] == [2, 1] and revisions["items"][0]["message"] == "a weaker supply"
    first = call("GET", "/api/v1/boards/{board_id}/sequence/revisions/{n}", 200, role="viewer", board_id=board["id"],
                 n=1)
    assert first["sha256"] == sequence["sha256"] and first["document"]["supplies"][0]["i_max"] != 0.05
    seq_diff = call("GET", "/api/v1/boards/{board_id}/sequence/diff", 200, role="viewer", board_id=board["id"],
                    params={"from": 1, "to": 2})
    assert [c["field"] for c in seq_diff["changes"]] == ["supplies[0].i_max"]
    listed = call("GET", "/api/v1/boards/{board_id}/sequence/waivers", 200, role="viewer", board_id=board["id"])
    assert listed["total"] == len(failing_seq["problem_checks"]) and all(w["current"] for w in listed["items"])
    call("POST", "/api/v1/boards/{board_id}/sequence/approvals", 201, role="reviewer2", board_id=board["id"],
         json_body={"sha256": second["sha256"], "comment": "waived supply current checked"})
    # the sequence follows the team's workflow: submitted, then refused while an approval of revision 1 is stale
    moved_seq = call("POST", "/api/v1/boards/{board_id}/sequence/transitions", 200, role="designer",
                     board_id=board["id"], json_body={"transition": "submit for review", "sha256": second["sha256"]})
    assert moved_seq["from"] == "in design" and moved_seq["to"] == "awaiting review"
    stale_seq = call("POST", "/api/v1/boards/{board_id}/sequence/transitions", 409, role="reviewer2",
                     board_id=board["id"], json_body={"transition": "accept margins", "sha256": second["sha256"]})
    assert [d["field"] for d in stale_seq["error"]["details"]] == ["stale_approvals"]

    # analyses, jobs, results
    _analyse(session_factory, rail_id)
    _analyse(session_factory, rail_id, monte_carlo=200)
    saved_jobs = call("GET", "/api/v1/jobs", 200, role="viewer", params={"rail_id": rail_id, "state": "queued"})
    for job in saved_jobs["items"]:  # the saves queued these; the stored results answer from now on
        call("DELETE", "/api/v1/jobs/{job_id}", 200, role="designer", job_id=job["id"])
    done = call("POST", "/api/v1/rails/{rail_id}/analyses", 200, role="designer", rail_id=rail_id, json_body={})
    assert done["state"] == "done" and done["links"]["result"]
    queued = call("POST", "/api/v1/rails/{rail_id}/analyses", 202, role="designer", rail_id=rail_id,
                  json_body={"monte_carlo": 500, "seed": 3, "distribution": {"c": "normal"}})
    call("GET", "/api/v1/jobs/{job_id}", 200, role="viewer", job_id=queued["id"])
    call("DELETE", "/api/v1/jobs/{job_id}", 200, role="designer", job_id=queued["id"])
    call("POST", "/api/v1/jobs/{job_id}/retry", 202, role="designer", job_id=queued["id"])
    call("DELETE", "/api/v1/jobs/{job_id}", 200, role="designer", job_id=queued["id"])
    board_job = client.post(f"/api/v1/boards/{board['id']}/analyses", json={}, headers=people.headers("designer"))
    api.answered.add(("POST", "/api/v1/boards/{board_id}/analyses", board_job.status_code))
    check_answer(api.routes[("POST", "/api/v1/boards/{board_id}/analyses")], board_job)
    assert board_job.json()["kind"] == "board"
    latest = call("GET", "/api/v1/rails/{rail_id}/results/latest", 200, role="viewer", rail_id=rail_id)
    assert latest["current_engine"] and latest["result"]["checks"]
    mc = call("GET", "/api/v1/rails/{rail_id}/results/latest", 200, role="viewer", rail_id=rail_id,
              params={"kind": "monte_carlo"})
    assert mc["result"]["monte_carlo"]["n"] == 200 and "yield" in mc["result"]["monte_carlo"]
    call("GET", "/api/v1/rails/{rail_id}/revisions/{n}/results", 200, role="viewer", rail_id=rail_id, n=2)
    call("GET", "/api/v1/results/{result_id}", 200, role="viewer", result_id=done["result_id"])

    # sign-off: approve, waive, edit (the approval goes stale), carry the waiver, approve again, move
    sha2 = saved["head"]["sha256"]
    call("POST", "/api/v1/rails/{rail_id}/approvals", 201, role="reviewer", rail_id=rail_id,
         json_body={"sha256": sha2, "comment": "inrush and SOA read right"})
    failing = next(c["id"] for c in latest["result"]["checks"] if c["verdict"] == "fail")
    waiver = call("POST", "/api/v1/rails/{rail_id}/waivers", 201, role="reviewer", rail_id=rail_id,
                  json_body={"sha256": sha2, "check_id": failing, "reason": "the upstream fuse clears it first"})
    doc3 = rail_doc("VOUT_12V", load={"c_nom": "1.2 mF"})
    doc3.pop("fet")
    third = call("PUT", "/api/v1/rails/{rail_id}", 200, role="designer", rail_id=rail_id,
                 json_body={"document": doc3, "base_revision": 2}, headers={"If-Match": f'"{sha2}"'})
    sha3 = third["head"]["sha256"]
    _analyse(session_factory, rail_id)
    call("POST", "/api/v1/rails/{rail_id}/waivers/{waiver_id}/carry", 201, role="reviewer", rail_id=rail_id,
         waiver_id=waiver["id"], json_body={"sha256": sha3})
    call("POST", "/api/v1/rails/{rail_id}/approvals", 201, role="reviewer2", rail_id=rail_id,
         json_body={"sha256": sha3, "comment": "checked again at 1.2 mF"})
    approvals = call("GET", "/api/v1/rails/{rail_id}/approvals", 200, role="viewer", rail_id=rail_id)
    assert [a["stale"] for a in approvals["items"]] == [True, False]
    assert approvals["items"][1]["for_current_result"] is True
    waivers = call("GET", "/api/v1/rails/{rail_id}/waivers", 200, role="viewer", rail_id=rail_id)
    assert [w["current"] for w in waivers["items"]] == [False, True]
    moved = call("POST", "/api/v1/rails/{rail_id}/transitions", 200, role="designer", rail_id=rail_id,
                 json_body={"transition": "submit for review", "sha256": sha3})
    assert moved["to"] == "awaiting review"
    status = call("GET", "/api/v1/rails/{rail_id}/signoff", 200, role="viewer", rail_id=rail_id)
    assert status["checks"]["analysed"] and any(w.get("covers") for w in status["waivers"])

    # a second rail with a failing result stored for it: the risk view lists it
    store_checks(session_factory, other["head"]["sha256"], FAILING)
    risks = call("GET", "/api/v1/products/{product_id}/risks", 200, role="manager", product_id=product_id)
    rows = {r["name"]: r for b in risks["boards"] for r in b["rails"]}
    assert rows["VOUT_5V"]["failing"] and rows["VOUT_12V"]["waived"][0]["waiver"]["id"]

    # waiver rules, the review queue and its assignments, retiring and restoring a rail
    alpha = people.team_ids["alpha"]
    rules = call("GET", "/api/v1/teams/{team_id}/signoff-rules", 200, role="viewer", team_id=alpha)
    call("PUT", "/api/v1/teams/{team_id}/signoff-rules", 200, team_id=alpha,
         json_body={"two_person": True, "fail_waiver_role": "reviewer", "expected_version": rules["version"]})
    call("POST", "/api/v1/rails/{rail_id}/transitions", 200, role="designer", rail_id=other["id"],
         json_body={"transition": "submit for review", "sha256": other["head"]["sha256"]})
    assignment = call("POST", "/api/v1/reviews/assignments", 201, role="manager",
                      json_body={"reviewer_id": people.ids["reviewer"], "board_id": board["id"]})
    listed = call("GET", "/api/v1/reviews/assignments", 200, role="viewer", params={"board_id": board["id"]})
    assert [a["reviewer"] for a in listed["items"]] == ["reviewer"]
    queue = call("GET", "/api/v1/reviews/queue", 200, role="reviewer")
    assert [e["rail"]["name"] for e in queue["assigned"]] == ["VOUT_5V"] and queue["assigned"][0]["failing"]
    call("DELETE", "/api/v1/reviews/assignments/{assignment_id}", 204, role="manager", assignment_id=assignment["id"])
    call("POST", "/api/v1/rails/{rail_id}/transitions", 200, role="designer", rail_id=other["id"],
         json_body={"transition": "send back", "sha256": other["head"]["sha256"]})
    retired = call("POST", "/api/v1/rails/{rail_id}/retire", 200, role="designer", rail_id=other["id"],
                   json_body={"reason": "merged into VOUT_12V"})
    assert retired["retired"] is True
    assert call("POST", "/api/v1/rails/{rail_id}/restore", 200, role="designer", rail_id=other["id"])["retired"] is False

    # sign-off reports: the live PDF, and the copy archived when the board's only rail is frozen for build
    report_board = call("POST", "/api/v1/boards", 201, role="designer",
                        json_body={"product_id": product_id, "name": "Archived", "revision": "A"})
    frozen = call("POST", "/api/v1/rails", 201, role="designer",
                  json_body={"board_id": report_board["id"], "document": rail_doc("VFROZEN")})
    freeze(client, people, frozen)
    pdf = call("GET", "/api/v1/boards/{board_id}/report.pdf", 200, role="viewer", board_id=report_board["id"])
    assert pdf.startswith("%PDF-")
    archived = call("GET", "/api/v1/boards/{board_id}/archived-reports", 200, role="viewer",
                    board_id=report_board["id"])
    assert archived["total"] == 1
    call("GET", "/api/v1/archived-reports/{archive_id}", 200, role="viewer", archive_id=archived["items"][0]["id"])
    call("GET", "/api/v1/archived-reports/{archive_id}/pdf", 200, role="viewer", archive_id=archived["items"][0]["id"])

    # audit
    call("GET", "/api/v1/audit", 200, role="admin", params={"object_type": "rail"})
    call("GET", "/api/v1/products/{product_id}/audit", 200, role="manager", product_id=product_id)
    csv_text = call("GET", "/api/v1/products/{product_id}/audit.csv", 200, role="manager", product_id=product_id)
    assert csv_text.splitlines()[0].startswith("id,")
    call("GET", "/api/v1/rails/{rail_id}/audit", 200, role="viewer", rail_id=rail_id)

    # accounts, teams and their workflow
    call("GET", "/api/v1/tokens", 200, role="viewer")
    new_token = call("POST", "/api/v1/tokens", 201, role="viewer", json_body={"name": "bench script"})
    owned = call("GET", "/api/v1/tokens", 200, role="admin", params={"user_id": people.ids["viewer"]})
    assert all(t["user"] == "viewer" for t in owned["items"])
    revoked = call("DELETE", "/api/v1/tokens/{token_id}", 200, role="viewer", token_id=new_token["id"])
    assert revoked["revoked"] and "user" not in revoked
    call("GET", "/api/v1/users", 200)
    user = call("POST", "/api/v1/users", 201, json_body={"username": "newcomer", "role": "viewer", "teams": ["alpha"]})
    call("GET", "/api/v1/users/{user_id}", 200, user_id=user["id"])
    call("PATCH", "/api/v1/users/{user_id}", 200, user_id=user["id"], json_body={"display_name": "New Comer"})
    call("GET", "/api/v1/teams", 200)
    team = call("POST", "/api/v1/teams", 201, json_body={"name": "gamma"})
    call("GET", "/api/v1/teams/{team_id}", 200, team_id=team["id"])
    call("POST", "/api/v1/teams/{team_id}/members", 200, team_id=team["id"], json_body={"user_id": user["id"]})
    call("DELETE", "/api/v1/teams/{team_id}/members/{user_id}", 200, team_id=team["id"], user_id=user["id"])
    call("GET", "/api/v1/teams/{team_id}/workflow", 200, role="viewer", team_id=alpha)
    replaced = call("PUT", "/api/v1/teams/{team_id}/workflow", 200, team_id=alpha,
                    json_body={"definition": SMALL_WORKFLOW})
    assert replaced["moved_rails"] == [{"rail_id": rail_id, "from": "awaiting review", "to": "in design"},
                                       {"rail_id": frozen["id"], "from": "frozen for build", "to": "in design"}]

    # deleting, innermost first
    spare_product = call("POST", "/api/v1/products", 201, role="designer", json_body={"name": "Spare"})
    spare_board = call("POST", "/api/v1/boards", 201, role="designer",
                       json_body={"product_id": spare_product["id"], "name": "Spare"})
    spare = call("POST", "/api/v1/rails", 201, role="designer",
                 json_body={"board_id": spare_board["id"], "document": rail_doc("SPARE")})
    call("DELETE", "/api/v1/boards/{board_id}", 409, role="designer", board_id=spare_board["id"])
    call("DELETE", "/api/v1/rails/{rail_id}", 204, role="designer", rail_id=spare["id"])
    call("DELETE", "/api/v1/boards/{board_id}", 204, role="designer", board_id=spare_board["id"])
    call("DELETE", "/api/v1/products/{product_id}", 204, role="designer", product_id=spare_product["id"])

    # a few refusals, each in the one error shape
    call("GET", "/api/v1/me", 401, role=None)
    call("POST", "/api/v1/products", 403, role="viewer", json_body={"name": "Not mine"})
    call("GET", "/api/v1/products/{product_id}", 404, role="outsider", product_id=product_id)
    call("POST", "/api/v1/products", 409, role="designer", json_body={"name": "Harbour beacon"})
    invalid = call("POST", "/api/v1/products", 422, role="designer", json_body={"name": ""})
    assert invalid["error"]["details"][0]["field"] == "name"
    unreadable = client.post("/api/v1/teams", content=b"\xe9", headers={**people.headers("admin"),
                                                                         "content-type": "application/json"})
    assert unreadable.status_code == 400
    api.answered.add(("POST", "/api/v1/teams", 400))
    check_answer(api.routes[("POST", "/api/v1/teams")], unreadable)

    succeeded = {(m, p) for m, p, status in api.answered if status < 300}
    assert succeeded == set(api.routes), f"operations never answered with success: {set(api.routes) - succeeded}"
    assert {s for *_, s in api.answered if s >= 400} == {400, 401, 403, 404, 409, 422, 428}


def _sample_url(template: str) -> str:
    return "/".join(str(NOBODY) if part.startswith("{") else part for part in template.split("/"))


@pytest.mark.parametrize("role", [None, "viewer", "admin"])
def test_every_refusal_is_a_declared_status_in_the_error_shape(client, people, role):
    """Ids that name nothing, no body: whatever each operation answers, it declares, in the error shape."""
    api = Contract(client, people)
    for (method, template), route in sorted(api.routes.items()):
        if template == "/healthz":
            continue
        headers = people.headers(role) if role else {}
        body = {"json": {}} if method in ("POST", "PUT", "PATCH") else {}
        r = client.request(method, _sample_url(template), headers=headers, **body)
        if role is None:
            assert r.status_code == 401, (method, template, r.status_code)
        if r.status_code < 300:
            continue  # lists answer with success: checked in the scenario above
        check_answer(route, r)


def test_a_key_a_service_renames_fails_the_answer(client, people, monkeypatch):
    """FastAPI would drop an unknown key silently; the forbidding models make it fail instead."""
    product = client.post("/api/v1/products", json={"name": "Tide gauge"}, headers=people.headers("designer")).json()
    original = catalog.product_dict

    def renamed(p):
        out = original(p)
        out["summary"] = out.pop("description")
        return out

    monkeypatch.setattr(catalog, "product_dict", renamed)
    with pytest.raises(Exception, match="summary"):
        client.get(f"/api/v1/products/{product['id']}", headers=people.headers("viewer"))


def test_a_user_created_with_a_team_named_twice_is_refused_and_nothing_is_stored(client, people):
    """Found by the schemathesis run: the duplicate membership row answered 500; a list names each item once."""
    admin = people.headers("admin")
    teams_before = client.get("/api/v1/teams", headers=admin).json()["total"]
    r = client.post("/api/v1/users", json={"username": "twice", "role": "viewer", "teams": ["alpha", "delta", "alpha"]},
                    headers=admin)
    assert r.status_code == 422, r.text
    assert r.json()["error"]["details"] == [{"field": "teams", "message": "names 'alpha' twice: give each once"}]
    assert "twice" not in [u["username"] for u in client.get("/api/v1/users", headers=admin).json()["items"]]
    assert client.get("/api/v1/teams", headers=admin).json()["total"] == teams_before
    once = client.post("/api/v1/users", json={"username": "once", "role": "viewer", "teams": ["alpha", "delta"]},
                       headers=admin)
    assert once.status_code == 201 and once.json()["teams"] == ["alpha", "delta"]
