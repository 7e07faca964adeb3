"""One validator: the web schema and the analysis reader refuse the same documents on the same field.

The schema (`server.schemas.rail` through `server.schemas.validation`) checks shape and
units, then runs the analysis core's reader (`server.analysis.document`), the one home of
the physics rules, defaults and bounds. A table of bad documents (SI numbers: units are the
schema's own job) goes through both; designs that cannot work go through both and are not
refused.
"""

from __future__ import annotations

import copy

import pytest

from server.analysis import DocumentError
from server.analysis.document import BOUNDS, DEFAULTS, OPTIONAL, read_fet, read_rail
from server.analysis.words import FIELD_TITLES
from server.schemas.rail import RailDocument, normalize
from server.schemas.validation import DocumentInvalid, parse_fet, parse_rail_document

from .factories import fet_doc, rail_doc


def _si_doc() -> dict:
    """The factory rail in SI numbers, every default filled in (12 V, 680 µF, 4 A limit, 55 °C)."""
    return normalize(parse_rail_document(rail_doc()))


def _set(doc: dict, path: str, value) -> dict:
    *heads, last = path.replace("[", ".[").split(".")
    node = doc
    for h in heads:
        node = node[int(h[1:-1])] if h.startswith("[") else node[h]
    key = int(last[1:-1]) if last.startswith("[") else last
    if value is _DELETE:
        del node[key]
    else:
        node[key] = value
    return doc


class _Delete:
    def __repr__(self) -> str:
        return "<deleted>"


_DELETE = _Delete()
_CURVES = "fet.soa.curves"

