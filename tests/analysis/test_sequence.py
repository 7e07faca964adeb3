"""The board power-up sequence (server/analysis/sequence.py) against outside references.

* Rails that start apart in time on one supply: each rail's own start-up transient
  (`startup.simulate_startup`, TR-BDF2; itself checked against ngspice in test_ngspice.py) on the
  same supply, summed: the coupled time line must match it.
* Rails whose inrush overlaps on one source resistance: ngspice-39 transient analysis of the same
  circuit (tests/analysis/spice.py, `simulate_ngspice_sequence`: ideal source, source resistance,
  B-source switches enabled by a step function, current-limited, RC outputs).
* A supply dip below a UVLO: the closed form of a current-limited start on a resistive source
  (v_bus = v_src - r_source x i_limit during the limit; Ohm's law).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.analysis.circuit import R_OFF, circuit_rows
from server.analysis.document import read_rail
from server.analysis.errors import DocumentError
from server.analysis.sequence import _rows, analyze_sequence, read_sequence, simulate_sequence
from server.analysis.startup import simulate_startup

from .rail_documents import efuse_12v, simple_doc
from .spice import NGSPICE, ngspice_missing_message, simulate_ngspice_sequence


def _supply(**kw):
    return {"id": "p12", "name": "12 V bus", "v_nom": 12.0, "v_min": 11.0, "r_source": 0.05, **kw}


def _two_rails(*, t_b: float, rail_a: dict, rail_b: dict, **supply) -> dict:
    return {"schema": "railsign.sequence/1", "name": "two rails", "supplies": [_supply(**supply)],
            "rails": [{"id": "a", "rail": rail_a, "supply": "p12", "enable": {"at": 0.0}},
                      {"id": "b", "rail": rail_b, "supply": "p12", "enable": {"at": t_b}}]}


def _alone(doc: dict, v: float, r_source: float):
    """A rail alone on the board supply: its own start-up (the module's reference integrator)."""
    doc = {**doc, "supply": {**doc["supply"], "v_min": v, "v_nom": v, "v_max": v, "r_source": r_source}}
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[v], c=[rail.load.c_nom]), record=0)
    return fig, fig.waveform


def test_rails_apart_in_time_match_each_rail_alone_summed():
    # two current-limited rails into capacitors (no load: nothing flows once charged), b enabled
    # well after a has settled
    rail_a = simple_doc(c=1e-3, i_limit=4.0, rds_on=10e-3)
    rail_b = simple_doc(c=470e-6, i_limit=2.5, rds_on=10e-3, esr=0.02)
    t_b = 10e-3
    tl = simulate_sequence(read_sequence(_two_rails(t_b=t_b, rail_a=rail_a, rail_b=rail_b)))
    assert tl.finished
    assert tl.t_enable.size == 4  # two rails at two corners, the nominal corner first
    for k, (doc, t0) in enumerate(((rail_a, 0.0), (rail_b, t_b))):
        fig, wave = _alone(doc, 12.0, 0.05)
        # Source: startup.simulate_startup of the rail alone on the same supply (TR-BDF2)
        t_ref, i_ref = np.asarray(wave["t"]) + t0, np.asarray(wave["i"])
        i_seq = tl.i_rail[:, k]
        assert i_seq.max() == pytest.approx(fig.i_peak[0], rel=1e-3)
        # the current limit's duration: the time the rail draws within 1 % of its limit
        lim = doc["switch"]["i_limit"]
        t_lim = np.sum(np.diff(tl.t) * (i_seq[1:] > 0.99 * lim))
        t_lim_ref = np.sum(np.diff(t_ref) * (i_ref[1:] > 0.99 * lim))
        assert t_lim == pytest.approx(t_lim_ref, rel=0.01)
        # the charge drawn (trapezoid) and the output reached
        q = np.sum(np.diff(tl.t) * 0.5 * (i_seq[1:] + i_seq[:-1]))
        q_ref = np.sum(np.diff(t_ref) * 0.5 * (i_ref[1:] + i_ref[:-1]))
        assert q == pytest.approx(q_ref, rel=0.005)
        assert tl.v_end[k] == pytest.approx(fig.v_end[0], rel=2e-3)
        # the waveform after the turn-on instant within 5 % of the peak at every instant of the
        # reference (backward Euler, first order, lags most where the current falls steeply)
        m = t_ref > t0 + 2e-6
        assert np.max(np.abs(np.interp(t_ref[m], tl.t, i_seq) - i_ref[m])) <= 0.05 * fig.i_peak[0]
    # the supply carries their sum and sits at v - r i (Ohm's law)
    i_total = tl.i_rail[:, 0] + tl.i_rail[:, 1]
    assert np.allclose(tl.i_src[:, 0], i_total, atol=1e-6)
    assert np.allclose(tl.v_bus[:, 0], 12.0 - 0.05 * i_total, atol=1e-6)


