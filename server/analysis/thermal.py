"""Junction temperature from a Foster thermal network, and Rds(on) against temperature.

Provides
--------
zth(stages, t)
    Transient thermal impedance Zth(t) = sum r_i (1 - exp(-t / tau_i)) in K/W.
foster_arrays(stages)
    The stage resistances and time constants as two float arrays.
foster_advance(theta, p0, p1, dt, r, tau), foster_advance_floats(...)
    Exact update of the stage temperature rises over a step with linear power (rows of
    arrays; one row of floats).
foster_step(theta, p0, pg, p1, dt_a, dt_b, r, tau), foster_step_floats(...)
    The same over a step of two intervals, with the part of the rise owed to the bend of
    the power at the boundary (for the step control).
foster_rate(theta, p, r, tau), foster_rate_floats(...)
    Rate of change of the junction rise, K/s.
foster_peak(theta, p0, p1, dt, r, tau), foster_peak_floats(...)
    Largest junction rise inside a step with linear power, and where it lies.
time_to_rise(r, tau, power, rise)
    Time for a constant power to raise the junction by ``rise`` (vectorised).
rds_at(rds_on, alpha, tj)
    Rds(on) at junction temperature ``tj`` with a linear temperature coefficient.
RdsTemperature, rds_temperature(fet)
    Rds(on) / Rds(on, 25 degC) against Tj from the part's data (a table or the linear
    coefficient), held at the edge of the data and never extrapolated past it, with the
    junction temperatures the data covers.
conduction_share(rds, count, rds_other)
    The worst FET's share of the current of identical FETs in parallel (current divider).

Method
------
Foster stage i obeys tau_i dT_i/dt + T_i = r_i P(t) and the junction rise is the sum of
the stage rises (superposition of a linear time-invariant network). With P(t) linear over
a step the first-order equation has the closed form used by `foster_advance`, so the
update is exact for any step length however stiff the stage, and so is the junction rise
at any instant inside the step: `foster_peak` finds its interior maximum from that closed
form (a root of its derivative, a sum of exponentials, by Newton's method kept inside the
bracket; W. H. Press et al., "Numerical Recipes", section 9.4). References: the closed
form of a linear first-order equation, W. E. Boyce and R. C. DiPrima, "Elementary
Differential Equations", chapter 2; the lumped first-order thermal response, J. H.
Lienhard, "A Heat Transfer Textbook", section 1.3 / 5.2. The Foster form of Zth is the
one MOSFET datasheets publish (common practice, no standard).
"""

from __future__ import annotations

import functools
import math
from typing import Iterable

import numpy as np

__all__ = ["zth", "foster_arrays", "foster_advance", "foster_advance_floats", "foster_step", "foster_step_floats",
           "foster_rate", "foster_rate_floats",
           "foster_peak", "foster_peak_floats", "time_to_rise", "rds_at", "RdsTemperature", "rds_temperature",
           "conduction_share", "BEYOND_DATA"]

BEYOND_DATA = "beyond the part's data"


def foster_arrays(stages: Iterable) -> tuple[np.ndarray, np.ndarray]:
    """Stage resistances (K/W) and time constants (s) as float arrays.

    Parameters
    ----------
    stages : iterable of dict or (r, tau) pairs
        Foster stages ``{"r": K/W, "tau": s}`` or ``(r, tau)`` tuples.

    Returns
    -------
    r, tau : ndarray
        Shapes ``(k,)``.
    """
    rs, taus = [], []
    for s in stages:
        if isinstance(s, dict):
            r, tau = s["r"], s["tau"]
        else:
            r, tau = s
        if not (r > 0 and tau > 0):
            raise ValueError("zth stages: r and tau must be positive")
        rs.append(float(r))
        taus.append(float(tau))
    if not rs:
        raise ValueError("zth stages: at least one stage is needed")
    return np.asarray(rs), np.asarray(taus)


def zth(stages: Iterable, t) -> np.ndarray:
    """Transient thermal impedance of a Foster network.

    Parameters
    ----------
    stages : iterable of dict or (r, tau) pairs
        Foster stages, r in K/W and tau in s.
    t : float or array_like
        Time after the start of a constant power step, s (>= 0).

    Returns
    -------
    ndarray
        Zth(t) in K/W, same shape as ``t``.

    Notes
    -----
    Zth(t) = sum_i r_i (1 - exp(-t / tau_i)) (Foster network, JESD51-14).
    """
    r, tau = foster_arrays(stages)
    t = np.asarray(t, dtype=float)
    if np.any(t < 0):
        raise ValueError("t: must be >= 0")
    return np.sum(r * -np.expm1(-t[..., None] / tau), axis=-1)


