"""The analysis of one switched rail: every figure, check and verdict as one JSON-ready dict.

Provides
--------
ENGINE_VERSION
    Version of the numbers: results are stored per engine version.
analyze_rail(doc, *, rules=None, corners=True, monte_carlo=0, seed=0, distribution="uniform",
             waveforms=True, progress=None, headroom=True)
    The result of DESIGN.md section 4 (SI units, degC; no NaN or infinity: None).
CAUTION
    The caution line every report and page carries.

The sign-off basis is the worst case: every check's verdict, value and margin are those of
its worst point over the tolerance corners and a deterministic search inside the tolerance
box (`worstcase`), and the record names that point in words and what found it. With
``corners=False`` only the nominal point is evaluated: a quick look, labelled as not a
sign-off verdict. Every check record also carries its nominal reading, and the key figures
show nominal and worst case side by side.

Each part of the result is built by one function below (`_summary`, `_check_records`,
`_key_figures`, `_startup_section`, ..., `_closing_sections`) from the evaluated rows;
`analyze_rail` only evaluates the nominal point and the worst case and puts the parts
together. Nothing downstream recomputes a number.
"""

from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from .bank import bank_summary
from .checks import (CHECKS, NA, RAMP_CONVENTION, SEVERITY, SPECS, VERDICTS, check_detail, edge_margin,
                     rests_on_ramp, start_temperature_of, worst_verdict)
from .circuit import NO_LIMIT
from .document import Rail, read_rail
from .evaluation import RowParams, evaluate_rows, nominal_point
from .faults import ACTED_FAST_TRIP, ACTED_LOOP, BY_BREAKDOWN, BY_CLAMP, BY_INPUT, start_temperature
from .headroom import basis_rows, capacitance_headroom, limit_headroom, load_headroom
from .montecarlo import distributions_for, run_monte_carlo
from .soa import CONVENTION as SOA_CONVENTION
from .startup import (STATUS_NO_CONVERGENCE, STATUS_OK, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY,
                      STATUS_STALLED, STATUS_TRIPPED, StartupFigures)
from .steady import steady_state
from .timer import fault_times, timer_window
from .units import eng
from .waveform import decimate
from .thermal import conduction_share, rds_temperature
from .worstcase import TIE, WorstCase, find_worst_case

__all__ = ["ENGINE_VERSION", "CAUTION", "BASIS_WORST", "BASIS_NOMINAL", "FIGURES", "analyze_rail"]

ENGINE_VERSION = "2.2.1"
CAUTION = ("railsign computes design margins; it does not certify hardware. Verify on hardware, treat "
           "stored energy and high currents with care, and follow the applicable codes and licensed practice.")
BASIS_WORST = "worst case"
BASIS_NOMINAL = "nominal"
MARGIN_CONVENTION = ("Margin: 1.00 is the team's limit; above it the check passes. For temperatures it is the "
                     "allowed rise over the ambient against the actual rise.")

STATUS_WORDS = {STATUS_OK: "complete", STATUS_STALLED: "stalled", STATUS_NO_CONVERGENCE: "could not settle",
                STATUS_TRIPPED: "tripped", STATUS_RETRIED: "completes after retries",
                STATUS_RETRY_EXHAUSTED: "retries exhausted", STATUS_RUNAWAY: "thermal runaway"}
STATUS_TEXT = {STATUS_OK: "The start-up completes.",
               STATUS_STALLED: "The start-up stalls: the output never reaches its final value.",
               STATUS_NO_CONVERGENCE: "The start-up could not settle within its step budget; the figures are those "
                                      "computed up to then.",
               STATUS_TRIPPED: "The fault timer cuts the start-up short: it turns the switch off and latches.",
               STATUS_RETRIED: "The start-up completes only after the fault timer has tripped and retried.",
               STATUS_RETRY_EXHAUSTED: "The start-up does not complete: every retry trips the fault timer.",
               STATUS_RUNAWAY: "The junction runs away past the destruction threshold during the start-up; it is "
                               "followed no further."}

# the parameters each check depends on (its worst case is named by these)
# (the FET's Rds(on) is named only where the part gives a maximum: `corners.point_words`)
_V, _STARTUP, _FAULT = {"v_s"}, {"v_s", "c", "i_limit", "rds_on"}, {"v_s", "i_limit", "timer"}
_STEADY = _V | {"rds_on"}
_ONSET = {"v_s", "i_limit"}
CHECK_PARAMETERS = {"startup_complete": _STARTUP, "vds_derating": _V, "startup_soa": _STARTUP,
                    "startup_tj": _STARTUP, "short_circuit_time": _FAULT, "timer_startup": _STARTUP | {"timer"},
                    "retry_tj": _FAULT, "steady_tj": _STEADY, "steady_stable": _STEADY, "supply_dip": _STARTUP,
                    "supply_current": _STARTUP, "fet_pulse_current": _STARTUP, "onset_peak": _ONSET,
                    "onset_soa": _ONSET, "turnoff_vds": _FAULT, "turnoff_avalanche": _FAULT, "bank_rating": _V}
