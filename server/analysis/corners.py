"""Tolerance corners: every combination of the extremes of the toleranced parameters.

Provides
--------
corner_set(rail)
    The corners: name and parameter values (v_s, c, i_limit, timer c, i_charge, v_trip).
run_corners(rail, rules, *, progress=None)
    Figures and checks at every corner, and the worst corner of each check.

Method
------
A full factorial of the two extremes of every parameter that has a spread: the supply
(v_min, v_max), the load capacitance (c_nom (1 -/+ c_tol)), the current limit
(i_limit (1 -/+ i_limit_tol)) and the timer capacitor, charge current and trip voltage
(each nominal (1 -/+ tol)), all at t_ambient (the worst-case high ambient of the
document). At most 2^6 = 64 corners. The start-up transient depends on the first three
only, so it runs once per distinct (v_s, c, i_limit), at most 8 rows in one batch; the
timer, short-circuit, retry and steady figures are closed forms evaluated per corner.
Each check reports its worst corner: the highest severity, then the smallest normalised
margin. Where a figure is monotone in each parameter (the usual case) the corners bracket
the nominal value and the worst corner is the worst case over the whole tolerance box.
"""

from __future__ import annotations

import itertools
from dataclasses import fields

import numpy as np

from .checks import CHECKS, normalised_margin
from .circuit import NO_LIMIT
from .document import Rail
from .evaluation import RowParams, evaluate_rows, startup_rows
from .startup import STATUS_NO_CONVERGENCE, StartupFigures
from .errors import AnalysisError

__all__ = ["corner_set", "run_corners", "worst_rows"]


def _levels(nominal: float, tol: float, lo_name: str, hi_name: str):
    if tol > 0:
        return [(lo_name, nominal * (1 - tol)), (hi_name, nominal * (1 + tol))]
    return [(None, nominal)]


def corner_set(rail: Rail) -> list[dict]:
    """All tolerance corners of a rail.

    Parameters
    ----------
    rail : Rail

    Returns
    -------
    list of dict
        ``{"name", "v_s" (V), "c" (F), "i_limit" (A or None), "timer_c" (F),
        "i_charge" (A), "v_trip" (V)}``; timer entries None without a timer.
    """
    s = rail.supply
    v = [("v_min", s.v_min), ("v_max", s.v_max)] if s.v_max > s.v_min else [(None, s.v_nom)]
    c = _levels(rail.load.c_nom, rail.load.c_tol, "c_lo", "c_hi")
    sw = rail.switch
    il = _levels(sw.i_limit, sw.i_limit_tol, "ilim_lo", "ilim_hi") if sw.i_limit is not None else [(None, None)]
    t = sw.timer
    if t is not None:
        tc = _levels(t.c, t.c_tol, "ct_lo", "ct_hi")
        ic = _levels(t.i_charge, t.i_charge_tol, "ich_lo", "ich_hi")
        vt = _levels(t.v_trip, t.v_trip_tol, "vtrip_lo", "vtrip_hi")
    else:
        tc = ic = vt = [(None, None)]
    out = []
    for combo in itertools.product(v, c, il, tc, ic, vt):
        name = " ".join(n for n, _ in combo if n) or "nominal"
        vals = [x for _, x in combo]
        out.append({"name": name, "v_s": vals[0], "c": vals[1], "i_limit": vals[2],
                    "timer_c": vals[3], "i_charge": vals[4], "v_trip": vals[5]})
    return out


def _take_startup(st: StartupFigures, idx: np.ndarray) -> StartupFigures:
    kw = {}
    for f in fields(st):
        val = getattr(st, f.name)
        kw[f.name] = val[idx] if isinstance(val, np.ndarray) else None
    return StartupFigures(**kw)


def worst_rows(checks: dict, t_ambient: float) -> dict:
    """Row index of the worst case of every check (severity, then smallest margin)."""
    out = {}
    for spec in CHECKS:
        ch = checks[spec.id]
        mu = normalised_margin(spec, ch["value"], ch["limit"], t_ambient, ch["verdict"])
        order = np.lexsort((mu, -ch["verdict"].astype(int)))
        out[spec.id] = int(order[0])
    return out


def run_corners(rail: Rail, rules: dict, *, progress=None) -> dict:
    """Figures and checks at every tolerance corner.

    Parameters
    ----------
    rail : Rail
    rules : dict
    progress : callable, optional
        Called with the fraction done (0 .. 1); an exception it raises propagates.

    Returns
    -------
    dict
        ``corners`` (list from `corner_set`), ``params`` (RowParams), ``fig``, ``checks``
        (arrays over corners) and ``worst`` ({check id: corner index}).
    """
    cs = corner_set(rail)
    n = len(cs)
    if progress is not None:
        progress(0.0)
    v = np.array([c["v_s"] for c in cs], float)
    cap = np.array([c["c"] for c in cs], float)
    il = np.array([NO_LIMIT if c["i_limit"] is None else c["i_limit"] for c in cs], float)
    if rail.switch.timer is not None:
        tf = np.array([c["timer_c"] * c["v_trip"] / c["i_charge"] for c in cs], float)
    else:
        tf = np.full(n, np.inf)
    params = RowParams(v_s=v, c=cap, i_lim=il, v_sc=v, i_sc=il, t_fault_start=tf, t_fault_sc=tf, v_steady=v)
    key = np.stack([v, cap, il], axis=1)
    uniq, idx = np.unique(key, axis=0, return_inverse=True)
    idx = idx.reshape(-1)
    first = np.array([int(np.nonzero(idx == k)[0][0]) for k in range(uniq.shape[0])])
    st_u = startup_rows(rail, params.take(first))
    if np.any(st_u.status == STATUS_NO_CONVERGENCE):
        bad = [cs[first[k]]["name"] for k in np.nonzero(st_u.status == STATUS_NO_CONVERGENCE)[0]]
        raise AnalysisError(f"start-up transient did not converge at corner(s): {', '.join(bad)}")
    if progress is not None:
        progress(0.9)
    st = _take_startup(st_u, idx)
    fig, checks, _ = evaluate_rows(rail, rules, params, startup=st)
    if progress is not None:
        progress(1.0)
    return {"corners": cs, "params": params, "fig": fig, "checks": checks,
            "worst": worst_rows(checks, rail.t_ambient), "startup": st}
