"""The public `railsign` module: documents, the typed result, tables and arrays; the README's example runs."""

from __future__ import annotations

import doctest
import json
from pathlib import Path

import numpy as np
import pytest

import railsign
from server.__main__ import main
from server.analysis import analyze_rail
from server.schemas.rail import document_sha256, normalize
from server.schemas.validation import parse_rail_document
from tests.analysis.rail_documents import load_switch_5v, simple_doc
from tests.factories import rail_doc

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "rails" / "vout_12v.json"


def test_the_readme_example_runs_and_prints_what_it_shows(monkeypatch):
    monkeypatch.chdir(ROOT)
    outcome = doctest.testfile(str(ROOT / "README.md"), module_relative=False, verbose=False, report=True,
                               optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert outcome.attempted >= 6
    assert outcome.failed == 0


def test_load_document_reads_engineering_notation_and_normalizes():
    document = railsign.load_document(EXAMPLE)
    raw = json.loads(EXAMPLE.read_text())
    assert raw["load"]["c_nom"] == "220uF" and document["load"]["c_nom"] == pytest.approx(220e-6, rel=1e-12)
    assert document["switch"]["i_limit_tol"] == pytest.approx(0.10)  # "10%"
    assert document == normalize(parse_rail_document(raw))
    assert railsign.document_sha256(raw) == document_sha256(document)


def test_load_document_names_the_bad_field_and_reads_bundles(tmp_path):
    bad = rail_doc()
    bad["supply"]["v_min"] = "13 V"
    (tmp_path / "bad.json").write_text(json.dumps(bad))
    with pytest.raises(railsign.DocumentInvalid) as caught:
        railsign.load_document(tmp_path / "bad.json")
    assert [e.field for e in caught.value.errors] == ["supply.v_min"]
    (tmp_path / "broken.json").write_text("{")
    with pytest.raises(railsign.DocumentInvalid, match="not valid JSON"):
        railsign.load_document(tmp_path / "broken.json")
    with pytest.raises(FileNotFoundError):
        railsign.load_document(tmp_path / "none.json")
    entries = [{"document": d, "part": None, "exported_from": None} for d in (rail_doc("A"), rail_doc("B"))]
    bundle = {"schema": "railsign.bundle/2", "product": {"name": "P"},
              "boards": [{"name": "Main", "revision": "A", "rails": entries}]}
    (tmp_path / "two.json").write_text(json.dumps(bundle))
    assert [d["name"] for d in railsign.load_documents(tmp_path / "two.json")] == ["A", "B"]
    with pytest.raises(railsign.DocumentInvalid, match="holds 2 rails"):
        railsign.load_document(tmp_path / "two.json")
    bundle["boards"][0]["rails"] = entries[1:]
    (tmp_path / "one.json").write_text(json.dumps(bundle))
    assert railsign.load_document(tmp_path / "one.json")["name"] == "B"


def test_analyze_returns_the_typed_result_of_the_analysis_core():
    document = normalize(parse_rail_document(load_switch_5v()))
    result = railsign.analyze(load_switch_5v(), monte_carlo=200, seed=3)
    assert isinstance(result, railsign.AnalysisResult)
    assert result.basis == "worst case" and result.signoff
    direct = analyze_rail(document, monte_carlo=200, seed=3)
    assert result.model_dump(mode="json", by_alias=True, exclude_unset=True) == direct
    assert result.monte_carlo.n == 200
    nominal = railsign.analyze(document, corners=False)
    assert nominal.basis == "nominal" and nominal.corners is None
    with pytest.raises(ValueError, match="monte_carlo"):
        railsign.analyze(document, monte_carlo=-1)


def test_check_table_has_one_flat_row_per_check_with_the_records_values():
    result = railsign.analyze(rail_doc(), waveforms=False, headroom=False)
    rows = railsign.check_table(result)
    assert [r["id"] for r in rows] == [c.id for c in result.checks]
    assert len({tuple(r) for r in rows}) == 1  # the same columns in every row
    assert all(not isinstance(v, (dict, list)) for r in rows for v in r.values())
    for row, check in zip(rows, result.checks):
        assert (row["verdict"], row["margin"], row["corner"]) == (check.verdict, check.margin, check.corner)
        assert row["nominal_value"] == check.nominal.value
    failing = [r for r in rows if r["verdict"] == "fail"]
    assert failing and all(r["v_s"] is not None for r in failing)
    figures = railsign.figure_table(result)
    assert [f["id"] for f in figures] == [f.id for f in result.figures]


def test_waveform_arrays_keep_the_charge_of_a_current_limited_start():
    # Source: a capacitor charged by a constant current I holds Q = C V after t = C V / I
    # (textbook capacitor law, i = C dv/dt). 1 mF to 12 V at 5 A: 12 mC in 2.4 ms.
    result = railsign.analyze(simple_doc(c=1e-3, i_limit=5.0, v=12.0), corners=False, headroom=False)
    wave = railsign.waveform_arrays(result)
    assert {"t", "v_out", "i", "v_ds", "p_fet", "tj"} <= set(wave)
    assert all(isinstance(a, np.ndarray) and a.dtype == float and a.shape == wave["t"].shape for a in wave.values())
    assert np.trapezoid(wave["i"], wave["t"]) == pytest.approx(12e-3, rel=1e-3)
    reached = wave["t"][np.argmax(wave["v_out"] >= 0.99 * 12.0)]
    assert reached == pytest.approx(2.4e-3, rel=0.01)
    with pytest.raises(ValueError, match="waveforms=True"):
        railsign.waveform_arrays(railsign.analyze(simple_doc(), corners=False, waveforms=False, headroom=False))


def test_corner_arrays_span_the_tolerance_box():
    doc = rail_doc()
    result = railsign.analyze(doc, waveforms=False, headroom=False)
    arrays = railsign.corner_arrays(result)
    n = len(result.corners)
    assert all(len(a) == n for a in arrays.values())
    assert set(arrays["v_s"]) == {11.4, 12.6}  # the supply's min and max
    assert arrays["c"].min() == pytest.approx(680e-6 * 0.8) and arrays["c"].max() == pytest.approx(680e-6 * 1.2)
    worst = max(result.corners, key=lambda c: c.figures["i_peak"] or 0.0)
    assert arrays["i_peak"].max() == worst.figures["i_peak"]
    with pytest.raises(ValueError, match="corners=True"):
        railsign.corner_arrays(railsign.analyze(doc, corners=False, waveforms=False, headroom=False))


def test_the_analyze_command_goes_through_the_public_module(monkeypatch, tmp_path, capsys):
    calls = []
    real = railsign.analyze

    def spy(document, **kwargs):
        calls.append(kwargs)
        return real(document, **kwargs)

    monkeypatch.setattr(railsign, "analyze", spy)
    assert main(["analyze", str(EXAMPLE), "--nominal", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["basis"] == "nominal"
    assert calls and calls[0]["corners"] is False
