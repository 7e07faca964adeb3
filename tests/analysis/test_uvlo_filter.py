"""The supply dip as the upstream UVLO sees it: a first-order lag of the switch input.

Closed forms of a first-order lag tau dy/dt + y = u(t) from rest (the step, ramp and
exponential responses of a first-order system: K. Ogata, "Modern Control Engineering",
section 5-2, and the Laplace-transform pair of an exponential input; any control
textbook, written here from memory and re-derived), scipy's solve_ivp as an independent
integration, and the notch of the ideal regulating FET when a load switches on. The 1 us
default filter is common practice, no source.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from server.analysis import analyze_rail
from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.lag import lag_advance, lag_advance_floats
from server.analysis.startup import STATUS_OK, simulate_startup

from .rail_documents import simple_doc, slew_12v_demo


@pytest.fixture(autouse=True)
def _warnings_are_errors():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        yield


def _both(y0, u0, u1, dt, tau):
    """lag_advance on one-row arrays and lag_advance_floats, checked to agree."""
    a = lag_advance(np.array([y0]), np.array([u0]), np.array([u1]), np.array([dt]), tau)
    f = lag_advance_floats(y0, u0, u1, dt, tau)
    assert_allclose([a[0][0], a[1][0]], f, rtol=1e-13, atol=1e-13)
    return f


# (V, D, w, tau): a rectangular notch of depth D and width w from a settled level V
NOTCHES = [(12.0, 9.0, 28e-9, 1e-6), (12.0, 9.0, 28e-9, 1e-7), (48.0, 10.0, 5e-6, 1e-6), (5.0, 1.0, 3e-6, 3e-6)]


@pytest.mark.parametrize("v, d, w, tau", NOTCHES)
def test_rectangular_notch_dips_by_d_times_one_minus_exp(v, d, w, tau):
    # Source: step response of a first-order system, y = D (1 - exp(-t / tau)) below the
    # level it started from (Ogata, section 5-2): a notch of width w dips by
    # D (1 - exp(-w / tau)), then the output recovers.
    y1, low1 = _both(v, v - d, v - d, w, tau)
    dip = d * -math.expm1(-w / tau)
    assert_allclose(v - y1, dip, rtol=1e-12)
    assert_allclose(low1, y1, rtol=1e-15)
    y2, low2 = _both(y1, v, v, 10 * tau, tau)  # after the notch: recovery, no lower point
    assert low2 == y2 and y2 > y1
    assert_allclose(v - y2, dip * math.exp(-10.0), rtol=1e-9)


@pytest.mark.parametrize("a, t_end, tau", [(1e6, 5e-6, 1e-6), (-2e5, 1e-7, 1e-6), (3e3, 2.0, 1e-6)])
def test_ramp_response(a, t_end, tau):
    # Source: ramp response of a first-order system from rest, u = a t:
    # y(t) = a (t - tau (1 - exp(-t / tau))) (Ogata, section 5-2).
    y1, _ = _both(0.0, 0.0, a * t_end, t_end, tau)
    assert_allclose(y1, a * (t_end - tau * -math.expm1(-t_end / tau)), rtol=1e-10)


@pytest.mark.parametrize("y0, u0, u1, dt, tau", [(12.0, 8.0, 12.0, 3e-6, 1e-6), (12.0, 11.0, 11.9, 1e-5, 1e-6),
                                                 (10.0, 2.0, 30.0, 1e-6, 4e-6), (5.0, 5.5, 4.0, 2e-6, 1e-6)])
def test_lowest_value_inside_a_step_against_solve_ivp(y0, u0, u1, dt, tau):
    # Source: scipy.integrate.solve_ivp (DOP853, rtol 1e-12) of tau y' = u - y on a dense
    # grid. With the input rising while the output is still above it the lowest output
    # lies inside the step, where y meets u.
    y1, low = _both(y0, u0, u1, dt, tau)
    t = np.linspace(0.0, dt, 20001)
    sol = solve_ivp(lambda s, y: [(u0 + (u1 - u0) * s / dt - y[0]) / tau], (0.0, dt), [y0], method="DOP853",
                    t_eval=t, rtol=1e-12, atol=1e-12)
    assert_allclose(y1, sol.y[0, -1], rtol=1e-9)
    assert_allclose(low, sol.y[0].min(), rtol=1e-8)
    # composition: the same interval in 7 pieces gives the same end and the same minimum
    y, lows, tt = y0, [], np.linspace(0.0, dt, 8)
    for a, b in zip(tt[:-1], tt[1:]):
        y, lo = _both(y, u0 + (u1 - u0) * a / dt, u0 + (u1 - u0) * b / dt, b - a, tau)
        lows.append(lo)
    assert_allclose([y, min(lows)], [y1, low], rtol=1e-12)


def _start(doc):
    rail = read_rail(doc)
    cz = circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom])
    fig = simulate_startup(cz)
    assert fig.status[0] == STATUS_OK
    return fig


def test_current_limited_start_without_inductance():
    # Source: Kirchhoff's voltage law, v_in = v_s - r i with i = I during the limit, and
    # the lag's step response from v_s: it settles at v_s - r I long before the charge
    # (C V / I = 2.4 ms) ends.
    v, r, i = 12.0, 0.05, 5.0
    doc = simple_doc(mode="current_limit", v=v, c=1e-3, r=r, i_limit=i, rds_on=2e-3)
    doc["supply"]["uvlo_filter"] = 1e-6
    fig = _start(doc)
    assert_allclose(fig.v_supply_min[0], v - r * i, rtol=1e-9)
    assert_allclose(fig.v_supply_min_raw[0], v - r * i, rtol=1e-9)


@pytest.mark.parametrize("tau", [1e-6, 2e-6, 20e-6])
def test_hard_rc_start_through_the_filter(tau):
    # Source: an instant switch into R C, no inductance: i = V / R_t exp(-t / T), T = R_t C,
    # so v_in = v_s - A exp(-t / T), A = r V / R_t (KVL). A first-order lag from v_s then
    # gives y = v_s - A T / (T - tau) (exp(-t / T) - exp(-t / tau)) (Laplace transform,
    # partial fractions), lowest at t* = T tau ln(T / tau) / (T - tau).
    v, r, rds, c = 12.0, 0.05, 5e-3, 100e-6
    doc = simple_doc(mode="hard", v=v, c=c, r=r, i_limit=None, rds_on=rds, alpha=0.0)
    doc["supply"]["uvlo_filter"] = tau
    fig = _start(doc)
    rt = r + rds
    big_t, amp = rt * c, r * v / rt
    t_star = big_t * tau * math.log(big_t / tau) / (big_t - tau)
    dip = amp * big_t / (big_t - tau) * (math.exp(-t_star / big_t) - math.exp(-t_star / tau))
    # the input is linear between stage points; the engine's local tolerance (2e-4 of v_s)
    # bounds the error of that interpolation
    assert_allclose(v - fig.v_supply_min[0], dip, rtol=2e-3)
    # the lowest stage sample is the first one, a few ns after t = 0
    assert_allclose(fig.v_supply_min_raw[0], v - amp, rtol=1e-5)


def _demo(tau=None):
    doc = slew_12v_demo()
    if tau is not None:
        doc["supply"]["uvlo_filter"] = tau
    return doc


def _dip_check(result):
    return next(c for c in result["checks"] if c["id"] == "supply_dip")


def test_demo_rail_notch_through_the_default_filter():
    # When the constant-current load switches on at v_on the slew reference steps from
    # C dv/dt to C dv/dt + I and the ideal FET is fully on while the series inductance
    # takes the step: a notch of depth D ~ v_s - r i_0 - v_on and width w = L I / D.
    # Source: the rectangular-notch closed form above, D (1 - exp(-w / tau)); the drops
    # in r, esr and Rds(on) during the 30 ns are below 1 % of D.
    doc = _demo()
    r = analyze_rail(doc, headroom=False)
    s = r["startup"]
    assert r["startup"]["uvlo_filter"] == 1e-6  # the default
    sup, path, load = doc["supply"], doc["path"], doc["load"]
    l_tot, r_tot = sup["l_source"] + path["l"], sup["r_source"] + path["r"]
    i0 = load["c_nom"] * doc["switch"]["dvdt"]
    w0 = sup["v_nom"] - r_tot * i0
    depth = w0 - load["v_on"]
    width = l_tot * load["i_nom"] / depth
    assert 20e-9 < width < 40e-9
    assert_allclose(w0 - s["v_supply_min"], depth * -math.expm1(-width / 1e-6), rtol=0.02)
    check = _dip_check(r)
    assert check["verdict"] == "pass" and check["value"] == s["v_supply_min"]
    assert "1.00 us" in check["detail"] and "common practice, no source" in check["detail"]
    assert "unfiltered dip to 3.0" in check["detail"]
    # unfiltered, the switch input falls nearly to v_out for that instant
    assert load["v_on"] < s["v_supply_min_raw"] < load["v_on"] + 0.1


def test_demo_rail_fails_unfiltered_and_zero_filter_is_the_raw_figure():
    r0 = analyze_rail(_demo(0.0), headroom=False)
    s0 = r0["startup"]
    assert s0["v_supply_min"] == s0["v_supply_min_raw"]  # exactly the unfiltered figure
    check = _dip_check(r0)
    assert check["verdict"] == "fail" and check["value"] < 10.0
    assert "unfiltered" in check["detail"]
    assert _dip_check(analyze_rail(_demo(1e-6), headroom=False))["verdict"] == "pass"


def test_filter_does_not_steer_the_integration_and_is_monotone():
    taus = [0.0, 1e-8, 1e-7, 1e-6, 1e-5]
    res = [analyze_rail(_demo(t), headroom=False, waveforms=False)["startup"] for t in taus]
    raws = {s["v_supply_min_raw"] for s in res}
    assert len(raws) == 1  # the same steps whatever the filter
    assert len({s["i_peak"] for s in res}) == 1 and len({s["steps"] for s in res}) == 1
    mins = [s["v_supply_min"] for s in res]
    assert all(b >= a for a, b in zip(mins, mins[1:]))  # a slower filter never sees a deeper dip
    assert mins[0] == res[0]["v_supply_min_raw"] and mins[-1] < doc_v_nom()


def doc_v_nom():
    return slew_12v_demo()["supply"]["v_nom"]


def test_array_and_float_back_ends_agree():
    rail = read_rail(_demo())
    c = rail.load.c_nom
    one = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[c]))
    many = simulate_startup(circuit_rows(rail, v_s=[12.0, 12.0, 11.4], c=[c, 1.5 * c, c]))
    assert_allclose(many.v_supply_min[0], one.v_supply_min[0], rtol=1e-12)
    assert_allclose(many.v_supply_min_raw[0], one.v_supply_min_raw[0], rtol=1e-12)
    assert np.all(many.v_supply_min >= many.v_supply_min_raw)


def test_floor_only_skips_minima_that_cannot_matter():
    # The running minimum only needs the in-step minimum where it can fall below the
    # minimum so far: an interior minimum equals u(t*) >= u0 (the module's closed form).
    rng = np.random.default_rng(4)
    n = 2000
    y0, u0, u1 = 12 + rng.normal(0, 0.5, n), 12 + rng.normal(0, 0.5, n), 12 + rng.normal(0, 0.5, n)
    dt = 10 ** rng.uniform(-8, -5, n)
    floor = 12 + rng.normal(0, 0.5, n)
    y_a, low_a = lag_advance(y0, u0, u1, dt, 1e-6)
    y_b, low_b = lag_advance(y0, u0, u1, dt, 1e-6, floor)
    assert np.array_equal(y_a, y_b)
    assert np.array_equal(np.minimum(low_a, floor), np.minimum(low_b, floor))
    assert np.any(low_a < np.minimum(low_b, y_a))  # interior minima above the floor were skipped...
    for k in range(50):  # ... and the float back end does the same
        f = lag_advance_floats(y0[k], u0[k], u1[k], dt[k], 1e-6, floor[k])
        assert_allclose(min(f[1], floor[k]), min(low_b[k], floor[k]), rtol=1e-13)
