"""The rail and part forms: documents from fields, exact round trips, errors by field, titles first.

Labels are the titles of the one table of words (server.analysis.words.FIELD_TITLES); the
JSON path is a small secondary hint beside each.
"""

from __future__ import annotations

import re

import pytest

from server.analysis.document import DEFAULTS
from server.analysis.words import FIELD_TITLES
from server.pages.display import input_sections
from server.pages.forms import (RAIL_SECTIONS, compare_rows, document_from_form, form_from_document, form_value,
                                place_errors, rail_fields)
from server.pages.part_forms import (PART_FIELDS, document_from_part_form, parse_pairs, part_errors,
                                     part_field_titles, part_form_from_document)
from server.services.errors import Invalid
from server.services.parts import normalize_fet
from server.services.rails import normalize_document
from server.templating import templates
from tests.factories import fet_doc, rail_doc
from tests.pages.helpers import log_in, seed_board


@pytest.mark.parametrize("value, kind, text", [
    (680e-6, "F", "680 \u00b5F"), (0.0052, "ohm", "5.2 m\u03a9"), (1.0153e-3, "F", "1.0153 mF"),
    (55.0, "degC", "55.0 \u00b0C"), (0.2, "fraction", "20 %"), (2000.0, "V/s", "2 V/ms"),
    (1234.5, "V/s", "1.2345 V/ms"),
    (25.0, "K", "25"), (1.5, "ratio", "1.5"), (None, "A", ""),
])
def test_form_values_read_back_to_exactly_the_stored_number(value, kind, text):
    assert form_value(value, kind) == text


