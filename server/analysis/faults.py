"""The first microseconds of an output short, and the hard turn-off that ends a fault.

Provides
--------
onset_applies(rail), turn_off_applies(rail)
    Whether the rail describes the onset (a loop response time or a fast trip) and the
    turn-off (one of the controller, clamp or avalanche fields).
regulated_current(rail, v_ds, i_lim)
    The current the switch regulates a short to (the seam where a foldback curve enters).
start_temperature(rail, steady)
    The junction temperature a short during operation starts from.
onset(rail, *, v_s, i_lim, i_load, tj_start)
    Peak current, the time until the controller acts, FET energy, fast trip, onset SOA.
turn_off(rail, *, v_s, i_off, v_in0)
    Peak V_DS, what clamps it, the energy the clamp (or the FET's breakdown) absorbs.
Modes(a, eq, x0)
    Exact response of a two-state linear circuit in modal form (rows of arrays).

Circuit
-------
The supply v_s behind the series resistance R = r_source + path.r and inductance
L = l_source + path.l feeds the switch input, where ``supply.c_in`` (optional) and the
input clamp ``supply.v_clamp`` (optional, a TVS) sit; the controller senses the path
current (its sense resistor is part of the path). Before the short the rail carries the
steady load current with the input at v_s - R i_load.

Onset: the output shorts with the FET fully on (Rds(on) at the starting junction
temperature). Without c_in the current rises as a first-order R-L circuit,
i(t) = V/R_t + (i_0 - V/R_t) exp(-t R_t / L), R_t = R + Rds(on) (with L = 0 it stands at
V / R_t at once): the closed form of a series R-L circuit switched onto a DC source
(C. K. Alexander and M. N. O. Sadiku, "Fundamentals of Electric Circuits", section 7.6).
With c_in the input capacitance discharges through the FET alone (only Rds(on) bounds
that current) while the path current rises: a two-state linear circuit, solved exactly
by `Modes`. The loop acts ``loop_response`` after the sensed current passes the
current limit (the current is then regulated: `regulated_current`); the fast trip acts
``fast_trip_delay`` after it passes ``fast_trip`` and turns the switch off. The onset
ends at the first of the two; with neither acting the current settles at V / R_t. The
onset pulse is read against the SOA derated from the starting temperature at the full
supply and the peak current for the onset's duration (conservative: the FET holds the
supply only once the loop takes over); shorter than the shortest curve, that curve.

Turn-off: the switch opens with current I in L. Without c_in the switch input jumps to
the clamp voltage V_c = min(v_clamp, vds_max) (the FET's breakdown clamps at vds_max when
no input clamp holds it lower) and the current decays through it:
L di/dt = -(V_c - V + R i), so the clamp absorbs

    E = V_c (L / R) (I - (a / R) ln(1 + R I / a)),  a = V_c - V,

tending to (1/2) L I^2 V_c / (V_c - V) as R -> 0 (the unclamped-inductive-switching
energy of power MOSFET avalanche ratings, JEDEC JESD24-5; e.g. B. J. Baliga,
"Fundamentals of Power Semiconductor Devices", section 6.9). With c_in the inductor
first rings into it (exact two-state response): the input peaks where the current
reaches zero, unless it reaches V_c before; then the clamp takes the remaining current
as above. The energy goes into the FET only when V_c is its breakdown.
"""

from __future__ import annotations


import numpy as np

from .document import Rail
from .foldback import foldback_limit
from .soa import allowed_current
from .thermal import rds_temperature

__all__ = ["onset_applies", "turn_off_applies", "regulated_current", "start_temperature", "onset", "turn_off",
           "Modes", "clamp_energy", "ACTED_NONE", "ACTED_LOOP", "ACTED_FAST_TRIP", "BY_NONE", "BY_INPUT",
           "BY_CLAMP", "BY_BREAKDOWN"]

ACTED_NONE, ACTED_LOOP, ACTED_FAST_TRIP = 0, 1, 2
BY_NONE, BY_INPUT, BY_CLAMP, BY_BREAKDOWN = 0, 1, 2, 3  # turn-off: no overshoot, input C, input clamp, breakdown
_GRID = 64  # samples of a two-state response before a crossing is refined
_REFINE = 12  # safeguarded Newton steps refining a crossing


def onset_applies(rail: Rail) -> bool:
    """The onset is evaluated where the controller's loop response or a fast trip is given."""
    sw = rail.switch
    return sw.loop_response is not None or sw.fast_trip is not None


