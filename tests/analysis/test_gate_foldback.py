"""Gate-driven turn-on and the foldback current limit against outside references.

* The gate-driven start-up against ngspice's built-in level-1 MOSFET (Debian package
  ``ngspice``; ngspice manual, chapter 11 "MOSFETs", LEVEL=1) with the same invented
  parameters and explicit linear capacitors: peak current, output slew rate and FET energy
  within 2 %.
* The Miller plateau's output slew rate against the textbook i_g / (C_gd + C_ext) of a
  source follower (the gate-charge picture: N. Mohan, T. M. Undeland and W. P. Robbins,
  "Power Electronics", 3rd ed., chapter 22 on MOSFET gate drive; from memory).
* The foldback start-up time against direct quadrature of C dv / i(v) (scipy.integrate.quad).
* Bad foldback points and bad gate data are document errors naming the field.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad

from server.analysis import DocumentError
from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.faults import regulated_current
from server.analysis.foldback import foldback_limit, foldback_slope
from server.analysis.shortcircuit import short_circuit
from server.analysis.startup import STATUS_OK, STATUS_STALLED, simulate_startup

from .rail_documents import simple_doc
from .spice import NGSPICE, ngspice_missing_message, simulate_ngspice

# an invented FET's gate: V_th 3 V, k 20 A/V^2, C_iss 2 nF, C_rss 0.2 nF
GATE_FET = {"v_th": 3.0, "k": 20.0, "c_iss": 2e-9, "c_rss": 0.2e-9}

GATE_CASES = {
    "current drive, resistive load": (
        dict(mode="hard", v=12.0, c=100e-6, load="resistive", i_nom=1.0, i_limit=None, rds_on=5e-3),
        {"drive": "current", "i_gate": 10e-6, "c_ext": 10e-9}),
    "voltage drive, resistive load": (
        dict(mode="hard", v=12.0, c=100e-6, load="resistive", i_nom=1.0, i_limit=None, rds_on=5e-3),
        {"drive": "voltage", "v_drive": 24.0, "r_gate": 1e6, "c_ext": 10e-9}),
    "current drive, series r and l, esr, no external capacitor": (
        dict(mode="slew", v=24.0, c=470e-6, r=0.02, l=100e-9, esr=0.01, load="resistive", i_nom=2.0, i_limit=None,
             rds_on=5e-3),
        {"drive": "current", "i_gate": 20e-6, "c_ext": 0.0}),
}


def _gate_rail(kwargs: dict, drive: dict):
    doc = simple_doc(**kwargs)
    doc["switch"]["gate"] = dict(drive)
    doc["fet"]["gate"] = dict(GATE_FET)
    return doc, read_rail(doc)


def _slew(t, v, v_s):
    """The mean output slew rate between 25 % and 75 % of the supply, V/s."""
    return 0.5 * v_s / (np.interp(0.75 * v_s, v, t) - np.interp(0.25 * v_s, v, t))


@pytest.mark.parametrize("case", list(GATE_CASES))
def test_gate_turn_on_agrees_with_ngspice_level1(case, tmp_path):
    assert NGSPICE is not None, ngspice_missing_message()
    kwargs, drive = GATE_CASES[case]
    _, rail = _gate_rail(kwargs, drive)
    v = kwargs["v"]
    st = simulate_startup(circuit_rows(rail, v_s=[v], c=[kwargs["c"]]), record=0)
    assert st.status[0] == STATUS_OK
    w = st.waveform
    t_end = float(st.t_end[0])
    gate = {"v_th": GATE_FET["v_th"], "k": GATE_FET["k"], "c_gs": GATE_FET["c_iss"] - GATE_FET["c_rss"],
            "c_gd": GATE_FET["c_rss"], "c_ext": drive["c_ext"], "i_gate": drive.get("i_gate"),
            "v_drive": drive.get("v_drive"), "r_gate": drive.get("r_gate")}
    sp = simulate_ngspice(tmp_path, t_stop=t_end, points=20000, v=v, r=kwargs.get("r", 0.0), l=kwargs.get("l", 0.0),
                          c=kwargs["c"], esr=kwargs.get("esr", 0.0), r_load=v / kwargs["i_nom"], mode="hard",
                          rds=kwargs["rds_on"], i_limit=None, dvdt=None, t_on=0.0, r_off=1e6, gate=gate)
    # ngspice level-1 MOSFET, same parameters: peak current, slew rate and FET energy within 2 %
    assert st.i_peak[0] == pytest.approx(sp["i_peak"], rel=0.02)
    assert _slew(np.array(w["t"]), np.array(w["v_out"]), v) == pytest.approx(_slew(sp["t"], sp["v_out"], v), rel=0.02)
    assert st.e_fet[0] == pytest.approx(sp["e_fet"], rel=0.02)
    # and the gate voltage at the middle of the ramp (the Miller plateau's level above the output)
    t_mid = np.interp(0.5 * v, np.array(w["v_out"]), np.array(w["t"]))
    assert np.interp(t_mid, np.array(w["t"]), np.array(w["v_g"])) == pytest.approx(
        np.interp(t_mid, sp["t"], sp["v_g"]), rel=0.02)


@pytest.mark.parametrize("c_ext", [0.0, 4.7e-9, 47e-9])
def test_miller_plateau_slew_is_the_textbook_rate(c_ext):
    """Pure capacitive load, current drive: on the plateau the output slews at
    i_g / (C_gd + C_ext) (C_gs rides with the source) - textbook gate-charge picture
    (Mohan, Undeland and Robbins, "Power Electronics", ch. 22; from memory). The picture holds
    where V_GS settles fast against the ramp: its time constant C_t C / ((C_gd + C_ext) g_m)
    is here below 1/30 of the ramp."""
    i_g, v, c = 1e-6, 12.0, 10e-6
    _, rail = _gate_rail(dict(mode="hard", v=v, c=c, i_limit=None, rds_on=5e-3),
                         {"drive": "current", "i_gate": i_g, "c_ext": c_ext})
    st = simulate_startup(circuit_rows(rail, v_s=[v], c=[c]), record=0)
    w = st.waveform
    textbook = i_g / (GATE_FET["c_rss"] + c_ext)
    assert _slew(np.array(w["t"]), np.array(w["v_out"]), v) == pytest.approx(textbook, rel=0.005)
    # the inrush is the capacitor's current at that slew: C i_g / (C_gd + C_ext)
    assert st.i_peak[0] == pytest.approx(c * textbook, rel=0.005)


def test_gate_rows_agree_between_back_ends():
    kwargs, drive = GATE_CASES["current drive, series r and l, esr, no external capacitor"]
    _, rail = _gate_rail(kwargs, drive)
    one = simulate_startup(circuit_rows(rail, v_s=[24.0], c=[470e-6]))
    many = simulate_startup(circuit_rows(rail, v_s=[22.0, 24.0, 26.0], c=[470e-6] * 3))
    for name in ("i_peak", "e_fet", "t_settle"):
        assert getattr(many, name)[1] == pytest.approx(getattr(one, name)[0], rel=1e-6)
    assert many.i_peak[2] > many.i_peak[0] * 0.99  # a steadier check the three rows ran


# --- foldback ------------------------------------------------------------------------------

FOLD = [[2.0, 5.0], [10.0, 1.0]]  # 5 A up to 2 V, falling to 1 A at 10 V, flat beyond


def test_foldback_curve_is_linear_between_points_and_flat_beyond():
    v = np.array([0.0, 2.0, 6.0, 10.0, 30.0])
    assert foldback_limit(FOLD, v).tolist() == [5.0, 5.0, 3.0, 1.0, 1.0]
    assert foldback_slope(FOLD, v).tolist() == [0.0, -0.5, -0.5, 0.0, 0.0]


@pytest.mark.parametrize("scale", [1.0, 0.9])
def test_foldback_start_up_time_is_the_quadrature_of_c_dv_over_i(scale):
    """Pure capacitor, negligible resistances: t = integral of C dv / i_lim(v_s - v) over the
    regulated rise (scipy.integrate.quad, the curve's corners given as break points)."""
    v_s, c = 12.0, 1e-3
    doc = simple_doc(mode="current_limit", v=v_s, c=c, i_limit=5.0, rds_on=1e-4)
    doc["switch"]["foldback"] = FOLD
    rail = read_rail(doc)
    st = simulate_startup(circuit_rows(rail, v_s=[v_s], c=[c], i_limit=[5.0 * scale]))
    assert st.status[0] == STATUS_OK
    v_end = v_s - 1e-4 * 5.0 * scale  # regulation ends where Rds(on) carries the limit
    t_ref, _ = quad(lambda v: c / (scale * float(foldback_limit(FOLD, v_s - v))), 0.0, v_end,
                    points=[v_s - 10.0, v_s - 2.0], epsabs=0.0, epsrel=1e-10)
    assert st.t_limit[0] == pytest.approx(t_ref, rel=2e-3)


def test_a_heavy_load_never_starts_under_foldback():
    """A 1.5 A constant-current load present from 0 V never starts: at the full V_DS of 12 V
    the folded-back limit is 1 A. A failing start, not an error; the constant 5 A starts it."""
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, i_limit=5.0, load="constant_current", i_nom=1.5)
    doc["switch"]["foldback"] = FOLD
    st = simulate_startup(circuit_rows(read_rail(doc), v_s=[12.0], c=[1e-3]))
    assert st.status[0] == STATUS_STALLED
    assert st.v_stall[0] < 0.1
    doc["switch"]["foldback"] = None
    assert simulate_startup(circuit_rows(read_rail(doc), v_s=[12.0], c=[1e-3])).status[0] == STATUS_OK