FIGURE_PARAMETERS = {"sc_p": _FAULT, "sc_t_allow": _FAULT, "retry_tj_peak": _FAULT, "steady_p_fet": _STEADY,
                     "steady_tj": _STEADY, "steady_v_drop": _STEADY, "onset_i_peak": _ONSET, "off_v_peak": _FAULT,
                     "off_e_fet": _FAULT}


def _fet_data_given(rail: Rail) -> bool:
    """Whether the rail uses the Rds(on) spread, table or parallel FETs (the result then says
    which Rds(on) each check used; without them it stays as it was)."""
    fet = rail.fet
    return fet.rds_on_max is not None or fet.rds_on_curve is not None or fet.count != 1


def _keys(base: set, wc: "WorstCase", row: int) -> set:
    """The parameters to name for a row: the timer as well where that row's start tripped it."""
    tripped = int(wc.fig["status"][row]) in (STATUS_TRIPPED, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED)
    return base | {"timer"} if tripped and "c" in base else base


# key figures: id, title, unit, the row figure, which way is worse
FIGURES: tuple[tuple[str, str, str, str, str], ...] = (
    ("i_peak", "Inrush peak current", "A", "i_peak", "max"),
    ("t_limit", "Time in regulation the start needs", "s", "t_limit", "max"),
    ("t_settle", "Settling time (within 1 %)", "s", "t_settle", "max"),
    ("e_fet", "FET energy during start-up", "J", "e_fet", "max"),
    ("p_fet_peak", "FET peak power during start-up", "W", "p_fet_peak", "max"),
    ("tj_peak", "Peak junction temperature during start-up", "degC", "tj_peak", "max"),
    ("v_supply_min", "Lowest switch-input voltage", "V", "v_supply_min", "min"),
    ("sc_p", "Short circuit: FET power", "W", "sc_p", "max"),
    ("sc_t_allow", "Short circuit: time the FET survives", "s", "sc_t_allow", "min"),
    ("retry_tj_peak", "Retry: peak junction temperature", "degC", "retry_tj_peak", "max"),
    ("steady_p_fet", "Steady conduction: FET power", "W", "steady_p_fet", "max"),
    ("steady_tj", "Steady conduction: junction temperature", "degC", "steady_tj", "max"),
    ("steady_v_drop", "Steady conduction: voltage drop", "V", "steady_v_drop", "max"),
    ("onset_i_peak", "Short-circuit onset: peak FET current", "A", "onset_i_peak", "max"),
    ("off_v_peak", "Turn-off: peak V_DS", "V", "off_v_peak", "max"),
    ("off_e_fet", "Turn-off: avalanche energy in the FET", "J", "off_e_fet", "max"),
)


