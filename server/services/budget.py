"""The supply budget of a board: start-up currents of the rails sharing a supply, summed over time.

Rails share a supply when their documents give the same supply (same voltages, source
impedance, capability and UVLO). The budget assumes the worst case that every rail on a
supply turns on at the same instant (t = 0), each drawing its nominal start-up current
waveform, and holds each rail at its last computed current once its waveform ends.

Provides :func:`supply_key`, :func:`sum_currents` (pure) and :func:`board_budget`.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from server.services.access import Actor
from server.services.overview import board_rails

__all__ = ["supply_key", "sum_currents", "board_budget", "MAX_PLOT_POINTS", "MAX_RAIL_TRACES"]

MAX_PLOT_POINTS = 800
MAX_RAIL_TRACES = 8  # rails drawn one by one; the rest of a supply is drawn as one sum


def supply_key(supply: dict[str, Any]) -> str:
    """The identity of a supply: its canonical JSON."""
    return json.dumps(supply, sort_keys=True, separators=(",", ":"))


def sum_currents(waves: list[tuple[list[float], list[float]]]) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    """Each rail's current and their sum on the union of the rails' time points.

    Parameters
    ----------
    waves : list of (t, i)
        Each rail's start-up waveform: time in s (ascending, from 0) and current in A.

    Returns
    -------
    t : ndarray
        The union of all time points, s.
    each : list of ndarray
        Each rail's current on ``t``, A: linear between its samples, its last value after
        its waveform ends, 0 before its first sample.
    total : ndarray
        The sum, A. Because every current is piecewise linear between the union's points,
        the sum's peak lies on one of them: ``total.max()`` is the exact peak.
    """
    if not waves:
        return np.zeros(0), [], np.zeros(0)
    t = np.unique(np.concatenate([np.asarray(w[0], dtype=float) for w in waves]))
    each = []
    for tw, iw in waves:
        tw, iw = np.asarray(tw, dtype=float), np.asarray(iw, dtype=float)
        each.append(np.interp(t, tw, iw, left=0.0, right=float(iw[-1]) if iw.size else 0.0))
    return t, each, np.sum(each, axis=0)


def _thin(t: np.ndarray, ys: list[np.ndarray], total: np.ndarray) -> np.ndarray:
    """Indices of at most MAX_PLOT_POINTS samples, always keeping the first, last and peak sample."""
    if t.size <= MAX_PLOT_POINTS:
        return np.arange(t.size)
    idx = np.linspace(0, t.size - 1, MAX_PLOT_POINTS - 1).astype(int)
    return np.unique(np.append(idx, int(np.argmax(total))))


def board_budget(*, session: Session, actor: Actor, board_id: int,
                 rails: list[dict[str, Any]] | None = None) -> list[dict[str, Any]]:
    """One entry per supply of the board: its rails, the summed start-up current and its i_max.

    ``rails``: the board's rails as :func:`server.services.overview.board_rails` gives them
    (read again when not given).

    Each entry: ``supply`` (the section), ``rails`` [{id, name, analysed}], ``t`` and
    ``currents`` {rail name: [A]} and ``total`` [A] (thinned for plotting, the peak kept; the
    :data:`MAX_RAIL_TRACES` - 1 rails with the highest peaks by name, the others as one sum),
    ``peak`` (A, exact), ``t_peak`` (s), ``i_max`` (A or None), ``over`` (bool or None when
    the supply gives no i_max), ``missing`` (names of rails with no result yet).
    """
    if rails is None:
        rails = board_rails(session=session, actor=actor, board_id=board_id)["rails"]
    groups: dict[str, dict[str, Any]] = {}
    for r in rails:
        g = groups.setdefault(supply_key(r["supply"]), {"supply": r["supply"], "rails": [], "waves": [], "missing": []})
        g["rails"].append({"id": r["id"], "name": r["name"], "analysed": r["startup"] is not None})
        if r["startup"] is not None:
            g["waves"].append((r["name"], *r["startup"]))
        else:
            g["missing"].append(r["name"])
    out = []
    for g in sorted(groups.values(), key=lambda g: (-g["supply"]["v_nom"], supply_key(g["supply"]))):
        t, each, total = sum_currents([(w[1], w[2]) for w in g["waves"]])
        i_max = g["supply"].get("i_max")
        peak = float(total.max()) if total.size else None
        keep = _thin(t, each, total)
        order = sorted(range(len(each)), key=lambda k: -float(each[k].max()))
        shown = order if len(order) <= MAX_RAIL_TRACES else order[:MAX_RAIL_TRACES - 1]
        currents = {g["waves"][k][0]: each[k][keep].tolist() for k in sorted(shown)}
        rest = order[len(shown):]
        if rest:
            currents[f"{len(rest)} other rails"] = np.sum([each[k] for k in rest], axis=0)[keep].tolist()
        out.append({
            "supply": g["supply"], "rails": g["rails"], "missing": g["missing"],
            "t": t[keep].tolist(), "total": total[keep].tolist(), "currents": currents,
            "peak": peak, "t_peak": float(t[int(np.argmax(total))]) if total.size else None,
            "i_max": i_max, "over": None if i_max is None or peak is None else peak > i_max,
        })
    return out
