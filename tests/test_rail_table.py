"""Many rails from one table (CSV or .xlsx) through the pages: the column set, the dry run with row-level
errors, nothing saved while a row is bad, the good rows only on request; products and boards made and
renamed in the pages. On SQLite and PostgreSQL."""

from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

import pytest
from openpyxl import Workbook
from sqlalchemy import func, select

from server.models import Board, Product, Rail, RailRevision
from server.rail_table import TableInvalid, columns, read_csv, read_xlsx, template_csv
from server.schemas.rail import normalize
from server.schemas.validation import parse_rail_document
from server.services import catalog, parts
from tests.factories import fet_doc, rail_doc
from tests.pages.helpers import actor_of, log_in
from tests.signoff_support import csrf_from

FET = fet_doc("Table N30")
HEADER = ["board", "name", "supply.v_min [V]", "supply.v_nom [V]", "Supply maximum", "load.c_nom [uF]",
          "load.c_tol [%]", "load.model", "load.i_nom", "switch.mode", "switch.i_limit [A]", "switch.i_limit_tol",
          "environment.t_ambient [degC]", "fet.name", "fet.vds_max [V]", "fet.rds_on", "fet.tj_max", "fet.rth_ja",
          "fet.id_pulse_max", "fet.zth", "fet.soa.curves"]


def _row(name: str, board: str = "Main", c_nom: object = 680, v_min: object = 11.4) -> list[object]:
    return [board, name, v_min, 12, "12.6 V", c_nom, 20, "resistive", "2 A", "current_limit", 4, "10 %", 55,
            FET["name"], 30, "5 mOhm", 150, 40, 200, json.dumps(FET["zth"]), json.dumps(FET["soa"]["curves"])]


def _csv(rows: list[list[object]], header: list[str] = HEADER) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue().encode()


def _xlsx(rows: list[list[object]], header: list[str] = HEADER, sheets: dict | None = None) -> bytes:
    book = Workbook()
    sheet = book.active
    sheet.title = "rails"
    sheet.append(header)
    for r in rows:
        sheet.append(r)
    for title, lines in (sheets or {}).items():
        extra = book.create_sheet(title)
        for line in lines:
            extra.append(line)
    data = io.BytesIO()
    book.save(data)
    return data.getvalue()


def _expected(name: str, c_nom: str = "680uF") -> dict:
    """The document the table's row describes, normalised as every other path normalises one."""
    doc = rail_doc(name, supply={"v_min": 11.4, "v_nom": 12.0, "v_max": 12.6},
                   load={"c_nom": c_nom, "c_tol": 0.2, "model": "resistive", "i_nom": 2.0},
                   switch={"mode": "current_limit", "i_limit": 4.0, "i_limit_tol": 0.1}, fet=FET)
    for section in ("supply", "path", "load"):
        doc[section] = {k: v for k, v in doc[section].items()
                        if k in ("v_min", "v_nom", "v_max", "c_nom", "c_tol", "model", "i_nom")}
    doc["switch"].pop("timer", None)
    return normalize(parse_rail_document(doc))


@pytest.fixture
def editor(client, app, people, session_factory):
    csrf = log_in(client, app, people.ids["designer"])
    with session_factory() as s:
        product = catalog.create_product(session=s, actor=actor_of(s, "designer"), name="Reef monitor")
        return {"csrf": csrf, "product_id": product.id}


def _upload(client, editor, filename: str, data: bytes, step: str = "preview"):
    page = client.get(f"/products/{editor['product_id']}/import")
    assert page.status_code == 200
    return client.post(f"/products/{editor['product_id']}/import",
                       data={"csrf_token": csrf_from(page.text), "step": step},
                       files={"table": (filename, data, "text/csv")}, follow_redirects=False)


def _rails(session_factory, product_id: int) -> dict[str, dict]:
    with session_factory() as s:
        rows = s.execute(select(Rail.name, RailRevision.document).join(Board, Board.id == Rail.board_id)
                         .join(RailRevision, (RailRevision.rail_id == Rail.id) & (RailRevision.n == Rail.head_n))
                         .where(Board.product_id == product_id)).all()
    return {name: doc for name, doc in rows}


