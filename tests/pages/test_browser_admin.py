"""The workflow editor, the users pages and the password change in a real browser (headless Debian
Chromium through Playwright, the fixtures of test_browser.py). Screenshots go to test-artifacts/."""

from __future__ import annotations

import re

import pytest

from server.services import users as user_service
from server.services.access import Actor
from tests.pages.test_browser import ARTIFACTS, TIMEOUT_MS, browser, log_in, served, shot  # noqa: F401 (fixtures)

pytestmark = pytest.mark.browser
PASSWORD = "pat-password"


def _context(browser, served):  # noqa: F811
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
    context.set_default_timeout(TIMEOUT_MS)
    return context


def _in_view(pg, selector: str) -> bool:
    return pg.evaluate("""(sel) => { const r = document.querySelector(sel).getBoundingClientRect();
                                      return r.top >= 0 && r.bottom <= window.innerHeight; }""", selector)


@pytest.fixture
def admin_page(browser, served):  # noqa: F811
    context = _context(browser, served)
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda e: errors.append(str(e)))
    log_in(pg, "admin")
    yield pg
    context.close()
    assert errors == [], f"script errors in the page: {errors}"


def test_the_workflow_editor_places_each_problem_beside_its_transition_and_draws_the_diagram(admin_page, served):
    pg = admin_page
    team = served["people"].team_ids["alpha"]
    pg.goto(f"/admin/teams/{team}/workflow")
    assert pg.locator("svg.workflow-diagram g.state").count() == 4
    shot(pg, "admin-workflow")
    # a new state's name shows in every state list as it is typed
    pg.fill("#state-4-name", "parked")
    assert pg.locator("#tr-6-to option[value='4']").inner_text() == "parked"
    pg.select_option("#tr-3-to", "")                       # transition 4 left without a target
    pg.click("#save-workflow")
    summary = pg.locator("#error-summary")
    summary.wait_for()
    assert pg.evaluate("document.activeElement.id") == "error-summary"
    card = pg.locator("#transition-3")
    assert "Transition 4, to state: choose a state" in card.inner_text()
    assert pg.get_attribute("#tr-3-to", "aria-invalid") == "true"
    assert pg.input_value("#state-4-name") == "parked"                 # what was typed stays
    assert "cannot be reached" not in pg.content()          # reported once the other problems are gone
    body = pg.inner_text("main")
    assert "transitions[" not in body and "states[" not in body and "definition." not in body
    shot(pg, "admin-workflow-refused")
    summary.get_by_role("link", name="Transition 4, to state").click()
    assert pg.evaluate("document.activeElement.id") == "tr-3-to" and _in_view(pg, "#tr-3-to")
    pg.locator("#transition-3").screenshot(path=str(ARTIFACTS / "admin-workflow-error-beside.png"))

    # fixed, with the new state reached by two new transitions: saved, and the diagram shows it
    pg.select_option("#tr-3-to", label="frozen for build")
    pg.fill("#tr-6-name", "park")
    pg.select_option("#tr-6-from", label="in design")
    pg.select_option("#tr-6-to", label="parked")
    pg.locator("#tr-6-roles").get_by_label("designer").check()
    pg.fill("#tr-7-name", "resume")
    pg.select_option("#tr-7-from", label="parked")
    pg.select_option("#tr-7-to", label="in design")
    pg.locator("#tr-7-roles").get_by_label("designer").check()
    pg.click("#save-workflow")
    pg.locator("#saved-notice").wait_for()
    assert "Saved as version 2" in pg.inner_text("#saved-notice")
    assert pg.locator("svg.workflow-diagram g.state[data-state='parked']").count() == 1
    assert "park" in pg.locator("svg.workflow-diagram").inner_html()
    shot(pg, "admin-workflow-saved")
    pg.locator(".workflow-figure").screenshot(path=str(ARTIFACTS / "admin-workflow-diagram.png"))