def test_every_field_of_a_stored_document_survives_the_form_unchanged():
    doc = normalize_document(rail_doc(rules={"soa_margin": 2.0, "tj_headroom": 30.0},
                                      supply={"uvlo_filter": "4.7 us", "c_in": "47 uF"},
                                      switch={"mode": "slew", "dvdt": "5 V/ms"},
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
    assert doc["load"]["c_nom"] == "680 \u00b5F"  # passed on as typed; the schema parses it


def test_schema_errors_land_beside_their_fields():
    form = form_from_document(normalize_document(rail_doc()))
    form["load.c_nom"] = "680 uQ"
    form["supply.v_min"] = "13 V"
    with pytest.raises(Invalid) as caught:
        normalize_document(document_from_form(form, fet_doc()))
    errors, other = place_errors(caught.value.details, [f.name for f in rail_fields()])
    assert "unknown or wrong unit" in errors["load.c_nom"] and "capacitance" in errors["load.c_nom"]
    assert errors["supply.v_min"] == "must not be above the supply maximum (12.6 V)"
    assert other == []


def test_fet_errors_go_to_the_part_choice_and_unknown_paths_to_the_summary():
    errors, other = place_errors([{"field": "document.fet.tj_max", "message": "too low"},
                                  {"field": "document.mystery", "message": "odd"}],
                                 ["load.c_nom", "part"], aliases={"fet": "part"})
    assert errors == {"part": "MOSFET maximum junction temperature (fet.tj_max): too low"}
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
    form = part_form_from_document(None)  # four empty slots: 100 µs, 1 ms, 10 ms, DC
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


def test_rail_form_labels_are_the_titles_of_the_table_of_words():
    fields = {f.name: f for f in rail_fields()}
    for f in fields.values():
        assert f.label == FIELD_TITLES[f.name].title
        assert f.kind == FIELD_TITLES[f.name].kind
    assert {"supply.c_in", "supply.uvlo_filter", "environment.t_ambient"} <= set(fields)
    deglitch = fields["supply.uvlo_filter"]
    assert deglitch.label == "UVLO deglitch time (from the upstream part's datasheet)"
    assert deglitch.placeholder == "" and "blank: none" in deglitch.hint  # no default of our own
    assert fields["environment.t_ambient"].required  # no default ambient either
    assert [title for title, _, _ in RAIL_SECTIONS][1:3] == ["Supply", "Path (traces, connector, sense resistor)"]


def test_placeholders_say_the_defaults_of_the_analysis_package():
    fields = {f.name: f for f in rail_fields()}
    assert DEFAULTS["supply.r_source"] == 0.0 and fields["supply.r_source"].placeholder == "0 \u03a9 if blank"
    assert fields["load.c_tol"].placeholder == "0 % if blank"
    assert fields["switch.dvdt"].placeholder == "e.g. 5 V/ms"
    part = {f.name: f for f in PART_FIELDS}
    assert part["rds_on_alpha"].placeholder == "0.5 %/K if blank"  # DEFAULTS["fet.rds_on_alpha"] = 0.005
    assert part["soa.t_case"].placeholder == "25.0 \u00b0C if blank"
    assert part["tj_max"].label == FIELD_TITLES["fet.tj_max"].title


def test_slew_rates_are_shown_and_taken_in_volts_per_millisecond():
    doc = normalize_document(rail_doc(switch={"mode": "slew", "dvdt": "5 V/ms"}))
    assert doc["switch"]["dvdt"] == pytest.approx(5000.0)
    assert form_from_document(doc)["switch.dvdt"] == "5 V/ms"


def _field_html(f, errors=None) -> str:
    macro = templates.env.from_string('{% from "_macros.html" import field %}{{ field(f, values, errors) }}')
    return macro.render(f=f, values={}, errors=errors or {})


def test_a_field_renders_its_title_first_and_its_path_as_a_small_hint():
    f = {f.name: f for f in rail_fields()}["supply.v_min"]
    html = _field_html(f)
    label = re.search(r'<label for="f-supply-v-min">(.*?)</label>', html, re.S).group(1)
    assert label.startswith("Supply minimum") and "supply.v_min" not in label
    hint = re.search(r'<code class="path-hint"[^>]*>([^<]*)</code>', html)
    assert hint and hint.group(1) == "supply.v_min"
    assert html.index("Supply minimum") < html.index('class="path-hint"')


def test_the_error_summary_names_fields_by_title():
    macro = templates.env.from_string('{% from "_macros.html" import error_summary %}'
                                      '{{ error_summary(errors, [], labels, titles) }}')
    html = macro.render(errors={"supply.v_min": "must be above 0 V"}, labels={"supply.v_min": "f-supply-v-min"},
                        titles={"supply.v_min": "Supply minimum"})
    assert '<a href="#f-supply-v-min">Supply minimum</a> <code class="path-hint"' in html
    assert ": must be above 0 V" in html


def test_part_form_titles_number_curves_for_people():
    titles = part_field_titles([0, 2])
    assert titles["soa.curves[2].t_pulse"] == "MOSFET SOA curve 3 pulse width"
    assert titles["zth"] == FIELD_TITLES["fet.zth"].title


def test_rail_page_inputs_are_titled_from_the_table_and_list_c_in():
    doc = normalize_document(rail_doc(supply={"c_in": "47 uF", "uvlo_filter": "10 us"},
                                      switch={"mode": "slew", "dvdt": "5 V/ms"}))
    sections = {s["title"]: dict(s["items"]) for s in input_sections(doc)}
    supply = sections["Supply"]
    assert supply["Input capacitance at the switch"] == "47 \u00b5F"
    assert supply["UVLO deglitch time (from the upstream part's datasheet)"] == "10 \u00b5s"
    assert sections["Switch"]["Output slew rate"] == "5 V/ms"
    assert sections["Environment"]["Worst-case high ambient temperature"] == "55.0 \u00b0C"
    titles = {t for items in sections.values() for t in items}
    assert titles <= {w.title for w in FIELD_TITLES.values()}


def test_the_forms_over_http_show_titles_with_paths_as_hints(client, app, people, session_factory):
    seeded = seed_board(session_factory, analysed=0, unanalysed=1)
    log_in(client, app, people.ids["designer"])
    page = client.get(f"/boards/{seeded['board_id']}/rails/new").text
    for path in ("supply.v_min", "supply.c_in", "supply.uvlo_filter", "switch.dvdt", "rules.timer_margin"):
        html_id = "f-" + path.replace(".", "-").replace("_", "-")
        assert re.search(rf'<label for="{html_id}">{re.escape(FIELD_TITLES[path].title)}', page.replace("&#39;", "'"))
        assert f'<code class="path-hint" title="JSON path in the document">{path}</code>' in page
    part_page = client.get("/parts/new").text
    assert re.search(r'<label for="f-rds-on-alpha">R_DS\(on\) temperature coefficient', part_page)
    assert '<code class="path-hint" title="JSON path in the document">rds_on_alpha</code>' in part_page
    assert "MOSFET SOA curve 1 pulse width" in part_page


def test_foldback_points_and_the_gate_drive_survive_the_form_unchanged():
    doc = normalize_document(rail_doc(switch={"mode": "current_limit", "i_limit": "4 A",
                                              "foldback": [["2 V", "4 A"], ["10 V", "1.5 A"], ["12.6 V", "1.2 A"]],
                                              "gate": {"drive": "voltage", "v_drive": "22 V", "r_gate": "100 kOhm"}},
                                      fet=fet_doc(gate={"v_th": 2.6, "k": 50.0, "c_iss": 3.1e-9, "c_rss": 1.6e-10})))
    form = form_from_document(doc)
    assert form["switch.foldback"].splitlines() == ["2 V, 4 A", "10 V, 1.5 A", "12.6 V, 1.2 A"]
    assert form["switch.gate.r_gate"] == "100 k\u03a9"
    again = normalize_document(document_from_form(form, doc["fet"]))
    assert again == doc
    # blank gate fields and a blank curve leave both out
    for name in ("switch.foldback", "switch.gate.drive", "switch.gate.v_drive", "switch.gate.r_gate",
                 "switch.gate.c_ext"):
        form[name] = ""
    plain = document_from_form(form, doc["fet"])
    assert "foldback" not in plain["switch"] and "gate" not in plain["switch"]


def test_a_part_form_carries_the_gate_data():
    fet = normalize_fet(fet_doc(gate={"v_th": "2.6 V", "g_fs": "45 S", "i_gfs": "20 A", "c_iss": "3.1 nF",
                                      "c_rss": "160 pF"}))
    form = part_form_from_document(fet)
    assert form["gate.v_th"] == "2.6 V" and form["gate.k"] == ""
    doc, errors, _ = document_from_part_form(form)
    assert errors == {} and normalize_fet(doc) == fet


def test_the_rail_page_shows_the_foldback_curve_the_gate_drive_and_the_largest_load(client, app, people,
                                                                                  session_factory):
    from server.services import catalog, rail_edits
    from tests.pages.helpers import actor_of, analyse_now
    with session_factory() as s:
        designer = actor_of(s, "designer")
        product = catalog.create_product(session=s, actor=designer, name="Tideline buoy")
        board = catalog.create_board(session=s, actor=designer, product_id=product.id, name="Power", revision="C")
        doc = rail_doc("VOUT_FOLD", switch={"mode": "current_limit", "i_limit": "4 A", "timer": None,
                                            "foldback": [["2 V", "4 A"], ["12 V", "1.5 A"]],
                                            "gate": {"drive": "current", "i_gate": "10 uA", "c_ext": "10 nF"}},
                       fet=fet_doc(gate={"v_th": 3.0, "k": 40.0, "c_iss": 3e-9, "c_rss": 2e-10}))
        rail, rev = rail_edits.create_rail(session=s, actor=designer, board_id=board.id, document=doc,
                                           message="first entry")
        analyse_now(s, rev)
        rail_id = rail.id
    log_in(client, app, people.ids["designer"])
    page = client.get(f"/rails/{rail_id}").text
    assert "Foldback current limit (nominal)" in page  # the trace over the SOA curves
    assert "Largest load that still starts (foldback)" in page
    assert "Gate drive current" in page and "MOSFET gate threshold voltage" in page
