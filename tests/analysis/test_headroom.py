"""Design headroom: the fast searches against fine sequential searches on the same model.

The capacitance search (a secant per check, from the nominal run) must agree with a
plain bisection to 0.01 % in C within its stated tolerance: the value it reports passes
every capacitance-dependent check, and either 0.5 % more capacitance fails or its
smallest normalised margin is below 1.002. The current-limit headroom (the inverse of the
SOA interpolation and of Zth) must agree with a dense grid of short-circuit evaluations.
Source of both references: bisection and exhaustive search on the engine's own model
(G. Dahlquist and A. Bjorck, "Numerical Methods", section 6.2, for bisection).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.analysis import analyze_rail
from server.analysis.checks import C_DEPENDENT
from server.analysis.document import read_rail
from server.analysis.engine import _nominal_params
from server.analysis import headroom
from server.analysis.evaluation import evaluate_rows
from server.analysis.headroom import C_TOL, M_TOL, _c_margins, capacitance_headroom, limit_headroom
from server.analysis.shortcircuit import short_circuit
from server.analysis.timer import fault_times

from .rail_documents import efuse_12v, hotswap_48v, load_switch_5v, slew_12v_demo, slew_24v

RAILS = [efuse_12v, hotswap_48v, load_switch_5v, slew_24v, slew_12v_demo]


def _setup(make):
    rail = read_rail(make())
    timer = rail.switch.timer
    t_min, _, t_max = fault_times(timer) if timer is not None else (math.inf, math.inf, math.inf)
    params = _nominal_params(rail, t_min, t_max)
    fig, checks, _ = evaluate_rows(rail, rail.rules, params)
    return rail, params, fig, checks, t_max


def _worst(g, use):
    return min(g[cid] for cid in use)


def _bisect_boundary(rail, params, use, c_start):
    """Boundary in C of the checks ``use`` by a plain search: x2 steps, then bisection on
    ln C down to 0.01 %. Returns (largest passing C, smallest failing C)."""
    f = lambda c: _worst(_c_margins(rail, rail.rules, params, c), use) >= 0.0  # noqa: E731
    lo = hi = None
    c = c_start
    if f(c):
        lo = c
        while hi is None:
            c *= 2.0
            if f(c):
                lo = c
            else:
                hi = c
    else:
        hi = c
        while lo is None:
            c /= 2.0
            if f(c):
                lo = c
            else:
                hi = c
    while math.log(hi / lo) > 1e-4:
        mid = math.sqrt(lo * hi)
        if f(mid):
            lo = mid
        else:
            hi = mid
    return lo, hi


@pytest.mark.parametrize("make", RAILS, ids=lambda m: m.__name__)
def test_capacitance_headroom_against_fine_bisection(make):
    rail, params, fig, checks, _ = _setup(make)
    fast = capacitance_headroom(rail, rail.rules, params, checks, fig)
    assert fast["c_max"] is not None
    g_nom = {cid: v for cid, v in _c_margins(rail, rail.rules, params, float(params.c[0])).items()}
    use = [cid for cid in C_DEPENDENT if g_nom[cid] < 50.0 and cid not in fast["c_max_excluded"]]
    c_lo, c_hi = _bisect_boundary(rail, params, use, float(params.c[0]))
    c = fast["c_max"]
    g = _c_margins(rail, rail.rules, params, c)
    # the reported capacitance passes, and lies below the boundary
    assert _worst(g, use) >= 0.0
    assert c <= c_hi
    # the stated tolerance: 0.5 % more fails, or the margin is within 0.2 % of its limit
    assert math.log(c_hi / c) <= C_TOL + 1e-4 or _worst(g, use) <= M_TOL
    # and on these rails that is within 1 % of the boundary in C
    assert c_lo / c - 1.0 < 0.01
    # the check that ends the range is the one failing just above the boundary
    g_hi = _c_margins(rail, rail.rules, params, c_hi)
    assert fast["c_max_check"] == min(use, key=lambda k: g_hi[k])
    assert 1 <= fast["c_max_trials"] <= 6


def test_excluded_check_fails_at_a_sixty_fourth_as_well():
    # slew_24v: the timer counts the slew ramp, v / dvdt, which no capacitor changes
    rail, params, fig, checks, _ = _setup(slew_24v)
    fast = capacitance_headroom(rail, rail.rules, params, checks, fig)
    assert fast["c_max_excluded"] == ["timer_startup"]
    assert "failing whatever the capacitance" in fast["c_max_note"]
    g_tiny = _c_margins(rail, rail.rules, params, float(params.c[0]) / 64.0)
    assert g_tiny["timer_startup"] < 0.0


def _passes(rail, i_nom, v_sc, t_fault):
    i_nom = np.atleast_1d(np.asarray(i_nom, dtype=float))
    sc = short_circuit(rail, v_ds=np.full(i_nom.shape, v_sc), i_limit=i_nom * (1.0 + rail.switch.i_limit_tol),
                       t_fault=np.full(i_nom.shape, t_fault))
    return sc["margin"] >= rail.rules["fault_margin"]


@pytest.mark.parametrize("make", [efuse_12v, hotswap_48v, slew_24v], ids=lambda m: m.__name__)
@pytest.mark.parametrize("timer_scale", [1.0, 0.1, 10.0])
def test_limit_headroom_against_a_dense_grid(make, timer_scale, monkeypatch):
    # the closed form must verify itself: the grid fallback is not used on these rails
    monkeypatch.setattr(headroom, "_limit_grid", lambda *a: pytest.fail("closed form not verified"))
    doc = make()
    doc["switch"]["timer"]["c"] *= timer_scale
    rail = read_rail(doc)
    t_max = fault_times(rail.switch.timer)[2]
    v = rail.supply.v_max
    got = limit_headroom(rail, rail.rules, v_sc=v, t_fault=t_max)
    grid = rail.switch.i_limit * np.logspace(-3, 3, 60001)  # 2.3e-4 apart in ln
    ok = _passes(rail, grid, v, t_max)
    if got["i_limit_max"] is None:
        assert ok.all() or not ok.any(), got
        return
    best = grid[ok].max() if ok.any() else None
    assert best is not None
    assert _passes(rail, got["i_limit_max"], v, t_max)[0]
    assert not _passes(rail, got["i_limit_max"] * 1.0001, v, t_max)[0]
    assert got["i_limit_max"] >= best * (1.0 - 1e-9)
    assert got["i_limit_max"] <= best * math.exp(2.4e-4)


def test_headroom_in_the_result():
    r = analyze_rail(efuse_12v(), waveforms=False)
    h = r["headroom"]
    assert h["c_max"] > efuse_12v()["load"]["c_nom"] and h["c_max_check"] == "timer_startup"
    assert h["i_limit_max"] > 0 and h["c_max_trials"] >= 1
    off = analyze_rail(efuse_12v(), waveforms=False, headroom=False)["headroom"]
    assert off["c_max"] is None and off["c_max_trials"] == 0
