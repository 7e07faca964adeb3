"""First-order lag of a piecewise-linear input: exact update and exact minimum over a step.

Provides
--------
lag_advance(y0, u0, u1, dt, tau)
    Output of the lag at the end of a step and its lowest value inside the step, for
    rows of arrays (V, s).
lag_advance_floats(y0, u0, u1, dt, tau)
    The same for one row on Python floats.

Used for the switch-input voltage as an upstream undervoltage lockout sees it: a UVLO
comparator has a deglitch filter, modelled as the first-order lag
tau dy/dt + y = u(t) (tau = ``supply.uvlo_filter``; 1 us by default, common practice, no
source).

Method
------
With u linear over a step of length dt, u(t) = u0 + q t / dt, the lag has the closed form
(linear first-order equation, W. E. Boyce and R. C. DiPrima, "Elementary Differential
Equations", chapter 2; the first-order system of any control textbook, e.g. K. Ogata,
"Modern Control Engineering", section 5-2)

    y(t) = u0 + q (t - tau) / dt + (y0 - u0 + q tau / dt) exp(-t / tau),

so y(dt) = y0 e + u0 (1 - e) + q (1 - (1 - e) tau / dt), e = exp(-dt / tau), exact for
any step however long. Its derivative vanishes where y = u, which inside the step
happens only when the input rises (q > 0) while the output is still above it (y0 > u0):
at t* = tau ln(1 + (y0 - u0) dt / (q tau)), where y(t*) = u(t*). The lowest value over
the step is therefore min(y(dt), u(t*) if 0 < t* < dt): exact, not sampled.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["lag_advance", "lag_advance_floats"]


def lag_advance(y0, u0, u1, dt, tau: float, floor=None):
    """Advance a first-order lag over one step with its input linear in the step.

    Parameters
    ----------
    y0 : ndarray, shape (n,)
        Lag output at the start of the step (V).
    u0, u1 : ndarray, shape (n,)
        Input at the start and at the end of the step (V).
    dt : ndarray, shape (n,)
        Step length, s (> 0).
    tau : float
        Time constant, s (> 0).
    floor : ndarray, shape (n,), optional
        Where the input starts at or above ``floor`` (V) the lowest value is only looked
        for at the end of the step: inside it the output cannot fall below the input's
        start when it has a minimum there, so it cannot fall below ``floor``.

    Returns
    -------
    y1 : ndarray, shape (n,)
        Output at the end of the step (V).
    y_low : ndarray, shape (n,)
        Lowest output inside the step, end included (V); with ``floor``, exact where it
        is below ``floor``.

    Notes
    -----
    Closed form of the module docstring (Boyce and DiPrima, chapter 2).
    """
    x = dt * (1.0 / tau)
    e1 = -np.expm1(-x)  # 1 - e, accurate for small x
    q = u1 - u0
    d = y0 - u0
    y1 = y0 - e1 * d + q * (1.0 - e1 / x)
    # interior minimum: rising input below a falling output; it is u(t*) >= u0
    rise = (q > 0.0) & (d > 0.0)
    if floor is not None:
        rise = rise & (u0 < floor)
        if not rise.any():
            return y1, y1
    qs = np.where(rise, q, 1.0)
    z = np.log1p(np.where(rise, d, 0.0) * x / qs)  # t* / tau
    inside = rise & (z < x)
    y_low = np.where(inside, np.minimum(u0 + qs * z / x, y1), y1)
    return y1, y_low


def lag_advance_floats(y0: float, u0: float, u1: float, dt: float, tau: float,
                       floor: float | None = None) -> tuple[float, float]:
    """`lag_advance` for one row on Python floats (V, s)."""
    x = dt / tau
    e1 = -math.expm1(-x)
    q = u1 - u0
    d = y0 - u0
    y1 = y0 - e1 * d + q * (1.0 - e1 / x)
    if q > 0.0 and d > 0.0 and (floor is None or u0 < floor):
        z = math.log1p(d * x / q)
        if z < x:
            return y1, min(u0 + q * z / x, y1)
    return y1, y1
