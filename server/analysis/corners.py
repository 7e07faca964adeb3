"""Tolerance corners: every combination of the extremes of the toleranced parameters.

Provides
--------
corner_set(rail)
    The corners: parameter values and their description in words.
corner_params(corners)
    The corners as `RowParams` rows.
point_words(rail, v_s, c, i_lim, t_fault, timer=None)
    A point of the tolerance box in words ("supply 18 V (min), load C +20 %, ...").

Method
------
A full factorial of the two extremes of every parameter that has a spread: the supply
(v_min, v_max), the load capacitance (c_nom (1 -/+ c_tol)), the current limit
(i_limit (1 -/+ i_limit_tol)) and the timer capacitor, charge current and trip voltage
(each nominal (1 -/+ tol)), and where the part gives a maximum Rds(on) the FET's Rds(on)
at 25 degC (typical ``rds_on`` and maximum ``rds_on_max``), all at t_ambient (the
worst-case high ambient of the document). At most 2^7 = 128 corners (2^6 = 64 without an
Rds(on) maximum). The timer's three parts act through one figure, the
trip time t_fault = C v_trip / i_charge (`timer.fault_time`). Corners alone bound a check
only where it is monotone in each parameter; the worst-case search (`worstcase`) looks
inside the box as well.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from .bank import group_total, multipliers
from .circuit import NO_LIMIT
from .document import Rail
from .evaluation import RowParams
from .units import eng
from .words import PARAM_WORDS

__all__ = ["corner_set", "corner_params", "point_words", "c_levels", "c_range", "PARAM_WORDS", "ALL_PARAMETERS"]



def _levels(nominal: float, tol: float):
    if tol > 0:
        return [nominal * (1 - tol), nominal * (1 + tol)]
    return [nominal]


def _relative(value: float, nominal: float) -> str:
    """A deviation from nominal in percent, with a true minus sign: "+20 %", "−10 %"."""
    pct = 100.0 * (value / nominal - 1.0)
    if abs(pct) < 5e-4:
        return "nominal"
    text = f"{abs(pct):.3g} %"
    return ("+" if pct > 0 else "\u2212") + text


def c_levels(rail: Rail) -> list[tuple[float, np.ndarray | None]]:
    """The load capacitance at the corners: (total F, the bank's group multipliers or None). A
    bank moves every group's tolerance (and derating range) together: all low, all high."""
    load = rail.load
    if load.bank is None:
        return [(c, None) for c in _levels(load.c_nom, load.c_tol)]
    if load.c_tol <= 0:
        return [(load.c_nom, None)]
    totals = np.array([group_total(g, rail.t_ambient) for g in load.bank])
    return [(float((totals * m).sum()), m) for m in (multipliers(load.bank, level) for level in ("low", "high"))]


def c_range(rail: Rail) -> tuple[float, float]:
    """The load capacitance's lowest and highest total at the corners, F."""
    levels = [c for c, _ in c_levels(rail)]
    return min(levels), max(levels)


ALL_PARAMETERS = frozenset({"v_s", "c", "i_limit", "timer", "rds_on"})


def rds_levels(rail: Rail) -> list[float]:
    """The FET's Rds(on) at 25 degC at the corners: typical and maximum, or the typical alone."""
    fet = rail.fet
    if fet.rds_on_max is not None and fet.rds_on_max > fet.rds_on:
        return [fet.rds_on, fet.rds_on_max]
    return [fet.rds_on]


def _rds_words(rail: Rail, rds: float) -> str:
    fet = rail.fet
    if math.isclose(rds, fet.rds_on, rel_tol=1e-9):
        return f"{PARAM_WORDS['rds_on']} typical"
    if math.isclose(rds, fet.rds_on_max, rel_tol=1e-9):
        return f"{PARAM_WORDS['rds_on']} maximum"
    return f"{PARAM_WORDS['rds_on']} {eng(rds, 'ohm')}"


def point_words(rail: Rail, v_s: float, c: float, i_lim: float, t_fault: float,
                timer: tuple[float, float, float] | None = None, keys=ALL_PARAMETERS, rds: float | None = None) -> str:
    """A point of the tolerance box in words.

    Parameters
    ----------
    rail : Rail
    v_s, c, i_lim, t_fault : float
        The point: supply (V), load capacitance (F), current limit (A), trip time (s).
    timer : (timer C, charge current, trip voltage), optional
        A corner names the timer's three parts; otherwise its trip time is given.
    keys : set of str
        The parameters to name (of "v_s", "c", "i_limit", "timer", "rds_on"): those the
        figure described depends on.
    rds : float, optional
        The FET's Rds(on) at 25 degC, ohm (named where the part gives a maximum).

    Returns
    -------
    str
        Only parameters with a spread are named, e.g. "supply 18 V (min), load C +20 %,
        current limit −10 %, timer C −10 %"; "nominal" when every one sits at nominal.
    """
    s, sw, parts = rail.supply, rail.switch, []
    if s.v_max > s.v_min and "v_s" in keys:
        tag = ("min" if math.isclose(v_s, s.v_min, rel_tol=1e-9) else "max" if math.isclose(v_s, s.v_max, rel_tol=1e-9)
               else "nominal" if math.isclose(v_s, s.v_nom, rel_tol=1e-9) else None)
        parts.append(f"{PARAM_WORDS['v_s']} {eng(v_s, 'V')}" + (f" ({tag})" if tag else ""))
    if rail.load.c_tol > 0 and "c" in keys:
        parts.append(f"{PARAM_WORDS['c']} {_relative(c, rail.load.c_nom)}")
    if sw.i_limit is not None and sw.i_limit_tol > 0 and "i_limit" in keys:
        parts.append(f"{PARAM_WORDS['i_limit']} {_relative(i_lim, sw.i_limit)}")
    t = sw.timer
    if t is not None and "timer" in keys:
        if timer is not None:
            for key, value, nominal, tol in (("timer_c", timer[0], t.c, t.c_tol),
                                             ("i_charge", timer[1], t.i_charge, t.i_charge_tol),
                                             ("v_trip", timer[2], t.v_trip, t.v_trip_tol)):
                if tol > 0:
                    parts.append(f"{PARAM_WORDS[key]} {_relative(value, nominal)}")
        elif t.c_tol > 0 or t.i_charge_tol > 0 or t.v_trip_tol > 0:
            parts.append(f"{PARAM_WORDS['t_fault']} trips after {eng(t_fault, 's')}")
    if rds is not None and "rds_on" in keys and len(rds_levels(rail)) > 1:
        parts.append(_rds_words(rail, rds))
    if not parts or all(p.endswith("nominal") for p in parts):
        return "nominal"
    return ", ".join(parts)


def corner_set(rail: Rail) -> list[dict]:
    """All tolerance corners of a rail.

    Returns
    -------
    list of dict
        ``{"name" (words), "v_s" (V), "c" (F), "i_limit" (A or None), "timer_c" (F),
        "i_charge" (A), "v_trip" (V), "t_fault" (s, inf without a timer), "rds" (ohm, the
        FET's Rds(on) at 25 degC)}``; timer parts None without a timer.
    """
    s = rail.supply
    v = [s.v_min, s.v_max] if s.v_max > s.v_min else [s.v_nom]
    c = c_levels(rail)
    sw = rail.switch
    il = _levels(sw.i_limit, sw.i_limit_tol) if sw.i_limit is not None else [None]
    t = sw.timer
    if t is not None:
        tc, ic, vt = _levels(t.c, t.c_tol), _levels(t.i_charge, t.i_charge_tol), _levels(t.v_trip, t.v_trip_tol)
    else:
        tc = ic = vt = [None]
    out = []
    for vv, (cc, mult), ii, a, b, d, rr in itertools.product(v, c, il, tc, ic, vt, rds_levels(rail)):
        t_fault = a * d / b if t is not None else math.inf
        i_row = ii if ii is not None else NO_LIMIT
        name = point_words(rail, vv, cc, i_row, t_fault, (a, b, d) if t is not None else None, rds=rr)
        out.append({"name": name, "v_s": vv, "c": cc, "i_limit": ii, "timer_c": a, "i_charge": b, "v_trip": d,
                    "t_fault": t_fault, "rds": rr, "bank": mult})
    return out


def corner_params(corners: list[dict]) -> RowParams:
    """The corners as rows of operating conditions."""
    arr = lambda key, default=None: np.array(  # noqa: E731
        [default if c[key] is None else c[key] for c in corners], dtype=float)
    bank = None
    if any(c.get("bank") is not None for c in corners):
        groups = next(c["bank"] for c in corners if c.get("bank") is not None).shape[0]
        bank = np.array([np.ones(groups) if c.get("bank") is None else c["bank"] for c in corners])
    return RowParams(v_s=arr("v_s"), c=arr("c"), i_lim=arr("i_limit", NO_LIMIT), t_fault=arr("t_fault"),
                     rds=arr("rds"), bank=bank)
