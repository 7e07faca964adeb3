"""Checks of a switched rail against the team rules and the physical limits, with verdicts.

Provides
--------
CHECKS
    The checks in report order: id, title, unit, basis and sense.
PASS, MARGINAL, FAIL, NA, VERDICTS
    Verdict codes (ordered by severity: fail worst) and their words.
evaluate_checks(rail, rules, fig)
    Value, limit, physical edge and verdict of every check for rows of figures.
normalised_margin(spec, value, limit, t_ambient)
    A continuous margin that is >= 1 exactly where a check passes (for searches).
check_detail(check_id, fig, row, rail, rules)
    One sentence explaining the value of a check for one row.
worst_verdict(codes)
    The rail verdict: the worst of its checks.

The supply dip compares the UVLO with the switch input through the UVLO's deglitch
filter (a first-order lag of ``supply.uvlo_filter``, 1 us by default: common practice,
no source), not with the unfiltered nanosecond notch of an ideal regulating FET.

Grading (DESIGN.md section 5): a value on the safe side of the team limit passes; a value
between the team limit and the bare physical edge (ratio 1.0, tj_max, vds_max) is
marginal; beyond the edge it fails. Checks against a physical limit alone (a rating or an
upstream UVLO) pass or fail. The team limits are common practice, not a standard.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .document import Rail
from .units import eng, temp

__all__ = [
    "NA",
    "PASS",
    "MARGINAL",
    "FAIL",
    "VERDICTS",
    "CheckSpec",
    "CHECKS",
    "CHECK_IDS",
    "C_DEPENDENT",
    "evaluate_checks",
    "normalised_margin",
    "check_detail",
    "worst_verdict",
]

NA, PASS, MARGINAL, FAIL = 0, 1, 2, 3
VERDICTS = {NA: "n/a", PASS: "pass", MARGINAL: "marginal", FAIL: "fail"}


@dataclass(frozen=True)
class CheckSpec:
    id: str
    title: str
    unit: str
    basis: str  # "standard" | "common practice" | "physical limit"
    sense: str  # "at_least" | "at_most" | "flag"
    temperature: bool = False


CHECKS: tuple[CheckSpec, ...] = (
    CheckSpec("startup_complete", "Start-up reaches its final output voltage", "V", "physical limit", "flag"),
    CheckSpec("vds_derating", "Supply maximum within the derated V_DS rating", "V", "common practice", "at_most"),
    CheckSpec("startup_soa", "Start-up pulse inside the derated SOA (equivalent rectangle)", "ratio", "common practice", "at_least"),
    CheckSpec("startup_tj", "Start-up junction temperature (Foster network)", "degC", "common practice", "at_most", True),
    CheckSpec("short_circuit_time", "Output short circuit cleared before the FET's limit", "ratio", "common practice", "at_least"),
    CheckSpec("timer_startup", "Fault timer does not trip on a good start", "ratio", "common practice", "at_least"),
    CheckSpec("retry_tj", "Junction temperature in retry (periodic steady state)", "degC", "common practice", "at_most", True),
    CheckSpec("steady_tj", "Junction temperature in steady conduction", "degC", "common practice", "at_most", True),
    CheckSpec("steady_stable", "No thermal runaway in steady conduction", "degC", "physical limit", "flag"),
    CheckSpec("supply_dip", "Switch input stays above the upstream UVLO", "V", "physical limit", "at_least"),
    CheckSpec("supply_current", "Inrush peak within the supply's current capability", "A", "physical limit", "at_most"),
    CheckSpec("fet_pulse_current", "Inrush peak within the FET's pulsed drain current rating", "A", "physical limit", "at_most"),
)
CHECK_IDS = tuple(c.id for c in CHECKS)
_SPEC = {c.id: c for c in CHECKS}
# checks whose value depends on the load capacitance (the headroom search uses these)
C_DEPENDENT = ("startup_soa", "startup_tj", "timer_startup", "supply_dip", "supply_current", "fet_pulse_current")


def _grade(sense: str, value, limit, edge):
    value = np.asarray(value, dtype=float)
    with np.errstate(invalid="ignore"):
        if sense == "at_least":
            code = np.where(value >= limit, PASS, np.where(value >= edge, MARGINAL, FAIL))
        else:
            code = np.where(value <= limit, PASS, np.where(value <= edge, MARGINAL, FAIL))
    return np.where(np.isnan(value), NA, code).astype(np.int8)


def evaluate_checks(rail: Rail, rules: dict, fig: dict) -> dict:
    """Grade every check for rows of figures.

    Parameters
    ----------
    rail : Rail
    rules : dict
        Team rules (DESIGN.md section 5).
    fig : dict of ndarray
        Row figures from `evaluation.evaluate_rows` (SI units, degC).

    Returns
    -------
    dict
        ``{check_id: {"value", "limit", "edge", "verdict"}}``, arrays of shape (n,);
        ``value`` NaN where the check does not apply (verdict NA) or where the figure
        does not exist (then the verdict says why: a runaway fails).
    """
    n = fig["n"]
    nan = np.full(n, np.nan)
    fet = rail.fet
    tj_lim = fet.tj_max - rules["tj_headroom"]
    ok = fig["status_ok"]
    out = {}

    def row(x):
        if isinstance(x, np.ndarray) and x.shape == (n,):
            return x.astype(float)  # a copy
        return np.full(n, float(x)) if np.ndim(x) == 0 else np.broadcast_to(np.asarray(x, float), (n,)).copy()

    def put(cid, value, limit, edge, verdict=None):
        value, limit, edge = row(value), row(limit), row(edge)
        if verdict is None:
            verdict = _grade(_SPEC[cid].sense, value, limit, edge)
        out[cid] = {"value": value, "limit": limit, "edge": edge, "verdict": np.asarray(verdict, np.int8)}

    put("startup_complete", np.where(ok, fig["v_final"], fig["v_stall"]), fig["v_target"], fig["v_target"],
        np.where(ok, PASS, FAIL))
    put("vds_derating", fig["v_sc"], rules["vds_derating"] * fet.vds_max, fet.vds_max)
    put("startup_soa", fig["soa_ratio"], rules["soa_margin"], 1.0)
    put("startup_tj", fig["tj_peak"], tj_lim, fet.tj_max)
    if fig["has_limit"]:
        put("short_circuit_time", fig["sc_margin"], rules["fault_margin"], 1.0)
    else:
        put("short_circuit_time", nan, nan, nan)
    if fig["has_timer"]:
        put("timer_startup", fig["startup_margin"], rules["timer_margin"], 1.0)
    else:
        put("timer_startup", nan, nan, nan)
    if fig["has_retry"]:
        put("retry_tj", fig["retry_tj_peak"], tj_lim, fet.tj_max)
    else:
        put("retry_tj", nan, nan, nan)
    stable = fig["steady_stable"]
    steady_ok = fig["steady_dc_ok"]
    v = np.where(stable, fig["steady_tj"], np.nan)
    put("steady_tj", v, tj_lim, fet.tj_max,
        np.where(stable, _grade("at_most", v, tj_lim, fet.tj_max), np.where(steady_ok, FAIL, NA)))
    put("steady_stable", v, fet.tj_max, fet.tj_max, np.where(stable, PASS, np.where(steady_ok, FAIL, NA)))
    uvlo = rail.supply.uvlo
    put("supply_dip", fig["v_supply_min"] if uvlo is not None else nan, uvlo if uvlo is not None else np.nan,
        uvlo if uvlo is not None else np.nan)
    i_max = rail.supply.i_max
    put("supply_current", fig["i_peak"] if i_max is not None else nan, i_max if i_max else np.nan,
        i_max if i_max else np.nan)
    idm = fet.id_pulse_max
    put("fet_pulse_current", fig["i_peak"] if idm is not None else nan, idm if idm else np.nan,
        idm if idm else np.nan)
    return out


def normalised_margin(spec: CheckSpec, value, limit, t_ambient: float, verdict=None) -> np.ndarray:
    """A continuous margin that is >= 1 exactly where a check passes its team limit.

    Parameters
    ----------
    spec : CheckSpec
    value, limit : ndarray
        The check's value and team limit (units of the check).
    t_ambient : float
        Ambient temperature, degC: temperatures compare as rises above it.
    verdict : ndarray, optional
        Needed for flag checks (pass -> inf, fail -> 0).

    Returns
    -------
    ndarray
        value / limit (at least), limit / value (at most), (limit - t_amb) / (value -
        t_amb) for temperatures; ``inf`` where the check does not apply.
    """
    value = np.asarray(value, dtype=float)
    limit = np.asarray(limit, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if spec.sense == "flag":
            return np.where(np.asarray(verdict) == FAIL, 0.0, np.inf)
        if spec.temperature:
            rise = value - t_ambient
            m = np.where(rise > 0, (limit - t_ambient) / rise, np.inf)
        elif spec.sense == "at_least":
            m = value / limit
        else:
            m = np.where(value > 0, limit / value, np.inf)
    return np.where(np.isnan(m), np.inf, m)


def worst_verdict(codes) -> int:
    """Worst verdict code (fail > marginal > pass > n/a)."""
    codes = np.asarray(list(codes), dtype=int)
    return int(codes.max()) if codes.size else NA


def check_detail(cid: str, fig: dict, row: int, rail: Rail, rules: dict) -> str:
    """One sentence explaining a check's value for one row of figures."""
    f = {k: (v[row] if isinstance(v, np.ndarray) and v.ndim == 1 else v) for k, v in fig.items()}
    fet = rail.fet
    ok = bool(f["status_ok"])
    if cid == "startup_complete":
        if ok:
            return f"The output reaches {eng(f['v_final'], 'V')}."
        return (f"The regulated current cannot carry the load: the output stalls near "
                f"{eng(f['v_stall'], 'V')} (final {eng(f['v_target'], 'V')}); the other start-up checks do not apply.")
    if not ok and cid in C_DEPENDENT:
        return "Not evaluated: the start-up does not complete."
    if cid == "vds_derating":
        return (f"Supply {eng(f['v_sc'], 'V')} against {rules['vds_derating']:g} x V_DS rating "
                f"{eng(fet.vds_max, 'V')}; ringing at turn-off is not modelled.")
    if cid == "startup_soa":
        return (f"Equivalent rectangle {eng(f['pulse_p_peak'], 'W')} for {eng(f['pulse_t_equiv'], 's')} at "
                f"{eng(f['v_ds_at_peak'], 'V')}, {eng(f['i_at_peak'], 'A')}; the SOA derated to "
                f"{temp(rail.t_ambient)} (factor {f['soa_derating']:.3g}) allows {eng(f['soa_i_allowed'], 'A')}.")
    if cid == "startup_tj":
        return (f"Foster network from {temp(rail.t_ambient)}: peak {temp(f['tj_peak'])}, "
                f"start-up energy {eng(f['e_fet'], 'J')}.")
    if cid == "short_circuit_time":
        if not f["has_limit"]:
            return "The switch has no current limit: short-circuit protection lies outside it."
        by = "SOA curves" if f["sc_t_soa"] <= f["sc_t_thermal"] else "Foster network"
        tf = "no fault timer" if not np.isfinite(f["t_fault_sc"]) else f"timer trips by {eng(f['t_fault_sc'], 's')}"
        return (f"{eng(f['sc_p'], 'W')} ({eng(f['v_sc'], 'V')}, {eng(f['sc_i'], 'A')}): the FET survives "
                f"{eng(f['sc_t_allow'], 's')} ({by}); {tf}.")
    if cid == "timer_startup":
        if not f["has_timer"]:
            return "No fault timer."
        return (f"Shortest trip {eng(f['t_fault_start'], 's')} against {eng(f['t_limit'], 's')} "
                f"of regulation during the start.")
    if cid == "retry_tj":
        if not f["has_retry"]:
            return "Not in retry mode."
        return (f"Pulses of {eng(f['sc_p'], 'W')} for {eng(f['t_fault_sc'], 's')} every "
                f"{eng(f['t_fault_sc'] + rail.switch.timer.retry_off, 's')} (duty {f['retry_duty']:.3g}).")
    if cid in ("steady_tj", "steady_stable"):
        if not f["steady_dc_ok"]:
            return "The load has no DC operating point."
        if not f["steady_stable"]:
            return (f"Thermal runaway: at {eng(f['steady_i'], 'A') if np.isfinite(f['steady_i']) else 'the load current'} "
                    f"the heating exceeds the cooling up to tj_max {temp(fet.tj_max)}.")
        return (f"{eng(f['steady_i'], 'A')} through Rds(on) at Tj: {eng(f['steady_p_fet'], 'W')}, "
                f"{temp(f['steady_tj'])} with rth_ja {fet.rth_ja:g} K/W.")
    if cid == "supply_dip":
        if rail.supply.uvlo is None:
            return "No upstream UVLO given."
        tau = rail.supply.uvlo_filter or 0.0
        if tau > 0.0:
            return (f"Lowest switch-input voltage {eng(f['v_supply_min'], 'V')} through the UVLO's deglitch "
                    f"filter (first-order lag of {eng(tau, 's')}, supply.uvlo_filter; its 1 us default is common "
                    f"practice, no source) against UVLO "
                    f"{eng(rail.supply.uvlo, 'V')}; unfiltered dip to {eng(f['v_supply_min_raw'], 'V')}; "
                    "no input capacitance is modelled.")
        return (f"Lowest switch-input voltage {eng(f['v_supply_min'], 'V')} (unfiltered: uvlo_filter is 0) "
                f"against UVLO {eng(rail.supply.uvlo, 'V')}; no input capacitance is modelled.")
    if cid == "supply_current":
        if rail.supply.i_max is None:
            return "No supply current capability given."
        return f"Inrush peak {eng(f['i_peak'], 'A')} against {eng(rail.supply.i_max, 'A')}."
    if cid == "fet_pulse_current":
        if fet.id_pulse_max is None:
            return "No pulsed drain current rating given."
        return f"Inrush peak {eng(f['i_peak'], 'A')} against the rating {eng(fet.id_pulse_max, 'A')}."
    return ""
