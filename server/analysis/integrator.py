"""TR-BDF2 integration of the switched-rail circuit, on arrays of rows or on one row.

Provides
--------
integrate(cz, *, record=None, max_steps)
    Run the adaptive TR-BDF2 integration of every row of a `Circuit` and return the raw
    figures (dict of arrays), the rows left unfinished at the step cap and the waveform
    of the recorded row.

One algorithm, two arithmetic back ends: `_ArrayOps` advances all rows of a batch in one
vectorised iteration (corners, Monte Carlo, candidate capacitances), `_FloatOps` runs the
very same code on Python floats for a single row, where the cost of a NumPy call would
exceed the arithmetic it does. Each row has its own adaptive step in both cases.

Method
------
TR-BDF2 with gamma = 2 - sqrt 2: a trapezoidal stage to t + gamma h, then a BDF2 stage to
t + h; both solve M y - d h f(y) = rhs with d = gamma / 2 (same iteration matrix).
L-stable and second order. R. E. Bank et al., "Transient simulation of silicon devices and
circuits", IEEE Trans. CAD 4 (1985) 436-451; M. E. Hosea and L. F. Shampine, "Analysis
and implementation of TR-BDF2", Appl. Numer. Math. 20 (1996) 21-37, whose local error
estimate 2 C h (f_n / gamma - f_g / (gamma (1 - gamma)) + f_1 / (1 - gamma)),
C = (-3 gamma^2 + 4 gamma - 2) / (12 (2 - gamma)), controls the step (step factor
0.9 err^(-1/3), limited to [0.2, 8], the bounds RADAU5 uses by default: E. Hairer and
G. Wanner, "Solving Ordinary Differential Equations II", section IV.8; from memory).

Each stage is a 2x2 linear system in (i, v_c): the load and the limit reference are
linearised at a second-order predictor of v_out (one Newton step), the complementarity of
the limit (v_reg >= 0, i <= i_ref, one of them tight) is resolved by taking the regulated
solution where the unregulated current exceeds it. A step in which a load switches on at
v_on, or the switch enters or leaves regulation, is rejected until it is shorter than 1e-4
of the time scale (so t_limit and the load's start are located to that accuracy); the
steps that close in on the event aim at it from the stage values and do not grow back
until it is crossed, after which the error control resumes the step size the event cut
(`_event_steps`). The Foster stage rises are advanced exactly with the power linear
between stage points, and so is the switch-input voltage as the upstream UVLO sees it,
through a first-order lag of time constant ``uvlo_filter`` (`lag`), with its lowest value
inside each step. The lag's input v_s - r i - l di/dt has v_s - r i linear between stage
points and l di/dt at its mean over each stage interval (the stage currents' difference
over the interval), so the inductive drop keeps its exact area l (i_1 - i_0). Where a load
switching on steps the regulated reference up, the ideal FET is fully on for the few
nanoseconds the inductance needs to take the new current: that notch is shorter than any
step, and is put back with its depth (down to v_out + R_sw i) and its width (area /
depth), so that a filter not much slower than the step still sees the right dip
(`_uvlo_interval`). Interpolating the stage samples of v_in instead would understate the
dip: a regulated stage's sample is already the mean over its interval.
"""

from __future__ import annotations

import math
import operator
from dataclasses import replace

import numpy as np

from .circuit import NO_LIMIT, R_OFF, Circuit
from .lag import lag_advance, lag_advance_floats
from .thermal import foster_advance, foster_advance_floats

__all__ = ["RTOL", "SETTLE_BAND", "STOP_BAND", "integrate"]

RTOL = 2e-4  # local error tolerance relative to v_s and to the largest current so far
SETTLE_BAND = 0.01  # t_settle: output within 1 % of its final value
STOP_BAND = 1e-3  # stop when the deviation energy corresponds to 0.1 % of v_f

_G = 2.0 - math.sqrt(2.0)
_D = _G / 2.0
_C1 = 1.0 / (_G * (2.0 - _G))
_C2 = (1.0 - _G) ** 2 / (_G * (2.0 - _G))
_EC = 2.0 * (-3.0 * _G**2 + 4.0 * _G - 2.0) / (12.0 * (2.0 - _G))
_W0, _W1, _W2 = 1.0 / _G, -1.0 / (_G * (1.0 - _G)), 1.0 / (1.0 - _G)
# weights of the quadratic through (0, gamma, 1) integrated over [0, 1]
_Q0 = (_G / 2.0 - 1.0 / 6.0) / _G
_Q1 = 1.0 / (6.0 * _G * (1.0 - _G))
_Q2 = (1.0 / 3.0 - _G / 2.0) / (1.0 - _G)
_LOG_ROFF = math.log(R_OFF)


