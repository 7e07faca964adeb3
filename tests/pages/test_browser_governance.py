"""Sign-off governance in a real browser (headless Debian Chromium through Playwright): a designer submits a
rail, another designer cannot approve, one reviewer waives a marginal check and under the two-person rule cannot
also approve, a second reviewer approves, a failing check is not waivable by a reviewer, an edit makes the
approval stale and the rail page's header says so at once, an empty waiver reason is refused beside its field in
view; the risk view's counts follow every step. Then the per-role homes, the admin's waiver rules, the board's
reviewers, retiring and restoring. Screenshots go to test-artifacts/ (governance-*.png).
"""

from __future__ import annotations

import re
import threading
import time

import pytest
import uvicorn

from server import migrate
from server.app import create_app
from server.services import rail_edits, users as user_service
from server.services.access import Actor
from tests.conftest import People, make_settings
from tests.factories import rail_doc
from tests.pages.helpers import actor_of, analyse_now, seed_board
from tests.pages.test_browser import ARTIFACTS, TIMEOUT_MS, _free_port, browser, log_in, shot  # noqa: F401

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """The app on a real HTTP server (two worker threads), a board of team alpha with one rail of a marginal
    and failing checks at its worst case (1.5 mF on the test part), a second designer."""
    path = tmp_path_factory.mktemp("governance") / "railsign.db"
    settings = make_settings(f"sqlite:///{path}", worker_threads=2)
    migrate.upgrade(settings)
    app = create_app(settings)
    people = People(app.state.sessionmaker, passwords=True)
    with app.state.sessionmaker() as s:
        user_service.create_user(session=s, actor=Actor.system("test-setup"), username="designer2",
                                 role="designer", password="designer2-password", teams=["alpha"])
    ids = seed_board(app.state.sessionmaker, analysed=1, unanalysed=0)
    with app.state.sessionmaker() as s:
        doc = rail_doc("VOUT_GOVERNED", load={"c_nom": "1.5mF"})
        rail, rev = rail_edits.create_rail(session=s, actor=actor_of(s, "designer"), board_id=ids["board_id"],
                                           document=doc, message="first entry")
        analyse_now(s, rev)
        ids["governed"] = rail.id
    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, name="browser-governance-server", daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline, "the test server did not start"
        time.sleep(0.05)
    yield {"app": app, "base": f"http://127.0.0.1:{port}", "people": people, "ids": ids}
    server.should_exit = True
    thread.join(timeout=20)


class As:
    """One person's browser context, logged in through the login form."""

    def __init__(self, browser, served, username: str, path: str = "/") -> None:
        self.context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
        self.context.set_default_timeout(TIMEOUT_MS)
        self.page = self.context.new_page()
        self.errors: list[str] = []
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        log_in(self.page, username, path)

    def close(self) -> None:
        self.context.close()
        assert self.errors == [], f"script errors in the page: {self.errors}"


def _csrf(pg) -> str:
    return pg.locator("input[name=csrf_token]").first.input_value()


def _risk_counts(manager, product_id: int) -> dict[str, int]:
    manager.goto(f"/products/{product_id}/risks")
    cells = manager.locator("#technical-counts dd[data-count], #process-counts dd[data-count]")
    return {cells.nth(k).get_attribute("data-count"): int(cells.nth(k).inner_text())
            for k in range(cells.count())}


def _in_view(pg, selector: str) -> bool:
    return pg.evaluate("""sel => { const r = document.querySelector(sel).getBoundingClientRect();
        return r.height > 0 && r.top >= 0 && r.bottom <= window.innerHeight; }""", selector)