# (what is changed, the new value, the field both validators name)
BAD = [
    ("supply.v_min", 0.0, "supply.v_min"),
    ("supply.v_min", -1.0, "supply.v_min"),
    ("supply.v_min", 13.0, "supply.v_min"),                     # above v_max
    ("supply.v_nom", 12.7, "supply.v_nom"),                     # outside v_min .. v_max
    ("supply.v_min", None, "supply.v_min"),                     # required
    ("supply.v_nom", _DELETE, "supply.v_nom"),
    ("supply.v_max", float("nan"), "supply.v_max"),
    ("supply.v_max", float("inf"), "supply.v_max"),
    ("supply.v_max", True, "supply.v_max"),
    ("supply.v_max", "twelve", "supply.v_max"),
    ("supply.r_source", -0.01, "supply.r_source"),
    ("supply.i_max", 0.0, "supply.i_max"),
    ("supply.uvlo", 0.0, "supply.uvlo"),                        # the two used to disagree here
    ("supply.uvlo", -1.0, "supply.uvlo"),
    ("supply.uvlo_filter", -1e-6, "supply.uvlo_filter"),
    ("supply.c_in", 0.0, "supply.c_in"),
    ("supply.v_typ", 12.0, "supply.v_typ"),                     # unknown key
    ("supply", "12 V", "supply"),
    ("supply", _DELETE, "supply"),
    ("path.r", -1e-3, "path.r"),
    ("path", None, "path"),
    ("load.c_nom", 0.0, "load.c_nom"),
    ("load.c_nom", -1e-3, "load.c_nom"),
    ("load.c_tol", 1.0, "load.c_tol"),                          # a tolerance of 100 %
    ("load.c_tol", -0.1, "load.c_tol"),
    ("load.esr", -0.01, "load.esr"),
    ("load.model", "motor", "load.model"),
    ("load.i_nom", 0.0, "load.i_nom"),                          # a resistive load needs a current
    ("load.capacitance", 1e-3, "load.capacitance"),
    ("switch.mode", "soft", "switch.mode"),
    ("switch.mode", None, "switch.mode"),
    ("switch.i_limit", None, "switch.i_limit"),                 # current_limit mode needs it
    ("switch.i_limit_tol", 1.0, "switch.i_limit_tol"),
    ("switch.t_on", -1e-6, "switch.t_on"),
    ("switch.timer", "none", "switch.timer"),
    ("switch.timer.c", 0.0, "switch.timer.c"),
    ("switch.timer.i_charge", _DELETE, "switch.timer.i_charge"),
    ("switch.timer.v_trip_tol", 1.5, "switch.timer.v_trip_tol"),
    ("switch.timer.after_fault", "retry", "switch.timer.retry_off"),  # retry needs its off time
    ("switch.timer.after_fault", "reboot", "switch.timer.after_fault"),
    ("switch.timer.retry_off", 0.0, "switch.timer.retry_off"),
    ("fet.name", "", "fet.name"),
    ("fet.name", "   ", "fet.name"),
    ("fet.name", "N" * 201, "fet.name"),
    ("fet.name", 5, "fet.name"),
    ("fet.vds_max", 0.0, "fet.vds_max"),
    ("fet.rds_on", -5e-3, "fet.rds_on"),
    ("fet.rds_on_alpha", -0.001, "fet.rds_on_alpha"),
    ("fet.tj_max", 55.0, "fet.tj_max"),                         # not above the 55 °C ambient
    ("fet.tj_max", -300.0, "fet.tj_max"),                       # below absolute zero
    ("fet.rth_ja", 0.0, "fet.rth_ja"),
    ("fet.zth", [], "fet.zth"),
    ("fet.zth", {"r": 1.0, "tau": 1.0}, "fet.zth"),
    ("fet.zth[1].tau", -1.0, "fet.zth[1].tau"),
    ("fet.zth[0].tau", _DELETE, "fet.zth[0].tau"),
    ("fet.zth[2]", 8.0, "fet.zth[2]"),
    ("fet.zth[0].c", 1.0, "fet.zth[0].c"),
    ("fet.soa", _DELETE, "fet.soa"),
    ("fet.soa.t_case", 150.0, "fet.soa.t_case"),                # not below tj_max
    ("fet.soa.curves", "none", _CURVES),
    ("fet.soa.curves[0].t_pulse", 0.0, f"{_CURVES}[0].t_pulse"),
    ("fet.soa.curves[1].t_pulse", 1e-4, f"{_CURVES}[1].t_pulse"),  # the pulse width of curve 1 again
    ("fet.soa.curves[1].points", [[1.0, 10.0]], f"{_CURVES}[1].points"),
    ("fet.soa.curves[1].points[1]", [0.0, 10.0], f"{_CURVES}[1].points[1]"),
    ("fet.soa.curves[1].points[1]", [5.0, -1.0], f"{_CURVES}[1].points[1]"),
    ("fet.soa.curves[2].points", [[5.0, 10.0], [2.0, 5.0]], f"{_CURVES}[2].points[1]"),  # V_DS falls
    ("fet.soa.curves[0].points[0]", [1.0, 2.0, 3.0], f"{_CURVES}[0].points[0]"),
    ("fet.soa.curves[0].points[0]", [1.0, "x"], f"{_CURVES}[0].points[0]"),
    ("fet.soa.curves[0].width", 1.0, f"{_CURVES}[0].width"),
    ("fet.zth_points", [[1e-3, 0.5]], "fet.zth_points"),           # one point
    ("fet.zth_points", "1 ms, 0.5", "fet.zth_points"),
    ("fet.zth_points", [[1e-3, 0.5], [1e-3, 0.6]], "fet.zth_points[1]"),   # t repeats
    ("fet.zth_points", [[1e-3, 0.5], [1e-4, 0.6]], "fet.zth_points[1]"),   # t falls
    ("fet.zth_points", [[1e-3, 0.5], [1e-2, 0.4]], "fet.zth_points[1]"),   # Zth falls
    ("fet.zth_points", [[0.0, 0.5], [1e-2, 0.6]], "fet.zth_points[0]"),    # t = 0 (log axes)
    ("fet.zth_points", [[1e-3, -0.5], [1e-2, 0.6]], "fet.zth_points[0]"),
    ("fet.zth_points", [[1e-3, 0.5, 1.0], [1e-2, 0.6]], "fet.zth_points[0]"),
    ("fet.zth_points", [[1e-3, 0.5], [1e-2, "x"]], "fet.zth_points[1]"),
    ("environment", _DELETE, "environment"),                   # no ambient of our own
    ("environment.t_ambient", None, "environment.t_ambient"),
    ("rules.soa_margin", 0.9, "rules.soa_margin"),
    ("rules.vds_derating", 1.2, "rules.vds_derating"),
    ("rules.vds_derating", 0.0, "rules.vds_derating"),
    ("rules.tj_headroom", -1.0, "rules.tj_headroom"),
    ("rules.made_up", 1.0, "rules.made_up"),
    ("schema", "railsign.rail/9", "schema"),
    ("name", "", "name"),
    ("name", 7, "name"),
    ("name", _DELETE, "name"),
    ("colour", "blue", "colour"),
]