class _ArrayOps:
    """Element-wise arithmetic on arrays of rows."""

    where = staticmethod(np.where)
    maximum = staticmethod(np.maximum)
    minimum = staticmethod(np.minimum)
    exp = staticmethod(np.exp)
    log = staticmethod(np.log)
    sqrt = staticmethod(np.sqrt)
    fabs = staticmethod(np.abs)

    @staticmethod
    def any(m) -> bool:
        return bool(np.any(m))

    @staticmethod
    def not_(m):
        return ~m

    foster = staticmethod(foster_advance)
    lag = staticmethod(lag_advance)

    @staticmethod
    def rise(theta):
        return np.add.reduce(theta, axis=1)


class _FloatOps:
    """The same arithmetic on Python floats for a single row."""

    @staticmethod
    def where(c, a, b):
        return a if c else b

    maximum = staticmethod(max)
    minimum = staticmethod(min)
    exp = staticmethod(math.exp)
    log = staticmethod(math.log)
    sqrt = staticmethod(math.sqrt)
    fabs = staticmethod(abs)
    any = staticmethod(bool)
    not_ = staticmethod(operator.not_)

    foster = staticmethod(foster_advance_floats)
    lag = staticmethod(lag_advance_floats)

    @staticmethod
    def rise(theta):
        return sum(theta)


class _Stage:
    __slots__ = ("i", "vc", "vout", "ic", "fi", "vds", "p", "lim", "exc", "event", "bad", "r_sw", "on")


class _Model:
    """Coefficients of the circuit rows, with the model branches fixed once per run."""

    def __init__(self, cz: Circuit, ops) -> None:
        self.cz = cz
        self.B = ops
        if ops is _FloatOps:
            pick = lambda a: float(a[0])  # noqa: E731
            self.r_th, self.tau_th = tuple(map(float, cz.r_th)), tuple(map(float, cz.tau_th))
        else:
            pick = lambda a: a  # noqa: E731
            self.r_th, self.tau_th = cz.r_th, cz.tau_th
        self.v_s, self.r, self.l, self.c = pick(cz.v_s), pick(cz.r), pick(cz.l), pick(cz.c)
        self.esr, self.i_lim = pick(cz.esr), pick(cz.i_lim)
        self.limit = cz.has_limit
        self.t_on = cz.t_on
        self.load = cz.load
        self.v_on = cz.v_on
        self.continuous = cz.load == "none" or (cz.load == "resistive" and cz.v_on == 0.0)
        self.g_free = cz.load in ("none", "constant_current")  # no load conductance
        self.cdvdt = self.c * cz.dvdt
        self.has_l = bool(np.any(cz.l > 0))
        self.tau_uv = float(cz.uvlo_filter)
        # shared constants looked up once (the float back end calls these every stage)
        self.floats = ops is _FloatOps
        self.mode = cz.mode
        self.regulates = cz.mode in ("slew", "power_limit")
        self.i_nom, self.p_load, self.p_lim = cz.i_nom, cz.p_load, cz.p_lim
        self.g_load = 1.0 / cz.r_load if cz.load == "resistive" else 0.0
        self.rds_on, self.alpha = cz.rds_on, cz.alpha

    def take(self, rows) -> "_Model":
        return _Model(self.cz.take(rows), self.B)

    def r_on(self, tj):
        return self.rds_on * self.B.maximum(1.0 + self.alpha * (tj - 25.0), 0.1)

    def switch_r(self, t, r_on):
        """Switch resistance: log-linear from R_OFF to r_on over t_on, then r_on."""
        if self.t_on > 0.0:
            if self.floats and t >= self.t_on:
                return r_on
            B = self.B
            x = B.minimum(t * (1.0 / self.t_on), 1.0)
            return B.exp(_LOG_ROFF + x * (B.log(r_on) - _LOG_ROFF))
        return r_on

    def load_linear(self, v, started):
        """Load current linearised at v: i_load ~ a + g v; and whether the load is on.

        A load is on above v_on and, once started, stays on (``started``: a load's own
        undervoltage lockout has hysteresis, so the dip its start causes does not turn it
        off again).
        """
        B = self.B
        if self.load == "none":
            return 0.0, 0.0, None
        if self.load == "resistive":
            g = self.g_load
            if self.v_on == 0.0:
                return 0.0, g, None
            on = started | (v > self.v_on)
            return 0.0, B.where(on, g, 0.0), on
        on = started | (v > self.v_on)
        if self.load == "constant_current":
            return B.where(on, self.i_nom, 0.0), 0.0, on
        vv = B.maximum(v, self.v_on)
        a = B.where(on, 2.0 * self.p_load / vv, 0.0)
        return a, -0.5 * a / vv, on

    def reference(self, v_p, a, g):
        """Limit reference linearised at the predictor v_p: i_ref ~ q + s v_out."""
        B = self.B
        if self.mode == "slew":
            q = self.cdvdt + a
            use_lim = q + g * v_p > self.i_lim
            return B.where(use_lim, self.i_lim, q), B.where(use_lim, 0.0, g)
        if self.mode == "power_limit":
            p_lim = self.p_lim
            vd = B.maximum(self.v_s - v_p, 0.0)
            disc = vd * vd - 4.0 * self.r * p_lim
            root = B.sqrt(B.maximum(disc, 0.0))
            ip = B.where(disc > 0.0, 2.0 * p_lim / B.maximum(vd + root, 1e-300), NO_LIMIT)
            use_lim = ip >= self.i_lim
            s = ip / B.maximum(root, 1e-3 * vd + 1e-300)
            return B.where(use_lim, self.i_lim, ip - s * v_p), B.where(use_lim, 0.0, s)
        return self.i_lim, 0.0

    def final_output(self, r_on):
        """DC operating point (v_f, i_f) with the switch fully on at resistance r_on."""
        rt = self.r + r_on
        if self.load == "none":
            return self.v_s, 0.0
        if self.load == "resistive":
            i = self.v_s / (rt + self.cz.r_load)
        elif self.load == "constant_current":
            i = self.i_nom
        else:
            disc = self.v_s * self.v_s - 4.0 * rt * self.p_load
            i = 2.0 * self.p_load / (self.v_s + self.B.sqrt(self.B.maximum(disc, 0.0)))
        return self.v_s - rt * i, i

    def stage(self, ts, dh, rhs_i, rhs_v, v_p, r_on, i_prev, dt_prev, started) -> _Stage:
        """Solve (l/dh + r + R_sw) i + v_out = rhs_i/dh + v_s and
        c v_c - dh (i - i_load(v_out)) = rhs_v, or i = i_ref where that is smaller."""
        B = self.B
        r_sw = self.switch_r(ts, r_on)
        a, g, on_p = self.load_linear(v_p, started)
        esr = self.esr
        st = _Stage()
        if self.g_free:
            av, ai = 1.0, esr
            a0 = -a * esr
            m21 = -dh
            m22 = self.c
            b2 = rhs_v - dh * a
            st.bad = None
        else:
            den = 1.0 + esr * g
            st.bad = den < 0.5
            av = 1.0 / B.where(st.bad, 1.0, den)
            ai = esr * av
            a0 = -a * ai
            m21 = -dh * (1.0 - g * ai)
            m22 = self.c + dh * g * av
            bad22 = m22 < 0.5 * self.c
            st.bad = st.bad | bad22
            m22 = B.where(bad22, self.c, m22)
            b2 = rhs_v - dh * (a + g * a0)
        m11 = self.l / dh + self.r + r_sw + ai
        b1 = rhs_i / dh + self.v_s - a0
        w = 1.0 / m22
        avw = av * w
        i_free = (b1 - avw * b2) / (m11 - avw * m21)
        if self.limit:
            q, s = self.reference(v_p, a, g)
            den_l = 1.0 - s * (ai - avw * m21)
            if self.regulates:
                weak = den_l < 0.1
                st.bad = weak if st.bad is None else (st.bad | weak)
                den_l = B.where(weak, 1.0, den_l)
            i_lim = (q + s * (a0 + avw * b2)) / den_l
            exc = i_free - i_lim
            lim = exc > 0.0
            i = B.where(lim, i_lim, i_free)
        else:
            exc = lim = None
            i = i_free
        vc = (b2 - m21 * i) * w
        vout = av * vc + ai * i + a0
        ic = i - a - g * vout
        if self.limit:
            fi = B.where(lim, self.l * (i - i_prev) / dt_prev, self.v_s - (self.r + r_sw) * i - vout)
            vds = B.where(lim, self.v_s - self.r * i - vout - fi, r_sw * i)
        else:
            fi = self.v_s - (self.r + r_sw) * i - vout
            vds = r_sw * i
        st.i, st.vc, st.vout, st.ic, st.fi, st.vds, st.lim, st.exc = i, vc, vout, ic, fi, vds, lim, exc
        st.p = vds * i
        st.r_sw = r_sw
        if on_p is None:
            st.event = st.on = None
        else:
            st.on = started | (vout > self.v_on)
            st.event = st.on ^ on_p
        return st


