"""Safe operating area (SOA) of the FET: interpolation, temperature derating, pulse checks.

Provides
--------
derating_factor(fet, t_start)
    (tj_max - T) / (tj_max - t_case), clipped to [0, 1].
allowed_current(fet, v_ds, t_pulse, t_start)
    Current the derated curves allow for a rectangular pulse (vectorised).
soa_allowed_time(fet, v_ds, i_d, t_ambient)
    Longest rectangular pulse the derated curves allow at (v_ds, i_d) (vectorised).
derated_soa_curves(fet, t_ambient)
    The curves scaled to ``t_ambient``, for the SOA chart.
equivalent_rectangle(energy, p_peak)
    Duration of the rectangle of the same energy and peak power.
soa_envelope_notes(fet), soa_curve_warnings(fet), envelope_curves(fet)
    Where the conservative envelope reads a curve lower than drawn (a longer pulse's curve
    above a shorter one's; I_D rising with V_DS), as records, as warnings naming the curves,
    and as the curves the analysis reads, for the chart.

Method
------
Along one curve log(I) is interpolated linearly against log(V); between curves log(I) is
interpolated linearly against log(t_pulse). Below the first point of a curve its first
current holds; above its last point nothing is allowed. Pulses shorter than the shortest
curve get the shortest curve's current, and above the shortest curve's current nothing is
allowed at any pulse width. Nothing is extrapolated past the chart: a pulse longer than the
longest finite curve is allowed only the DC curve's current (no DC curve: nothing), so
between the longest finite curve and DC the allowed time is that curve's pulse width, as a
datasheet reader takes it. The allowed power is derated linearly with the starting junction
temperature T: factor (tj_max - T) / (tj_max - t_case) (the linear SOA derating of power
MOSFET application notes; common practice, not a standard), never above 1.

The curves are read as their conservative envelope. Read off a chart, a curve may rise with
V_DS somewhere, or a longer pulse's curve may lie above a shorter one's; neither can be
physical (a longer pulse heats the junction more; more voltage at the same current is more
power). Along a curve the current is the running minimum of its points from low V_DS up;
across the curves, a longer pulse (DC last) is allowed at each V_DS at most the least that any
shorter pulse's curve allows there, and where a shorter pulse's curve is not drawn, nothing
longer is allowed either. For curves that neither rise nor cross this is the chart as drawn.

A non-rectangular pulse is compared as the rectangle of the same energy and the same peak
power (t_equiv = E / P_peak); DESIGN.md section 4.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .document import Fet, SoaCurve
from .units import quantity

__all__ = [
    "derating_factor",
    "allowed_current",
    "soa_allowed_time",
    "derated_soa_curves",
    "equivalent_rectangle",
    "CurveCap",
    "CurveRise",
    "soa_envelope_notes",
    "soa_curve_warnings",
    "envelope_curves",
    "ENVELOPE",
    "CONVENTION",
]

CONVENTION = ("SOA read without extrapolation: between the longest pulse curve and DC the allowed time is the "
              "longest curve's pulse width (no DC curve: nothing longer is allowed); above the shortest curve's "
              "current nothing is allowed; the allowed power is derated linearly from the chart's case temperature "
              "to the maximum junction temperature (common practice, not a standard).")
ENVELOPE = ("The analysis reads the conservative envelope of the curves: along a curve, the current never rises with "
            "V_DS (the running minimum of its points from low V_DS up); across the curves, a longer pulse is never "
            "allowed more current than a shorter one (where curves cross, the longer pulse's curve is capped by "
            "the shorter one's).")
_ABOVE = 1e-9  # relative excess of a curve over another counted as crossing (rounding of the points aside)


class _Table:
    """Curve currents at given voltages: log t of finite curves and the DC curve.

    Built once per FET (`_table`); the curves' points are kept as log(V), log(I) arrays.
    """

    def __init__(self, fet: Fet) -> None:
        self.finite = [c for c in fet.curves if c.t_pulse is not None]
        self.dc = next((c for c in fet.curves if c.t_pulse is None), None)
        self.log_t = np.log([c.t_pulse for c in self.finite])
        self.fet = fet
        self._fin_logs = [self._logs(c) for c in self.finite]
        self._dc_logs = None if self.dc is None else self._logs(self.dc)

    @staticmethod
    def _logs(curve: SoaCurve) -> tuple[np.ndarray, np.ndarray]:
        """log V and log I of a curve's points, I as its running minimum from low V_DS up (the
        envelope; the points as given for a curve that never rises)."""
        return _curve_logs(curve)

    @staticmethod
    def _currents(logs: tuple[np.ndarray, np.ndarray], x: np.ndarray) -> np.ndarray:
        lv, li = logs
        out = np.exp(np.interp(x, lv, li))
        return np.where(x > lv[-1] + 1e-12, 0.0, out)

    def matrix(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Currents of the finite curves (m, n) and of the DC curve (n,) at voltages v.

        A longer pulse never allows more than a shorter one (running minimum along the
        pulse widths): where a short-pulse curve is not drawn up to v, nothing longer is
        allowed either (conservative).
        """
        x = np.log(np.maximum(v, 1e-300))
        fin = np.minimum.accumulate(np.stack([self._currents(lg, x) for lg in self._fin_logs]), axis=0)
        dc = None if self._dc_logs is None else np.minimum(self._currents(self._dc_logs, x), fin[-1])
        return fin, dc