def test_a_csv_with_one_bad_row_shows_that_rows_error_and_saves_nothing(client, editor, session_factory):
    table = _csv([_row("V_PUMP"), _row("V_LAMP", v_min="-3"), _row("V_VALVE", board="Aux", c_nom="1.5 mF")])
    preview = _upload(client, editor, "rails.csv", table)
    assert preview.status_code == 422
    html = preview.text
    assert "<strong>2 good</strong>, <strong>1 bad</strong>" in html
    bad = re.search(r'<tr data-row="3" class="row-bad">(.*?)</tr>', html, re.S).group(1)
    assert 'data-field="supply.v_min"' in bad and "Supply minimum (supply.v_min): must be above 0" in bad
    assert 'class="row-ok"' in re.search(r'<tr data-row="2"[^>]*>', html).group(0)
    assert "Aux rev A <span class=\"tag\">new</span>" in html
    assert "Import the 2 good rows only" in html and 'id="import-button"' not in html
    payload = re.search(r'name="payload" value="([^"]+)"', html).group(1)
    # asking to import everything while a row is bad stores nothing
    refused = client.post(f"/products/{editor['product_id']}/import",
                          data={"csrf_token": editor["csrf"], "step": "import", "payload": payload,
                                "filename": "rails.csv"}, follow_redirects=False)
    assert refused.status_code == 422 and "Nothing was imported" in refused.text
    assert _rails(session_factory, editor["product_id"]) == {}
    with session_factory() as s:
        assert s.scalar(select(func.count()).select_from(Board)) == 0
    # the good rows only, when the user chooses so
    done = client.post(f"/products/{editor['product_id']}/import",
                       data={"csrf_token": editor["csrf"], "step": "import_good", "payload": payload,
                             "filename": "rails.csv"}, follow_redirects=False)
    assert done.status_code == 303
    assert done.headers["location"].endswith("import?created=2&boards=2&skipped=1")
    assert "2 rails imported, 2 new boards; 1 bad row left out" in client.get(done.headers["location"]).text
    stored = _rails(session_factory, editor["product_id"])
    assert stored == {"V_PUMP": _expected("V_PUMP"), "V_VALVE": _expected("V_VALVE", "1.5mF")}


def test_the_same_table_as_a_workbook_imports_the_same_rails(client, editor, session_factory, people):
    rows = [_row("V_PUMP"), _row("V_VALVE", board="Aux", c_nom=1500)]
    assert _upload(client, editor, "rails.csv", _csv(rows), step="import").status_code == 303
    from_csv = _rails(session_factory, editor["product_id"])
    with session_factory() as s:
        other = catalog.create_product(session=s, actor=actor_of(s, "designer"), name="Reef monitor B").id
    second = {**editor, "product_id": other}
    preview = _upload(client, second, "rails.xlsx", _xlsx(rows))
    assert preview.status_code == 200 and "<strong>2 good</strong>, <strong>0 bad</strong>" in preview.text
    assert "read from the workbook" in preview.text
    assert _upload(client, second, "rails.xlsx", _xlsx(rows), step="import").status_code == 303
    assert _rails(session_factory, other) == from_csv
    assert set(from_csv) == {"V_PUMP", "V_VALVE"}


