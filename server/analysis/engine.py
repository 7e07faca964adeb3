"""The analysis of one switched rail: every figure, check and verdict as one JSON-ready dict.

Provides
--------
ENGINE_VERSION
    Version of the numbers: results are cached per engine version.
analyze_rail(doc, *, rules=None, corners=False, monte_carlo=0, seed=0,
             distribution="uniform", waveforms=True, progress=None, headroom=True)
    The result dict of DESIGN.md section 4 (SI units, degC; no NaN or infinity: None).
CAUTION
    The caution line every report and page carries.

The nominal evaluation runs the start-up at v_nom and c_nom with the nominal limit, and
takes the worst cases that DESIGN.md builds into the short circuit (v_max, i_limit at its
high tolerance, the longest trip time) and the timer (the shortest trip time). With
``corners`` every tolerance corner is evaluated and each check reports its worst corner;
with ``monte_carlo`` > 0 the yield and the spread of every check value are added.

``startup.v_supply_min`` is the lowest switch-input voltage as the upstream UVLO sees it,
through its deglitch filter (a first-order lag of ``supply.uvlo_filter``, default 1 us:
common practice, no source); ``startup.v_supply_min_raw`` is the unfiltered minimum.
"""

from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from .checks import CHECKS, VERDICTS, check_detail, worst_verdict
from .circuit import NO_LIMIT
from .corners import run_corners
from .document import Rail, read_rail
from .errors import AnalysisError
from .evaluation import RowParams, evaluate_rows
from .headroom import capacitance_headroom, limit_headroom
from .montecarlo import run_monte_carlo
from .startup import STATUS_NO_CONVERGENCE, STATUS_OK, STATUS_STALLED
from .timer import fault_times, timer_window
from .waveform import decimate

__all__ = ["ENGINE_VERSION", "CAUTION", "analyze_rail"]

ENGINE_VERSION = "2.0.0"
CAUTION = ("railsign computes design margins; it does not certify hardware. Verify on hardware, treat "
           "stored energy and high currents with care, and follow the applicable codes and licensed practice.")


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


def _nominal_params(rail: Rail, t_min: float, t_max: float) -> RowParams:
    s, sw = rail.supply, rail.switch
    i_lim = sw.i_limit if sw.i_limit is not None else NO_LIMIT
    i_hi = i_lim * (1.0 + sw.i_limit_tol) if sw.i_limit is not None else NO_LIMIT
    a = lambda x: np.array([float(x)])  # noqa: E731
    return RowParams(v_s=a(s.v_nom), c=a(rail.load.c_nom), i_lim=a(i_lim), v_sc=a(s.v_max), i_sc=a(i_hi),
                     t_fault_start=a(t_min), t_fault_sc=a(t_max), v_steady=a(s.v_nom))


def _check_entries(rail: Rail, rules: dict, fig: dict, checks: dict, rows: dict, names: list | None) -> list:
    out = []
    for spec in CHECKS:
        r = rows[spec.id]
        ch = checks[spec.id]
        code = int(ch["verdict"][r])
        out.append({
            "id": spec.id,
            "title": spec.title,
            "verdict": VERDICTS[code],
            "value": _num(ch["value"][r]),
            "limit": _num(ch["limit"][r]),
            "unit": spec.unit,
            "basis": spec.basis,
            "detail": check_detail(spec.id, fig, r, rail, rules),
            "corner": names[r] if names is not None and code != 0 else None,
        })
    return out


def _notes(rail: Rail) -> list[str]:
    notes = []
    zsum = sum(r for r, _ in rail.fet.zth)
    if abs(zsum - rail.fet.rth_ja) > 0.1 * rail.fet.rth_ja:
        notes.append(f"fet.zth sums to {zsum:.3g} K/W but rth_ja is {rail.fet.rth_ja:.3g} K/W: transients use "
                     "the Foster stages, steady conduction uses rth_ja.")
    if rail.switch.mode == "hard" and rail.switch.t_on == 0.0 and rail.supply.l_source + rail.path.l > 0:
        notes.append("Instant hard turn-on behind series inductance: the unfiltered switch input falls to the "
                     "output voltage at turn-on (no input capacitance is modelled; v_supply_min_raw), and the "
                     "supply-dip check sees it through the UVLO filter; give t_on for a realistic dip.")
    return notes


def _split_progress(progress: Callable | None, a: float, b: float):
    if progress is None:
        return None
    return lambda x: progress(a + (b - a) * float(x))


