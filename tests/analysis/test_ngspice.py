"""The start-up transient against ngspice on the same circuits (hard, slew, current limit).

ngspice (Debian package ``ngspice``) runs in batch mode (``ngspice -b``) on a netlist
written to a temporary directory; the switch is a behavioural current source whose
current is min(v_ds / R_sw(t), reference). i_peak, t_limit and e_fet must agree within
1 %; the supply dip at the switch input, with and without input capacitance, within 1 %
and its time below a UVLO threshold within 2 %. The test fails, it does not skip, when
ngspice is missing.
"""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.circuit import R_OFF, circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup

from .rail_documents import simple_doc
from .spice import NGSPICE, longest_time_below, ngspice_missing_message, simulate_ngspice

CASES = {
    "hard": dict(mode="hard", v=12.0, c=1e-3, r=0.01, l=50e-9, esr=0.005, load="resistive", i_nom=2.0,
                 i_limit=None, rds_on=3e-3),
    "hard_ramp": dict(mode="hard", v=12.0, c=1e-3, r=0.01, l=50e-9, esr=0.005, load="resistive", i_nom=2.0,
                      i_limit=None, rds_on=3e-3, t_on=200e-6),
    "slew": dict(mode="slew", v=24.0, c=2.2e-3, r=0.02, l=100e-9, esr=0.01, load="resistive", i_nom=1.0,
                 i_limit=None, dvdt=2000.0, rds_on=5e-3),
    "current_limit": dict(mode="current_limit", v=12.0, c=1e-3, r=0.02, l=100e-9, esr=0.02, load="resistive",
                          i_nom=1.0, i_limit=4.0, rds_on=5e-3),
    "current_limit_no_l": dict(mode="current_limit", v=48.0, c=470e-6, r=0.05, l=0.0, esr=0.03,
                               load="resistive", i_nom=2.0, i_limit=6.0, rds_on=8e-3),
}


def test_ngspice_is_installed():
    assert NGSPICE is not None, ngspice_missing_message()


@pytest.mark.parametrize("name", sorted(CASES))
def test_startup_agrees_with_ngspice(name, tmp_path):
    assert NGSPICE is not None, ngspice_missing_message()
    kw = CASES[name]
    rail = read_rail(simple_doc(**kw))
    fig = simulate_startup(circuit_rows(rail, v_s=[kw["v"]], c=[kw["c"]]))
    assert fig.status[0] == STATUS_OK
    ng = simulate_ngspice(
        tmp_path, t_stop=float(fig.t_end[0]) * 1.05, v=kw["v"], r=kw["r"], l=kw["l"], c=kw["c"], esr=kw["esr"],
        r_load=kw["v"] / kw["i_nom"], mode=kw["mode"], rds=kw["rds_on"], i_limit=kw.get("i_limit"),
        dvdt=kw.get("dvdt"), t_on=kw.get("t_on", 0.0), r_off=R_OFF,
    )
    # Source: ngspice-39 transient analysis of the same netlist (Gear, reltol 1e-6)
    assert fig.i_peak[0] == pytest.approx(ng["i_peak"], rel=0.01)
    assert fig.e_fet[0] == pytest.approx(ng["e_fet"], rel=0.01)
    if ng["t_limit"] == 0.0:
        assert fig.t_limit[0] == 0.0
    else:
        assert fig.t_limit[0] == pytest.approx(ng["t_limit"], rel=0.01)


# The supply dip at the switch input: a hard start with a turn-on ramp into a capacitor
# behind source inductance, and a current-limited start, each without and with input
# capacitance; and an instant current-limited start without it (the ideal notch).
DIP_CASES = {
    "hard_ramp": dict(mode="hard", v=12.0, c=1e-3, r=0.01, l=200e-9, esr=0.005, load="resistive", i_nom=2.0,
                      i_limit=None, rds_on=3e-3, t_on=50e-6),
    "current_limit_ramp": dict(mode="current_limit", v=12.0, c=1e-3, r=0.02, l=500e-9, esr=0.02, load="resistive",
                               i_nom=1.0, i_limit=8.0, rds_on=5e-3, t_on=20e-6),
    "current_limit_instant": dict(mode="current_limit", v=12.0, c=1e-3, r=0.02, l=500e-9, esr=0.02,
                                  load="resistive", i_nom=1.0, i_limit=8.0, rds_on=5e-3, t_on=0.0),
}


@pytest.mark.parametrize("c_in", [None, 4.7e-6, 47e-6])
@pytest.mark.parametrize("name", sorted(DIP_CASES))
def test_supply_dip_agrees_with_ngspice(name, c_in, tmp_path):
    assert NGSPICE is not None, ngspice_missing_message()
    kw = DIP_CASES[name]
    doc = simple_doc(**kw)
    uvlo = 11.0 if c_in else None
    doc["supply"]["c_in"] = c_in
    doc["supply"]["uvlo"] = uvlo
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[kw["v"]], c=[kw["c"]]))
    assert fig.status[0] == STATUS_OK
    ng = simulate_ngspice(
        tmp_path, t_stop=float(fig.t_end[0]), points=200000, v=kw["v"], r=kw["r"], l=kw["l"], c=kw["c"],
        esr=kw["esr"], r_load=kw["v"] / kw["i_nom"], mode=kw["mode"], rds=kw["rds_on"], i_limit=kw.get("i_limit"),
        dvdt=None, t_on=kw["t_on"], r_off=R_OFF, c_in=c_in,
    )
    # Source: ngspice-39 transient analysis of the same netlist (Gear, reltol 1e-6, max
    # step t_end / 200,000): the lowest switch-input voltage, as a dip below v_s, within 1 %
    dip, dip_ng = kw["v"] - fig.v_supply_min[0], kw["v"] - ng["v_in_min"]
    assert dip == pytest.approx(dip_ng, rel=0.01)
    assert fig.i_peak[0] == pytest.approx(ng["i_peak"], rel=0.01)
    assert fig.e_fet[0] == pytest.approx(ng["e_fet"], rel=0.01)
    # only an instant turn-on with no input capacitance is the ideal notch
    assert bool(fig.dip_unbounded[0]) == (c_in is None and kw["t_on"] == 0.0)
    if uvlo is None:
        assert np.isnan(fig.t_below_uvlo[0])
    else:
        # the longest time below 11 V on ngspice's waveform, within 2 % (0 where never below)
        t_ng = longest_time_below(ng["t"], ng["v_in"], uvlo)
        assert fig.t_below_uvlo[0] == pytest.approx(t_ng, rel=0.02, abs=1e-9)
