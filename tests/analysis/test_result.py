"""The result: JSON contract and typed model, check records, worst case, corners, Monte Carlo, report."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import binomtest, truncnorm

from server.analysis import (CHECKS, DEFAULT_RULES, ENGINE_VERSION, RULE_DESCRIPTIONS, analyze_rail,
                             format_report)
from server.analysis.checks import SPECS, normalised_margin
from server.analysis.document import read_rail
from server.analysis.montecarlo import sample_params, wilson_interval
from server.analysis.waveform import decimate
from server.schemas.result import AnalysisResult

from .rail_documents import efuse_12v, hotswap_48v, load_switch_5v, slew_24v

SECTIONS = ("engine_version", "name", "verdict", "basis", "signoff", "checks", "figures", "startup",
            "short_circuit", "timer", "retry", "steady", "headroom", "worst_case", "rules", "conventions", "notes",
            "caution")
ORDER = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}


@pytest.fixture(scope="module")
def efuse_result():
    return analyze_rail(efuse_12v())


def test_result_is_strict_json_and_matches_the_typed_model(efuse_result):
    text = json.dumps(efuse_result, allow_nan=False)  # no NaN or infinity anywhere
    assert json.loads(text) == efuse_result
    for key in SECTIONS:
        assert key in efuse_result
    assert efuse_result["engine_version"] == ENGINE_VERSION
    # the typed model holds every key (it forbids unknown ones) and loses nothing
    model = AnalysisResult.model_validate(efuse_result)
    assert model.model_dump(mode="json", by_alias=True, exclude_unset=True) == efuse_result
    nominal = analyze_rail(efuse_12v(), corners=False, monte_carlo=50, headroom=False)
    assert AnalysisResult.model_validate(nominal).basis == "nominal"


def test_check_records_carry_everything_a_reader_needs(efuse_result):
    assert [c["id"] for c in efuse_result["checks"]] == [c.id for c in CHECKS]
    worst = max(efuse_result["checks"], key=lambda c: ORDER[c["verdict"]])["verdict"]
    assert efuse_result["verdict"] == worst
    assert efuse_result["basis"] == "worst case" and efuse_result["signoff"] is True
    t_amb = efuse_12v()["environment"]["t_ambient"]
    for c in efuse_result["checks"]:
        spec = SPECS[c["id"]]
        assert c["title"] == spec.title and c["basis"] in ("standard", "common practice", "physical limit")
        assert isinstance(c["detail"], str) and c["detail"]
        assert c["direction"] == {"at_least": ">=", "at_most": "<=", "flag": None}[spec.sense]
        assert set(c["nominal"]) == {"value", "verdict", "margin"}
        if c["verdict"] == "n/a":
            assert c["value"] is None and c["corner"] is None
            continue
        assert c["corner"] and c["found_by"] in ("corner", "search") and c["point"]["v_s"] > 0
        if spec.sense == "flag":
            continue
        # the normalised margin is defined once: 1.0 at the team limit, >= 1 where it passes
        m = float(normalised_margin(spec, c["value"], c["limit"], t_amb))
        assert c["margin"] == pytest.approx(m, rel=1e-12)
        assert (c["margin"] >= 1.0) == (c["verdict"] == "pass") or spec.basis == "physical limit"
        # the physical edge on the same scale
        edge = float(normalised_margin(spec, c["edge"], c["limit"], t_amb))
        assert c["margin_edge"] == pytest.approx(edge, rel=1e-12)
        if c["verdict"] == "marginal":
            assert c["margin_edge"] <= c["margin"] < 1.0


def test_worst_case_is_never_better_than_nominal(efuse_result):
    for c in efuse_result["checks"]:
        if c["verdict"] == "n/a" or c["nominal"]["verdict"] == "n/a":
            continue
        assert ORDER[c["verdict"]] >= ORDER[c["nominal"]["verdict"]]
        if c["margin"] is not None and c["nominal"]["margin"] is not None:
            assert c["margin"] <= c["nominal"]["margin"] * (1 + 1e-9)


def test_key_figures_show_nominal_and_worst_case_side_by_side(efuse_result):
    figs = {f["id"]: f for f in efuse_result["figures"]}
    assert {"i_peak", "tj_peak", "e_fet", "v_supply_min", "sc_t_allow", "steady_tj"} <= set(figs)
    for f in figs.values():
        if f["nominal"] is None or f["worst"] is None:
            continue
        assert f["corner"]
        if f["worse"] == "max":
            assert f["worst"] >= f["nominal"] * (1 - 1e-9)
        else:
            assert f["worst"] <= f["nominal"] * (1 + 1e-9)
    # the nominal figures are those of the nominal point (not a worst case built in)
    doc = efuse_12v()
    sc = efuse_result["short_circuit"]
    assert sc["v_ds"] == doc["supply"]["v_nom"] and sc["i"] == pytest.approx(doc["switch"]["i_limit"])
    assert sc["worst"]["v_ds"] == doc["supply"]["v_max"]
    assert sc["worst"]["i"] == pytest.approx(doc["switch"]["i_limit"] * (1 + doc["switch"]["i_limit_tol"]))


def test_nominal_reading_is_labelled_not_a_signoff_verdict():
    r = analyze_rail(efuse_12v(), corners=False, headroom=False)
    assert r["basis"] == "nominal" and r["signoff"] is False and "corners" not in r
    assert any("not a sign-off verdict" in n for n in r["notes"])
    for c in r["checks"]:
        assert c["value"] == c["nominal"]["value"] and c["verdict"] == c["nominal"]["verdict"]
        assert c["corner"] in (None, "nominal")
    assert "NOT a sign-off verdict" in format_report(r, efuse_12v())


def test_rules_merge_team_then_rail():
    doc = efuse_12v()
    doc["rules"] = {"tj_headroom": 10.0}
    r = analyze_rail(doc, rules={"tj_headroom": 40.0, "soa_margin": 2.0}, headroom=False, corners=False)
    assert r["rules"]["tj_headroom"] == 10.0 and r["rules"]["soa_margin"] == 2.0
    assert r["rules"]["fault_margin"] == DEFAULT_RULES["fault_margin"]
    assert all(RULE_DESCRIPTIONS[k]["basis"] == "common practice" for k in DEFAULT_RULES)


def test_waveforms_are_bounded_and_figures_come_from_full_resolution(efuse_result):
    w = efuse_result["startup"]["waveforms"]
    n = len(w["t"])
    assert 2 <= n <= 2000
    assert all(len(w[k]) == n for k in ("v_out", "i", "v_ds", "p_fet", "tj"))
    assert all(b >= a for a, b in zip(w["t"], w["t"][1:]))
    assert max(w["i"]) <= efuse_result["startup"]["i_peak"] * (1 + 1e-12)
    assert max(w["tj"]) <= efuse_result["startup"]["tj_peak"] + 1e-9
    assert analyze_rail(efuse_12v(), waveforms=False, headroom=False, corners=False)["startup"]["waveforms"] is None


def test_decimation_keeps_peaks_and_dips():
    t = np.linspace(0, 1, 50001)
    i = np.sin(40 * t)
    i[12345] = 9.0  # a one-sample spike
    v = np.cos(3 * t)
    v[40001] = -7.0  # a one-sample dip
    wave = {"t": t, "v_out": v, "i": i, "v_ds": 1 - v, "p_fet": i * (1 - v), "tj": 25 + t}
    d = decimate(wave)
    assert len(d["t"]) <= 2000
    assert max(d["i"]) == 9.0 and min(d["v_out"]) == -7.0
    assert d["t"][0] == 0.0 and d["t"][-1] == 1.0


def test_short_circuit_not_applicable_without_a_limit():
    r = analyze_rail(load_switch_5v(), headroom=False)
    assert r["short_circuit"]["applies"] is False
    assert next(c for c in r["checks"] if c["id"] == "short_circuit_time")["verdict"] == "n/a"
    assert r["timer"] is None and r["retry"] is None
    assert r["headroom"]["limit_max"]["status"] == "not_computed"


def test_retry_section_in_retry_mode():
    r = analyze_rail(hotswap_48v(), headroom=False, corners=False)
    rt = r["retry"]
    assert rt is not None
    # the nominal point: the nominal trip time, then retry_off
    assert_allclose(rt["duty"], r["timer"]["t_fault_nom"] / (r["timer"]["t_fault_nom"] + 2.0), rtol=1e-12)
    assert rt["tj_peak"] >= 55.0


def test_progress_is_reported_and_can_cancel():
    seen = []
    analyze_rail(efuse_12v(), monte_carlo=300, headroom=False, waveforms=False, progress=seen.append)
    assert seen and all(0.0 <= x <= 1.0 for x in seen)
    assert seen == sorted(seen) and seen[-1] == pytest.approx(1.0)

    class Cancelled(Exception):
        pass

    def cancel(x):
        if x > 0.2:
            raise Cancelled

    with pytest.raises(Cancelled):
        analyze_rail(efuse_12v(), monte_carlo=6000, headroom=False, waveforms=False, progress=cancel)


def test_corners_full_factorial_in_words_and_worst_corner_per_check():
    r = analyze_rail(efuse_12v(), headroom=False)
    corners = r["corners"]
    assert len(corners) == 64  # v, c, i_limit, timer c, i_charge, v_trip: 2^6
    names = {c["name"] for c in corners}
    assert len(names) == 64
    by_id = {c["id"]: c for c in r["checks"]}
    assert by_id["vds_derating"]["corner"].startswith("supply 12.6 V (max)")
    # the short circuit is worst at the high supply, high limit and slowest timer
    sc = by_id["short_circuit_time"]["corner"]
    for words in ("supply 12.6 V (max)", "current limit +10 %", "timer C +10 %", "timer charge current \u221220 %",
                  "timer trip voltage +5 %"):
        assert words in sc
    # the start-up timer margin is worst with the fastest timer
    ts = by_id["timer_startup"]["corner"]
    for words in ("timer C \u221210 %", "timer charge current +20 %", "timer trip voltage \u22125 %"):
        assert words in ts
    assert ORDER[r["verdict"]] >= max(ORDER[k["verdict"]] for k in corners)
    assert r["timer"]["t_limit_corner"] is not None
    assert r["worst_case"]["corners"] == 64 and r["worst_case"]["search_points"] > 0


def test_monte_carlo_reproducible_with_shares_histograms_and_wilson_interval():
    a = analyze_rail(efuse_12v(), monte_carlo=400, seed=7, headroom=False, waveforms=False)["monte_carlo"]
    b = analyze_rail(efuse_12v(), monte_carlo=400, seed=7, headroom=False, waveforms=False)["monte_carlo"]
    c = analyze_rail(efuse_12v(), monte_carlo=400, seed=8, headroom=False, waveforms=False)["monte_carlo"]
    assert a == b
    assert a["checks"] != c["checks"]
    k = round(a["yield"] * a["n"])
    # Source: scipy.stats.binomtest(k, n).proportion_ci(method="wilson"), the Wilson score
    # interval (E. B. Wilson, J. Am. Stat. Assoc. 22 (1927) 209-212)
    ci = binomtest(k, a["n"]).proportion_ci(confidence_level=0.95, method="wilson")
    assert_allclose(a["yield_ci95"], [ci.low, ci.high], rtol=1e-9)
    assert set(a["distributions"]) == {"v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip"}
    for cid, m in a["checks"].items():
        assert 0.0 <= m["fail_share"] + m["marginal_share"] + m["pass_share"] <= 1.0 + 1e-12
        if not m["applies"]:
            continue
        mg = m["margin"]
        if mg is not None:
            assert mg["min"] <= mg["p01"] <= mg["p05"] <= mg["p50"] <= mg["p95"] <= mg["p99"] <= mg["max"]
        if m["histogram"]:
            h = m["histogram"]
            assert len(h["edges"]) == 41 and sum(h["counts"]) == h["total"] <= m["applies"]
            assert h["edges"][0] <= mg["min"] and h["edges"][-1] >= mg["max"]


@pytest.mark.parametrize("k, n", [(0, 10), (5, 10), (10, 10), (981, 1000), (1, 3)])
def test_wilson_interval_against_scipy(k, n):
    # Source: scipy.stats.binomtest(...).proportion_ci(method="wilson")
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    assert_allclose(wilson_interval(k, n), [ci.low, ci.high], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("distribution", ["uniform", "normal"])
def test_monte_carlo_samples_stay_in_the_tolerance_box(distribution):
    rail = read_rail(efuse_12v())
    params, draws = sample_params(rail, 40000, seed=3, distribution=distribution)
    c = draws["c"] / rail.load.c_nom - 1.0
    assert c.min() >= -0.2 and c.max() <= 0.2  # no sample leaves the box the corners span
    assert params.v_s.min() >= 11.4 and params.v_s.max() <= 12.6
    if distribution == "uniform":
        assert_allclose(np.std(c), 0.2 / math.sqrt(3), rtol=0.03)  # uniform on [-a, a]: a / sqrt 3
    else:
        # the tolerance as 3 sigma, truncated at 3 sigma. Source: scipy.stats.truncnorm(-3, 3).std()
        assert_allclose(np.std(c), 0.2 / 3.0 * truncnorm(-3, 3).std(), rtol=0.03)
        assert_allclose(np.mean(np.abs(c) > 0.1), 2 * (truncnorm(-3, 3).sf(1.5)), atol=0.006)


def test_monte_carlo_distribution_per_parameter():
    rail = read_rail(efuse_12v())
    _, draws = sample_params(rail, 40000, seed=4, distribution={"c": "normal"})
    c = draws["c"] / rail.load.c_nom - 1.0
    il = draws["i_limit"] / rail.switch.i_limit - 1.0
    assert_allclose(np.std(c), 0.2 / 3.0 * truncnorm(-3, 3).std(), rtol=0.03)
    assert_allclose(np.std(il), 0.1 / math.sqrt(3), rtol=0.03)  # the others stay uniform
    with pytest.raises(ValueError, match="unknown parameter"):
        sample_params(rail, 10, seed=1, distribution={"esr": "normal"})


def test_report_is_readable_text(efuse_result):
    doc = efuse_12v()
    text = format_report(efuse_result, doc)
    assert "12 V main, eFuse" in text
    assert "470 \u00b5F" in text  # engineering notation, micro as people write it
    for c in efuse_result["checks"]:
        assert c["title"] in text
        if c["direction"] and c["limit"] is not None:
            assert ("\u2265 " if c["direction"] == ">=" else "\u2264 ") in text
    assert "worst case" in text and "common practice" in text
    assert "degC" not in text and " uF" not in text
    last = text.strip().splitlines()[-1]
    assert last.startswith("Caution:") and "does not certify hardware" in last and "verify on hardware" in last.lower()


def test_all_fixtures_analyse_with_corners():
    for make in (efuse_12v, hotswap_48v, load_switch_5v, slew_24v):
        r = analyze_rail(make(), headroom=False, waveforms=False)
        json.dumps(r, allow_nan=False)
        assert r["verdict"] in ("pass", "marginal", "fail")
        AnalysisResult.model_validate(r)


def test_a_start_the_timer_trips_shows_the_switch_off_and_what_it_would_need():
    # the eFuse's 100 nF timer (about 12 ms) against 10 mF behind a 3 A limit (about 40 ms)
    doc = efuse_12v()
    doc["load"]["c_nom"] = 10e-3
    r = analyze_rail(doc, headroom=False)
    st = r["startup"]
    assert st["status"] == "tripped" and not st["complete"] and st["t_trip"] is not None
    w = st["waveforms"]
    on = np.array(w["on"])
    t = np.array(w["t"])
    i = np.array(w["i"])
    assert on[0] == 1.0 and on[-1] == 0.0  # the switch is off at the end: latched
    off = t >= st["t_trip"] * (1 + 1e-9)
    assert off.any() and np.all(i[off] == 0.0)  # no switch current once it is off
    assert t[-1] > st["t_trip"]  # the waveform follows the output after the trip
    checks = {c["id"]: c for c in r["checks"]}
    complete = checks["startup_complete"]
    assert complete["verdict"] == "fail" and complete["nominal"]["verdict"] == "fail"
    # the check says what would make the start succeed
    assert "timer capacitor of at least" in complete["detail"]
    timer = checks["timer_startup"]
    assert timer["verdict"] == "fail" and timer["value"] < 1.0
    assert st["t_limit"] > st["t_trip"]  # the regulation the start would need, without the timer