def test_an_admin_adds_disables_and_enables_a_user_who_then_cannot_and_can_log_in(
        admin_page, browser, served):  # noqa: F811
    pg = admin_page
    pg.get_by_role("link", name="Users").click()
    pg.wait_for_url(re.compile(r"/admin/users$"))
    pg.fill("#new-username", "robin")
    pg.select_option("#new-role", "reviewer")
    pg.get_by_label("beta").check()
    pg.fill("#new-password", "x")
    pg.fill("#new-password-repeat", "x")
    pg.click("#add-user")
    assert "needs at least 8 characters" in pg.inner_text("#new-password-error")
    shot(pg, "admin-users-refused")
    pg.fill("#new-password", "robin-password")
    pg.fill("#new-password-repeat", "robin-password")
    pg.click("#add-user")
    pg.wait_for_url(re.compile(r"/admin/users/\d+\?done=created$"))
    assert "The user was added." in pg.inner_text("#user-notice")
    shot(pg, "admin-user")
    pg.click("#disable-user")
    pg.locator("#enable-user").wait_for()
    shot(pg, "admin-user-disabled")
    other = _context(browser, served)
    robin = other.new_page()
    robin.goto("/login")
    robin.fill("#username", "robin")
    robin.fill("#password", "robin-password")
    robin.click("button[type=submit]")
    assert "not right" in robin.inner_text("[role=alert]")
    pg.click("#enable-user")
    pg.locator("#disable-user").wait_for()
    log_in(robin, "robin")
    assert robin.locator("nav a[href='/admin/users']").count() == 0        # not an admin: no users page
    other.close()
    pg.goto("/admin/users")
    assert "robin" in pg.inner_text("#users-table")
    shot(pg, "admin-users")


def test_you_change_your_password_see_a_refusal_beside_the_field_and_stay_logged_in(browser, served):  # noqa: F811
    with served["app"].state.sessionmaker() as session:
        user_service.create_user(session=session, actor=Actor.system("test-setup"), username="pat",
                                 role="designer", password=PASSWORD, teams=["alpha"])
    mine, elsewhere = _context(browser, served), _context(browser, served)
    pg, other = mine.new_page(), elsewhere.new_page()
    for p in (pg, other):
        p.goto("/login?next=/account")
        p.fill("#username", "pat")
        p.fill("#password", PASSWORD)
        p.click("button[type=submit]")
        p.wait_for_url(re.compile(r"/account$"))
    assert "run analyses" in pg.inner_text("#abilities")
    shot(pg, "account")
    pg.fill("#current-password", "not-my-password")
    pg.fill("#new-password", "pat-new-password")
    pg.fill("#new-password-repeat", "pat-new-password")
    pg.click("#change-password")
    error = pg.locator("#current-password-error")
    error.wait_for()
    assert error.inner_text().endswith("is not your current password") and _in_view(pg, "#current-password-error")
    assert pg.get_attribute("#current-password", "aria-invalid") == "true"
    assert pg.evaluate("document.activeElement.id") == "current-password"     # the field in error has the focus
    shot(pg, "account-password-refused")
    pg.fill("#current-password", PASSWORD)
    pg.fill("#new-password", "pat-new-password")
    pg.fill("#new-password-repeat", "pat-new-password")
    pg.click("#change-password")
    pg.wait_for_url(re.compile(r"/account\?done=password$"))
    assert "Your password was changed" in pg.inner_text("#account-notice")
    shot(pg, "account-password-changed")
    pg.goto("/")                                                # still logged in here
    assert pg.url.endswith("/") and pg.locator("h1").count() == 1
    other.reload()                                              # the other session of the old password ended
    assert "/login" in other.url
    other.fill("#username", "pat")
    other.fill("#password", "pat-new-password")
    other.click("button[type=submit]")
    other.wait_for_url(re.compile(r"/account$"))
    mine.close()
    elsewhere.close()