# --- document errors -----------------------------------------------------------------------

@pytest.mark.parametrize("points, field, words", [
    ([[2.0, 5.0]], "switch.foldback", "at least two"),
    ([[2.0, 5.0], [2.0, 4.0]], "switch.foldback[1]", "increase"),
    ([[2.0, 5.0], [10.0, 6.0]], "switch.foldback[1]", "must not rise"),
    ([[-1.0, 5.0], [10.0, 1.0]], "switch.foldback[0]", "negative"),
    ([[2.0, 0.0], [10.0, 0.0]], "switch.foldback[0]", "above 0 A"),
    ([[2.0, 5.0], "x"], "switch.foldback[1]", "pair"),
])
def test_bad_foldback_points_name_the_field(points, field, words):
    doc = simple_doc(mode="current_limit", i_limit=5.0)
    doc["switch"]["foldback"] = points
    with pytest.raises(DocumentError, match=words) as exc:
        read_rail(doc)
    assert exc.value.field == field
    assert "Foldback current limit" in str(exc.value)


def test_foldback_needs_the_nominal_limit():
    doc = simple_doc(mode="hard", i_limit=None)
    doc["switch"]["foldback"] = FOLD
    with pytest.raises(DocumentError, match="required with a foldback") as exc:
        read_rail(doc)
    assert exc.value.field == "switch.i_limit"


