"""Capacitor banks: C(v) charging, parallel branches, corners and Monte Carlo, document errors.

Outside references, named beside each check:
- the charge of a capacitor whose capacitance depends on voltage, dq = C(v) dv (the definition of
  incremental capacitance), charged from a constant current: t(v) = (1/I) integral_0^v C(u) du,
  and the energy the switch dissipates, integral (V_s - v) C(v) dv;
- two series-RC branches with the same time constant R_k C_k = tau equal one branch of C1 + C2
  behind R1 || R2 (impedance (1 + s tau) / (s C_k) of each, any circuit-analysis textbook, e.g.
  Alexander and Sadiku, "Fundamentals of Electric Circuits", chapter 9);
- ngspice (Debian package) on the same circuit with one branch per group, a voltage-dependent
  group as a B-source current ddt(q(v)).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from server.analysis.bank import bank_esr, charge, fraction, multipliers, table, voltage
from server.analysis.circuit import R_OFF, circuit_rows
from server.analysis.corners import c_levels, corner_params, corner_set
from server.analysis.document import read_rail
from server.analysis.errors import DocumentError
from server.analysis.montecarlo import sample_params
from server.analysis.startup import STATUS_OK, simulate_startup

from .rail_documents import simple_doc
from .spice import NGSPICE, ngspice_missing_message, simulate_ngspice


def bank_doc(groups: list[dict], **kw) -> dict:
    doc = simple_doc(**kw)
    load = doc["load"]
    for key in ("c_nom", "c_tol", "esr"):
        load.pop(key)
    load["bank"] = groups
    return doc


def group(count, c_nom, esr=0.0, dielectric="x7r", c_tol=0.0, v_rated=50.0, **extra) -> dict:
    return {"count": count, "c_nom": c_nom, "c_tol": c_tol, "dielectric": dielectric, "v_rated": v_rated,
            "esr": esr, **extra}


def run(rail, c=None, **kw):
    cz = circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom if c is None else c], **kw)
    return simulate_startup(cz, record=0)


# -- the DC-bias curve in closed form ------------------------------------------------


def test_charge_of_a_piecewise_linear_curve_and_its_inverse():
    tab = table(((2.0, 1.0), (10.0, 0.5), (20.0, 0.3)))
    v = np.array([-1.0, 0.0, 1.0, 2.0, 6.0, 10.0, 15.0, 20.0, 30.0])
    # the integral of f by the trapezoid on a fine grid (numpy), against the closed form
    fine = np.linspace(0.0, 30.0, 300_001)
    cum = np.concatenate([[0.0], np.cumsum(np.diff(fine) * 0.5 * (fraction(tab, fine)[1:]
                                                                   + fraction(tab, fine)[:-1]))])
    expected = np.where(v < 0.0, v * 1.0, np.interp(v, fine, cum))
    assert charge(tab, v) == pytest.approx(expected, rel=1e-9, abs=1e-9)
    assert voltage(tab, charge(tab, v)) == pytest.approx(v, rel=1e-12, abs=1e-12)


def test_constant_current_into_a_falling_capacitance_against_the_closed_form():
    """C(v) = C0 (1 - a v), a = 0.05 / V, charged by a 2 A current limit from 12 V."""
    c0, a, i_lim, v_s = 1e-3, 0.05, 2.0, 12.0
    doc = bank_doc([group(10, 100e-6, dc_bias=[[0.0, 1.0], [12.0, 1.0 - a * 12.0]])], v=v_s, i_limit=i_lim,
                   rds_on=1e-3)
    rail = read_rail(doc)
    fig = run(rail)
    assert fig.status[0] == STATUS_OK
    wave = fig.waveform
    t, v_out = np.asarray(wave["t"]), np.asarray(wave["v_out"])
    limited = (v_out > 0.5) & (v_out < 11.5)
    assert np.count_nonzero(limited) >= 5
    # Source: t = (1/I) integral_0^v C(u) du = C0 (v - a v^2 / 2) / I (closed form), at every
    # point the integrator took while the current limit held
    expected = c0 * (v_out[limited] - a * v_out[limited] ** 2 / 2.0) / i_lim
    assert t[limited] == pytest.approx(expected, rel=1e-4)
    # Source: E = integral_0^Vs (Vs - v) C0 (1 - a v) dv = C0 (Vs^2 / 2 - a Vs^3 / 6) (closed form)
    assert fig.e_fet[0] == pytest.approx(c0 * (v_s**2 / 2.0 - a * v_s**3 / 6.0), rel=1e-2)
    # a constant capacitance would have taken more energy: the curve is read, not ignored
    flat = run(read_rail(bank_doc([group(10, 100e-6)], v=v_s, i_limit=i_lim, rds_on=1e-3)))
    assert flat.e_fet[0] == pytest.approx(c0 * v_s**2 / 2.0, rel=1e-2)


# -- groups as parallel branches -----------------------------------------------------------


HARD = dict(mode="hard", v=12.0, r=0.01, l=50e-9, load="resistive", i_nom=2.0, i_limit=None, rds_on=3e-3)


def test_groups_with_the_same_esr_times_c_equal_one_capacitor():
    # 470 uF at 40 mOhm and 10 x 47 uF at 400 mOhm each (40 mOhm together): both tau = 18.8 us
    rail = read_rail(bank_doc([group(1, 470e-6, esr=0.04, dielectric="electrolytic"),
                               group(10, 47e-6, esr=0.4)], **HARD))
    # Source: R1 || R2 = 40 mOhm || 40 mOhm = 20 mOhm (parallel resistances)
    assert rail.load.esr == pytest.approx(0.02, rel=1e-12)
    one = read_rail(simple_doc(c=940e-6, esr=0.02, **HARD))
    fb, fo = run(rail), run(one)
    for name in ("i_peak", "e_fet", "t_settle"):
        assert getattr(fb, name)[0] == pytest.approx(getattr(fo, name)[0], rel=1e-6), name


def test_groups_with_different_esr_times_c_are_not_one_equivalent_branch():
    groups = [group(1, 470e-6, esr=0.2, dielectric="electrolytic"), group(20, 10e-6, esr=0.002)]
    rail = read_rail(bank_doc(groups, **HARD))
    one = read_rail(simple_doc(c=670e-6, esr=bank_esr(rail.load.bank), **HARD))
    assert run(rail).i_peak[0] < 0.99 * run(one).i_peak[0]  # the equivalent ESR would overstate the peak


CASES = {
    "hard": HARD,
    "current_limit": dict(mode="current_limit", v=12.0, r=0.02, l=100e-9, load="resistive", i_nom=1.0, i_limit=4.0,
                          rds_on=5e-3),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_a_mixed_bank_with_dc_bias_agrees_with_ngspice(name, tmp_path):
    assert NGSPICE is not None, ngspice_missing_message()
    kw = CASES[name]
    # an electrolytic and twenty ceramics whose capacitance falls linearly to 40 % at 12 V
    a = 0.6 / 12.0
    groups = [group(1, 470e-6, esr=0.05, dielectric="electrolytic"),
              group(20, 22e-6, esr=0.01, dc_bias=[[0.0, 1.0], [12.0, 0.4]])]
    rail = read_rail(bank_doc(groups, **kw))
    fig = run(rail)
    assert fig.status[0] == STATUS_OK
    c2 = 20 * 22e-6
    bank = [{"c": 470e-6, "esr": 0.05},
            {"esr": 0.01 / 20, "q": f"{c2!r} * ({{v}} - {a!r} * {{v}} * {{v}} / 2)"}]
    ng = simulate_ngspice(tmp_path, t_stop=float(fig.t_end[0]) * 1.05, v=kw["v"], r=kw["r"], l=kw["l"], c=0.0,
                          esr=0.0, r_load=kw["v"] / kw["i_nom"], mode=kw["mode"], rds=kw["rds_on"],
                          i_limit=kw.get("i_limit"), dvdt=None, t_on=0.0, r_off=R_OFF, bank=bank)
    # Source: ngspice transient analysis of the same circuit, one branch per group (Gear, reltol 1e-6)
    assert fig.i_peak[0] == pytest.approx(ng["i_peak"], rel=0.01)
    assert fig.e_fet[0] == pytest.approx(ng["e_fet"], rel=0.01)


def test_both_back_ends_read_a_bank_alike():
    groups = [group(2, 100e-6, esr=0.06, dielectric="electrolytic", c_tol=0.2),
              group(20, 10e-6, esr=0.005, c_tol=0.1, dc_bias=[[0, 1.0], [5, 0.8], [12, 0.5], [25, 0.3]])]
    rail = read_rail(bank_doc(groups, **CASES["current_limit"]))
    one = run(rail)
    two = simulate_startup(circuit_rows(rail, v_s=[12.0, 12.0], c=[rail.load.c_nom] * 2))
    for name in ("i_peak", "e_fet", "t_settle", "steps"):
        assert getattr(two, name)[1] == pytest.approx(getattr(one, name)[0], rel=1e-9), name


# -- corners and Monte Carlo ------------------------------------------------------------------


def mixed_rail():
    return read_rail(bank_doc([group(2, 100e-6, esr=0.06, dielectric="electrolytic", c_tol=0.2),
                               group(20, 10e-6, esr=0.005, c_tol=0.1, derating=[0.4, 0.8])], **HARD))


def test_corners_move_every_group_together():
    rail = mixed_rail()
    # nominal: the derating range's middle (0.6) for the ceramics
    assert rail.load.c_nom == pytest.approx(200e-6 + 200e-6 * 0.6, rel=1e-12)
    (c_lo, m_lo), (c_hi, m_hi) = c_levels(rail)
    assert m_lo == pytest.approx([0.8, 0.9 * 0.4 / 0.6])
    assert m_hi == pytest.approx([1.2, 1.1 * 0.8 / 0.6])
    assert c_lo == pytest.approx(200e-6 * 0.8 + 200e-6 * 0.9 * 0.4, rel=1e-12)
    assert c_hi == pytest.approx(200e-6 * 1.2 + 200e-6 * 1.1 * 0.8, rel=1e-12)
    params = corner_params(corner_set(rail))
    assert params.bank.shape == (params.n, 2)
    assert sorted(set(np.round(params.c, 12))) == pytest.approx(sorted([c_lo, c_hi]))


def test_monte_carlo_varies_each_group_on_its_own():
    rail = mixed_rail()
    params, draws = sample_params(rail, 4000, seed=7)
    m = params.bank
    assert m.shape == (4000, 2)
    assert abs(np.corrcoef(m[:, 0], m[:, 1])[0, 1]) < 0.1  # independent draws
    assert m[:, 0].min() >= 0.8 - 1e-12 and m[:, 0].max() <= 1.2 + 1e-12
    lo, hi = multipliers(rail.load.bank, "low")[1], multipliers(rail.load.bank, "high")[1]
    assert m[:, 1].min() >= lo - 1e-12 and m[:, 1].max() <= hi + 1e-12
    assert draws["c"] == pytest.approx(m @ np.array([200e-6, 200e-6 * 0.6]), rel=1e-12)


# -- document errors -------------------------------------------------------------------------------


@pytest.mark.parametrize("change, field, words", [
    (lambda g: g[1].update(dc_bias=[[0, 0.8], [5, 0.9]]), "load.bank[1].dc_bias[1]", "must not rise"),
    (lambda g: g[1].update(dc_bias=[[5, 0.9], [2, 0.8]]), "load.bank[1].dc_bias[1]", "must increase"),
    (lambda g: g[1].update(dc_bias=[[0, 1.0], [5, 0.9]], derating=[0.4, 0.8]), "load.bank[1].derating",
     "not both"),
    (lambda g: g[0].update(count=2.5), "load.bank[0].count", "whole number"),
    (lambda g: g[0].update(dielectric="paper"), "load.bank[0].dielectric", "one of"),
    (lambda g: g[1].update(derating=[0.8, 0.4]), "load.bank[1].derating", "low <= high"),
])
def test_bad_bank_input_names_its_field(change, field, words):
    groups = [group(2, 100e-6, esr=0.06, dielectric="electrolytic"), group(20, 10e-6, esr=0.005)]
    change(groups)
    with pytest.raises(DocumentError) as err:
        read_rail(bank_doc(groups, **HARD))
    fields = {e.field: e.reason for e in err.value.errors}
    assert field in fields and words in fields[field], fields


def test_a_bank_and_a_single_capacitance_are_not_both_given():
    doc = bank_doc([group(2, 100e-6)], **HARD)
    bad = copy.deepcopy(doc)
    bad["load"]["c_nom"] = 1e-4
    with pytest.raises(DocumentError) as err:
        read_rail(bad)
    assert err.value.errors[0].field == "load.c_nom"
    none = copy.deepcopy(doc)
    del none["load"]["bank"]
    with pytest.raises(DocumentError) as err:
        read_rail(none)
    assert err.value.errors[0].field == "load.c_nom"


def test_the_charge_equivalent_capacitance_of_a_falling_curve():
    from server.analysis.bank import BankGroup, effective_capacitance
    g = BankGroup(count=10, c_nom=100e-6, c_tol=0.0, dielectric="x7r", v_rated=25.0, esr=0.0,
                  dc_bias=((0.0, 1.0), (20.0, 0.2)))
    a = 0.8 / 20.0
    for v in (5.0, 12.0, 20.0):
        # Source: Q(v) / v = C0 (v - a v^2 / 2) / v = C0 (1 - a v / 2) (closed form of the linear curve)
        assert effective_capacitance((g,), 25.0, v) == pytest.approx(1e-3 * (1.0 - a * v / 2.0), rel=1e-12)


def test_a_group_rated_below_the_supply_maximum_fails_its_check():
    from server.analysis import analyze_rail
    groups = [group(2, 100e-6, esr=0.06, dielectric="electrolytic", v_rated=25.0), group(8, 4.7e-6, v_rated=10.0,
                                                                                        refs="C9-C16")]
    result = analyze_rail(bank_doc(groups, **HARD), corners=False, headroom=False, waveforms=False)
    check = next(c for c in result["checks"] if c["id"] == "bank_rating")
    assert check["verdict"] == "fail" and check["limit"] == 10.0 and "C9-C16" in check["detail"]
    assert result["verdict"] == "fail"
    groups[1]["v_rated"] = 16.0
    result = analyze_rail(bank_doc(groups, **HARD), corners=False, headroom=False, waveforms=False)
    assert next(c for c in result["checks"] if c["id"] == "bank_rating")["verdict"] == "pass"
    one = analyze_rail(simple_doc(c=1e-3, esr=0.01, **HARD), corners=False, headroom=False, waveforms=False)
    assert next(c for c in one["checks"] if c["id"] == "bank_rating")["verdict"] == "n/a"
