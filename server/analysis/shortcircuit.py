"""Output short circuit while the switch limits: how long the FET survives it.

Provides
--------
short_circuit(rail, *, v_ds, i_limit, t_fault, t_start=None)
    V_ds, I, P, t_soa, t_thermal, t_allow and margin for rows of (v_ds, i_limit, t_fault),
    the junction starting at t_start.
has_limit(rail)
    Whether the switch limits a short-circuit current at all.

Method
------
With the output shorted the whole supply stands across the regulating FET: V_ds = v_max
(DESIGN.md section 4; conservative: the drop in the source and path resistance is not
subtracted), I = i_limit at its high tolerance (power limit: I = min(i_limit, p_limit /
V_ds), so P = p_limit while the power limit binds). Two independent limits: the derated
SOA curves (`soa.soa_allowed_time`, measured curves include the hot-spot instability at
high V_ds that a thermal model misses) and the Foster network (`thermal.time_to_rise`,
time for Zth(t) P to reach tj_max - t_start). t_allow is the smaller one and
margin = t_allow / t_fault_max. With FETs in parallel the regulating FETs share the current
as the team's ``linear_share`` rule says (default: one FET carries it all, threshold spread;
common practice, no source): the SOA and the Foster network are read for that FET's current
``i_fet = share I`` and power ``p = V_ds i_fet``. The current is regulated: Rds(on), and so
its data over temperature, does not enter.

A short during operation starts from the junction temperature of the operating point
(t_start: the steady state's, `faults.start_temperature`): the SOA is derated from it and
the Foster rise P Zth(t) adds to it (superposition on the steady state; conservative, as
the conduction loss it replaces is not subtracted). Without t_start the ambient is taken.
The regulated current comes from `faults.regulated_current` (where a foldback curve enters).
"""

from __future__ import annotations

import numpy as np

from .circuit import NO_LIMIT
from .document import Rail
from .faults import regulated_current
from .soa import soa_allowed_time
from .thermal import foster_arrays, time_to_rise

__all__ = ["has_limit", "short_circuit"]


def has_limit(rail: Rail) -> bool:
    """Whether the switch limits the current into a shorted output."""
    return rail.switch.i_limit is not None


def short_circuit(rail: Rail, *, v_ds, i_limit, t_fault, t_start=None, share: float = 1.0) -> dict:
    """Short-circuit figures for rows of operating conditions.

    Parameters
    ----------
    rail : Rail
    v_ds : ndarray, shape (n,)
        Voltage across the FET, V (normally v_max).
    i_limit : ndarray, shape (n,)
        Current limit, A (normally at its high tolerance).
    t_fault : ndarray, shape (n,)
        Time until the fault timer turns the FET off, s (``inf`` without a timer).
    t_start : ndarray, shape (n,), optional
        Junction temperature at the start of the short, degC (default: the ambient).
    share : float
        The share of the current the worst of parallel FETs carries (1: one FET).

    Returns
    -------
    dict of ndarray
        ``v_ds`` (V), ``i`` (A, the switch's), ``i_fet`` (A, the worst FET's), ``p`` (W, the
        worst FET's), ``t_soa``, ``t_thermal``, ``t_allow`` (s,
        ``inf`` = indefinitely), ``margin`` (t_allow / t_fault; ``inf`` when the FET
        survives indefinitely, 0 when it does not and nothing turns it off), ``t_start``
        (degC).
    """
    v = np.atleast_1d(np.asarray(v_ds, dtype=float))
    i = np.minimum(regulated_current(rail, v, i_limit), NO_LIMIT)
    i_fet = i * share if share != 1.0 else i
    p = v * i_fet
    fet = rail.fet
    if t_start is None:
        t0 = np.full(v.shape, float(rail.t_ambient))
        t_soa = soa_allowed_time(fet, v, i_fet, rail.t_ambient)
    else:
        t0 = np.broadcast_to(np.asarray(t_start, dtype=float), v.shape).copy()
        t_soa = soa_allowed_time(fet, v, i_fet, t0)
    r, tau = foster_arrays(fet.zth)
    t_th = time_to_rise(r, tau, p, fet.tj_max - t0)
    t_allow = np.minimum(t_soa, t_th)
    tf = np.broadcast_to(np.asarray(t_fault, dtype=float), v.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        margin = np.where(np.isinf(t_allow), np.inf, np.where(np.isinf(tf), 0.0, t_allow / tf))
    return {"v_ds": v, "i": i, "i_fet": i_fet, "p": p, "t_soa": t_soa, "t_thermal": t_th, "t_allow": t_allow,
            "margin": margin, "t_start": t0}