def test_list_fields_as_json_cells_or_as_sheets_of_their_own_read_the_same():
    """Foster stages and SOA curves: a JSON cell (CSV or workbook) or a sheet per field (workbook)."""
    header = [h for h in HEADER if h not in ("fet.zth", "fet.soa.curves")]
    flat = [v for h, v in zip(HEADER, _row("V_PUMP")) if h not in ("fet.zth", "fet.soa.curves")]
    zth = [["board", "rail", "r", "tau"]] + [["Main", "V_PUMP", s["r"], s["tau"]] for s in FET["zth"]]
    soa = [["board", "rail", "t_pulse", "v_ds", "i_d"]] + [
        ["Main", "V_PUMP", c["t_pulse"] or "DC", v, i] for c in FET["soa"]["curves"] for v, i in c["points"]]
    sheets = read_xlsx(_xlsx([flat], header, {"fet.zth": zth, "fet.soa.curves": soa})).rows[0]
    cells = read_csv(_csv([_row("V_PUMP")])).rows[0]
    workbook_cells = read_xlsx(_xlsx([_row("V_PUMP")])).rows[0]
    docs = [normalize(parse_rail_document(r.document)) for r in (sheets, cells, workbook_cells)]
    assert docs[0]["fet"] == docs[1]["fet"] == docs[2]["fet"] == normalize(parse_rail_document(rail_doc(fet=FET)))["fet"]
    assert len(docs[0]["fet"]["soa"]["curves"]) == 4 and docs[0]["fet"]["soa"]["curves"][3]["t_pulse"] is None
    assert docs[0] == docs[1]
    bad_json = read_csv(_csv([_row("V_PUMP")[:-1] + ["[{t_pulse: 1}"]])).rows[0]
    assert bad_json.errors[0]["field"] == "fet.soa.curves" and "is not JSON" in bad_json.errors[0]["message"]


def test_zth_points_as_a_json_cell_or_a_sheet_of_their_own_read_the_same():
    points = [["10us", 0.02], ["1ms", 0.3], [0.1, 1.1]]
    cell = read_csv(_csv([_row("V_PUMP") + [json.dumps(points)]], HEADER + ["fet.zth_points"])).rows[0]
    sheet = read_xlsx(_xlsx([_row("V_PUMP")], HEADER, {"fet.zth_points": [["board", "rail", "t", "zth"]] + [
        ["Main", "V_PUMP", t, z] for t, z in points]})).rows[0]
    docs = [normalize(parse_rail_document(r.document)) for r in (cell, sheet)]
    assert docs[0]["fet"]["zth_points"] == docs[1]["fet"]["zth_points"]
    assert docs[0]["fet"]["zth_points"] == [[pytest.approx(1e-5), 0.02], [pytest.approx(1e-3), 0.3], [0.1, 1.1]]
    assert "fet.zth_points" in columns()
    assert "zth_points" not in normalize(parse_rail_document(read_csv(_csv([_row("V_PUMP")])).rows[0].document))["fet"]


def test_the_column_set_units_titles_and_what_cannot_be_read():
    template = read_csv(template_csv()).rows[0]
    doc = normalize(parse_rail_document(template.document))
    assert doc["load"]["c_nom"] == pytest.approx(680e-6) and doc["supply"]["r_source"] == pytest.approx(0.02)
    assert doc["load"]["c_tol"] == pytest.approx(0.2) and doc["fet"]["rds_on"] == pytest.approx(5e-3)
    semicolons = read_csv("board;name;Load capacitance [mF];switch.timer.c\nMain;V_X;1,5;\nMain;V_Y;2;100nF\n")
    assert semicolons.rows[1].document["load"]["c_nom"] == "2 mF"
    assert semicolons.rows[0].errors == [{"field": "load.c_nom", "message": "'1,5' holds a comma: write decimals "
                                                                           "with a point (1.5) and no thousands "
                                                                           "separators"}]
    assert "c_nom" not in semicolons.rows[0].document["load"]
    assert "timer" not in semicolons.rows[0].document["switch"]
    assert semicolons.rows[1].document["switch"]["timer"] == {"c": "100nF"}
    with pytest.raises(TableInvalid) as no_board:
        read_csv("name,load.c_nom,load.colour\nV_X,1mF,red\n")
    assert any("load.colour" in p for p in no_board.value.problems)
    assert any("no 'board' column" in p for p in no_board.value.problems)
    with pytest.raises(TableInvalid):
        read_xlsx(b"PK\x03\x04 not a workbook")