def foster_advance(theta, p0, p1, dt, r, tau) -> np.ndarray:
    """Advance the Foster stage temperature rises over one step (rows of arrays).

    Parameters
    ----------
    theta : ndarray, shape (n, k)
        Stage temperature rises at the start of the step, K.
    p0, p1 : ndarray, shape (n,)
        Power at the start and the end of the step (linear in between), W.
    dt : ndarray, shape (n,)
        Step length, s (> 0).
    r, tau : ndarray, shape (k,)
        Stage resistances (K/W) and time constants (s).

    Returns
    -------
    ndarray, shape (n, k)
        Stage rises at the end of the step, K.

    Notes
    -----
    Exact solution of tau dT/dt + T = r P(t) for P linear over the step:
    T(dt) = T0 e + r [P0 (1 - e) + (P1 - P0) (1 - (1 - e) tau / dt)], e = exp(-dt / tau).
    """
    x = dt[:, None] / tau
    e1 = -np.expm1(-x)  # 1 - e, accurate for small x
    return theta - e1 * theta + r * (p0[:, None] * e1 + (p1 - p0)[:, None] * (1.0 - e1 / x))


def foster_advance_floats(theta, p0: float, p1: float, dt: float, r, tau) -> list:
    """`foster_advance` for one row on Python floats (``theta``: k stage rises, K)."""
    dp = p1 - p0
    out = []
    for th, ri, ti in zip(theta, r, tau):
        x = dt / ti
        e1 = -math.expm1(-x)
        out.append(th - e1 * th + ri * (p0 * e1 + dp * (1.0 - e1 / x)))
    return out


def foster_step(theta, p0, pg, p1, dt_a, dt_b, r, tau):
    """Advance the Foster stage rises over a step of two intervals (rows of arrays), and the
    part of the junction rise owed to the bend of the power at the interval boundary.

    Parameters
    ----------
    theta : ndarray, shape (n, k)
        Stage rises at the start, K.
    p0, pg, p1 : ndarray, shape (n,)
        Power at the start, between the intervals and at the end (linear in each), W.
    dt_a, dt_b : ndarray, shape (n,)
        Interval lengths, s.
    r, tau : ndarray, shape (k,)
        Stage resistances (K/W) and time constants (s).

    Returns
    -------
    theta_a, theta_b : ndarray, shape (n, k)
        Stage rises after the first interval and at the end, K (`foster_advance`).
    bend : ndarray, shape (n,)
        The junction rise at the end due to the power's departure from the straight line
        p0 -> p1 over the whole step, K: the response to the triangle that is d at the
        boundary and 0 at both ends, d = pg - (p0 + (p1 - p0) dt_a / (dt_a + dt_b)).

    Notes
    -----
    The closed form of `foster_advance` over each interval; by superposition the triangle
    gives r d (1 - e_a / x_a) after the first interval and
    r d ((1 - e_a / x_a)(1 - e_b) + e_b - (1 - e_b / x_b)) at the end, e = 1 - exp(-x),
    x = dt / tau (formed directly, not as a difference of two rises).
    """
    # in place where it can be: this runs every step on every row
    xa = np.divide.outer(dt_a, tau)
    xb = np.divide.outer(dt_b, tau)
    ea = np.expm1(-xa)
    np.negative(ea, out=ea)
    eb = np.expm1(-xb)
    np.negative(eb, out=eb)
    ga = np.divide(ea, xa, out=xa)
    np.subtract(1.0, ga, out=ga)
    gb = np.divide(eb, xb, out=xb)
    np.subtract(1.0, gb, out=gb)
    w = np.multiply(p0[:, None], ea)
    w += (pg - p0)[:, None] * ga
    w *= r
    ta = theta * (1.0 - ea)
    ta += w
    w = np.multiply(pg[:, None], eb)
    w += (p1 - pg)[:, None] * gb
    w *= r
    tb = ta * (1.0 - eb)
    tb += w
    np.subtract(1.0, eb, out=w)
    w *= ga
    w += eb
    w -= gb
    w *= r
    d = pg - p0 - (p1 - p0) * (dt_a / (dt_a + dt_b))
    return ta, tb, d * np.add.reduce(w, axis=1)


