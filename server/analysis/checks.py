"""Checks of a switched rail against the team rules and the physical limits, with verdicts.

Provides
--------
CHECKS
    The checks in report order: id, title, unit, basis, sense.
PASS, MARGINAL, FAIL, NA, VERDICTS, SEVERITY
    Verdict codes (ordered by severity: fail worst) and their words.
evaluate_checks(rail, rules, fig)
    Value, team limit, physical edge, normalised margin and verdict of every check, for
    rows of figures.
normalised_margin(spec, value, limit, t_ambient, verdict=None)
    The one definition of a check's margin: 1.0 at the team's limit, >= 1 where it passes.
edge_margin(spec, limit, edge, t_ambient)
    Where the physical edge sits on the same normalised scale.
check_detail(check_id, fig, row, rail, rules)
    One or two sentences explaining the value of a check for one row, and for a failing
    check what would make it pass.
worst_verdict(codes)
    The rail verdict: the worst of its checks.

Grading (DESIGN.md section 5): a value on the safe side of the team limit passes; a value
between the team limit and the bare physical edge (ratio 1.0, tj_max, vds_max) is
marginal; beyond the edge it fails. Checks against a physical limit alone (a rating, an
upstream UVLO, the start completing) pass or fail. The team limits are common practice,
not a standard.

Normalised margin (defined here once, used by the corners, the worst-case search, the
Monte Carlo and every page): value / limit for a check that must stay at or above its
limit; limit / value for one that must stay at or below it; for temperatures the allowed
rise over the ambient against the actual rise, (limit - t_ambient) / (value -
t_ambient). It is 1.0 exactly at the team's limit and >= 1 where the check passes; the
physical edge sits at `edge_margin` (below 1 where the team keeps a margin). A flag check
reads 0 when it fails and infinity when it passes.

The supply dip is read raw: the lowest switch-input voltage against the upstream UVLO.
Where the rail gives the UVLO's deglitch time (``supply.uvlo_filter``, from the upstream
part's datasheet), the UVLO trips only when the input stays below it continuously for that
long; a shorter dip passes (its margin then reads 1.0: at the edge, held by the deglitch
time alone). Where no input capacitance is given and the minimum is set by the ideal
switch closing into series inductance, the dip is not bounded by anything the document
describes, and the check fails saying so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .document import Rail
from .startup import (STATUS_NO_CONVERGENCE, STATUS_OK, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY,
                      STATUS_STALLED, STATUS_TRIPPED, TJ_RUNAWAY_K)
from .units import eng, temp

__all__ = [
    "NA",
    "PASS",
    "MARGINAL",
    "FAIL",
    "VERDICTS",
    "SEVERITY",
    "CheckSpec",
    "CHECKS",
    "SPECS",
    "C_DEPENDENT",
    "STARTUP_CHECKS",
    "evaluate_checks",
    "normalised_margin",
    "edge_margin",
    "check_detail",
    "worst_verdict",
]

NA, PASS, MARGINAL, FAIL = 0, 1, 2, 3
VERDICTS = {NA: "n/a", PASS: "pass", MARGINAL: "marginal", FAIL: "fail"}
SEVERITY = {v: k for k, v in VERDICTS.items()}


@dataclass(frozen=True)
class CheckSpec:
    id: str
    title: str
    unit: str   # "V", "A", "degC", "ratio"
    basis: str  # "standard" | "common practice" | "physical limit"
    sense: str  # "at_least" | "at_most" | "flag"
    temperature: bool = False

    @property
    def direction(self) -> str | None:
        """The limit's direction as people write it: the value must be >= or <= the limit."""
        return {"at_least": ">=", "at_most": "<="}.get(self.sense)


