"""Invented test data: rail documents and MOSFETs with plausible numbers (no real parts)."""

from __future__ import annotations

import copy
from typing import Any


def fet_doc(name: str = "Test N30 5m", **overrides: Any) -> dict[str, Any]:
    doc = {
        "name": name,
        "vds_max": 30.0,
        "id_pulse_max": 200.0,
        "rds_on": "5 mOhm",
        "rds_on_alpha": 0.005,
        "tj_max": 150.0,
        "rth_ja": 40.0,
        "zth": [{"r": 0.2, "tau": "20 us"}, {"r": 1.8, "tau": "2 ms"}, {"r": 8.0, "tau": 0.1},
                {"r": 30.0, "tau": 5.0}],
        "soa": {"t_case": 25.0, "curves": [
            {"t_pulse": "100 us", "points": [[0.5, 150.0], [10.0, 150.0], [30.0, 40.0]]},
            {"t_pulse": "1 ms", "points": [[0.5, 100.0], [5.0, 100.0], [30.0, 12.0]]},
            {"t_pulse": "10 ms", "points": [[0.5, 60.0], [2.0, 60.0], [30.0, 4.0]]},
            {"t_pulse": None, "points": [[0.5, 20.0], [1.0, 20.0], [30.0, 0.7]]},
        ]},
    }
    doc.update(overrides)
    return doc


def rail_doc(name: str = "VOUT_12V", **sections: dict[str, Any]) -> dict[str, Any]:
    """A current-limited 12 V rail into 680 uF; ``sections`` update the named sections."""
    doc: dict[str, Any] = {
        "schema": "railsign.rail/1",
        "name": name,
        "supply": {"v_min": 11.4, "v_nom": 12.0, "v_max": 12.6, "r_source": "20 mOhm", "l_source": "100 nH",
                   "i_max": 10.0, "uvlo": 9.0},
        "path": {"r": "5 mOhm", "l": "20 nH"},
        "load": {"c_nom": "680uF", "c_tol": 0.2, "esr": "10 mOhm", "model": "resistive", "i_nom": 2.0},
        "switch": {"mode": "current_limit", "i_limit": "4 A", "i_limit_tol": 0.1,
                   "timer": {"c": "100 nF", "c_tol": 0.1, "i_charge": "10 uA", "i_charge_tol": 0.1,
                             "v_trip": 1.2, "v_trip_tol": 0.05, "after_fault": "latch"}},
        "fet": fet_doc(),
        "environment": {"t_ambient": 55.0},
    }
    for key, value in sections.items():
        if isinstance(doc.get(key), dict) and isinstance(value, dict):
            doc[key] = {**doc[key], **value}
        else:
            doc[key] = value
    return copy.deepcopy(doc)
