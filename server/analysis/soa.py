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

A non-rectangular pulse is compared as the rectangle of the same energy and the same peak
power (t_equiv = E / P_peak); DESIGN.md section 4.
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np

from .document import Fet, SoaCurve

__all__ = [
    "derating_factor",
    "allowed_current",
    "soa_allowed_time",
    "derated_soa_curves",
    "equivalent_rectangle",
    "CONVENTION",
]

CONVENTION = ("SOA read without extrapolation: between the longest pulse curve and DC the allowed time is the "
              "longest curve's pulse width (no DC curve: nothing longer is allowed); above the shortest curve's "
              "current nothing is allowed; the allowed power is derated linearly from the chart's case temperature "
              "to the maximum junction temperature (common practice, not a standard).")


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
        pts = np.asarray(curve.points, dtype=float)
        return np.log(pts[:, 0]), np.log(pts[:, 1])

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
    out = np.where(lt > tab.log_t[-1] * (1 + 1e-12) + 1e-12, beyond, inner)
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