def test_a_row_names_a_library_part_by_name_and_revision(client, editor, session_factory):
    with session_factory() as s:
        designer = actor_of(s, "designer")
        part = parts.create_part(session=s, actor=designer, document=FET)
        parts.save_part(session=s, actor=designer, part_id=part.part_id, document={**FET, "rds_on": "4 mOhm"},
                        base_n=1)
    header = ["board", "part", "part_revision"] + [h for h in HEADER[1:] if not h.startswith("fet.")]
    flat = [v for h, v in zip(HEADER, _row("x")) if not h.startswith("fet.")][2:]
    table = _csv([["Main", "Table N30", 1, "V_OLD", *flat], ["Main", "Table N30", "", "V_NEW", *flat],
                  ["Main", "No such part", "", "V_BAD", *flat]], header)
    preview = _upload(client, editor, "parts.csv", table)
    assert "Table N30 revision 1" in preview.text and "Table N30 revision 2" in preview.text
    row = re.search(r'<tr data-row="4" class="row-bad">(.*?)</tr>', preview.text, re.S).group(1)
    assert "Library part (part): &#39;No such part&#39; is not in the part library" in row
    assert "MOSFET (fet)" not in row and "No such part (not found)" in row
    payload = re.search(r'name="payload" value="([^"]+)"', preview.text).group(1)
    client.post(f"/products/{editor['product_id']}/import", data={"csrf_token": editor["csrf"], "step": "import_good",
                                                                   "payload": payload, "filename": "parts.csv"})
    stored = _rails(session_factory, editor["product_id"])
    assert stored["V_OLD"]["fet"]["rds_on"] == pytest.approx(5e-3) and stored["V_NEW"]["fet"]["rds_on"] == pytest.approx(4e-3)
    again = _upload(client, editor, "parts.csv", table)
    assert "has a rail named &#39;V_OLD&#39; already" in again.text or "has a rail named 'V_OLD' already" in again.text


def test_products_and_boards_are_made_and_renamed_in_the_pages(client, editor, session_factory, people):
    csrf = editor["csrf"]
    form = client.get("/products/new")
    assert form.status_code == 200 and 'name="team"' in form.text
    made = client.post("/products/new", data={"csrf_token": csrf, "name": "Kelp farm", "description": "sensors",
                                              "team": str(people.team_ids["alpha"])}, follow_redirects=False)
    assert made.status_code == 303
    product_id = int(made.headers["location"].rsplit("/", 1)[1])
    taken = client.post("/products/new", data={"csrf_token": csrf, "name": "Kelp farm",
                                               "team": str(people.team_ids["alpha"])})
    assert taken.status_code == 422 and 'id="f-name-error"' in taken.text and "exists already" in taken.text
    empty = client.post(f"/products/{product_id}/boards/new", data={"csrf_token": csrf, "name": "", "revision": "A"})
    assert empty.status_code == 422 and "is required" in empty.text
    board = client.post(f"/products/{product_id}/boards/new",
                        data={"csrf_token": csrf, "name": "Buoy", "revision": "B"}, follow_redirects=False)
    board_id = int(board.headers["location"].rsplit("/", 1)[1])
    assert client.post(f"/boards/{board_id}/edit", data={"csrf_token": csrf, "name": "Buoy power", "revision": "C",
                                                         "description": ""}).status_code == 200
    assert client.post(f"/products/{product_id}/edit", data={"csrf_token": csrf, "name": "Kelp farm II",
                                                             "description": "sensors"}).status_code == 200
    with session_factory() as s:
        assert s.get(Product, product_id).name == "Kelp farm II"
        b = s.get(Board, board_id)
        assert (b.name, b.revision, b.product_id) == ("Buoy power", "C", product_id)
    outsider = client.get(f"/products/{product_id}/edit", headers=people.headers("outsider"))
    assert outsider.status_code == 404


def test_the_readme_documents_every_column_of_the_set():
    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Importing a table of rails", 1)[1].split("\n## ", 1)[0]
    assert [c for c in columns() if f"`{c}`" not in section] == []