CHECKS: tuple[CheckSpec, ...] = (
    CheckSpec("startup_complete", "Start-up reaches its final output voltage", "V", "physical limit", "flag"),
    CheckSpec("vds_derating", "Supply maximum within the derated V_DS rating", "V", "common practice", "at_most"),
    CheckSpec("startup_soa", "Start-up pulse inside the derated SOA (equivalent rectangle)", "ratio",
              "common practice", "at_least"),
    CheckSpec("startup_tj", "Start-up junction temperature (Foster network)", "degC", "common practice", "at_most",
              True),
    CheckSpec("short_circuit_time", "Output short circuit cleared before the FET's limit", "ratio",
              "common practice", "at_least"),
    CheckSpec("timer_startup", "Fault timer does not trip on a good start", "ratio", "common practice", "at_least"),
    CheckSpec("retry_tj", "Junction temperature in retry (periodic steady state)", "degC", "common practice",
              "at_most", True),
    CheckSpec("steady_tj", "Junction temperature in steady conduction", "degC", "common practice", "at_most", True),
    CheckSpec("steady_stable", "No thermal runaway in steady conduction", "degC", "physical limit", "flag"),
    CheckSpec("supply_dip", "Switch input stays above the upstream UVLO", "V", "physical limit", "at_least"),
    CheckSpec("supply_current", "Inrush peak within the supply's current capability", "A", "physical limit",
              "at_most"),
    CheckSpec("fet_pulse_current", "Inrush peak within the FET's pulsed drain current rating", "A",
              "physical limit", "at_most"),
)
SPECS = {c.id: c for c in CHECKS}
# checks whose value comes from the start-up transient (the worst-case search runs these)
STARTUP_CHECKS = ("startup_complete", "startup_soa", "startup_tj", "timer_startup", "supply_dip", "supply_current",
                  "fet_pulse_current")
# checks whose margin moves continuously with the load capacitance (the headroom search uses these)
C_DEPENDENT = ("startup_soa", "startup_tj", "timer_startup", "supply_dip", "supply_current", "fet_pulse_current")


def _grade(sense: str, value, limit, edge):
    value = np.asarray(value, dtype=float)
    with np.errstate(invalid="ignore"):
        if sense == "at_least":
            code = np.where(value >= limit, PASS, np.where(value >= edge, MARGINAL, FAIL))
        else:
            code = np.where(value <= limit, PASS, np.where(value <= edge, MARGINAL, FAIL))
    return np.where(np.isnan(value), NA, code).astype(np.int8)


