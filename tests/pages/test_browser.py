"""The pages in a real browser: headless Debian Chromium driven by Playwright, against the app served
by uvicorn on a free local port with in-process analysis workers. Screenshots go to test-artifacts/.

One server and one browser for the module (SQLite; the page logic runs on both engines in the
other page tests); each test opens its own browser context.
"""

from __future__ import annotations

import re
import socket
import threading
import time
from pathlib import Path

import pytest
import uvicorn

from server import migrate
from server.app import create_app
from server.config import REPO_ROOT
from server.pages.forms import form_from_document, rail_fields
from server.services.rails import normalize_document
from tests.conftest import People, make_settings
from tests.factories import rail_doc
from tests.pages.helpers import seed_board

pytestmark = pytest.mark.browser
ARTIFACTS = REPO_ROOT / "test-artifacts"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking"]
PLOT_SVG = ".js-plotly-plot svg.main-svg"  # a drawn plot: Plotly marks its div and adds its SVG
TIMEOUT_MS = 30_000


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """The app on a real HTTP server in a background thread, with two worker threads."""
    path = tmp_path_factory.mktemp("browser") / "railsign.db"
    settings = make_settings(f"sqlite:///{path}", worker_threads=2)
    migrate.upgrade(settings)
    app = create_app(settings)
    people = People(app.state.sessionmaker, passwords=True)
    ids = seed_board(app.state.sessionmaker, analysed=2, unanalysed=0)
    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, name="browser-test-server", daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline, "the test server did not start"
        time.sleep(0.05)
    yield {"app": app, "base": f"http://127.0.0.1:{port}", "people": people, "ids": ids}
    server.should_exit = True
    thread.join(timeout=20)


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield b
        b.close()


def log_in(pg, username: str, next_path: str = "/") -> None:
    """Log in through the login page, as a person would."""
    pg.goto(f"/login?next={next_path}")
    pg.fill("#username", username)
    pg.fill("#password", f"{username}-password")
    pg.click("button[type=submit]")
    pg.wait_for_url(re.compile(re.escape(next_path) + "$"))


@pytest.fixture
def page(browser, served):
    """A page logged in as 'designer' through the login form."""
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
    context.set_default_timeout(TIMEOUT_MS)
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda e: errors.append(str(e)))
    # anything the content security policy refused (a script, an eval, a style) is reported on the console
    pg.on("console", lambda m: errors.append(m.text) if "Content Security Policy" in m.text else None)
    log_in(pg, "designer")
    yield pg
    context.close()
    assert errors == [], f"script errors or refusals of the content security policy in the page: {errors}"


def shot(pg, name: str) -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    pg.screenshot(path=str(path), full_page=True)
    assert path.stat().st_size > 10_000
    return path


def _plot_drawn(pg, plot_id: str) -> None:
    pg.wait_for_selector(f"#{plot_id}{PLOT_SVG}")
    assert pg.locator(f"#{plot_id} .scatterlayer .trace, #{plot_id} .barlayer .trace").count() > 0


def _fill_rail_form(pg, values: dict[str, str]) -> None:
    for f in rail_fields():
        value = values.get(f.name, "")
        if f.choices:
            if value:
                pg.select_option(f"#{f.html_id}", value)
        else:
            pg.fill(f"#{f.html_id}", value)


def test_a_page_asks_for_a_login_and_returns_after_it(browser, served):
    context = browser.new_context(base_url=served["base"])
    pg = context.new_page()
    board_id = served["ids"]["board_id"]
    pg.goto(f"/boards/{board_id}")
    assert "/login" in pg.url
    pg.fill("#username", "viewer")
    pg.fill("#password", "wrong-password")
    pg.click("button[type=submit]")
    assert pg.locator("[role=alert]").count() == 1
    pg.fill("#password", "viewer-password")
    pg.click("button[type=submit]")
    pg.wait_for_url(re.compile(rf"/boards/{board_id}$"))
    assert pg.locator("#analyse-board").count() == 0  # a viewer reads, and is offered nothing to change
    shot(pg, "login-then-board-as-viewer")
    context.close()


def test_create_a_rail_through_the_form_see_a_refusal_then_every_plot(page, served):
    board_id, part_id = served["ids"]["board_id"], served["ids"]["part_id"]
    page.goto(f"/boards/{board_id}")
    page.get_by_role("link", name="New rail").click()
    page.wait_for_selector("h1:has-text('New rail')")
    values = form_from_document(normalize_document(rail_doc("VOUT_BROWSER")))
    values["load.c_nom"] = "680 uQ"  # a unit slip
    _fill_rail_form(page, values)
    page.select_option("#f-part", f"part:{part_id}")
    page.fill("#f-message", "entered in the browser")
    page.click("#save-rail")
    error = page.locator("#f-load-c-nom-error")
    error.wait_for()
    assert "unknown or wrong unit" in error.inner_text()
    assert page.input_value("#f-load-c-nom") == "680 uQ"
    assert page.input_value("#f-name") == "VOUT_BROWSER"
    assert page.input_value("#f-supply-v-min") == values["supply.v_min"]
    assert page.evaluate("document.activeElement.id") == "error-summary"
    shot(page, "rail-form-refused")

    page.fill("#f-load-c-nom", "680uF")
    page.click("#save-rail")
    page.wait_for_url(re.compile(r"/rails/\d+$"))
    # the saved revision's analysis runs in the server's workers; the page follows it and reloads
    for plot_id in ("plot-startup", "plot-soa", "plot-timer"):
        _plot_drawn(page, plot_id)
    assert page.locator("#checks-table .verdict").count() > 5
    words = set(page.locator("#checks-table .verdict").all_inner_texts())
    assert words <= {"pass", "marginal", "fail", "n/a"}
    soa = page.locator("#plot-soa")
    assert "Short circuit, worst case: survives" in soa.inner_text()
    shot(page, "rail-page")