class _State:
    """Working values of the rows still being integrated (arrays, or floats for one row)."""


_STATE = ("t", "h", "grow", "phase", "h_back", "h_cut", "t_hi", "aimed", "i", "vc", "vout", "ic", "fi", "p",
          "exc", "lim", "theta", "tj", "r_on", "started", "i_scale", "atol_i", "atol_v", "t_est", "h_evt",
          "steps", "rows", "active", "i_peak", "t_i_peak", "p_peak", "v_pk", "i_pk", "e_fet", "t_limit",
          "v_in_min", "t_settle", "tj_peak", "v_flt", "v_flt_min")
FIGURES = ("i_peak", "t_i_peak", "p_peak", "v_pk", "i_pk", "e_fet", "t_limit", "v_in_min", "t_settle",
           "tj_peak", "t", "tj", "steps", "active", "i", "v_flt_min")


def _initial(model: _Model, t_est, i_typ, rows, active, t_amb: float) -> _State:
    """State at t = 0: the algebraic current where l = 0, zero current otherwise."""
    B, cz = model.B, model.cz
    n = cz.n
    S = _State()
    zero = np.zeros(n)
    r_on0 = cz.rds_on * np.maximum(1.0 + cz.alpha * (t_amb - 25.0), 0.1) * np.ones(n)
    m0 = _Model(replace(cz, l=zero), _ArrayOps)
    s0 = m0.stage(zero, np.full(n, 1e-300), zero, zero, zero, r_on0, zero, np.ones(n), np.zeros(n, bool))
    with_l = cz.l > 0
    exc0 = s0.exc if s0.exc is not None else -np.ones(n)
    lim0 = s0.lim if s0.lim is not None else np.zeros(n, bool)
    vals = {
        "i": np.where(with_l, 0.0, s0.i),
        "vc": zero,
        "vout": np.where(with_l, 0.0, s0.vout),
        "ic": np.where(with_l, 0.0, s0.ic),
        "exc": np.where(with_l, -1.0, exc0),
        "lim": np.where(with_l, False, lim0),
        "tj": np.full(n, t_amb),
        "r_on": r_on0,
        "t": zero,
        "h": 1e-7 * t_est,
        "grow": np.full(n, 8.0),
        "phase": np.zeros(n, np.int8),
        "h_back": zero,
        "t_hi": zero,
        "h_cut": zero,
        "aimed": np.zeros(n, bool),
        "h_evt": 1e-4 * t_est,
        "t_est": t_est,
        "atol_i": 1e-6 * i_typ,
        "i_scale": i_typ,
        "atol_v": 1e-7 * cz.v_s,
        "steps": np.zeros(n, np.int64),
        "e_fet": zero,
        "t_limit": zero,
        "v_in_min": np.full(n, np.inf),
        "t_settle": zero,
        "rows": rows,
        "active": active,
        "started": np.zeros(n, bool),
    }
    vals["fi"] = np.where(with_l, cz.v_s - vals["vout"], 0.0)
    vds0 = np.where(with_l, 0.0, s0.vds)
    vals["p"] = vds0 * vals["i"]
    vals["i_peak"] = np.maximum(vals["i"], 0.0)
    vals["t_i_peak"] = zero
    vals["p_peak"] = vals["p"]
    vals["v_pk"] = vds0
    vals["i_pk"] = vals["i"]
    vals["tj_peak"] = vals["tj"]
    vals["v_ds0"] = np.where(with_l, cz.v_s, vds0)
    # the UVLO filter has seen the supply before the switch turns on
    vals["v_flt"] = np.array(cz.v_s, dtype=float)
    vals["v_flt_min"] = np.array(cz.v_s, dtype=float)
    k = cz.r_th.shape[0]
    if B is _FloatOps:
        for key, val in vals.items():
            v = val[0]
            setattr(S, key, v.item() if hasattr(v, "item") else v)
        S.theta = [0.0] * k
    else:
        for key, val in vals.items():
            setattr(S, key, np.array(val, copy=True))
        S.theta = np.zeros((n, k))
    return S


