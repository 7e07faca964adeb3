"""Invented rail documents for the analysis tests and the benchmark.

Every MOSFET here is invented: the names follow no maker's scheme and the numbers are
plausible round values chosen so that the Foster network and the SOA curves agree with
each other (the SOA curves sit below the Foster limit at high V_ds, as measured curves
do). None of them is data of a real part.
"""

from __future__ import annotations

import copy

__all__ = [
    "FET_30V",
    "FET_40V",
    "FET_60V",
    "FET_100V",
    "efuse_12v",
    "hotswap_48v",
    "load_switch_5v",
    "slew_24v",
    "slew_12v_demo",
    "simple_doc",
]

# 30 V, 5 mOhm, mounted rth_ja 40 K/W (invented)
FET_30V = {
    "name": "INV-N30-5M0",
    "vds_max": 30.0,
    "id_pulse_max": 200.0,
    "rds_on": 5.0e-3,
    "rds_on_alpha": 0.005,
    "tj_max": 150.0,
    "rth_ja": 40.0,
    "zth": [{"r": 0.2, "tau": 2e-5}, {"r": 1.8, "tau": 2e-3}, {"r": 8.0, "tau": 0.1}, {"r": 30.0, "tau": 5.0}],
    "soa": {
        "t_case": 25.0,
        "curves": [
            {"t_pulse": 1e-4, "points": [[0.5, 150.0], [10.0, 150.0], [30.0, 40.0]]},
            {"t_pulse": 1e-3, "points": [[0.5, 100.0], [5.0, 100.0], [30.0, 12.0]]},
            {"t_pulse": 1e-2, "points": [[0.5, 60.0], [2.0, 60.0], [30.0, 4.0]]},
            {"t_pulse": None, "points": [[0.5, 20.0], [1.0, 20.0], [30.0, 0.7]]},
        ],
    },
}

# 40 V, 2 mOhm, mounted rth_ja 30 K/W (invented)
FET_40V = {
    "name": "INV-N40-2M0",
    "vds_max": 40.0,
    "id_pulse_max": 400.0,
    "rds_on": 2.0e-3,
    "rds_on_alpha": 0.006,
    "tj_max": 175.0,
    "rth_ja": 30.0,
    "zth": [{"r": 0.15, "tau": 5e-5}, {"r": 0.5, "tau": 1e-3}, {"r": 2.35, "tau": 0.02}, {"r": 27.0, "tau": 3.0}],
    "soa": {
        "t_case": 25.0,
        "curves": [
            {"t_pulse": 1e-5, "points": [[0.2, 400.0], [8.0, 400.0], [40.0, 80.0]]},
            {"t_pulse": 1e-4, "points": [[0.2, 400.0], [1.7, 400.0], [40.0, 17.0]]},
            {"t_pulse": 1e-3, "points": [[0.2, 200.0], [1.1, 200.0], [40.0, 5.5]]},
            {"t_pulse": 1e-2, "points": [[0.2, 100.0], [0.76, 100.0], [20.0, 2.9], [40.0, 1.2]]},
            {"t_pulse": 1e-1, "points": [[0.2, 50.0], [0.64, 50.0], [20.0, 1.45], [40.0, 0.6]]},
            {"t_pulse": None, "points": [[0.1, 20.0], [0.2, 20.0], [20.0, 0.19], [40.0, 0.08]]},
        ],
    },
}

# 60 V, 5 mOhm, mounted rth_ja 40 K/W (invented)
FET_60V = {
    "name": "INV-N60-5M0",
    "vds_max": 60.0,
    "id_pulse_max": 300.0,
    "rds_on": 5.0e-3,
    "rds_on_alpha": 0.005,
    "tj_max": 175.0,
    "rth_ja": 40.0,
    "zth": [{"r": 0.3, "tau": 1e-4}, {"r": 1.2, "tau": 2e-3}, {"r": 5.5, "tau": 0.05}, {"r": 33.0, "tau": 5.0}],
    "soa": {
        "t_case": 25.0,
        "curves": [
            {"t_pulse": 1e-5, "points": [[0.3, 300.0], [10.0, 300.0], [60.0, 40.0]]},
            {"t_pulse": 1e-4, "points": [[0.3, 300.0], [2.0, 300.0], [60.0, 9.0]]},
            {"t_pulse": 1e-3, "points": [[0.3, 150.0], [1.2, 150.0], [60.0, 2.5]]},
            {"t_pulse": 1e-2, "points": [[0.3, 60.0], [1.0, 60.0], [60.0, 0.8]]},
            {"t_pulse": None, "points": [[0.3, 12.0], [0.5, 12.0], [60.0, 0.05]]},
        ],
    },
}

