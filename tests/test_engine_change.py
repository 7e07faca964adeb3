"""A new analysis engine version, on SQLite and PostgreSQL: outdated results read as outdated, their
re-runs are queued once, a signed-off rail read worse goes back with its approvals stale, approvals
and waivers keep the result they were given against, and a waiver covers no worse verdict than it waived.

An "old engine" is made the way the service meets one after an upgrade: results stored with
engine version 1.1.0, or whole flows run while ``server.analysis.ENGINE_VERSION`` reads 1.1.0.
"""

from __future__ import annotations

import threading

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import select, update

import server.analysis
from server.services import jobs
from server.__main__ import main
from server.app import create_app
from server.models import Approval, AuditEntry, Job, RailState
from server.pages.home import home_context
from server.pages.rendering import templates
from server.pages.signoff_view import outdated_context, rail_signoff
from server.services import engine_change, overview, results
from tests.conftest import TEST_SECRET
from tests.pages.helpers import actor_of, log_in
from tests.signoff_support import allow_fail_waivers, PASSING, check, edit_rail, make_board, make_rail, result_of, store_checks

OLD = "1.1.0"
NEW = server.analysis.ENGINE_VERSION
FAILING_SOA = [check("startup_soa", "fail", 0.9), check("fault_margin", "pass", 1.9),
               check("vds_derating", "pass", 0.6, 0.8, "fraction")]


@pytest.fixture(autouse=True)
def _rules_these_tests_were_written_under(session_factory, people):
    """A reviewer may waive a failing check and approve alone here: the waiver rules are tests/test_governance.py's."""
    allow_fail_waivers(session_factory, people.team_ids["alpha"])


@pytest.fixture
def engine_at(monkeypatch):
    """Set the engine version the service believes it runs (the analysis core itself is not run)."""
    assert NEW != OLD

    def at(version: str) -> None:
        monkeypatch.setattr(server.analysis, "ENGINE_VERSION", version)
    return at


def _finish_queued(session_factory, checks_for) -> list[int]:
    """Claim and finish every queued job as a worker would, with the invented result ``checks_for(sha256)``."""
    done = []
    while True:
        with session_factory() as s:
            claim = jobs.claim_next(s, worker="test-worker", lease_s=30, max_attempts=3)
        if claim is None:
            return done
        with session_factory() as s:
            sha = s.get(Job, claim.job_id).sha256
        with session_factory() as s:
            assert jobs.finish(s, claim, result=result_of(checks_for(sha)), duration_s=0.01)
        done.append(claim.job_id)


def _post(client, people, rail_id, path, body, who):
    r = client.post(f"/api/v1/rails/{rail_id}/{path}", json=body, headers=people.headers(who))
    assert r.status_code in (200, 201), r.text
    return r.json()


def _sign_off(client, people, rail_id, sha):
    _post(client, people, rail_id, "transitions", {"transition": "submit for review", "sha256": sha}, "designer")
    _post(client, people, rail_id, "approvals", {"sha256": sha, "comment": "margins checked at all corners"},
          "reviewer")
    _post(client, people, rail_id, "transitions", {"transition": "accept margins", "sha256": sha}, "reviewer")


def _signed_off_at_old_engine(client, people, session_factory, engine_at, checks=PASSING):
    """A rail analysed and signed off while the engine was 1.1.0; the engine then becomes the new one."""
    engine_at(OLD)
    board = make_board(client, people)
    rail = make_rail(client, people, board)
    assert len(_finish_queued(session_factory, lambda sha: checks)) == 1
    _sign_off(client, people, rail["id"], rail["head"]["sha256"])
    engine_at(NEW)
    return board, rail


def _status(client, people, rail_id, who="viewer"):
    r = client.get(f"/api/v1/rails/{rail_id}/signoff", headers=people.headers(who))
    assert r.status_code == 200, r.text
    return r.json()


def _audit(client, people, rail_id):
    return client.get(f"/api/v1/rails/{rail_id}/audit", headers=people.headers("viewer")).json()["items"]


# --- 2. an older result reads as outdated ---------------------------------------------------


