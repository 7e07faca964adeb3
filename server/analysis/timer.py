"""Fault timer of a regulating switch: trip times, start-up margin and capacitor window.

Provides
--------
fault_time(c, v_trip, i_charge)
    t_fault = c v_trip / i_charge (vectorised).
fault_times(timer)
    (t_fault_min, t_fault_nom, t_fault_max) over the part tolerances.
timer_window(timer, *, t_limit_worst, t_allow, timer_margin, fault_margin)
    The range of timer capacitors meeting both margins, a suggested E12 value and, when
    the range is empty, a note saying which constraint closes it and by how much.

Method
------
The timer capacitor is charged by a constant current while the switch regulates and the
timer trips when its voltage reaches v_trip: t = C V / I (charge of a capacitor by a
constant current, Q = C V = I t; any circuits textbook, e.g. Alexander and Sadiku,
"Fundamentals of Electric Circuits", section 6.2). The shortest trip time takes the small
capacitor and trip voltage with the large charge current, the longest the opposite.
A good start must not trip: t_fault_min >= timer_margin * t_limit (worst case); a short
circuit must trip in time: t_fault_max <= t_allow / fault_margin. Suggested capacitor: the
E12 value (IEC 60063) nearest to the geometric centre of the window. Both margins are
common practice, not a standard.
"""

from __future__ import annotations

import math

import numpy as np

from .document import Timer
from .eseries import round_to_series, values_between

__all__ = ["fault_time", "fault_times", "timer_window"]


def fault_time(c, v_trip, i_charge):
    """Time for a constant charge current to bring the timer capacitor to v_trip.

    Parameters
    ----------
    c : float or ndarray
        Timer capacitance, F.
    v_trip : float or ndarray
        Trip voltage, V.
    i_charge : float or ndarray
        Charge current, A.

    Returns
    -------
    float or ndarray
        t_fault in s.
    """
    return np.asarray(c) * np.asarray(v_trip) / np.asarray(i_charge)


def fault_times(timer: Timer) -> tuple[float, float, float]:
    """Shortest, nominal and longest trip time over the part tolerances.

    Parameters
    ----------
    timer : Timer

    Returns
    -------
    (t_fault_min, t_fault_nom, t_fault_max) : tuple of float, s
    """
    nom = timer.c * timer.v_trip / timer.i_charge
    lo = (timer.c * (1 - timer.c_tol)) * (timer.v_trip * (1 - timer.v_trip_tol)) / (timer.i_charge * (1 + timer.i_charge_tol))
    hi = (timer.c * (1 + timer.c_tol)) * (timer.v_trip * (1 + timer.v_trip_tol)) / (timer.i_charge * (1 - timer.i_charge_tol))
    return float(lo), float(nom), float(hi)


def _eng(x: float, unit: str) -> str:
    from .units import eng

    return eng(x, unit)


def timer_window(
    timer: Timer,
    *,
    t_limit_worst: float,
    t_allow: float,
    timer_margin: float,
    fault_margin: float,
) -> dict:
    """Timer capacitors meeting both the start-up and the short-circuit margin.

    Parameters
    ----------
    timer : Timer
        Its tolerances set the spread of the trip time for a given capacitor.
    t_limit_worst : float
        Worst-case time the switch regulates during a good start, s (0: never).
    t_allow : float
        Time the FET survives the short circuit, s (``inf``: indefinitely).
    timer_margin, fault_margin : float
        Team rules (ratios >= 1).

    Returns
    -------
    dict
        ``c_lo``, ``c_hi`` (F; 0 and ``inf`` when unconstrained), ``c_window``
        ([c_lo, c_hi] or None when empty), ``c_suggested`` (F, E12, or None) and
        ``window_note`` (text or None).
    """
    spread_lo = (1 - timer.c_tol) * timer.v_trip * (1 - timer.v_trip_tol) / (timer.i_charge * (1 + timer.i_charge_tol))
    spread_hi = (1 + timer.c_tol) * timer.v_trip * (1 + timer.v_trip_tol) / (timer.i_charge * (1 - timer.i_charge_tol))
    c_lo = timer_margin * t_limit_worst / spread_lo if t_limit_worst > 0 else 0.0
    c_hi = (t_allow / fault_margin) / spread_hi if math.isfinite(t_allow) else math.inf
    out = {"c_lo": c_lo, "c_hi": c_hi, "c_window": None, "c_suggested": None, "window_note": None}
    if c_lo > c_hi:
        ratio = c_lo / c_hi if c_hi > 0 else math.inf
        start_at_hi = (c_hi * spread_lo / t_limit_worst) if c_hi > 0 else 0.0
        out["window_note"] = (
            f"No timer capacitor meets both margins: the start-up needs at least {_eng(c_lo, 'F')} (the team's "
            f"timer margin {timer_margin:g} × the worst-case regulation time {_eng(t_limit_worst, 's')}), the "
            f"short circuit allows at most {_eng(c_hi, 'F')} (the time the FET survives it, "
            f"{_eng(t_allow, 's')}, over the team's fault margin {fault_margin:g}); the window is closed by a "
            f"factor {ratio:.3g}. At {_eng(c_hi, 'F')} the start-up margin would be {start_at_hi:.3g}. "
            "Shorten the regulated start (a lower slew rate or load capacitance, a higher current limit) "
            "or choose a FET with more SOA at the supply maximum."
        )
        return out
    out["c_window"] = [c_lo, c_hi]
    lo_eff = c_lo if c_lo > 0 else (c_hi / 10.0 if math.isfinite(c_hi) else None)
    hi_eff = c_hi if math.isfinite(c_hi) else (c_lo * 10.0 if c_lo > 0 else None)
    if lo_eff is None or hi_eff is None:
        return out  # unconstrained both ways: nothing to suggest
    centre = math.sqrt(lo_eff * hi_eff)
    for series in ("E12", "E24"):
        candidates = values_between(lo_eff, hi_eff, series)
        if candidates:
            pick = min(candidates, key=lambda v: abs(math.log(v / centre)))
            if series == "E12":
                out["c_suggested"] = pick
            else:
                out["window_note"] = (
                    f"The window {_eng(c_lo, 'F')} .. {_eng(c_hi, 'F')} holds no E12 value; "
                    f"the E24 value {_eng(pick, 'F')} fits."
                )
            return out
    out["window_note"] = (
        f"The window {_eng(c_lo, 'F')} .. {_eng(c_hi, 'F')} holds no E12 or E24 value; "
        f"the nearest E12 value is {_eng(round_to_series(centre), 'F')}."
    )
    return out
