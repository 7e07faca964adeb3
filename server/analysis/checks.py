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

A short during operation (the short-circuit time, the retry heating, the onset) starts from
the steady-state junction temperature at the row's supply (`faults.start_temperature`);
`START_TEMPERATURE` names the figure each check starts from, and every check record says it.
The onset and turn-off checks (`faults`) apply only where the rail gives the controller's
loop response or fast trip (onset), or one of those, an input clamp or the avalanche rating
(turn-off); a turn-off that reaches the FET's breakdown fails the overshoot check whatever
the energy (common practice, no source: a sign-off does not rely on avalanche), and the
energy check says whether the part's avalanche rating would carry it.

The supply dip is read raw: the lowest switch-input voltage against the upstream UVLO.
Where the rail gives the UVLO's deglitch time (``supply.uvlo_filter``, from the upstream
part's datasheet), the UVLO trips only when the input stays below it continuously for that
long; a shorter dip passes (its margin then reads 1.0: at the edge, held by the deglitch
time alone). Where no input capacitance is given and the minimum is set by the ideal
switch closing into series inductance, the dip is not bounded by anything the document
describes, and the check fails saying so.

Where a junction temperature leaves the part's Rds(on) data (beyond the last point of its
table, or with the linear coefficient beyond tj_max), Rds(on) is not extrapolated: the
start-up and steady junction checks fail "beyond the part's data". With parallel FETs the
SOA, junction and pulsed-current checks read the worst FET's share of the current.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .document import Rail
from .faults import ACTED_FAST_TRIP, ACTED_LOOP, BY_BREAKDOWN, BY_CLAMP, BY_INPUT, BY_NONE
from .startup import (STATUS_NO_CONVERGENCE, STATUS_OK, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY,
                      STATUS_STALLED, STATUS_TRIPPED, TJ_RUNAWAY_K)
from .thermal import BEYOND_DATA, rds_temperature
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
    "START_TEMPERATURE",
    "start_temperature_of",
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
    CheckSpec("retry_tj", "Junction temperature in retry (pulse train)", "degC", "common practice",
              "at_most", True),
    CheckSpec("steady_tj", "Junction temperature in steady conduction", "degC", "common practice", "at_most", True),
    CheckSpec("steady_stable", "No thermal runaway in steady conduction", "degC", "physical limit", "flag"),
    CheckSpec("supply_dip", "Switch input stays above the upstream UVLO", "V", "physical limit", "at_least"),
    CheckSpec("supply_current", "Inrush peak within the supply's current capability", "A", "physical limit",
              "at_most"),
    CheckSpec("fet_pulse_current", "Inrush peak within the FET's pulsed drain current rating", "A",
              "physical limit", "at_most"),
    CheckSpec("onset_peak", "Short-circuit onset peak within the FET's pulsed drain current rating", "A",
              "physical limit", "at_most"),
    CheckSpec("onset_soa", "Short-circuit onset inside the derated SOA (shortest pulse curve)", "ratio",
              "common practice", "at_least"),
    CheckSpec("turnoff_vds", "Turn-off V_DS overshoot within the derated V_DS rating", "V", "common practice",
              "at_most"),
    CheckSpec("turnoff_avalanche", "Turn-off energy within the FET's avalanche rating", "J", "physical limit",
              "at_most"),
    CheckSpec("bank_rating", "Supply maximum within every capacitor group's voltage rating", "V", "physical limit",
              "at_most"),
)
SPECS = {c.id: c for c in CHECKS}
# the figure holding the junction temperature each check starts from (degC); "ambient": the
# document's ambient; absent: the check has no starting temperature
START_TEMPERATURE = {"startup_soa": "pulse_tj_start", "startup_tj": "ambient", "short_circuit_time": "sc_t_start",
                     "retry_tj": "sc_t_start", "steady_tj": "ambient", "steady_stable": "ambient",
                     "onset_peak": "sc_t_start", "onset_soa": "sc_t_start"}
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
    if rail.load.bank is not None:  # a bank names each group's rating; one capacitance names none
        v_rated = min(g.v_rated for g in rail.load.bank)
        put("bank_rating", fig["v_s"], v_rated, v_rated)
    else:
        put("bank_rating", nan, nan, nan)
    put("startup_soa", np.where(has_pulse, fig["soa_ratio"], np.nan), rules["soa_margin"], 1.0)
    beyond = np.asarray(fig.get("tj_beyond", np.zeros(n, bool)), dtype=bool)
    tj_code = _grade("at_most", row(fig["tj_peak"]), tj_lim, fet.tj_max)
    put("startup_tj", fig["tj_peak"], tj_lim, fet.tj_max, np.where(beyond, FAIL, tj_code))
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
    steady_ok = fig["steady_dc_ok"] | np.asarray(fig.get("steady_beyond", False), dtype=bool)
    v = np.where(stable, fig["steady_tj"], np.nan)
    put("steady_tj", v, tj_lim, fet.tj_max,
        np.where(stable, _grade("at_most", v, tj_lim, fet.tj_max), np.where(steady_ok, FAIL, NA)))
    put("steady_stable", v, fet.tj_max, fet.tj_max, np.where(stable, PASS, np.where(steady_ok, FAIL, NA)))
    _supply_dip(rail, fig, put, nan)
    i_max = rail.supply.i_max
    put("supply_current", fig["i_peak"] if i_max is not None else nan, i_max if i_max else np.nan,
        i_max if i_max else np.nan)
    idm = fet.id_pulse_max
    put("fet_pulse_current", fig.get("fet_i_peak", fig["i_peak"]) if idm is not None else nan, idm if idm else np.nan,
        idm if idm else np.nan)
    _fault_edge_checks(rail, rules, fig, put, nan)
    return out