@pytest.mark.slow  # about 40 s of clicking: run with -m slow
def test_the_sign_off_of_a_rail_under_the_teams_waiver_rules(browser, served):
    rail_id, product_id = served["ids"]["governed"], served["ids"]["product_id"]
    rail_path = f"/rails/{rail_id}"
    manager = As(browser, served, "manager")
    counts = _risk_counts(manager.page, product_id)
    assert counts["failing_check"] >= 1 and counts["marginal_check"] >= 1 and counts["awaiting_review"] == 0

    # a designer submits the rail from the header's action
    designer = As(browser, served, "designer", rail_path)
    pg = designer.page
    header = pg.locator("#signoff-header")
    assert "in design" in header.locator("#header-state").inner_text()
    assert "not yet:" not in header.locator("#header-next").inner_text()
    pg.click("#act-transition-1")
    pg.locator("#transition-1 button[type=submit]").click()
    pg.wait_for_url(re.compile(rf"{rail_path}#signoff$"))
    assert "awaiting review" in pg.inner_text("#header-state")
    assert "accept margins" in pg.inner_text("#header-next") and "not yet:" in pg.inner_text("#header-next")
    pg.goto(rail_path)
    shot(pg, "governance-rail-header-designer")
    after_submit = _risk_counts(manager.page, product_id)
    assert after_submit["awaiting_review"] == counts["awaiting_review"] + 1

    # another designer is offered no approval, and a posted one is refused
    other = As(browser, served, "designer2", rail_path)
    assert other.page.locator("#approve-form").count() == 0 and other.page.locator("#act-approve").count() == 0
    refused = other.page.request.post(f"{rail_path}/approvals", form={
        "csrf_token": _csrf(other.page), "sha256": other.page.locator("#approve-form input[name=sha256], "
                                                                      "input[name=sha256]").first.input_value(),
        "comment": "looks fine"})
    assert refused.status == 403
    other.close()

    # reviewer A: the failing checks are not offered; an empty reason is refused beside its field, in view
    a = As(browser, served, "reviewer", rail_path)
    pg = a.page
    assert pg.locator("#act-waive").count() == 1
    options = pg.locator("#waive-check option").all_inner_texts()
    assert options and all("(marginal)" in o for o in options)
    not_waivable = pg.inner_text("#not-waivable")
    assert "(fail) cannot be waived by you" in not_waivable and "past the physical edge" in not_waivable
    sha = pg.locator("#waive-form input[name=sha256]").input_value()
    fail_post = pg.request.post(f"{rail_path}/waivers", form={"csrf_token": _csrf(pg), "sha256": sha,
                                                              "check_id": "short_circuit_time",
                                                              "reason": "the fuse clears first"})
    assert fail_post.status == 403 and "past the physical edge" in fail_post.text()
    shot(pg, "governance-rail-reviewer-before-waiver")
    pg.click("#act-waive")
    pg.fill("#waive-reason", "   ")
    pg.click("#waive-submit")
    error = pg.locator("#waive-reason-error")
    error.wait_for()
    assert "reason" in error.inner_text()
    assert pg.get_attribute("#waive-reason", "aria-invalid") == "true"
    pg.wait_for_function("document.activeElement && document.activeElement.id === 'waive-reason'")
    assert _in_view(pg, "#waive-reason-error") and _in_view(pg, "#waive-reason")
    pg.screenshot(path=str(ARTIFACTS / "governance-waiver-reason-error.png"))
    pg.fill("#waive-reason", "timer margin 1.3 at the worst corner; bench starts at 85 °C all completed")
    pg.click("#waive-submit")
    pg.wait_for_url(re.compile(rf"{rail_path}#signoff$"))
    assert "by reviewer" in pg.inner_text("#header-waivers")
    after_waiver = _risk_counts(manager.page, product_id)
    assert after_waiver["marginal_check"] == after_submit["marginal_check"] - 1
    assert after_waiver["waived_check"] == after_submit["waived_check"] + 1
    # the two-person rule: the reviewer who waived is not offered the approval, and a posted one is refused
    assert pg.locator("#approve-form").count() == 0 and pg.locator("#act-approve").count() == 0
    assert "two-person rule" in pg.inner_text("#approve-barred")
    own = pg.request.post(f"{rail_path}/approvals", form={"csrf_token": _csrf(pg), "sha256": sha,
                                                          "comment": "margins fine"})
    assert own.status == 403 and "two-person rule" in own.text()
    pg.goto(rail_path)
    shot(pg, "governance-rail-reviewer-after-waiver")
    a.close()

    # reviewer B approves
    b = As(browser, served, "reviewer2", rail_path)
    pg = b.page
    pg.click("#act-approve")
    pg.fill("#approve-comment", "timer window and SOA checked; waiver read")
    pg.locator("#approve-form button[type=submit]").click()
    pg.wait_for_url(re.compile(rf"{rail_path}#signoff$"))
    assert "reviewer2" in pg.inner_text("#header-approvals")
    after_approval = _risk_counts(manager.page, product_id)
    assert after_approval["awaiting_review"] == after_waiver["awaiting_review"] - 1
    shot(pg, "governance-rail-approved")
    b.close()

    # an edit makes the approval stale, and the header says so at once
    pg = designer.page
    pg.goto(f"{rail_path}/edit")
    pg.fill("#f-load-c-nom", "1.6 mF")
    pg.fill("#f-message", "a little more bulk")
    pg.click("#save-rail")
    pg.wait_for_url(re.compile(rf"{rail_path}$"))
    approvals = pg.inner_text("#header-approvals")
    assert "stale" in approvals and "reviewer2's approval of revision 1" in approvals
    assert "no current approval" in approvals and "in design" in pg.inner_text("#header-state")
    shot(pg, "governance-rail-stale-after-edit")
    after_edit = _risk_counts(manager.page, product_id)
    assert after_edit["stale_signoff"] == after_approval["stale_signoff"] + 1
    assert after_edit["waived_check"] == after_approval["waived_check"] - 1   # waivers cover their revision only
    shot(manager.page, "governance-product-risks")
    designer.close()
    manager.close()