def integrate(cz: Circuit, *, t_est, i_typ, active, t_amb: float, record: int | None, max_steps: int):
    """Integrate the start-up of the rows of ``cz`` that are ``active``.

    Parameters
    ----------
    cz : Circuit
    t_est : ndarray, shape (n,)
        Rough start-up duration per row, s (first step 1e-7 of it, largest 0.1 of it or
        of the elapsed time, event resolution 1e-4 of it).
    i_typ : ndarray, shape (n,)
        Typical current per row, A (absolute current tolerance 1e-6 of it).
    active : ndarray of bool, shape (n,)
        Rows to integrate.
    t_amb : float
        Ambient temperature, degC.
    record : int or None
        Row whose waveform is recorded.
    max_steps : int
        Step cap per row.

    Returns
    -------
    figures : dict of ndarray
        Names in `FIGURES`; ``active`` is True for rows stopped by the step cap.
    waveform : dict or None
    """
    n = cz.n
    ops = _FloatOps if n == 1 else _ArrayOps
    model = _Model(cz, ops)
    S = _initial(model, t_est, i_typ, np.arange(n), active.copy(), t_amb)
    final = {name: np.array(np.atleast_1d(getattr(S, name)), copy=True) for name in FIGURES}
    wave = None
    rec = None
    if record is not None and active[record]:
        rec = record
        pick = (lambda x: x) if ops is _FloatOps else (lambda x: x[record])
        wave = {"t": [0.0], "v_out": [float(pick(S.vout))], "i": [float(pick(S.i))],
                "v_ds": [float(pick(S.v_ds0))], "p_fet": [float(pick(S.p))], "tj": [t_amb]}
    if ops is _ArrayOps and not active.all():
        model, S = _compact(model, S, final)
        rec = _locate(S, record, rec)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        S = _run(model, S, final, wave, rec, record, t_amb, max_steps)
    _store(S, final, ops)
    return final, wave


def _locate(S: _State, record, rec):
    if rec is None:
        return None
    hit = np.nonzero(S.rows == record)[0]
    return int(hit[0]) if hit.size else None


