"""Retry after a fault: periodic steady state of the fault pulse train on the Foster network.

Provides
--------
retry_figures(r, tau, *, p, t_on, t_off, t_ambient)
    duty, p_avg and the peak junction temperature of the periodic steady state.

Method
------
In retry mode a shorted output sees the FET on for t_fault at the short-circuit power P,
then off for retry_off, for ever. For one Foster stage (tau dT/dt + T = r P(t)) driven by
that rectangular train the periodic steady state peaks at the end of each on-time at

    T_peak = r P (1 - exp(-t_on / tau)) / (1 - exp(-(t_on + t_off) / tau)),

found by requiring T at the start of a period to equal T at its end (the periodic solution
of a linear first-order system; e.g. W. E. Boyce and R. C. DiPrima, "Elementary
Differential Equations", chapter 2, and the periodic-steady-state argument of R. W.
Erickson and D. Maksimovic, "Fundamentals of Power Electronics", chapter 2). All stages
peak at the same instant, so the junction peak is the sum over stages.
"""

from __future__ import annotations

import numpy as np

__all__ = ["retry_figures"]


def retry_figures(r: np.ndarray, tau: np.ndarray, *, p, t_on, t_off, t_ambient: float) -> dict:
    """Periodic steady state of a rectangular power pulse train.

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
    t_ambient : float
        Ambient temperature, degC.

    Returns
    -------
    dict of ndarray
        ``duty`` (fraction), ``p_avg`` (W), ``tj_peak`` (degC), ``tj_valley`` (degC: at
        the start of each pulse).
    """
    p = np.atleast_1d(np.asarray(p, dtype=float))
    t_on = np.broadcast_to(np.asarray(t_on, dtype=float), p.shape)
    t_off = np.broadcast_to(np.asarray(t_off, dtype=float), p.shape)
    period = t_on + t_off
    duty = t_on / period
    a = -np.expm1(-t_on[:, None] / tau)  # 1 - exp(-t_on / tau)
    b = -np.expm1(-period[:, None] / tau)  # 1 - exp(-T / tau)
    peak = np.sum(r * p[:, None] * a / b, axis=1)
    valley = np.sum(r * p[:, None] * a / b * np.exp(-t_off[:, None] / tau), axis=1)
    return {"duty": duty, "p_avg": p * duty, "tj_peak": t_ambient + peak, "tj_valley": t_ambient + valley}
