"""The capacitor bank in a real browser (headless chromium): the rail page draws the bank's C(v); the form
adds a group, fills the bank from a pasted BOM, and Enter in a field saves rather than adding a group."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from server.models import Rail, RailRevision
from server.services import rail_edits
from tests.factories import rail_doc
from tests.pages.helpers import actor_of, analyse_now
from tests.pages.test_browser import _plot_drawn, browser, page, served, shot  # noqa: F401 (fixtures)

pytestmark = pytest.mark.browser

BANK = [{"refs": "C1, C2", "count": 2, "c_nom": "330uF", "c_tol": "20%", "dielectric": "electrolytic",
         "v_rated": "25V", "esr": "80 mOhm"},
        {"refs": "C10-C17", "count": 8, "c_nom": "22uF", "c_tol": "10%", "dielectric": "x7r", "v_rated": "25V",
         "esr": "4 mOhm", "dc_bias": [[0, 1.0], [8, 0.62], [16, 0.36]]}]
BOM = "refdes, value, dielectric, rating, qty\nC20-C23, 10u, X7R, 25V,\nC30, 100u, polymer, 16V, 1\n"


def _bank_rail(served) -> int:
    sessions = served["app"].state.sessionmaker
    with sessions() as s:
        designer = actor_of(s, "designer")
        part_id = served["ids"]["part_id"]
        doc = rail_doc("V_BANKED", load={"c_nom": None, "c_tol": 0, "esr": 0, "bank": BANK})
        doc.pop("fet")
        rail, rev = rail_edits.create_rail(session=s, actor=designer, board_id=served["ids"]["board_id"],
                                           document=doc, part=rail_edits.PartRef(part_id), message="bank")
        analyse_now(s, rev)
        return rail.id


def test_the_bank_plot_draws_and_the_form_fills_from_a_bom(page, served):  # noqa: F811
    rail_id = _bank_rail(served)
    page.goto(f"/rails/{rail_id}")
    _plot_drawn(page, "plot-bank")
    assert page.locator("#bank-table tbody tr").count() == 2
    shot(page, "bank-rail-page")

    page.goto(f"/rails/{rail_id}/edit")
    page.click("#bank-add")
    page.wait_for_selector("#bank-group-2")
    page.click("#bom-import summary")  # the BOM import is folded away until asked for
    page.fill("#f-bom-text", BOM)
    page.click("#bom-fill")
    page.wait_for_selector("#bom-filled")
    assert page.input_value("#f-load-bank-0-refs") == "C20-C23" and page.input_value("#f-load-bank-0-count") == "4"
    assert page.input_value("#f-load-bank-1-dielectric") == "polymer"
    shot(page, "bank-form-filled")
    # Enter in a field submits the form's default button: saving, not adding a group
    page.fill("#f-message", "bank from the BOM")
    page.press("#f-message", "Enter")
    page.wait_for_url(f"**/rails/{rail_id}")
    with served["app"].state.sessionmaker() as s:
        rail = s.get(Rail, rail_id)
        head = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail_id, RailRevision.n == rail.head_n))
    assert head.n == 2 and [g["count"] for g in head.document["load"]["bank"]] == [4, 1]
