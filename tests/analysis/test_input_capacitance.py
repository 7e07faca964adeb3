"""Input capacitance (supply.c_in) as a state of the start-up transient.

Its agreement with ngspice on the supply dip is in test_ngspice.py; here the properties
the circuit laws give (sources beside each check): an ideal source with nothing in series
makes c_in irrelevant, c_in behind a resistance is a first-order low-pass for the switch
current, the energy balance of the input side, and the input ringing after a trip.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, STATUS_TRIPPED, simulate_startup

from .rail_documents import efuse_12v, simple_doc


def _start(doc, c_in, **kw):
    doc["supply"]["c_in"] = c_in
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom], **kw), record=0)
    return fig


@pytest.mark.parametrize("mode, extra", [("hard", {"i_limit": None, "t_on": 1e-4}),
                                         ("current_limit", {"i_limit": 5.0})])
def test_no_effect_without_series_impedance(mode, extra):
    # Source: Kirchhoff's voltage law: with no resistance or inductance between the ideal
    # source and the switch, the input node is the source, whatever capacitance hangs on it
    doc = simple_doc(mode=mode, v=12.0, c=1e-3, load="resistive", i_nom=2.0, rds_on=3e-3, **extra)
    bare = _start(doc, None)
    with_c = _start(simple_doc(mode=mode, v=12.0, c=1e-3, load="resistive", i_nom=2.0, rds_on=3e-3, **extra), 1e-3)
    for name in ("i_peak", "e_fet", "tj_peak", "t_limit", "t_settle", "v_supply_min", "steps"):
        assert getattr(with_c, name)[0] == getattr(bare, name)[0]
    assert with_c.v_supply_min[0] == pytest.approx(12.0, rel=1e-12)


def test_current_limit_behind_a_resistance_charges_the_input_as_r_c():
    # Source: first-order R C response: with the switch drawing a constant I from the input
    # node, c_in dv/dt = (v_s - v) / r - I, so v = v_s - r I (1 - exp(-t / (r c_in)))
    # (Alexander and Sadiku, section 7.6); the lowest input is v_s - r I, held until the
    # limit ends (the charge takes C V / I = 2.4 ms, 480 time constants)
    v, r, i, c_in = 12.0, 0.5, 5.0, 10e-6
    doc = simple_doc(mode="current_limit", v=v, c=1e-3, r=r, i_limit=i, rds_on=1e-4)
    doc["supply"]["uvlo"] = 10.0
    fig = _start(doc, c_in)
    assert fig.status[0] == STATUS_OK
    assert_allclose(fig.v_supply_min[0], v - r * i, rtol=1e-5)
    w = fig.waveform
    t, v_in = np.array(w["t"]), np.array(w["v_in"])
    early = (t > 0) & (t < 10 * r * c_in)
    # (the engine's local tolerance is 2e-4 of v_s)
    assert_allclose(v_in[early], v - r * i * -np.expm1(-t[early] / (r * c_in)), atol=5e-4 * v)
    # below 10 V from t* = r c_in ln(r I / (r I - 2 V)) until the current falls below 4 A:
    # after the limit, the fully-on switch charges C through r, i = I exp(-t / (r C))
    # (r C = 0.5 ms against r c_in = 5 us: the input follows v_s - r i within 1 %)
    t_lim = 1e-3 * (v - i * r) / i
    t_star = r * c_in * math.log(r * i / (r * i - 2.0))
    expected = t_lim - t_star + r * 1e-3 * math.log(r * i / 2.0)
    assert_allclose(fig.t_below_uvlo[0], expected, rtol=1e-2)
    assert not fig.dip_unbounded[0]


def test_energy_balance_of_the_input_side():
    # Source: energy conservation on the input side: the source delivers int v_s i_L dt,
    # and at the end of the start the capacitor c_in holds its initial energy again (it is
    # back at v_s - r i_f); so what the output side took, int v_in i_sw dt, equals the source
    # energy less r's loss int r i_L^2 dt (Alexander and Sadiku, section 6.3). Here no r:
    # int v_in i dt = v_s int i_L dt = v_s (C v_f) for no load, and the output's energy is
    # C v_f^2 / 2, the rest in the FET: e_fet = C v_s v_f - C v_f^2 / 2 ~ C v_s^2 / 2.
    v, c = 12.0, 1e-3
    doc = simple_doc(mode="current_limit", v=v, c=c, l=200e-9, i_limit=6.0, rds_on=2e-3)
    fig = _start(doc, 22e-6)
    assert fig.status[0] == STATUS_OK
    assert_allclose(fig.e_fet[0], 0.5 * c * v * v, rtol=3e-3)


def test_input_rings_after_a_trip_and_the_ring_is_in_the_dip():
    # The eFuse's input (120 nH, 25 mohm) with 10 uF: when the timer turns the switch off at
    # 3 A the inductance keeps pushing its current into c_in, and the input rings about v_s.
    # Source: series R L C natural response (Alexander and Sadiku, section 8.3-8.5): with
    # x = v_in - v_s, x'' + (R / L) x' + x / (L C) = 0 from x(0) = -r I, x'(0) = I / c_in:
    # x(t) = exp(-a t) (A cos(w t) + B sin(w t)), a = R / 2L, w = sqrt(1 / LC - a^2),
    # A = x(0), B = (x'(0) + a A) / w.
    doc = efuse_12v()
    doc["supply"]["c_in"] = 10e-6
    rail = read_rail(doc)
    free = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[470e-6]))
    fig = _start(efuse_12v(), 10e-6, t_fault=[0.5 * free.t_limit[0]])
    assert fig.status[0] == STATUS_TRIPPED
    w = fig.waveform
    t, v_in, on = np.array(w["t"]), np.array(w["v_in"]), np.array(w["on"])
    after = on == 0.0
    l_tot, r_tot, c_in, i_trip = 120e-9, 0.025, 10e-6, 3.0
    a = r_tot / (2 * l_tot)
    om = math.sqrt(1 / (l_tot * c_in) - a * a)
    x0 = -r_tot * i_trip
    b = (i_trip / c_in + a * x0) / om
    tt = np.linspace(0.0, 2 * 2 * math.pi / om, 20001)
    x = np.exp(-a * tt) * (x0 * np.cos(om * tt) + b * np.sin(om * tt))
    t_trip = fig.t_trip[0]
    assert t_trip > 0.5 * free.t_limit[0]  # the timer counts the regulation, which starts in the ramp
    # the recorded step ends sample the ring; its extremes within 2 % of the swing
    swing = x.max() - x.min()
    assert abs(v_in[after].max() - 12.0 - x.max()) < 0.02 * swing
    assert abs(v_in[after].min() - 12.0 - x.min()) < 0.02 * swing
    # the computed ring at the samples
    late = after & (t - t_trip < tt[-1])
    xs = np.exp(-a * (t[late] - t_trip)) * (x0 * np.cos(om * (t[late] - t_trip)) + b * np.sin(om * (t[late] - t_trip)))
    assert_allclose(v_in[late] - 12.0, xs, atol=5e-3 * swing)
    # the ring's low point belongs to the dip (here the deepest point of the whole run)
    assert fig.v_supply_min[0] <= 12.0 + x.min() + 0.02 * swing
    # and the run went on until the ring settled (within the stop band) or two periods
    assert t[-1] - t_trip >= min(2 * 2 * math.pi / om, 0.25 * t_trip)