def _bad(path, value):
    doc = _si_doc()
    doc["fet"]["soa"]["curves"].sort(key=lambda c: float("inf") if c["t_pulse"] is None else c["t_pulse"])
    return _set(doc, path, copy.deepcopy(value))


@pytest.mark.parametrize("path, value, field", BAD, ids=[f"{p}={v!r}"[:60] for p, v, _ in BAD])
def test_schema_and_reader_refuse_the_same_document_on_the_same_field(path, value, field):
    with pytest.raises(DocumentError) as by_reader:
        read_rail(_bad(path, value))
    with pytest.raises(DocumentInvalid) as by_schema:
        parse_rail_document(_bad(path, value))
    assert [e.field for e in by_reader.value.errors] == [field]
    assert [e.field for e in by_schema.value.errors] == [field]
    # the words come first, then the path
    text = by_schema.value.errors[0].text
    title = FIELD_TITLES.get(field)
    assert text.startswith(f"{by_schema.value.errors[0].title} ({field}): " if by_schema.value.errors[0].title
                           else f"{field}: ")
    if title is not None and "[" not in field:
        assert by_schema.value.errors[0].title == title.title
    assert str(by_reader.value).startswith(by_reader.value.title)


# Curves read off a chart that cross or rise are read (the analysis takes their conservative envelope and
# says where, `soa.soa_curve_warnings`): not bad input.
READ_WITH_A_NOTE = [
    ("fet.soa.curves[2].points", [[1.0, 60.0], [5.0, 70.0]], f"{_CURVES}[2].points[1]"),  # I_D rises
    ("fet.soa.curves[3].points", [[0.5, 90.0], [30.0, 30.0]], f"{_CURVES}[3]"),  # DC above 10 ms
]


@pytest.mark.parametrize("path, value, field", READ_WITH_A_NOTE, ids=[p for p, _, _ in READ_WITH_A_NOTE])
def test_crossing_or_rising_curves_are_read_by_both_with_a_warning_naming_the_curve(path, value, field):
    from server.analysis.soa import soa_curve_warnings

    doc = normalize(parse_rail_document(_bad(path, value)))
    read_rail(doc)
    warnings = soa_curve_warnings(doc["fet"])
    assert {w[0] for w in warnings} == {field}
    assert all(("the 10 ms curve" if "[2]" in field else "the DC curve") in message for _, message in warnings)


def test_zth_points_are_optional_and_left_out_of_the_canonical_form_when_absent():
    doc = _si_doc()
    assert "zth_points" not in doc["fet"]  # the canonical form (and sha256) of older documents is unchanged
    with_points = normalize(parse_rail_document(rail_doc(fet=fet_doc(zth_points=[["10 us", 0.02], ["1 ms", "0.3"]]))))
    assert with_points["fet"]["zth_points"] == [[pytest.approx(1e-5), 0.02], [pytest.approx(1e-3), 0.3]]
    assert "zth_points" not in parse_fet(fet_doc()).model_dump(mode="json", exclude_none=True)