@pytest.mark.skipif(NGSPICE is None, reason=ngspice_missing_message())
def test_overlapping_inrush_on_one_source_resistance_against_ngspice(tmp_path):
    # two switched RC rails: a hard switch ramping over 200 us into 1 mF (no limit), and a 3 A
    # current-limited rail into 680 uF, enabled while a still charges; 0.1 ohm source
    v, r = 12.0, 0.1
    rail_a = simple_doc(mode="hard", c=1e-3, esr=0.01, i_limit=None, t_on=200e-6, rds_on=20e-3, load="resistive",
                        i_nom=0.5)
    rail_b = simple_doc(c=680e-6, esr=0.02, i_limit=3.0, rds_on=10e-3, load="resistive", i_nom=1.0)
    t_b = 300e-6
    doc = _two_rails(t_b=t_b, rail_a=rail_a, rail_b=rail_b, r_source=r)
    tl = simulate_sequence(read_sequence(doc), rtol=5e-4)
    t_stop = 8e-3
    ng = simulate_ngspice_sequence(tmp_path, t_stop=t_stop, v=v, r=r, c_bus=0.0, rails=[
        {"t_en": 0.0, "t_on": 200e-6, "r_off": R_OFF, "rds": 20e-3, "i_limit": None, "c": 1e-3, "esr": 0.01,
         "r_load": 12.0 / 0.5},
        {"t_en": t_b, "t_on": 0.0, "rds": 10e-3, "i_limit": 3.0, "c": 680e-6, "esr": 0.02, "r_load": 12.0},
    ])
    # Source: ngspice-39 transient analysis of the same two-rail netlist (Gear, reltol 1e-6)
    assert tl.i_src[:, 0].max() == pytest.approx(ng["i_src"].max(), rel=0.01)
    dip, dip_ng = v - tl.v_bus[:, 0].min(), v - ng["v_bus"].min()
    assert dip == pytest.approx(dip_ng, rel=0.01)
    for k in range(2):
        assert tl.i_rail[:, k].max() == pytest.approx(ng["i"][k].max(), rel=0.01)
        # the output waveforms within 1 % of the supply over the reference's whole time line
        inside = ng["t"] <= tl.t[-1]
        err = np.interp(ng["t"][inside], tl.t, tl.v_out[:, k]) - ng["v_out"][k][inside]
        assert np.max(np.abs(err)) <= 0.01 * v
    # the overlap is real: both draw at once
    both = (tl.i_rail[:, 0] > 0.5) & (tl.i_rail[:, 1] > 0.5)
    assert both.any()


def test_a_cycle_in_the_enable_chain_is_refused_naming_the_field():
    doc = _two_rails(t_b=0.0, rail_a=simple_doc(), rail_b=simple_doc())
    doc["rails"][0]["enable"] = {"after": "b", "threshold": 0.9}
    doc["rails"][1]["enable"] = {"after": "a", "threshold": 0.9, "delay": 1e-3}
    with pytest.raises(DocumentError) as err:
        read_sequence(doc)
    assert err.value.field == "rails[0].enable.after"
    assert "cycle" in err.value.reason and "a waits for b waits for a" in err.value.reason
    assert "Sequence rail 1 enabling rail (rails[0].enable.after)" in str(err.value)


@pytest.mark.parametrize("change, field, words", [
    (lambda d: d["rails"][1].update(supply="p5"), "rails[1].supply", "names no shared supply"),
    (lambda d: d["rails"][1].update(enable={"after": "a", "threshold": 1.2}), "rails[1].enable.threshold",
     "must be below 1"),
    (lambda d: d["rails"][1].update(enable={"after": "a", "threshold": 0.0}), "rails[1].enable.threshold",
     "must be above"),
    (lambda d: d["rails"][1].update(enable={"at": -1e-3}), "rails[1].enable.at", "must not be negative"),
    (lambda d: d["rails"][1].update(enable={"after": "a", "threshold": 0.9, "delay": -1.0}),
     "rails[1].enable.delay", "must not be negative"),
    (lambda d: d["rails"][1].update(enable={"after": "zz", "threshold": 0.9}), "rails[1].enable.after",
     "names no rail"),
    (lambda d: d["rails"][1]["rail"]["load"].update(c_nom=-1.0), "rails[1].rail.load.c_nom", "must be above"),
])
def test_bad_sequences_are_refused_naming_the_field(change, field, words):
    doc = _two_rails(t_b=1e-3, rail_a=simple_doc(), rail_b=simple_doc())
    change(doc)
    with pytest.raises(DocumentError) as err:
        analyze_sequence(doc)
    assert field in [e.field for e in err.value.errors]
    assert words in str(err.value)