# 100 V, 8 mOhm, mounted rth_ja 20 K/W (invented)
FET_100V = {
    "name": "INV-N100-8M0",
    "vds_max": 100.0,
    "id_pulse_max": 250.0,
    "rds_on": 8.0e-3,
    "rds_on_alpha": 0.007,
    "tj_max": 175.0,
    "rth_ja": 20.0,
    "zth": [{"r": 0.1, "tau": 1e-4}, {"r": 0.4, "tau": 2e-3}, {"r": 1.5, "tau": 0.03}, {"r": 18.0, "tau": 5.0}],
    "soa": {
        "t_case": 25.0,
        "curves": [
            {"t_pulse": 1e-5, "points": [[0.5, 300.0], [20.0, 300.0], [100.0, 60.0]]},
            {"t_pulse": 1e-4, "points": [[0.5, 300.0], [5.0, 300.0], [100.0, 14.0]]},
            {"t_pulse": 1e-3, "points": [[0.5, 150.0], [3.0, 150.0], [50.0, 8.0], [100.0, 3.2]]},
            {"t_pulse": 1e-2, "points": [[0.5, 60.0], [2.2, 60.0], [50.0, 2.6], [100.0, 0.9]]},
            {"t_pulse": 1e-1, "points": [[0.5, 25.0], [2.0, 25.0], [50.0, 0.9], [100.0, 0.3]]},
            {"t_pulse": None, "points": [[0.5, 12.0], [0.6, 12.0], [50.0, 0.13], [100.0, 0.04]]},
        ],
    },
}


def efuse_12v() -> dict:
    """12 V eFuse: current limit with a latch-off timer into 470 uF and a resistive load."""
    return {
        "schema": "railsign.rail/1",
        "name": "12 V main, eFuse",
        "supply": {"v_min": 11.4, "v_nom": 12.0, "v_max": 12.6, "r_source": 0.02, "l_source": 100e-9,
                   "i_max": 10.0, "uvlo": 9.0},
        "path": {"r": 0.005, "l": 20e-9},
        "load": {"c_nom": 470e-6, "c_tol": 0.2, "esr": 0.02, "model": "resistive", "i_nom": 1.0, "v_on": 0.0},
        "switch": {"mode": "current_limit", "t_on": 100e-6, "dvdt": None, "i_limit": 3.0, "i_limit_tol": 0.1,
                   "p_limit": None,
                   "timer": {"c": 100e-9, "c_tol": 0.1, "i_charge": 10e-6, "i_charge_tol": 0.2, "v_trip": 1.2,
                             "v_trip_tol": 0.05, "after_fault": "latch", "retry_off": None}},
        "fet": copy.deepcopy(FET_40V),
        "environment": {"t_ambient": 60.0},
        "rules": {},
    }


def hotswap_48v() -> dict:
    """48 V hot-swap: power limit, retry timer, constant-power load behind 470 uF."""
    return {
        "schema": "railsign.rail/1",
        "name": "48 V input, hot-swap",
        "supply": {"v_min": 40.0, "v_nom": 48.0, "v_max": 56.0, "r_source": 0.05, "l_source": 1e-6,
                   "i_max": 20.0, "uvlo": 34.0},
        "path": {"r": 0.01, "l": 50e-9},
        "load": {"c_nom": 470e-6, "c_tol": 0.2, "esr": 0.03, "model": "constant_power", "i_nom": 2.0,
                 "v_on": 36.0},
        "switch": {"mode": "power_limit", "t_on": 500e-6, "dvdt": None, "i_limit": 6.0, "i_limit_tol": 0.1,
                   "p_limit": 120.0,
                   "timer": {"c": 220e-9, "c_tol": 0.1, "i_charge": 20e-6, "i_charge_tol": 0.15, "v_trip": 1.0,
                             "v_trip_tol": 0.05, "after_fault": "retry", "retry_off": 2.0}},
        "fet": copy.deepcopy(FET_100V),
        "environment": {"t_ambient": 55.0},
        "rules": {},
    }


