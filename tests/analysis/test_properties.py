"""Property tests (hypothesis) of the start-up model, and two facts of the trade.

The properties follow from the circuit laws (sources beside each); the facts of the trade
are common practice, no source, and are marked as such.
"""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from server.analysis import analyze_rail
from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup
from server.analysis.thermal import foster_arrays, zth

from .rail_documents import FET_60V, efuse_12v, simple_doc, slew_24v

# The electrical properties are checked on a FET on an ideal heat sink (an invented,
# thermally negligible Foster network): the transient stops a row whose junction passes
# tj_max + 100 K, as some of the drawn starts otherwise would.
FET_SINK = {**FET_60V, "zth": [{"r": 1e-6, "tau": 1e-3}]}

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])

volts = st.floats(3.3, 48.0)
caps = st.floats(47e-6, 10e-3)
ratios = st.floats(1.2, 8.0)
resist = st.floats(0.0, 0.05)
induct = st.floats(0.0, 500e-9)


def _two_caps(doc, c1, c2):
    rail = read_rail(doc)
    cz = circuit_rows(rail, v_s=[rail.supply.v_nom] * 2, c=[c1, c2])
    fig = simulate_startup(cz)
    assert np.all(fig.status == STATUS_OK)
    return fig


@SETTINGS
@given(v=volts, c=caps, k=ratios, i=st.floats(0.5, 20.0), r=resist, l=induct)
def test_current_limit_peak_does_not_grow_with_c_and_time_scales_with_c(v, c, k, i, r, l):
    # Source: with the current held at i_limit, C dv/dt = I: the charge time is C V' / I,
    # proportional to C, and the current never exceeds the limit whatever C is. With a
    # series inductance the current first rises for L I / V (independent of C), so the
    # proportion holds up to that rise time.
    fig = _two_caps(simple_doc(mode="current_limit", v=v, c=c, r=r, l=l, i_limit=i, rds_on=2e-3,
                                fet=FET_SINK), c, k * c)
    assert fig.i_peak[1] <= fig.i_peak[0] * (1 + 1e-6) + 1e-9
    assert_allclose(fig.i_peak, i, rtol=1e-6)
    t_rise = l * i / v
    assert abs(fig.t_limit[1] - k * fig.t_limit[0]) <= 2e-3 * fig.t_limit[1] + 2.0 * k * t_rise


@SETTINGS
@given(v=volts, c=caps, k=ratios, r=st.floats(1e-3, 0.05), l=st.floats(1e-9, 500e-9))
def test_hard_start_peak_grows_with_c(v, c, k, r, l):
    # Source: series RLC step response: the peak current rises with C (V / sqrt(L/C) e^..
    # when underdamped, towards V / R when overdamped); never falls.
    fig = _two_caps(simple_doc(mode="hard", v=v, c=c, r=r, l=l, i_limit=None, rds_on=2e-3, fet=FET_SINK),
                    c, k * c)
    assert fig.i_peak[1] >= fig.i_peak[0] * (1 - 1e-3)


@SETTINGS
@given(v=volts, c=caps, mode=st.sampled_from(["hard", "current_limit", "slew", "power_limit"]),
       load=st.sampled_from(["none", "resistive", "constant_current", "constant_power"]),
       frac=st.floats(0.05, 0.5))
def test_fet_energy_at_least_half_cv2_for_any_load(v, c, mode, load, frac):
    # Source: energy balance with the FET as the only resistance: the source delivers
    # V (C V_f + Q_load), the capacitor keeps C V_f^2 / 2, so the FET dissipates
    # C V V_f - C V_f^2 / 2 + int (V - v) i_load dt >= C V_f^2 / 2 for any load (V >= V_f).
    i_lim = max(2.0, 40.0 * c * v / 1e-3 * 1e-3)
    i_nom = frac * i_lim if load != "none" else 0.0
    v_on = 0.5 * v if load == "constant_power" else 0.0
    doc = simple_doc(mode=mode, v=v, c=c, load=load, i_nom=i_nom, v_on=v_on, rds_on=2e-3,
                     i_limit=None if mode in ("hard", "slew") else i_lim,
                     dvdt=(v / 5e-3) if mode == "slew" else None,
                     p_limit=(v * i_lim / 4) if mode == "power_limit" else None)
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[v], c=[c]))
    if fig.status[0] != STATUS_OK:
        return  # a limit below the load stalls; nothing to check
    v_f = fig.v_final[0]
    assert fig.e_fet[0] >= 0.5 * c * v_f * v_f * (1 - 3e-3)


