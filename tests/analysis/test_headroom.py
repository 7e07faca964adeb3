"""Design headroom: the fast searches against fine sequential searches on the same model, and
headroom that agrees with the verdict.

The capacitance search (a secant per check) must agree with a plain bisection to 0.01 % in
C within its stated tolerance: the value it reports passes every capacitance-dependent
check, and either 0.5 % more capacitance fails or its smallest normalised margin is below
1.002. That holds on the nominal basis and on the sign-off basis (each check at its own
worst point of the tolerance box). The limit headroom (the inverse of the SOA
interpolation and of Zth) must agree with a dense grid of short-circuit evaluations.
Source of both references: bisection and exhaustive search on the engine's own model
(G. Dahlquist and A. Bjorck, "Numerical Methods", section 6.2, for bisection).
"""

from __future__ import annotations

import copy
import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from server.analysis import analyze_rail
from server.analysis.checks import C_DEPENDENT
from server.analysis.document import read_rail
from server.analysis.evaluation import evaluate_rows, nominal_point
from server.analysis.headroom import C_TOL, M_TOL, _c_margins, basis_rows, capacitance_headroom, limit_headroom
from server.analysis.shortcircuit import short_circuit
from server.analysis.timer import fault_times
from server.analysis.worstcase import find_worst_case

from .rail_documents import FET_40V, efuse_12v, hotswap_48v, load_switch_5v, slew_12v_demo, slew_24v

RAILS = [efuse_12v, hotswap_48v, load_switch_5v, slew_24v, slew_12v_demo]


def _times(rail):
    return fault_times(rail.switch.timer) if rail.switch.timer is not None else (math.inf,) * 3


def _nominal_basis(make):
    rail = read_rail(make())
    fig, checks, _ = evaluate_rows(rail, rail.rules, nominal_point(rail, _times(rail)[1]))
    owner = {cid: 0 for cid in checks}
    return rail, nominal_point(rail, _times(rail)[1]), owner, checks, fig


def _signoff_basis(make):
    rail = read_rail(make())
    t = _times(rail)
    wc = find_worst_case(rail, rail.rules, t_fault_range=(t[0], t[2]))
    base, owner, start = basis_rows(wc.params, wc.checks, wc.worst)
    fig, _, _ = evaluate_rows(rail, rail.rules, nominal_point(rail, t[1]))
    return rail, base, owner, start, fig


def _worst(g, use):
    return min(g[cid] for cid in use)


def _bisect_boundary(rail, base, owner, use):
    """Boundary in C (as a factor on c_nom) of the checks ``use`` by a plain search: x2 steps,
    then bisection on ln C down to 0.01 %. Returns (largest passing, smallest failing)."""
    f = lambda k: _worst(_c_margins(rail, rail.rules, base, owner, k), use) >= 0.0  # noqa: E731
    lo = hi = None
    k = 1.0
    if f(k):
        lo = k
        while hi is None:
            k *= 2.0
            if f(k):
                lo = k
            else:
                hi = k
    else:
        hi = k
        while lo is None:
            k /= 2.0
            if f(k):
                lo = k
            else:
                hi = k
    while math.log(hi / lo) > 1e-4:
        mid = math.sqrt(lo * hi)
        if f(mid):
            lo = mid
        else:
            hi = mid
    return lo, hi


def _check_against_bisection(rail, base, owner, start, fig):
    fast = capacitance_headroom(rail, rail.rules, base, owner, start, fig)
    assert fast["status"] == "found", fast
    c0 = rail.load.c_nom
    g_nom = _c_margins(rail, rail.rules, base, owner, 1.0)
    use = [cid for cid in C_DEPENDENT if g_nom[cid] < 50.0 and cid not in fast["excluded"]]
    k_lo, k_hi = _bisect_boundary(rail, base, owner, use)
    k = fast["c_max"] / c0
    g = _c_margins(rail, rail.rules, base, owner, k)
    # the reported capacitance passes, and lies below the boundary
    assert _worst(g, use) >= 0.0
    assert k <= k_hi
    # the stated tolerance: 0.5 % more fails, or the margin is within 0.2 % of its limit
    assert math.log(k_hi / k) <= C_TOL + 1e-4 or _worst(g, use) <= M_TOL
    # and on these rails that is within 1 % of the boundary in C
    assert k_lo / k - 1.0 < 0.01
    # the check that ends the range is the one failing just above the boundary
    g_hi = _c_margins(rail, rail.rules, base, owner, k_hi)
    assert fast["check"] == min(use, key=lambda c: g_hi[c])
    assert 1 <= fast["trials"] <= 8


