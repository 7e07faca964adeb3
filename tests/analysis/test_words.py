"""Words for people: every field of the rail document has a title, a unit kind and a hint.

Unit symbols and prefixes follow the BIPM SI Brochure (9th edition, tables 7 and 8): µ for
micro, Ω for the ohm, °C for the degree Celsius.
"""

from __future__ import annotations

import copy
import re

import pytest

from server.analysis.document import BOUNDS, DEFAULTS, FIELD_KEYS, OPTIONAL, read_rail
from server.analysis.rules import DEFAULT_RULES
from server.analysis.units import KIND_SYMBOLS, eng, quantity, temp
from server.analysis.words import (FIELD_TITLES, PARAM_WORDS, RULE_TITLES, field_title, field_words, generic_path,
                                   rule_title)

from .rail_documents import hotswap_48v


def _full_document() -> dict:
    """A rail document with every optional field given (a retry timer, every rule overridden)."""
    doc = copy.deepcopy(hotswap_48v())
    doc["supply"].update(uvlo_filter=5e-6, c_in=10e-6, v_clamp=70.0)
    doc["switch"]["dvdt"] = 5000.0
    doc["switch"].update(loop_response=2e-6, fast_trip=20.0, fast_trip_delay=0.5e-6)
    doc["switch"]["timer"]["retries"] = 3
    doc["fet"]["e_avalanche"] = 0.1
    doc["switch"]["foldback"] = [[5.0, 6.0], [40.0, 1.5]]
    doc["switch"]["gate"] = {"drive": "voltage", "i_gate": None, "v_drive": 70.0, "r_gate": 1e5, "c_ext": 10e-9}
    doc["fet"]["gate"] = {"v_th": 3.0, "k": 20.0, "c_iss": 3e-9, "c_rss": 2e-10}
    doc["fet"]["zth_points"] = [[1e-5, 0.02], [1e-3, 0.3]]
    doc["rules"] = dict(DEFAULT_RULES)
    doc["fet"].update(rds_on_max=doc["fet"]["rds_on"] * 1.3, count=2,
                      rds_on_curve=[[-55.0, 0.6], [25.0, 1.0], [150.0, 1.7]])
    read_rail(doc)  # a valid document
    return doc


def _full_documents() -> list[dict]:
    """The full document, and the same with the transconductance instead of the square-law
    constant and a current drive (the choices a document makes one of)."""
    other = _full_document()
    other["switch"]["gate"] = {"drive": "current", "i_gate": 10e-6}
    other["fet"]["gate"] = {"v_th": 3.0, "g_fs": 20.0, "i_gfs": 10.0, "c_iss": 3e-9, "c_rss": 2e-10}
    read_rail(other)
    banked = _full_document()
    load = banked["load"]
    for key in ("c_nom", "c_tol", "esr"):
        load.pop(key)
    load["bank"] = [{"refs": "C1-C4", "count": 4, "c_nom": 22e-6, "c_tol": 0.1, "dielectric": "x7r", "v_rated": 100.0,
                     "esr": 0.005, "dc_bias": [[0.0, 1.0], [50.0, 0.5]], "tempco": -0.001},
                    {"count": 8, "c_nom": 4.7e-6, "c_tol": 0.1, "dielectric": "x5r", "v_rated": 100.0, "esr": 0.01,
                     "derating": [0.4, 0.8]}]
    read_rail(banked)
    return [_full_document(), other, banked]


def _walk(node, path=""):
    yield path
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _walk(value, f"{path}.{key}" if path else key)
    elif isinstance(node, list) and not (path.endswith("]") and any(k in path for k in ("points", "rds_on_curve",
                                                                                         "foldback", "dc_bias"))) \
            and not path.endswith("derating"):
        for k, value in enumerate(node):
            yield from _walk(value, f"{path}[{k}]")


def test_every_field_path_of_a_full_document_has_a_title_a_kind_and_a_hint():
    paths = [p for p in _walk(_full_document()) if p]
    assert len(paths) > 100
    missing = sorted({generic_path(p) for p in paths} - set(FIELD_TITLES))
    assert missing == []
    for p in paths:
        words = field_words(p)
        assert words.title and "{" not in words.title, p
        assert words.title[0].isupper(), p
    leaves = [p for p in paths if not isinstance(_value(_full_document(), p), (dict, list))]
    for p in leaves:
        assert field_words(p).hint, p