@pytest.mark.parametrize("switch_gate, fet_gate, field", [
    ({"drive": "current"}, GATE_FET, "switch.gate.i_gate"),
    ({"drive": "voltage", "v_drive": 20.0}, GATE_FET, "switch.gate.r_gate"),
    ({"drive": "charge", "i_gate": 1e-5}, GATE_FET, "switch.gate.drive"),
    ({"drive": "current", "i_gate": 1e-5}, None, "fet.gate"),
    ({"drive": "current", "i_gate": 1e-5}, {**GATE_FET, "c_rss": 3e-9}, "fet.gate.c_rss"),
    ({"drive": "current", "i_gate": 1e-5}, {"v_th": 3.0, "c_iss": 2e-9, "c_rss": 2e-10}, "fet.gate.g_fs"),
    ({"drive": "current", "i_gate": 1e-5}, {**GATE_FET, "g_fs": 10.0, "i_gfs": 5.0}, "fet.gate.k"),
    ({"drive": "current", "i_gate": -1e-5}, GATE_FET, "switch.gate.i_gate"),
    ({"drive": "current", "i_gate": 1e-5, "r": 1.0}, GATE_FET, "switch.gate.r"),
])
def test_bad_gate_data_name_the_field(switch_gate, fet_gate, field):
    doc = simple_doc(mode="hard", i_limit=None)
    doc["switch"]["gate"] = switch_gate
    if fet_gate is not None:
        doc["fet"]["gate"] = fet_gate
    with pytest.raises(DocumentError) as exc:
        read_rail(doc)
    assert field in [e.field for e in exc.value.errors]