def normalised_margin(spec: CheckSpec, value, limit, t_ambient: float, verdict=None) -> np.ndarray:
    """The normalised margin of a check: 1.0 at the team's limit, >= 1 exactly where it passes.

    Parameters
    ----------
    spec : CheckSpec
    value, limit : ndarray
        The check's value and team limit (units of the check).
    t_ambient : float
        Ambient temperature, degC: temperatures compare as rises above it.
    verdict : ndarray, optional
        Needed for flag checks (fail -> 0, pass -> inf).

    Returns
    -------
    ndarray
        value / limit (at least), limit / value (at most), (limit - t_amb) / (value -
        t_amb) for temperatures; ``inf`` where the check does not apply or cannot bind.
    """
    value = np.asarray(value, dtype=float)
    limit = np.asarray(limit, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if spec.sense == "flag":
            return np.where(np.asarray(verdict) == FAIL, 0.0, np.inf) * np.ones_like(value)
        if spec.temperature:
            rise = value - t_ambient
            m = np.where(rise > 0, (limit - t_ambient) / rise, np.inf)
        elif spec.sense == "at_least":
            m = value / limit
        else:
            m = np.where(value > 0, limit / value, np.inf)
    return np.where(np.isnan(m), np.inf, m)


def edge_margin(spec: CheckSpec, limit, edge, t_ambient: float) -> np.ndarray:
    """The physical edge on the normalised scale of `normalised_margin` (1.0: the team limit).

    A check graded against its physical limit alone has its edge at 1.0; a team margin puts
    the edge below 1 (e.g. an SOA ratio limit of 1.5 puts the edge, ratio 1.0, at 0.667).
    NaN where the check does not apply; flags: 1.0.
    """
    if spec.sense == "flag":
        return np.ones_like(np.asarray(limit, dtype=float))
    return normalised_margin(spec, np.asarray(edge, dtype=float), limit, t_ambient)


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
        ``{check_id: {"value", "limit", "edge", "verdict", "margin"}}``, arrays of shape
        (n,); ``value`` NaN where the check does not apply (verdict NA) or where the
        figure does not exist (the verdict then says why: a start that does not complete
        fails).
    """
    n = fig["n"]
    nan = np.full(n, np.nan)
    fet = rail.fet
    tj_lim = fet.tj_max - rules["tj_headroom"]
    status = fig["status"]
    complete = status == STATUS_OK
    has_pulse = np.isfinite(fig["soa_ratio"])
    out = {}

    def row(x):
        if isinstance(x, np.ndarray) and x.shape == (n,):
            return x.astype(float)  # a copy
        return np.full(n, float(x)) if np.ndim(x) == 0 else np.broadcast_to(np.asarray(x, float), (n,)).copy()

    def put(cid, value, limit, edge, verdict=None, margin=None):
        spec = SPECS[cid]
        value, limit, edge = row(value), row(limit), row(edge)
        if verdict is None:
            verdict = _grade(spec.sense, value, limit, edge)
        verdict = np.asarray(verdict, np.int8)
        if margin is None:
            margin = normalised_margin(spec, value, limit, rail.t_ambient, verdict)
        margin = np.where(verdict == NA, np.inf, margin)
        out[cid] = {"value": value, "limit": limit, "edge": edge, "verdict": verdict, "margin": margin}

    # what the output reaches: its final value where the start completes, else where it stalls
    # or where the run leaves it (a trip, a runaway, the step budget)
    reached = np.where(complete, fig["v_final"], np.where(np.isnan(fig["v_stall"]), fig["v_end"], fig["v_stall"]))
    put("startup_complete", reached, fig["v_target"], fig["v_target"], np.where(complete, PASS, FAIL))
    put("vds_derating", fig["v_s"], rules["vds_derating"] * fet.vds_max, fet.vds_max)
    put("startup_soa", np.where(has_pulse, fig["soa_ratio"], np.nan), rules["soa_margin"], 1.0)
    put("startup_tj", fig["tj_peak"], tj_lim, fet.tj_max)
    if fig["has_limit"]:
        put("short_circuit_time", fig["sc_margin"], rules["fault_margin"], 1.0)
    else:
        put("short_circuit_time", nan, nan, nan)
    if fig["has_timer"]:
        ratio = fig["startup_margin"]
        verdict = _grade("at_least", ratio, rules["timer_margin"], 1.0)
        # a start that completes only across retry cycles relies on them: it fails
        verdict = np.where(status == STATUS_RETRIED, FAIL, verdict)
        put("timer_startup", ratio, rules["timer_margin"], 1.0, verdict)
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
    _supply_dip(rail, fig, put, nan)
    i_max = rail.supply.i_max
    put("supply_current", fig["i_peak"] if i_max is not None else nan, i_max if i_max else np.nan,
        i_max if i_max else np.nan)
    idm = fet.id_pulse_max
    put("fet_pulse_current", fig["i_peak"] if idm is not None else nan, idm if idm else np.nan,
        idm if idm else np.nan)
    return out


def _supply_dip(rail: Rail, fig: dict, put, nan) -> None:
    """Raw lowest switch input against the UVLO, with the UVLO's deglitch time where given."""
    uvlo = rail.supply.uvlo
    if uvlo is None:
        put("supply_dip", nan, nan, nan)
        return
    v = fig["v_supply_min"]
    deglitch = rail.supply.uvlo_filter
    below = v < uvlo
    unbounded = below & fig["dip_unbounded"]
    held = below & ~unbounded & (deglitch is not None) & (fig["t_below_uvlo"] < (deglitch or 0.0))
    verdict = np.where(np.isnan(v), NA, np.where(below & ~held, FAIL, PASS))
    with np.errstate(invalid="ignore", divide="ignore"):
        margin = np.where(held, 1.0, v / uvlo)
    put("supply_dip", v, uvlo, uvlo, verdict, margin)


def worst_verdict(codes) -> int:
    """Worst verdict code (fail > marginal > pass > n/a)."""
    codes = np.asarray(list(codes), dtype=int)
    return int(codes.max()) if codes.size else NA


# --- words ---------------------------------------------------------------------------------


def _f(fig: dict, row: int) -> dict:
    return {k: (v[row] if isinstance(v, np.ndarray) and v.ndim == 1 else v) for k, v in fig.items()}


def _startup_words(f: dict, rail: Rail) -> str:
    status = int(f["status"])
    if status == STATUS_OK:
        return f"The output reaches {eng(f['v_final'], 'V')}."
    if status == STATUS_STALLED:
        v_on = rail.load.v_on
        if rail.load.model != "none" and v_on >= f["v_target"] * (1 - 1e-9):
            return (f"The load turns on at {eng(v_on, 'V')}, above the {eng(f['v_target'], 'V')} the output "
                    f"reaches at a supply of {eng(f['v_s'], 'V')}: the load never starts.")
        if not np.isfinite(f["v_stall"]) or f["v_stall"] <= 0.0:
            return ("The load has no operating point with the switch fully on: it asks for more power than "
                    "the supply can deliver through the series resistance.")
        gate = rail.switch.gate
        if gate is not None and gate.drive == "voltage" and rail.fet.gate is not None \
                and gate.v_drive - rail.fet.gate.v_th <= f["v_s"]:
            return (f"The gate drive of {eng(gate.v_drive, 'V')} does not reach the supply plus the FET's threshold "
                    f"({eng(f['v_s'] + rail.fet.gate.v_th, 'V')}): the FET never leaves saturation and the output "
                    f"stops near {eng(f['v_stall'], 'V')} (final {eng(f['v_target'], 'V')}).")
        if rail.switch.foldback is not None:
            return (f"The foldback current limit cannot carry the load: at the V_DS of "
                    f"{eng(f['v_s'] - f['v_stall'], 'V')} it allows no more than the load draws, and the output "
                    f"stalls near {eng(f['v_stall'], 'V')} (final {eng(f['v_target'], 'V')}).")
        return (f"The regulated current cannot carry the load: the output stalls near {eng(f['v_stall'], 'V')} "
                f"(final {eng(f['v_target'], 'V')}).")
    if status == STATUS_TRIPPED:
        return (f"The fault timer turns the switch off {eng(f['t_fault'], 's')} into regulation and latches: "
                f"the output is left near {eng(f['v_end'], 'V')} of {eng(f['v_target'], 'V')}. Without the timer "
                f"the start would need {eng(f['t_limit'], 's')} of regulation. {_timer_advice(f, rail)}")
    if status == STATUS_RETRIED:
        return (f"The start completes only in attempt {int(f['attempts'])}, after {int(f['attempts']) - 1} "
                f"fault-timer trip(s) and retry cycles: the design relies on retries.")
    if status == STATUS_RETRY_EXHAUSTED:
        return (f"The start does not complete in {int(f['attempts'])} attempts: every attempt trips the fault "
                f"timer ({eng(f['t_fault'], 's')}) before the output settles. {_timer_advice(f, rail)}")
    if status == STATUS_RUNAWAY:
        return (f"The junction passes {temp(rail.fet.tj_max + TJ_RUNAWAY_K)} ({TJ_RUNAWAY_K:g} K above its maximum junction temperature) "
                f"{eng(f['t_end'], 's')} into the start: the FET would be destroyed; the start-up is followed "
                "no further and its figures stop there.")
    if status == STATUS_NO_CONVERGENCE:
        return (f"Could not settle: the start-up transient did not settle within its step budget "
                f"({int(f['steps'])} steps, {eng(f['t_end'], 's')} simulated); the figures are those computed "
                "up to then.")
    return "The start-up does not complete."


def _timer_advice(f: dict, rail: Rail) -> str:
    """What would make a start that trips the timer succeed."""
    t = rail.switch.timer
    need = f["t_limit"]
    if t is None or not np.isfinite(need) or need <= 0:
        return "Shorten the regulated start (a higher current or power limit, less load capacitance)."
    # the timer capacitor that would just let this start through at the timer's shortest trip
    c_need = t.c * need / f["t_fault"]
    return (f"A timer capacitor of at least {eng(c_need, 'F')} would let this start through (more with the "
            "team's timer margin), or shorten the regulated start: a higher current or power limit, less load "
            "capacitance.")


RAMP_CONVENTION = ("The turn-on ramp's shape is a convention (the switch resistance falling log-linearly from "
                   "1 M\u03a9 to R_DS(on) over the turn-on time); another shape gives other figures. Giving the gate "
                   "drive and the FET's gate data (switch.gate, fet.gate) removes it.")
# the checks whose reading depends on the shape of a hard turn-on ramp
RAMP_CHECKS = ("startup_soa", "startup_tj", "supply_dip", "supply_current", "fet_pulse_current")


def rests_on_ramp(rail: Rail) -> bool:
    """Whether the start-up rests on the turn-on ramp convention: hard mode with t_on > 0 and
    no gate drive."""
    sw = rail.switch
    return sw.mode == "hard" and sw.t_on > 0.0 and sw.gate is None


def check_detail(cid: str, fig: dict, row: int, rail: Rail, rules: dict) -> str:
    """One or two sentences explaining a check's value for one row of figures; where the
    reading rests on the turn-on ramp convention, the sentence saying so."""
    text = _check_detail(cid, fig, row, rail, rules)
    if cid in RAMP_CHECKS and rests_on_ramp(rail) and text:
        text = f"{text} {RAMP_CONVENTION}"
    return text


def _check_detail(cid: str, fig: dict, row: int, rail: Rail, rules: dict) -> str:
    f = _f(fig, row)
    fet = rail.fet
    status = int(f["status"])
    if cid == "startup_complete":
        return _startup_words(f, rail)
    if cid == "vds_derating":
        return (f"Supply {eng(f['v_s'], 'V')} against {rules['vds_derating']:g} × the V_DS rating "
                f"{eng(fet.vds_max, 'V')}; ringing at turn-off is not modelled.")
    if cid == "startup_soa":
        if not np.isfinite(f["soa_ratio"]):
            return "Not evaluated: the start-up draws no pulse."
        which = (f" (attempt {int(f['soa_attempt']) + 1}, starting at {temp(f['pulse_tj_start'])})"
                 if f["attempts"] > 1 else "")
        return (f"Equivalent rectangle {eng(f['pulse_p_peak'], 'W')} for {eng(f['pulse_t_equiv'], 's')} at "
                f"{eng(f['pulse_v_ds'], 'V')}, {eng(f['pulse_i'], 'A')}{which}; the SOA derated to "
                f"{temp(f['pulse_tj_start'])} allows {eng(f['soa_i_allowed'], 'A')}. The chart is read without "
                "extrapolation.")
    if cid == "startup_tj":
        what = "" if status == STATUS_OK else " of what happens (the start does not complete normally)"
        return (f"Foster network from {temp(rail.t_ambient)}: peak {temp(f['tj_peak'])}{what}, "
                f"FET energy {eng(f['e_fet'], 'J')}.")
    if cid == "short_circuit_time":
        if not f["has_limit"]:
            return "The switch has no current limit: short-circuit protection lies outside it."
        by = "SOA curves" if f["sc_t_soa"] <= f["sc_t_thermal"] else "Foster network"
        tf = "no fault timer" if not np.isfinite(f["t_fault"]) else f"the timer trips by {eng(f['t_fault'], 's')}"
        allow = "indefinitely" if not np.isfinite(f["sc_t_allow"]) else eng(f["sc_t_allow"], "s")
        return (f"{eng(f['sc_p'], 'W')} ({eng(f['v_s'], 'V')}, {eng(f['sc_i'], 'A')}): the FET survives "
                f"{allow} ({by}); {tf}.")
    if cid == "timer_startup":
        if not f["has_timer"]:
            return "No fault timer."
        if not np.isfinite(f["t_limit"]):
            return "Not evaluated: the start-up does not complete even without the timer."
        text = (f"Trip after {eng(f['t_fault'], 's')} against {eng(f['t_limit'], 's')} of regulation that the "
                "start needs without the timer.")
        if status == STATUS_RETRIED:
            text += f" The start completes only across retry cycles (attempt {int(f['attempts'])})."
        ratio = f["startup_margin"]
        if np.isfinite(ratio) and ratio < rules["timer_margin"]:
            text += " " + _timer_advice(f, rail)
        return text
    if cid == "retry_tj":
        if not f["has_retry"]:
            return "Not in retry mode."
        return (f"Short-circuit pulses of {eng(f['sc_p'], 'W')} for {eng(f['t_fault'], 's')} every "
                f"{eng(f['t_fault'] + rail.switch.timer.retry_off, 's')} (duty {100 * f['retry_duty']:.3g} %).")
    if cid in ("steady_tj", "steady_stable"):
        if not f["steady_dc_ok"]:
            return "The load has no DC operating point."
        if not f["steady_stable"]:
            load = eng(f["steady_i"], "A") if np.isfinite(f["steady_i"]) else "the load current"
            return (f"Thermal runaway: at {load} the heating exceeds the cooling all the way up to the maximum "
                    f"junction temperature {temp(fet.tj_max)}.")
        return (f"{eng(f['steady_i'], 'A')} through Rds(on) at Tj: {eng(f['steady_p_fet'], 'W')}, "
                f"{temp(f['steady_tj'])} with rth_ja {fet.rth_ja:g} K/W.")
    if cid == "supply_dip":
        return _dip_words(f, rail)
    if cid == "supply_current":
        if rail.supply.i_max is None:
            return "No supply current capability given."
        return f"Inrush peak {eng(f['i_peak'], 'A')} against the supply's {eng(rail.supply.i_max, 'A')}."
    if cid == "fet_pulse_current":
        if fet.id_pulse_max is None:
            return "No pulsed drain current rating given."
        return f"Inrush peak {eng(f['i_peak'], 'A')} against the rating {eng(fet.id_pulse_max, 'A')}."
    return ""


def _dip_words(f: dict, rail: Rail) -> str:
    s = rail.supply
    if s.uvlo is None:
        return "No upstream UVLO given."
    v, uvlo = f["v_supply_min"], s.uvlo
    text = f"Lowest switch-input voltage {eng(v, 'V')} (raw) against the upstream UVLO {eng(uvlo, 'V')}."
    if v < uvlo and f["dip_unbounded"]:
        return (text + " The dip is bounded only by input capacitance: enter the capacitance at the switch input "
                "(supply.c_in). Without it the ideal switch closing into the series inductance pulls the input down "
                "to the output voltage.")
    if v < uvlo and s.uvlo_filter is not None:
        t_below = f["t_below_uvlo"]
        if t_below < s.uvlo_filter:
            return (text + f" It stays below for at most {eng(t_below, 's')} at a time, shorter than the UVLO's "
                    f"deglitch time {eng(s.uvlo_filter, 's')} (from its datasheet): the UVLO does not trip.")
        return (text + f" It stays below for {eng(t_below, 's')}, at least the UVLO's deglitch time "
                f"{eng(s.uvlo_filter, 's')}: the UVLO trips.")
    if s.c_in is None:
        text += " No input capacitance given."
    return text
