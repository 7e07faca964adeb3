"""The start-up transient against ngspice on the same circuits (hard, slew, current limit).

ngspice (Debian package ``ngspice``) runs in batch mode (``ngspice -b``) on a netlist
written to a temporary directory; the switch is a behavioural current source whose
current is min(v_ds / R_sw(t), reference). i_peak, t_limit and e_fet must agree within
1 %. The test fails, it does not skip, when ngspice is missing.
"""

from __future__ import annotations

import pytest

from server.analysis.circuit import R_OFF, circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import STATUS_OK, simulate_startup

from .rail_documents import simple_doc
from .spice import NGSPICE, ngspice_missing_message, simulate_ngspice

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