def test_a_dip_below_a_uvlo_is_found_and_the_chain_order_is_kept():
    # a 6 A current-limited start through 0.25 ohm pulls the 12 V bus to 12 - 0.25 x 6 = 10.5 V
    # (Ohm's law) for the whole limit; a UVLO at 10.8 V on the supply trips, one at 10 V does not
    big = simple_doc(c=2.2e-3, i_limit=6.0, rds_on=5e-3)
    small = efuse_12v()
    small["supply"]["uvlo"] = 10.0
    doc = {"name": "dip", "supplies": [_supply(r_source=0.25, i_max=5.0, uvlo=[10.8])],
           "rails": [{"id": "big", "rail": big, "supply": "p12", "power_good": 0.95, "enable": {"at": 0.0}},
                     {"id": "small", "rail": small, "supply": "p12",
                      "enable": {"after": "big", "threshold": 0.95, "delay": 1e-3}}]}
    res = analyze_sequence(doc)
    nominal = {(c["id"], c["title"].split("(")[1].split(";")[0]): c for c in res["checks"]
               if c["corner"] == "nominal" and c["id"] == "supply_uvlo"}
    trip = nominal[("supply_uvlo", "listed on the supply")]
    hold = nominal[("supply_uvlo", "upstream UVLO of rail small")]
    assert trip["verdict"] == "fail" and trip["value"] == pytest.approx(12.0 - 0.25 * 6.0, rel=1e-6)
    assert hold["verdict"] == "pass"
    current = next(c for c in res["checks"] if c["id"] == "supply_current" and c["corner"] == "nominal")
    assert current["verdict"] == "fail" and current["value"] == pytest.approx(6.0, rel=1e-6)
    # the chain: small starts 1 ms after big's power-good, and both reach it at nominal
    rails = {r["id"]: r for r in res["corners"][0]["rails"]}
    assert rails["small"]["t_enable"] == pytest.approx(rails["big"]["t_power_good"] + 1e-3, rel=1e-9)
    order = next(c for c in res["checks"] if c["id"] == "power_good_order" and c["corner"] == "nominal")
    assert order["verdict"] == "pass"
    # at the supply-low corner (11 V) big's output cannot reach 0.95 x its nominal output 12 V:
    # small is never enabled, and the check says why
    low = {c["subject"]: c for c in res["checks"] if c["id"] == "power_good" and c["corner"] == "supply_low"}
    assert low["big"]["verdict"] == "fail" and low["small"]["verdict"] == "fail"
    assert "Never enabled: rail big" in low["small"]["reason"]
    assert res["verdict"] == "fail"
    assert math.isclose(res["corners"][1]["supplies"][0]["v_source"], 11.0)


def test_an_enable_after_the_simulated_time_fails_in_words():
    doc = _two_rails(t_b=0.5, rail_a=simple_doc(), rail_b=simple_doc())
    doc["t_stop"] = 0.1
    res = analyze_sequence(doc)
    b = next(c for c in res["checks"] if c["subject"] == "b" and c["corner"] == "nominal")
    assert b["verdict"] == "fail" and "lies after the simulated time (100 ms)" in b["reason"]


def test_the_time_line_reads_r_ds_on_and_the_limit_as_the_rails_own_circuit():
    """Two FETs in parallel conduct through half the resistance (Ohm's law for equal resistors in
    parallel), and a foldback curve is read at its highest current, never below the nominal limit
    (the larger inrush: conservative for the supply's current and dip)."""
    one = simple_doc(mode="hard", c=470e-6, rds_on=10e-3)
    two = {**one, "fet": {**one["fet"], "count": 2}}
    folded = simple_doc(mode="current_limit", c=470e-6, i_limit=3.0, rds_on=10e-3)
    folded["switch"]["foldback"] = [[1.0, 4.0], [10.0, 1.0]]
    rows, _ = _rows(read_sequence({"schema": "railsign.sequence/1", "name": "reading", "supplies": [_supply()],
                                   "rails": [{"id": "a", "rail": one, "supply": "p12", "enable": {"at": 0.0}},
                                             {"id": "b", "rail": two, "supply": "p12", "enable": {"at": 0.0}},
                                             {"id": "c", "rail": folded, "supply": "p12", "enable": {"at": 0.0}}]}))
    assert rows.rds[1] == pytest.approx(rows.rds[0] / 2.0)
    assert rows.i_lim[2] == pytest.approx(4.0)


