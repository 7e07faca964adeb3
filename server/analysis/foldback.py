"""The foldback current limit: the current a controller allows, falling with the FET's V_DS.

Provides
--------
foldback_limit(points, v_ds)
    The limit at ``v_ds`` (vectorised): piecewise linear between the points, held flat
    beyond the ends.
foldback_slope(points, v_ds)
    Its slope dI/dV_DS there (A/V; 0 beyond the ends).
foldback_floats(points)
    A pair of float functions (limit, slope) for one row (the integrator's float back end).

The points are ``(v_ds V, i_limit A)`` with V_DS strictly increasing and the current not
rising with V_DS (the document reader refuses anything else). Between points the limit is
linear in V_DS, as controllers specify it (a current-limit threshold set by a sense
voltage that falls linearly with the drain-source voltage over a stated range; common
practice, no source). Beyond the points it is held flat at the nearest end point: below the
first point the first current, beyond the last point the last current. No slope is
extrapolated (a limit that would keep falling past the data is a guess; a limit rising
back towards low V_DS past the first point, the same). Flat beyond the last point is the
lowest the data say: the start-up sees no less current than the curve gives there, and a
short circuit at a V_DS past the data sees the last current, which the data do state.

The currents are nominal: a row's current limit ``i_lim`` (the nominal ``switch.i_limit``
scaled by its tolerance in corners and Monte Carlo) scales the whole curve by
``i_lim / switch.i_limit`` (`Circuit.limit_reference`).
"""

from __future__ import annotations

import bisect

import numpy as np

__all__ = ["foldback_limit", "foldback_slope", "foldback_floats"]


def _arrays(points) -> tuple[np.ndarray, np.ndarray]:
    pts = np.asarray(points, dtype=float)
    return pts[:, 0], pts[:, 1]


def foldback_limit(points, v_ds):
    """The foldback limit at ``v_ds`` (V, any shape), A: ``np.interp`` of the points, which
    holds the end values flat beyond the ends (NumPy's documented behaviour)."""
    v, i = _arrays(points)
    return np.interp(np.asarray(v_ds, dtype=float), v, i)


def foldback_slope(points, v_ds):
    """dI/dV_DS of the foldback limit at ``v_ds`` (A/V, <= 0): the slope of the segment
    holding it, 0 beyond the ends (at a point, the segment to its right)."""
    v, i = _arrays(points)
    x = np.asarray(v_ds, dtype=float)
    if v.size < 2:
        return np.zeros_like(x)
    seg = np.diff(i) / np.diff(v)
    k = np.clip(np.searchsorted(v, x, side="right") - 1, 0, v.size - 2)
    inside = (x >= v[0]) & (x < v[-1])
    return np.where(inside, seg[k], 0.0)


def foldback_floats(points):
    """(limit(v), slope(v)) on Python floats for one row: the same curve as
    `foldback_limit` / `foldback_slope`."""
    vs = [float(p[0]) for p in points]
    cs = [float(p[1]) for p in points]
    slopes = [(cs[j + 1] - cs[j]) / (vs[j + 1] - vs[j]) for j in range(len(vs) - 1)]
    first, last = vs[0], vs[-1]

    def limit(x: float) -> float:
        if x <= first:
            return cs[0]
        if x >= last:
            return cs[-1]
        j = bisect.bisect_right(vs, x) - 1
        return cs[j] + slopes[j] * (x - vs[j])

    def slope(x: float) -> float:
        if x < first or x >= last:
            return 0.0
        return slopes[bisect.bisect_right(vs, x) - 1]

    return limit, slope