def _fault_edge_checks(rail: Rail, rules: dict, fig: dict, put, nan) -> None:
    """Onset peak and SOA, turn-off overshoot and avalanche energy (`faults`)."""
    fet = rail.fet
    idm = fet.id_pulse_max
    if fig["has_onset"] and idm is not None:
        put("onset_peak", fig["onset_i_peak"], idm, idm)
    else:
        put("onset_peak", nan, nan, nan)
    if fig["has_onset"]:
        put("onset_soa", fig["onset_soa_ratio"], rules["soa_margin"], 1.0)
    else:
        put("onset_soa", nan, nan, nan)
    v = fig["off_v_peak"]
    if fig["has_turn_off"]:
        breakdown = fig["off_by"] == BY_BREAKDOWN
        graded = _grade("at_most", v, rules["vds_derating"] * fet.vds_max, fet.vds_max)
        put("turnoff_vds", v, rules["vds_derating"] * fet.vds_max, fet.vds_max,
            np.where(np.isnan(v), NA, np.where(breakdown, FAIL, graded)))
    else:
        put("turnoff_vds", nan, nan, nan)
    eas = fet.e_avalanche
    if fig["has_turn_off"] and eas is not None:
        put("turnoff_avalanche", fig["off_e_fet"], eas, eas)
    else:
        put("turnoff_avalanche", nan, nan, nan)