def test_a_stored_old_engine_result_reads_as_outdated_not_as_not_analysed(client, app, people, session_factory):
    board = make_board(client, people)
    rail = make_rail(client, people, board)
    sha = rail["head"]["sha256"]
    with session_factory() as s:
        assert results.reading(s, sha256=sha) is None
    old_id = store_checks(session_factory, sha, FAILING_SOA, version=OLD)
    with session_factory() as s:
        now = results.reading(s, sha256=sha)
        assert (now.row.id, now.outdated, now.engine_version, now.current_engine) == (old_id, True, OLD, NEW)
        assert results.checks_for_revision(s, sha256=sha) is None       # never taken for the current engine's
        home = home_context(s, actor_of(s, "viewer"))
        board_view = overview.board_rails(session=s, actor=actor_of(s, "viewer"), board_id=board["id"])
        product_view = overview.product_overview(session=s, actor=actor_of(s, "viewer"),
                                                 product_id=rail["product_id"])
    (product,) = home["products"]
    assert product["outdated"] == 1 and product["counts"] == [("outdated", 1)]
    assert [(r["verdict"], r["outdated"]) for r in board_view["rails"]] == [(None, {"engine_version": OLD,
                                                                                     "verdict": "fail"})]
    assert product_view["outdated"] == 1 and product_view["by_verdict"] == {None: 1}

    status = _status(client, people, rail["id"])
    assert status["result"] == {**status["result"], "id": old_id, "engine_version": OLD, "verdict": "fail",
                                "outdated": True, "current_engine": NEW}
    assert status["checks"]["analysed"] is False
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    (entry,) = [r for b in risks["boards"] for r in b["rails"]]
    assert entry["risks"] == ["outdated_result", "missing_signoff"]      # worst first
    assert entry["outdated"] == {"engine_version": OLD, "verdict": "fail"}
    assert risks["totals"]["outdated_result"] == 1 and risks["totals"]["not_analysed"] == 0

    # An approval or waiver needs the current engine's result: refused with the way out.
    for path, body in (("approvals", {"sha256": sha, "comment": "looks fine"}),
                       ("waivers", {"sha256": sha, "check_id": "startup_soa", "reason": "bench capture"})):
        r = client.post(f"/api/v1/rails/{rail['id']}/{path}", json=body, headers=people.headers("reviewer"))
        assert r.status_code == 409, r.text
        assert r.json()["error"]["code"] == "not_analysed"
        assert "analyse the revision first" in r.json()["error"]["message"]
        assert f"its last result is of engine {OLD}" in r.json()["error"]["message"]

    # The sign-off section and the partial say so, with a re-run pending (the save queued one).
    with session_factory() as s:
        ctx = rail_signoff(s, actor_of(s, "designer"), rail["id"])["outdated"]
    assert ctx["pending"] is True and ctx["may_rerun"] is False
    html = templates.get_template("partials/outdated.html").render(outdated=ctx, csrf_token="t")
    assert f"Result of engine {OLD}; the current engine is {NEW}:" in html and "re-run pending" in html
    assert "<form" not in html
    log_in(client, app, people.ids["reviewer"])
    page = client.get(f"/rails/{rail['id']}")
    assert page.status_code == 200
    assert f"its last result is of engine {OLD}" in page.text and 'id="approve-wait"' in page.text
    assert 'id="approve-form"' not in page.text