@pytest.mark.parametrize("make", RAILS, ids=lambda m: m.__name__)
def test_capacitance_headroom_against_fine_bisection_nominal_basis(make):
    _check_against_bisection(*_nominal_basis(make))


@pytest.mark.parametrize("make", [efuse_12v, load_switch_5v, slew_12v_demo], ids=lambda m: m.__name__)
def test_capacitance_headroom_against_fine_bisection_signoff_basis(make):
    _check_against_bisection(*_signoff_basis(make))


def test_excluded_check_fails_at_a_sixty_fourth_as_well():
    # slew_24v: at its worst case the timer counts the slew ramp, v / dvdt, which no capacitor changes
    rail, base, owner, checks, fig = _signoff_basis(slew_24v)
    fast = capacitance_headroom(rail, rail.rules, base, owner, checks, fig)
    assert "timer_startup" in fast["excluded"]
    g_tiny = _c_margins(rail, rail.rules, base, owner, 1.0 / 64.0)
    assert g_tiny["timer_startup"] < 0.0


def _passes(rail, i_nom, v_sc, t_fault):
    i_nom = np.atleast_1d(np.asarray(i_nom, dtype=float))
    sc = short_circuit(rail, v_ds=np.full(i_nom.shape, v_sc), i_limit=i_nom * (1.0 + rail.switch.i_limit_tol),
                       t_fault=np.full(i_nom.shape, t_fault))
    return sc["margin"] >= rail.rules["fault_margin"]


@pytest.mark.parametrize("make", [efuse_12v, slew_24v], ids=lambda m: m.__name__)
@pytest.mark.parametrize("timer_scale", [1.0, 0.1, 10.0])
def test_current_limit_headroom_against_a_dense_grid(make, timer_scale):
    doc = make()
    doc["switch"]["timer"]["c"] *= timer_scale
    rail = read_rail(doc)
    t_max = _times(rail)[2]
    v = rail.supply.v_max
    got = limit_headroom(rail, rail.rules, v_sc=v, t_fault=t_max)
    assert got["kind"] == "current"
    grid = rail.switch.i_limit * np.logspace(-3, 3, 60001)  # 2.3e-4 apart in ln
    ok = _passes(rail, grid, v, t_max)
    if got["value"] is None:
        assert ok.all() or not ok.any(), got
        return
    best = grid[ok].max()
    assert _passes(rail, got["value"], v, t_max)[0]
    assert not _passes(rail, got["value"] * 1.0001, v, t_max)[0]
    assert got["value"] >= best * (1.0 - 1e-9)
    assert got["value"] <= best * math.exp(2.4e-4)


@pytest.mark.parametrize("timer_scale", [1.0, 0.3, 3.0])
def test_power_limit_headroom_is_a_power_against_a_dense_grid(timer_scale):
    # a power-limit rail whose power limit sets the short circuit: the meaningful figure is
    # the highest power limit, not the current limit (which the short circuit never reaches)
    doc = hotswap_48v()
    doc["switch"]["timer"]["c"] *= timer_scale
    rail = read_rail(doc)
    t_max = _times(rail)[2]
    v = rail.supply.v_max
    got = limit_headroom(rail, rail.rules, v_sc=v, t_fault=t_max)
    assert got["kind"] == "power" and got["present"] == rail.switch.p_limit
    grid = rail.switch.p_limit * np.logspace(-2, 1, 3001)

    def passes(p):
        r = replace(rail, switch=replace(rail.switch, p_limit=float(p)))
        sc = short_circuit(r, v_ds=np.array([v]), i_limit=np.array([rail.switch.i_limit * 1.1]),
                           t_fault=np.array([t_max]))
        return sc["margin"][0] >= rail.rules["fault_margin"]

    ok = np.array([passes(p) for p in grid])
    if got["value"] is None:
        assert got["status"] in ("unbounded", "fails_everywhere")
        return
    assert passes(got["value"]) and not passes(got["value"] * 1.0001)
    assert got["value"] >= grid[ok].max() * (1.0 - 1e-9)