def _num(x) -> float | None:
    """A JSON number: float, or None for NaN and infinities."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _clean(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        if obj and all(type(v) is float for v in obj):  # waveform samples
            return [v if math.isfinite(v) else None for v in obj]
        return [_clean(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return _num(obj)
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    return obj


def _split_progress(progress: Callable | None, a: float, b: float):
    if progress is None:
        return None
    return lambda x: progress(a + (b - a) * float(x))


def _point(params: RowParams, row: int, rail: Rail | None = None) -> dict:
    i_lim = float(params.i_lim[row])
    out = {"v_s": float(params.v_s[row]), "c": float(params.c[row]),
           "i_limit": None if i_lim >= NO_LIMIT else i_lim, "t_fault": _num(params.t_fault[row])}
    if rail is not None and _fet_data_given(rail):
        out["rds_on"] = float(params.rds[row])
    return out


# --- checks ----------------------------------------------------------------------------------


def _check_records(rail: Rail, rules: dict, nominal: tuple[dict, dict], wc: WorstCase | None) -> list[dict]:
    """One record per check: the sign-off reading (worst case, or nominal for a quick look),
    its nominal reading, and where the worst case lies in words."""
    fig_n, checks_n = nominal
    out = []
    for spec in CHECKS:
        ch_n = checks_n[spec.id]
        if wc is None:
            fig, ch, row, found, name, params = fig_n, ch_n, 0, "nominal", "nominal", None
        else:
            row = wc.worst[spec.id]
            fig, ch, found, params = wc.fig, wc.checks[spec.id], wc.found_by[spec.id], wc.params
            name = wc.words(row, _keys(CHECK_PARAMETERS[spec.id], wc, row))
        code = int(ch["verdict"][row])
        applies = code != NA
        graded = spec.sense != "flag"  # a pass/fail flag has no margin to show
        limit, edge = ch["limit"][row], ch["edge"][row]
        out.append({
            "id": spec.id,
            "title": spec.title,
            "verdict": VERDICTS[code],
            "value": _num(ch["value"][row]) if applies else None,
            "limit": _num(limit) if applies else None,
            "edge": _num(edge) if applies else None,
            "unit": spec.unit,
            "direction": spec.direction,
            "margin": _num(ch["margin"][row]) if applies and graded else None,
            "margin_edge": _num(edge_margin(spec, limit, edge, rail.t_ambient)) if applies and graded else None,
            "basis": spec.basis,
            "nominal": {"value": _num(ch_n["value"][0]), "verdict": VERDICTS[int(ch_n["verdict"][0])],
                        "margin": _num(ch_n["margin"][0]) if graded else None},
            "corner": name if applies else None,
            "found_by": found if applies else None,
            "point": _point(params, row, rail) if (applies and params is not None) else None,
            "detail": check_detail(spec.id, fig, row, rail, rules),
            "t_start": start_temperature_of(spec.id, fig, row, rail.t_ambient) if applies else None,
        })
        if _fet_data_given(rail):  # the Rds(on) at 25 degC of the FET at this check's reading
            out[-1]["rds_on"] = (float(fig["rds"][row]) if applies and "rds_on" in CHECK_PARAMETERS[spec.id]
                                 else None)
    return out


# --- key figures ---------------------------------------------------------------------------


def _key_figures(fig_n: dict, wc: WorstCase | None) -> list[dict]:
    """Nominal and worst case of each key figure side by side, with the worst point in words."""
    out = []
    for fid, title, unit, key, worse in FIGURES:
        nominal = _num(fig_n[key][0])
        entry = {"id": fid, "title": title, "unit": unit, "worse": worse, "nominal": nominal, "worst": None,
                 "corner": None, "found_by": None}
        if wc is not None:
            vals = np.asarray(wc.fig[key], dtype=float)
            finite = np.isfinite(vals)
            if finite.any():
                pick = np.where(finite, vals, -np.inf if worse == "max" else np.inf)
                j = _first_extreme(pick, worse)
                j = _corner_if_as_bad(wc, pick, j, worse)
                keys = _keys(FIGURE_PARAMETERS.get(fid, _STARTUP), wc, j)
                entry.update(worst=float(vals[j]), corner=wc.words(j, keys), found_by=wc.source[j])
            elif key == "sc_t_allow" and np.all(np.isinf(vals)):
                entry.update(corner="every point: survives indefinitely")
        if nominal is None and entry["worst"] is None and entry["corner"] is None:
            continue
        out.append(entry)
    return out


# Values this close (relative) are one value: the last bits of a figure differ between builds of
# numpy and scipy, and the row named for a figure must not flip with them.
SAME_VALUE = 1e-9


def _first_extreme(vals: np.ndarray, worse: str) -> int:
    """The first row whose value is the extreme (highest for "max", lowest for "min") within `SAME_VALUE`."""
    j = int(np.argmax(vals) if worse == "max" else np.argmin(vals))
    if not np.isfinite(vals[j]):
        return j
    tie = abs(float(vals[j])) * SAME_VALUE
    close = vals >= vals[j] - tie if worse == "max" else vals <= vals[j] + tie
    return int(np.argmax(close))


def _corner_if_as_bad(wc: "WorstCase", vals: np.ndarray, j: int, worse: str) -> int:
    """A corner as bad as row j (within the search's tie tolerance) names the case instead."""
    if wc.source[j] == "corner":
        return j
    n = len(wc.corners)
    corner = vals[:n]
    k = _first_extreme(corner, worse)
    tie = abs(vals[j]) * TIE
    as_bad = corner[k] >= vals[j] - tie if worse == "max" else corner[k] <= vals[j] + tie
    return k if as_bad else j


# --- sections of the nominal point ---------------------------------------------------------


def _startup_section(rail: Rail, fig: dict, st, waveforms: bool) -> dict:
    g = lambda k: fig[k][0]  # noqa: E731
    status = int(g("status"))
    wave = decimate(st.waveform) if (waveforms and st.waveform is not None) else None
    return {
        "status": STATUS_WORDS.get(status, "incomplete"), "status_text": STATUS_TEXT.get(status, ""),
        "complete": status == STATUS_OK,
        "attempts": int(g("attempts")), "t_trip": _num(g("t_trip")),
        "i_peak": g("i_peak"), "t_i_peak": g("t_i_peak"), "t_limit": g("t_limit"), "t_settle": g("t_settle"),
        "e_fet": g("e_fet"), "p_fet_peak": g("p_fet_peak"), "tj_peak": g("tj_peak"),
        "v_supply_min": g("v_supply_min"), "t_below_uvlo": g("t_below_uvlo"),
        "dip_unbounded": bool(g("dip_unbounded")), "uvlo_deglitch": rail.supply.uvlo_filter,
        "c_in": rail.supply.c_in,
        "v_final": g("v_final"), "v_target": g("v_target"), "v_end": g("v_end"),
        "v_stall": g("v_stall") if status == STATUS_STALLED else None,
        "pulse_t_equiv": g("pulse_t_equiv"), "pulse_p_peak": g("pulse_p_peak"), "pulse_e": g("pulse_e"),
        "pulse_v_ds": g("pulse_v_ds"), "pulse_i": g("pulse_i"), "pulse_tj_start": g("pulse_tj_start"),
        "soa_i_allowed": g("soa_i_allowed"), "soa_ratio": g("soa_ratio"),
        "t_end": g("t_end"), "steps": int(g("steps")), "waveforms": wave,
    }


def _short_circuit_point(fig: dict, row: int) -> dict:
    g = lambda k: fig[k][row]  # noqa: E731
    by = None
    if math.isfinite(g("sc_t_allow")):
        by = "soa" if g("sc_t_soa") <= g("sc_t_thermal") else "thermal"
    out = {"v_ds": g("sc_v_ds"), "i": g("sc_i"), "p": g("sc_p"), "t_soa": g("sc_t_soa"),
           "t_thermal": g("sc_t_thermal"), "t_allow": g("sc_t_allow"), "t_fault": _num(g("t_fault")),
           "margin": g("sc_margin"), "limited_by": by, "survives_indefinitely": not math.isfinite(g("sc_t_allow")),
           "t_start": g("sc_t_start"), "onset": _onset_point(fig, row), "turn_off": _turn_off_point(fig, row)}
    if fig["linear_share"] != 1.0:  # parallel FETs: the worst FET's current
        out["i_fet"] = g("sc_i_fet")
    return out


_ACTED_WORDS = {ACTED_LOOP: "loop", ACTED_FAST_TRIP: "fast_trip"}
_BY_KEYS = {BY_INPUT: "input_capacitance", BY_CLAMP: "input_clamp", BY_BREAKDOWN: "breakdown"}


def _onset_point(fig: dict, row: int) -> dict | None:
    """The onset of the short (`faults.onset`) at one row, or None where the rail does not describe it."""
    if not fig["has_onset"]:
        return None
    g = lambda k: fig["onset_" + k][row]  # noqa: E731
    return {"i_peak": g("i_peak"), "t_act": g("t_act"), "acted_by": _ACTED_WORDS.get(int(g("acted"))),
            "fast_trip_fired": bool(g("fired")), "e_fet": g("e"), "i_final": g("i_final"), "rds_on": g("rds"),
            "soa_allowed": g("soa_allowed"), "soa_ratio": g("soa_ratio"), "t_start": fig["sc_t_start"][row]}


def _turn_off_point(fig: dict, row: int) -> dict | None:
    """The hard turn-off (`faults.turn_off`) at one row, or None where the rail does not describe it."""
    if not fig["has_turn_off"] or not math.isfinite(fig["off_i"][row]):
        return None
    g = lambda k: fig["off_" + k][row]  # noqa: E731
    return {"event": "fast_trip" if bool(fig["onset_fired"][row]) else "fault_timer", "i": g("i"),
            "v_peak": g("v_peak"), "clamped_by": _BY_KEYS.get(int(g("by"))), "v_clamp": g("v_c"),
            "e_half_li2": g("e_half"), "e_clamp": g("e_clamp"), "e_fet": g("e_fet")}


def _short_circuit_section(fig_n: dict, wc: WorstCase | None) -> dict:
    """The output short circuit at the nominal point, and at the short-circuit check's worst case."""
    if not fig_n["has_limit"]:
        if fig_n["has_onset"]:  # no limit, but a fast trip: the onset alone
            out = {"applies": False, "onset": _onset_point(fig_n, 0), "turn_off": _turn_off_point(fig_n, 0)}
            return out
        return {"applies": False}
    out = {"applies": True, **_short_circuit_point(fig_n, 0), "worst": None}
    if wc is not None:
        row = wc.worst["short_circuit_time"]
        out["worst"] = {**_short_circuit_point(wc.fig, row), "corner": wc.words(row, _FAULT)}
    return out


def _timer_section(rail: Rail, rules: dict, fig_n: dict, wc: WorstCase | None, times: tuple) -> dict | None:
    timer = rail.switch.timer
    if timer is None:
        return None
    t_min, t_nom, t_max = times
    src = wc.fig if wc is not None else fig_n
    names = [wc.words(j, _STARTUP) for j in range(wc.params.n)] if wc is not None else ["nominal"]
    t_need = np.asarray(src["t_limit"], dtype=float)
    complete_free = np.isfinite(t_need)
    out = {"t_fault_min": t_min, "t_fault_nom": t_nom, "t_fault_max": t_max, "t_limit_worst": None,
           "t_limit_corner": None, "startup_margin": None, "trip_not_before": None, "trip_by": None,
           "t_allow_worst": None}
    allow = np.asarray(src["sc_t_allow"], dtype=float) if src["has_limit"] else np.array([math.inf])
    t_allow = float(np.min(allow))
    if math.isfinite(t_allow):
        # the short circuit must be cleared by this time, with the team's fault margin
        out.update(t_allow_worst=t_allow, trip_by=t_allow / rules["fault_margin"])
    if complete_free.all():
        j = int(np.argmax(t_need))
        out.update(t_limit_worst=float(t_need[j]), t_limit_corner=names[j],
                   startup_margin=(t_min / t_need[j]) if t_need[j] > 0 else None,
                   trip_not_before=rules["timer_margin"] * float(t_need[j]))
        win = timer_window(timer, t_limit_worst=float(t_need[j]), t_allow=t_allow,
                           timer_margin=rules["timer_margin"], fault_margin=rules["fault_margin"])
    else:
        win = {"c_lo": None, "c_hi": None, "c_window": None, "c_suggested": None,
               "window_note": "The start-up does not complete even without the timer at some point of the "
                              "tolerance box, so no timer window can be set."}
    out.update(win)
    return out


def _retry_section(rail: Rail, fig: dict) -> dict | None:
    if not fig["has_retry"]:
        return None
    g = lambda k: fig[k][0]  # noqa: E731
    t = rail.switch.timer
    return {"duty": g("retry_duty"), "p_avg": g("retry_p_avg"), "tj_peak": g("retry_tj_peak"),
            "tj_valley": g("retry_tj_valley"), "period": g("t_fault") + t.retry_off,
            "cooldown_ratio": g("retry_cooldown"), "retries": t.retries,
            "pulses": None if t.retries is None else t.retries + 1, "t_start": g("sc_t_start")}


def _steady_section(rail: Rail, fig: dict) -> dict:
    g = lambda k: fig[k][0]  # noqa: E731
    out = {"i": g("steady_i"), "p_fet": g("steady_p_fet"), "tj": g("steady_tj"), "v_drop": g("steady_v_drop"),
           "stable": bool(g("steady_stable"))}
    if _fet_data_given(rail):
        out.update(i_fet=g("steady_i_fet"), beyond_data=bool(g("steady_beyond")), rds_on=float(g("rds")))
    return out


def _fet_section(rail: Rail, fig_n: dict) -> dict:
    """The FET data the result used: parallel count, shares, the Rds(on) spread and its data over Tj."""
    fet = rail.fet
    r_max = fet.rds_on_max if fet.rds_on_max is not None else fet.rds_on
    rds_t = rds_temperature(fet)
    return {
        "count": fet.count,
        "rds_on": fet.rds_on,
        "rds_on_max": fet.rds_on_max,
        "rds_on_curve": [list(p) for p in fet.rds_on_curve] if fet.rds_on_curve is not None else None,
        "rds_data": rds_t.words(),
        "t_data_high": rds_t.t_high,
        "linear_share": float(fig_n["linear_share"]),
        # the largest conduction share of the spread: the lowest Rds(on) against the others at the highest
        "conduction_share": float(conduction_share(fet.rds_on, fet.count, r_max)),
        "conduction_share_note": ("Fully on, parallel FETs share the current as a current divider of their "
                                  "R_DS(on); the largest share is that of a FET at the typical against the others "
                                  "at the maximum." if fet.count > 1 else "One FET."),
        "linear_share_note": ("While the switch regulates (start-up, short circuit) the worst FET carries this "
                              "share of the current: the team rule linear_share (default 1: one FET carries it "
                              "all, threshold spread; common practice, no source)." if fet.count > 1 else "One FET."),
    }


# --- headroom --------------------------------------------------------------------------------


def _headroom(rail: Rail, rules: dict, nominal: tuple[dict, dict], wc: WorstCase | None,
              t_fault_max: float) -> dict:
    """Load capacitance and limit headroom on the sign-off basis, with the check that bounds each."""
    fig_n, checks_n = nominal
    if wc is None:
        base, owner, start = nominal_point_of(fig_n), {s.id: 0 for s in CHECKS}, checks_n
    else:
        base, owner, start = basis_rows(wc.params, wc.checks, wc.worst)
    c = capacitance_headroom(rail, rules, base, owner, start, fig_n)
    v_sc = rail.supply.v_max
    lim = limit_headroom(rail, rules, v_sc=v_sc, t_fault=t_fault_max, t_start=_start_at(rail, v_sc))
    out = {"c_max": _c_record(rail, c), "limit_max": _limit_record(rail, lim)}
    if rail.switch.foldback is not None:
        out["load_max"] = _load_record(rail, load_headroom(rail, t_fault=_fault_times(rail)[0]))
    return out


def _load_record(rail: Rail, found: dict) -> dict:
    """The largest load that still starts under the foldback limit, in words."""
    model = rail.load.model.replace("_", "-")
    rec = {"title": "Largest load that still starts (foldback)", "unit": "A", "value": found["value"],
           "present": found["present"], "status": found["status"], "check": "startup_complete",
           "check_title": SPECS["startup_complete"].title, "trials": found["trials"]}
    where = ("at the current limit's low tolerance and the shortest trip time, at each supply and load "
             "capacitance extreme")
    if found["status"] == "found":
        value, present = found["value"], found["present"]
        room = "has room" if value >= present else "does not start"
        rec["note"] = (f"A {model} load of up to {eng(value, 'A')} nominal still starts under the foldback limit "
                       f"{where}; the present {eng(present, 'A')} {room}.")
        if value < present:
            rec["status"] = "fails"
    elif found["status"] == "unbounded":
        rec["note"] = f"64 × the present load still starts under the foldback limit {where}."
    elif found["status"] == "fails_everywhere":
        rec["note"] = f"Not even 1/64 of the present load starts under the foldback limit {where}."
    else:
        rec["note"] = "No load model: nothing to carry during the start."
    return rec


def _start_at(rail: Rail, v_s: float) -> float:
    """The junction temperature a short starts from at supply v_s (the steady state there)."""
    return float(start_temperature(rail, steady_state(rail, v_s=np.array([v_s])))[0])


def nominal_point_of(fig: dict) -> RowParams:
    return RowParams(v_s=np.asarray(fig["v_s"][:1], float), c=np.asarray(fig["c"][:1], float),
                     i_lim=np.asarray(fig["i_lim"][:1], float), t_fault=np.asarray(fig["t_fault"][:1], float),
                     rds=np.asarray(fig["rds"][:1], float))


def _c_record(rail: Rail, c: dict) -> dict:
    c_nom = rail.load.c_nom
    title = "Largest load capacitance that still passes"
    check = c.get("check")
    rec = {"title": title, "unit": "F", "value": c["c_max"], "present": c_nom, "status": c["status"],
           "check": check, "check_title": SPECS[check].title if check else None,
           "excluded": [{"id": x, "title": SPECS[x].title} for x in c["excluded"]], "trials": c["trials"]}
    bound = f" ({SPECS[check].title.lower()} bounds it)" if check else ""
    if c["status"] == "found" and c["c_max"] >= c_nom:
        note = f"Up to {eng(c['c_max'], 'F')} nominal passes{bound}; the present {eng(c_nom, 'F')} has room."
    elif c["status"] == "found":
        note = (f"The rail already fails at its {eng(c_nom, 'F')}: it needs at most {eng(c['c_max'], 'F')} "
                f"nominal{bound}.")
        rec["status"] = "fails"
    elif c["status"] == "unbounded":
        note = f"No limit from the start-up: {c['beyond']:.3g} × the present capacitance still passes."
    elif c["status"] == "fails_everywhere":
        note = ("No load capacitance down to 1/64 of the present one passes"
                + (f": {SPECS[check].title.lower()} fails throughout." if check else "."))
    elif c["status"] == "not_settled":
        note = "The search did not settle within its budget of transients."
    else:
        note = "No capacitance-dependent check applies to this rail."
    if rec["excluded"]:
        note += (" Failing whatever the capacitance, left out: "
                 + "; ".join(x["title"].lower() for x in rec["excluded"]) + ".")
    rec["note"] = note
    return rec


def _limit_record(rail: Rail, lim: dict) -> dict:
    kind = lim["kind"]
    check_title = SPECS["short_circuit_time"].title
    if kind is None:
        return {"title": "Highest current limit the short circuit allows", "unit": "A", "value": None,
                "present": None, "status": "not_applicable", "check": None, "check_title": None,
                "note": "The switch has no current limit: the short circuit is not limited by it."}
    unit, word = ("A", "current limit") if kind == "current" else ("W", "power limit")
    rec = {"title": f"Highest {word} the short circuit allows", "unit": unit, "value": lim["value"],
           "present": lim["present"], "status": lim["status"], "check": "short_circuit_time",
           "check_title": check_title}
    value, present = lim["value"], lim["present"]
    if lim["status"] == "found" and value >= present:
        note = (f"Up to {eng(value, unit)} nominal passes ({check_title.lower()} at the supply maximum, the "
                f"{word}'s high tolerance and the longest trip time); the present {eng(present, unit)} has room.")
    elif lim["status"] == "found":
        note = (f"The short circuit already fails at the present {eng(present, unit)}: it needs a {word} of at "
                f"most {eng(value, unit)} nominal, or a faster timer.")
        rec["status"] = "fails"
    elif lim["status"] == "unbounded":
        note = ("No bound from the short circuit: every limit up to 1000 × the present passes, or the current "
                "limit bounds the fault before the power limit does.")
    else:
        note = (f"Even 1/1000 of the present {word} fails: the fault timer is too slow for this FET at the supply "
                "maximum.")
    rec["note"] = note
    return rec


def _empty_headroom() -> dict:
    rec = {"value": None, "present": None, "status": "not_computed", "check": None, "check_title": None,
           "note": "Not computed."}
    return {"c_max": {"title": "Largest load capacitance that still passes", "unit": "F", "excluded": [],
                      "trials": 0, **rec},
            "limit_max": {"title": "Highest current limit the short circuit allows", "unit": "A", **rec}}


BANK_CONVENTION = ("Capacitor bank: each group is its own branch (its ESR, its charge on its DC-bias curve, "
                   "dq = C(v) dv), held at the curve's end values beyond it; the load capacitance named in the "
                   "corners and figures is the bank's total at 0 V; corners move every group's tolerance together, "
                   "the Monte Carlo draws each group on its own; a derating range is read at its middle at nominal "
                   "and at its ends at the corners.")


# --- notes ---------------------------------------------------------------------------------


def _notes(rail: Rail, wc: WorstCase | None) -> list[str]:
    notes = []
    zsum = sum(r for r, _ in rail.fet.zth)
    if abs(zsum - rail.fet.rth_ja) > 0.1 * rail.fet.rth_ja:
        notes.append(f"The Foster stages sum to {zsum:.3g} K/W but rth_ja is {rail.fet.rth_ja:.3g} K/W: transients "
                     "use the Foster stages, steady conduction uses rth_ja.")
    if rail.load.bank is not None:
        notes.extend(bank_summary(rail.load.bank, rail.t_ambient, rail.supply.v_max, rail.supply.v_nom)["notes"])
    if wc is None:
        notes.append("Nominal reading only: not a sign-off verdict. The sign-off basis is the worst case over the "
                     "tolerance corners and the search inside the tolerance box.")
    else:
        searched = [SPECS[cid].title for cid, f in wc.found_by.items() if f == "search"]
        if searched:
            notes.append("Worse than every corner, found inside the tolerance box by the search: "
                         + "; ".join(searched) + ".")
    return notes


def _worst_case_summary(wc: WorstCase | None) -> dict:
    if wc is None:
        return {"basis": BASIS_NOMINAL, "corners": 0, "search_points": 0, "budget": None, "found_by_search": []}
    return {"basis": BASIS_WORST, "corners": len(wc.corners), "search_points": wc.n_search, "budget": wc.budget,
            "found_by_search": [cid for cid, f in wc.found_by.items() if f == "search"]}


def _corner_list(wc: WorstCase) -> list[dict]:
    out = []
    keys = ("v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip", "t_fault")
    if wc.rail is not None and _fet_data_given(wc.rail):
        keys += ("rds",)
    for j, c in enumerate(wc.corners):
        codes = [int(wc.checks[s.id]["verdict"][j]) for s in CHECKS]
        out.append({
            "name": c["name"],
            "params": {k: c[k] for k in keys},
            "figures": {key: wc.fig[key][j] for _, _, _, key, _ in FIGURES},
            "verdict": VERDICTS[max(codes)],
            "worst_for": [s.id for s in CHECKS if wc.worst[s.id] == j],
        })
    return out


# --- the analysis ----------------------------------------------------------------------------


def analyze_rail(
    doc: dict,
    *,
    rules: dict | None = None,
    corners: bool = True,
    monte_carlo: int = 0,
    seed: int = 0,
    distribution: str | dict = "uniform",
    waveforms: bool = True,
    progress: Callable[[float], None] | None = None,
    headroom: bool = True,
) -> dict:
    """Analyse one switched rail.

    Parameters
    ----------
    doc : dict
        Normalized rail document, schema ``railsign.rail/1`` (SI units, degC).
    rules : dict, optional
        The team's rules (partial dict over `DEFAULT_RULES`); the document's own
        ``rules`` override them.
    corners : bool
        True (the sign-off basis): every check's worst case over the tolerance corners and
        the worst-case search. False: the nominal point only, a quick look that is not a
        sign-off verdict.
    monte_carlo : int
        Number of Monte Carlo samples (0: none).
    seed : int
        Seed of the Monte Carlo generator.
    distribution : str or dict
        Monte Carlo distribution of the tolerances: "uniform" or "normal" for all, or per
        parameter (`montecarlo.PARAMETERS`), see `montecarlo.sample_params`.
    waveforms : bool
        Include the nominal start-up waveforms (at most 2000 points each).
    progress : callable, optional
        Called with the fraction done (0 .. 1); an exception it raises propagates
        (cancels the analysis).
    headroom : bool
        Search the largest load capacitance and the highest limit (a handful of further
        transients); False leaves them "not computed".

    Returns
    -------
    dict
        JSON-serialisable; keys ``engine_version``, ``name``, ``verdict``, ``basis``,
        ``signoff``, ``checks``, ``figures``, ``startup``, ``short_circuit``, ``timer``,
        ``retry``, ``steady``, ``headroom``, ``worst_case``, ``rules``, ``conventions``,
        ``notes``, ``caution``, and ``corners`` / ``monte_carlo`` when computed.

    Raises
    ------
    DocumentError
        Bad input (a document that cannot be computed), naming the field.
    """
    rail = read_rail(doc, rules)
    n_samples = _sample_count(monte_carlo)
    distribution = distributions_for(distribution)
    times = _fault_times(rail)
    nominal = _nominal_reading(rail, times, waveforms)
    share = 0.6 if n_samples else 1.0
    wc = _worst_case(rail, times, _split_progress(progress, 0.0, share)) if corners else None
    records = _check_records(rail, rail.rules, nominal[:2], wc)
    result = {**_summary(rail, records, wc), "checks": records,
              **_nominal_sections(rail, nominal, wc, times, waveforms, headroom),
              "worst_case": _worst_case_summary(wc)}
    if wc is not None:
        result["corners"] = _corner_list(wc)
    if _fet_data_given(rail):
        result["fet"] = _fet_section(rail, nominal[0])
    if rail.load.bank is not None:
        result["bank"] = bank_summary(rail.load.bank, rail.t_ambient, rail.supply.v_max, rail.supply.v_nom)
    if n_samples:
        result["monte_carlo"] = run_monte_carlo(rail, rail.rules, n_samples, seed=seed, distribution=distribution,
                                                worst=records, progress=_split_progress(progress, share, 1.0))
    result.update(_closing_sections(rail, wc))
    return _clean(result)


def _sample_count(monte_carlo) -> int:
    """The number of Monte Carlo samples asked for (0: none); anything but a whole number >= 0 is refused."""
    if isinstance(monte_carlo, bool) or not isinstance(monte_carlo, (int, np.integer)) or monte_carlo < 0:
        raise ValueError("monte_carlo: must be a whole number >= 0")
    return int(monte_carlo)


def _fault_times(rail: Rail) -> tuple[float, float, float]:
    """The fault timer's shortest, nominal and longest trip time, s (infinite without a timer)."""
    timer = rail.switch.timer
    return fault_times(timer) if timer is not None else (math.inf, math.inf, math.inf)


def _nominal_reading(rail: Rail, times: tuple, waveforms: bool) -> tuple[dict, dict, StartupFigures]:
    """The figures, checks and start-up (with its waveform where asked) of the nominal point."""
    return evaluate_rows(rail, rail.rules, nominal_point(rail, times[1]), record=0 if waveforms else None)


def _worst_case(rail: Rail, times: tuple, progress: Callable | None) -> WorstCase:
    """The sign-off worst case: the tolerance corners and the search inside the tolerance box."""
    return find_worst_case(rail, rail.rules, t_fault_range=(times[0], times[2]), progress=progress)


def _summary(rail: Rail, records: list[dict], wc: WorstCase | None) -> dict:
    """The result's head: engine, rail, overall verdict (the worst check's) and its basis."""
    return {
        "engine_version": ENGINE_VERSION,
        "name": rail.name,
        "verdict": VERDICTS[worst_verdict(SEVERITY[r["verdict"]] for r in records)],
        "basis": BASIS_WORST if wc is not None else BASIS_NOMINAL,
        "signoff": wc is not None,
    }


def _nominal_sections(rail: Rail, nominal: tuple, wc: WorstCase | None, times: tuple, waveforms: bool,
                      headroom: bool) -> dict:
    """The key figures and the sections of the start-up, short circuit, timer, retry, steady
    conduction and headroom, each from its builder."""
    fig_n, checks_n, st_n = nominal
    rules = rail.rules
    return {
        "figures": _key_figures(fig_n, wc),
        "startup": _startup_section(rail, fig_n, st_n, waveforms),
        "short_circuit": _short_circuit_section(fig_n, wc),
        "timer": _timer_section(rail, rules, fig_n, wc, times),
        "retry": _retry_section(rail, fig_n),
        "steady": _steady_section(rail, fig_n),
        "headroom": _headroom(rail, rules, (fig_n, checks_n), wc, times[2]) if headroom else _empty_headroom(),
    }


def _closing_sections(rail: Rail, wc: WorstCase | None) -> dict:
    """The rules the result used, its conventions, notes and the caution."""
    # linear_share acts only on parallel FETs: a single FET's result does not list it
    rules = {k: v for k, v in rail.rules.items() if k != "linear_share" or rail.fet.count != 1}
    conventions = [MARGIN_CONVENTION, SOA_CONVENTION]
    if rests_on_ramp(rail):
        conventions.append(RAMP_CONVENTION)
    if rail.load.bank is not None:
        conventions.append(BANK_CONVENTION)
    return {"rules": rules, "conventions": conventions, "notes": _notes(rail, wc), "caution": CAUTION}
