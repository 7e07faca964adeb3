"""Retry after a fault: the fault pulse train on the Foster network, endless or counted.

Provides
--------
retry_figures(r, tau, *, p, t_on, t_off, t_ambient, pulses=None)
    duty, p_avg, cool-down ratio and the peak junction temperature of the pulse train.

Method
------
In retry mode a shorted output sees the FET on for t_fault at the short-circuit power P,
then off for retry_off: for ever, or for a given number of pulses before the switch
latches (1 + the retries). For one Foster stage (tau dT/dt + T = r P(t)) the response to
pulse k (starting at k T, T = t_on + t_off) is superposed on the others (a linear
time-invariant network); at the end of pulse N the rise is

    T_N = r P (1 - exp(-t_on / tau)) sum_{k=0}^{N-1} q^k = r P a (1 - q^N) / (1 - q),
    a = 1 - exp(-t_on / tau), q = exp(-T / tau),

a geometric sum, increasing with N, so the peak of a finite train is at the end of its
last pulse. As N grows it tends to r P a / (1 - q), the periodic steady state found by
requiring T at the start of a period to equal T at its end (W. E. Boyce and R. C. DiPrima,
"Elementary Differential Equations", chapter 2; the periodic-steady-state argument of R.
W. Erickson and D. Maksimovic, "Fundamentals of Power Electronics", chapter 2): the peak
of an endless train, approached but not exceeded. All stages peak at the same instant, so
the junction peak is the sum over stages. The train starts from ``t_ambient`` (the
junction temperature at its start: the steady state at the operating point for a short
during operation, held under the pulses, conservatively).
"""

from __future__ import annotations

import numpy as np

__all__ = ["retry_figures"]


def retry_figures(r: np.ndarray, tau: np.ndarray, *, p, t_on, t_off, t_ambient, pulses=None) -> dict:
    """Peak junction temperature of a rectangular power pulse train.

    Parameters
    ----------
    r, tau : ndarray, shape (k,)
        Foster stages, K/W and s.
    p : ndarray, shape (n,)
        Power during the on-time, W.
    t_on : ndarray, shape (n,)
        On-time per period (the fault time), s.
    t_off : float or ndarray
        Off-time per period (retry_off), s (> 0).
    t_ambient : float or ndarray, shape (n,)
        Junction temperature the train starts from, degC.
    pulses : int, optional
        Number of pulses before the switch latches (None: endless).

    Returns
    -------
    dict of ndarray
        ``duty`` (fraction), ``p_avg`` (W), ``cooldown`` (t_off / t_on), ``tj_peak`` (degC:
        at the end of the last pulse, or the periodic steady state's), ``tj_valley`` (degC:
        at the start of the pulse that peaks; of the periodic state when endless).
    """
    p = np.atleast_1d(np.asarray(p, dtype=float))
    t_on = np.broadcast_to(np.asarray(t_on, dtype=float), p.shape)
    t_off = np.broadcast_to(np.asarray(t_off, dtype=float), p.shape)
    base = np.broadcast_to(np.asarray(t_ambient, dtype=float), p.shape)
    period = t_on + t_off
    duty = t_on / period
    a = -np.expm1(-t_on[:, None] / tau)  # 1 - exp(-t_on / tau)
    b = -np.expm1(-period[:, None] / tau)  # 1 - q = 1 - exp(-T / tau)
    decay = np.exp(-t_off[:, None] / tau)
    if pulses is None:
        peak = np.sum(r * p[:, None] * a / b, axis=1)
        valley = np.sum(r * p[:, None] * a / b * decay, axis=1)
    else:
        n_before = -np.expm1(-(pulses - 1) * period[:, None] / tau)  # 1 - q^(N-1)
        peak = np.sum(r * p[:, None] * a * -np.expm1(-pulses * period[:, None] / tau) / b, axis=1)
        valley = np.sum(r * p[:, None] * a * n_before / b * decay, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        cooldown = t_off / t_on
    return {"duty": duty, "p_avg": p * duty, "cooldown": cooldown, "tj_peak": base + peak, "tj_valley": base + valley}