def test_monte_carlo_runs_with_progress_and_draws_histograms(page, served):
    rail_id = served["ids"]["rail_ids"][0]
    page.goto(f"/rails/{rail_id}")
    page.select_option("#mc-samples", "5000")
    page.fill("#mc-seed", "3")
    page.click("#run-mc")
    page.wait_for_selector(f"#plot-mc{PLOT_SVG}")
    assert page.locator("#plot-mc .barlayer .trace").count() >= 5
    section = page.inner_text("#monte-carlo-section")
    assert re.search(r"5000 samples \(seed 3\)", section) and "pass every check" in section
    assert "Distributions: supply voltage uniform" in section
    assert "Margin (1 = team limit)" in page.inner_text("#plot-mc")
    shot(page, "rail-monte-carlo")


def test_edit_a_rail_and_see_the_history_diff_and_overlays(page, served):
    rail_id = served["ids"]["rail_ids"][1]
    page.goto(f"/rails/{rail_id}")
    page.get_by_role("link", name="Edit").click()
    page.fill("#f-load-c-nom", "1.2 mF")
    page.fill("#f-message", "more bulk capacitance")
    page.click("#save-rail")
    page.wait_for_url(re.compile(rf"/rails/{rail_id}$"))
    page.wait_for_selector(f"#plot-startup{PLOT_SVG}")  # revision 2 analysed
    page.get_by_role("link", name="History").click()
    row = page.locator("#diff-table tr[data-field='load.c_nom']")
    row.wait_for()
    assert "430 µF" in row.inner_text() and "1.2 mF" in row.inner_text()
    _plot_drawn(page, "plot-history-startup")
    _plot_drawn(page, "plot-history-soa")
    legend = page.inner_text("#plot-history-soa")
    assert "revision 1" in legend and "revision 2" in legend
    shot(page, "rail-history")


def test_enter_an_soa_curve_by_pasting_csv_and_see_the_preview(page, served):
    page.goto("/parts/new")
    page.fill("#f-name", "Pasted N45 (test)")
    page.fill("#f-vds-max", "45 V")
    page.fill("#f-rds-on", "4 mOhm")
    page.fill("#f-tj-max", "175")
    page.fill("#f-rth-ja", "38 K/W")
    page.fill("#f-zth", "0.3, 30us\n2, 3ms\n35, 4")
    page.fill("#f-curve-0-points", "V_DS, I_D\n1, 180\n12, 60\n45, 9")
    page.wait_for_selector(f"#soa-preview{PLOT_SVG}")
    page.wait_for_function("() => document.querySelectorAll('#soa-preview .scatterlayer .trace').length === 1")
    assert "Preview of 1 curve" in page.inner_text("#preview-status")
    page.fill("#f-curve-3-points", "1\t25\n45\t0.8")
    page.wait_for_function("() => document.querySelectorAll('#soa-preview .scatterlayer .trace').length === 2")
    page.fill("#f-curve-1-points", "1, 120\n0.5, 40")
    page.wait_for_function("() => document.getElementById('preview-status').textContent.includes('must rise')")
    shot(page, "part-soa-preview")
    page.fill("#f-curve-1-points", "")
    page.fill("#f-curve-1-t-pulse", "")
    page.fill("#f-curve-2-t-pulse", "")
    page.click("#save-part")
    page.wait_for_url(re.compile(r"/parts/\d+$"))
    _plot_drawn(page, "plot-part-soa")
    _plot_drawn(page, "plot-part-zth")
    shot(page, "part-page")


def test_the_board_table_sorts_and_filters_from_the_keyboard_and_the_board_is_analysed(page, served):
    board_id = served["ids"]["board_id"]
    page.goto(f"/boards/{board_id}")
    _plot_drawn(page, "budget-0")
    names = lambda: page.locator("#rail-table tbody tr:not([hidden]) td:first-child a").all_inner_texts()  # noqa: E731
    first = names()
    page.focus("#rail-table button[data-key='c']")
    page.keyboard.press("Enter")
    ascending = names()
    page.keyboard.press("Space")
    assert names() == list(reversed(ascending))
    assert page.get_attribute("#rail-table th:nth-child(4)", "aria-sort") == "descending"
    page.focus("#filter-q")
    page.keyboard.type(first[0][-1])
    assert all(n.endswith(first[0][-1]) for n in names())
    page.fill("#filter-q", "")
    page.keyboard.press("Tab")
    page.click("#analyse-board")
    page.wait_for_url(re.compile(rf"/boards/{board_id}"))
    page.wait_for_function("() => !document.querySelector('.job-progress') || "
                           "document.querySelector('.job-status').textContent.includes('done')")
    page.wait_for_selector(f"#budget-0{PLOT_SVG}")
    assert page.locator("#rail-table .verdict").count() == len(first)
    shot(page, "board-page")