def start_temperature_of(cid: str, fig: dict, row: int, t_ambient: float) -> float | None:
    """The junction temperature check ``cid`` starts from in one row, degC (None: none)."""
    key = START_TEMPERATURE.get(cid)
    if key is None:
        return None
    if key == "ambient":
        return float(t_ambient)
    value = float(np.asarray(fig[key], dtype=float)[row])
    return value if np.isfinite(value) else None


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
    if cid == "bank_rating":
        if rail.load.bank is None:
            return "Not evaluated: the load gives one capacitance, without a voltage rating."
        low = min(rail.load.bank, key=lambda g: g.v_rated)
        name = low.refs or f"group {rail.load.bank.index(low) + 1}"
        return (f"Supply {eng(f['v_s'], 'V')} against the lowest rating in the bank, {eng(low.v_rated, 'V')} "
                f"({name}); a sign-off derating of the rating is the team's to add.")
    if cid == "startup_soa":
        if not np.isfinite(f["soa_ratio"]):
            return "Not evaluated: the start-up draws no pulse."
        which = (f" (attempt {int(f['soa_attempt']) + 1}, starting at {temp(f['pulse_tj_start'])})"
                 if f["attempts"] > 1 else "")
        return (f"Equivalent rectangle {eng(f['pulse_p_peak'], 'W')} for {eng(f['pulse_t_equiv'], 's')} at "
                f"{eng(f['pulse_v_ds'], 'V')}, {eng(f['pulse_i'], 'A')}{which}; the SOA derated to "
                f"{temp(f['pulse_tj_start'])} allows {eng(f['soa_i_allowed'], 'A')}. The chart is read without "
                "extrapolation." + _share_words(f, fet))
    if cid == "startup_tj":
        what = "" if status == STATUS_OK else " of what happens (the start does not complete normally)"
        text = (f"Foster network from {temp(rail.t_ambient)}: peak {temp(f['tj_peak'])}{what}, "
                f"FET energy {eng(f['e_fet'], 'J')}.")
        if fet.count != 1:
            text += (f" The worst of {fet.count} parallel FETs takes {100 * f['linear_share']:.3g} % of the "
                     "pulse (team rule linear_share).")
        if f.get("tj_beyond", False):
            text += (f" The junction goes {BEYOND_DATA}: {rds_temperature(fet).words()}; R_DS(on) is not "
                     "extrapolated past it (held at its last value), so the figures beyond it are not a reading.")
        return text
    if cid == "short_circuit_time":
        if not f["has_limit"]:
            return "The switch has no current limit: short-circuit protection lies outside it."
        by = "SOA curves" if f["sc_t_soa"] <= f["sc_t_thermal"] else "Foster network"
        tf = "no fault timer" if not np.isfinite(f["t_fault"]) else f"the timer trips by {eng(f['t_fault'], 's')}"
        allow = "indefinitely" if not np.isfinite(f["sc_t_allow"]) else eng(f["sc_t_allow"], "s")
        if fet.count != 1:
            return (f"{eng(f['sc_p'], 'W')} in the worst of {fet.count} parallel FETs ({eng(f['v_s'], 'V')}, "
                    f"{eng(f['sc_i_fet'], 'A')} of the {eng(f['sc_i'], 'A')} limit, team rule linear_share) from "
                    f"{_start_words(f, rail)}: it survives {allow} ({by}); {tf}.")
        return (f"{eng(f['sc_p'], 'W')} ({eng(f['v_s'], 'V')}, {eng(f['sc_i'], 'A')}) from "
                f"{_start_words(f, rail)}: the FET survives {allow} ({by}); {tf}.")
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
        t = rail.switch.timer
        count = ("without end" if t.retries is None else
                 f"{t.retries} retr{'y' if t.retries == 1 else 'ies'} ({t.retries + 1} pulses, superposed), then "
                 "latches")
        return (f"Short-circuit pulses of {eng(f['sc_p'], 'W')} for {eng(f['t_fault'], 's')} every "
                f"{eng(f['t_fault'] + t.retry_off, 's')} (duty {100 * f['retry_duty']:.3g} %, cool-down ratio "
                f"{f['retry_cooldown']:.3g}), {count}; from {_start_words(f, rail)}.")
    if cid in ("steady_tj", "steady_stable"):
        if f.get("steady_beyond", False):
            return (f"The junction would go {BEYOND_DATA}: {rds_temperature(fet).words()}, and the heating at "
                    "R_DS(on) held there still exceeds the cooling; R_DS(on) is not extrapolated past the data.")
        if not f["steady_dc_ok"]:
            return "The load has no DC operating point."
        if not f["steady_stable"]:
            load = eng(f["steady_i"], "A") if np.isfinite(f["steady_i"]) else "the load current"
            return (f"Thermal runaway: at {load} the heating exceeds the cooling all the way up to the maximum "
                    f"junction temperature {temp(fet.tj_max)}.")
        if fet.count != 1:
            return (f"{eng(f['steady_i'], 'A')} through {fet.count} parallel FETs; the hottest carries "
                    f"{eng(f['steady_i_fet'], 'A')} (current divider, R_DS(on) {eng(f['rds'], 'ohm')} at 25 \u00b0C "
                    f"against the others at the maximum): {eng(f['steady_p_fet'], 'W')}, {temp(f['steady_tj'])} "
                    f"with rth_ja {fet.rth_ja:g} K/W per FET.")
        text = (f"{eng(f['steady_i'], 'A')} through Rds(on) at Tj: {eng(f['steady_p_fet'], 'W')}, "
                f"{temp(f['steady_tj'])} with rth_ja {fet.rth_ja:g} K/W.")
        if fet.rds_on_max is not None or fet.rds_on_curve is not None:
            text += f" R_DS(on) {eng(f['rds'], 'ohm')} at 25 \u00b0C; {rds_temperature(fet).words()}."
        return text
    if cid == "supply_dip":
        return _dip_words(f, rail)
    if cid == "supply_current":
        if rail.supply.i_max is None:
            return "No supply current capability given."
        return f"Inrush peak {eng(f['i_peak'], 'A')} against the supply's {eng(rail.supply.i_max, 'A')}."
    if cid == "fet_pulse_current":
        if fet.id_pulse_max is None:
            return "No pulsed drain current rating given."
        if fet.count != 1:
            return (f"Inrush peak {eng(f['i_peak'], 'A')}; the worst of {fet.count} parallel FETs carries "
                    f"{eng(f['fet_i_peak'], 'A')} (team rule linear_share) against the rating "
                    f"{eng(fet.id_pulse_max, 'A')}.")
        return f"Inrush peak {eng(f['i_peak'], 'A')} against the rating {eng(fet.id_pulse_max, 'A')}."
    if cid in ("onset_peak", "onset_soa"):
        return _onset_words(cid, f, rail, rules)
    if cid in ("turnoff_vds", "turnoff_avalanche"):
        return _turn_off_words(cid, f, rail)
    return ""


