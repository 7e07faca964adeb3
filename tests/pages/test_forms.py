"""The rail and part forms as pure functions: documents from fields, exact round trips, errors by field."""

from __future__ import annotations

import pytest

from server.pages.forms import (compare_rows, document_from_form, form_from_document, form_value, place_errors,
                                rail_fields)
from server.pages.part_forms import document_from_part_form, parse_pairs, part_errors, part_form_from_document
from server.services.errors import Invalid
from server.services.parts import normalize_fet
from server.services.rails import normalize_document
from tests.factories import fet_doc, rail_doc


@pytest.mark.parametrize("value, kind, text", [
    (680e-6, "F", "680 uF"), (0.0052, "ohm", "5.2 m\u03a9"), (1.0153e-3, "F", "1.0153 mF"), (55.0, "degC", "55.0 \u00b0C"),
    (0.2, "fraction", "20 %"), (2000.0, "V/s", "2 kV/s"), (25.0, "K", "25"), (1.5, "ratio", "1.5"), (None, "A", ""),
])
def test_form_values_read_back_to_exactly_the_stored_number(value, kind, text):
    assert form_value(value, kind) == text


def test_every_field_of_a_stored_document_survives_the_form_unchanged():
    doc = normalize_document(rail_doc(rules={"soa_margin": 2.0, "tj_headroom": 30.0},
                                      supply={"uvlo_filter": "4.7 us"},
                                      fet=fet_doc(rds_on_alpha=0.0045)))
    again = normalize_document(document_from_form(form_from_document(doc), doc["fet"]))
    assert again == doc


def test_blank_optional_fields_and_an_empty_timer_are_left_out():
    form = form_from_document(normalize_document(rail_doc()))
    for f in rail_fields():
        if f.name.startswith("switch.timer.") or f.name == "supply.i_max":
            form[f.name] = ""
    doc = document_from_form(form)
    assert "timer" not in doc["switch"] and "i_max" not in doc["supply"]
    assert doc["load"]["c_nom"] == "680 uF"  # passed on as typed; the schema parses it


def test_schema_errors_land_beside_their_fields():
    form = form_from_document(normalize_document(rail_doc()))
    form["load.c_nom"] = "680 uQ"
    form["supply.v_min"] = "13 V"
    with pytest.raises(Invalid) as caught:
        normalize_document(document_from_form(form, fet_doc()))
    errors, other = place_errors(caught.value.details, [f.name for f in rail_fields()])
    assert "unknown or wrong unit" in errors["load.c_nom"] and "capacitance" in errors["load.c_nom"]
    assert "v_min" in errors["supply.v_min"] and "v_max" in errors["supply.v_min"]
    assert other == []


def test_fet_errors_go_to_the_part_choice_and_unknown_paths_to_the_summary():
    errors, other = place_errors([{"field": "document.fet.tj_max", "message": "too low"},
                                  {"field": "document.mystery", "message": "odd"}],
                                 ["load.c_nom", "part"], aliases={"fet": "part"})
    assert errors == {"part": "fet.tj_max: too low"}
    assert other == ["mystery: odd"]


def test_the_conflict_comparison_marks_only_real_differences():
    mine = {"load.c_nom": "1 mF", "supply.v_nom": "12 V"}
    theirs = {"load.c_nom": "1000uF", "supply.v_nom": "24 V"}
    rows = {r["name"]: r for r in compare_rows(mine, theirs)}
    assert rows["load.c_nom"]["differs"] is False  # the same capacitance, written differently
    assert rows["supply.v_nom"]["differs"] is True


def test_pasted_csv_pairs_skip_header_and_comments_and_report_bad_lines():
    pairs, problems = parse_pairs("V_ds;I_d\n# measured\n0.5; 100\n5\t100\n30 12\n1, 2, 3\n")
    assert [(a, b) for a, b, _ in pairs] == [("0.5", "100"), ("5", "100"), ("30", "12")]
    assert problems == ["line 6: expected two values, got 3 ('1, 2, 3')"]


def test_a_part_form_makes_the_fet_document_and_reads_back():
    fet = normalize_fet(fet_doc())
    form = part_form_from_document(fet)
    doc, errors, _ = document_from_part_form(form)
    assert errors == {}
    assert normalize_fet(doc) == fet


def test_part_errors_name_the_form_curve_and_line():
    form = part_form_from_document(None)  # four empty slots: 100 us, 1 ms, 10 ms, DC
    form.update({"name": "X", "vds_max": "30 V", "rds_on": "5 mOhm", "tj_max": "150", "rth_ja": "40",
                 "zth": "1, 1 ms", "soa.curves[0].points": "1, 10\n0.5, 5", "soa.curves[2].t_pulse": "",
                 "soa.curves[3].points": "1, 3\n10, 1"})
    doc, errors, mapping = document_from_part_form(form)
    assert len(doc["soa"]["curves"]) == 3  # empty slot 3 (form index 2) dropped, 1 ms kept empty
    with pytest.raises(Invalid) as caught:
        normalize_fet(doc)
    by_field, _ = part_errors(caught.value.details, mapping)
    assert by_field["soa.curves[0].points"].startswith("line 2:")
    assert "soa.curves[1].points" in by_field  # the 1 ms curve has no points