def test_headroom_records_in_the_result():
    r = analyze_rail(efuse_12v(), waveforms=False)
    c, lim = r["headroom"]["c_max"], r["headroom"]["limit_max"]
    assert c["status"] == "found" and c["value"] > efuse_12v()["load"]["c_nom"]
    assert c["check"] == "timer_startup" and c["check_title"] == "Fault timer does not trip on a good start"
    assert "has room" in c["note"]
    assert lim["unit"] == "A" and lim["value"] > 0 and lim["check"] == "short_circuit_time"
    off = analyze_rail(efuse_12v(), waveforms=False, headroom=False)["headroom"]
    assert off["c_max"]["value"] is None and off["c_max"]["status"] == "not_computed"
    # a power-limit rail reads a power limit
    p = analyze_rail(hotswap_48v(), waveforms=False)["headroom"]["limit_max"]
    assert p["unit"] == "W" and p["title"] == "Highest power limit the short circuit allows"


def test_a_rail_failing_on_capacitance_reads_the_capacitance_it_needs():
    doc = efuse_12v()
    doc["load"]["c_nom"] = 4.7e-3  # the timer cannot carry this start at its worst case
    r = analyze_rail(doc, waveforms=False)
    timer = next(c for c in r["checks"] if c["id"] == "timer_startup")
    assert timer["verdict"] == "fail"
    c = r["headroom"]["c_max"]
    assert c["status"] == "fails" and c["value"] < doc["load"]["c_nom"]
    assert "already fails" in c["note"] and c["check"] == "timer_startup"


# --- headroom agrees with the verdicts (a property over random rails) ---------------------

_FET = copy.deepcopy(FET_40V)


def _random_rail(c_nom, c_tol, i_limit, timer_c, v_nom):
    return {
        "schema": "railsign.rail/1", "name": "random efuse",
        "supply": {"v_min": 0.95 * v_nom, "v_nom": v_nom, "v_max": 1.05 * v_nom, "r_source": 0.02,
                   "l_source": 100e-9, "i_max": None, "uvlo": None},
        "path": {"r": 0.005, "l": 0.0},
        "load": {"c_nom": c_nom, "c_tol": c_tol, "esr": 0.02, "model": "resistive", "i_nom": 0.5, "v_on": 0.0},
        "switch": {"mode": "current_limit", "t_on": 100e-6, "i_limit": i_limit, "i_limit_tol": 0.1,
                   "timer": {"c": timer_c, "c_tol": 0.1, "i_charge": 10e-6, "i_charge_tol": 0.1, "v_trip": 1.2,
                             "v_trip_tol": 0.05, "after_fault": "latch"}},
        "fet": copy.deepcopy(_FET), "environment": {"t_ambient": 50.0}, "rules": {},
    }


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(c_nom=st.floats(47e-6, 4.7e-3), c_tol=st.sampled_from([0.0, 0.1, 0.2]), i_limit=st.floats(1.5, 6.0),
       timer_c=st.floats(22e-9, 680e-9), v_nom=st.sampled_from([5.0, 12.0, 24.0]))
def test_headroom_agrees_with_the_verdicts(c_nom, c_tol, i_limit, timer_c, v_nom):
    doc = _random_rail(c_nom, c_tol, i_limit, timer_c, v_nom)
    r = analyze_rail(doc, waveforms=False)
    checks = {c["id"]: c for c in r["checks"]}
    c = r["headroom"]["c_max"]
    c_checks_pass = all(checks[cid]["verdict"] in ("pass", "n/a") for cid in C_DEPENDENT)
    c_fail = [cid for cid in C_DEPENDENT if checks[cid]["verdict"] in ("fail", "marginal")]
    excluded = {x["id"] for x in c["excluded"]}
    if c_checks_pass:
        # a passing rail's largest passing capacitance is at least its own
        assert c["status"] in ("found", "unbounded"), c
        if c["status"] == "found":
            assert c["value"] >= c_nom * (1 - 1e-9)
    elif c["status"] == "found" and set(c_fail) - excluded:
        # a rail failing on a capacitance-bound check has a largest passing capacitance below its own
        assert c["value"] < c_nom
    lim = r["headroom"]["limit_max"]
    sc = checks["short_circuit_time"]
    if lim["status"] in ("found", "fails"):
        if sc["verdict"] == "pass":
            assert lim["value"] >= i_limit * (1 - 1e-6)
        else:
            assert lim["value"] < i_limit