def test_transconductance_gives_the_square_law_constant():
    """g_fs = sqrt(2 k I_D) in saturation (the square law's derivative): k = g_fs^2 / (2 I_D)."""
    doc = simple_doc(mode="hard", i_limit=None)
    doc["switch"]["gate"] = {"drive": "current", "i_gate": 1e-5}
    doc["fet"]["gate"] = {"v_th": 3.0, "g_fs": 20.0, "i_gfs": 10.0, "c_iss": 2e-9, "c_rss": 2e-10}
    assert read_rail(doc).fet.gate.k == pytest.approx(20.0)


def test_the_regulation_time_counts_the_current_limit_not_the_gate_ramp():
    """The fault timer's count (t_limit) runs while the current limit holds the current; the
    gate's own ramp (the FET in saturation under its drive) is not regulation by the limit.
    Closed form for the limited case: a constant limit into a pure capacitor needs C V / I."""
    kwargs = dict(mode="current_limit", v=12.0, c=1e-3, rds_on=1e-4)
    drive = {"drive": "current", "i_gate": 100e-6, "c_ext": 0.0}  # ~500 kV/s: 500 A into 1 mF, far above
    _, rail = _gate_rail({**kwargs, "i_limit": 5.0}, drive)
    st = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[1e-3]))
    assert st.status[0] == STATUS_OK
    assert st.t_limit[0] == pytest.approx(1e-3 * 12.0 / 5.0, rel=0.01)  # C V / I_limit
    _, rail = _gate_rail({**kwargs, "i_limit": 1e4}, {"drive": "current", "i_gate": 1e-6, "c_ext": 10e-9})
    st = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[1e-3]))
    assert st.status[0] == STATUS_OK and st.t_limit[0] == 0.0


def test_a_voltage_drive_below_the_supply_plus_threshold_stalls_the_start():
    """A drive of 14 V from ground on a 12 V rail with V_th 3 V never leaves saturation: the
    output stops near v_drive - V_th = 11 V; a failing start, not an error, found without
    integrating (no step budget spent)."""
    kwargs, _ = GATE_CASES["voltage drive, resistive load"]
    doc, rail = _gate_rail(kwargs, {"drive": "voltage", "v_drive": 14.0, "r_gate": 1e5, "c_ext": 10e-9})
    st = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[100e-6]))
    assert st.status[0] == STATUS_STALLED and st.v_stall[0] == pytest.approx(11.0)
    from server.analysis import analyze_rail
    check = next(c for c in analyze_rail(doc, corners=False, headroom=False)["checks"] if c["id"] == "startup_complete")
    assert check["verdict"] == "fail" and "never leaves saturation" in check["detail"]


def test_a_short_under_foldback_is_regulated_to_the_curve_at_its_v_ds():
    """The short circuit reads the foldback curve at the FET's V_DS, the supply less the series
    resistance's drop (Kirchhoff's voltage law; the curve linear between its points): with
    r = 0.5 ohm and the curve falling 0.5 A/V between 2 V and 10 V (FOLD), i = f(v_s - r i) solves
    to i = (5 + 0.5 * 2 - 0.5 * v_s) / (1 - 0.25) where v_s - r i lies on that segment."""
    doc = simple_doc(mode="current_limit", v=8.0, c=1e-3, i_limit=5.0, r=0.5)
    doc["switch"]["foldback"] = FOLD
    rail = read_rail(doc)
    i = float(regulated_current(rail, np.array([8.0]), np.array([5.0]))[0])
    exact = (5.0 + 0.5 * 2.0 - 0.5 * 8.0) / (1.0 - 0.25)
    assert 2.0 < 8.0 - 0.5 * exact < 10.0
    # one correction step from the curve at the full supply: within 10 % of the exact solution and
    # never below the current at the full supply (the conservative side for the FET's stress)
    assert i == pytest.approx(exact, rel=0.1) and i >= float(foldback_limit(FOLD, 8.0))
    sc = short_circuit(rail, v_ds=np.array([8.0]), i_limit=np.array([5.0]), t_fault=np.array([np.inf]))
    assert float(sc["i"][0]) == pytest.approx(i)
    doc["switch"]["foldback"] = None
    assert float(regulated_current(read_rail(doc), np.array([8.0]), np.array([5.0]))[0]) == 5.0