def _curve_logs(curve: SoaCurve) -> tuple[np.ndarray, np.ndarray]:
    pts = np.asarray(curve.points, dtype=float)
    return np.log(pts[:, 0]), np.log(np.minimum.accumulate(pts[:, 1]))


@functools.lru_cache(maxsize=64)
def _table(fet: Fet) -> _Table:
    """The curve table of a FET (a frozen, hashable `Fet`), built once."""
    return _Table(fet)


def derating_factor(fet: Fet, t_start) -> np.ndarray:
    """Linear derating of the allowed SOA power with starting junction temperature.

    Parameters
    ----------
    fet : Fet
    t_start : float or ndarray
        Junction temperature at the start of the pulse, degC.

    Returns
    -------
    ndarray
        (tj_max - T) / (tj_max - t_case) clipped to [0, 1] (dimensionless).
    """
    k = (fet.tj_max - np.asarray(t_start, dtype=float)) / (fet.tj_max - fet.t_case)
    return np.clip(k, 0.0, 1.0)


def allowed_current(fet: Fet, v_ds, t_pulse, t_start) -> np.ndarray:
    """Drain current the derated SOA allows for a rectangular pulse.

    Parameters
    ----------
    fet : Fet
    v_ds : float or ndarray, shape (n,)
        Drain-source voltage during the pulse, V.
    t_pulse : float or ndarray, shape (n,)
        Pulse duration, s (``inf`` = DC).
    t_start : float or ndarray
        Junction temperature at the start of the pulse, degC.

    Returns
    -------
    ndarray, shape (n,)
        Allowed current in A.
    """
    v = np.atleast_1d(np.asarray(v_ds, dtype=float))
    t = np.broadcast_to(np.asarray(t_pulse, dtype=float), v.shape)
    tab = _table(fet)
    fin, dc = tab.matrix(v)
    m = fin.shape[0]
    with np.errstate(divide="ignore"):
        lfin = np.log(fin)
        lt = np.log(np.maximum(t, 1e-300))
    # between finite curves
    k = np.clip(np.searchsorted(tab.log_t, lt) - 1, 0, max(m - 2, 0))
    cols = np.arange(v.size)
    if m >= 2:
        t0, t1 = tab.log_t[k], tab.log_t[k + 1]
        i0, i1 = fin[k, cols], fin[k + 1, cols]
        w = np.clip((lt - t0) / (t1 - t0), 0.0, 1.0)
        both = (i0 > 0) & (i1 > 0)
        with np.errstate(invalid="ignore"):
            inner = np.where(both, np.exp(np.where(both, (1 - w) * lfin[k, cols] + w * lfin[k + 1, cols], 0.0)), 0.0)
    else:
        inner = fin[0]
    # shorter than the shortest curve: its current; longer than the longest finite curve:
    # the DC curve's (nothing without one); no extrapolation along the chart
    inner = np.where(lt <= tab.log_t[0], fin[0], inner)
    beyond = dc if dc is not None else np.zeros_like(inner)
    out = np.where(lt > tab.log_t[-1] + 1e-12 * (1.0 + abs(tab.log_t[-1])), beyond, inner)
    return out * derating_factor(fet, t_start)


