"""Fault timer and IEC 60063 preferred values."""

from __future__ import annotations

import math

import pytest
from numpy.testing import assert_allclose

from server.analysis import e12_values, e_series, round_to_series, values_between
from server.analysis.document import Timer
from server.analysis.timer import fault_time, fault_times, timer_window

# Source: IEC 60063:2015 table 1, E12 series (two significant figures)
IEC_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
# Source: IEC 60063:2015 table 1, E24 series (from memory; E12 is every second value)
IEC_E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
           3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)


def test_e12_values_are_iec_60063():
    assert e12_values() == IEC_E12
    assert e_series("E24") == IEC_E24
    assert e_series("E6") == (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)  # IEC 60063 E6, from memory
    with pytest.raises(ValueError, match="series"):
        e_series("E7")


@pytest.mark.parametrize("x, nearest, up, down", [
    (4.3e-9, 4.7e-9, 4.7e-9, 3.9e-9),   # log distance: 4.3 is closer to 4.7 (0.089) than to 3.9 (0.098)
    (1.05e-6, 1.0e-6, 1.2e-6, 1.0e-6),
    (9.5e-8, 1.0e-7, 1.0e-7, 8.2e-8),   # across a decade
    (100e-9, 100e-9, 100e-9, 100e-9),   # exact value
    (2.3, 2.2, 2.7, 2.2),
    (2.5, 2.7, 2.7, 2.2),               # above sqrt(2.2 * 2.7) = 2.437, the log midpoint
])
def test_e12_rounding(x, nearest, up, down):
    # Rounding to a geometric series is nearest on a logarithmic scale (IEC 60063 series
    # are geometric, ratio 10^(1/12)); "up"/"down" are the next series values.
    assert_allclose(round_to_series(x, "E12", "nearest"), nearest, rtol=1e-12)
    assert_allclose(round_to_series(x, "E12", "up"), up, rtol=1e-12)
    assert_allclose(round_to_series(x, "E12", "down"), down, rtol=1e-12)


def test_values_between_spans_decades():
    got = values_between(3.0e-9, 12e-9)
    assert_allclose(got, [3.3e-9, 3.9e-9, 4.7e-9, 5.6e-9, 6.8e-9, 8.2e-9, 10e-9, 12e-9], rtol=1e-12)
    with pytest.raises(ValueError):
        values_between(0.0, 1.0)


TIMER = Timer(c=100e-9, c_tol=0.1, i_charge=10e-6, i_charge_tol=0.2, v_trip=1.2, v_trip_tol=0.05,
              after_fault="latch", retry_off=None)


def test_fault_times_closed_form():
    # Source: constant-current charge of the timer capacitor, t = C V / I; the extremes
    # combine the part tolerances (worst-case analysis, common practice).
    lo, nom, hi = fault_times(TIMER)
    assert_allclose(nom, 100e-9 * 1.2 / 10e-6, rtol=1e-15)
    assert_allclose(lo, 90e-9 * 1.14 / 12e-6, rtol=1e-12)
    assert_allclose(hi, 110e-9 * 1.26 / 8e-6, rtol=1e-12)
    assert_allclose(fault_time(100e-9, 1.2, 10e-6), nom, rtol=1e-15)


def test_timer_window_meets_both_margins_and_suggests_e12():
    t_limit, t_allow = 3e-3, 40e-3
    w = timer_window(TIMER, t_limit_worst=t_limit, t_allow=t_allow, timer_margin=1.5, fault_margin=1.5)
    lo, hi = w["c_window"]
    # at the window edges the margins are exactly the rules
    t_min_lo = lo * 0.9 * 1.14 / 12e-6
    t_max_hi = hi * 1.1 * 1.26 / 8e-6
    assert_allclose(t_min_lo / t_limit, 1.5, rtol=1e-12)
    assert_allclose(t_allow / t_max_hi, 1.5, rtol=1e-12)
    c = w["c_suggested"]
    assert lo <= c <= hi
    assert any(math.isclose(c / 10 ** math.floor(math.log10(c)), m, rel_tol=1e-9) for m in IEC_E12)
    assert w["window_note"] is None


def test_empty_timer_window_says_which_constraint_and_by_how_much():
    w = timer_window(TIMER, t_limit_worst=20e-3, t_allow=30e-3, timer_margin=1.5, fault_margin=1.5)
    assert w["c_window"] is None and w["c_suggested"] is None
    note = w["window_note"]
    assert "start-up needs at least" in note and "short circuit allows at most" in note
    ratio = w["c_lo"] / w["c_hi"]
    assert f"{ratio:.3g}" in note
    assert ratio > 1
