"""The raw supply dip: the lowest switch-input voltage, its time below the UVLO threshold,
and the ideal notch that only input capacitance bounds.

Closed forms of circuit analysis (Kirchhoff's laws, the first-order R C response, the
series R L C natural response; C. K. Alexander and M. N. O. Sadiku, "Fundamentals of
Electric Circuits", sections 2, 7.6 and 8.3-8.5; written from memory and re-derived) are
named beside each check. The comparison with ngspice is in test_ngspice.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup
from server.analysis.waveform import SIGNALS, decimate

from .rail_documents import simple_doc, slew_12v_demo


def _start(doc, **kw):
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom]), **kw)
    assert fig.status[0] == STATUS_OK
    return fig


@pytest.mark.parametrize("uvlo", [10.0, 11.0, 11.9])
def test_time_below_uvlo_of_a_current_limited_start_behind_a_resistance(uvlo):
    # Source: Kirchhoff's voltage law with no inductance: v_in = v_s - r i. Under the limit
    # i = I (from t = 0+, t_on = 0) until t_lim = C (v_s - I R_t) / I, R_t = r + Rds(on);
    # then the fully-on switch charges C through R_t, i = I exp(-t / (R_t C)) (R C
    # response). So v_in < u for t_lim + R_t C ln(r I / (v_s - u)).
    v, r, i, c, rds = 12.0, 0.5, 5.0, 1e-3, 1e-4
    doc = simple_doc(mode="current_limit", v=v, c=c, r=r, i_limit=i, rds_on=rds)
    doc["supply"]["uvlo"] = uvlo
    fig = _start(doc)
    r_t = r + rds
    t_lim = c * (v - i * r_t) / i
    assert_allclose(fig.v_supply_min[0], v - r * i, rtol=1e-9)
    # (crossings interpolated between stage points on the exponential tail)
    assert_allclose(fig.t_below_uvlo[0], t_lim + r_t * c * math.log(r * i / (v - uvlo)), rtol=5e-3)
    assert not fig.dip_unbounded[0]


def test_time_below_uvlo_is_zero_when_never_below_and_nan_without_a_threshold():
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, r=0.1, i_limit=5.0)
    doc["supply"]["uvlo"] = 11.0  # the input never goes below 11.5 V
    assert _start(doc).t_below_uvlo[0] == 0.0
    doc["supply"]["uvlo"] = None
    assert math.isnan(_start(doc).t_below_uvlo[0])


def test_supply_below_the_threshold_from_the_start():
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, r=0.1, i_limit=5.0)
    doc["supply"]["uvlo"] = 12.5
    fig = _start(doc)
    assert fig.t_below_uvlo[0] == fig.t_end[0]


def _demo(c_in=None):
    doc = slew_12v_demo()
    doc["supply"]["c_in"] = c_in
    return doc


def test_demo_notch_is_the_unbounded_dip():
    # When the constant-current load switches on at v_on the slew reference steps from
    # C dv/dt to C dv/dt + I and the ideal FET is fully on while the series inductance
    # takes the step: the input falls to v_out + R_sw i (just above v_on) for
    # w = L I / D seconds, D = v_s - r i_0 - v_on (the inductor's volt-seconds, L delta-i).
    doc = _demo()
    fig = _start(doc, record=0)
    sup, path, load = doc["supply"], doc["path"], doc["load"]
    l_tot, r_tot = sup["l_source"] + path["l"], sup["r_source"] + path["r"]
    i0 = load["c_nom"] * doc["switch"]["dvdt"]
    depth = sup["v_nom"] - r_tot * i0 - load["v_on"]
    width = l_tot * load["i_nom"] / depth
    assert 20e-9 < width < 40e-9
    assert load["v_on"] < fig.v_supply_min[0] < load["v_on"] + 0.1
    assert fig.dip_unbounded[0]
    # below the 10 V UVLO for the notch's width (the drops in r, esr and Rds(on) during
    # the 30 ns are below 1 % of D)
    assert_allclose(fig.t_below_uvlo[0], width, rtol=0.02)


def test_demo_with_input_capacitance_rings_instead():
    # With c_in the step of the regulated current, delta-I, comes from c_in first: the
    # input rings as a series R L C from x(0) = 0, x'(0) = -delta-I / c_in toward -r delta-I
    # (x = v_in - (v_s - r i_0)): x(t) = -r dI + exp(-a t) (A cos(w t) + B sin(w t)),
    # A = r dI, B = (-dI / c_in + a A) / w, a = r / 2L, w = sqrt(1 / (L c_in) - a^2).
    c_in = 10e-6
    doc = _demo(c_in)
    fig = _start(doc)
    sup, path, load = doc["supply"], doc["path"], doc["load"]
    l_tot, r_tot = sup["l_source"] + path["l"], sup["r_source"] + path["r"]
    i0, d_i = load["c_nom"] * doc["switch"]["dvdt"], load["i_nom"]
    a = r_tot / (2 * l_tot)
    om = math.sqrt(1 / (l_tot * c_in) - a * a)
    t = np.linspace(0.0, 4 * math.pi / om, 20001)
    x = -r_tot * d_i + np.exp(-a * t) * (r_tot * d_i * np.cos(om * t) + (-d_i / c_in + a * r_tot * d_i) / om
                                          * np.sin(om * t))
    lowest = sup["v_nom"] - r_tot * i0 + x.min()
    assert not fig.dip_unbounded[0]
    assert_allclose(sup["v_nom"] - fig.v_supply_min[0], sup["v_nom"] - lowest, rtol=0.02)
    assert fig.t_below_uvlo[0] == 0.0  # 11.8 V is far above the 10 V UVLO


@pytest.mark.parametrize("t_on, l, c_in, unbounded", [
    (0.0, 50e-9, None, True),      # instant turn-on behind inductance: the notch to v_out
    (0.0, 50e-9, 4.7e-6, False),   # ... which input capacitance bounds
    (100e-6, 50e-9, None, False),  # a turn-on ramp sets the current's rise
    (0.0, 0.0, None, False),       # no inductance: v_s - r i
])
def test_unbounded_flag(t_on, l, c_in, unbounded):
    doc = simple_doc(mode="hard", v=12.0, c=470e-6, r=0.02, l=l, esr=0.01, i_limit=None, rds_on=3e-3, t_on=t_on,
                     load="resistive", i_nom=2.0)
    doc["supply"]["c_in"] = c_in
    fig = _start(doc)
    assert bool(fig.dip_unbounded[0]) == unbounded
    if unbounded:
        # Source: Kirchhoff at t = 0+: no current yet, the inductance takes all of v_s and
        # the fully-on switch puts the input at v_out = 0
        assert fig.v_supply_min[0] < 0.01 * 12.0


def test_waveform_carries_the_input_and_the_switch_state():
    fig = _start(_demo(), record=0)
    w = fig.waveform
    n = len(w["t"])
    assert set(SIGNALS) <= set(w) and all(len(w[k]) == n for k in SIGNALS)
    assert set(w["on"]) == {1.0}
    assert min(w["v_in"]) >= fig.v_supply_min[0] - 1e-12
    assert_allclose(np.array(w["v_ds"]), np.array(w["v_in"]) - np.array(w["v_out"]), atol=1e-9)
    d = decimate(w, max_points=200)
    assert len(d["t"]) <= 200 and min(d["v_in"]) == min(w["v_in"]) and set(d) == {"t", *SIGNALS}


# --- the supply-dip check: raw by default, the UVLO's deglitch time as its datasheet means it ---


def _dip_check(doc):
    from server.analysis import analyze_rail

    r = analyze_rail(doc, corners=False, headroom=False, waveforms=False)
    return next(c for c in r["checks"] if c["id"] == "supply_dip"), r["startup"]


def test_the_dip_check_reads_the_raw_dip_and_the_deglitch_time_as_continuous_time_below():
    # The same closed-form case as above: v_in = 12 - 0.5 * 5 = 9.5 V under the limit, below an
    # 11 V UVLO for t_lim + R_t C ln(r I / (v_s - u)) = 1.9 ms + 0.25 ms.
    v, r, i, c, rds = 12.0, 0.5, 5.0, 1e-3, 1e-4
    doc = simple_doc(mode="current_limit", v=v, c=c, r=r, i_limit=i, rds_on=rds)
    doc["supply"]["uvlo"] = 11.0
    r_t = r + rds
    t_below = c * (v - i * r_t) / i + r_t * c * math.log(r * i / (v - 11.0))
    raw, st = _dip_check(doc)
    assert raw["verdict"] == "fail" and raw["value"] == pytest.approx(9.5, rel=1e-9)  # no default filter
    assert st["uvlo_deglitch"] is None
    # a deglitch time longer than the time below: the UVLO does not trip (it must stay below
    # continuously for that long, the datasheet's meaning), and the check says so
    doc["supply"]["uvlo_filter"] = 1.2 * t_below
    held, _ = _dip_check(doc)
    assert held["verdict"] == "pass" and held["value"] == pytest.approx(9.5, rel=1e-9)
    assert "does not trip" in held["detail"] and held["margin"] == 1.0
    # a deglitch time shorter than the time below: it trips
    doc["supply"]["uvlo_filter"] = 0.8 * t_below
    tripped, _ = _dip_check(doc)
    assert tripped["verdict"] == "fail" and "the UVLO trips" in tripped["detail"]


def test_an_instant_switch_into_inductance_without_input_capacitance_fails_saying_why():
    # an instant hard turn-on behind 1 uH: the ideal switch pulls the input down to the output
    doc = simple_doc(mode="hard", v=12.0, c=470e-6, r=0.02, l=1e-6, i_limit=None, t_on=0.0,
                     load="resistive", i_nom=1.0)
    doc["supply"]["uvlo"] = 9.0
    check, st = _dip_check(doc)
    assert check["verdict"] == "fail" and st["dip_unbounded"] is True
    assert "bounded only by input capacitance" in check["detail"] and "supply.c_in" in check["detail"]
    # even a deglitch time does not rescue a dip nothing in the document bounds
    doc["supply"]["uvlo_filter"] = 1e-3
    assert _dip_check(doc)[0]["verdict"] == "fail"
    # with input capacitance the dip is bounded, and read as it is
    doc["supply"]["uvlo_filter"] = None
    doc["supply"]["c_in"] = 100e-6
    bounded, st = _dip_check(doc)
    assert st["dip_unbounded"] is False and "bounded only" not in bounded["detail"]
