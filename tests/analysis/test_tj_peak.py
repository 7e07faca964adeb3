"""The junction temperature peak of the start-up, not under-sampled.

The transient's peak junction temperature is compared with an independent reference:
scipy's solve_ivp (Radau, rtol 1e-10) on the same circuit with Rds(on) following Tj at
every instant, read on a grid of 400,001 points (`reference_ode`). Stiff cases (Foster
stages of microseconds, nanohenries, instant turn-on) and slow ones (long turn-on ramps
into large capacitors, resistive loads with long R C, large steps) must agree within 0.5 %
of the rise above ambient. The interior maximum of a step (`thermal.foster_peak`) is
checked against the closed form of the Foster response sampled densely.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup
from server.analysis.thermal import foster_advance, foster_arrays, foster_peak, foster_peak_floats, foster_rate

from .rail_documents import FET_30V, FET_40V, FET_60V, simple_doc
from .reference_ode import reference_startup

# An invented FET with a Foster stage of 2 us (the die itself) under the usual package
# stages: the junction then follows the power within microseconds.
FET_FAST = copy.deepcopy(FET_40V)
FET_FAST["zth"] = [{"r": 0.05, "tau": 2e-6}, {"r": 0.15, "tau": 5e-5}, {"r": 0.5, "tau": 1e-3},
                   {"r": 2.3, "tau": 0.02}, {"r": 27.0, "tau": 3.0}]

CASES = {
    # stiff: nanohenries and a microsecond stage, instant turn-on into 220 uF
    "instant_hard_10nH_fast_stage": dict(mode="hard", v=12.0, c=220e-6, r=5e-3, l=10e-9, esr=5e-3, i_limit=None,
                                         rds_on=3e-3, fet=FET_FAST),
    # stiff: a 200 us turn-on ramp behind 50 nH, resistive load
    "ramp_hard_50nH": dict(mode="hard", v=12.0, c=1e-3, r=0.01, l=50e-9, esr=5e-3, load="resistive", i_nom=2.0,
                           i_limit=None, rds_on=3e-3, t_on=200e-6, fet=FET_FAST),
    # stiff: current limit with the fast stage, no inductance
    "current_limit_fast_stage": dict(mode="current_limit", v=24.0, c=470e-6, r=0.01, esr=0.01, load="resistive",
                                     i_nom=1.0, i_limit=6.0, rds_on=5e-3, fet=FET_FAST),
    # slow: a 20 ms ramp into 4.7 mF and a resistive load: long, large steps
    "slow_ramp_4mF7": dict(mode="hard", v=12.0, c=4.7e-3, r=0.03, load="resistive", i_nom=3.0, i_limit=None,
                           t_on=20e-3, rds_on=4e-3, fet=FET_40V),
    # slow: current limit into a resistive load with R C = 0.2 s
    "current_limit_long_rc": dict(mode="current_limit", v=12.0, c=47e-3, r=0.01, esr=2e-3, load="resistive",
                                  i_nom=2.0, i_limit=4.0, rds_on=4e-3, fet=FET_60V),
    # slow: instant hard start through a source resistance into 2.2 mF, resistive load
    "instant_rc_2mF2": dict(mode="hard", v=12.0, c=2.2e-3, r=0.05, load="resistive", i_nom=2.0, i_limit=None,
                            rds_on=20e-3, fet=FET_30V),
}


@pytest.mark.parametrize("alpha", [0.0, 0.005])
@pytest.mark.parametrize("name", sorted(CASES))
def test_tj_peak_against_solve_ivp(name, alpha):
    kw = dict(CASES[name])
    kw["fet"] = copy.deepcopy(kw["fet"])
    rail = read_rail(simple_doc(alpha=alpha, t_ambient=40.0, **kw))
    fig = simulate_startup(circuit_rows(rail, v_s=[kw["v"]], c=[kw["c"]]))
    assert fig.status[0] == STATUS_OK
    ref = reference_startup(rail, v_s=kw["v"], c=kw["c"], t_end=float(fig.t_end[0]))
    rise = ref["tj_peak"] - 40.0
    assert 10.0 < rise < rail.fet.tj_max + 100.0 - 40.0  # a rise worth checking, short of runaway
    # Source: scipy.integrate.solve_ivp (Radau, rtol 1e-10) of the same circuit, junction
    # temperature read on 400,001 points: within 0.5 % of the rise above ambient
    assert abs(fig.tj_peak[0] - ref["tj_peak"]) <= 5e-3 * rise
    # and the energy the FET took, within the engine's electrical tolerance accumulated
    assert_allclose(fig.e_fet[0], ref["e_fet"], rtol=5e-3)


def _closed_form_rise(theta0, p0, p1, dt, r, tau, s):
    # Source: closed form of tau dT/dt + T = r P(s) with P linear, P = p0 + q s, from T0:
    # T(s) = T0 e + r (p0 (1 - e) + q s (1 - (1 - e) tau / s)), e = exp(-s / tau)
    # (W. E. Boyce and R. C. DiPrima, "Elementary Differential Equations", chapter 2)
    q = (p1 - p0) / dt
    out = np.zeros_like(s)
    for t0, ri, ti in zip(theta0, r, tau):
        e1 = -np.expm1(-s / ti)
        out += t0 * (1.0 - e1) + ri * (p0 * e1 + q * s * (1.0 - e1 * ti / s))
    return out


@pytest.mark.parametrize("seed", range(4))
def test_foster_peak_finds_the_interior_maximum(seed):
    rng = np.random.default_rng(seed)
    r, tau = foster_arrays(FET_FAST["zth"])
    checked = 0
    for _ in range(40):
        dt = 10 ** rng.uniform(-7, -1)
        # stage rises left by an earlier, higher power, and a falling power
        theta0 = r * rng.uniform(0.0, 200.0) * -np.expm1(-rng.uniform(0.1, 3.0) * dt / tau)
        p0, p1 = rng.uniform(50.0, 500.0), rng.uniform(0.0, 20.0)
        # the contract: the rise increases at the start and decreases at the end
        theta1 = foster_advance(theta0[None, :], np.array([p0]), np.array([p1]), np.array([dt]), r, tau)
        if not (foster_rate(theta0[None, :], np.array([p0]), r, tau)[0] > 0.0
                > foster_rate(theta1, np.array([p1]), r, tau)[0]):
            continue
        checked += 1
        s = np.linspace(0.0, dt, 200001)[1:]
        dense = _closed_form_rise(theta0, p0, p1, dt, r, tau, s)
        j = int(np.argmax(dense))
        rise, at = foster_peak(theta0[None, :], np.array([p0]), np.array([p1]), np.array([dt]), r, tau)
        rise_f, at_f = foster_peak_floats(list(theta0), p0, p1, dt, r, tau)
        # Source: the closed form above on 200,000 points
        assert dense[j] * (1 - 1e-12) <= rise[0] <= dense[j] * (1 + 1e-8)
        assert abs(at[0] - s[j]) <= 2.0 * (s[1] - s[0]) + 1e-3 * dt
        assert_allclose([rise_f, at_f], [rise[0], at[0]], rtol=1e-10)
        # the value at the peak is the stepped update to that instant
        step = foster_advance(theta0[None, :], np.array([p0]), np.array([p0 + (p1 - p0) * at[0] / dt]), at, r, tau)
        assert_allclose(step.sum(), rise[0], rtol=1e-12)
    assert checked >= 10


def test_peak_between_stage_points_is_found():
    # A current-limited start into no load with the microsecond stage: the FET power falls
    # linearly, I (V - I t / C), and the junction peaks a little after t = 0, long before the
    # end of the 2 ms charge. Source: the Foster ramp response (superposition of step and
    # ramp responses of each stage; Boyce and DiPrima, chapter 2), maximised on 400,001
    # points: T_i(t) = r_i [P0 (1 - e) - (P0 / T) (t - tau_i (1 - e))], e = exp(-t / tau_i).
    v, c, i = 24.0, 470e-6, 6.0
    rail = read_rail(simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=1e-6, t_ambient=40.0,
                                fet=copy.deepcopy(FET_FAST)))
    fig = simulate_startup(circuit_rows(rail, v_s=[v], c=[c]), record=0)
    p0, t_ch = v * i, c * v / i
    t = np.linspace(0.0, t_ch, 400001)
    rise = np.zeros_like(t)
    r, tau = foster_arrays(FET_FAST["zth"])
    for ri, ti in zip(r, tau):
        e = -np.expm1(-t / ti)
        rise += ri * (p0 * e - (p0 / t_ch) * (t - ti * e))
    assert_allclose(fig.tj_peak[0] - 40.0, rise.max(), rtol=1e-3)
    # the recorded stage points alone may miss it; the figure does not
    assert max(fig.waveform["tj"]) <= fig.tj_peak[0] + 1e-9


def test_runaway_stops_the_row_with_its_figures():
    # A 1 F supercapacitor charged at 20 A from 24 V: 480 W for over a second melts any
    # small FET; the row stops once Tj passes tj_max + 100 K, with what it computed.
    rail = read_rail(simple_doc(mode="current_limit", v=24.0, c=1.0, i_limit=20.0, rds_on=2e-3,
                                fet=copy.deepcopy(FET_60V)))
    fig = simulate_startup(circuit_rows(rail, v_s=[24.0], c=[1.0]))
    from server.analysis.startup import STATUS_RUNAWAY, TJ_RUNAWAY_K

    assert fig.status[0] == STATUS_RUNAWAY
    assert fig.tj_peak[0] > rail.fet.tj_max + TJ_RUNAWAY_K
    assert 0.0 < fig.t_end[0] < 1.0 * 24.0 / 20.0  # well before the charge would end
    # Source: a capacitor charged at constant current, v = I t / C, and the FET energy
    # int I (V - I t / C) dt (Alexander and Sadiku, section 6.2)
    t = fig.t_end[0]
    assert_allclose(fig.e_fet[0], 20.0 * 24.0 * t - 20.0**2 * t**2 / 2.0, rtol=1e-3)
    assert math.isnan(fig.t_limit[0]) and math.isnan(fig.t_settle[0])