def test_a_rail_whose_timer_trips_stays_off_and_its_chain_never_starts():
    # rail a charges 2.2 mF at 2 A: 13 ms in regulation, but its timer trips after 2 ms at the shortest
    timer = {"c": 20e-9, "c_tol": 0.1, "i_charge": 10e-6, "i_charge_tol": 0.1, "v_trip": 1.0, "v_trip_tol": 0.0,
             "after_fault": "latch", "retry_off": None}
    rail_a = simple_doc(c=2.2e-3, i_limit=2.0, rds_on=10e-3, timer=timer)
    rail_b = simple_doc(c=100e-6, i_limit=2.0, rds_on=10e-3)
    doc = _two_rails(t_b=0.0, rail_a=rail_a, rail_b=rail_b, r_source=0.01)
    doc["rails"][1]["enable"] = {"after": "a", "threshold": 0.9, "delay": 0.0}
    doc["rails"][0]["power_good"] = 0.9
    tl = simulate_sequence(read_sequence(doc))
    # Source: the trip time t = C v_trip / i_charge at the tolerances' short end (the timer's closed form),
    # 20 nF x 0.9 x 1 V / 11 uA, counted from the enable: the current limit holds from the first instant
    t_trip = 20e-9 * 0.9 * 1.0 / 11e-6
    assert tl.t_trip[0] == pytest.approx(t_trip, rel=1e-3)
    # Source: a constant current into a capacitor, v = I t / C (closed form)
    assert tl.v_out[np.searchsorted(tl.t, t_trip) - 1, 0] == pytest.approx(2.0 * t_trip / 2.2e-3, rel=0.02)
    assert math.isnan(tl.t_enable[1])
    result = analyze_sequence(doc)
    reasons = {(c["subject"], c["corner"]): c["reason"] for c in result["checks"] if c["id"] == "power_good"}
    assert "fault timer turned it off" in reasons[("a", "nominal")]
    assert reasons[("b", "nominal")].startswith("Never enabled")
    # without the timer the same board starts
    del rail_a["switch"]["timer"]
    rail_a["switch"]["timer"] = None
    assert analyze_sequence(_two_rails(t_b=0.0, rail_a=rail_a, rail_b=rail_b, r_source=0.01))["verdict"] != "fail"


def test_a_bank_charges_on_its_dc_bias_curve_in_the_time_line():
    """C(v) = C0 (1 - a v), a = 0.05 / V (ten 100 uF X7R capacitors), charged by a 2 A current limit from 12 V."""
    from .test_bank import bank_doc, group

    c0, a, i_lim = 1e-3, 0.05, 2.0
    rail = bank_doc([group(10, 100e-6, dc_bias=[[0.0, 1.0], [12.0, 1.0 - a * 12.0]])], v=12.0, i_limit=i_lim,
                    rds_on=1e-3)
    doc = {"schema": "railsign.sequence/1", "name": "one bank", "supplies": [_supply(r_source=0.01)],
           "rails": [{"id": "a", "rail": rail, "supply": "p12", "enable": {"at": 0.0}}]}
    tl = simulate_sequence(read_sequence(doc))
    assert tl.finished
    t, v, i = tl.t, tl.v_out[:, 0], tl.i_rail[:, 0]
    limited = (i > 0.999 * i_lim) & (v > 0.5) & (v < 11.0)
    assert np.count_nonzero(limited) >= 20
    # Source: t = (1/I) integral_0^v C(u) du = C0 (v - a v^2 / 2) / I (closed form), within 0.5 % (backward
    # Euler with C at the start of each step: first order, on the side of more charge)
    expected = c0 * (v[limited] - a * v[limited] ** 2 / 2.0) / i_lim
    assert t[limited] == pytest.approx(expected, rel=5e-3)
    assert np.all(t[limited] >= expected * (1 - 1e-9))
    # the charge drawn until the end: the bank's charge at its final voltage, Q = C0 (v - a v^2 / 2)
    q = np.sum(np.diff(t) * 0.5 * (i[1:] + i[:-1]))
    assert q == pytest.approx(c0 * (tl.v_end[0] - a * tl.v_end[0] ** 2 / 2.0), rel=5e-3)
