"""The fault timer acting in the start-up transient: latch, retry, and what each attempt costs.

Reference values are closed forms named beside each check: a capacitor charged by a
constant current (Q = C V = I t), the first-order R C responses to a current step and
their decay (C. K. Alexander and M. N. O. Sadiku, "Fundamentals of Electric Circuits",
sections 6.2 and 7.2-7.6), and the Foster stage responses to a constant and an exponential
power (closed form of tau dT/dt + T = r P(t), W. E. Boyce and R. C. DiPrima, "Elementary
Differential Equations", chapter 2). Formulas written from memory and re-derived.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import (RETRY_ATTEMPTS, STATUS_OK, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED,
                                     STATUS_STALLED, STATUS_TRIPPED, simulate_startup)
from server.analysis.thermal import foster_arrays

from .rail_documents import FET_60V, simple_doc

RDS = 1e-4  # ohm: small enough that the regulated phase is the whole story


def _timer(after="latch", retry_off=None):
    # the trip time comes with each row (circuit_rows' t_fault); the timer section sets the
    # behaviour after a trip
    return {"c": 100e-9, "c_tol": 0.0, "i_charge": 10e-6, "i_charge_tol": 0.0, "v_trip": 1.0, "v_trip_tol": 0.0,
            "after_fault": after, "retry_off": retry_off}


def _run(doc, t_fault, record=0):
    rail = read_rail(doc)
    v = rail.supply.v_nom
    return rail, simulate_startup(circuit_rows(rail, v_s=[v], c=[rail.load.c_nom], t_fault=[t_fault]), record=record)


def test_latch_trips_at_t_fault_and_stays_off():
    v, c, i, t_fault = 12.0, 1e-3, 5.0, 1.2e-3
    rail, fig = _run(simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=RDS, timer=_timer()), t_fault)
    assert fig.status[0] == STATUS_TRIPPED and fig.attempts[0] == 1
    # the switch regulates from t = 0+, so the count reaches t_fault at t = t_fault
    assert_allclose(fig.t_trip[0], t_fault, rtol=1e-9)
    # Source: constant-current charge, v = I t / C; the FET takes I (V - v):
    # E = I V T - I^2 T^2 / (2 C)
    e = i * v * t_fault - i * i * t_fault**2 / (2 * c)
    assert_allclose(fig.e_fet[0], e, rtol=1e-6)
    assert_allclose(fig.pulse_e[0, 0], e, rtol=1e-6)
    assert fig.pulse_e.shape == (1, 1)
    # the regulation time the start would need with no timer: C (V - I Rds) / I
    assert_allclose(fig.t_limit[0], c * (v - i * RDS) / i, rtol=1e-3)
    assert math.isnan(fig.t_settle[0])
    w = fig.waveform
    t, on, v_out = np.array(w["t"]), np.array(w["on"]), np.array(w["v_out"])
    off = on == 0.0
    assert off.any() and np.all(off[np.argmax(off):])  # off once, and for good
    assert_allclose(t[np.argmax(off)], t_fault, rtol=1e-9)
    # no load: the output holds I T / C after the trip (Q = C V)
    assert_allclose(v_out[off], i * t_fault / c, rtol=1e-6)
    assert np.all(np.array(w["i"])[off] == 0.0)
    assert t[-1] >= 1.25 * t_fault  # a piece of the time after the trip is shown


def test_latch_output_decays_into_a_resistive_load():
    v, c, i, r_load, t_fault = 12.0, 1e-3, 5.0, 4.0, 2e-3
    doc = simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=RDS, load="resistive", i_nom=v / r_load,
                     timer=_timer())
    _, fig = _run(doc, t_fault)
    assert fig.status[0] == STATUS_TRIPPED
    tau = r_load * c
    # Source: a current source I into R || C from rest, v = I R (1 - exp(-t / RC)); after
    # the trip the R C decay v_T exp(-(t - T) / RC)
    v_trip = i * r_load * -math.expm1(-t_fault / tau)
    w = fig.waveform
    t_end, v_end = w["t"][-1], w["v_out"][-1]
    assert t_end > t_fault
    # (the engine's local tolerance, 2e-4 of v_s per step, accumulates over the charge)
    assert_allclose(v_end, v_trip * math.exp(-(t_end - t_fault) / tau), rtol=1e-3)


def _attempt_energy(v, i, r_load, tau, v0, t):
    # Source: v(t) = I R + (v0 - I R) exp(-t / RC) under the current limit; the FET takes
    # I (V - v): E = I V t - I [I R t + (v0 - I R) RC (1 - exp(-t / RC))]
    return i * v * t - i * (i * r_load * t + (v0 - i * r_load) * tau * -math.expm1(-t / tau))


def test_retry_completes_in_the_second_attempt():
    v, c, i, r_load = 12.0, 1e-3, 5.0, 4.0
    tau = r_load * c
    v_end = v - i * RDS
    t_need = tau * math.log(i * r_load / (i * r_load - v_end))  # free run: 20 V target, 12 V reached
    t_fault, t_off = 0.8 * t_need, 0.5e-3
    doc = simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=RDS, load="resistive", i_nom=v / r_load,
                     timer=_timer("retry", t_off), fet={**FET_60V, "zth": [{"r": 0.2, "tau": 1e-4},
                                                                          {"r": 1.0, "tau": 2e-3},
                                                                          {"r": 20.0, "tau": 1.0}]})
    rail, fig = _run(doc, t_fault)
    v1 = i * r_load * -math.expm1(-t_fault / tau)
    v2 = v1 * math.exp(-t_off / tau)
    t2 = tau * math.log((i * r_load - v2) / (i * r_load - v_end))
    assert t2 < t_fault  # so the second attempt completes
    assert fig.status[0] == STATUS_RETRIED and fig.attempts[0] == 2
    assert_allclose(fig.t_trip[0], t_fault, rtol=1e-9)
    assert_allclose(fig.t_limit[0], t_need, rtol=1e-3)  # the free run's figure
    assert fig.pulse_e.shape == (1, 2)
    assert_allclose(fig.pulse_e[0, 0], _attempt_energy(v, i, r_load, tau, 0.0, t_fault), rtol=1e-3)
    # the second pulse: its regulated part, then a fully-on tail through 0.1 mohm (negligible);
    # it is the difference of nearby voltages, so the output's accumulated error (2e-4 of
    # v_s) weighs more here
    assert_allclose(fig.pulse_e[0, 1], _attempt_energy(v, i, r_load, tau, v2, t2), rtol=5e-3)
    assert_allclose(fig.e_fet[0], fig.pulse_e[0].sum(), rtol=1e-12)
    # settles in the second attempt: v(t) = 0.99 v_f, counted from the first turn-on
    v_f = v * r_load / (r_load + RDS)
    t_s = tau * math.log((i * r_load - v2) / (i * r_load - 0.99 * v_f))
    assert_allclose(fig.t_settle[0], t_fault + t_off + t_s, rtol=1e-3)
    # the junction at the start of the second attempt: Foster responses to the first
    # pulse's power P(t) = a + b exp(-t / RC), a = I (V - I R), b = I^2 R, then cooling:
    # x_i(T) = r_i [a (1 - exp(-T / tau_i)) + b RC / (RC - tau_i) (exp(-T / RC) - exp(-T / tau_i))]
    r_th, tau_th = foster_arrays(doc["fet"]["zth"])
    a, b = i * (v - i * r_load), i * i * r_load
    rise = 0.0
    for ri, ti in zip(r_th, tau_th):
        x = ri * (a * -math.expm1(-t_fault / ti) + b * tau / (tau - ti) * (math.exp(-t_fault / tau)
                                                                           - math.exp(-t_fault / ti)))
        rise += x * math.exp(-t_off / ti)
    assert fig.pulse_tj_start[0, 0] == 25.0
    assert_allclose(fig.pulse_tj_start[0, 1] - 25.0, rise, rtol=1e-3)
    # the waveform: on, off for retry_off, on again
    on = np.array(fig.waveform["on"])
    edges = np.flatnonzero(np.diff(on) != 0.0)
    t = np.array(fig.waveform["t"])
    assert_allclose(t[edges + 1], [t_fault, t_fault + t_off], rtol=1e-9)


def test_retry_exhausted_when_every_attempt_starts_from_scratch():
    # the off time (50 R C) lets the output discharge completely: every attempt repeats the
    # first, none completes
    v, c, i, r_load = 12.0, 1e-3, 5.0, 4.0
    tau = r_load * c
    t_fault = 0.5 * tau * math.log(i * r_load / (i * r_load - v))
    doc = simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=RDS, load="resistive", i_nom=v / r_load,
                     timer=_timer("retry", 50 * tau))
    _, fig = _run(doc, t_fault)
    assert fig.status[0] == STATUS_RETRY_EXHAUSTED
    assert fig.attempts[0] == RETRY_ATTEMPTS == 8
    assert fig.pulse_e.shape == (1, RETRY_ATTEMPTS)
    assert_allclose(fig.pulse_e[0], _attempt_energy(v, i, r_load, tau, 0.0, t_fault), rtol=1e-3)
    assert np.all(np.diff(fig.pulse_tj_start[0]) >= 0.0)  # each attempt starts a little warmer
    assert_allclose(fig.t_end[0], (RETRY_ATTEMPTS - 1) * (t_fault + 50 * tau) + 1.25 * t_fault, rtol=0.05)


def test_stalled_start_with_a_timer_is_computed_until_the_timer_ends_it():
    # a 2 A limit into a load that needs 3 A at 12 V: the output stalls at 8 V; the timer
    # trips every attempt
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, load="resistive", i_nom=3.0, i_limit=2.0,
                     timer=_timer("retry", 0.1))
    _, fig = _run(doc, 5e-3)
    assert fig.status[0] == STATUS_STALLED
    assert fig.v_stall[0] == pytest.approx(8.0, rel=1e-2)
    assert fig.attempts[0] == RETRY_ATTEMPTS and np.all(np.isfinite(fig.pulse_e[0]))
    assert_allclose(fig.t_trip[0], 5e-3, rtol=1e-9)
    assert math.isnan(fig.t_limit[0])  # the free run never completes
    # no timer: nothing to compute beyond the stall voltage
    _, free = _run(simple_doc(mode="current_limit", v=12.0, c=1e-3, load="resistive", i_nom=3.0, i_limit=2.0),
                   math.inf)
    assert free.status[0] == STATUS_STALLED and free.attempts[0] == 0 and math.isnan(free.e_fet[0])


def test_load_stops_at_its_turn_on_voltage_while_the_switch_is_off():
    # constant-current load of 4 A from 3 V, limit 5 A into 1 mF: after the trip the output
    # falls at I_load / C = 4 V/ms and the load lets go at 3 V (its own UVLO)
    v, c, i, i_load, v_on, t_fault = 12.0, 1e-3, 5.0, 4.0, 3.0, 2e-3
    doc = simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=RDS, load="constant_current", i_nom=i_load,
                     v_on=v_on, timer=_timer())
    _, fig = _run(doc, t_fault)
    assert fig.status[0] == STATUS_TRIPPED
    # Source: C dv/dt = I - I_load: 3 V at 0.6 ms, then 1 V/ms; after the trip -4 V/ms
    t_on_load = c * v_on / i
    v_trip = v_on + (i - i_load) * (t_fault - t_on_load) / c
    t_zero = t_fault + c * (v_trip - v_on) / i_load
    w = fig.waveform
    t, v_out = np.array(w["t"]), np.array(w["v_out"])
    assert t[-1] > t_zero
    assert_allclose(v_out[-1], v_on, atol=1e-3 * v)  # holds at v_on once the load is off
    mid = (t > t_fault) & (t < t_zero)
    assert_allclose(v_out[mid], v_trip - i_load * (t[mid] - t_fault) / c, atol=1e-3 * v)


def test_rows_the_timer_does_not_reach_are_the_free_run():
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, i_limit=5.0, rds_on=2e-3, timer=_timer("retry", 1e-3),
                     l=100e-9, r=0.01)
    rail = read_rail(doc)
    free = simulate_startup(circuit_rows(rail, v_s=[12.0, 12.0], c=[1e-3, 2e-3]))
    t_fault = [3.0 * free.t_limit[0], 0.6 * free.t_limit[1]]
    timed = simulate_startup(circuit_rows(rail, v_s=[12.0, 12.0], c=[1e-3, 2e-3], t_fault=t_fault))
    assert timed.status[0] == STATUS_OK and timed.status[1] == STATUS_RETRIED
    for name in ("i_peak", "e_fet", "tj_peak", "t_limit", "t_settle", "v_supply_min", "t_end"):
        assert getattr(timed, name)[0] == getattr(free, name)[0]
    assert timed.t_limit[1] == free.t_limit[1]
    assert timed.attempts[1] > 1 and np.isnan(timed.pulse_e[0, 1])