def turn_off_applies(rail: Rail) -> bool:
    """The turn-off is evaluated where the rail describes it: controller timing, input clamp or avalanche rating."""
    sw = rail.switch
    return onset_applies(rail) or rail.supply.v_clamp is not None or rail.fet.e_avalanche is not None


def regulated_current(rail: Rail, v_ds, i_lim) -> np.ndarray:
    """Current the switch regulates a shorted output to, A: the current limit (under a power
    limit, min(i_limit, p_limit / V_DS)). Under a foldback curve (`foldback`), the curve at the
    FET's V_DS scaled by the row's limit over the nominal one, as the start-up reads it
    (`circuit.Circuit.limit_reference`): V_DS is the supply less the series resistance's drop
    at the current, found in one correction step from the curve at the full supply."""
    v = np.atleast_1d(np.asarray(v_ds, dtype=float))
    i = np.broadcast_to(np.asarray(i_lim, dtype=float), v.shape).copy()
    sw = rail.switch
    if sw.foldback is not None and sw.i_limit is not None:
        scale = i / sw.i_limit
        r = rail.supply.r_source + rail.path.r
        i0 = scale * foldback_limit(sw.foldback, v)
        i = scale * foldback_limit(sw.foldback, np.maximum(v - r * i0, 0.0))
    if rail.switch.mode == "power_limit" and rail.switch.p_limit is not None:
        i = np.minimum(i, rail.switch.p_limit / v)
    return i


def start_temperature(rail: Rail, steady: dict) -> np.ndarray:
    """Junction temperature a short during operation starts from, degC: the steady state's
    (`steady.steady_state`); T_j(max) where steady conduction runs away (conservative); the
    ambient where the load has no operating point (the rail never runs)."""
    tj = np.asarray(steady["tj"], dtype=float)
    stable = np.asarray(steady["stable"], dtype=bool)
    dc_ok = np.asarray(steady["dc_ok"], dtype=bool)
    return np.where(stable, tj, np.where(dc_ok, rail.fet.tj_max, rail.t_ambient))


# --- the two-state linear circuit --------------------------------------------------------------


