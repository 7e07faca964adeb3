"""The risk view, the table import and the readable history in a real browser (headless Debian Chromium);
screenshots go to test-artifacts/."""

from __future__ import annotations

import csv
import io
import json

import pytest

from server.services import rail_edits
from server.services.rails import get_revision
from tests.factories import fet_doc, rail_doc
from tests.pages.helpers import actor_of, analyse_now
from tests.pages.test_browser import TIMEOUT_MS, _plot_drawn, browser, log_in, page, served, shot  # noqa: F401

pytestmark = pytest.mark.browser


def _table() -> bytes:
    fet = fet_doc("Browser N30")
    head = ["board", "name", "supply.v_min [V]", "supply.v_nom [V]", "supply.v_max [V]", "load.c_nom [uF]",
            "load.model", "load.i_nom [A]", "switch.mode", "switch.i_limit [A]", "environment.t_ambient [degC]",
            "fet.name", "fet.vds_max [V]", "fet.rds_on", "fet.tj_max", "fet.rth_ja", "fet.zth", "fet.soa.curves"]
    tail = ["current_limit", 4, 55, fet["name"], 30, "5 mOhm", 150, 40, json.dumps(fet["zth"]),
            json.dumps(fet["soa"]["curves"])]
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(head)
    writer.writerow(["Sensors", "V_CAM", 11.4, 12, 12.6, 470, "resistive", 1.5, *tail])
    writer.writerow(["Sensors", "V_SONAR", 11.4, 12, 12.6, -5, "resistive", 1.5, *tail])
    writer.writerow(["Sensors", "V_GPS", 4.75, 5, 5.25, 100, "resistive", 0.3, *tail])
    return out.getvalue().encode()


def test_a_table_with_a_bad_row_is_previewed_then_its_good_rows_imported(page, served):
    pid = served["ids"]["product_id"]
    page.goto(f"/products/{pid}")
    page.click("text=Import rails from a table")
    page.set_input_files("#f-table", files=[{"name": "rails.csv", "mimeType": "text/csv", "buffer": _table()}])
    page.click("#preview-button")
    page.wait_for_selector("#preview-table")
    bad = page.locator('tr[data-row="3"]')
    assert "Load capacitance (load.c_nom): must be above 0" in bad.inner_text()
    assert "1 bad" in page.inner_text("#preview-summary")
    shot(page, "import-preview")
    page.click("#import-good-button")
    page.wait_for_selector("#import-done")
    assert "2 rails imported, 1 new board; 1 bad row left out" in page.inner_text("#import-done")
    shot(page, "import-done")
    page.goto("/products/new")
    shot(page, "product-new")


def test_the_risk_view_shows_both_groups_and_its_trend(browser, served):
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
    context.set_default_timeout(TIMEOUT_MS)
    pg = context.new_page()
    log_in(pg, "manager", "/risks")
    _plot_drawn(pg, "plot-risk-trend")
    assert pg.locator("#technical-counts").is_visible() and pg.locator("#process-counts").is_visible()
    legend = pg.locator("#plot-risk-trend .legendtext").all_text_contents()
    assert "Failing checks (rails)" in legend and "Not signed off (rails)" in legend
    shot(pg, "risks-all-products")
    pg.select_option("#filter-kind", "technical")
    pg.click("#risk-filters button[type=submit]")
    pg.wait_for_url("**kind=technical**")
    assert pg.locator("#risk-table tbody tr").count() >= 1
    shot(pg, "risks-technical")
    context.close()


def test_an_old_revision_and_the_comparison_read_in_full(page, served):
    rail_id = served["ids"]["rail_ids"][0]
    factory = served["app"].state.sessionmaker
    with factory() as s:
        designer = actor_of(s, "designer")
        head = get_revision(session=s, actor=designer, rail_id=rail_id)
        if head.n == 1:
            doc = rail_doc("RAIL_0", load={"c_nom": "1.2 mF"})
            doc.pop("fet")
            _, rev, _ = rail_edits.save_rail(session=s, actor=designer, rail_id=rail_id, document=doc, base_n=1)
            analyse_now(s, rev)
    page.goto(f"/rails/{rail_id}/history?from_n=1&to_n=2")
    page.wait_for_selector("#check-diff-table")
    _plot_drawn(page, "plot-history-startup")
    legend = page.locator("#plot-history-startup .legendtext").all_text_contents()
    assert "Switch current (revision 1)" in legend and "Junction temperature (revision 2)" in legend
    shot(page, "history-compare")
    page.click('a[href$="/revisions/1"]')
    page.wait_for_selector("#revision-checks")
    assert "An earlier revision" in page.inner_text("main")
    _plot_drawn(page, "plot-revision-soa")
    shot(page, "revision-1")