def foster_step_floats(theta, p0: float, pg: float, p1: float, dt_a: float, dt_b: float, r, tau):
    """`foster_step` for one row on Python floats (``theta``: k stage rises, K)."""
    ta_out, tb_out = [], []
    shape = 0.0
    dpa, dpb = pg - p0, p1 - pg
    for th, ri, ti in zip(theta, r, tau):
        xa, xb = dt_a / ti, dt_b / ti
        ea, eb = -math.expm1(-xa), -math.expm1(-xb)
        ga, gb = 1.0 - ea / xa, 1.0 - eb / xb
        ta = th * (1.0 - ea) + ri * (p0 * ea + dpa * ga)
        ta_out.append(ta)
        tb_out.append(ta * (1.0 - eb) + ri * (pg * eb + dpb * gb))
        shape += (ga * (1.0 - eb) + eb - gb) * ri
    return ta_out, tb_out, (pg - p0 - (p1 - p0) * (dt_a / (dt_a + dt_b))) * shape


def foster_rate(theta, p, r, tau) -> np.ndarray:
    """Rate of change of the junction rise at power ``p`` (rows of arrays).

    Parameters
    ----------
    theta : ndarray, shape (n, k)
        Stage temperature rises, K.
    p : ndarray, shape (n,)
        Power at that instant, W.
    r, tau : ndarray, shape (k,)
        Stage resistances (K/W) and time constants (s).

    Returns
    -------
    ndarray, shape (n,)
        d(sum of rises)/dt = p sum r_i / tau_i - sum T_i / tau_i, K/s.
    """
    return p * np.add.reduce(r / tau) - np.add.reduce(theta / tau, axis=1)


def foster_rate_floats(theta, p: float, r, tau) -> float:
    """`foster_rate` for one row on Python floats."""
    sr, st = 0.0, 0.0
    for th, ri, ti in zip(theta, r, tau):
        sr += ri / ti
        st += th / ti
    return p * sr - st


_PEAK_ITERATIONS = 10
_PEAK_CELLS = 4


