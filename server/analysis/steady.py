"""Steady conduction of the switched rail: FET heating with Rds(on) rising with Tj.

Provides
--------
steady_state(rail, *, v_s)
    p_fet, tj, v_drop, i and ``stable`` for rows of supply voltage.

Method
------
With the switch fully on the load current i(Tj) follows from the DC operating point
(`Circuit.final_output`) and the junction temperature is the fixed point of

    tj = t_ambient + rth_ja * i(tj)^2 * rds_on * (1 + alpha (tj - 25)).

The lowest fixed point in [t_ambient, tj_max] is the stable operating point; it is
bracketed on a grid of 65 temperatures, refined by 16 bisections and finished by linear
interpolation (error far below 1e-6 K). Where the heating exceeds the cooling up to
tj_max there is no fixed point below tj_max: thermal runaway, ``stable`` is False. For a
constant-current load the equation is linear, tj = (t_ambient + k (1 - 25 alpha)) /
(1 - k alpha) with k = rth_ja i^2 rds_on, a closed form the tests use (the electro-thermal
runaway condition k alpha >= 1 of power MOSFET application notes; common practice).

Rds(on) against Tj comes from the part's data (`thermal.RdsTemperature`): its table where
given, else the linear coefficient up to tj_max. The search runs up to where the data ends
(the lower of tj_max and the table's last point); a fixed point that would lie beyond a
table ending below tj_max is not extrapolated to: the row reads "beyond the part's data"
(``beyond``), neither stable nor runaway.

Parallel FETs (``fet.count`` identical parts): the switch conducts through all of them,
each at the row's Rds(on) (the drop and the total current i), and the FET followed is the
one that takes the largest current the spread allows: the current divider of that FET at
the row's Rds(on) against the other count - 1 at the part's maximum ``rds_on_max`` (or at
the same Rds(on) without a maximum), i_fet = i (1/R) / (1/R + (count - 1)/R_max), all at the
same junction temperature (the followed FET's: the others' Rds(on) as high as it can be,
which gives it the larger share). Its power is i_fet^2 R(Tj) through rth_ja (one per FET).
The worst-case search over the row's Rds(on) finds the hottest FET of the spread.
"""

from __future__ import annotations

import numpy as np

from .circuit import circuit_rows
from .document import Rail
from .thermal import conduction_share

__all__ = ["steady_state"]


def steady_state(rail: Rail, *, v_s, rds=None) -> dict:
    """Steady conduction at rows of supply voltage.

    Parameters
    ----------
    rail : Rail
    v_s : ndarray, shape (n,)
        Supply voltage, V.
    rds : ndarray, shape (n,), optional
        Rds(on) at 25 degC of the FET per row, ohm (default the part's typical ``rds_on``).

    Returns
    -------
    dict of ndarray
        ``i`` (A, the switch's), ``i_fet`` (A, the hottest FET's), ``p_fet`` (W, its power),
        ``tj`` (degC), ``v_drop`` (V across the switch), ``stable`` (bool), ``dc_ok`` (bool:
        the load has a DC operating point), ``beyond`` (bool: the fixed point would lie
        beyond the part's Rds(on) data); figures NaN where unstable, beyond the data or where
        there is no operating point.
    """
    v_s = np.atleast_1d(np.asarray(v_s, dtype=float))
    fet = rail.fet
    rds = np.full(v_s.shape, fet.rds_on) if rds is None else np.broadcast_to(np.asarray(rds, dtype=float), v_s.shape)
    cz = circuit_rows(rail, v_s=v_s, c=np.full(v_s.shape, rail.load.c_nom), rds=rds)
    t_a = rail.t_ambient
    rds_t = cz.rds_t
    count = fet.count
    share = None if count == 1 else conduction_share(rds, count, fet.rds_on_max if fet.rds_on_max else rds)

    def gap(tj):
        _, i, ok = cz.final_output(tj)
        ik = i if share is None else share * i
        p = ik * ik * (rds * rds_t.ratio(tj))
        return t_a + fet.rth_ja * p - tj, ok

    t_top = min(fet.tj_max, rds_t.t_high)  # the search ends where the data ends
    short = t_top < fet.tj_max  # a table ending below tj_max
    grid = np.linspace(t_a, max(t_top, t_a), 65)
    g = gap(grid[:, None] + np.zeros(v_s.shape))[0]  # (65, n)
    ok = gap(np.full(v_s.shape, t_a))[1]
    below = g <= 0.0
    if t_top <= t_a:
        below[:] = False
    found = below.any(axis=0) & ok
    j = np.argmax(below, axis=0)
    hi = grid[j]
    lo = grid[np.maximum(j - 1, 0)]
    for _ in range(16):
        mid = 0.5 * (lo + hi)
        gm = gap(mid)[0]
        hi = np.where(gm <= 0.0, mid, hi)
        lo = np.where(gm <= 0.0, lo, mid)
    ga, gb = gap(lo)[0], gap(hi)[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(ga > gb, ga / (ga - gb), 1.0)
    tj = np.where(j == 0, t_a, lo + np.clip(w, 0.0, 1.0) * (hi - lo))
    _, i, _ = cz.final_output(tj)
    ik = i if share is None else share * i
    r_fet = rds * rds_t.ratio(tj)
    r_sw = r_fet if count == 1 else cz.rds_on * rds_t.ratio(tj)
    beyond = ok & ((~found & short) | rds_t.beyond(np.where(found, tj, t_a)))
    found = found & ~beyond
    nan = np.nan
    return {
        "i": np.where(found, i, nan),
        "i_fet": np.where(found, ik, nan),
        "p_fet": np.where(found, ik * ik * r_fet, nan),
        "tj": np.where(found, tj, nan),
        "v_drop": np.where(found, i * r_sw, nan),
        "stable": found,
        "dc_ok": ok,
        "beyond": beyond,
    }
