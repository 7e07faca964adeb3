"""The capacitor bank on the pages: the rail form's bank editor (round trip, errors beside their fields,
adding and removing groups, filling from a BOM) and the rail page's bank section, on the demo's GIMBAL_12V."""

from __future__ import annotations

import html
import json
import re
from html.parser import HTMLParser

from sqlalchemy import select

from server.analysis.report import format_report
from server.demo import seed_if_empty
from server.models import Rail, RailRevision
from server.pages.display import fmt
from server.pages.forms import compare_rows, document_from_form, form_from_document
from server.pages.plots import _r
from server.schemas.rail import document_sha256
from server.services.bom_import import parse_bom
from server.services.rails import normalize_document
from server.services.users import get_user_by_name
from tests.factories import rail_doc
from tests.pages.helpers import analyse_now
from tests.pages.test_page_accessibility import problems_of
from tests.report_support import pdf_pages

BANK = [{"refs": "C1, C2", "count": 2, "c_nom": "330uF", "c_tol": "20%", "dielectric": "electrolytic",
         "v_rated": "25V", "esr": "80 mOhm"},
        {"refs": "C10-C17", "count": 8, "c_nom": "22uF", "c_tol": "10%", "dielectric": "x7r", "v_rated": "25V",
         "esr": "4 mOhm", "dc_bias": [[0, 1.0], [8, 0.62], [16, 0.36]]},
        {"refs": "C20-C23", "count": 4, "c_nom": "4.7uF", "dielectric": "x5r", "v_rated": "16V",
         "tempco": "-0.1 %/K", "derating": [0.4, 0.8]}]


class FormValues(HTMLParser):
    """The values a browser would send for the rail form as the page shows it (text, hidden, select, textarea)."""

    def __init__(self, page: str) -> None:
        super().__init__()
        self.values: dict[str, str] = {}
        self._select: str | None = None
        self._textarea: str | None = None
        self._in_form = False
        self.feed(page)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "form" and "rail-form" in (a.get("class") or ""):
            self._in_form = True
        if not self._in_form:
            return
        if tag == "input" and a.get("name") and a.get("type", "text") in ("text", "hidden"):
            self.values[a["name"]] = a.get("value") or ""
        elif tag == "select":
            self._select = a.get("name")
            self.values.setdefault(self._select, "")
        elif tag == "option" and self._select and "selected" in a:
            self.values[self._select] = a.get("value") or ""
        elif tag == "textarea":
            self._textarea = a.get("name")
            self.values[self._textarea] = ""

    def handle_endtag(self, tag):
        if tag == "select":
            self._select = None
        elif tag == "textarea":
            self._textarea = None
        elif tag == "form":
            self._in_form = False

    def handle_data(self, data):
        if self._textarea:
            # the HTML parser has unescaped the text; a leading newline after <textarea> is not part of it
            self.values[self._textarea] += data


def _demo(session_factory) -> dict:
    with session_factory() as s:
        seed_if_empty(s)
        rail = s.scalar(select(Rail).where(Rail.name == "GIMBAL_12V"))
        head = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == rail.head_n))
        result = analyse_now(s, head)
        dana = get_user_by_name(session=s, username="dana")
        return {"rail_id": rail.id, "sha256": head.sha256, "n": head.n, "result": result,
                "dana": (dana.id, dana.password_hash, dana.session_generation), "board_id": rail.board_id}


def _log_in_as(client, app, who: tuple) -> str:
    """The demo's designer (she has a password: the session cookie carries its fingerprint)."""
    value, csrf = app.state.session_cookie.dump(*who)
    client.cookies.set("railsign_session", value)
    return csrf


def _head(session_factory, rail_id: int) -> RailRevision:
    with session_factory() as s:
        rail = s.get(Rail, rail_id)
        return s.scalar(select(RailRevision).where(RailRevision.rail_id == rail_id, RailRevision.n == rail.head_n))


def _plot_data(page: str, plot_id: str) -> dict:
    m = re.search(rf'<script type="application/json" id="{plot_id}-data">(.*?)</script>', page, re.S)
    assert m, f"no {plot_id} on the page"
    return json.loads(m.group(1))


