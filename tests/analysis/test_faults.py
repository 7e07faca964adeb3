"""The onset of a short, the hard turn-off, shorts from the operating point and counted retries,
each against an outside reference named beside its check: closed forms of textbook circuits,
scipy's ODE integrator and ngspice on the same (invented) circuits.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from server.analysis import analyze_rail
from server.analysis.document import read_rail
from server.analysis.errors import DocumentError
from server.analysis.evaluation import evaluate_rows, nominal_point
from server.analysis.faults import (ACTED_FAST_TRIP, ACTED_LOOP, BY_BREAKDOWN, BY_CLAMP, BY_INPUT, clamp_energy,
                                    onset, turn_off)
from server.analysis.retry import retry_figures
from server.analysis.shortcircuit import short_circuit
from server.analysis.soa import derating_factor
from server.analysis.steady import steady_state
from server.analysis.thermal import foster_arrays, zth

from .rail_documents import efuse_12v, hotswap_48v, simple_doc
from .spice import NGSPICE, ngspice_missing_message, simulate_turn_off

NEW_CHECKS = ("onset_peak", "onset_soa", "turnoff_vds", "turnoff_avalanche")


def _rail(**kw):
    supply = kw.pop("supply", {})
    switch = kw.pop("switch", {})
    fet = kw.pop("fet_fields", {})
    doc = simple_doc(**kw)
    doc["supply"].update(supply)
    doc["switch"].update(switch)
    doc["fet"].update(fet)
    return read_rail(doc)


# --- onset --------------------------------------------------------------------------------------


def test_onset_rises_at_v_over_l_for_the_response_time():
    v, ell, t_r = 12.0, 2e-6, 1e-6
    rail = _rail(v=v, l=ell, rds_on=1e-7, i_limit=1e-6, switch={"loop_response": t_r})
    on = onset(rail, v_s=np.array([v]), i_lim=np.array([1e-6]), i_load=np.array([0.0]), tj_start=np.array([25.0]))
    # Source: inductor voltage law v = L di/dt with a constant voltage, i = V t / L (Alexander and Sadiku,
    # "Fundamentals of Electric Circuits", section 6.4); the loop acts t_r after the current passes the limit
    assert on["acted"][0] == ACTED_LOOP
    assert on["i_peak"][0] == pytest.approx(v * t_r / ell, rel=1e-3)


def test_onset_with_resistance_follows_the_rl_closed_form():
    v, r, ell, rds, t_r, i_lim = 24.0, 0.05, 1e-6, 0.01, 2e-6, 10.0
    rail = _rail(v=v, r=r, l=ell, rds_on=rds, i_limit=i_lim, switch={"loop_response": t_r})
    on = onset(rail, v_s=np.array([v]), i_lim=np.array([i_lim]), i_load=np.array([0.0]), tj_start=np.array([25.0]))
    rt, tau = r + rds, ell / (r + rds)
    # Source: step response of a series R-L circuit, i = V/R (1 - exp(-t R / L)) (Alexander and Sadiku, section 7.6)
    t_cross = -tau * math.log(1.0 - i_lim * rt / v)
    t_act = t_cross + t_r
    expected = v / rt * (1.0 - math.exp(-t_act / tau))
    assert on["t_act"][0] == pytest.approx(t_act, rel=1e-12)
    assert on["i_peak"][0] == pytest.approx(expected, rel=1e-12)
    # FET energy: Rds int i^2 dt, against scipy's quadrature of the same closed form
    from scipy.integrate import quad
    e_ref = quad(lambda t: rds * (v / rt * (1 - math.exp(-t / tau))) ** 2, 0.0, t_act, epsabs=0, epsrel=1e-12)[0]
    assert on["e"][0] == pytest.approx(e_ref, rel=1e-9)


def test_fast_trip_acts_before_the_loop_and_turns_the_switch_off():
    v, r, ell, rds = 24.0, 0.05, 1e-6, 0.01
    rail = _rail(v=v, r=r, l=ell, rds_on=rds, i_limit=10.0,
                 switch={"loop_response": 20e-6, "fast_trip": 30.0, "fast_trip_delay": 0.5e-6})
    on = onset(rail, v_s=np.array([v]), i_lim=np.array([10.0]), i_load=np.array([0.0]), tj_start=np.array([25.0]))
    rt, tau = r + rds, ell / (r + rds)
    # Source: the R-L closed form above, crossing the trip level, plus the comparator delay
    t_act = -tau * math.log(1.0 - 30.0 * rt / v) + 0.5e-6
    assert on["acted"][0] == ACTED_FAST_TRIP and on["fired"][0]
    assert on["t_act"][0] == pytest.approx(t_act, rel=1e-12)
    assert on["i_off"][0] == pytest.approx(v / rt * (1 - math.exp(-t_act / tau)), rel=1e-12)


def test_onset_without_inductance_is_bounded_by_the_resistances():
    v, r, rds, alpha = 12.0, 0.02, 0.005, 0.004
    rail = _rail(v=v, r=r, l=0.0, rds_on=rds, alpha=alpha, switch={"loop_response": 1e-6})
    on = onset(rail, v_s=np.array([v]), i_lim=np.array([5.0]), i_load=np.array([0.0]), tj_start=np.array([85.0]))
    # Source: Ohm's law with Rds(on) at the starting junction temperature, rds (1 + alpha (Tj - 25))
    assert on["i_peak"][0] == pytest.approx(v / (r + rds * (1 + alpha * 60.0)), rel=1e-12)
    # fed locally by the input capacitance: only Rds(on) stands between it and the short
    rail_c = _rail(v=v, r=r, l=0.0, rds_on=rds, supply={"c_in": 10e-6}, switch={"loop_response": 1e-6})
    on_c = onset(rail_c, v_s=np.array([v]), i_lim=np.array([5.0]), i_load=np.array([1.0]),
                 tj_start=np.array([25.0]))
    assert on_c["i_peak"][0] == pytest.approx((v - r * 1.0) / rds, rel=1e-12)


def test_onset_with_input_capacitance_and_inductance_against_scipy():
    v, r, ell, c_in, rds, i0 = 24.0, 0.05, 1e-6, 4.7e-6, 0.02, 1.0
    rail = _rail(v=v, r=r, l=ell, rds_on=rds, i_limit=10.0, supply={"c_in": c_in},
                 switch={"fast_trip": 40.0, "fast_trip_delay": 0.3e-6})
    on = onset(rail, v_s=np.array([v]), i_lim=np.array([10.0]), i_load=np.array([i0]), tj_start=np.array([25.0]))

    def f(t, x):
        i, u, _ = x
        return [(v - r * i - u) / ell, (i - u / rds) / c_in, u * u / rds]

    def trip(t, x):
        return x[0] - 40.0
    trip.terminal, trip.direction = True, 1
    # Source: scipy.integrate.solve_ivp (DOP853, rtol 1e-10) on the same two-state circuit, FET energy as a third state
    sol = solve_ivp(f, (0, 1e-3), [i0, v - r * i0, 0.0], method="DOP853", rtol=1e-10, atol=1e-12, events=trip)
    t_cross = sol.t_events[0][0]
    end = solve_ivp(f, (0, t_cross + 0.3e-6), [i0, v - r * i0, 0.0], method="DOP853", rtol=1e-10, atol=1e-12)
    assert on["fired"][0]
    assert on["t_act"][0] == pytest.approx(t_cross + 0.3e-6, rel=1e-6)
    assert on["i_off"][0] == pytest.approx(end.y[0, -1], rel=1e-6)
    assert on["v_in_off"][0] == pytest.approx(end.y[1, -1], rel=1e-6)
    assert on["i_peak"][0] == pytest.approx((v - r * i0) / rds, rel=1e-12)
    assert on["e"][0] == pytest.approx(end.y[2, -1], rel=1e-6)


def test_onset_soa_reads_the_shortest_curve_derated_from_the_start():
    rail = _rail(v=12.0, r=0.02, l=1e-6, rds_on=0.005, i_limit=10.0, switch={"loop_response": 1e-6})
    on = onset(rail, v_s=np.array([12.0]), i_lim=np.array([10.0]), i_load=np.array([0.0]), tj_start=np.array([90.0]))
    fet = rail.fet
    shortest = fet.curves[0]
    assert on["t_act"][0] < shortest.t_pulse
    pts = np.log(np.asarray(shortest.points))
    i_curve = math.exp(np.interp(math.log(12.0), pts[:, 0], pts[:, 1]))
    # Source: log-log reading of the shortest curve and the linear derating (tj_max - T) / (tj_max - t_case)
    # (power MOSFET application notes; common practice)
    expected = i_curve * float(derating_factor(fet, 90.0))
    assert on["soa_allowed"][0] == pytest.approx(expected, rel=1e-9)
    assert on["soa_ratio"][0] == pytest.approx(expected / on["i_peak"][0], rel=1e-12)


# --- turn-off -----------------------------------------------------------------------------------


def test_clamp_energy_is_half_l_i_squared_scaled_by_the_supply_share():
    ell, i, v, v_c = 2e-6, 15.0, 12.0, 30.0
    # Source: unclamped inductive switching energy E = 1/2 L I^2 V_BR / (V_BR - V_DD) (JEDEC JESD24-5;
    # B. J. Baliga, "Fundamentals of Power Semiconductor Devices", section 6.9)
    assert clamp_energy(v_c, v, 0.0, ell, i) == pytest.approx(0.5 * ell * i * i * v_c / (v_c - v), rel=1e-12)
    # with resistance the series form and the log form agree across their switch-over (x = R I / a = 1e-3)
    a = v_c - v
    for r in (a * 0.999e-3 / i, a * 1.001e-3 / i):
        x = r * i / a
        exact = v_c * ell * a / r ** 2 * (x - math.log1p(x))
        assert clamp_energy(v_c, v, r, ell, i) == pytest.approx(exact, rel=1e-6)
    rail = _rail(v=v, l=ell, rds_on=0.005, fet_fields={"vds_max": v_c, "e_avalanche": 1.0})
    off = turn_off(rail, v_s=np.array([v]), i_off=np.array([i]))
    # Source: energy stored in an inductor, 1/2 L I^2 (Alexander and Sadiku, section 6.4)
    assert off["e_half"][0] == pytest.approx(0.5 * ell * i * i, rel=1e-15)
    assert off["by"][0] == BY_BREAKDOWN and off["v_peak"][0] == v_c


TURN_OFF_CASES = {
    # no input capacitance: the FET's breakdown clamps at vds_max at once
    "breakdown": dict(c_in=None, v_clamp=None, vds_max=30.0, i=20.0, by=BY_BREAKDOWN),
    # input clamp below the breakdown takes it
    "tvs": dict(c_in=None, v_clamp=22.0, vds_max=40.0, i=20.0, by=BY_CLAMP),
    # input capacitance rings and reaches the clamp
    "ring_then_clamp": dict(c_in=1e-6, v_clamp=20.0, vds_max=30.0, i=20.0, by=BY_CLAMP),
    # input capacitance rings and peaks below the breakdown
    "ring": dict(c_in=10e-6, v_clamp=None, vds_max=60.0, i=20.0, by=BY_INPUT),
    # after a fast trip: the input capacitance partly discharged into the short (input at 4 V)
    "after_fast_trip": dict(c_in=4.7e-6, v_clamp=24.0, vds_max=40.0, i=30.0, by=BY_CLAMP, v_in0=4.0),
}


def test_ngspice_is_installed_for_the_turn_off():
    assert NGSPICE is not None, ngspice_missing_message()


@pytest.mark.parametrize("name", sorted(TURN_OFF_CASES))
def test_turn_off_agrees_with_ngspice(name, tmp_path):
    assert NGSPICE is not None, ngspice_missing_message()
    kw = TURN_OFF_CASES[name]
    v, r, ell = 12.0, 0.02, 1e-6
    rail = _rail(v=v, r=r, l=ell, rds_on=0.005, supply={"c_in": kw["c_in"], "v_clamp": kw["v_clamp"]},
                 fet_fields={"vds_max": kw["vds_max"]})
    v_in0 = kw.get("v_in0", v - r * kw["i"])
    off = turn_off(rail, v_s=np.array([v]), i_off=np.array([kw["i"]]), v_in0=np.array([v_in0]))
    assert off["by"][0] == kw["by"]
    ng = simulate_turn_off(tmp_path, t_stop=20e-6, points=4000, v=v, r=r, l=ell, i0=kw["i"], v_in0=v_in0,
                           c_in=kw["c_in"], v_clamp=kw["v_clamp"] or kw["vds_max"])
    # Source: ngspice transient (Gear, reltol 1e-6) of the same circuit, the clamp a steep diode to a DC source
    assert off["v_peak"][0] == pytest.approx(ng["v_peak"], rel=0.02)
    if kw["by"] == BY_INPUT:
        assert off["e_clamp"][0] == 0.0 and abs(ng["e_clamp"]) < 1e-9
    else:
        assert off["e_clamp"][0] == pytest.approx(ng["e_clamp"], rel=0.02)
    if kw["by"] == BY_BREAKDOWN:
        assert off["e_fet"][0] == off["e_clamp"][0]
    else:
        assert off["e_fet"][0] == 0.0


# --- the operating point and retries ------------------------------------------------------------


def test_short_circuit_rise_adds_to_the_steady_junction_temperature():
    doc = efuse_12v()
    doc["load"]["i_nom"] = 2.5  # a load that warms the FET: the steady state sits above the ambient
    rail = read_rail(doc)
    v = np.array([rail.supply.v_max])
    st = steady_state(rail, v_s=v)
    tj0 = float(st["tj"][0])
    assert tj0 > rail.t_ambient + 0.1
    i_hi = rail.switch.i_limit * (1 + rail.switch.i_limit_tol)
    sc = short_circuit(rail, v_ds=v, i_limit=np.array([i_hi]), t_fault=np.array([1e-3]), t_start=np.array([tj0]))
    # Source: Foster step response Tj(t) = Tj0 + P Zth(t), Zth = sum r (1 - exp(-t / tau)) (JESD51-14)
    assert tj0 + sc["p"][0] * float(zth(rail.fet.zth, sc["t_thermal"][0])) == pytest.approx(rail.fet.tj_max,
                                                                                             rel=1e-9)
    from_ambient = short_circuit(rail, v_ds=v, i_limit=np.array([i_hi]), t_fault=np.array([1e-3]))
    assert sc["t_thermal"][0] < from_ambient["t_thermal"][0]
    assert sc["t_start"][0] == tj0 and from_ambient["t_start"][0] == rail.t_ambient


def test_counted_retry_train_against_direct_superposition():
    r, tau = foster_arrays([(0.2, 2e-5), (1.8, 2e-3), (8.0, 0.1), (30.0, 5.0)])
    p, t_on, t_off, t0 = 40.0, 5e-3, 0.2, 70.0
    for pulses in (1, 2, 5, 40):
        got = retry_figures(r, tau, p=np.array([p]), t_on=np.array([t_on]), t_off=t_off, t_ambient=t0,
                            pulses=pulses)
        # Source: superposition of Foster step responses, +P at k T and -P at k T + t_on (linear network;
        # JESD51-14 Foster form), summed term by term in a plain loop
        period = t_on + t_off
        t_end = (pulses - 1) * period + t_on

        def rise(t):
            total = 0.0
            for k in range(pulses):
                for start, sign in ((k * period, 1.0), (k * period + t_on, -1.0)):
                    if t > start:
                        total += sign * p * float(np.sum(r * -np.expm1(-(t - start) / tau)))
            return total
        assert got["tj_peak"][0] == pytest.approx(t0 + rise(t_end), rel=1e-10)
        assert got["tj_valley"][0] == pytest.approx(t0 + rise(t_end - t_on), rel=1e-9, abs=1e-12)
        assert got["cooldown"][0] == pytest.approx(t_off / t_on)
    endless = retry_figures(r, tau, p=np.array([p]), t_on=np.array([t_on]), t_off=t_off, t_ambient=t0)
    assert got["tj_peak"][0] < endless["tj_peak"][0]


def test_retries_are_a_whole_number_and_the_fast_trip_needs_its_delay():
    doc = hotswap_48v()
    doc["switch"]["timer"]["retries"] = 2.5
    with pytest.raises(DocumentError) as err:
        read_rail(doc)
    assert err.value.field == "switch.timer.retries"
    doc["switch"]["timer"]["retries"] = 0
    with pytest.raises(DocumentError):
        read_rail(doc)
    doc["switch"]["timer"]["retries"] = 3
    assert read_rail(doc).switch.timer.retries == 3
    doc["switch"]["fast_trip"] = 20.0
    with pytest.raises(DocumentError) as err:
        read_rail(doc)
    assert err.value.field == "switch.fast_trip_delay"


def test_retry_heating_uses_the_counted_train_from_the_steady_state():
    doc = hotswap_48v()
    doc["switch"]["timer"]["retries"] = 3
    rail = read_rail(doc)
    fig, checks, _ = evaluate_rows(rail, rail.rules, nominal_point(rail, 11e-3))
    r, tau = foster_arrays(rail.fet.zth)
    expected = retry_figures(r, tau, p=fig["sc_p"], t_on=np.array([11e-3]), t_off=rail.switch.timer.retry_off,
                             t_ambient=fig["steady_tj"], pulses=4)
    assert fig["retry_tj_peak"][0] == pytest.approx(expected["tj_peak"][0], rel=1e-12)
    assert fig["sc_t_start"][0] == pytest.approx(fig["steady_tj"][0], rel=1e-12)
    assert checks["retry_tj"]["value"][0] == fig["retry_tj_peak"][0]


def test_retries_cap_the_start_up_attempts():
    doc = hotswap_48v()
    doc["load"]["c_nom"] = 20e-3  # a start that trips the timer every attempt
    doc["switch"]["timer"]["retries"] = 2
    rail = read_rail(doc)
    fig, _, _ = evaluate_rows(rail, rail.rules, nominal_point(rail, 11e-3))
    assert int(fig["attempts"][0]) == 3


# --- the checks in the result -------------------------------------------------------------------


def test_new_checks_do_not_apply_without_the_new_fields():
    res = analyze_rail(efuse_12v(), corners=False, waveforms=False, headroom=False)
    by_id = {c["id"]: c for c in res["checks"]}
    for cid in NEW_CHECKS:
        assert by_id[cid]["verdict"] == "n/a" and by_id[cid]["value"] is None
    assert by_id["short_circuit_time"]["t_start"] > 60.0  # the document's ambient: the steady state lies above it


def test_fault_edge_checks_have_a_worst_case_and_a_starting_temperature():
    doc = efuse_12v()
    doc["switch"].update(loop_response=1e-6, fast_trip=12.0, fast_trip_delay=0.5e-6)
    doc["supply"]["v_clamp"] = 16.0
    doc["fet"]["e_avalanche"] = 0.02
    res = analyze_rail(doc, waveforms=False, headroom=False)
    by_id = {c["id"]: c for c in res["checks"]}
    for cid in NEW_CHECKS:
        assert by_id[cid]["verdict"] != "n/a", cid
        assert by_id[cid]["corner"] is not None
    assert by_id["onset_peak"]["t_start"] == pytest.approx(by_id["short_circuit_time"]["t_start"])
    # the clamp (16 V) sits below the breakdown (40 V): no avalanche
    assert by_id["turnoff_avalanche"]["value"] == 0.0
    assert by_id["turnoff_vds"]["value"] == pytest.approx(16.0)
    # the worst case of the onset peak is at the supply maximum
    assert by_id["onset_peak"]["point"]["v_s"] == pytest.approx(12.6)
    sc = res["short_circuit"]
    assert sc["onset"]["acted_by"] == "fast_trip" and sc["turn_off"]["event"] == "fast_trip"
    # breakdown without the clamp fails the overshoot check
    doc2 = copy.deepcopy(doc)
    doc2["supply"]["v_clamp"] = None
    res2 = analyze_rail(doc2, corners=False, waveforms=False, headroom=False)
    by_id2 = {c["id"]: c for c in res2["checks"]}
    assert by_id2["turnoff_vds"]["verdict"] == "fail"
    assert by_id2["turnoff_avalanche"]["value"] > 0.0


def test_results_with_the_fault_edges_validate_against_the_result_schema():
    from server.schemas.result import AnalysisResult
    doc = hotswap_48v()
    doc["switch"].update(loop_response=2e-6, fast_trip=15.0, fast_trip_delay=1e-6)
    doc["switch"]["timer"]["retries"] = 3
    doc["supply"].update(c_in=10e-6, v_clamp=70.0)
    doc["fet"]["e_avalanche"] = 0.1
    res = analyze_rail(doc, waveforms=False, headroom=False, monte_carlo=16)
    model = AnalysisResult.model_validate(res)
    assert model.retry.pulses == 4 and model.retry.cooldown_ratio > 1
    assert model.short_circuit.onset is not None and model.short_circuit.worst.onset is not None


def test_a_loop_regulating_above_the_fast_trip_still_trips_it():
    rail = _rail(v=12.0, r=0.02, l=1e-6, rds_on=0.005, i_limit=20.0,
                 switch={"loop_response": 0.2e-6, "fast_trip": 15.0, "fast_trip_delay": 5e-6})
    on = onset(rail, v_s=np.array([12.0]), i_lim=np.array([20.0]), i_load=np.array([0.0]), tj_start=np.array([25.0]))
    # the loop acts first (0.2 µs after 20 A), yet regulates at 20 A, above the 15 A threshold
    assert on["acted"][0] == ACTED_LOOP and on["fired"][0]
    assert on["i_off"][0] == 20.0


def test_the_onset_reads_r_ds_on_from_the_parts_table():
    """With a table of R_DS(on) over T_j the onset takes the table's value at the starting temperature
    (linear interpolation between the datasheet's points), not the linear coefficient."""
    doc = efuse_12v()
    doc["switch"]["loop_response"] = 2e-6
    doc["fet"]["rds_on_curve"] = [[25.0, 1.0], [125.0, 1.2]]  # 1.1 at 75 degC; the coefficient would say more
    rail = read_rail(doc)
    on = onset(rail, v_s=np.array([12.0]), i_lim=np.array([5.0]), i_load=np.array([0.0]),
               tj_start=np.array([75.0]))
    assert float(on["rds"][0]) == pytest.approx(rail.fet.rds_on * 1.1)