def test_a_message_names_the_field_in_words_then_by_path_with_units():
    with pytest.raises(DocumentError) as exc:
        read_rail(_bad("supply.v_min", 0.0))
    assert str(exc.value) == "Supply minimum (supply.v_min): must be above 0 V"
    with pytest.raises(DocumentInvalid) as invalid:
        parse_rail_document(rail_doc(load={"c_tol": "100 %"}), prefix="document")
    error = invalid.value.errors[0]
    assert error.as_dict() == {"field": "document.load.c_tol",
                               "message": "must be below 100 % (a tolerance is a fraction of the nominal value, "
                                          "like 0.2 or 20 %)"}
    assert str(invalid.value).startswith("invalid rail document: Load capacitance tolerance (document.load.c_tol): ")


def test_every_problem_of_a_document_is_reported_at_once():
    doc = _bad("supply.v_min", -1.0)
    doc["load"]["c_nom"] = 0.0
    doc["fet"]["zth"][0]["r"] = 0.0
    with pytest.raises(DocumentError) as by_reader:
        read_rail(doc)
    with pytest.raises(DocumentInvalid) as by_schema:
        parse_rail_document(doc)
    fields = ["supply.v_min", "load.c_nom", "fet.zth[0].r"]
    assert [e.field for e in by_reader.value.errors] == fields
    assert [e.field for e in by_schema.value.errors] == fields
    assert "Foster stage 1 resistance (fet.zth[0].r): must be above 0 K/W" in str(by_reader.value)


def test_units_are_the_schemas_job_and_the_reader_takes_si_numbers():
    doc = rail_doc(supply={"uvlo_filter": "10 us", "c_in": "47 uF"}, switch={"i_limit": "4 A"})
    normalized = normalize(parse_rail_document(doc))
    assert normalized["supply"]["uvlo_filter"] == pytest.approx(10e-6)
    assert normalized["supply"]["c_in"] == pytest.approx(47e-6)
    with pytest.raises(DocumentError) as exc:
        read_rail({**normalized, "supply": {**normalized["supply"], "c_in": "47 uF"}})
    assert exc.value.field == "supply.c_in" and "SI" in exc.value.reason


# A design that cannot work is analysed and fails its checks: it is not bad input.
CANNOT_WORK = [
    ("load turns on at the supply minimum", {"load": {"model": "constant_current", "i_nom": 1.0, "v_on": 11.4}}),
    ("load turns on above the supply maximum", {"load": {"model": "resistive", "i_nom": 1.0, "v_on": 13.0}}),
    ("upstream UVLO at the supply minimum", {"supply": {"uvlo": 11.4}}),
    ("upstream UVLO above the supply maximum", {"supply": {"uvlo": 15.0}}),
    ("current limit below the load current", {"switch": {"i_limit": 1.0}, "load": {"i_nom": 3.0}}),
]


@pytest.mark.parametrize("sections", [c[1] for c in CANNOT_WORK], ids=[c[0] for c in CANNOT_WORK])
def test_a_design_that_cannot_work_passes_both_validators(sections):
    doc = rail_doc(**sections)
    normalized = normalize(parse_rail_document(doc))
    rail = read_rail(normalized)
    assert rail.supply.v_min == 11.4


def test_uvlo_filter_and_c_in_are_optional_with_no_default_in_both_validators():
    normalized = _si_doc()
    assert normalized["supply"]["uvlo_filter"] is None and normalized["supply"]["c_in"] is None
    rail = read_rail(normalized)
    assert rail.supply.uvlo_filter is None and rail.supply.c_in is None
    assert "supply.uvlo_filter" in OPTIONAL and "supply.uvlo_filter" not in DEFAULTS
    assert "supply.c_in" in OPTIONAL and "supply.c_in" not in DEFAULTS


@pytest.mark.parametrize("text, seconds", [("10 us", 10e-6), ("2.2 µs", 2.2e-6), ("0.5 ms", 0.5e-3), (0, 0.0)])
def test_uvlo_filter_accepts_engineering_notation(text, seconds):
    normalized = normalize(parse_rail_document(rail_doc(supply={"uvlo_filter": text})))
    assert normalized["supply"]["uvlo_filter"] == pytest.approx(seconds, rel=1e-12)
    assert read_rail(normalized).supply.uvlo_filter == pytest.approx(seconds, rel=1e-12)