def test_a_bank_document_survives_the_form_unchanged():
    doc = normalize_document(rail_doc("BANKED", load={"c_nom": None, "c_tol": 0, "esr": 0, "bank": BANK}))
    values = form_from_document(doc)
    assert values["load.c_nom"] == "" and values["load.bank[2].derating[1]"] == "0.8"
    assert values["load.bank[1].dielectric"] == "x7r" and "8 V, 0.62" in values["load.bank[1].dc_bias"]
    again = normalize_document(document_from_form(values, doc["fet"]))
    assert again["load"]["bank"] == doc["load"]["bank"]
    assert document_sha256(again) == document_sha256(doc)


def test_the_conflict_comparison_covers_the_bank_groups():
    doc = normalize_document(rail_doc("BANKED", load={"c_nom": None, "c_tol": 0, "esr": 0, "bank": BANK}))
    mine, theirs = form_from_document(doc), form_from_document(doc)
    mine["load.bank[1].c_nom"] = "22000 nF"  # the same value written otherwise
    theirs["load.bank[2].v_rated"] = "25 V"
    rows = {r["name"]: r for r in compare_rows(mine, theirs)}
    assert rows["load.bank[1].c_nom"]["differs"] is False
    assert rows["load.bank[2].v_rated"]["differs"] is True and rows["load.bank[2].v_rated"]["label"] == \
        "Capacitor group 3 voltage rating"
    assert [n for n, r in rows.items() if r["differs"]] == ["load.bank[2].v_rated"]


def test_the_demo_gimbal_page_shows_the_bank_its_groups_and_its_curve(client, app, people, session_factory):
    demo = _demo(session_factory)
    bank = demo["result"]["bank"]
    _log_in_as(client, app, demo["dana"])
    r = client.get(f"/rails/{demo['rail_id']}")
    assert r.status_code == 200, r.text[:2000]
    page = r.text
    assert 'id="bank-section"' in page and ">Capacitor bank</h2>" in page
    table = page.split('id="bank-table"', 1)[1].split("</table>", 1)[0]
    rows = re.findall(r'<tr data-group="(\d+)">(.*?)</tr>', table, re.S)
    assert len(rows) == len(bank["groups"]) == 3
    for (_, row), g in zip(rows, bank["groups"]):
        assert html.escape(g["refs"]) in row and g["dielectric"] in row and f">{g['count']}<" in row
        assert fmt(g["c_each"], "F") in row and fmt(g["c_at_v_nom"], "F") in row and fmt(g["esr"], "ohm") in row
        assert f"{100 * g['fraction_at_v_nom']:.3g} %" in row and fmt(g["v_rated"], "V") in row
    assert "X7R ceramic" in table and "aluminium electrolytic" in table and "µF" in table and "mΩ" in table
    for note in bank["notes"]:
        assert html.escape(note, quote=False) in page or html.escape(note) in page
    figure = _plot_data(page, "plot-bank")
    names = [t["name"] for t in figure["data"]]
    assert names == ["Low corner", "High corner", "Nominal"]
    nominal = figure["data"][2]
    assert nominal["x"] == _r(bank["v"]) and nominal["y"] == _r(bank["c_nominal"])
    assert figure["data"][0]["y"] == _r(bank["c_low"]) and figure["data"][1]["y"] == _r(bank["c_high"])
    assert figure["layout"]["shapes"][0]["x0"] == bank["v_nom"]  # the nominal supply marked
    assert figure["layout"]["yaxis"]["ticksuffix"] == "F" and figure["layout"]["xaxis"]["ticksuffix"] == "V"
    assert "stored energy" in page  # the page's caution covers a bank at high voltage
    assert problems_of(page) == []


def test_the_rail_form_round_trips_the_demo_bank_without_a_new_revision(client, app, people, session_factory):
    demo = _demo(session_factory)
    csrf = _log_in_as(client, app, demo["dana"])
    form = client.get(f"/rails/{demo['rail_id']}/edit")
    assert form.status_code == 200
    values = FormValues(form.text).values
    assert values["load.bank[1].refs"] == "C410-C433" and values["load.bank[1].dielectric"] == "x7r"
    assert values.get("load.c_nom") == ""
    assert 'enctype="multipart/form-data"' in form.text and "X7R ceramic</option>" in form.text
    assert problems_of(form.text) == []  # labelled, headings in order, ids once (tests/pages/test_page_accessibility.py)
    values["csrf_token"] = csrf
    r = client.post(f"/rails/{demo['rail_id']}/edit", data=values, follow_redirects=False)
    assert r.status_code == 303, r.text[:3000]
    head = _head(session_factory, demo["rail_id"])
    assert head.n == demo["n"] and head.sha256 == demo["sha256"]