def _start_words(f: dict, rail: Rail) -> str:
    """The junction temperature a short during operation starts from, in words."""
    t0 = f["sc_t_start"]
    if not np.isfinite(t0):
        return temp(rail.t_ambient)
    if f["steady_stable"]:
        return f"{temp(t0)} (the steady state at the operating point)"
    if f["steady_dc_ok"]:
        return f"{temp(t0)} (the maximum junction temperature: steady conduction runs away)"
    return f"{temp(t0)} (the ambient: the load has no operating point)"


def _onset_words(cid: str, f: dict, rail: Rail, rules: dict) -> str:
    sw = rail.switch
    if not f["has_onset"]:
        return ("Not evaluated: give the current loop's response time or a fast trip to evaluate the first "
                "microseconds of a short (without them the current is taken as regulated at once).")
    if cid == "onset_peak" and rail.fet.id_pulse_max is None:
        return f"No pulsed drain current rating given (onset peak {eng(f['onset_i_peak'], 'A')})."
    acted = int(f["onset_acted"])
    if acted == ACTED_FAST_TRIP:
        after = ("then retries" if sw.timer is not None and sw.timer.after_fault == "retry" else "and latches")
        how = (f"the fast trip ({eng(sw.fast_trip, 'A')}, delay {eng(sw.fast_trip_delay, 's')}) turns the switch "
               f"off {eng(f['onset_t_act'], 's')} after the short, {after}")
    elif acted == ACTED_LOOP:
        how = (f"the current loop takes over {eng(f['onset_t_act'], 's')} after the short (response "
               f"{eng(sw.loop_response, 's')} after the current passes the limit)")
    else:
        how = (f"nothing acts during the onset: the current settles at {eng(f['onset_i_final'], 'A')}, bounded by "
               "the resistances and R_DS(on)")
    local = (" The input capacitance feeds the short through the FET alone: only R_DS(on) bounds the first "
             "instant." if rail.supply.c_in is not None else "")
    text = (f"Onset peak {eng(f['onset_i_peak'], 'A')} (R_DS(on) {eng(f['onset_rds'], 'ohm')} at "
            f"{_start_words(f, rail)}); {how}.{local}")
    if cid == "onset_peak":
        return text + f" Against the rating {eng(rail.fet.id_pulse_max, 'A')}."
    return (text + f" The onset read at the full supply {eng(f['v_s'], 'V')} and its peak for "
            f"{eng(f['onset_t_act'], 's')} (conservative: the FET holds the supply only once the loop takes over; "
            f"shorter than the shortest curve, that curve): the SOA derated to {temp(f['sc_t_start'])} allows "
            f"{eng(f['onset_soa_allowed'], 'A')}.")


_BY_WORDS = {BY_NONE: "no series inductance: no overshoot, the open switch holds the supply",
             BY_INPUT: "the input capacitance takes the inductor's current; it peaks below the clamp",
             BY_CLAMP: "the input clamp holds the switch input",
             BY_BREAKDOWN: "nothing holds the input below the FET's breakdown: the FET avalanches"}


def _turn_off_words(cid: str, f: dict, rail: Rail) -> str:
    if not f["has_turn_off"]:
        return ("Not evaluated: give the controller's loop response or fast trip, an input clamp (supply.v_clamp) "
                "or the FET's avalanche rating to evaluate the hard turn-off.")
    if not np.isfinite(f["off_i"]):
        return "No hard turn-off: neither a fast trip nor a fault timer turns the switch off during a short."
    what = "the fast trip" if f["onset_fired"] else "the fault timer"
    by = int(f["off_by"])
    text = (f"{what[0].upper() + what[1:]} opens the switch with {eng(f['off_i'], 'A')} in the series inductance "
            f"(½ L I² = {eng(f['off_e_half'], 'J')}); {_BY_WORDS[by]}: V_DS peaks at {eng(f['off_v_peak'], 'V')}.")
    if cid == "turnoff_vds":
        return text + f" Against {eng(rail.fet.vds_max, 'V')} (the V_DS rating)."
    eas = rail.fet.e_avalanche
    if by != BY_BREAKDOWN:
        return text + f" No avalanche: the FET absorbs nothing (rating {eng(eas, 'J')})." if eas else text
    energy = f"The breakdown absorbs {eng(f['off_e_fet'], 'J')} (with the supply's share)"
    if eas is None:
        return text + f" {energy}; no avalanche rating given."
    return text + f" {energy} against the rating {eng(eas, 'J')}."
def _share_words(f: dict, fet) -> str:
    """With parallel FETs: the share of the pulse the worst one carries (team rule linear_share)."""
    if fet.count == 1:
        return ""
    return (f" The pulse is the worst of {fet.count} parallel FETs': {100 * f['linear_share']:.3g} % of the current "
            "(team rule linear_share; default one FET carries it all, common practice, no source).")


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
