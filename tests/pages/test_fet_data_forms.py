"""R_DS(on) maximum, R_DS(on) table and parallel FETs in the forms, the canonical document and the rail table."""

from __future__ import annotations

import copy
import json

from server.pages.forms import document_from_form, form_from_document
from server.pages.part_forms import RDS_CURVE_FIELD, document_from_part_form, part_errors, part_form_from_document
from server.rail_table import read_csv
from server.schemas.rail import Fet, RailDocument, document_sha256, normalize, part_data, part_document
from server.schemas.validation import parse_fet
from tests.analysis.rail_documents import FET_40V, efuse_12v


def test_a_document_without_the_new_fields_keeps_its_canonical_form_and_hash():
    doc = efuse_12v()
    plain = normalize(RailDocument.model_validate(copy.deepcopy(doc)))
    assert not {"rds_on_max", "rds_on_curve", "count"} & set(plain["fet"])
    doc["fet"]["count"] = 1  # the default written out: the same document
    assert document_sha256(normalize(RailDocument.model_validate(doc))) == document_sha256(plain)
    doc["fet"].update(count=2, rds_on_max="2.6 mOhm", rds_on_curve=[[25, 1], ["100", 1.4]])
    given = normalize(RailDocument.model_validate(doc))
    assert given["fet"]["count"] == 2 and given["fet"]["rds_on_max"] == 2.6e-3
    assert given["fet"]["rds_on_curve"] == [[25.0, 1.0], [100.0, 1.4]]


def test_a_part_document_holds_no_parallel_count():
    fet = {**copy.deepcopy(FET_40V), "count": 3, "rds_on_max": 2.5e-3}
    doc = part_document(Fet.model_validate(fet))
    assert "count" not in doc and doc["rds_on_max"] == 2.5e-3
    assert part_data({**doc, "count": 2}) == doc


def test_part_form_round_trips_the_maximum_and_the_table():
    fet = {**copy.deepcopy(FET_40V), "rds_on_max": 2.6e-3,
           "rds_on_curve": [[-55.0, 0.6], [25.0, 1.0], [100.0, 1.42], [175.0, 1.9]]}
    form = part_form_from_document(fet)
    assert form[RDS_CURVE_FIELD].splitlines() == ["-55, 0.6", "25, 1", "100, 1.42", "175, 1.9"]
    doc, errors, _ = document_from_part_form(form)
    assert errors == {}
    read = part_document(parse_fet(doc))
    assert read["rds_on_curve"] == fet["rds_on_curve"] and read["rds_on_max"] == 2.6e-3
    # a blank table leaves the field out: the linear coefficient
    form[RDS_CURVE_FIELD] = ""
    doc, _, _ = document_from_part_form(form)
    assert "rds_on_curve" not in doc


def test_part_form_places_a_table_error_on_its_line():
    form = part_form_from_document(copy.deepcopy(FET_40V))
    form[RDS_CURVE_FIELD] = "T_j, ratio\n25, 1\n20, 1.1"
    _, _, mapping = document_from_part_form(form)
    errors, other = part_errors([{"field": "document.rds_on_curve[1]", "message": "T_j must increase"}], mapping)
    assert errors == {RDS_CURVE_FIELD: "line 3: T_j must increase"} and other == []


def test_rail_form_carries_the_parallel_count_beside_the_fet():
    doc = efuse_12v()
    doc["fet"]["count"] = 2
    form = form_from_document(doc)
    assert form["fet.count"] == "2"
    # the rail's own FET stored with count 3: the form's count wins, a blank one means one FET
    stored = {**copy.deepcopy(FET_40V), "count": 3}
    assert document_from_form(form, stored)["fet"]["count"] == "2"
    form["fet.count"] = ""
    assert "count" not in document_from_form(form, stored)["fet"]
    # with a library part the form gives only the count
    assert document_from_form({**form, "fet.count": "2"})["fet"] == {"count": "2"}


def test_rail_table_reads_the_new_columns():
    curve = [[25, 1.0], [100, 1.42], [150, 1.72]]
    text = ("board,name,fet.rds_on_max [mOhm],fet.count,fet.rds_on_curve,rules.linear_share\n"
            f"Main,VOUT,2.6,2,\"{json.dumps(curve).replace(chr(34), chr(34) * 2)}\",0.7\n")
    row = read_csv(text).rows[0]
    assert row.errors == []
    assert row.document["fet"] == {"rds_on_max": "2.6 mOhm", "count": "2", "rds_on_curve": curve}
    assert row.document["rules"]["linear_share"] == "0.7"