def foster_peak(theta, p0, p1, dt, r, tau) -> tuple[np.ndarray, np.ndarray]:
    """Largest junction rise inside a step with linear power (rows of arrays).

    Parameters
    ----------
    theta : ndarray, shape (m, k)
        Stage rises at the start of the step, K.
    p0, p1 : ndarray, shape (m,)
        Power at the start and the end of the step (linear in between), W.
    dt : ndarray, shape (m,)
        Step length, s.
    r, tau : ndarray, shape (k,)
        Stage resistances (K/W) and time constants (s).

    Returns
    -------
    rise : ndarray, shape (m,)
        Largest junction rise found inside the step (its ends included), K.
    s : ndarray, shape (m,)
        Its time after the start of the step, s.

    Notes
    -----
    With P(s) = p0 + q s, q = (p1 - p0) / dt, and x_i = s / tau_i, e_i = exp(-x_i), stage i
    follows the closed form of `foster_advance` (Boyce and DiPrima, chapter 2)

        T_i(s) = T_i(0) e_i + r_i (p0 (1 - e_i) + q s (1 - (1 - e_i) / x_i)),

    whose rate is (r_i p0 - T_i(0)) / tau_i e_i + r_i q (1 - e_i), written so that no large
    terms cancel. The rise is sampled at 5 points; the largest sample's neighbouring cell
    in which the rate changes sign from positive to negative brackets the maximum, which
    Newton's method finds from the regula falsi point, with a bisection wherever Newton's
    step would leave the bracket (Press et al., section 9.4), at most 10 iterations, ending
    when an iteration moves by less than 1e-14 of the step. A sum of k exponentials can
    turn more than once inside a step; two maxima within a quarter of it and of nearly equal
    height could be confused (the step control keeps the power's bend small).
    """
    m = dt.shape[0]
    q = (p1 - p0) / dt
    a = (r * p0[:, None] - theta) / tau  # (m, k)
    rq = r * q[:, None]

    def rise_at(x):  # x: (m, j) -> (m, j)
        u = np.maximum(x, 1e-300)[:, :, None] / tau
        e1 = -np.expm1(-u)
        return np.add.reduce(theta[:, None, :] * (1.0 - e1)
                             + r * (p0[:, None, None] * e1 + (q[:, None] * x)[:, :, None] * (1.0 - e1 / u)), axis=2)

    def rate(x):  # x: (m,) -> rate and its derivative, (m,)
        u = x[:, None] / tau
        e = np.exp(-u)
        return np.add.reduce(a * e - rq * np.expm1(-u), axis=1), np.add.reduce(e / tau * (rq - a), axis=1)

    with np.errstate(invalid="ignore", divide="ignore"):
        grid = dt[:, None] * np.linspace(0.0, 1.0, _PEAK_CELLS + 1)  # (m, cells + 1)
        vals = rise_at(grid)
        vals[:, 0] = np.add.reduce(theta, axis=1)
        j = np.argmax(vals, axis=1)
        rows = np.arange(m)
        best, at = vals[rows, j], grid[rows, j]
        f_j = rate(at)[0]
        # the cell after the best sample where the rise still increases there, else before
        jl = np.clip(np.where(f_j > 0.0, j, j - 1), 0, _PEAK_CELLS - 1)
        lo, hi = grid[rows, jl], grid[rows, jl + 1]
        f_lo, f_hi = rate(lo)[0], rate(hi)[0]
        turn = (f_lo > 0.0) & (f_hi < 0.0)
        x = lo + (hi - lo) * np.clip(f_lo / np.where(f_lo > f_hi, f_lo - f_hi, 1.0), 0.0, 1.0)
        for _ in range(_PEAK_ITERATIONS):
            f, fp = rate(x)
            up = f > 0.0
            lo = np.where(up, x, lo)
            hi = np.where(up, hi, x)
            xn = x - f / fp
            x_new = np.where((fp != 0.0) & (xn >= lo) & (xn <= hi), xn, 0.5 * (lo + hi))
            if np.all(np.abs(x_new - x) <= 1e-14 * dt):
                x = x_new
                break
            x = x_new
        peak = rise_at(x[:, None])[:, 0]
    better = turn & (peak > best)
    return np.where(better, peak, best), np.where(better, x, at)


def foster_peak_floats(theta, p0: float, p1: float, dt: float, r, tau) -> tuple[float, float]:
    """`foster_peak` for one row on Python floats (the same steps)."""
    q = (p1 - p0) / dt
    stages = [((ri * p0 - th) / ti, ri * q, th, ri, ti) for th, ri, ti in zip(theta, r, tau)]

    def rise_at(x):
        out = 0.0
        for _, _, th, ri, ti in stages:
            u = max(x, 1e-300) / ti
            e1 = -math.expm1(-u)
            out += th * (1.0 - e1) + ri * (p0 * e1 + q * x * (1.0 - e1 / u))
        return out

    def rate(x):
        f, fp = 0.0, 0.0
        for a, rq, _, _, ti in stages:
            u = x / ti
            e = math.exp(-u)
            f += a * e - rq * math.expm1(-u)
            fp += e / ti * (rq - a)
        return f, fp

    grid = [dt * (j / _PEAK_CELLS) for j in range(_PEAK_CELLS + 1)]
    vals = [sum(theta)] + [rise_at(x) for x in grid[1:]]
    j = max(range(len(vals)), key=vals.__getitem__)
    best, at = vals[j], grid[j]
    jl = min(max(j if rate(at)[0] > 0.0 else j - 1, 0), _PEAK_CELLS - 1)
    lo, hi = grid[jl], grid[jl + 1]
    f_lo, f_hi = rate(lo)[0], rate(hi)[0]
    if not (f_lo > 0.0 > f_hi):
        return best, at
    x = lo + (hi - lo) * min(max(f_lo / (f_lo - f_hi), 0.0), 1.0)
    for _ in range(_PEAK_ITERATIONS):
        f, fp = rate(x)
        if f > 0.0:
            lo = x
        else:
            hi = x
        xn = x - f / fp if fp != 0.0 else lo - 1.0
        x_new = xn if lo <= xn <= hi else 0.5 * (lo + hi)
        if abs(x_new - x) <= 1e-14 * dt:
            x = x_new
            break
        x = x_new
    peak = rise_at(x)
    return (peak, x) if peak > best else (best, at)