def analyze_rail(
    doc: dict,
    *,
    rules: dict | None = None,
    corners: bool = False,
    monte_carlo: int = 0,
    seed: int = 0,
    distribution: str = "uniform",
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
        Evaluate every tolerance corner; the checks then report worst cases.
    monte_carlo : int
        Number of Monte Carlo samples (0: none).
    seed : int
        Seed of the Monte Carlo generator.
    distribution : {"uniform", "normal"}
        Monte Carlo draws within the tolerances, or normal with tolerance = 3 sigma.
    waveforms : bool
        Include the start-up waveforms (at most 2000 points each).
    progress : callable, optional
        Called with the fraction done (0 .. 1) during corners and Monte Carlo; an
        exception it raises propagates (cancels the analysis).
    headroom : bool
        Search the largest load capacitance and the highest current limit (a handful of
        further transients); False leaves ``headroom`` figures None.

    Returns
    -------
    dict
        JSON-serialisable; keys ``engine_version``, ``name``, ``verdict``, ``startup``,
        ``short_circuit``, ``timer``, ``retry``, ``steady``, ``headroom``, ``checks``,
        ``rules``, ``notes``, ``caution``, and ``corners`` / ``monte_carlo`` when asked.

    Raises
    ------
    DocumentError
        Bad input, naming the field.
    AnalysisError
        The start-up transient does not converge within the step cap.
    """
    rail = read_rail(doc, rules)
    rules_used = rail.rules
    if isinstance(monte_carlo, bool) or not isinstance(monte_carlo, (int, np.integer)) or monte_carlo < 0:
        raise ValueError("monte_carlo: must be a whole number >= 0")
    if distribution not in ("uniform", "normal"):
        raise ValueError("distribution: must be uniform or normal")
    sw = rail.switch
    timer = sw.timer
    t_min, t_nom, t_max = fault_times(timer) if timer is not None else (math.inf, math.inf, math.inf)

    params = _nominal_params(rail, t_min, t_max)
    fig, checks, st = evaluate_rows(rail, rules_used, params, record=0 if waveforms else None)
    if st.status[0] == STATUS_NO_CONVERGENCE:
        raise AnalysisError(
            "start-up transient did not converge within the step cap "
            f"({int(st.steps[0])} steps); the case is too stiff or does not settle")

    p_corners = _split_progress(progress, 0.0, 0.1 if monte_carlo else 1.0)
    p_mc = _split_progress(progress, 0.1 if corners else 0.0, 1.0)
    cr = run_corners(rail, rules_used, progress=p_corners) if corners else None

    result: dict = {"engine_version": ENGINE_VERSION, "name": rail.name}
    ok = st.status[0] == STATUS_OK
    g = lambda k: fig[k][0]  # noqa: E731
    wave = decimate(st.waveform) if (waveforms and st.waveform is not None) else None
    result["startup"] = {
        "status": "complete" if ok else "stalled",
        "i_peak": g("i_peak"), "t_i_peak": g("t_i_peak"), "t_limit": g("t_limit"), "t_settle": g("t_settle"), "e_fet": g("e_fet"),
        "p_fet_peak": g("p_fet_peak"), "tj_peak": g("tj_peak"), "v_supply_min": g("v_supply_min"),
        "v_supply_min_raw": g("v_supply_min_raw"), "uvlo_filter": rail.supply.uvlo_filter,
        "v_final": g("v_final"), "v_stall": g("v_stall") if st.status[0] == STATUS_STALLED else None,
        "pulse_t_equiv": g("pulse_t_equiv"), "pulse_p_peak": g("pulse_p_peak"),
        "pulse_v_ds": g("v_ds_at_peak"), "pulse_i": g("i_at_peak"),
        "soa_i_allowed": g("soa_i_allowed"), "soa_ratio": g("soa_ratio"),
        "steps": int(st.steps[0]), "waveforms": wave,
    }
    if fig["has_limit"]:
        by = None
        if math.isfinite(g("sc_t_allow")):
            by = "soa" if g("sc_t_soa") <= g("sc_t_thermal") else "thermal"
        result["short_circuit"] = {
            "applies": True, "v_ds": g("sc_v_ds"), "i": g("sc_i"), "p": g("sc_p"), "t_soa": g("sc_t_soa"),
            "t_thermal": g("sc_t_thermal"), "t_allow": g("sc_t_allow"), "t_fault_max": t_max if timer else None,
            "margin": g("sc_margin"), "limited_by": by,
            "survives_indefinitely": not math.isfinite(g("sc_t_allow")),
        }
    else:
        result["short_circuit"] = {"applies": False, "v_ds": None, "i": None, "p": None, "t_soa": None,
                                   "t_thermal": None, "t_allow": None, "t_fault_max": None, "margin": None,
                                   "limited_by": None, "survives_indefinitely": None}

    t_limit_worst = float(g("t_limit")) if ok else math.nan
    worst_corner = None
    if cr is not None:
        tl = cr["fig"]["t_limit"]
        if np.all(np.isfinite(tl)):
            j = int(np.argmax(tl))
            t_limit_worst, worst_corner = float(tl[j]), cr["corners"][j]["name"]
    if timer is not None:
        tw = {"t_fault_min": t_min, "t_fault_nom": t_nom, "t_fault_max": t_max,
              "t_limit_worst": t_limit_worst, "t_limit_corner": worst_corner,
              "startup_margin": (t_min / t_limit_worst if t_limit_worst > 0 else math.inf)
              if math.isfinite(t_limit_worst) else None}
        if math.isfinite(t_limit_worst):
            t_allow = g("sc_t_allow") if fig["has_limit"] else math.inf
            win = timer_window(timer, t_limit_worst=t_limit_worst, t_allow=float(t_allow),
                               timer_margin=rules_used["timer_margin"], fault_margin=rules_used["fault_margin"])
        else:
            win = {"c_lo": None, "c_hi": None, "c_window": None, "c_suggested": None,
                   "window_note": "The start-up does not complete, so no timer window can be set."}
        tw.update(win)
        result["timer"] = tw
    else:
        result["timer"] = None
    if fig["has_retry"]:
        result["retry"] = {"duty": g("retry_duty"), "p_avg": g("retry_p_avg"), "tj_peak": g("retry_tj_peak"),
                           "tj_valley": g("retry_tj_valley"), "period": t_max + timer.retry_off}
    else:
        result["retry"] = None
    result["steady"] = {"i": g("steady_i"), "p_fet": g("steady_p_fet"), "tj": g("steady_tj"),
                        "v_drop": g("steady_v_drop"), "stable": bool(g("steady_stable"))}

    if headroom:
        head = capacitance_headroom(rail, rules_used, params, checks, fig)
        head.update(limit_headroom(rail, rules_used, v_sc=rail.supply.v_max, t_fault=t_max))
    else:
        head = {"c_max": None, "c_max_check": None, "c_max_note": "Not computed.", "c_max_excluded": [],
                "c_max_trials": 0, "i_limit_max": None, "i_limit_max_note": "Not computed."}
    result["headroom"] = head

    if cr is None:
        rows = {c.id: 0 for c in CHECKS}
        entries = _check_entries(rail, rules_used, fig, checks, rows, None)
    else:
        names = [c["name"] for c in cr["corners"]]
        entries = _check_entries(rail, rules_used, cr["fig"], cr["checks"], cr["worst"], names)
        result["corners"] = _corner_list(cr)
    result["checks"] = entries
    codes = [next(k for k, v in VERDICTS.items() if v == e["verdict"]) for e in entries]
    result["verdict"] = VERDICTS[worst_verdict(codes)]
    if monte_carlo:
        result["monte_carlo"] = run_monte_carlo(rail, rules_used, int(monte_carlo), seed=seed,
                                                distribution=distribution, progress=p_mc)
    result["rules"] = dict(rules_used)
    notes = _notes(rail)
    if cr is None:
        notes.append("Figures at nominal conditions (short circuit and timer at their worst cases); "
                     "run the corners for the worst case of every check.")
    result["notes"] = notes
    result["caution"] = CAUTION
    return _clean(result)


def _corner_list(cr: dict) -> list:
    fig, checks = cr["fig"], cr["checks"]
    out = []
    for j, c in enumerate(cr["corners"]):
        codes = [int(checks[s.id]["verdict"][j]) for s in CHECKS]
        out.append({
            "name": c["name"],
            "params": {k: c[k] for k in ("v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip")},
            "figures": {
                "i_peak": fig["i_peak"][j], "t_limit": fig["t_limit"][j], "e_fet": fig["e_fet"][j],
                "tj_peak": fig["tj_peak"][j], "v_supply_min": fig["v_supply_min"][j],
                "v_supply_min_raw": fig["v_supply_min_raw"][j],
                "soa_ratio": fig["soa_ratio"][j], "t_fault": fig["t_fault_sc"][j],
                "sc_margin": fig["sc_margin"][j], "startup_margin": fig["startup_margin"][j],
                "steady_tj": fig["steady_tj"][j],
            },
            "verdict": VERDICTS[max(codes)],
            "worst_for": [s.id for s in CHECKS if cr["worst"][s.id] == j and int(checks[s.id]["verdict"][j]) != 0],
        })
    return out