def _run(model: _Model, S: _State, final: dict, wave, rec, record, t_amb: float, max_steps: int) -> _State:
    B = model.B
    arrays = B is _ArrayOps
    t_on = model.t_on
    it = 0
    while B.any(S.active):
        it += 1
        if it > max_steps:
            return S  # rows still active are reported as unfinished
        if arrays and S.rows.size > 64 and np.count_nonzero(S.active) < 0.6 * S.rows.size:
            model, S = _compact(model, S, final)
            rec = _locate(S, record, rec)
        m = model
        active = S.active
        S.steps = S.steps + active
        t, i, vc, vout, ic, fi = S.t, S.i, S.vc, S.vout, S.ic, S.fi
        h = B.minimum(S.h, 0.1 * B.maximum(S.t_est, t))
        if t_on > 0.0:
            cut = (t < t_on) & (t + h > t_on)
            h = B.where(cut, B.maximum(t_on - t, 1e-300), h)
        c = m.c
        gh = _G * h
        dh = _D * h
        dt1 = h - gh
        # stage 1: trapezoidal rule to t + gamma h; stage 2: BDF2 to t + h
        s1 = m.stage(t + gh, dh, m.l * i + dh * fi, c * vc + dh * ic, vout + gh * ic / c, S.r_on, i, gh,
                     S.started)
        s2 = m.stage(t + h, dh, m.l * (_C1 * s1.i - _C2 * i), c * (_C1 * s1.vc - _C2 * vc),
                     vout + (s1.vout - vout) * (1.0 / _G), S.r_on, s1.i, dt1, S.started)
        eh = _EC * h
        err = B.fabs(eh * (_W0 * ic + _W1 * s1.ic + _W2 * s2.ic) / c) / (S.atol_v + RTOL * m.v_s)
        if m.has_l:
            # the current is a differential state only where no point of the step regulates
            # filtered by the diagonal of the iteration matrix, (l + d h (r + R_sw + esr)),
            # as Hosea and Shampine advise for stiff components: an inductance far below
            # the step times the loop resistance no longer forces tiny steps
            ei = eh * (_W0 * fi + _W1 * s1.fi + _W2 * s2.fi) / (m.l + dh * (m.r + s2.r_sw + m.esr))
            if m.limit:
                ei = B.where(S.lim | s1.lim | s2.lim, 0.0, ei)
            err = B.maximum(err, B.fabs(ei) / (S.atol_i + RTOL * S.i_scale))
        bad = B.not_(err <= 1e300)
        if s1.bad is not None:
            bad = bad | s1.bad | s2.bad
        evt = None
        if s1.event is not None:
            # a load switching on inside the step: against the predictor of either stage,
            # or between the start of the step and its end
            on_n = S.started | (vout > m.v_on)
            evt = s1.event | s2.event | (s2.on ^ on_n)
        if m.limit:
            # the switch enters or leaves regulation inside the step
            turn = (S.lim ^ s1.lim) | (s1.lim ^ s2.lim)
            evt = turn if evt is None else (evt | turn)
        ok = active & (err <= 1.0) & B.not_(bad)
        if evt is not None:
            # ... is located within 1e-4 of the time scale (t_limit and the load's start to
            # that accuracy): a step holding an event must not be longer than h_evt
            long_evt = evt & (h > S.h_evt)
            ok = ok & B.not_(long_evt)
        fac_err = 0.9 * B.maximum(err, 1e-12) ** (-1.0 / 3.0)
        fac = B.minimum(B.maximum(fac_err, 0.2), S.grow)
        h_next = B.where(ok, h * fac, B.where(bad, 0.25 * h, h * B.maximum(fac, 0.1)))
        if evt is not None:
            hit = long_evt & B.not_(bad)
            f_on = (vout, s1.vout, s2.vout, m.v_on) if s1.event is not None else None
            f_lim = (S.exc, s1.exc, s2.exc, 0.0) if m.limit else None
            if arrays:
                h_next = _event_rows(S, ok, hit, evt, f_on, f_lim, t, h, h_next, fac_err)
            elif hit or S.phase == 1:
                h_next = _event_steps(B, S, ok, hit, evt, _event_frac(B, hit, f_on, f_lim), t, h, h_next, fac_err)
        S.h = h_next
        S.grow = B.where(ok, 8.0, 1.0)  # no growth right after a rejected step (Hairer & Wanner)
        if not B.any(ok):
            continue

        # junction temperature: exact Foster update with the power linear between stages
        th_g = B.foster(S.theta, S.p, s1.p, gh, m.r_th, m.tau_th)
        th_1 = B.foster(th_g, s1.p, s2.p, dt1, m.r_th, m.tau_th)
        tj_g = t_amb + B.rise(th_g)
        tj_1 = t_amb + B.rise(th_1)
        t1 = t + h

        # peak current: stage values, and the vertex of the quadratic where all free
        s1_hi = s1.i > s2.i
        pk = B.where(s1_hi, s1.i, s2.i)
        tpk = B.where(s1_hi, t + gh, t1)
        if not m.limit:
            ci = (s1.i - i - _G * (s2.i - i)) * (1.0 / (_G * _G - _G))
            bi = (s2.i - i) - ci
            cneg = ci < 0
            cs = B.where(cneg, ci, -1.0)
            xv = -bi / (2.0 * cs)
            use = cneg & (xv > 0) & (xv < 1)
            vert = i - bi * bi / (4.0 * cs)
            use = use & (vert > pk)
            pk = B.where(use, vert, pk)
            tpk = B.where(use, t + xv * h, tpk)
        new_pk = ok & (pk > S.i_peak)
        S.i_peak = B.where(new_pk, pk, S.i_peak)
        S.t_i_peak = B.where(new_pk, tpk, S.t_i_peak)
        s2_hi = s2.p > s1.p
        p_st = B.where(s2_hi, s2.p, s1.p)
        better = ok & (p_st > S.p_peak)
        S.v_pk = B.where(better, B.where(s2_hi, s2.vds, s1.vds), S.v_pk)
        S.i_pk = B.where(better, B.where(s2_hi, s2.i, s1.i), S.i_pk)
        S.p_peak = B.where(better, p_st, S.p_peak)
        S.e_fet = B.where(ok, S.e_fet + h * (_Q0 * S.p + _Q1 * s1.p + _Q2 * s2.p), S.e_fet)
        if m.limit:
            dtl = _lim_time(B, S.exc, s1.exc, gh) + _lim_time(B, s1.exc, s2.exc, dt1)
            S.t_limit = B.where(ok, S.t_limit + dtl, S.t_limit)
        # lowest switch input: the stage samples, and the floor of a notch shorter than the step
        v_lo = B.minimum(s1.vout + s1.vds, s2.vout + s2.vds)
        w_0 = m.v_s - m.r * i
        w_g = m.v_s - m.r * s1.i
        w_1 = m.v_s - m.r * s2.i
        cut_g = cut_1 = None
        if m.has_l and m.limit and s1.on is not None and B.any(evt & ok):
            # a load switching on while the FET regulates steps the reference up
            on_0 = on_n
            floor_g = s1.vout + s1.r_sw * s1.i
            floor_1 = s2.vout + s2.r_sw * s2.i
            cut_g = _notch(B, s1.lim & s1.on & B.not_(on_0), w_g, floor_g, m.l * (s1.i - i), gh)
            cut_1 = _notch(B, s2.lim & s2.on & B.not_(s1.on), w_1, floor_1, m.l * (s2.i - s1.i), dt1)
            if cut_g is not None:
                v_lo = B.where(cut_g[0], B.minimum(v_lo, floor_g), v_lo)
            if cut_1 is not None:
                v_lo = B.where(cut_1[0], B.minimum(v_lo, floor_1), v_lo)
        S.v_in_min = B.where(ok, B.minimum(S.v_in_min, v_lo), S.v_in_min)
        if m.tau_uv > 0.0:
            # the switch input v_s - r i - l di/dt through the UVLO's first-order filter
            if m.has_l:
                y_g, low_g = _uvlo_interval(B, S.v_flt, w_0, w_g, m.l * (s1.i - i), gh, m.tau_uv, cut_g,
                                            floor_g if cut_g is not None else None, S.v_flt_min)
                y_1, low_1 = _uvlo_interval(B, y_g, w_g, w_1, m.l * (s2.i - s1.i), dt1, m.tau_uv, cut_1,
                                            floor_1 if cut_1 is not None else None, S.v_flt_min)
            else:
                y_g, low_g = B.lag(S.v_flt, w_0, w_g, gh, m.tau_uv, S.v_flt_min)
                y_1, low_1 = B.lag(y_g, w_g, w_1, dt1, m.tau_uv, S.v_flt_min)
            S.v_flt_min = B.where(ok, B.minimum(S.v_flt_min, B.minimum(low_g, low_1)), S.v_flt_min)
            S.v_flt = B.where(ok, y_1, S.v_flt)
        S.tj_peak = B.where(ok, B.maximum(S.tj_peak, B.maximum(tj_g, tj_1)), S.tj_peak)

        r_on1 = m.r_on(tj_1)
        v_f, i_f = m.final_output(r_on1)
        band = SETTLE_BAND * B.fabs(v_f)
        d1 = B.fabs(s2.vout - v_f) - band
        out_1 = d1 > 0
        if B.any(B.not_(out_1)):  # some row ends the step inside the band: where did it enter
            d0 = B.fabs(vout - v_f) - band
            dg = B.fabs(s1.vout - v_f) - band
            x1 = dg / B.where(dg > d1, dg - d1, 1.0)
            x0 = d0 / B.where(d0 > dg, d0 - dg, 1.0)
            cross_g1 = t + gh + dt1 * B.minimum(B.maximum(x1, 0.0), 1.0)
            cross_0g = t + gh * B.minimum(B.maximum(x0, 0.0), 1.0)
            ts_new = B.where(out_1, t1, B.where(dg > 0, cross_g1, B.where(d0 > 0, cross_0g, S.t_settle)))
        else:
            ts_new = t1
        S.t_settle = B.where(ok, ts_new, S.t_settle)

        if rec is not None:
            take = (lambda x: x) if not arrays else (lambda x: x[rec])
            if take(ok):
                wave["t"].append(float(take(t1)))
                wave["v_out"].append(float(take(s2.vout)))
                wave["i"].append(float(take(s2.i)))
                wave["v_ds"].append(float(take(s2.vds)))
                wave["p_fet"].append(float(take(s2.p)))
                wave["tj"].append(float(take(tj_1)))

        # commit the accepted rows
        S.t = B.where(ok, t1, t)
        S.i = B.where(ok, s2.i, i)
        S.vc = B.where(ok, s2.vc, vc)
        S.vout = B.where(ok, s2.vout, vout)
        S.ic = B.where(ok, s2.ic, ic)
        S.fi = B.where(ok, s2.fi, fi)
        S.p = B.where(ok, s2.p, S.p)
        if m.limit:
            S.exc = B.where(ok, s2.exc, S.exc)
            S.lim = B.where(ok, s2.lim, S.lim)
        S.theta = B.where(ok[:, None], th_1, S.theta) if arrays else (th_1 if ok else S.theta)
        S.tj = B.where(ok, tj_1, S.tj)
        S.r_on = B.where(ok, r_on1, S.r_on)
        S.i_scale = B.maximum(S.i_scale, B.fabs(S.i))
        if not m.continuous:
            S.started = S.started | (ok & (B.maximum(s1.vout, s2.vout) > m.v_on))

        dev = m.l * (S.i - i_f) ** 2 + c * (S.vc - v_f) ** 2
        done = ok & (dev <= c * (STOP_BAND * v_f) ** 2)
        if m.limit:
            done = done & B.not_(S.lim)
        if t_on > 0.0:
            done = done & (S.t >= t_on)
        S.active = active & B.not_(done)
    return S