_GRID = np.linspace(math.log(1e-12), math.log(1e6), 97)  # ln t of the bracketing grid


@functools.lru_cache(maxsize=64)
def _zth_grid(r: tuple, tau: tuple) -> np.ndarray:
    """Zth on the bracketing grid of `time_to_rise`, K/W (computed once per network)."""
    z = np.sum(np.asarray(r) * -np.expm1(-np.exp(_GRID)[:, None] / np.asarray(tau)), axis=1)
    z.setflags(write=False)
    return z


def time_to_rise(r: np.ndarray, tau: np.ndarray, power, rise) -> np.ndarray:
    """Time for a constant power to raise the junction temperature by ``rise``.

    Parameters
    ----------
    r, tau : ndarray, shape (k,)
        Foster stages, K/W and s.
    power : float or ndarray, shape (n,)
        Constant power from t = 0, W (>= 0).
    rise : float or ndarray, shape (n,)
        Junction temperature rise to reach, K (> 0).

    Returns
    -------
    ndarray, shape (n,)
        Time in s; ``inf`` where power * sum(r) never reaches ``rise``; 0 where rise <= 0.

    Notes
    -----
    Zth(t) is increasing, so the root of P Zth(t) = rise is unique. It is bracketed on a
    grid of 97 times, log-spaced over 1e-12 .. 1e6 s, and located by Newton's method on
    log t, dZth/dlog t = sum r_i (t / tau_i) exp(-t / tau_i), from the regula falsi point
    of the bracket and kept inside it (a regula falsi step wherever Newton's would leave
    it; the safeguarded Newton method, e.g. W. H. Press et al., "Numerical Recipes",
    section 9.4). Six steps bring the relative error of P Zth(t) below 1e-9.
    """
    power = np.atleast_1d(np.asarray(power, dtype=float))
    rise = np.broadcast_to(np.asarray(rise, dtype=float), power.shape)
    reach = power * r.sum() > rise
    z = _zth_grid(tuple(r), tuple(tau))  # (97,)
    over = power[:, None] * z[None, :] >= rise[:, None]  # (n, 97)
    j = np.minimum(np.maximum(np.argmax(over, axis=1), 1), _GRID.size - 1)
    lo, hi = _GRID[j - 1], _GRID[j]
    f_lo, f_hi = power * z[j - 1] - rise, power * z[j] - rise
    add = np.add.reduce

    def inside(f_a, f_b):  # regula falsi point of the bracket
        return lo + (hi - lo) * np.minimum(np.maximum(f_a / np.where(f_a < f_b, f_a - f_b, -1.0), 0.0), 1.0)

    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        x = inside(f_lo, f_hi)
        for _ in range(6):
            u = np.exp(x)[:, None] / tau  # (n, k)
            f = power * add(r * -np.expm1(-u), axis=1) - rise
            d = power * add(r * u * np.exp(-u), axis=1)
            up = f >= 0.0
            hi, f_hi = np.where(up, x, hi), np.where(up, f, f_hi)
            lo, f_lo = np.where(up, lo, x), np.where(up, f_lo, f)
            xn = x - f / d
            x = np.where((d > 0.0) & (xn >= lo) & (xn <= hi), xn, inside(f_lo, f_hi))
    t = np.exp(x)
    t = np.where(reach, t, np.inf)
    return np.where(rise <= 0.0, 0.0, t)


def rds_at(rds_on: float, alpha: float, tj):
    """Rds(on) at junction temperature ``tj``.

    Parameters
    ----------
    rds_on : float
        Rds(on) at Tj = 25 degC, ohm.
    alpha : float
        Linear temperature coefficient, 1/K.
    tj : float or ndarray
        Junction temperature, degC.

    Returns
    -------
    float or ndarray
        Rds(on) in ohm: rds_on (1 + alpha (tj - 25)), never below 10 % of rds_on.

    Notes
    -----
    Linear tempco model of a silicon MOSFET channel (common practice for datasheet
    normalised-Rds(on) curves over 25..150 degC; no source for the 10 % floor, which only
    keeps a cold extrapolation physical).
    """
    return rds_on * np.maximum(1.0 + alpha * (tj - 25.0), 0.1)