def test_a_rising_dc_bias_curve_and_a_broken_count_are_refused_beside_their_fields(client, app, people,
                                                                                     session_factory):
    demo = _demo(session_factory)
    csrf = _log_in_as(client, app, demo["dana"])
    values = FormValues(client.get(f"/rails/{demo['rail_id']}/edit").text).values
    values["csrf_token"] = csrf
    curves = {"load.bank[1].dc_bias": "0 V, 0.5\n8 V, 0.9", "load.bank[2].dc_bias": "8 V, 0.9\n4 V, 0.8"}
    r = client.post(f"/rails/{demo['rail_id']}/edit", data={**values, **curves}, follow_redirects=False)
    assert r.status_code == 422
    page = r.text
    rising = re.search(r'id="f-load-bank-1-dc-bias-error">([^<]*)<', page)
    assert rising and "must not rise with DC voltage" in rising.group(1)
    unordered = re.search(r'id="f-load-bank-2-dc-bias-error">([^<]*)<', page)
    assert unordered and "must increase from point to point" in unordered.group(1)
    # the summary names the field in words, linked to it; the typed curve is still in the form
    assert 'href="#f-load-bank-1-dc-bias">Capacitor group 2 DC-bias curve</a>' in page
    assert FormValues(page).values["load.bank[1].dc_bias"].strip() == curves["load.bank[1].dc_bias"]

    r = client.post(f"/rails/{demo['rail_id']}/edit", data={**values, "load.bank[0].count": "2.5"},
                    follow_redirects=False)
    assert r.status_code == 422
    count = re.search(r'id="f-load-bank-0-count-error">([^<]*)<', r.text)
    assert count and "whole number of capacitors" in count.group(1)
    assert 'href="#f-load-bank-0-count">Capacitor group 1 count</a>' in r.text and "Input should be" not in r.text
    assert _head(session_factory, demo["rail_id"]).n == demo["n"]  # nothing stored