@SETTINGS
@given(make=st.sampled_from([efuse_12v, slew_24v]), t_amb=st.floats(-40.0, 85.0))
def test_junction_never_below_ambient(make, t_amb):
    # Source: a passive thermal network driven by dissipated power P >= 0 only heats:
    # every Foster stage obeys tau dT/dt = r P - T with T(0) = 0, so T >= 0.
    doc = make()
    doc["environment"]["t_ambient"] = t_amb
    r = analyze_rail(doc, headroom=False, corners=False)
    assert r["startup"]["tj_peak"] >= t_amb
    assert min(r["startup"]["waveforms"]["tj"]) >= t_amb - 1e-9
    assert r["steady"]["tj"] >= t_amb


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(c_tol=st.floats(0.05, 0.4), i_tol=st.floats(0.02, 0.3), spread=st.floats(0.02, 0.1))
def test_corners_bracket_the_nominal(c_tol, i_tol, spread):
    # Each figure is monotone in v, C and i_limit, so its extremes over the tolerance box
    # lie at corners and the nominal lies between them (a monotone function on a box).
    # The corners alone (the worst-case search looks inside the box as well).
    doc = efuse_12v()
    doc["load"]["c_tol"] = c_tol
    doc["switch"]["i_limit_tol"] = i_tol
    doc["supply"]["v_min"] = 12.0 * (1 - spread)
    doc["supply"]["v_max"] = 12.0 * (1 + spread)
    r = analyze_rail(doc, corners=True, headroom=False, waveforms=False)
    for key in ("i_peak", "t_limit", "e_fet", "tj_peak"):
        vals = [c["figures"][key] for c in r["corners"]]
        nominal = r["startup"][key]
        assert min(vals) * (1 - 1e-3) <= nominal <= max(vals) * (1 + 1e-3)


def test_current_limited_start_ramps_almost_linearly():
    # Common practice, no source: a current-limited start into a capacitive load ramps the
    # output almost linearly (a constant current into a capacitor, plus a small load).
    r = analyze_rail(efuse_12v(), headroom=False, corners=False)
    w = r["startup"]["waveforms"]
    t = np.array(w["t"])
    v = np.array(w["v_out"])
    t_lim = r["startup"]["t_limit"]
    sel = (t > 0.05 * t_lim) & (t < 0.95 * t_lim)
    fit = np.polyfit(t[sel], v[sel], 1)
    dev = np.abs(np.polyval(fit, t[sel]) - v[sel]).max()
    assert dev < 0.06 * 12.0  # within 6 % of the supply over the ramp (resistive load bends it)


def test_equivalent_rectangle_is_conservative_for_a_triangular_pulse():
    # Common practice, no source: the SOA check of a triangular pulse as the rectangle of
    # the same energy and peak power (P0 for T/2) is conservative against the Foster
    # result: the rectangle heats the junction at least as much as the triangle.
    r, tau = foster_arrays(FET_60V["zth"])
    p0 = 100.0
    for t_pulse in (1e-5, 1e-4, 1e-3, 1e-2, 0.1, 1.0):
        t = np.linspace(0.0, t_pulse, 4001)
        tri = np.zeros_like(t)
        for ri, ti in zip(r, tau):
            e = -np.expm1(-t / ti)
            tri += ri * (p0 * e - (p0 / t_pulse) * (t - ti * e))  # closed-form ramp response
        rect = p0 * zth(FET_60V["zth"], t_pulse / 2.0)
        assert rect >= tri.max() * (1 - 1e-12)