class RdsTemperature:
    """Rds(on) / Rds(on, 25 degC) against the junction temperature, from the part's data.

    Either the datasheet's normalised curve as points (``curve``: (Tj degC, ratio), Tj
    rising; piecewise-linear interpolation between them) or the linear coefficient
    ``alpha`` (ratio 1 + alpha (Tj - 25), never below 0.1 as in `rds_at`). The data covers
    Tj from ``t_low`` to ``t_high``: the curve's first and last points, or for the linear
    coefficient up to tj_max (the datasheet's curves end there). Beyond it the ratio is held
    at its value at the edge, never extrapolated: a check whose junction passes the edge
    reads "beyond the part's data" and fails (the holding only keeps the arithmetic finite).

    Method: linear interpolation in a table (``numpy.interp``); the linear coefficient is the
    common reading of a datasheet's normalised Rds(on) curve over 25..150 degC (common
    practice, no source).
    """

    def __init__(self, alpha: float, t_high: float, curve=None) -> None:
        self.alpha = float(alpha)
        self.curve = None if curve is None else tuple((float(t), float(k)) for t, k in curve)
        if self.curve is None:
            self.t_low, self.t_high = -math.inf, float(t_high)
            self._xs = self._ys = None
        else:
            self._xs = np.array([t for t, _ in self.curve])
            self._ys = np.array([k for _, k in self.curve])
            self.t_low, self.t_high = float(self._xs[0]), float(self._xs[-1])
            self._pairs = list(zip(self.curve[:-1], self.curve[1:]))

    @property
    def varies(self) -> bool:
        """Whether the ratio changes with Tj at all."""
        if self.curve is None:
            return self.alpha != 0.0
        return bool(np.any(self._ys != self._ys[0]))

    def ratio(self, tj):
        """The ratio at ``tj`` (degC; float or ndarray), held at the edges of the data."""
        if self.curve is None:
            x = np.minimum(tj, self.t_high)
            return np.maximum(1.0 + self.alpha * (x - 25.0), 0.1)
        return np.interp(tj, self._xs, self._ys)

    def ratio_float(self, tj: float) -> float:
        """`ratio` for one Python float (the one-row back end of the integrator)."""
        if self.curve is None:
            return max(1.0 + self.alpha * (min(tj, self.t_high) - 25.0), 0.1)
        if tj <= self.t_low:
            return self.curve[0][1]
        for (t0, k0), (t1, k1) in self._pairs:
            if tj <= t1:
                return k0 + (k1 - k0) * (tj - t0) / (t1 - t0)
        return self.curve[-1][1]

    def beyond(self, tj) -> np.ndarray:
        """Where ``tj`` lies outside the data (above its last point, or below its first)."""
        tj = np.asarray(tj, dtype=float)
        with np.errstate(invalid="ignore"):
            return (tj > self.t_high * (1.0 + 1e-12) + 1e-9) | (tj < self.t_low - 1e-9)

    def words(self) -> str:
        """Where the data ends, in words."""
        if self.curve is None:
            return ("the linear R_DS(on) coefficient holds up to the maximum junction temperature "
                    f"{self.t_high:g} \u00b0C")
        return f"the R_DS(on) table covers {self.t_low:g} \u00b0C to {self.t_high:g} \u00b0C"


def rds_temperature(fet) -> RdsTemperature:
    """The `RdsTemperature` of a part (`document.Fet`): its table, else its linear coefficient up to tj_max."""
    return RdsTemperature(fet.rds_on_alpha, fet.tj_max, getattr(fet, "rds_on_curve", None))


def conduction_share(rds, count: int, rds_other):
    """The share of the total current one FET carries among ``count`` identical FETs in parallel.

    Parameters
    ----------
    rds : float or ndarray
        That FET's Rds(on), ohm.
    count : int
        FETs in parallel (>= 1).
    rds_other : float or ndarray
        The Rds(on) of each of the other count - 1 FETs, ohm.

    Returns
    -------
    float or ndarray
        (1 / rds) / (1 / rds + (count - 1) / rds_other): the current divider of parallel
        resistances (Kirchhoff's current law and Ohm's law; any circuit textbook, e.g.
        C. K. Alexander and M. N. O. Sadiku, "Fundamentals of Electric Circuits", section
        2.8). 1 for a single FET.
    """
    g = 1.0 / np.asarray(rds, dtype=float)
    return g / (g + (count - 1) / np.asarray(rds_other, dtype=float))
