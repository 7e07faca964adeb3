"""The team rules: the margins and limits a team sets for its sign-off (DESIGN.md section 5).

Provides
--------
DEFAULT_RULES
    Each rule's value where neither the team nor the rail sets it.
RULE_DESCRIPTIONS
    Each rule's unit, meaning and basis (all are common practice, none a standard).
RULE_RANGES
    The values each rule may take (the keywords of `document.Bound`): a rule that would make
    a check easier to pass than the physics allows (a margin below 1, a derating above 1)
    is refused.

A team's rules are a partial dict over `DEFAULT_RULES`; a rail document's own ``rules``
override them. `document.read_rail` reads and validates both into ``Rail.rules``.
"""

from __future__ import annotations

__all__ = ["DEFAULT_RULES", "RULE_DESCRIPTIONS", "RULE_RANGES"]

DEFAULT_RULES: dict[str, float] = {
    "tj_headroom": 25.0,
    "soa_margin": 1.5,
    "fault_margin": 1.5,
    "timer_margin": 1.5,
    "vds_derating": 0.8,
    "linear_share": 1.0,
}

RULE_DESCRIPTIONS: dict[str, dict[str, str]] = {
    "tj_headroom": {
        "unit": "K",
        "meaning": "start-up, retry and steady junction temperature stay this far below tj_max",
        "basis": "common practice",
    },
    "soa_margin": {
        "unit": "ratio",
        "meaning": "allowed / actual current of the start-up pulse against the derated SOA curves",
        "basis": "common practice",
    },
    "fault_margin": {
        "unit": "ratio",
        "meaning": "t_allow / t_fault_max for an output short circuit",
        "basis": "common practice",
    },
    "timer_margin": {
        "unit": "ratio",
        "meaning": "t_fault_min / worst-case t_limit, so that a good start never trips the timer",
        "basis": "common practice",
    },
    "vds_derating": {
        "unit": "ratio",
        "meaning": "v_max <= vds_derating * vds_max",
        "basis": "common practice",
    },
    "linear_share": {
        "unit": "ratio",
        "meaning": "share of the total current the worst of parallel FETs carries in linear mode (start-up "
                   "regulation, short circuit); 1: one FET carries it all (threshold spread); never below "
                   "1 / fet.count (no source for the default)",
        "basis": "common practice",
    },
}

RULE_RANGES: dict[str, dict[str, float]] = {
    "tj_headroom": {"minimum": 0.0},
    "soa_margin": {"minimum": 1.0},
    "fault_margin": {"minimum": 1.0},
    "timer_margin": {"minimum": 1.0},
    "vds_derating": {"above": 0.0, "maximum": 1.0},
    "linear_share": {"above": 0.0, "maximum": 1.0},
}
