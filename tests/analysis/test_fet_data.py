"""Rds(on) from the part's data over temperature, its typical-to-maximum spread, and parallel FETs.

Outside references, named beside each check: the current divider of parallel resistances
(any circuit textbook, e.g. C. K. Alexander and M. N. O. Sadiku, "Fundamentals of Electric
Circuits", section 2.8: I_k = I (1/R_k) / sum_j (1/R_j)); linear interpolation in a table
worked by hand; the closed form of the steady junction fixed point Tj = Ta + Rth I^2
Rds (1 + alpha (Tj - 25)) for a constant current; Ohm's law for the first instant of an
instant hard turn-on into a discharged capacitor (no inductance): I = V / (R_source + Rds
+ ESR).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis import analyze_rail
from server.analysis.document import read_rail
from server.analysis.errors import DocumentError
from server.analysis.evaluation import RowParams, evaluate_rows, linear_share
from server.analysis.steady import steady_state
from server.analysis.thermal import BEYOND_DATA, RdsTemperature, conduction_share

from .rail_documents import efuse_12v, simple_doc


def _check(result: dict, cid: str) -> dict:
    return next(c for c in result["checks"] if c["id"] == cid)


# ------------------------------------------------------------------ the current divider


@pytest.mark.parametrize("count, r_k, r_other", [(2, 2e-3, 2.6e-3), (3, 4e-3, 5e-3), (4, 1e-3, 1e-3), (1, 3e-3, 9e-3)])
def test_conduction_share_is_the_current_divider(count, r_k, r_other):
    # Source: current divider, I_k = I (1/R_k) / sum_j (1/R_j) (Alexander and Sadiku, section 2.8),
    # written out here over the list of the count resistances.
    rs = [r_k] + [r_other] * (count - 1)
    by_hand = (1.0 / r_k) / sum(1.0 / r for r in rs)
    assert_allclose(conduction_share(r_k, count, r_other), by_hand, rtol=1e-14)
    # the shares of all FETs add up to the whole current (Kirchhoff's current law)
    others = (1.0 / r_other) / sum(1.0 / r for r in rs)
    assert_allclose(by_hand + (count - 1) * others, 1.0, rtol=1e-14)


def test_steady_parallel_fets_share_by_the_divider_and_follow_the_fixed_point():
    # Two FETs, the followed one at the typical 4 mOhm against the other at the maximum 6 mOhm,
    # a constant current of 20 A: i_k = 20 (1/4) / (1/4 + 1/6) = 12 A (current divider,
    # Alexander and Sadiku 2.8); then the closed-form fixed point of tj = ta + rth i_k^2 R (1 +
    # a (tj - 25)): tj = (ta + k (1 - 25 a)) / (1 - k a), k = rth i_k^2 R.
    doc = simple_doc(mode="hard", i_limit=None, load="constant_current", i_nom=20.0, v_on=1.0,
                     rds_on=4e-3, alpha=0.005, t_ambient=50.0)
    doc["fet"].update(rds_on_max=6e-3, count=2, rth_ja=20.0)
    st = steady_state(read_rail(doc), v_s=np.array([12.0, 12.0]), rds=np.array([4e-3, 6e-3]))
    i_k = 20.0 * (1 / 4e-3) / (1 / 4e-3 + 1 / 6e-3)
    assert_allclose(st["i_fet"][0], i_k, rtol=1e-12)
    assert_allclose(st["i_fet"][1], 10.0, rtol=1e-12)  # both at the maximum: an even split
    for j, r in enumerate((4e-3, 6e-3)):
        k = 20.0 * st["i_fet"][j] ** 2 * r
        tj = (50.0 + k * (1 - 25 * 0.005)) / (1 - k * 0.005)
        assert_allclose(st["tj"][j], tj, rtol=1e-9)
    # the drop: 20 A through the two in parallel at the row's Rds(on) at Tj (Ohm's law)
    assert_allclose(st["v_drop"][1], 20.0 * 3e-3 * (1 + 0.005 * (st["tj"][1] - 25)), rtol=1e-9)


def test_one_fet_steady_is_unchanged_by_count_one():
    # count 1 is the single FET: the same numbers as without the field (the fixed point closed form).
    doc = simple_doc(mode="hard", i_limit=None, load="constant_current", i_nom=5.0, v_on=1.0,
                     rds_on=5e-3, alpha=0.005, t_ambient=50.0)
    a = steady_state(read_rail(doc), v_s=np.array([12.0]))
    doc["fet"]["count"] = 1
    b = steady_state(read_rail(doc), v_s=np.array([12.0]))
    assert a["tj"][0] == b["tj"][0] and a["p_fet"][0] == b["p_fet"][0]


# ------------------------------------------------------------------ the table over temperature


def test_table_interpolation_against_hand_values():
    # Hand values: between (25, 1.0) and (100, 1.45) the ratio at 60 degC is 1 + 0.45 * 35/75 = 1.21;
    # at 137.5 degC, halfway from (100, 1.45) to (175, 1.95): 1.70.
    table = RdsTemperature(0.005, 175.0, [[-55, 0.6], [25, 1.0], [100, 1.45], [175, 1.95]])
    for tj, ratio in ((60.0, 1.21), (137.5, 1.70), (25.0, 1.0), (-15.0, 0.8)):
        assert_allclose(table.ratio(tj), ratio, rtol=1e-12)
        assert_allclose(table.ratio_float(tj), ratio, rtol=1e-12)
    assert not table.beyond(175.0) and table.beyond(175.5) and table.beyond(-60.0)
    # the linear coefficient holds up to tj_max: 1 + 0.005 (150 - 25) = 1.625, held beyond
    linear = RdsTemperature(0.005, 150.0)
    assert_allclose(linear.ratio(np.array([100.0, 150.0, 400.0])), [1.375, 1.625, 1.625], rtol=1e-14)
    assert linear.beyond(150.1) and not linear.beyond(150.0)


@pytest.mark.parametrize("curve, where, words", [
    ([[25, 1.0], [25, 1.2]], "fet.rds_on_curve[1]", "increase"),
    ([[25, 1.0], [100, 0.0]], "fet.rds_on_curve[1]", "positive"),
    ([[25, 1.0]], "fet.rds_on_curve", "at least two"),
    ([[25, 1.0], [100]], "fet.rds_on_curve[1]", "pair"),
])
def test_bad_table_is_a_document_error_naming_the_field(curve, where, words):
    doc = efuse_12v()
    doc["fet"]["rds_on_curve"] = curve
    with pytest.raises(DocumentError) as err:
        read_rail(doc)
    assert any(e.field == where and words in e.reason for e in err.value.errors)


def test_bad_maximum_and_count_are_document_errors():
    doc = efuse_12v()
    doc["fet"].update(rds_on_max=1e-3, count=1.5)  # below the typical 2 mOhm; not a whole number
    with pytest.raises(DocumentError) as err:
        read_rail(doc)
    fields = {e.field for e in err.value.errors}
    assert {"fet.rds_on_max", "fet.count"} <= fields


def test_steady_beyond_the_table_fails_with_the_reason():
    # 20 A constant through 5 mOhm at rth 20 K/W heats the junction ~40 K above 50 degC: a table
    # ending at 70 degC does not reach the fixed point, and nothing is extrapolated.
    doc = simple_doc(mode="hard", i_limit=None, load="constant_current", i_nom=20.0, v_on=1.0,
                     rds_on=5e-3, t_ambient=50.0)
    doc["fet"].update(rth_ja=20.0, rds_on_curve=[[25, 1.0], [70, 1.2]])
    result = analyze_rail(doc, corners=False, waveforms=False, headroom=False)
    for cid in ("steady_tj", "steady_stable"):
        rec = _check(result, cid)
        assert rec["verdict"] == "fail" and BEYOND_DATA in rec["detail"]
    # the same table running on to 150 degC: the fixed point lies inside it (1 + 0.5 (tj - 25)/125 by hand)
    doc["fet"]["rds_on_curve"] = [[25, 1.0], [150, 1.5]]
    result = analyze_rail(doc, corners=False, waveforms=False, headroom=False)
    k = 20.0 * 20.0**2 * 5e-3  # K per unit ratio; tj = 50 + k (1 + 0.004 (tj - 25))
    tj = (50.0 + k * (1 - 25 * 0.004)) / (1 - k * 0.004)
    assert_allclose(result["steady"]["tj"], tj, rtol=1e-9)
    assert _check(result, "steady_tj")["verdict"] != "fail" or tj > 125.0


def test_startup_beyond_the_table_fails_with_the_reason():
    # A 72 mJ charge of 1 mF to 12 V through a 10 A limit heats the junction well past 30 degC.
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, i_limit=10.0, rds_on=5e-3, t_ambient=25.0)
    doc["fet"]["rds_on_curve"] = [[25, 1.0], [30, 1.02]]
    result = analyze_rail(doc, corners=False, waveforms=False, headroom=False)
    rec = _check(result, "startup_tj")
    assert result["startup"]["tj_peak"] > 30.0
    assert rec["verdict"] == "fail" and BEYOND_DATA in rec["detail"]
    # the same rail with a table covering its junction passes on temperature and says nothing of it
    doc["fet"]["rds_on_curve"] = [[25, 1.0], [175, 1.8]]
    rec = _check(analyze_rail(doc, corners=False, waveforms=False, headroom=False), "startup_tj")
    assert BEYOND_DATA not in rec["detail"] and rec["verdict"] == "pass"


def test_linear_coefficient_beyond_tj_max_reads_beyond_the_data():
    # A hard instant start into 47 mF from 24 V through a low resistance: the junction passes
    # tj_max; the check fails and says the linear coefficient is not extrapolated.
    doc = simple_doc(mode="hard", v=24.0, c=47e-3, r=0.02, esr=0.01, i_limit=None, rds_on=20e-3, alpha=0.005,
                     t_ambient=25.0)
    result = analyze_rail(doc, corners=False, waveforms=False, headroom=False)
    rec = _check(result, "startup_tj")
    assert rec["verdict"] == "fail" and BEYOND_DATA in rec["detail"]
    # not absurd: the run stops at tj_max + 100 K, the value stays near it (one step past at most)
    assert rec["value"] < 150.0 + 100.0 + 50.0


# ------------------------------------------------------------------ Rds(on) typical to maximum


def test_rds_spread_inrush_worst_at_low_and_steady_worst_at_high():
    # Instant hard turn-on, no inductance, into a discharged capacitor: the first instant draws
    # V / (R_source + Rds + ESR) (Ohm's law), largest at the typical Rds(on). The steady junction
    # of a constant current is hottest at the maximum: the closed-form fixed point at rds_on_max.
    doc = simple_doc(mode="hard", v=12.0, c=100e-6, r=5e-3, esr=2e-3, i_limit=None, rds_on=5e-3, alpha=0.005,
                     load="constant_current", i_nom=8.0, v_on=1.0, t_ambient=40.0)
    doc["fet"].update(rds_on_max=8e-3, rth_ja=40.0, id_pulse_max=5000.0)
    doc["supply"]["i_max"] = 100.0
    result = analyze_rail(doc, waveforms=False, headroom=False)
    assert result["worst_case"]["corners"] == 2  # the one spread: Rds(on) typical and maximum
    peak = _check(result, "supply_current")
    assert peak["rds_on"] == 5e-3 and "R_DS(on) typical" in peak["corner"]
    # Rds(on) at the 40 degC ambient at the first instant: 5 mOhm (1 + 0.005 (40 - 25))
    assert_allclose(peak["value"], 12.0 / (5e-3 + 2e-3 + 5e-3 * (1 + 0.005 * 15.0)), rtol=2e-3)
    steady = _check(result, "steady_tj")
    assert steady["rds_on"] == 8e-3 and "R_DS(on) maximum" in steady["corner"]
    k = 40.0 * 8.0**2 * 8e-3
    assert_allclose(steady["value"], (40.0 + k * (1 - 25 * 0.005)) / (1 - k * 0.005), rtol=1e-9)
    # the nominal reading stays at the typical
    assert_allclose(result["steady"]["rds_on"], 5e-3)


def test_without_a_maximum_the_corners_and_parameters_are_as_before():
    doc = efuse_12v()
    plain = analyze_rail(copy.deepcopy(doc), waveforms=False, headroom=False)
    assert plain["worst_case"]["corners"] == 64 and "rds" not in plain["worst_case"]["budget"]["parameters"]
    assert "fet" not in plain and "linear_share" not in plain["rules"]
    doc["fet"]["rds_on_max"] = 2.6e-3
    spread = analyze_rail(doc, waveforms=False, headroom=False)
    assert spread["worst_case"]["corners"] == 128 and "rds" in spread["worst_case"]["budget"]["parameters"]


# ------------------------------------------------------------------ linear mode


def test_linear_share_rule_scales_the_short_circuit_and_start_up_pulse():
    doc = efuse_12v()
    doc["fet"]["count"] = 2
    one = read_rail(doc)
    assert linear_share(one, one.rules) == 1.0  # default: one FET carries it all (common practice, no source)
    doc["rules"] = {"linear_share": 0.3}  # below 1/2: the worst FET carries at least the average
    assert linear_share(read_rail(doc), read_rail(doc).rules) == 0.5
    doc["rules"] = {"linear_share": 0.7}
    rail = read_rail(doc)
    p = RowParams(v_s=np.array([12.0]), c=np.array([470e-6]), i_lim=np.array([3.0]), t_fault=np.array([0.012]),
                  rds=np.array([2e-3]))
    fig, _, _ = evaluate_rows(rail, rail.rules, p)
    single = efuse_12v()
    rail1 = read_rail(single)
    fig1, _, _ = evaluate_rows(rail1, rail1.rules, p)
    # the short circuit: 0.7 of the 3 A limit in the worst FET, at the same V_DS
    assert_allclose(fig["sc_i_fet"][0], 0.7 * 3.0, rtol=1e-14)
    assert_allclose(fig["sc_p"][0], 12.0 * 0.7 * 3.0, rtol=1e-14)
    # the start-up pulse read against the SOA: the worst FET's current, the same rectangle length
    assert_allclose(fig["pulse_i"][0], 0.7 * fig1["pulse_i"][0], rtol=1e-6)
    # (to 0.1 %: the two FETs halve the switch's Rds(on), which moves the transient's end a little)
    assert_allclose(fig["pulse_t_equiv"][0], fig1["pulse_t_equiv"][0], rtol=1e-3)
    # its junction: the Foster rise of 0.7 of the power (superposition), a smaller rise
    assert 60.0 < fig["tj_peak"][0] < fig1["tj_peak"][0]


def test_monte_carlo_draws_rds_inside_typical_to_maximum_and_keeps_old_draws():
    from server.analysis.montecarlo import distributions_for, sample_params
    doc = efuse_12v()
    plain, _ = sample_params(read_rail(doc), 500, seed=3, distribution="uniform")
    doc["fet"]["rds_on_max"] = 2.6e-3
    for kind in ("uniform", "normal"):
        p, draws = sample_params(read_rail(doc), 500, seed=3, distribution=kind)
        assert np.all((p.rds >= 2e-3) & (p.rds <= 2.6e-3)) and np.ptp(p.rds) > 0.3e-3
    p, _ = sample_params(read_rail(doc), 500, seed=3, distribution="uniform")
    # drawn last: the other parameters' samples are those of the part without a maximum
    assert np.array_equal(p.v_s, plain.v_s) and np.array_equal(p.c, plain.c)
    assert np.array_equal(p.t_fault, plain.t_fault)
    # a run's options without the spread read as before (no rds_on key at the default)
    assert "rds_on" not in distributions_for("uniform") and distributions_for("normal")["rds_on"] == "normal"