def soa_allowed_time(fet: Any, v_ds, i_d, t_ambient) -> np.ndarray:
    """Longest rectangular pulse the derated SOA curves allow at (v_ds, i_d).

    Parameters
    ----------
    fet : Fet or dict
        The FET (a ``fet`` section of a rail document is accepted).
    v_ds : float or ndarray, shape (n,)
        Drain-source voltage, V.
    i_d : float or ndarray, shape (n,)
        Drain current, A.
    t_ambient : float
        Junction temperature at the start of the pulse, degC.

    Returns
    -------
    ndarray, shape (n,)
        Allowed duration in s; ``inf`` where the DC curve allows the point; 0 where even
        the shortest curve does not; the longest finite curve's pulse width where that
        curve allows the point and DC does not (no extrapolation past the chart).
    """
    fet = _as_fet(fet, t_ambient)
    v = np.atleast_1d(np.asarray(v_ds, dtype=float))
    i = np.broadcast_to(np.asarray(i_d, dtype=float), v.shape)
    tab = _table(fet)
    kd = derating_factor(fet, t_ambient)
    fin, dc = tab.matrix(v)
    fin = fin * kd
    m = fin.shape[0]
    cols = np.arange(v.size)
    # the longest finite curve that still allows the current
    allows = fin >= i  # (m, n); nonincreasing along m by validation
    k = np.sum(allows, axis=0) - 1  # index of the last allowing curve, -1 if none
    kk = np.clip(k, 0, m - 1)
    kn = np.clip(k + 1, 0, m - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        li = np.log(np.maximum(i, 1e-300))
        la, lb = np.log(fin[kk, cols]), np.log(fin[kn, cols])
        frac = np.where(fin[kn, cols] > 0, (li - la) / np.where(lb != la, lb - la, -1.0), 0.0)
        between = np.exp(tab.log_t[kk] + frac * (tab.log_t[kn] - tab.log_t[kk]))
    t = np.where(k < 0, 0.0, np.where(k >= m - 1, np.exp(tab.log_t[-1]), between))
    if dc is not None:
        t = np.where((dc * kd >= i) & (dc * kd > 0), np.inf, t)
    return np.where(i <= 0, np.inf, t)


def derated_soa_curves(fet: Any, t_ambient: float) -> list[dict]:
    """The SOA curves with the allowed current derated to ``t_ambient``.

    Parameters
    ----------
    fet : Fet or dict
        The FET (a ``fet`` section of a rail document is accepted).
    t_ambient : float
        Starting junction temperature, degC.

    Returns
    -------
    list of dict
        ``[{"t_pulse": s or None, "points": [[vds V, id A], ...]}, ...]``, shortest
        pulse first, DC last.
    """
    fet = _as_fet(fet, t_ambient)
    kd = float(derating_factor(fet, t_ambient))
    return [
        {"t_pulse": c.t_pulse, "points": [[v, i * kd] for v, i in c.points]}
        for c in fet.curves
    ]


def equivalent_rectangle(energy, p_peak) -> np.ndarray:
    """Duration of the rectangle with the same energy and the same peak power.

    Parameters
    ----------
    energy : float or ndarray
        Pulse energy, J.
    p_peak : float or ndarray
        Peak power of the pulse, W.

    Returns
    -------
    ndarray
        t_equiv = energy / p_peak in s (0 where p_peak is 0).
    """
    e = np.asarray(energy, dtype=float)
    p = np.asarray(p_peak, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p > 0, e / np.where(p > 0, p, 1.0), 0.0)


def _as_fet(fet: Any, t_ambient: float) -> Fet:
    if isinstance(fet, Fet):
        return fet
    from .document import _read_fet  # a fet section of a rail document

    return _read_fet({"fet": fet}, float(t_ambient) if t_ambient is not None else -273.15)


# ---------------------------------------------------------------------------
# where the envelope reads a curve lower than drawn


@dataclass(frozen=True)
class CurveCap:
    """A longer pulse's curve above a shorter one's from ``v_from`` to ``v_to`` (V): the analysis caps
    it there. ``curve`` and ``by`` are the pulse widths (s; None: DC) of the capped and the capping curve."""

    curve: float | None
    by: float | None
    v_from: float
    v_to: float


@dataclass(frozen=True)
class CurveRise:
    """A curve whose I_D rises with V_DS: ``count`` points from point ``index`` (0-based, in V_DS order)
    at ``v_from`` to ``v_to`` (V) are read lower, down to the running minimum; the largest cut is from
    ``i_given`` to ``i_used`` (A)."""

    curve: float | None
    index: int
    v_from: float
    v_to: float
    count: int
    i_given: float
    i_used: float


def _above(shorter: SoaCurve, longer: SoaCurve) -> list[tuple[float, float]]:
    """The V_DS intervals where ``longer`` (as read along itself) lies above ``shorter``, within the
    range the shorter one is drawn; exact for log-log interpolation (the difference is linear in
    log V between the union of the two curves' points, so each crossing is a linear root)."""
    (xa, ya), (xb, yb) = _curve_logs(shorter), _curve_logs(longer)
    x = np.unique(np.concatenate([xa, xb]))
    x = x[x <= min(xa[-1], xb[-1])]
    d = np.interp(x, xb, yb) - np.interp(x, xa, ya)
    above = d > _ABOVE
    out, k = [], 0
    while k < x.size:
        if not above[k]:
            k += 1
            continue
        start = k
        while k + 1 < x.size and above[k + 1]:
            k += 1
        lo = x[start] if start == 0 else x[start - 1] - d[start - 1] * (x[start] - x[start - 1]) / (d[start] - d[start - 1])
        hi = x[k] if k == x.size - 1 else x[k] + d[k] * (x[k + 1] - x[k]) / (d[k] - d[k + 1])
        out.append((math.exp(lo), math.exp(hi)))
        k += 1
    return out


def _rise(curve: SoaCurve) -> CurveRise | None:
    pts = np.asarray(curve.points, dtype=float)
    used = np.minimum.accumulate(pts[:, 1])
    cut = np.flatnonzero(pts[:, 1] > used * (1 + _ABOVE))
    if cut.size == 0:
        return None
    worst = int(cut[np.argmax(pts[cut, 1] / used[cut])])
    return CurveRise(curve=curve.t_pulse, index=int(cut[0]), v_from=float(pts[cut[0], 0]),
                     v_to=float(pts[cut[-1], 0]), count=int(cut.size), i_given=float(pts[worst, 1]),
                     i_used=float(used[worst]))


def soa_envelope_notes(fet: Any) -> tuple[list[CurveCap], list[CurveRise]]:
    """Where the conservative envelope the analysis reads lies below the curves as drawn.

    Parameters
    ----------
    fet : Fet or dict
        The FET (a ``fet`` section or a part document is accepted).

    Returns
    -------
    caps : list of CurveCap
        Every (shorter, longer) pair of curves where the longer pulse's curve lies above the
        shorter one's, within the V_DS range the shorter one is drawn, shortest pulses first.
    rises : list of CurveRise
        Every curve whose I_D rises with V_DS, shortest pulse first.

    Notes
    -----
    Both lists are empty for curves that neither cross nor rise: the envelope is then the
    chart as drawn (see the module's Method).
    """
    fet = _as_fet(fet, None)
    curves = list(fet.curves)
    rises = [r for r in map(_rise, curves) if r is not None]
    caps = [CurveCap(curve=longer.t_pulse, by=shorter.t_pulse, v_from=lo, v_to=hi)
            for k, longer in enumerate(curves) for shorter in curves[:k] for lo, hi in _above(shorter, longer)]
    return caps, rises


def _label(t_pulse: float | None) -> str:
    return "DC" if t_pulse is None else quantity(t_pulse, "s")


def _volts(v_from: float, v_to: float) -> str:
    return f"at {quantity(v_from, 'V')}" if math.isclose(v_from, v_to) else \
        f"from {quantity(v_from, 'V')} to {quantity(v_to, 'V')}"


def soa_curve_warnings(fet: Any) -> list[tuple[str, str]]:
    """The envelope's notes as warnings: ``(path, sentence)`` pairs naming the curves.

    ``fet`` is a ``fet`` section (dict, as stored: the paths index its curves as given, e.g.
    ``fet.soa.curves[2]``) or a `Fet` (curves indexed in pulse-width order). Empty for curves
    that neither cross nor rise.
    """
    given = fet["soa"]["curves"] if isinstance(fet, dict) else [{"t_pulse": c.t_pulse} for c in fet.curves]
    index = {c.get("t_pulse"): k for k, c in enumerate(given)}
    caps, rises = soa_envelope_notes(fet)
    out = []
    for r in rises:
        path = f"fet.soa.curves[{index[r.curve]}].points[{r.index}]"
        points = "a point" if r.count == 1 else f"{r.count} points"
        out.append((path, f"the {_label(r.curve)} curve's I_D rises with V_DS ({points} {_volts(r.v_from, r.v_to)}): "
                          f"the analysis reads the curve as its running minimum from low V_DS up "
                          f"(at most {quantity(r.i_given, 'A')} read as {quantity(r.i_used, 'A')})"))
    for c in caps:
        out.append((f"fet.soa.curves[{index[c.curve]}]",
                    f"the {_label(c.curve)} curve allows more current than the shorter {_label(c.by)} curve "
                    f"{_volts(c.v_from, c.v_to)}: the analysis caps it there at the {_label(c.by)} curve "
                    "(a longer pulse never allows more)"))
    return out


def envelope_curves(fet: Any, samples: int = 120) -> list[dict]:
    """The curves as the analysis reads them (the conservative envelope, not derated), for a chart.

    Returns
    -------
    list of dict
        ``[{"t_pulse": s or None, "points": [[vds V, id A], ...], "capped": bool}, ...]``,
        shortest pulse first, DC last; each curve sampled at ``samples`` log-spaced voltages
        plus its own points, over its drawn range where the envelope allows a current;
        ``capped``: the envelope lies below the curve somewhere.
    """
    fet = _as_fet(fet, None)
    tab = _table(fet)
    lo = min(c.points[0][0] for c in fet.curves)
    hi = max(c.points[-1][0] for c in fet.curves)
    out = []
    for k, c in enumerate(fet.curves):
        own = np.array([p[0] for p in c.points])
        v = np.unique(np.concatenate([own, np.geomspace(lo, hi, samples)]))
        v = v[(v >= own[0]) & (v <= own[-1])]
        fin, dc = tab.matrix(v)
        i = dc if c.t_pulse is None else fin[k]
        drawn = np.exp(np.interp(np.log(v), np.log(own), np.log([p[1] for p in c.points])))
        keep = i > 0
        out.append({"t_pulse": c.t_pulse, "points": [[float(a), float(b)] for a, b in zip(v[keep], i[keep])],
                    "capped": bool(np.any(i[keep] < drawn[keep] * (1 - _ABOVE)))})
    return out