def load_switch_5v() -> dict:
    """5 V load switch: hard turn-on over 1 ms into 100 uF, no limit, no timer."""
    return {
        "schema": "railsign.rail/1",
        "name": "5 V peripheral, load switch",
        "supply": {"v_min": 4.75, "v_nom": 5.0, "v_max": 5.25, "r_source": 0.01, "l_source": 50e-9,
                   "i_max": 6.0, "uvlo": 4.0},
        "path": {"r": 0.002, "l": 10e-9},
        "load": {"c_nom": 100e-6, "c_tol": 0.2, "esr": 0.01, "model": "constant_current", "i_nom": 0.5,
                 "v_on": 3.0},
        "switch": {"mode": "hard", "t_on": 1e-3, "dvdt": None, "i_limit": None, "i_limit_tol": 0.0,
                   "p_limit": None, "timer": None},
        "fet": copy.deepcopy(FET_40V),
        "environment": {"t_ambient": 70.0},
        "rules": {},
    }


def slew_24v() -> dict:
    """24 V rail with a slew-rate controlled turn-on, a current limit and a latch timer."""
    return {
        "schema": "railsign.rail/1",
        "name": "24 V actuator, slew-controlled",
        "supply": {"v_min": 21.6, "v_nom": 24.0, "v_max": 26.4, "r_source": 0.03, "l_source": 200e-9,
                   "i_max": 8.0, "uvlo": 18.0},
        "path": {"r": 0.005, "l": 30e-9},
        "load": {"c_nom": 2.2e-3, "c_tol": 0.2, "esr": 0.015, "model": "constant_current", "i_nom": 1.5,
                 "v_on": 15.0},
        "switch": {"mode": "slew", "t_on": 200e-6, "dvdt": 2000.0, "i_limit": 8.0, "i_limit_tol": 0.1,
                   "p_limit": None,
                   "timer": {"c": 220e-9, "c_tol": 0.1, "i_charge": 10e-6, "i_charge_tol": 0.1, "v_trip": 1.0,
                             "v_trip_tol": 0.05, "after_fault": "latch", "retry_off": None}},
        "fet": copy.deepcopy(FET_60V),
        "environment": {"t_ambient": 50.0},
        "rules": {},
    }


def slew_12v_demo() -> dict:
    """12 V slew-controlled rail into 220 uF with a constant-current load that starts at 3 V.

    When the load switches on, the regulated reference steps by 1.2 A and the ideal
    regulating FET takes it through the 215 nH in about 30 ns: an unfiltered notch of the
    switch input that no real UVLO sees.
    """
    return {
        "schema": "railsign.rail/1",
        "name": "12 V logic, slew-controlled",
        "supply": {"v_min": 11.4, "v_nom": 12.0, "v_max": 12.6, "r_source": 0.015, "l_source": 200e-9,
                   "i_max": 15.0, "uvlo": 10.0},
        "path": {"r": 4e-3, "l": 15e-9},
        "load": {"c_nom": 220e-6, "c_tol": 0.2, "esr": 0.02, "model": "constant_current", "i_nom": 1.2,
                 "v_on": 3.0},
        "switch": {"mode": "slew", "t_on": 100e-6, "dvdt": 6000.0, "i_limit": None, "i_limit_tol": 0.0,
                   "p_limit": None, "timer": None},
        "fet": copy.deepcopy(FET_30V),
        "environment": {"t_ambient": 55.0},
        "rules": {},
    }


def simple_doc(
    *,
    mode: str = "current_limit",
    v: float = 12.0,
    c: float = 1e-3,
    r: float = 0.0,
    l: float = 0.0,
    esr: float = 0.0,
    load: str = "none",
    i_nom: float = 0.0,
    v_on: float = 0.0,
    i_limit: float | None = 5.0,
    dvdt: float | None = None,
    p_limit: float | None = None,
    t_on: float = 0.0,
    rds_on: float = 5e-3,
    alpha: float = 0.0,
    t_ambient: float = 25.0,
    timer: dict | None = None,
    fet: dict | None = None,
) -> dict:
    """A rail without tolerances for closed-form and simulator comparisons."""
    f = copy.deepcopy(fet or FET_60V)
    f["rds_on"] = rds_on
    f["rds_on_alpha"] = alpha
    return {
        "schema": "railsign.rail/1",
        "name": "reference circuit",
        "supply": {"v_min": v, "v_nom": v, "v_max": v, "r_source": r, "l_source": l, "i_max": None, "uvlo": None},
        "path": {"r": 0.0, "l": 0.0},
        "load": {"c_nom": c, "c_tol": 0.0, "esr": esr, "model": load, "i_nom": i_nom, "v_on": v_on},
        "switch": {"mode": mode, "t_on": t_on, "dvdt": dvdt, "i_limit": i_limit,
                   "i_limit_tol": 0.0, "p_limit": p_limit, "timer": timer},
        "fet": f,
        "environment": {"t_ambient": t_ambient},
        "rules": {},
    }