def test_the_schema_takes_its_defaults_from_the_analysis_package():
    doc = rail_doc()
    del doc["path"]
    empty_path = RailDocument.model_validate(doc).path
    assert (empty_path.r, empty_path.l) == (DEFAULTS["path.r"], DEFAULTS["path.l"])
    fields = RailDocument.model_fields["fet"].annotation.model_fields
    assert fields["rds_on_alpha"].default == DEFAULTS["fet.rds_on_alpha"]
    schema = RailDocument.model_json_schema()
    supply = schema["$defs"]["Supply"]["properties"]
    assert supply["v_min"]["title"] == "Supply minimum"
    assert supply["v_min"]["exclusiveMinimum"] == BOUNDS["supply.v_min"].above


def test_a_part_is_refused_on_the_same_field_by_both():
    fet = normalize(parse_rail_document(rail_doc()))["fet"]
    fet["soa"]["curves"][1]["points"][1] = [0.0, 1.0]
    with pytest.raises(DocumentError) as by_reader:
        read_fet(fet)
    with pytest.raises(DocumentInvalid) as by_schema:
        parse_fet(fet)
    assert by_reader.value.field == "fet.soa.curves[1].points[1]"
    assert [e.field for e in by_schema.value.errors] == ["soa.curves[1].points[1]"]
    assert by_schema.value.errors[0].title == "MOSFET SOA curve 2, point 2"
    assert parse_fet(fet_doc()).name == "Test N30 5m"


def test_a_null_field_with_a_default_takes_it_in_both_validators():
    doc = _si_doc()
    doc["supply"]["r_source"] = None
    doc["load"]["model"] = None
    doc["fet"]["soa"]["t_case"] = None
    normalized = normalize(parse_rail_document(doc))
    rail = read_rail(doc)
    assert normalized["supply"]["r_source"] == rail.supply.r_source == DEFAULTS["supply.r_source"]
    assert normalized["load"]["model"] == rail.load.model == DEFAULTS["load.model"]
    assert normalized["fet"]["soa"]["t_case"] == rail.fet.t_case == DEFAULTS["fet.soa.t_case"]


_JUNK = [None, 0, -1, 0.0, 0.5, 1.0, 1.5, 200.0, "x", "", [], {}, [1, 2], [[1, 2], [3, 4]], {"a": 1}, True,
         float("nan"), "DC", "retry", "slew", "power_limit", "constant_power"]


def _paths(node, path=()):
    yield path
    items = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
    for key, value in items:
        yield from _paths(value, (*path, key))


def test_random_changes_are_refused_alike_by_both():
    # A seeded random walk over every field of the document with values of every shape
    # (SI numbers: units are the schema's own job).
    import random

    rng = random.Random(7)
    base = _si_doc()
    paths = [p for p in _paths(base) if p]
    refused = 0
    for _ in range(400):
        doc = copy.deepcopy(base)
        *heads, last = rng.choice(paths)
        node = doc
        for key in heads:
            node = node[key]
        node[last] = copy.deepcopy(rng.choice(_JUNK))
        try:
            read_rail(copy.deepcopy(doc))
            by_reader = []
        except DocumentError as exc:
            by_reader = [e.field for e in exc.errors]
        try:
            parse_rail_document(doc)
            by_schema = []
        except DocumentInvalid as exc:
            by_schema = [e.field for e in exc.errors]
        assert sorted(by_schema) == sorted(by_reader), (heads, last, node[last])
        refused += bool(by_reader)
    assert refused > 200  # the walk does reach bad documents