def test_the_homes_the_waiver_rules_and_retiring_a_rail(browser, served):
    ids = served["ids"]
    board_path = f"/boards/{ids['board_id']}"
    # a manager assigns reviewer to the board; the reviewer's home lists what awaits them
    manager = As(browser, served, "manager", board_path)
    manager.page.select_option("#board-reviewer", label="reviewer")
    manager.page.locator("#assign-board button[type=submit]").click()
    manager.page.wait_for_selector("#board-assignments")
    assert "reviewer reviews every rail" in manager.page.inner_text("#board-assignments")
    shot(manager.page, "governance-board-reviewers")
    designer = As(browser, served, "designer", f"/rails/{ids['rail_ids'][0]}")
    designer.page.click("#act-transition-1")
    designer.page.locator("#transition-1 button[type=submit]").click()
    designer.page.wait_for_url(re.compile(r"#signoff$"))
    reviewer = As(browser, served, "reviewer")
    queue = reviewer.page.inner_text("#queue-section")
    assert "RAIL_0" in queue and "assigned to you (its board)" in queue
    shot(reviewer.page, "governance-home-reviewer")
    designer.page.goto("/")
    assert designer.page.locator("#my-rails-table").count() == 1
    assert designer.page.locator("#queue-section").count() == 0
    shot(designer.page, "governance-home-designer")
    manager.page.goto("/")
    assert manager.page.locator("#risk-summary-table tr[data-rail]").count() >= 1
    shot(manager.page, "governance-home-manager")

    # the admin's waiver rules page
    admin = As(browser, served, "admin", "/admin/workflows")
    assert "failing checks waived by nobody" in admin.page.inner_text("main")
    shot(admin.page, "governance-admin-workflows")
    admin.page.click(f"#rules-{served['people'].team_ids['alpha']}")
    admin.page.select_option("#fail-waiver-role", "manager")
    admin.page.click("#save-rules")
    assert "Saved as version 1" in admin.page.inner_text("#saved-notice")
    assert admin.page.input_value("#fail-waiver-role") == "manager"
    shot(admin.page, "governance-admin-waiver-rules")
    admin.close()

    # retiring a rail hides it from the board and the risk view; restoring brings it back
    pg = designer.page
    rail_path = f"/rails/{ids['governed']}"
    pg.goto(rail_path)
    pg.click("#signoff-header summary")
    pg.fill("#retire-reason", "merged into the 5 V rail")
    pg.click("#retire-rail")
    pg.wait_for_selector("#retired-notice")
    shot(pg, "governance-rail-retired")
    pg.goto(board_path)
    assert "VOUT_GOVERNED" not in pg.inner_text("#rail-table")
    pg.click("#retired-rails summary")
    assert "VOUT_GOVERNED" in pg.inner_text("#retired-rails")
    shot(pg, "governance-board-retired")
    manager.page.goto(f"/products/{ids['product_id']}/risks")
    assert "VOUT_GOVERNED" not in manager.page.inner_text("main")
    pg.locator("#retired-rails button[type=submit]").click()
    pg.wait_for_url(re.compile(rf"{rail_path}$"))
    assert pg.locator("#retired-notice").count() == 0
    manager.page.goto(f"/products/{ids['product_id']}/risks")
    assert "VOUT_GOVERNED" in manager.page.inner_text("main")
    for person in (manager, designer, reviewer):
        person.close()