class Modes:
    """The exact response of a two-state linear circuit, x(t) = eq + exp(A t) (x0 - eq), in modal form.

    For a 2 x 2 matrix with s = tr(A) / 2 and d = sqrt(s^2 - det A) (complex), the
    eigenvalues are s +/- d and exp(A t) = exp(s t) (cosh(d t) I + sinh(d t) / d (A - s I))
    (Cayley-Hamilton; C. Moler and C. Van Loan, "Nineteen dubious ways to compute the
    exponential of a matrix", SIAM Review 20 (1978), method 17), so each state is
    eq_k + Re(a_k1 exp(l_1 t) + a_k2 exp(l_2 t)) with a_k = y0_k / 2 +/- ((A - s I) y0)_k / (2 d),
    y0 = x0 - eq: closed forms for its value, its slope and integrals of its square.
    A critically damped row (d = 0) takes d = 1e-7 |s|, a relative error below 1e-6.
    """

    def __init__(self, a: np.ndarray, eq: np.ndarray, x0: np.ndarray) -> None:
        s = 0.5 * (a[:, 0, 0] + a[:, 1, 1])
        det = a[:, 0, 0] * a[:, 1, 1] - a[:, 0, 1] * a[:, 1, 0]
        d = np.sqrt((s * s - det).astype(complex))
        tiny = 1e-7 * np.maximum(np.abs(s), 1e-300)
        d = np.where(np.abs(d) < tiny, tiny + 0j, d)
        y0 = x0 - eq
        my = (a - s[:, None, None] * np.eye(2)) @ y0[:, :, None]  # (n, 2, 1)
        half = my[:, :, 0] / (2.0 * d[:, None])
        self.lam = np.stack([s + d, s - d], axis=1)  # (n, 2)
        self.amp = np.stack([0.5 * y0 + half, 0.5 * y0 - half], axis=2)  # (n, state, mode)
        self.eq = eq

    def value(self, k: int, t: np.ndarray) -> np.ndarray:
        """State k at times t (n, m)."""
        a, lam = self.amp[:, k, :], self.lam
        with np.errstate(over="ignore", invalid="ignore"):
            z = a[:, None, 0] * np.exp(lam[:, None, 0] * t) + a[:, None, 1] * np.exp(lam[:, None, 1] * t)
        return self.eq[:, k, None] + z.real

    def value_slope(self, k: int, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """State k and its rate of change at times t (n, m)."""
        a, lam = self.amp[:, k, :], self.lam
        with np.errstate(over="ignore", invalid="ignore"):
            e1, e2 = a[:, None, 0] * np.exp(lam[:, None, 0] * t), a[:, None, 1] * np.exp(lam[:, None, 1] * t)
        return self.eq[:, k, None] + (e1 + e2).real, (e1 * lam[:, None, 0] + e2 * lam[:, None, 1]).real

    def square_integral(self, k: int, t_end: np.ndarray) -> np.ndarray:
        """int_0^T x_k(t)^2 dt in closed form: sums of
        int_0^T exp((l_i + l_j) t) dt = (exp((l_i + l_j) T) - 1) / (l_i + l_j)."""
        a, lam, e = self.amp[:, k, :], self.lam, self.eq[:, k]
        big_t = t_end.astype(complex)

        def grow(mu):  # (exp(mu T) - 1) / mu, T where mu T is tiny
            x = mu * big_t
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                return np.where(np.abs(x) < 1e-8, big_t * (1 + x / 2), np.expm1(x) / np.where(mu == 0, 1.0, mu))

        total = e * e * big_t + 2 * e * (a[:, 0] * grow(lam[:, 0]) + a[:, 1] * grow(lam[:, 1]))
        for i in range(2):
            for j in range(2):
                total = total + a[:, i] * a[:, j] * grow(lam[:, i] + lam[:, j])
        return total.real


def _crossing(m: Modes, t_hi, k: int, level, *, above: bool = True) -> np.ndarray:
    """First time in [0, t_hi] where state k reaches ``level`` (from below when ``above``), s;
    inf where it does not. A grid of `_GRID` samples finds the first bracket; Newton's method
    kept inside it (a bisection wherever its step would leave it; W. H. Press et al.,
    "Numerical Recipes", section 9.4) refines it."""
    n = t_hi.shape[0]
    grid = t_hi[:, None] * np.linspace(0.0, 1.0, _GRID + 1)[None, :]
    sign = 1.0 if above else -1.0
    vals = sign * (m.value(k, grid) - level[:, None])
    hit = vals >= 0.0
    any_hit = hit.any(axis=1)
    j = np.argmax(hit, axis=1)
    rows = np.arange(n)
    lo = grid[rows, np.maximum(j - 1, 0)]
    hi = grid[rows, j]
    f_lo, f_hi = vals[rows, np.maximum(j - 1, 0)], vals[rows, j]
    with np.errstate(invalid="ignore", divide="ignore"):
        x = lo + (hi - lo) * np.clip(f_lo / np.where(f_lo < f_hi, f_lo - f_hi, -1.0), 0.0, 1.0)
        for _ in range(_REFINE):
            v, dv = m.value_slope(k, x[:, None])
            f, df = sign * (v[:, 0] - level), sign * dv[:, 0]
            up = f >= 0.0
            hi = np.where(up, x, hi)
            lo = np.where(up, lo, x)
            xn = x - f / df
            x = np.where((df != 0) & (xn > lo) & (xn < hi), xn, 0.5 * (lo + hi))
    return np.where(any_hit, np.where(j == 0, 0.0, x), np.inf)


def _horizon(a: np.ndarray) -> np.ndarray:
    """Time over which a two-state response makes its first swing, s: half a period where it
    rings (the first extremum of a state starting at rest), else 30 slowest time constants."""
    s = 0.5 * (a[:, 0, 0] + a[:, 1, 1])
    det = a[:, 0, 0] * a[:, 1, 1] - a[:, 0, 1] * a[:, 1, 0]
    disc = s * s - det
    with np.errstate(divide="ignore", invalid="ignore"):
        ring = np.pi / np.sqrt(np.maximum(-disc, 1e-300))
        slow = 30.0 / np.maximum(-(s + np.sqrt(np.maximum(disc, 0.0))), 1e-300)
    return np.where(disc < 0, np.minimum(ring, 30.0 / np.maximum(-s, 1e-300)), slow)


# --- onset ------------------------------------------------------------------------------------


def _first_order_crossing(i0, i_inf, tau, level) -> np.ndarray:
    """Time for i = i_inf + (i0 - i_inf) exp(-t / tau) to reach ``level``, s (inf: never)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = tau * np.log((i_inf - i0) / (i_inf - level))
    t = np.where(level <= i0, 0.0, np.where(level < i_inf, t, np.inf))
    return np.where(np.isnan(t), np.inf, t)


def onset(rail: Rail, *, v_s, i_lim, i_load, tj_start) -> dict:
    """The onset of an output short during operation, for rows of conditions.

    Parameters
    ----------
    rail : Rail
    v_s : ndarray, shape (n,)
        Supply, V.
    i_lim : ndarray, shape (n,)
        Current limit, A (``NO_LIMIT`` without one: the loop never acts).
    i_load : ndarray, shape (n,)
        Load current before the short, A (NaN: none).
    tj_start : ndarray, shape (n,)
        Junction temperature at the start, degC.

    Returns
    -------
    dict of ndarray
        ``i_peak`` (A, the FET's peak), ``t_act`` (s until the loop or fast trip acts; inf:
        neither), ``acted`` (ACTED_*), ``fired`` (the fast trip turns the switch off),
        ``i_off`` (path current when the fast trip acts, A), ``v_in_off`` (switch input then,
        V), ``e`` (FET energy during the onset, fully on, J), ``i_final`` (V / R_t, A),
        ``soa_allowed`` (A), ``soa_ratio``.
    """
    sw, fet = rail.switch, rail.fet
    v = np.atleast_1d(np.asarray(v_s, dtype=float))
    n = v.shape[0]
    i_lim = np.broadcast_to(np.asarray(i_lim, dtype=float), (n,))
    i0 = np.nan_to_num(np.broadcast_to(np.asarray(i_load, dtype=float), (n,)), nan=0.0)
    tj0 = np.broadcast_to(np.asarray(tj_start, dtype=float), (n,))
    r = rail.supply.r_source + rail.path.r
    ell = rail.supply.l_source + rail.path.l
    rds = fet.rds_on * rds_temperature(fet).ratio(tj0)  # the part's data over temperature, never extrapolated
    rt = r + rds
    i_inf = v / rt
    loop_on = sw.loop_response is not None and sw.i_limit is not None
    c_in = rail.supply.c_in
    if c_in is None or ell == 0.0:
        # the path current's time constant: L / R_t, or with c_in and no inductance C (R || Rds)
        tau = ell / rt if c_in is None else c_in * r * rds / rt

        def cross(level):
            return _first_order_crossing(i0, i_inf, tau, level)
    else:
        a = _onset_matrix(r, ell, c_in, rds)
        modes = Modes(a, np.stack([i_inf, i_inf * rds], axis=1), np.stack([i0, v - r * i0], axis=1))
        t_hi = _horizon(a)

        def cross(level):
            return _crossing(modes, t_hi, 0, np.broadcast_to(level, (n,)).astype(float))
    t_loop = cross(i_lim) + sw.loop_response if loop_on else np.full(n, np.inf)
    t_ft = cross(np.full(n, sw.fast_trip)) + sw.fast_trip_delay if sw.fast_trip is not None else np.full(n, np.inf)
    fired = np.isfinite(t_ft) & (t_ft <= t_loop)
    t_act = np.minimum(t_loop, t_ft)
    acted = np.where(fired, ACTED_FAST_TRIP, np.where(np.isfinite(t_loop), ACTED_LOOP, ACTED_NONE))
    # a loop regulating at or above the fast-trip threshold trips it all the same, at the regulated current
    i_reg = regulated_current(rail, v, i_lim)
    late = (~fired & np.isfinite(t_loop) & (i_reg >= sw.fast_trip)) if sw.fast_trip is not None \
        else np.zeros(n, bool)
    if c_in is None or ell == 0.0:
        peak, e, i_at, v_at = _first_order_onset(v, r, rds, i0, i_inf, tau, t_act, c_in)
    else:
        peak, e, i_at, v_at = _second_order_onset(modes, t_hi, rds, t_act)
    allowed = allowed_current(fet, v, np.where(np.isfinite(t_act), t_act, np.inf), tj0)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(peak > 0, allowed / peak, np.inf)
    return {"i_peak": peak, "t_act": t_act, "acted": acted, "fired": fired | late,
            "i_off": np.where(fired, i_at, np.where(late, i_reg, np.nan)), "v_in_off": np.where(fired, v_at, np.nan),
            "e": e,
            "i_final": i_inf, "rds": rds, "soa_allowed": allowed, "soa_ratio": ratio}


def _onset_matrix(r: float, ell: float, c_in: float, rds: np.ndarray) -> np.ndarray:
    """States (path current, input voltage): L di/dt = V - R i - v, C dv/dt = i - v / Rds."""
    n = rds.shape[0]
    a = np.empty((n, 2, 2))
    a[:, 0, 0] = -r / ell
    a[:, 0, 1] = -1.0 / ell
    a[:, 1, 0] = 1.0 / c_in
    a[:, 1, 1] = -1.0 / (rds * c_in)
    return a


def _square_integral(p, q, tau, t) -> np.ndarray:
    """int_0^t (p + q exp(-s / tau))^2 ds = p^2 t + 2 p q tau (1 - e) + q^2 tau / 2 (1 - e^2), e = exp(-t / tau);
    inf for t = inf (with p != 0), p^2 t for tau = 0."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        ex = np.where(tau > 0, np.exp(-t / np.where(tau > 0, tau, 1.0)), 0.0)
        out = p * p * t + 2 * p * q * tau * (1 - ex) + q * q * tau / 2 * (1 - ex * ex)
    return np.where(np.isfinite(t), out, np.inf)


def _first_order_onset(v, r, rds, i0, i_inf, tau, t_act, c_in):
    """Peak FET current, FET energy, and the path current and input voltage at the end of a
    first-order onset: the path current i = i_inf + (i0 - i_inf) exp(-t / tau).

    Without c_in the FET carries i; with c_in (and no inductance) the FET carries the input
    voltage over Rds, v = v_s - R i, which starts at v_s - R i0 (the peak: the capacitance
    discharging through the FET alone) and falls to v_s Rds / R_t; the energy is Rds int i^2
    dt or int v^2 / Rds dt (`_square_integral`).
    """
    b = i0 - i_inf
    with np.errstate(invalid="ignore", over="ignore"):
        ex = np.where(tau > 0, np.exp(-t_act / np.where(tau > 0, tau, 1.0)), 0.0)
    i_end = np.where(np.isfinite(t_act), i_inf + b * ex, i_inf)
    v_end = v - r * i_end
    if c_in is None:
        peak = np.maximum(i_end, i0)
        e = rds * _square_integral(i_inf, b, tau, t_act)
    else:
        peak = (v - r * i0) / rds
        e = _square_integral(v - r * i_inf, -r * b, tau, t_act) / rds
    return peak, e, i_end, v_end


def _second_order_onset(modes: Modes, t_hi, rds, t_act):
    """Peak FET current (v / Rds: the highest input voltage on a grid of the onset, its start
    included), FET energy (int v^2 / Rds dt in closed form, `Modes.square_integral`) and the
    state at the end of an onset with input capacitance and path inductance."""
    finite = np.isfinite(t_act)
    t_end = np.where(finite, t_act, t_hi)
    grid = t_end[:, None] * np.linspace(0.0, 1.0, _GRID + 1)[None, :]
    peak = np.max(modes.value(1, grid), axis=1) / rds
    e = modes.square_integral(1, t_end) / rds
    i_end = np.where(finite, modes.value(0, t_end[:, None])[:, 0], modes.eq[:, 0])
    v_end = np.where(finite, modes.value(1, t_end[:, None])[:, 0], modes.eq[:, 1])
    return peak, np.where(finite, e, np.inf), i_end, v_end


# --- turn-off ---------------------------------------------------------------------------------


def clamp_energy(v_c, v_s, r: float, ell: float, i1) -> np.ndarray:
    """Energy a clamp at V_c absorbs while the current i1 in L decays through it, J.

    E = V_c int i dt with L di/dt = -(a + R i), a = V_c - V:
    int i dt = (L a / R^2) (x - ln(1 + x)), x = R i1 / a (series for small x, and L i1^2 / (2 a)
    at R = 0); infinite where a <= 0 (the supply holds the clamp on).
    """
    v_c = np.asarray(v_c, dtype=float)
    a = v_c - np.asarray(v_s, dtype=float)
    i1 = np.asarray(i1, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = r * i1 / a
        series = x * x / 2 - x ** 3 / 3 + x ** 4 / 4 - x ** 5 / 5
        g = np.where(np.abs(x) < 1e-3, series, x - np.log1p(x))
        q = np.where(r > 0, ell * a / (r * r) * g, ell * i1 * i1 / (2 * a))
        e = v_c * q
    return np.where(a > 0, np.where(i1 > 0, e, 0.0), np.inf)


def turn_off(rail: Rail, *, v_s, i_off, v_in0=None) -> dict:
    """The hard turn-off of the switch with current ``i_off`` in the path inductance.

    Parameters
    ----------
    rail : Rail
    v_s : ndarray, shape (n,)
        Supply, V.
    i_off : ndarray, shape (n,)
        Path current when the switch opens, A (NaN: no hard turn-off in that row).
    v_in0 : ndarray, shape (n,), optional
        Switch input voltage then, V (default, and where NaN: v_s - R i_off, the DC state).

    Returns
    -------
    dict of ndarray
        ``v_peak`` (V, peak V_DS with the output shorted), ``by`` (BY_*), ``e_clamp`` (J,
        energy the clamp absorbs), ``e_fet`` (J, the part of it the FET absorbs in
        breakdown), ``e_half`` (J, (1/2) L I^2), ``v_c`` (V, the clamp level).
    """
    fet, sup = rail.fet, rail.supply
    v = np.atleast_1d(np.asarray(v_s, dtype=float))
    n = v.shape[0]
    i = np.broadcast_to(np.asarray(i_off, dtype=float), (n,)).astype(float)
    r = sup.r_source + rail.path.r
    ell = sup.l_source + rail.path.l
    v0 = v - r * np.nan_to_num(i) if v_in0 is None else np.where(np.isnan(v_in0), v - r * np.nan_to_num(i), v_in0)
    clamp_first = sup.v_clamp is not None and sup.v_clamp < fet.vds_max
    v_c = np.full(n, sup.v_clamp if clamp_first else fet.vds_max)
    by_clamp = BY_CLAMP if clamp_first else BY_BREAKDOWN
    live = np.isfinite(i) & (i > 0)
    nan = np.full(n, np.nan)
    if ell == 0.0:
        v_peak = np.where(live, np.maximum(v, v0), nan)
        by = np.full(n, BY_NONE)
        e_clamp = np.where(live, 0.0, nan)
    elif sup.c_in is None:
        v_peak = np.where(live, v_c, nan)
        by = np.full(n, by_clamp)
        e_clamp = np.where(live, clamp_energy(v_c, v, r, ell, np.where(live, i, 0.0)), nan)
    else:
        v_peak, by, e_clamp = _ring_into_input(v, r, ell, sup.c_in, np.where(live, i, 0.0), v0, v_c, by_clamp)
        v_peak, e_clamp = np.where(live, v_peak, nan), np.where(live, e_clamp, nan)
    by = np.where(live, by, BY_NONE)
    e_fet = np.where(by == BY_BREAKDOWN, e_clamp, np.where(live, 0.0, nan))
    return {"v_peak": v_peak, "by": by, "e_clamp": e_clamp, "e_fet": e_fet,
            "e_half": np.where(live, 0.5 * ell * i * i, nan), "v_c": v_c}


def _ring_into_input(v, r, ell, c_in, i, v0, v_c, by_clamp):
    """The path current ringing into the input capacitance (exact two-state response), until
    it reaches zero (the input's peak) or the input reaches the clamp."""
    n = v.shape[0]
    a = np.empty((n, 2, 2))
    a[:, 0, 0], a[:, 0, 1], a[:, 1, 0], a[:, 1, 1] = -r / ell, -1.0 / ell, 1.0 / c_in, 0.0
    modes = Modes(a, np.stack([np.zeros(n), v], axis=1), np.stack([i, v0], axis=1))
    t_hi = 2.0 * _horizon(a)
    t_zero = _crossing(modes, t_hi, 0, np.zeros(n), above=False)
    t_clamp = _crossing(modes, np.where(np.isfinite(t_zero), t_zero, t_hi), 1, v_c)
    clamped = np.isfinite(t_clamp)
    t_top = np.where(np.isfinite(t_zero), t_zero, t_hi)
    top = modes.value(1, t_top[:, None])[:, 0]
    at_clamp = modes.value(0, np.where(clamped, t_clamp, 0.0)[:, None])[:, 0]
    v_peak = np.where(clamped, v_c, np.maximum(top, v0))
    e = np.where(clamped, clamp_energy(v_c, v, r, ell, np.maximum(at_clamp, 0.0)), 0.0)
    return v_peak, np.where(clamped, by_clamp, BY_INPUT), e