def _store(S: _State, final: dict, ops) -> None:
    for name in FIGURES:
        val = getattr(S, name)
        if ops is _FloatOps:
            final[name][0] = val
        else:
            final[name][S.rows] = val


def _compact(model: _Model, S: _State, final: dict):
    """Write the figures of all working rows, then keep only the active ones."""
    _store(S, final, _ArrayOps)
    keep = np.nonzero(S.active)[0]
    n_old = S.rows.shape[0]
    for name in _STATE:
        val = getattr(S, name, None)
        if isinstance(val, np.ndarray) and val.ndim >= 1 and val.shape[0] == n_old:
            setattr(S, name, val[keep])
    return model.take(keep), S


def _notch(B, event, w_b, floor, area, dt):
    """Where the regulated reference stepped up inside a stage interval: the notch.

    The ideal FET is then fully on until the inductance carries the new current: the
    switch input falls to ``floor`` = v_out + R_sw i (V) for area / (w_b - floor) seconds,
    ``area`` = l (i_b - i_a) (V s) being the inductive drop's integral, w_b = v_s - r i_b
    (V). Returns None where no row has such a notch, else (mask, width in s) for the rows
    whose notch is shorter than the interval (``dt``, s): the others resolve it.
    """
    if not B.any(event):
        return None
    depth = w_b - floor
    width = area / B.where(depth > 0.0, depth, 1.0)
    use = event & (depth > 0.0) & (width > 0.0) & (width < dt)
    if not B.any(use):
        return None
    return use, B.where(use, width, 0.5 * dt)