def test_adding_and_removing_groups_saves_nothing(client, app, people, session_factory):
    demo = _demo(session_factory)
    csrf = _log_in_as(client, app, demo["dana"])
    values = FormValues(client.get(f"/rails/{demo['rail_id']}/edit").text).values
    values["csrf_token"] = csrf
    added = client.post(f"/rails/{demo['rail_id']}/edit", data={**values, "bank_action": "add"})
    assert added.status_code == 200 and 'id="bank-group-3"' in added.text and "Capacitor group 4" in added.text
    removed = client.post(f"/rails/{demo['rail_id']}/edit", data={**values, "bank_action": "remove:0"})
    left = FormValues(removed.text).values
    assert left["load.bank[0].refs"] == "C410-C433" and left["load.bank[1].refs"] == "C440-C447"
    assert "load.bank[2].refs" not in left
    assert _head(session_factory, demo["rail_id"]).n == demo["n"]
    # saving after the removal: the stored bank is the two groups left
    r = client.post(f"/rails/{demo['rail_id']}/edit", data={**left, "csrf_token": csrf, "message": "no bulk"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text[:3000]
    head = _head(session_factory, demo["rail_id"])
    assert head.n == demo["n"] + 1 and [g["refs"] for g in head.document["load"]["bank"]] == ["C410-C433",
                                                                                               "C440-C447"]


BOM = ("Refdes,Value,Dielectric,Rated voltage,Qty,Tolerance,ESR\n"
       "\"C1, C2\",330u,aluminium electrolytic,25V,,20%,80 mOhm\n"
       "C10-C15,22uF,X7R,25 V,6,10%,4m\n"
       "C16,22uF,X7R,25 V,1,10%,4m\n")


def test_a_pasted_bom_fills_the_bank_for_review_and_saves_as_parsed(client, app, people, session_factory):
    demo = _demo(session_factory)
    csrf = _log_in_as(client, app, demo["dana"])
    values = FormValues(client.get(f"/rails/{demo['rail_id']}/edit").text).values
    r = client.post(f"/rails/{demo['rail_id']}/edit",
                    data={**values, "csrf_token": csrf, "bank_action": "import", "bom_text": BOM})
    assert r.status_code == 200 and 'id="bom-filled"' in r.text and "Filled 2 capacitor groups" in r.text
    filled = FormValues(r.text).values
    assert filled["load.bank[0].refs"] == "C1, C2" and filled["load.bank[1].count"] == "7"
    assert filled["load.bank[1].dielectric"] == "x7r" and "load.bank[2].refs" not in filled
    assert _head(session_factory, demo["rail_id"]).n == demo["n"]  # nothing saved by filling
    r = client.post(f"/rails/{demo['rail_id']}/edit", data={**filled, "csrf_token": csrf, "message": "from BOM"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text[:3000]
    stored = _head(session_factory, demo["rail_id"]).document["load"]["bank"]
    expected = normalize_document(rail_doc("X", load={"c_nom": None, "c_tol": 0, "esr": 0,
                                                      "bank": parse_bom(BOM).groups}))["load"]["bank"]
    assert stored == expected


def test_an_uploaded_bom_file_fills_the_bank_and_a_bad_one_names_line_and_column(client, app, people,
                                                                                  session_factory):
    demo = _demo(session_factory)
    csrf = _log_in_as(client, app, demo["dana"])
    values = FormValues(client.get(f"/rails/{demo['rail_id']}/edit").text).values
    data = {**values, "csrf_token": csrf, "bank_action": "import", "bom_text": ""}
    r = client.post(f"/rails/{demo['rail_id']}/edit", data=data,
                    files={"bom_file": ("caps.csv", BOM.encode("utf-8-sig"), "text/csv")})
    assert r.status_code == 200 and "Filled 2 capacitor groups" in r.text, r.text[:3000]
    bad = BOM.replace("C16,22uF,X7R,25 V,1", "C16,22uF,X7R,25 V,1.5")
    r = client.post(f"/rails/{demo['rail_id']}/edit", data={**data, "bom_text": bad})
    assert r.status_code == 200 and 'id="bom-errors"' in r.text
    assert "line 4, column count" in r.text and "Nothing was filled" in r.text
    kept = FormValues(r.text).values
    assert kept["load.bank[0].refs"] == "C401, C402"  # the bank's rows as they were


def test_the_board_report_and_its_pdf_list_the_bank_groups_and_notes(client, app, people, session_factory):
    demo = _demo(session_factory)
    bank = demo["result"]["bank"]
    _log_in_as(client, app, demo["dana"])
    page = client.get(f"/boards/{demo['board_id']}/report")
    assert page.status_code == 200
    table = page.text.split(f'id="rail-{demo["rail_id"]}-bank-table"', 1)[1].split("</table>", 1)[0]
    assert all(html.escape(g["refs"]) in table and fmt(g["c_at_v_nom"], "F") in table for g in bank["groups"])
    pdf = client.get(f"/boards/{demo['board_id']}/report.pdf")
    assert pdf.status_code == 200
    text = " ".join(" ".join(pdf_pages(pdf.content)).split())
    assert "Capacitor bank" in text and "C410-C433" in text and "X7R ceramic" in text
    assert fmt(bank["c_at_v_nom"], "F") in text
    # the text report: the bank where the load is shown, its notes with it (not again at the end)
    with session_factory() as s:
        doc = s.scalar(select(RailRevision).where(RailRevision.rail_id == demo["rail_id"])).document
    report = format_report(demo["result"], doc)
    load_line = next(line for line in report.splitlines() if line.startswith("Supply "))
    assert f"load capacitor bank {fmt(bank['c_total'], 'F')} nominal" in load_line
    for g in bank["groups"]:
        assert any(line.startswith(g["refs"]) and g["dielectric"] in line for line in report.splitlines())
    for note in bank["notes"]:
        assert report.count(note) == 1 and f"Bank note: {note}" in report
