"""Pushed updates in a real browser: a rail saved elsewhere is analysed by the server's workers and its
new verdict appears on the open rail page without a reload (server-sent events, web/static/live.js)."""

from __future__ import annotations

import httpx
import pytest
from sqlalchemy import select

from server.models import AnalysisResult, Job
from server.pages.display import verdict_style
from tests.pages.test_browser import TIMEOUT_MS, browser, log_in, served, shot  # noqa: F401 - fixtures

pytestmark = pytest.mark.browser


def test_a_saved_rails_new_verdict_appears_on_the_open_rail_page_without_a_reload(browser, served):  # noqa: F811
    rail_id, base, people = served["ids"]["rail_ids"][0], served["base"], served["people"]
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=base)
    context.set_default_timeout(TIMEOUT_MS)
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda e: errors.append(str(e)))
    pg.on("console", lambda m: errors.append(m.text) if "Content Security Policy" in m.text else None)
    log_in(pg, "viewer")
    pg.goto(f"/rails/{rail_id}")
    pg.wait_for_selector("#checks-table")
    pg.evaluate("window.__notReloaded = true")
    # when the new revision's result is on the page, the time (ms since the epoch) it got there
    pg.evaluate("""() => new MutationObserver((_, obs) => {
        const lede = document.querySelector('.lede');
        if (lede && lede.textContent.includes('Revision 2') && document.querySelector('#checks-table')) {
            window.__shownAt = Date.now(); obs.disconnect();
        }}).observe(document.body, {childList: true, subtree: true})""")
    pg.wait_for_function("() => window.railsignLive && document.querySelector('#live')")

    with httpx.Client(base_url=base, headers=people.headers("designer")) as api:
        current = api.get(f"/api/v1/rails/{rail_id}").json()
        doc = current["document"]
        doc["load"]["c_nom"] = 0.05  # a much larger bulk capacitance: another design, another result
        saved = api.put(f"/api/v1/rails/{rail_id}", json={"document": doc, "base_revision": current["head"]["n"]})
        assert saved.status_code in (200, 201), saved.text

    pg.wait_for_function("() => window.__shownAt !== undefined")
    assert pg.evaluate("window.__notReloaded") is True  # the same document: no reload
    with served["app"].state.sessionmaker() as s:
        sha = s.scalar(select(Job.sha256).where(Job.rail_id == rail_id, Job.revision_n == 2))
        job_done = s.scalar(select(Job.finished_at).where(Job.rail_id == rail_id, Job.revision_n == 2,
                                                          Job.state == "done"))
        verdict = s.scalar(select(AnalysisResult.verdict).where(AnalysisResult.sha256 == sha))
    assert pg.inner_text("h1 .verdict") == verdict_style(verdict).word
    assert "Revision 2" in pg.inner_text(".lede")
    lag_ms = pg.evaluate("window.__shownAt") - job_done.timestamp() * 1000
    print(f"new verdict on the open page {lag_ms:.0f} ms after its job finished")
    assert lag_ms < 1000  # goal 300 ms; loose here (a shared machine), the figure is printed
    shot(pg, "rail-page-pushed-verdict")
    context.close()
    assert errors == [], errors