def test_re_run_now_from_the_partial_queues_the_current_engine_once(client, app, people, session_factory):
    board = make_board(client, people)
    rail = make_rail(client, people, board)
    sha = rail["head"]["sha256"]
    with session_factory() as s:  # the analysis the save queued was cancelled: nothing pending
        s.execute(update(Job).where(Job.rail_id == rail["id"]).values(state="cancelled"))
        s.commit()
    store_checks(session_factory, sha, PASSING, version=OLD)
    with session_factory() as s:
        status = rail_signoff(s, actor_of(s, "designer"), rail["id"])
        ctx = outdated_context(s, actor_of(s, "designer"), status)
        viewer_ctx = outdated_context(s, actor_of(s, "viewer"), status)
    assert ctx["pending"] is False and ctx["may_rerun"] is True and viewer_ctx["may_rerun"] is False
    html = templates.get_template("partials/outdated.html").render(outdated=ctx, csrf_token="tok")
    assert f'action="/rails/{rail["id"]}/analyses"' in html and f"Re-run now at engine {NEW}" in html
    assert templates.get_template("partials/outdated.html").render(outdated=None, csrf_token="t").strip() == ""

    # The rail page's existing "analyse" action is the re-run: it queues the current engine.
    csrf = log_in(client, app, people.ids["designer"])
    r = client.post(f"/rails/{rail['id']}/analyses", data={"csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    api = client.post(f"/api/v1/rails/{rail['id']}/analyses", json={}, headers=people.headers("designer"))
    assert api.status_code == 202 and api.json()["engine_version"] == NEW
    with session_factory() as s:
        active = s.scalars(select(Job).where(Job.rail_id == rail["id"], Job.state == "queued")).all()
        assert [(j.engine_version, j.sha256) for j in active] == [(NEW, sha)]   # the API reused the page's job
        status = rail_signoff(s, actor_of(s, "designer"), rail["id"])
        assert status["outdated"]["pending"] is True


# --- 1. start-up queueing -------------------------------------------------------------------


def test_start_up_queues_each_outdated_head_revision_once(client, people, session_factory, settings, engine_at):
    engine_at(OLD)
    board = make_board(client, people)
    outdated = make_rail(client, people, board, name="V_OLD")
    both = make_rail(client, people, board, name="V_BOTH")
    edited = make_rail(client, people, board, name="V_EDITED")
    never = make_rail(client, people, board, name="V_NEVER")
    other_team = make_rail(client, people, make_board(client, people, name="Beta product", designer="outsider"),
                           name="V_BETA", designer="outsider")
    with session_factory() as s:
        s.execute(update(Job).where(Job.rail_id == never["id"]).values(state="cancelled"))
        s.commit()
    assert len(_finish_queued(session_factory, lambda sha: PASSING)) == 4
    engine_at(NEW)
    store_checks(session_factory, both["head"]["sha256"], PASSING)      # the new engine has read this one
    edit_rail(client, people, edited, "1 mF")                          # its new head has its own job already

    def new_jobs():
        with session_factory() as s:
            return s.execute(select(Job.rail_id, Job.revision_n, Job.requested_by, Job.options)
                             .where(Job.engine_version == NEW).order_by(Job.rail_id)).all()

    before = new_jobs()
    assert [(r, n) for r, n, *_ in before] == [(edited["id"], 2)]
    for _ in range(2):  # the service starting twice (or two web processes one after the other)
        restarted = create_app(settings)
        with TestClient(restarted):
            pass
        restarted.state.engine.dispose()
    after = new_jobs()
    queued = [row for row in after if row not in before]
    assert [(r, n, who) for r, n, who, _ in queued] == [(outdated["id"], 1, engine_change.ENGINE_ACTOR),
                                                         (other_team["id"], 1, engine_change.ENGINE_ACTOR)]
    assert all(opts == results.NOMINAL_OPTIONS for *_, opts in queued)
    with session_factory() as s:
        assert jobs.enqueue_outdated(session=s) == []       # idempotent
        assert [r.id for r, _ in engine_change.outdated_heads(s)] == [outdated["id"], other_team["id"]]
        assert [r.id for r, _ in engine_change.outdated_heads(s, without_job=True)] == []
    assert len(_finish_queued(session_factory, lambda sha: PASSING)) == 3
    with session_factory() as s:
        assert engine_change.outdated_heads(s) == []


def test_processes_starting_together_queue_each_outdated_head_once(client, people, session_factory, engine_at):
    engine_at(OLD)
    board = make_board(client, people)
    for k in range(4):
        make_rail(client, people, board, name=f"V_{k}")
    _finish_queued(session_factory, lambda sha: PASSING)
    engine_at(NEW)
    barrier, counts, errors = threading.Barrier(3), [], []

    def start() -> None:
        try:
            barrier.wait(timeout=10)
            with session_factory() as s:
                counts.append(len(jobs.enqueue_outdated(session=s)))
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    threads = [threading.Thread(target=start) for _ in range(3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(30)
    assert errors == [] and sorted(counts) == [0, 0, 4]
    with session_factory() as s:
        assert len(s.scalars(select(Job).where(Job.engine_version == NEW)).all()) == 4


def test_the_command_line_queues_the_outdated_heads_and_prints_the_count(client, people, session_factory,
                                                                          engine_at, monkeypatch, database_url,
                                                                          capsys):
    engine_at(OLD)
    make_rail(client, people, make_board(client, people))
    _finish_queued(session_factory, lambda sha: PASSING)
    engine_at(NEW)
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)
    assert main(["jobs", "rerun-outdated"]) == 0
    assert capsys.readouterr().out.startswith(f"queued 1 analyses at engine {NEW}")
    assert main(["jobs", "rerun-outdated"]) == 0
    assert capsys.readouterr().out.startswith("queued 0 analyses")


# --- 3. a signed-off rail read worse leaves its signed-off state ----------------------------


@pytest.mark.parametrize("kept", ["result", "legacy"])
def test_a_signed_off_rail_read_worse_by_the_new_engine_goes_back_with_its_approvals_stale(
        client, app, people, session_factory, engine_at, kept):
    """``legacy``: approvals made before they kept their result; the newest outdated result stands in."""
    board, rail = _signed_off_at_old_engine(client, people, session_factory, engine_at)
    rail_id, sha = rail["id"], rail["head"]["sha256"]
    if kept == "legacy":
        with session_factory() as s:
            s.execute(update(Approval).values(engine_version=None, result_id=None))
            s.commit()
    (approval,) = _status(client, people, rail_id)["approvals"]
    if kept == "result":
        assert approval["engine_version"] == OLD and approval["result_note"] == (
            f"given for the result of engine {OLD}; the current engine is {NEW} and has not read this revision yet")
    with session_factory() as s:
        assert [j.rail_id for j in jobs.enqueue_outdated(session=s)] == [rail_id]
    _finish_queued(session_factory, lambda _sha: FAILING_SOA)

    reason = f"engine {NEW} reads fail where engine {OLD} read pass: startup soa"
    status = _status(client, people, rail_id)
    assert status["state"]["name"] == "in design" and status["state"]["signed_off"] is False
    assert status["state"]["by"] == engine_change.ENGINE_ACTOR
    assert [(a["stale"], a["stale_reason"]) for a in status["approvals"]] == [(True, reason)]
    entries = _audit(client, people, rail_id)
    stale_entry, moved_entry = entries[-2:]
    assert (stale_entry["action"], moved_entry["action"]) == ("approvals_stale", engine_change.MOVED)
    assert stale_entry["user"] == moved_entry["user"] == engine_change.ENGINE_ACTOR
    assert stale_entry["after"]["reason"] == reason
    assert moved_entry["before"]["state"] == "margins accepted" and moved_entry["after"]["state"] == "in design"
    assert {k: moved_entry["after"][k] for k in ("note", "old_verdict", "new_verdict", "old_engine", "new_engine")} \
        == {"note": reason, "old_verdict": "pass", "new_verdict": "fail", "old_engine": OLD, "new_engine": NEW}

    # Listed for the rail's author on the home page and for managers on the risk pages.
    log_in(client, app, people.ids["designer"])
    home = client.get("/")
    assert "Rails moved by an engine change" in home.text and reason in home.text
    assert f'href="/rails/{rail_id}"' in home.text
    log_in(client, app, people.ids["reviewer2"])   # neither an author nor a manager
    assert "Rails moved by an engine change" not in client.get("/").text
    log_in(client, app, people.ids["manager"])
    risk_page = client.get(f"/products/{rail['product_id']}/risks")
    assert risk_page.status_code == 200 and reason in risk_page.text and f'href="/rails/{rail_id}"' in risk_page.text
    assert "Rails moved by an engine change" in client.get("/").text
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    (moved,) = risks["engine_moves"]
    assert {k: moved[k] for k in ("rail_id", "reason", "old_verdict", "new_verdict", "state_now", "link")} == {
        "rail_id": rail_id, "reason": reason, "old_verdict": "pass", "new_verdict": "fail", "state_now": "in design",
        "link": f"/rails/{rail_id}"}
    (entry,) = [r for b in risks["boards"] for r in b["rails"]]
    assert "stale_signoff" in entry["risks"] and "failing_check" in entry["risks"]
    outsider = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("outsider"))
    assert outsider.status_code in (403, 404)

    # The reviewer approves again, against the new engine's result.
    again = client.post(f"/api/v1/rails/{rail_id}/approvals", json={"sha256": sha, "comment": "read again"},
                        headers=people.headers("reviewer"))
    assert again.status_code == 201, again.text
    assert again.json()["engine_version"] == NEW and again.json()["stale"] is False


def test_rails_sharing_a_document_are_all_moved_by_the_one_result_that_reads_them(client, people, session_factory,
                                                                                  engine_at):
    engine_at(OLD)
    rails = [make_rail(client, people, make_board(client, people, name=f"Product {k}")) for k in range(2)]
    assert rails[0]["head"]["sha256"] == rails[1]["head"]["sha256"]
    _finish_queued(session_factory, lambda sha: PASSING)
    for rail in rails:
        _sign_off(client, people, rail["id"], rail["head"]["sha256"])
    engine_at(NEW)
    with session_factory() as s:
        assert len(jobs.enqueue_outdated(session=s)) == 2
        claim = jobs.claim_next(s, worker="test-worker", lease_s=30, max_attempts=3)
    with session_factory() as s:
        assert jobs.finish(s, claim, result=result_of(FAILING_SOA), duration_s=0.01)
    assert [_status(client, people, r["id"])["state"]["name"] for r in rails] == ["in design", "in design"]
    _finish_queued(session_factory, lambda sha: FAILING_SOA)   # the other rail's job: the same result, once
    for rail in rails:
        assert [e["action"] for e in _audit(client, people, rail["id"])].count(engine_change.MOVED) == 1


def test_a_signed_off_rail_the_new_engine_reads_no_worse_stays_and_shows_the_result_it_was_given_for(
        client, app, people, session_factory, engine_at):
    _, rail = _signed_off_at_old_engine(client, people, session_factory, engine_at)
    with session_factory() as s:
        jobs.enqueue_outdated(session=s)
    read_anew = [check("startup_soa", "pass", 1.8), *PASSING[1:], check("retry_tj", "n/a", 0.0, 0.0, "degC")]
    _finish_queued(session_factory, lambda sha: read_anew)   # pass again, with other numbers
    status = _status(client, people, rail["id"])
    assert status["state"]["name"] == "margins accepted"
    assert [a["stale"] for a in status["approvals"]] == [False]
    note = f"given for the result of engine {OLD}; the current result is engine {NEW}"
    listed = client.get(f"/api/v1/rails/{rail['id']}/approvals", headers=people.headers("viewer")).json()["items"]
    assert [(a["engine_version"], a["for_current_result"], a["result_note"]) for a in listed] == [(OLD, False, note)]
    with session_factory() as s:
        assert s.scalar(select(RailState.state).where(RailState.rail_id == rail["id"])) == "margins accepted"
        assert s.scalars(select(AuditEntry).where(AuditEntry.action == engine_change.MOVED)).all() == []
        assert engine_change.moved_rails(session=s, actor=actor_of(s, "manager")) == []
    log_in(client, app, people.ids["viewer"])
    approvals = client.get(f"/rails/{rail['id']}").text.split('id="approval-table"')[1].split("</table>")[0]
    assert f"engine {OLD}" in approvals and note in approvals


def test_a_worse_result_of_a_rail_not_signed_off_moves_nothing(client, people, session_factory, engine_at):
    engine_at(OLD)
    rail = make_rail(client, people, make_board(client, people))
    _finish_queued(session_factory, lambda sha: PASSING)
    engine_at(NEW)
    with session_factory() as s:
        jobs.enqueue_outdated(session=s)
    _finish_queued(session_factory, lambda sha: FAILING_SOA)   # worse, but the rail was never signed off
    status = _status(client, people, rail["id"])
    assert status["state"]["name"] == "in design"
    assert engine_change.MOVED not in [e["action"] for e in _audit(client, people, rail["id"])]


# --- 4. approvals and waivers bind to the result they saw -----------------------------------


def test_approvals_and_waivers_record_the_engine_and_result_they_were_given_against(client, people,
                                                                                     session_factory):
    rail = make_rail(client, people, make_board(client, people))
    sha = rail["head"]["sha256"]
    result_id = store_checks(session_factory, sha, FAILING_SOA)
    approval = _post(client, people, rail["id"], "approvals", {"sha256": sha, "comment": "checked"}, "reviewer")
    waiver = _post(client, people, rail["id"], "waivers",
                   {"sha256": sha, "check_id": "startup_soa", "reason": "bench capture"}, "reviewer2")
    assert (approval["engine_version"], approval["result_id"]) == (NEW, result_id)
    assert (waiver["engine_version"], waiver["result_id"], waiver["verdict"]) == (NEW, result_id, "fail")
    status = _status(client, people, rail["id"])
    assert [(a["for_current_result"], a["result_note"]) for a in status["approvals"]] == [(True, None)]
    assert [(w["for_current_result"], w["covers"]) for w in status["waivers"]] == [(True, True)]
    audit = [e for e in _audit(client, people, rail["id"]) if e["action"] in ("approve", "waive")]
    assert [(e["after"]["engine_version"], e["after"]["result_id"]) for e in audit] == [(NEW, result_id)] * 2


def test_a_waiver_of_a_marginal_check_does_not_cover_it_once_it_fails(client, app, people, session_factory,
                                                                      engine_at):
    engine_at(OLD)
    rail = make_rail(client, people, make_board(client, people))
    sha = rail["head"]["sha256"]
    old_checks = [check("startup_soa", "pass", 2.1), check("fault_margin", "marginal", 1.2),
                  check("vds_derating", "marginal", 0.85, 0.8, "fraction")]
    _finish_queued(session_factory, lambda _sha: old_checks)
    for check_id in ("fault_margin", "vds_derating"):
        w = _post(client, people, rail["id"], "waivers",
                  {"sha256": sha, "check_id": check_id, "reason": "accepted for the prototype build"}, "reviewer")
        assert (w["verdict"], w["engine_version"]) == ("marginal", OLD)
    engine_at(NEW)
    store_checks(session_factory, sha, [check("startup_soa", "pass", 2.1), check("fault_margin", "fail", 0.95),
                                        check("vds_derating", "marginal", 0.85, 0.8, "fraction")])

    status = _status(client, people, rail["id"])
    assert status["checks"]["open"] == ["fault_margin"]
    assert {w["check_id"]: w["covers"] for w in status["waivers"]} == {"fault_margin": False, "vds_derating": True}
    _post(client, people, rail["id"], "transitions", {"transition": "submit for review", "sha256": sha}, "designer")
    _post(client, people, rail["id"], "approvals", {"sha256": sha, "comment": "read at the new engine"}, "reviewer2")
    blocked = client.post(f"/api/v1/rails/{rail['id']}/transitions",
                          json={"transition": "accept margins", "sha256": sha}, headers=people.headers("reviewer2"))
    assert blocked.status_code == 409 and "fault margin (fail)" in blocked.json()["error"]["message"]
    assert "vds_derating" not in blocked.json()["error"]["message"]
    risks = client.get(f"/api/v1/products/{rail['product_id']}/risks", headers=people.headers("manager")).json()
    (entry,) = [r for b in risks["boards"] for r in b["rails"]]
    assert [c["id"] for c in entry["failing"]] == ["fault_margin"] and [c["id"] for c in entry["waived"]] == [
        "vds_derating"]
    log_in(client, app, people.ids["viewer"])
    waivers = client.get(f"/rails/{rail['id']}").text.split('id="waiver-table"')[1].split("</table>")[0]
    assert "no longer" in waivers and "the check now reads fail; the waiver accepted marginal" in waivers

    # A reviewer may waive the failing reading anew, against the new engine's result.
    again = _post(client, people, rail["id"], "waivers",
                  {"sha256": sha, "check_id": "fault_margin", "reason": "fault path limited by the upstream fuse"},
                  "reviewer")
    assert (again["verdict"], again["engine_version"]) == ("fail", NEW)
    twice = client.post(f"/api/v1/rails/{rail['id']}/waivers",
                        json={"sha256": sha, "check_id": "fault_margin", "reason": "again"},
                        headers=people.headers("reviewer2"))
    assert twice.status_code == 409 and "has a waiver already" in twice.json()["error"]["message"]
    assert _status(client, people, rail["id"])["checks"]["open"] == []
    _post(client, people, rail["id"], "transitions", {"transition": "accept margins", "sha256": sha}, "reviewer2")