def test_a_reviewer_approves_from_the_keyboard_and_a_manager_reads_the_risks(browser, served):
    rail_id = served["ids"]["rail_ids"][0]
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
    context.set_default_timeout(TIMEOUT_MS)
    pg = context.new_page()
    log_in(pg, "reviewer", f"/rails/{rail_id}")
    pg.focus("#approve-comment")
    pg.keyboard.type("start-up SOA and timer window checked")
    pg.keyboard.press("Enter")  # submits the approval form
    pg.wait_for_selector("#approval-table")
    assert "start-up SOA and timer window checked" in pg.inner_text("#approval-table")
    pg.locator("#signoff-section").screenshot(path=str(ARTIFACTS / "rail-signoff.png"))
    context.close()
    context = browser.new_context(viewport={"width": 1280, "height": 900}, base_url=served["base"])
    pg = context.new_page()
    log_in(pg, "manager")
    pg.get_by_role("link", name="Risks", exact=True).click()
    pg.wait_for_selector("h1:has-text('Risks of every product you can see')")
    pg.select_option("#filter-product", label="Tideline buoy")
    pg.get_by_role("button", name="Show").click()
    pg.wait_for_selector("h1:has-text('Risks of Tideline buoy')")
    # the approval just given shows on its rail's row, and no other
    approved_row = pg.locator(f"#risk-table tr[data-rail='{rail_id}']")
    assert "1 current approval" in approved_row.inner_text()
    assert "0 current approvals" in pg.locator(f"#risk-table tbody tr:not([data-rail='{rail_id}'])").first.inner_text()
    assert "not signed off" in pg.inner_text("#risk-table")
    shot(pg, "product-risks")
    context.close()


def test_the_api_docs_render_offline(browser, served):
    """/docs draws its operations with nothing but this server's files (Swagger UI 5 reads OpenAPI 3.1)."""
    context = browser.new_context(base_url=served["base"])
    pg = context.new_page()
    outside: list[str] = []
    pg.on("request", lambda r: outside.append(r.url) if not r.url.startswith((served["base"], "data:")) else None)
    pg.goto("/docs")
    pg.wait_for_selector(".swagger-ui .opblock", timeout=TIMEOUT_MS)
    assert pg.locator(".opblock").count() > 50
    assert "Unable to render" not in pg.inner_text("body")
    assert outside == []
    context.close()


def test_fit_foster_stages_to_pasted_zth_points_on_the_part_form(page, served):
    # the points: the closed form Zth(t) = sum r_i (1 - exp(-t / tau_i)) of known stages (Foster network,
    # JEDEC JESD51-14; from memory), four per decade
    import math

    stages = [(0.05, 1e-5), (0.3, 3e-4), (0.6, 5e-3), (0.35, 8e-2)]
    lines = [f"{10 ** (-6 + k / 4)!r}, {sum(r * (1 - math.exp(-10 ** (-6 + k / 4) / tau)) for r, tau in stages)!r}"
             for k in range(25)]
    page.goto("/parts/new")
    page.fill("#f-name", "Fitted N45 (test)")
    page.fill("#f-vds-max", "45 V")
    page.fill("#f-rds-on", "4 mOhm")
    page.fill("#f-tj-max", "175")
    page.fill("#f-rth-ja", "38 K/W")
    page.fill("#f-curve-0-points", "1, 180\n12, 60\n45, 9")
    page.fill("#f-curve-3-points", "1, 25\n5, 27\n45, 0.8")  # DC rising at 5 V: the preview says so
    page.wait_for_function("() => document.getElementById('preview-status').textContent.includes('I_D rises')")
    page.fill("#f-zth-points", "t, Zth\n" + "\n".join(lines))
    page.select_option("#f-fit-stages", "4")
    page.click("#fit-zth")
    page.wait_for_selector("#fit-result")
    _plot_drawn(page, "plot-zth-fit")
    assert page.inner_text("#fit-largest-error") == "0.00%"
    assert page.input_value("#f-zth").count("\n") == 4  # four stages and the board stage
    shot(page, "part-zth-fit")
    page.fill("#f-curve-1-t-pulse", "")
    page.fill("#f-curve-2-t-pulse", "")
    page.click("#save-part")
    page.wait_for_url(re.compile(r"/parts/\d+$"))
    _plot_drawn(page, "plot-part-zth")
    assert "fitted to 25 points" in page.inner_text("#zth-points")
    assert "I_D rises with V_DS" in page.inner_text("#soa-warnings")
    shot(page, "part-page-fitted")
