"""Foster network, SOA interpolation and derating, short circuit, retry, steady state."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis import derated_soa_curves, soa_allowed_time, zth
from server.analysis.document import read_fet, read_rail
from server.analysis.retry import retry_figures
from server.analysis.shortcircuit import short_circuit
from server.analysis.soa import allowed_current, derating_factor, equivalent_rectangle
from server.analysis.steady import steady_state
from server.analysis.thermal import foster_advance, foster_advance_floats, foster_arrays, time_to_rise

from .rail_documents import FET_40V, FET_60V, efuse_12v, simple_doc

STAGES = FET_60V["zth"]


def _rect_response(stages, p, t_pulse, t):
    # Source: Foster network response to a rectangular power pulse (superposition of a
    # step +P at 0 and -P at t_pulse on each first-order stage tau dT/dt + T = r P):
    # T(t) = P sum r_i (1 - exp(-t / tau_i)) for t <= t_pulse, and
    # T(t) = P sum r_i (1 - exp(-t_pulse / tau_i)) exp(-(t - t_pulse) / tau_i) after.
    out = np.zeros_like(t)
    for s in stages:
        r, tau = s["r"], s["tau"]
        on = r * p * -np.expm1(-np.minimum(t, t_pulse) / tau)
        out += np.where(t <= t_pulse, on, on * np.exp(-(t - t_pulse) / tau))
    return out


@pytest.mark.parametrize("t", [1e-6, 1e-4, 3e-3, 0.1, 10.0, 1e3])
def test_zth_closed_form(t):
    # Source: Foster network Zth(t) = sum r_i (1 - exp(-t / tau_i)) (its definition).
    expected = sum(s["r"] * (1 - math.exp(-t / s["tau"])) for s in STAGES)
    assert_allclose(zth(STAGES, t), expected, rtol=1e-12)


def test_zth_long_time_limit_is_rth():
    # Source: Zth(inf) = sum r_i, the steady-state thermal resistance (definition).
    assert_allclose(zth(STAGES, 1e9), sum(s["r"] for s in STAGES), rtol=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_foster_stepping_matches_rectangular_pulse_for_any_steps(seed):
    # Exact update with piecewise-linear power: arbitrary (random) step sizes reproduce
    # the closed-form rectangular-pulse response above to rounding.
    rng = np.random.default_rng(seed)
    r, tau = foster_arrays(STAGES)
    p, t_pulse = 80.0, 2e-3
    edges = np.sort(np.concatenate([[0.0, t_pulse, 0.02], rng.uniform(0, 0.02, 60)]))
    theta = np.zeros((1, r.size))
    theta_f = [0.0] * r.size
    for a, b in zip(edges[:-1], edges[1:]):
        pw = p if b <= t_pulse else 0.0
        theta = foster_advance(theta, np.array([pw]), np.array([pw]), np.array([b - a]), r, tau)
        theta_f = foster_advance_floats(theta_f, pw, pw, b - a, r, tau)
    ref = _rect_response(STAGES, p, t_pulse, np.array([edges[-1]]))[0]
    assert_allclose(theta.sum(), ref, rtol=1e-10)
    assert_allclose(sum(theta_f), ref, rtol=1e-10)


def test_time_to_rise_inverts_zth():
    # Zth is increasing, so P Zth(t) = dT has one root; check P Zth(t_found) = dT.
    r, tau = foster_arrays(STAGES)
    p = np.array([5.0, 50.0, 500.0, 5000.0])
    t = time_to_rise(r, tau, p, 150.0)
    assert_allclose(p * zth(STAGES, t), 150.0, rtol=1e-7)
    assert np.isinf(time_to_rise(r, tau, np.array([1.0]), 150.0))[0]  # 40 K/W * 1 W < 150 K


# ---------------------------------------------------------------------------------- SOA

FET = read_rail(efuse_12v()).fet  # FET_40V


@pytest.mark.parametrize("v", [1.0, 5.0, 12.0, 30.0])
def test_soa_loglog_interpolation_along_and_between_curves(v):
    # Source (method of DESIGN.md section 4, common practice for datasheet SOA charts):
    # log I linear in log V along a curve, log I linear in log t between curves. Hand
    # computation for the 1 ms and 10 ms curves of FET_40V at the geometric mean 3.16 ms.
    def on_curve(points, vv):
        lv = np.log([q[0] for q in points])
        li = np.log([q[1] for q in points])
        return math.exp(np.interp(math.log(vv), lv, li))

    c1 = FET_40V["soa"]["curves"][2]["points"]  # 1 ms
    c2 = FET_40V["soa"]["curves"][3]["points"]  # 10 ms
    i1, i2 = on_curve(c1, v), on_curve(c2, v)
    expected = math.sqrt(i1 * i2)  # halfway in log t
    got = allowed_current(FET, np.array([v]), np.array([math.sqrt(1e-3 * 1e-2)]), 25.0)[0]
    assert_allclose(got, expected, rtol=1e-12)
    assert_allclose(allowed_current(FET, np.array([v]), np.array([1e-3]), 25.0)[0], i1, rtol=1e-12)


def test_soa_derating_is_linear_in_temperature():
    # Source: DESIGN.md section 4: derate the allowed power by (tj_max - T) / (tj_max - t_case).
    for t_amb in (25.0, 60.0, 100.0, 150.0):
        k = (175.0 - t_amb) / (175.0 - 25.0)
        assert_allclose(derating_factor(FET, t_amb), k, rtol=1e-12)
        got = allowed_current(FET, np.array([12.0]), np.array([1e-3]), t_amb)[0]
        assert_allclose(got, k * allowed_current(FET, np.array([12.0]), np.array([1e-3]), 25.0)[0], rtol=1e-12)
    curves = derated_soa_curves(efuse_12v()["fet"], 100.0)
    assert_allclose(curves[0]["points"][0][1], 400.0 * 0.5, rtol=1e-12)
    assert curves[-1]["t_pulse"] is None


@pytest.mark.parametrize("v, t", [(2.0, 3e-5), (12.0, 3e-4), (12.0, 5e-3), (30.0, 0.05), (12.0, 0.08)])
def test_soa_allowed_time_inverts_allowed_current(v, t):
    i = allowed_current(FET, np.array([v]), np.array([t]), 60.0)[0]
    assert_allclose(soa_allowed_time(FET, v, i * (1 - 1e-9), 60.0)[0], t, rtol=1e-6)


def test_soa_dc_curve_is_the_long_time_limit():
    i_dc = allowed_current(FET, np.array([12.0]), np.array([np.inf]), 25.0)[0]
    assert np.isinf(soa_allowed_time(FET, 12.0, 0.99 * i_dc, 25.0)[0])
    assert allowed_current(FET, np.array([12.0]), np.array([1e4]), 25.0)[0] >= i_dc * (1 - 1e-12)
    # a current the shortest curve does not allow is allowed for no time at all (conservative)
    assert soa_allowed_time(FET, 12.0, 1e4, 25.0)[0] == 0.0


# An invented chart: four curves drawn as straight lines on log-log axes (t_case 25 degC).
CHART = {
    "name": "INV-CHART", "vds_max": 60.0, "id_pulse_max": 60.0, "rds_on": 0.01, "rds_on_alpha": 0.005,
    "tj_max": 150.0, "rth_ja": 40.0, "zth": [{"r": 1.0, "tau": 1e-3}, {"r": 39.0, "tau": 1.0}],
    "soa": {"t_case": 25.0, "curves": [
        {"t_pulse": 1e-4, "points": [[2.0, 50.0], [20.0, 50.0], [60.0, 10.0]]},
        {"t_pulse": 1e-3, "points": [[2.0, 30.0], [10.0, 30.0], [60.0, 3.0]]},
        {"t_pulse": 1e-2, "points": [[2.0, 15.0], [5.0, 15.0], [60.0, 0.8]]},
        {"t_pulse": None, "points": [[2.0, 5.0], [3.0, 5.0], [60.0, 0.1]]},
    ]},
}


def _on_line(v, v0, i0, v1, i1):
    """A straight line on log-log axes through (v0, i0) and (v1, i1), read at v (by hand)."""
    return i0 * (v / v0) ** (math.log(i1 / i0) / math.log(v1 / v0))


def test_soa_reading_between_the_longest_curve_and_dc_is_the_longest_pulse_width():
    # Hand reading of the invented chart at 30 V: the 10 ms curve allows
    # 15 (30/5)^(ln(0.8/15)/ln 12) = 1.81 A, the DC curve 5 (30/3)^(ln(0.1/5)/ln 20) = 0.247 A.
    i_10ms = _on_line(30.0, 5.0, 15.0, 60.0, 0.8)
    i_dc = _on_line(30.0, 3.0, 5.0, 60.0, 0.1)
    assert_allclose([i_10ms, i_dc], [1.8119, 0.24724], rtol=1e-3)
    # 1 A lies between them: a datasheet reader allows the longest curve's pulse width, 10 ms,
    # and nothing longer (no extrapolation along the chart)
    assert_allclose(soa_allowed_time(CHART, 30.0, 1.0, 25.0), [1e-2], rtol=1e-12)
    assert_allclose(soa_allowed_time(CHART, 30.0, 0.99 * i_10ms, 25.0), [1e-2], rtol=1e-12)
    # a pulse longer than 10 ms is allowed the DC curve's current only
    assert_allclose(allowed_current(read_fet(CHART), np.array([30.0]), np.array([0.05]), 25.0), [i_dc], rtol=1e-9)
    assert np.isinf(soa_allowed_time(CHART, 30.0, 0.9 * i_dc, 25.0)[0])
    # without a DC curve nothing beyond the longest curve is allowed
    no_dc = copy.deepcopy(CHART)
    no_dc["soa"]["curves"] = no_dc["soa"]["curves"][:3]
    assert allowed_current(read_fet(no_dc), np.array([30.0]), np.array([0.05]), 25.0)[0] == 0.0
    assert_allclose(soa_allowed_time(no_dc, 30.0, 0.1, 25.0), [1e-2], rtol=1e-12)


def test_soa_reading_above_the_shortest_curves_current_allows_nothing():
    # Hand reading at 30 V: the 100 us curve allows 50 (30/20)^(ln 0.2 / ln 3) = 27.6 A
    i_100us = _on_line(30.0, 20.0, 50.0, 60.0, 10.0)
    assert_allclose(i_100us, 27.606, rtol=1e-4)
    assert soa_allowed_time(CHART, 30.0, 1.01 * i_100us, 25.0)[0] == 0.0
    # a pulse shorter than the shortest curve gets that curve's current, not more
    assert_allclose(allowed_current(read_fet(CHART), np.array([30.0]), np.array([1e-6]), 25.0), [i_100us],
                    rtol=1e-9)
    # between two curves: log I linear in log t (1 ms curve at 30 V: 30 (30/10)^(ln 0.1 / ln 6))
    i_1ms = _on_line(30.0, 10.0, 30.0, 60.0, 3.0)
    t_mid = math.sqrt(1e-4 * 1e-3)
    want = math.exp(0.5 * (math.log(i_100us) + math.log(i_1ms)))
    assert_allclose(allowed_current(read_fet(CHART), np.array([30.0]), np.array([t_mid]), 25.0), [want], rtol=1e-9)


def test_equivalent_rectangle_of_a_triangle_is_half_its_length():
    # Source: a triangle of peak P and length T has energy P T / 2 (area of a triangle).
    assert_allclose(equivalent_rectangle(0.5 * 100.0 * 2e-3, 100.0), 1e-3, rtol=1e-15)


def test_short_circuit_uses_the_smaller_of_soa_and_thermal():
    rail = read_rail(efuse_12v())
    sc = short_circuit(rail, v_ds=np.array([12.6]), i_limit=np.array([3.3]), t_fault=np.array([10e-3]))
    assert_allclose(sc["p"], 12.6 * 3.3, rtol=1e-12)
    assert_allclose(sc["t_soa"], soa_allowed_time(rail.fet, 12.6, 3.3, rail.t_ambient), rtol=1e-12)
    r, tau = foster_arrays(rail.fet.zth)
    assert_allclose(sc["t_thermal"], time_to_rise(r, tau, np.array([12.6 * 3.3]), 175.0 - 60.0), rtol=1e-12)
    assert_allclose(sc["t_allow"], min(sc["t_soa"][0], sc["t_thermal"][0]), rtol=1e-12)
    assert_allclose(sc["margin"], sc["t_allow"] / 10e-3, rtol=1e-12)


# ------------------------------------------------------------------------ retry, steady

@pytest.mark.parametrize("t_on, t_off", [(1e-3, 0.1), (10e-3, 1.0), (50e-3, 0.05), (2e-3, 10.0)])
def test_retry_periodic_steady_state_against_many_periods(t_on, t_off):
    # Independent check: step the exact Foster update through 400 periods from ambient;
    # the peak of the last period converges to the closed-form periodic steady state.
    r, tau = foster_arrays(STAGES)
    p = 60.0
    got = retry_figures(r, tau, p=np.array([p]), t_on=np.array([t_on]), t_off=t_off, t_ambient=25.0)
    theta = [0.0] * r.size
    for _ in range(4000):
        theta = foster_advance_floats(theta, p, p, t_on, r, tau)
        peak = sum(theta)
        theta = foster_advance_floats(theta, 0.0, 0.0, t_off, r, tau)
        if abs(peak - (got["tj_peak"][0] - 25.0)) < 1e-9 * peak:
            break
    assert_allclose(got["tj_peak"][0] - 25.0, peak, rtol=1e-6)
    assert_allclose(got["duty"][0], t_on / (t_on + t_off), rtol=1e-15)
    assert_allclose(got["p_avg"][0], p * t_on / (t_on + t_off), rtol=1e-15)


def test_retry_continuous_limit_is_rth():
    # Duty -> 1: the train becomes DC, the peak tends to P * sum(r) (steady state).
    r, tau = foster_arrays(STAGES)
    got = retry_figures(r, tau, p=np.array([2.0]), t_on=np.array([1e4]), t_off=1e-9, t_ambient=25.0)
    assert_allclose(got["tj_peak"][0], 25.0 + 2.0 * r.sum(), rtol=1e-6)


@pytest.mark.parametrize("i_load, alpha, rds, rth", [(5.0, 0.005, 5e-3, 40.0), (10.0, 0.008, 8e-3, 30.0),
                                                     (1.0, 0.0, 2e-3, 60.0)])
def test_steady_constant_current_fixed_point_closed_form(i_load, alpha, rds, rth):
    # Source: for a constant current the fixed point tj = ta + rth I^2 rds (1 + a (tj - 25))
    # is linear in tj: tj = (ta + k (1 - 25 a)) / (1 - k a), k = rth I^2 rds.
    doc = simple_doc(mode="hard", i_limit=None, load="constant_current", i_nom=i_load, v_on=1.0,
                     rds_on=rds, alpha=alpha, t_ambient=50.0)
    doc["fet"]["rth_ja"] = rth
    st = steady_state(read_rail(doc), v_s=np.array([12.0]))
    k = rth * i_load**2 * rds
    tj = (50.0 + k * (1 - 25 * alpha)) / (1 - k * alpha)
    assert st["stable"][0]
    assert_allclose(st["tj"][0], tj, rtol=1e-9)
    assert_allclose(st["p_fet"][0], i_load**2 * rds * (1 + alpha * (tj - 25)), rtol=1e-9)


def test_steady_thermal_runaway_when_k_alpha_reaches_one():
    # k alpha >= 1: the heating grows faster than the cooling, no fixed point (runaway).
    doc = simple_doc(mode="hard", i_limit=None, load="constant_current", i_nom=20.0, v_on=1.0,
                     rds_on=5e-3, alpha=0.01, t_ambient=50.0)
    doc["fet"]["rth_ja"] = 60.0  # k = 60 * 400 * 5e-3 = 120, k alpha = 1.2
    st = steady_state(read_rail(doc), v_s=np.array([12.0]))
    assert not st["stable"][0]
    assert np.isnan(st["tj"][0])