def test_fault_edge_fields_are_optional_read_in_units_and_refused_alike():
    normalized = _si_doc()
    for path in ("supply.v_clamp", "switch.loop_response", "switch.fast_trip", "switch.fast_trip_delay",
                 "fet.e_avalanche"):
        assert path in OPTIONAL and path not in DEFAULTS
        section, key = path.split(".")
        assert key not in normalized[section]  # left out of the canonical form: the hash stays
    doc = rail_doc(supply={"v_clamp": "18 V"},
                   switch={"loop_response": "2 us", "fast_trip": "20 A", "fast_trip_delay": "500 ns"})
    doc["fet"]["e_avalanche"] = "45 mJ"
    normalized = normalize(parse_rail_document(doc))
    rail = read_rail(normalized)
    assert rail.supply.v_clamp == pytest.approx(18.0)
    assert rail.switch.loop_response == pytest.approx(2e-6) and rail.switch.fast_trip_delay == pytest.approx(5e-7)
    assert rail.fet.e_avalanche == pytest.approx(45e-3)
    # a fast trip without its delay, and retries that are not a whole number: refused by both on the same field
    for sections, field in (({"switch": {"fast_trip": "20 A"}}, "switch.fast_trip_delay"),
                            ({"switch": {"timer": {"c": "100 nF", "i_charge": "10 uA", "v_trip": "1.2 V",
                                                   "after_fault": "retry", "retry_off": "1 s",
                                                   "retries": 1.5}}}, "switch.timer.retries")):
        with pytest.raises(DocumentInvalid) as by_schema:
            parse_rail_document(rail_doc(**sections))
        assert field in [e.field for e in by_schema.value.errors]
# --- the foldback curve and the gate drive ------------------------------------------------------

_GATE_FET = {"v_th": "2.6 V", "g_fs": "45 S", "i_gfs": "20 A", "c_iss": "3.1 nF", "c_rss": "160 pF"}


def test_foldback_and_gate_read_engineering_notation_and_reach_the_reader():
    doc = rail_doc(switch={"mode": "current_limit", "i_limit": "4 A", "foldback": [["2 V", "4 A"], [10, "1.5A"]],
                           "gate": {"drive": "current", "i_gate": "20 uA", "c_ext": "22 nF"}},
                   fet=fet_doc(gate=dict(_GATE_FET)))
    data = normalize(parse_rail_document(doc))
    assert data["switch"]["foldback"] == [[2.0, 4.0], [10.0, 1.5]]
    assert data["switch"]["gate"] == {"drive": "current", "i_gate": pytest.approx(20e-6), "c_ext": pytest.approx(22e-9)}
    assert data["fet"]["gate"]["g_fs"] == 45.0 and "k" not in data["fet"]["gate"]
    rail = read_rail(data)
    assert rail.fet.gate.k == pytest.approx(45.0**2 / 40.0)  # g_fs^2 / (2 i_gfs)
    assert parse_rail_document(doc) is not None and normalize(parse_rail_document(data)) == data  # idempotent


def test_a_document_without_the_new_fields_keeps_its_canonical_form():
    data = normalize(parse_rail_document(rail_doc()))
    assert "foldback" not in data["switch"] and "gate" not in data["switch"] and "gate" not in data["fet"]
    assert "gate" not in parse_fet(fet_doc()).model_dump(exclude_none=True)


@pytest.mark.parametrize("switch, fet_gate, field", [
    ({"foldback": [[2.0, 4.0], [1.0, 3.0]]}, None, "switch.foldback[1]"),
    ({"foldback": [[2.0, 4.0], [10.0, 5.0]]}, None, "switch.foldback[1]"),
    ({"gate": {"drive": "current"}}, _GATE_FET, "switch.gate.i_gate"),
    ({"gate": {"drive": "current", "i_gate": "20 uA"}}, None, "fet.gate"),
    ({"gate": {"drive": "current", "i_gate": "20 uA"}}, {**_GATE_FET, "c_rss": "5 nF"}, "fet.gate.c_rss"),
])
def test_bad_foldback_points_and_gate_data_are_refused_on_their_field(switch, fet_gate, field):
    doc = rail_doc(switch={"mode": "current_limit", "i_limit": "4 A", **switch},
                   fet=fet_doc(**({"gate": fet_gate} if fet_gate else {})))
    with pytest.raises(DocumentInvalid) as exc:
        parse_rail_document(doc)
    assert field in [e.field.removeprefix("document.") for e in exc.value.errors]