def _value(doc, path):
    node = doc
    for key in re.findall(r"[^.\[\]]+|\[\d+\]", path):
        node = node[int(key[1:-1])] if key.startswith("[") else node[key]
    return node


def test_the_table_holds_no_title_the_document_does_not_have():
    walked = {generic_path(p) for doc in _full_documents() for p in _walk(doc) if p} | {"document"}
    assert set(FIELD_TITLES) == walked
    # and every key the reader knows, every default, optional field and bound is titled
    known = {f"{where}.{key}" if where else key for where, keys in FIELD_KEYS.items() for key in keys}
    assert known <= set(FIELD_TITLES)
    assert set(DEFAULTS) | set(OPTIONAL) | set(BOUNDS) <= set(FIELD_TITLES)


def test_numbers_carry_a_unit_kind_the_formatter_knows():
    for path in BOUNDS:
        assert FIELD_TITLES[path].kind in KIND_SYMBOLS, path
    assert FIELD_TITLES["supply.uvlo_filter"].kind == "s" and FIELD_TITLES["supply.c_in"].kind == "F"
    assert FIELD_TITLES["switch.dvdt"].kind == "V/s" and FIELD_TITLES["load.c_tol"].kind == "fraction"
    assert FIELD_TITLES["load.model"].kind is None  # a choice


def test_titles_are_distinct():
    titles = [w.title for w in FIELD_TITLES.values()]
    assert len(titles) == len(set(titles))


@pytest.mark.parametrize("path, title", [
    ("supply.v_min", "Supply minimum"),
    ("supply.uvlo_filter", "UVLO deglitch time (from the upstream part's datasheet)"),
    ("supply.c_in", "Input capacitance at the switch"),
    ("load.c_tol", "Load capacitance tolerance"),
    ("switch.timer.retry_off", "Off time between retries"),
    ("fet.rds_on_alpha", "R_DS(on) temperature coefficient"),
    ("fet.soa.t_case", "Case temperature of the SOA curves"),
    ("rules.timer_margin", "Fault timer start-up margin"),
    ("fet.soa.curves[2].points[0]", "MOSFET SOA curve 3, point 1"),
    ("fet.soa.curves[0].t_pulse", "MOSFET SOA curve 1 pulse width"),
    ("fet.soa.curves[11]", "MOSFET SOA curve 12"),
    ("fet.zth[1].r", "Foster stage 2 resistance"),
    ("fet.zth[0].tau", "Foster stage 1 time constant"),
    ("fet.zth[3]", "Foster stage 4"),
    ("", "Rail document"),
    ("load.junk", "load.junk"),  # an unknown path reads as itself
])
def test_field_title_words_paths_and_numbers_items_from_one(path, title):
    assert field_title(path) == title


def test_rules_and_corner_parameters_have_words():
    assert set(RULE_TITLES) == set(DEFAULT_RULES)
    assert rule_title("tj_headroom") == "Junction temperature headroom"
    assert rule_title("vds_derating") == "V_DS derating"
    assert PARAM_WORDS == {"v_s": "supply", "c": "load C", "i_limit": "current limit", "timer_c": "timer C",
                           "i_charge": "timer charge current", "v_trip": "timer trip voltage",
                           "t_fault": "fault timer", "rds_on": "MOSFET R_DS(on)"}


@pytest.mark.parametrize("value, unit, text", [
    (470e-6, "F", "470 \u00b5F"),
    (850e-6, "s", "850 \u00b5s"),
    (4.7e-3, "ohm", "4.7 m\u03a9"),
    (12.345, "A", "12.3 A"),
    (2000.0, "V/s", "2 V/ms"),
    (0.2, "fraction", "20 %"),
    (0.0, "V", "0 V"),
    (None, "V", "n/a"),
    (float("inf"), "s", "unlimited"),
    (1.5e-19, "F", "150e-21 F"),  # below atto: the power of ten written out
])
def test_the_analysis_formatter_writes_units_for_people(value, unit, text):
    assert eng(value, unit) == text


def test_temperatures_read_in_degrees_celsius():
    assert temp(85) == quantity(85.0, "degC") == "85.0 \u00b0C"
    assert temp(None) == "n/a"
    assert "degC" not in temp(-40.0) and temp(-40.0) == "-40.0 \u00b0C"
