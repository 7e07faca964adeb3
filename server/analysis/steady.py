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
"""

from __future__ import annotations

import numpy as np

from .circuit import circuit_rows
from .document import Rail
from .thermal import rds_at

__all__ = ["steady_state"]


def steady_state(rail: Rail, *, v_s) -> dict:
    """Steady conduction at rows of supply voltage.

    Parameters
    ----------
    rail : Rail
    v_s : ndarray, shape (n,)
        Supply voltage, V.

    Returns
    -------
    dict of ndarray
        ``i`` (A), ``p_fet`` (W), ``tj`` (degC), ``v_drop`` (V across the FET),
        ``stable`` (bool), ``dc_ok`` (bool: the load has a DC operating point); figures
        NaN where unstable or where there is no operating point.
    """
    v_s = np.atleast_1d(np.asarray(v_s, dtype=float))
    cz = circuit_rows(rail, v_s=v_s, c=np.full(v_s.shape, rail.load.c_nom))
    fet = rail.fet
    t_a = rail.t_ambient

    def gap(tj):
        _, i, ok = cz.final_output(tj)
        p = i * i * rds_at(fet.rds_on, fet.rds_on_alpha, tj)
        return t_a + fet.rth_ja * p - tj, ok

    grid = np.linspace(t_a, fet.tj_max, 65)
    g = gap(grid[:, None] + np.zeros(v_s.shape))[0]  # (65, n)
    ok = gap(np.full(v_s.shape, t_a))[1]
    below = g <= 0.0
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
    rds = rds_at(fet.rds_on, fet.rds_on_alpha, tj)
    nan = np.nan
    return {
        "i": np.where(found, i, nan),
        "p_fet": np.where(found, i * i * rds, nan),
        "tj": np.where(found, tj, nan),
        "v_drop": np.where(found, i * rds, nan),
        "stable": found,
        "dc_ok": ok,
    }