def _uvlo_interval(B, y, w_a, w_b, area, dt, tau: float, cut, floor, low_so_far):
    """The UVLO filter over one stage interval of length dt (s).

    The filter input is v_s - r i, linear from w_a to w_b (V), less the inductive drop
    l di/dt whose integral over the interval is ``area`` = l (i_b - i_a) (V s). The drop
    is taken at its mean over the interval, except in the rows of ``cut`` (from `_notch`),
    where it is the notch down to ``floor`` at the end of the interval. Either way its
    area is exact; the notch also has its depth, which matters when the filter is not
    much slower than the interval. Returns the filter output at the end and its lowest
    value inside the interval (V), exact where it is below ``low_so_far`` (`lag`).
    """
    mean = area / dt
    y1, low = B.lag(y, w_a - mean, w_b - mean, dt, tau, low_so_far)
    if cut is None:
        return y1, low
    use, width = cut
    lead = dt - width
    y_m, low_m = B.lag(y, w_a, w_a + (w_b - w_a) * (lead / dt), lead, tau, low_so_far)
    y_n, low_n = B.lag(y_m, floor, floor, width, tau, low_so_far)
    return B.where(use, y_n, y1), B.where(use, B.minimum(low_m, low_n), low)


def _crossing(B, f0, f1, f2):
    """Fraction of the step where f, linear between the step start (f0), the trapezoidal
    stage (f1, at gamma) and the end (f2), first changes sign; 2 where it does not."""
    p0, p1, p2 = f0 > 0.0, f1 > 0.0, f2 > 0.0
    c01 = p0 ^ p1
    c12 = p1 ^ p2
    x01 = _G * f0 / B.where(c01, f0 - f1, 1.0)
    x12 = _G + (1.0 - _G) * f1 / B.where(c12, f1 - f2, 1.0)
    return B.where(c01, x01, B.where(c12, x12, 2.0))


