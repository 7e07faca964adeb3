"""Numbers, units, names and list lengths of a rail document: refused where computation breaks, with the
field and the bound named, the same way by the API, the command line and the import; implausible but
computable values accepted with a warning. Nothing refused is stored."""

from __future__ import annotations

import html
import json
import re

import pytest

from server.__main__ import EXIT_BAD_INPUT, main
from server.analysis.bounds import (MAX_FOSTER_STAGES, MAX_SOA_CURVES, MAX_SOA_POINTS, NUMBER_LARGEST,
                                    plausibility_warnings)
from server.bundle import read_rail_file
from server.rail_table import read_csv
from server.schemas.rail import normalize
from server.schemas.validation import DocumentInvalid, parse_rail_document
from tests.factories import rail_doc
from tests.pages.helpers import log_in


def _many_points(n: int) -> list[list[float]]:
    return [[0.5 + k * 0.01, 150.0] for k in range(n)]


def _set(path: str, value):
    def edit(doc):
        *heads, last = path.split(".")
        node = doc
        for h in heads:
            node = node[h]
        node[last] = value
    return edit


REFUSED = [
    ("load.c_nom", _set("load.c_nom", 10**400), "too large: its magnitude must be at most 1e+30"),
    ("load.c_nom", _set("load.c_nom", -10**400), "too large"),
    ("load.c_nom", _set("load.c_nom", 1e31), "too large: its magnitude must be at most 1e+30"),
    ("load.c_nom", _set("load.c_nom", "1e400 F"), "finite"),
    ("supply.v_max", _set("supply.v_max", "-inf"), "finite"),
    ("switch.timer.i_charge", _set("switch.timer.i_charge", 1e25), "at most 1e+20"),
    ("switch.timer.c", _set("switch.timer.c", 1e-40), "at least 1e-30"),
    ("load.c_nom", _set("load.c_nom", "5 furlongs"), "unknown or wrong unit 'furlongs'"),
    ("load.c_nom", _set("load.c_nom", "1,5 uF"), "comma"),
    ("supply.v_min", _set("supply.v_min", "11,4"), "comma"),
    ("name", _set("name", "VOUT\x0012V"), "control characters (found U+0000"),
    ("fet.name", _set("fet.name", "N30\x07"), "control characters (found U+0007"),
    ("name", _set("name", "VOUT\n12V"), "control characters"),
    ("fet.zth", lambda d: d["fet"].update(zth=[{"r": 1.0, "tau": 0.01 * (k + 1)}
                                               for k in range(MAX_FOSTER_STAGES + 1)]),
     f"at most {MAX_FOSTER_STAGES} are read"),
    ("fet.soa.curves[0].points", lambda d: d["fet"]["soa"]["curves"][0].update(points=_many_points(MAX_SOA_POINTS + 1)),
     f"at most {MAX_SOA_POINTS} are read"),
    ("fet.soa.curves", lambda d: d["fet"]["soa"].update(
        curves=[{"t_pulse": 1e-5 * (k + 1), "points": [[0.5, 100.0], [30.0, 10.0]]} for k in range(MAX_SOA_CURVES + 1)]),
     f"at most {MAX_SOA_CURVES} are read"),
    ("fet.soa.curves[1].points[0]", lambda d: d["fet"]["soa"]["curves"][1].update(points=[[0.5, 1e40], [5, 5]]),
     "finite numbers of at most 1e+30"),
]


def _bad(edit) -> dict:
    doc = rail_doc()
    edit(doc)
    return doc


@pytest.mark.parametrize("field,edit,words", REFUSED, ids=[f"{f}-{w[:20]}" for f, _, w in REFUSED])
def test_the_validator_refuses_naming_the_field_and_the_bound(field, edit, words):
    with pytest.raises(DocumentInvalid) as exc:
        parse_rail_document(_bad(edit))
    matching = [e for e in exc.value.errors if e.field == field]
    assert matching, exc.value.errors
    assert any(words in e.message for e in matching), matching


@pytest.fixture
def board(client, people) -> dict:
    h = people.headers("designer")
    product = client.post("/api/v1/products", json={"name": "Bounds"}, headers=h).json()
    return client.post("/api/v1/boards", json={"product_id": product["id"], "name": "Main"}, headers=h).json()