def test_a_foldback_curve_reads_the_same_from_a_json_cell_and_from_its_sheet():
    header = [h for h in HEADER] + ["switch.foldback"]
    cell = json.dumps([["2V", "4A"], [10, 1.5]])
    from_cell = read_csv(_csv([_row("V_PUMP") + [cell]], header)).rows[0]
    sheet = [["board", "rail", "v_ds", "i_limit"], ["Main", "V_PUMP", "2V", "4A"], ["Main", "V_PUMP", 10, 1.5]]
    from_sheet = read_xlsx(_xlsx([_row("V_PUMP")], HEADER, {"switch.foldback": sheet})).rows[0]
    docs = [normalize(parse_rail_document(r.document)) for r in (from_cell, from_sheet)]
    assert docs[0]["switch"]["foldback"] == docs[1]["switch"]["foldback"] == [[2.0, 4.0], [10.0, 1.5]]
    assert docs[0] == docs[1]


def _bank_document() -> dict:
    from server.demo import BOARDS, FETS  # the demo's GIMBAL_12V: a bank of three groups, one with a DC-bias curve
    doc, part = next((d, p) for _, _, rails in BOARDS for d, p in rails if d["name"] == "GIMBAL_12V")
    bank = [dict(g) for g in doc["load"]["bank"]]
    bank[2] |= {"tempco": -0.0015, "derating": [0.4, 0.8]}  # every optional key of a group once
    return normalize(parse_rail_document({**doc, "fet": FETS[part], "load": {**doc["load"], "bank": bank}}))


def test_a_bank_rail_goes_out_as_csv_and_comes_back_the_same():
    from server.rail_table import write_csv
    banked, plain = _bank_document(), normalize(parse_rail_document(rail_doc("VOUT_PLAIN")))
    text = write_csv([{"board": "Sensor head", "board_revision": "B", "document": banked},
                      {"board": "Main", "document": plain}])
    header = next(csv.reader(io.StringIO(text)))
    assert "load.bank" in header and "load.c_nom" in header  # one rail has a bank, the other one capacitance
    table = read_csv(text.encode())
    assert [r.errors for r in table.rows] == [[], []]
    assert (table.rows[0].board, table.rows[0].board_revision) == ("Sensor head", "B")
    back = [normalize(parse_rail_document(r.document)) for r in table.rows]
    assert back[0] == banked and back[1] == plain
    assert back[0]["load"]["bank"][1]["dc_bias"] == banked["load"]["bank"][1]["dc_bias"]
    assert "c_nom" not in back[0]["load"]


def test_a_bank_reads_the_same_from_a_json_cell_and_from_its_sheet():
    bank = [{"refs": "C1, C2", "count": 2, "c_nom": "330uF", "c_tol": "20%", "dielectric": "electrolytic",
             "v_rated": "25V", "esr": "80 mOhm"},
            {"refs": "C10-C17", "count": 8, "c_nom": "22uF", "dielectric": "x7r", "v_rated": 25,
             "dc_bias": [[0, 1], [8, 0.62], [16, 0.36]]}]
    header = [h for h in HEADER if not h.startswith("load.c_")] + ["load.bank"]
    row = [c for h, c in zip(HEADER, _row("V_BANK")) if not h.startswith("load.c_")]
    from_cell = read_csv(_csv([row + [json.dumps(bank)]], header)).rows[0]
    sheet = [["board", "rail", "refs", "count", "c_nom", "c_tol", "dielectric", "v_rated", "esr", "dc_bias"],
             ["Main", "V_BANK", "C1, C2", 2, "330uF", "20%", "electrolytic", "25V", "80 mOhm", None],
             ["Main", "V_BANK", "C10-C17", 8, "22uF", None, "x7r", 25, None, json.dumps([[0, 1], [8, 0.62], [16, 0.36]])]]
    from_sheet = read_xlsx(_xlsx([row], header[:-1], {"load.bank": sheet})).rows[0]
    docs = [normalize(parse_rail_document(r.document)) for r in (from_cell, from_sheet)]
    assert docs[0] == docs[1]
    assert [g["count"] for g in docs[0]["load"]["bank"]] == [2, 8] and docs[0]["load"]["bank"][0]["esr"] == 0.08
    # a bank on its sheet beside a load capacitance in the table is refused on the bank
    both = read_xlsx(_xlsx([_row("V_BANK")], HEADER, {"load.bank": sheet})).rows[0]
    assert any(e["field"] == "load.bank" and "load.c_nom" in e["message"] for e in both.errors)