def _event_frac(B, hit, f_on, f_lim):
    """Where in the step the stage values put the event (`_crossing`): v_out crossing v_on
    (``f_on``: v_out at the step start, the stage and the end, and v_on) or the limit
    excess crossing 0 (``f_lim``), the earlier one; 2 where no row is hit."""
    if not B.any(hit):
        return 2.0
    frac = None
    for f in (f_on, f_lim):
        if f is not None:
            x = _crossing(B, f[0] - f[3], f[1] - f[3], f[2] - f[3])
            frac = x if frac is None else B.minimum(frac, x)
    return frac


_EVENT_STATE = ("h_evt", "phase", "h_back", "t_hi", "aimed", "h_cut")


def _event_rows(S: _State, ok, hit, evt, f_on, f_lim, t, h, h_next, fac_err):
    """`_event_steps` on the array back end, on the rows it concerns (those hit or still
    locating an event): in a large batch a few rows at a time, so it runs on those
    rows alone and writes back (the same arithmetic, row by row)."""
    B = _ArrayOps
    sel = hit | (S.phase == 1)
    k = int(np.count_nonzero(sel))
    if k == 0:
        return h_next
    if k == sel.size or sel.size <= 64:
        return _event_steps(B, S, ok, hit, evt, _event_frac(B, hit, f_on, f_lim), t, h, h_next, fac_err)
    idx = np.flatnonzero(sel)
    sub = _State()
    for name in _EVENT_STATE:
        setattr(sub, name, getattr(S, name)[idx])
    pick = lambda f: None if f is None else tuple(x[idx] for x in f[:3]) + (f[3],)  # noqa: E731
    hit_i = hit[idx]
    hn = _event_steps(B, sub, ok[idx], hit_i, evt[idx], _event_frac(B, hit_i, pick(f_on), pick(f_lim)),
                      t[idx], h[idx], h_next[idx], fac_err[idx])
    for name in _EVENT_STATE[1:]:
        getattr(S, name)[idx] = getattr(sub, name)
    h_next = np.array(h_next, copy=True)
    h_next[idx] = hn
    return h_next


def _event_steps(B, S: _State, ok, hit, evt, frac, t, h, h_next, fac_err):
    """Next step sizes while an event (a load switching on, the switch entering or
    leaving regulation) is being located, and the bookkeeping of each row.

    A step longer than h_evt that holds an event is rejected (``hit``); its end bounds the
    event (``S.t_hi``). Where the stage values put the event beyond the first quarter of
    the step (its sign change, linear between them: ``frac``) the next step ends half an
    h_evt before that estimate and, once accepted, the one after it tries the rest of the
    bracket, short enough by then to cross the event. Otherwise the step is cut to a
    quarter, and the accepted steps keep that size (they do not grow back) until the event
    is reached (growing back to it after a cut for the error). Never shorter than h_evt.
    When an accepted step holds the event (``evt``) the steps grow back at once, by the
    error control's own factor 0.9 err^(-1/3) (``fac_err``) without its limit of x4, up to
    the step size the event cut (``S.h_back``).
    """
    h_evt = S.h_evt
    if B.any(hit):
        land = B.where(frac < 1.0, frac * h - 0.5 * h_evt, 0.0)
        aimed = land >= 0.25 * h
        S.h_back = B.where(hit & (S.phase == 0), h, S.h_back)
        S.t_hi = B.where(hit, t + h, S.t_hi)
        S.aimed = B.where(hit, aimed, S.aimed)
        S.phase = B.where(hit, 1, S.phase)
        h_cut = B.maximum(B.where(aimed, land, 0.25 * h), h_evt)
        S.h_cut = B.where(hit, h_cut, S.h_cut)
        h_next = B.where(hit, h_cut, h_next)
    # crossed it, or passed the bracket without meeting it (an event the predictor saw)
    crossed = ok & (evt | (t + h >= S.t_hi))
    rest = B.maximum(S.t_hi - (t + h), h_evt)
    go_on = B.where(S.aimed, rest, B.minimum(B.minimum(h_next, S.h_cut), rest))
    resume = B.maximum(B.minimum(S.h_back, h * fac_err), h_evt)
    h_next = B.where(ok & (S.phase == 1), B.where(crossed, resume, go_on), h_next)
    S.phase = B.where(crossed, 0, S.phase)
    return h_next


def _lim_time(B, e0, e1, dt):
    """Time with positive limit excess over a step where the excess varies linearly:
    dt times the part of [0, 1] where it is positive, max(e0, e1) / |e0 - e1| clipped to
    [0, 1] (1 where both are positive, 0 where neither is)."""
    frac = B.maximum(e0, e1) / (B.fabs(e0 - e1) + 1e-300)
    return dt * B.minimum(B.maximum(frac, 0.0), 1.0)
