"""The rail-document schema: the optional ``supply.uvlo_filter`` field in both validators.

The service's Pydantic schema (`server.schemas.rail`) and the analysis core's own reader
(`server.analysis.document`) must agree on the field: its default, its unit handling and
its bounds. The 1 us default is common practice, no source (a UVLO comparator's deglitch
filter).
"""

from __future__ import annotations

import pytest

from server.analysis import DocumentError, analyze_rail
from server.analysis.document import UVLO_FILTER, read_rail
from server.schemas.rail import normalize
from server.schemas.validation import DocumentInvalid, parse_rail_document

from .factories import rail_doc


def _normalized(**supply) -> dict:
    return normalize(parse_rail_document(rail_doc(supply=supply)))


def test_uvlo_filter_defaults_to_one_microsecond_in_both_validators():
    doc = _normalized()
    assert doc["supply"]["uvlo_filter"] == 1e-6
    assert UVLO_FILTER == 1e-6
    raw = rail_doc()
    assert "uvlo_filter" not in raw["supply"]
    # the analysis reads the normalized document, and fills the same default itself
    assert read_rail(doc).supply.uvlo_filter == 1e-6
    assert read_rail(normalize(parse_rail_document(raw))).supply.uvlo_filter == 1e-6


@pytest.mark.parametrize("text, seconds", [("10 us", 10e-6), ("2.2us", 2.2e-6), ("0.5 ms", 0.5e-3), (0, 0.0),
                                           (3e-6, 3e-6)])
def test_uvlo_filter_accepts_engineering_notation(text, seconds):
    doc = _normalized(uvlo_filter=text)
    assert doc["supply"]["uvlo_filter"] == pytest.approx(seconds, rel=1e-12)
    assert read_rail(doc).supply.uvlo_filter == pytest.approx(seconds, rel=1e-12)


@pytest.mark.parametrize("bad", [-1e-6, "-5 us", "10 V", "soon"])
def test_uvlo_filter_rejects_negative_and_wrong_units(bad):
    with pytest.raises(DocumentInvalid) as err:
        parse_rail_document(rail_doc(supply={"uvlo_filter": bad}))
    assert any(e.field == "supply.uvlo_filter" for e in err.value.errors)


def test_analysis_reader_rejects_a_negative_filter_by_name():
    doc = _normalized()
    doc["supply"]["uvlo_filter"] = -1e-6
    with pytest.raises(DocumentError) as err:
        read_rail(doc)
    assert err.value.field == "supply.uvlo_filter"


def test_normalized_document_with_the_field_analyses():
    doc = _normalized(uvlo_filter="10 us")
    r = analyze_rail(doc, headroom=False, waveforms=False)
    assert r["startup"]["uvlo_filter"] == pytest.approx(10e-6)
    assert r["startup"]["v_supply_min"] >= r["startup"]["v_supply_min_raw"]
    dip = next(c for c in r["checks"] if c["id"] == "supply_dip")
    assert "10.0 us" in dip["detail"] and "unfiltered" in dip["detail"]
