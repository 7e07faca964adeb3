"""The result dict: JSON contract, waveforms, checks, corners, Monte Carlo, report."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import binomtest

from server.analysis import (CHECKS, DEFAULT_RULES, ENGINE_VERSION, RULE_DESCRIPTIONS, analyze_rail,
                             format_report)
from server.analysis.montecarlo import sample_params, wilson_interval
from server.analysis.waveform import decimate

from .rail_documents import efuse_12v, hotswap_48v, load_switch_5v, slew_24v

SECTIONS = ("engine_version", "name", "verdict", "startup", "short_circuit", "timer", "retry", "steady",
            "headroom", "checks", "rules", "notes", "caution")


@pytest.fixture(scope="module")
def efuse_result():
    return analyze_rail(efuse_12v())


def test_result_is_strict_json_with_the_contract_keys(efuse_result):
    text = json.dumps(efuse_result, allow_nan=False)  # no NaN or infinity anywhere
    assert json.loads(text) == efuse_result
    for key in SECTIONS:
        assert key in efuse_result
    assert efuse_result["engine_version"] == ENGINE_VERSION
    for key in ("i_peak", "t_limit", "t_settle", "e_fet", "p_fet_peak", "tj_peak", "v_supply_min",
                "v_supply_min_raw", "uvlo_filter", "pulse_t_equiv", "pulse_p_peak", "waveforms"):
        assert key in efuse_result["startup"]
    assert efuse_result["startup"]["v_supply_min_raw"] <= efuse_result["startup"]["v_supply_min"]
    for key in ("v_ds", "i", "p", "t_soa", "t_thermal", "t_allow", "t_fault_max", "margin"):
        assert key in efuse_result["short_circuit"]
    for key in ("t_fault_min", "t_fault_nom", "t_fault_max", "startup_margin", "c_window", "c_suggested"):
        assert key in efuse_result["timer"]
    for key in ("p_fet", "tj", "v_drop", "stable"):
        assert key in efuse_result["steady"]
    assert set(efuse_result["headroom"]) >= {"c_max", "i_limit_max"}


def test_checks_carry_value_limit_unit_basis_and_verdict(efuse_result):
    ids = [c["id"] for c in efuse_result["checks"]]
    assert ids == [c.id for c in CHECKS]
    order = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}
    worst = max(efuse_result["checks"], key=lambda c: order[c["verdict"]])["verdict"]
    assert efuse_result["verdict"] == worst
    for c in efuse_result["checks"]:
        assert c["verdict"] in order
        assert c["basis"] in ("standard", "common practice", "physical limit")
        assert isinstance(c["detail"], str) and c["detail"]
        assert c["corner"] is None
        if c["verdict"] in ("pass", "marginal", "fail") and c["id"] not in ("steady_stable", "startup_complete"):
            assert c["value"] is not None and c["limit"] is not None


def test_marginal_between_team_limit_and_physical_edge():
    # DESIGN.md section 5: on the safe side of the team limit: pass; between the team
    # limit and the bare edge (ratio 1.0): marginal; beyond the edge: fail.
    def sc_check(timer_c, fault_margin):
        doc = efuse_12v()
        doc["switch"]["timer"]["c"] = timer_c
        doc["rules"] = {"fault_margin": fault_margin}
        r = analyze_rail(doc, headroom=False)
        return next(c for c in r["checks"] if c["id"] == "short_circuit_time")

    ok = sc_check(47e-9, 1.0)
    m = ok["value"]
    assert 1.0 < m < 5.0
    assert sc_check(47e-9, 0.9 * m if 0.9 * m >= 1.0 else 1.0)["verdict"] == "pass"
    assert sc_check(47e-9, 1.1 * m)["verdict"] == "marginal"
    slow = sc_check(47e-9 * 1.2 * m, 1.5)  # a timer slow enough to exceed t_allow
    assert slow["value"] < 1.0 and slow["verdict"] == "fail"


def test_rules_merge_team_then_rail():
    doc = efuse_12v()
    doc["rules"] = {"tj_headroom": 10.0}
    r = analyze_rail(doc, rules={"tj_headroom": 40.0, "soa_margin": 2.0}, headroom=False)
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
    assert analyze_rail(efuse_12v(), waveforms=False, headroom=False)["startup"]["waveforms"] is None


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
    assert r["short_circuit"]["applies"] is False and r["short_circuit"]["margin"] is None
    assert next(c for c in r["checks"] if c["id"] == "short_circuit_time")["verdict"] == "n/a"
    assert r["timer"] is None and r["retry"] is None


def test_retry_section_in_retry_mode():
    r = analyze_rail(hotswap_48v(), headroom=False)
    rt = r["retry"]
    assert rt is not None
    assert_allclose(rt["duty"], r["timer"]["t_fault_max"] / (r["timer"]["t_fault_max"] + 2.0), rtol=1e-12)
    assert rt["tj_peak"] >= 55.0


def test_progress_is_reported_and_can_cancel():
    seen = []
    analyze_rail(efuse_12v(), corners=True, monte_carlo=300, headroom=False, waveforms=False,
                 progress=seen.append)
    assert seen and all(0.0 <= x <= 1.0 for x in seen)
    assert seen == sorted(seen) and seen[-1] == pytest.approx(1.0)

    class Cancelled(Exception):
        pass

    def cancel(x):
        if x > 0.2:
            raise Cancelled

    with pytest.raises(Cancelled):
        analyze_rail(efuse_12v(), monte_carlo=6000, headroom=False, waveforms=False, progress=cancel)


def test_corners_full_factorial_and_worst_corner_per_check():
    r = analyze_rail(efuse_12v(), corners=True, headroom=False)
    corners = r["corners"]
    assert len(corners) == 64  # v, c, i_limit, timer c, i_charge, v_trip: 2^6
    names = {c["name"] for c in corners}
    assert len(names) == 64
    by_id = {c["id"]: c for c in r["checks"]}
    assert by_id["vds_derating"]["corner"].startswith("v_max")
    # the short circuit is worst at the high supply, high limit and slowest timer
    sc = by_id["short_circuit_time"]["corner"].split()
    assert {"v_max", "ilim_hi", "ct_hi", "ich_lo", "vtrip_hi"} <= set(sc)
    # the start-up timer margin is worst with the fastest timer
    ts = by_id["timer_startup"]["corner"].split()
    assert {"ct_lo", "ich_hi", "vtrip_lo"} <= set(ts)
    order = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}
    assert order[r["verdict"]] == max(order[k["verdict"]] for k in corners)
    assert r["timer"]["t_limit_corner"] is not None


def test_monte_carlo_reproducible_and_wilson_interval():
    a = analyze_rail(efuse_12v(), monte_carlo=400, seed=7, headroom=False, waveforms=False)["monte_carlo"]
    b = analyze_rail(efuse_12v(), monte_carlo=400, seed=7, headroom=False, waveforms=False)["monte_carlo"]
    c = analyze_rail(efuse_12v(), monte_carlo=400, seed=8, headroom=False, waveforms=False)["monte_carlo"]
    assert a == b
    assert a["margins"] != c["margins"]
    k = round(a["yield"] * a["n"])
    # Source: scipy.stats.binomtest(k, n).proportion_ci(method="wilson"), the Wilson score
    # interval (E. B. Wilson, J. Am. Stat. Assoc. 22 (1927) 209-212)
    ci = binomtest(k, a["n"]).proportion_ci(confidence_level=0.95, method="wilson")
    assert_allclose(a["yield_ci95"], [ci.low, ci.high], rtol=1e-9)
    for name, m in a["margins"].items():
        assert m["min"] <= m["p01"] <= m["p05"] <= m["p50"] <= m["p95"] <= m["p99"] <= m["max"]
        h = a["histograms"][name]
        assert len(h["edges"]) == 41 and sum(h["counts"]) == m["n_finite"]


@pytest.mark.parametrize("k, n", [(0, 10), (5, 10), (10, 10), (981, 1000), (1, 3)])
def test_wilson_interval_against_scipy(k, n):
    # Source: scipy.stats.binomtest(...).proportion_ci(method="wilson")
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    assert_allclose(wilson_interval(k, n), [ci.low, ci.high], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("distribution", ["uniform", "normal"])
def test_monte_carlo_samples_follow_the_tolerances(distribution):
    from server.analysis.document import read_rail

    rail = read_rail(efuse_12v())
    params, draws = sample_params(rail, 20000, seed=3, distribution=distribution)
    c = draws["c"] / rail.load.c_nom - 1.0
    if distribution == "uniform":
        assert c.min() >= -0.2 and c.max() <= 0.2
        assert_allclose(np.std(c), 0.2 / math.sqrt(3), rtol=0.03)  # uniform on [-a, a]: a / sqrt 3
        assert params.v_s.min() >= 11.4 and params.v_s.max() <= 12.6
    else:
        assert_allclose(np.std(c), 0.2 / 3.0, rtol=0.03)  # tolerance = 3 sigma
        assert_allclose(np.mean(np.abs(c) > 0.2), 0.0027, atol=0.0015)  # P(|z| > 3) = 0.27 %


def test_report_is_readable_text(efuse_result):
    doc = efuse_12v()
    text = format_report(efuse_result, doc)
    assert "12 V main, eFuse" in text
    assert "470 uF" in text  # engineering notation
    for c in efuse_result["checks"]:
        assert c["id"] in text
    assert "PASS" in text or "FAIL" in text
    assert "common practice" in text
    last = text.strip().splitlines()[-1]
    assert last.startswith("Caution:") and "does not certify hardware" in last and "verify on hardware" in last.lower()


def test_all_fixtures_analyse_with_corners():
    for make in (efuse_12v, hotswap_48v, load_switch_5v, slew_24v):
        r = analyze_rail(make(), corners=True, headroom=False, waveforms=False)
        json.dumps(r, allow_nan=False)
        assert r["verdict"] in ("pass", "marginal", "fail")
