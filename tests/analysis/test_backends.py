"""The two arithmetic back ends of the transient run the same algorithm.

A batch of rows runs on the vectorised array back end; each row alone runs on the Python
float back end. Every figure must agree to rounding (the same steps, the same events, the
same trips), whatever the row does: a free start, a trip, a retry, a stall with a timer,
input capacitance, a dip below the UVLO threshold. A consistency check of the code, not of
the physics (the physics is checked against closed forms, scipy and ngspice elsewhere).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.startup import simulate_startup

from .rail_documents import efuse_12v, hotswap_48v, load_switch_5v, slew_12v_demo, slew_24v

FIELDS = ("t_trip", "i_peak", "t_i_peak", "t_limit", "t_settle", "e_fet", "p_fet_peak", "tj_peak", "v_supply_min",
          "t_below_uvlo", "v_ds_at_peak", "i_at_peak", "v_final", "v_stall", "t_end")
PULSES = ("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start")


def _rows(make, c_in):
    doc = make()
    doc["supply"]["c_in"] = c_in
    rail = read_rail(doc)
    v, c = rail.supply.v_nom, rail.load.c_nom
    free = simulate_startup(circuit_rows(rail, v_s=[v], c=[c]))
    t_lim = free.t_limit[0] if free.t_limit[0] > 0 else 1e-3
    # a free row, a row the timer cuts at half its regulation, one just past it, a larger
    # capacitor, a lower supply
    v_s = np.array([v, v, v, v, 0.95 * v])
    cs = np.array([c, c, c, 2.0 * c, c])
    t_fault = np.array([np.inf, 0.5 * t_lim, 1.02 * t_lim, 0.7 * t_lim, np.inf])
    return rail, v_s, cs, t_fault


def _rel(a, b):
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    both = np.isfinite(a) & np.isfinite(b)
    assert np.array_equal(np.isfinite(a), np.isfinite(b))
    den = np.maximum(np.abs(b), 1e-12)
    return float(np.max(np.abs(a - b)[both] / den[both], initial=0.0))


@pytest.mark.parametrize("c_in", [None, 10e-6])
@pytest.mark.parametrize("make", [efuse_12v, hotswap_48v, slew_24v, slew_12v_demo, load_switch_5v])
def test_array_and_float_back_ends_agree(make, c_in):
    rail, v_s, cs, t_fault = _rows(make, c_in)
    batch = simulate_startup(circuit_rows(rail, v_s=v_s, c=cs, t_fault=t_fault), record=1)
    exact = 0
    for j in range(v_s.size):
        one = simulate_startup(circuit_rows(rail, v_s=[v_s[j]], c=[cs[j]], t_fault=[t_fault[j]]),
                               record=0 if j == 1 else None)
        assert one.status[0] == batch.status[j] and one.attempts[0] == batch.attempts[j]
        assert bool(one.dip_unbounded[0]) == bool(batch.dip_unbounded[j])
        assert abs(int(one.steps[0]) - int(batch.steps[j])) <= 4
        k = one.pulse_e.shape[1]
        worst = max([_rel(getattr(one, name)[0], getattr(batch, name)[j]) for name in FIELDS]
                    + [_rel(getattr(one, name)[0], getattr(batch, name)[j, :k]) for name in PULSES])
        for name in PULSES:
            assert np.all(np.isnan(getattr(batch, name)[j, k:]))
        # NumPy's exp and log may differ from the math module's in the last bit; where that
        # tips a step's error estimate across 1, the two runs take different steps from
        # there and agree to the integration tolerance instead of to rounding
        assert worst <= 2e-3
        exact += worst <= 1e-6
        if j == 1 and worst <= 1e-6:
            for key in one.waveform:
                assert_allclose(one.waveform[key], batch.waveform[key], rtol=1e-6, atol=1e-12, err_msg=key)
    assert exact >= v_s.size - 1  # the same steps, to rounding, in all rows but at most one
