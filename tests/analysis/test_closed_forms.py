"""The start-up transient against textbook closed forms.

Each reference value comes from a closed form named beside it; the formulas are the
standard ones of circuit-analysis textbooks, written here from memory and re-derived
(the derivation is one line of algebra or a first/second-order linear ODE each).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup

from .rail_documents import FET_60V, simple_doc

# The electrical closed forms are checked on a FET on an ideal heat sink (an invented,
# thermally negligible Foster network): the transient stops a row whose junction passes
# tj_max + 100 K, as some of these hard and supercapacitor starts otherwise would.
FET_SINK = {**FET_60V, "zth": [{"r": 1e-6, "tau": 1e-3}]}


def _start(doc, **kw):
    rail = read_rail(doc)
    cz = circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom])
    fig = simulate_startup(cz, **kw)
    assert fig.status[0] == STATUS_OK
    return fig


# (V, R series, Rds(on), ESR, L, C): underdamped series RLC with a hard switch, no load
RLC_CASES = [
    (12.0, 2e-3, 3e-3, 0.0, 100e-9, 1e-3),
    (5.0, 10e-3, 2e-3, 5e-3, 50e-9, 220e-6),
    (48.0, 20e-3, 8e-3, 10e-3, 1e-6, 470e-6),
]


@pytest.mark.parametrize("v, r, rds, esr, l, c", RLC_CASES)
def test_series_rlc_peak_current_and_time(v, r, rds, esr, l, c):
    # Source: step response of a series RLC circuit from rest (e.g. C. K. Alexander and
    # M. N. O. Sadiku, "Fundamentals of Electric Circuits", section 8.5), underdamped:
    # i(t) = V / (L wd) exp(-a t) sin(wd t), a = R / 2L, wd = sqrt(1/LC - a^2);
    # the peak is at tp = atan(wd / a) / wd. Formula from memory, re-derived.
    fig = _start(simple_doc(mode="hard", v=v, c=c, r=r, l=l, esr=esr, i_limit=None, rds_on=rds,
                                      fet=FET_SINK))
    rt = r + rds + esr
    a = rt / (2 * l)
    wd = math.sqrt(1 / (l * c) - a * a)
    tp = math.atan(wd / a) / wd
    ipk = v / (l * wd) * math.exp(-a * tp) * math.sin(wd * tp)
    assert_allclose(fig.i_peak[0], ipk, rtol=2e-3)
    assert_allclose(fig.t_i_peak[0], tp, rtol=1e-2)
    assert fig.t_limit[0] == 0.0  # a hard switch never regulates


# (V, C, I): constant-current charge of a capacitor, no load
CC_CASES = [(12.0, 1e-3, 5.0), (48.0, 470e-6, 2.0), (3.3, 100e-6, 0.5), (24.0, 1.0, 20.0)]


@pytest.mark.parametrize("v, c, i", CC_CASES)
def test_current_limited_charge_time(v, c, i):
    # Source: a capacitor charged by a constant current, Q = C V = I t, so t = C V / I
    # (Alexander and Sadiku, section 6.2). The limit ends at v - I Rds(on).
    rds = 1e-4
    fig = _start(simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=rds, fet=FET_SINK))
    assert_allclose(fig.t_limit[0], c * (v - i * rds) / i, rtol=1e-3)
    assert_allclose(fig.i_peak[0], i, rtol=1e-9)


@pytest.mark.parametrize("mode, extra, rtol", [
    ("current_limit", {"i_limit": 5.0}, 3e-3),
    ("hard", {"i_limit": None}, 3e-3),
    # a hard start behind 10 nH rings (Q = 1.6): the energy integral carries the
    # accumulated integration error, about 0.4 % at the engine's tolerance
    ("hard", {"i_limit": None, "l": 10e-9}, 6e-3),
    ("slew", {"i_limit": None, "dvdt": 5000.0}, 3e-3),
    ("power_limit", {"i_limit": 10.0, "p_limit": 30.0}, 3e-3),
])
def test_energy_balance_half_cv_squared(mode, extra, rtol):
    # Source: textbook energy balance: a capacitor charged from a stiff source through any
    # resistance dissipates C V^2 / 2 in it (Alexander and Sadiku, section 6.3 energy of a
    # capacitor; the charge-transfer loss). With no other resistance it is all in the FET.
    v, c = 12.0, 1e-3
    kw = {"r": 0.0, "esr": 0.0, "l": 0.0}
    kw.update(extra)
    fig = _start(simple_doc(mode=mode, v=v, c=c, rds_on=2e-3, fet=FET_SINK, **kw))
    # the run stops when the output is within 0.1 % of its final value
    assert_allclose(fig.e_fet[0], 0.5 * c * v * v, rtol=rtol)


# (V, C, I, R_load): current limit into a resistive load
RC_CASES = [(12.0, 1e-3, 5.0, 4.0), (12.0, 470e-6, 3.0, 6.0), (48.0, 220e-6, 2.0, 48.0)]


@pytest.mark.parametrize("v, c, i, r_load", RC_CASES)
def test_current_limit_into_resistive_load(v, c, i, r_load):
    # Source: first-order response of a parallel RC fed by a current source,
    # v(t) = I R (1 - exp(-t / RC)), so the limit ends at t = -R C ln(1 - V / (I R))
    # (Alexander and Sadiku, section 7.6, step response of an RC circuit).
    rds = 1e-6
    fig = _start(simple_doc(mode="current_limit", v=v, c=c, load="resistive", i_nom=v / r_load,
                            i_limit=i, rds_on=rds))
    v_end = v - i * rds
    assert_allclose(fig.t_limit[0], -r_load * c * math.log(1 - v_end / (i * r_load)), rtol=1e-3)


def test_slew_mode_ramp_time():
    # Source: an output ramped at a constant dv/dt reaches V after V / (dv/dt); the
    # capacitor current is C dv/dt (definition of capacitance, i = C dv/dt).
    v, c, dvdt = 24.0, 2.2e-3, 2000.0
    rds = 1e-5
    fig = _start(simple_doc(mode="slew", v=v, c=c, dvdt=dvdt, i_limit=None, rds_on=rds))
    i = c * dvdt
    assert_allclose(fig.i_peak[0], i, rtol=1e-6)
    assert_allclose(fig.t_limit[0], (v - i * rds) / dvdt, rtol=1e-3)


def test_current_limit_junction_temperature_against_foster_ramp_response():
    # Source: Foster stage response to a linearly falling power P(t) = P0 (1 - t / T):
    # T_i(t) = r_i [P0 (1 - e) - (P0 / T) (t - tau_i (1 - e))], e = exp(-t / tau_i)
    # (superposition of step and ramp responses of a first-order system; Boyce and
    # DiPrima, chapter 2). During a current-limited charge of C from V with no load the
    # FET power is exactly I (V - I t / C).
    v, c, i = 12.0, 2.2e-3, 4.0
    doc = simple_doc(mode="current_limit", v=v, c=c, i_limit=i, rds_on=1e-6, t_ambient=40.0)
    fig = _start(doc)
    p0, t_ch = v * i, c * v / i
    t = np.linspace(0.0, t_ch, 20001)
    rise = np.zeros_like(t)
    for st in doc["fet"]["zth"]:
        e = -np.expm1(-t / st["tau"])
        rise += st["r"] * (p0 * e - (p0 / t_ch) * (t - st["tau"] * e))
    assert_allclose(fig.tj_peak[0], 40.0 + rise.max(), rtol=0, atol=2e-3 * rise.max())


@pytest.mark.parametrize("v, c, p, i", [(48.0, 470e-6, 60.0, 5.0), (12.0, 2.2e-3, 20.0, 8.0), (54.0, 100e-6, 100.0, 10.0)])
def test_power_limit_then_current_limit_charge_time(v, c, p, i):
    # Source: separable ODE of a capacitor fed at constant FET power from a stiff source,
    # C dv/dt = P / (V - v): t1 = C (V^2 - (V - v1)^2) / (2 P) up to v1 = V - P / I where
    # the current reaches the limit; then C dv/dt = I up to V - I Rds: t2 = C (V - I Rds - v1) / I.
    # (Derived here; the constant-power charge of a capacitor is textbook calculus.)
    rds = 1e-5
    fig = _start(simple_doc(mode="power_limit", v=v, c=c, p_limit=p, i_limit=i, rds_on=rds))
    v1 = v - p / i
    t1 = c * (v * v - (v - v1) ** 2) / (2 * p)
    t2 = c * (v - i * rds - v1) / i
    assert_allclose(fig.t_limit[0], t1 + t2, rtol=2e-3)
    assert_allclose(fig.p_fet_peak[0], p, rtol=1e-3)
    assert_allclose(fig.i_peak[0], i, rtol=1e-6)
