"""The board sign-off report in a real browser (headless Debian Chromium): printed to PDF with
the print stylesheet (no navigation, buttons or forms; each rail on a page of its own), and its
screenshots in test-artifacts/."""

from __future__ import annotations

import io
import unicodedata

import pytest
from pypdf import PdfReader

from tests.pages.test_browser import ARTIFACTS, PLOT_SVG, browser, page, served, shot  # noqa: F401

pytestmark = pytest.mark.browser
HIDDEN_IN_PRINT = [".topbar", "nav.crumbs", "#print-report", "#report-pdf", ".report-actions", ".report-archives",
                   "form.logout"]


def test_the_report_prints_a_page_per_rail_without_navigation_buttons_or_forms(page, served):
    board_id = served["ids"]["board_id"]
    page.goto(f"/boards/{board_id}")
    page.click("#report-link")
    page.wait_for_selector("h1:has-text('Sign-off report')")
    rails = page.locator("section.report-rail")
    assert rails.count() == len(served["ids"]["rail_ids"])
    page.wait_for_selector(f"section.report-rail {PLOT_SVG}")
    for selector in HIDDEN_IN_PRINT:
        assert page.locator(selector).first.is_visible(), f"{selector} is shown on screen"
    shot(page, "report-screen")

    page.emulate_media(media="print")
    for selector in HIDDEN_IN_PRINT:
        assert not page.locator(selector).first.is_visible(), f"{selector} would print"
    assert page.locator(".report-caution").is_visible() and page.locator("footer.caution").is_visible()
    breaks = page.eval_on_selector_all("section.report-rail",
                                       "els => els.map(e => getComputedStyle(e).breakBefore)")
    assert breaks == ["page"] * rails.count()
    shot(page, "report-print")

    pdf = page.pdf(format="A4", print_background=True)
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / "report-printed.pdf").write_bytes(pdf)
    pages = [unicodedata.normalize("NFKC", p.extract_text() or "") for p in PdfReader(io.BytesIO(pdf)).pages]
    names = page.eval_on_selector_all("section.report-rail", "els => els.map(e => e.dataset.rail)")
    starts = []
    for k, name in enumerate(names, start=1):
        found = [n for n, p in enumerate(pages) if f"Rail {k} of {len(names)}: {name}" in p]
        assert len(found) == 1, (name, found)
        starts += found
    assert starts == sorted(set(starts)) and starts[0] > 0          # each rail starts a page of its own
    printed = " ".join(" ".join(pages).split())
    for words in ("Log out", "Download PDF", "Print", "Archived copies (", "Part library"):
        assert words not in printed, f"'{words}' was printed"
    assert "Caution:" in printed and "Team sign-off rules in force" in printed