def _rail_count(client, people) -> int:
    return client.get("/api/v1/rails", headers=people.headers("viewer")).json()["total"]


@pytest.mark.parametrize("field,edit,words", REFUSED[::3], ids=[f"{f}-{w[:20]}" for f, _, w in REFUSED[::3]])
def test_the_api_refuses_the_same_with_422_and_stores_nothing(client, people, board, field, edit, words):
    before = _rail_count(client, people)
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": _bad(edit)},
                    headers=people.headers("designer"))
    assert r.status_code == 422, r.text
    details = r.json()["error"]["details"]
    assert any(d["field"] == f"document.{field}" and words in d["message"] for d in details), details
    assert _rail_count(client, people) == before


def test_a_huge_integer_in_a_saved_revision_is_refused_and_the_head_stays(client, people, board):
    h = people.headers("designer")
    rail = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc()}, headers=h).json()
    bad = _bad(_set("load.c_nom", 10**400))
    r = client.put(f"/api/v1/rails/{rail['id']}", json={"document": bad, "base_revision": 1}, headers=h)
    assert r.status_code == 422 and "load.c_nom" in r.text
    assert client.get(f"/api/v1/rails/{rail['id']}/revisions", headers=h).json()["total"] == 1


def test_an_implausible_but_computable_value_is_accepted_with_a_warning(client, people, board):
    doc = rail_doc(load={"c_nom": 1e30})
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": doc},
                    headers=people.headers("designer"))
    assert r.status_code == 201, r.text
    warnings = r.json()["warnings"]
    assert [w["field"] for w in warnings] == ["load.c_nom"]
    assert "1e30 F is outside the usual range" in warnings[0]["message"]
    plain = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc("VOUT_B")},
                        headers=people.headers("designer"))
    assert plain.status_code == 201 and plain.json()["warnings"] == []
    again = client.get(f"/api/v1/rails/{r.json()['id']}", headers=people.headers("viewer")).json()
    assert again["warnings"] == warnings


def test_the_largest_computable_value_is_read_and_warned_about():
    doc = normalize(parse_rail_document(rail_doc(load={"c_nom": NUMBER_LARGEST})))
    assert doc["load"]["c_nom"] == NUMBER_LARGEST
    assert [path for path, _ in plausibility_warnings(doc)] == ["load.c_nom"]


def test_the_command_line_refuses_the_same_naming_the_field(tmp_path, capsys):
    path = tmp_path / "rail.json"
    path.write_text(json.dumps(_bad(_set("load.c_nom", 10**400))))
    assert main(["analyze", str(path)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "load.c_nom" in err and "at most 1e+30" in err


def test_the_table_import_refuses_the_same():
    table = read_csv("board,name,load.c_nom,fet.name\nMain,V_X,1e40 F,N\x00X\n")
    row = table.rows[0]
    with pytest.raises(DocumentInvalid) as exc:
        parse_rail_document(row.document)
    fields = {e.field: e.message for e in exc.value.errors}
    assert "at most 1e+30" in fields["load.c_nom"]
    assert "control characters" in fields["fet.name"]


def test_the_rail_form_shows_the_warning_beside_its_field(client, app, people, board):
    log_in(client, app, people.ids["designer"])
    r = client.post("/api/v1/rails", json={"board_id": board["id"], "document": rail_doc(load={"c_nom": 1e30})},
                    headers=people.headers("designer"))
    assert r.status_code == 201
    page = client.get(f"/rails/{r.json()['id']}/edit")
    assert page.status_code == 200
    warning = re.search(r'<span class="field-warning" id="([^"]+)-warning">([^<]+)</span>', page.text)
    assert warning is not None and "c_nom" in warning.group(1).replace("-", "_")
    assert "1e30 F is outside the usual range" in html.unescape(warning.group(2))
    assert page.text.count('class="field-warning"') == 1


def test_a_bundle_with_a_control_character_in_a_board_name_is_refused_before_anything_is_planned():
    bundle = {"schema": "railsign.bundle/2", "product": {"name": "P"},
              "boards": [{"name": "Main\x00", "rails": [{"document": rail_doc()}]}]}
    with pytest.raises(DocumentInvalid) as exc:
        read_rail_file(bundle)
    assert any("control characters" in e.message and "boards[0].name" in e.field for e in exc.value.errors), \
        exc.value.errors
