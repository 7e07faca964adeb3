"""TR-BDF2 integration of the switched-rail circuit, on arrays of rows or on one row.

Provides
--------
integrate(cz, *, t_est, i_typ, active, t_amb, record, max_steps, timer=False)
    Run the adaptive TR-BDF2 integration of every active row of a `Circuit` and return the
    raw figures (dict of arrays, with each row's outcome) and the waveform of the
    recorded row.
RETRY_ATTEMPTS, TJ_RUNAWAY_K
    The largest number of attempts of a retrying switch, and the junction temperature
    above tj_max at which a row stops as destroyed.

One algorithm, two arithmetic back ends: `_ArrayOps` advances all rows of a batch in one
vectorised iteration (corners, Monte Carlo, candidate capacitances), `_FloatOps` runs the
very same code on Python floats for a single row, where the cost of a NumPy call would
exceed the arithmetic it does. Each row has its own adaptive step in both cases.

`_run` is the step loop; each part of a step is one helper, in this order: `_propose_step`
(the size, landing on instants), `_take_stages` (the two stages into a `_Step`),
`_local_error`, `_control_step` (acceptance, events through `_step_events` and
`_event_steps`, the next size); then for the rows that accept it `_peak_current`,
`_peak_power_and_energy`, `_dip` (the switch input and the time below the UVLO),
`_junction_peak`, `_settling`, `_commit` (the new `_State`) and `_finished` (outcomes;
trips and retries in `_switch_events`).

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
G. Wanner, "Solving Ordinary Differential Equations II", section IV.8; from memory). The
estimate of each state is filtered by the iteration matrix, as Hosea and Shampine advise
for stiff components, so that an inductance far below the step times the loop resistance
no longer forces tiny steps.

States: the series current i_L (through r and l), the switch-input voltage v_in across
c_in (where there is an input capacitance), the output capacitor voltage v_c, the Foster
stage rises and, with a gate drive, the gate charge (`_Model._gate_current`: the channel's
current in a stage is solved exactly for the stage's linear relations, the gate's estimate
and its effect on the channel current through the transconductance enter the step control). Eliminating i_L and v_in from a stage's implicit equations leaves the switch
facing a Thevenin source v_in = E - Z i_sw: without c_in E = rhs_L / dh + v_s,
Z = l / dh + r; with c_in, from l i_L - dh (v_s - r i_L - v_in) = rhs_L and
c_in v_in - dh (i_L - i_sw) = rhs_in,

    E = (rhs_in (l + dh r) + dh (rhs_L + dh v_s)) / D,  Z = dh (l + dh r) / D,
    D = c_in (l + dh r) + dh^2,

so each stage stays a 2x2 linear system in (i_sw, v_c): the load and the limit reference
are linearised at a second-order predictor of v_out (one Newton step), the
complementarity of the limit (v_reg >= 0, i <= i_ref, one of them tight) is resolved by
taking the regulated solution where the unregulated current exceeds it. Afterwards
v_in = E - Z i_sw and i_L = i_sw + (c_in v_in - rhs_in) / dh. With l = r = 0 the same
formulas give v_in = v_s: c_in then has no effect.

A step in which a load switches on or off at v_on, or the switch enters or leaves
regulation, is rejected until it is shorter than 1e-4 of the time scale (so t_limit and
the load's start are located to that accuracy); the steps that close in on the event aim
at it from the stage values and do not grow back until it is crossed, after which the
error control resumes the step size the event cut (`_event_steps`). Steps land exactly on
the end of the turn-on ramp, on the instant the fault timer trips (a step that would
carry the regulation time past t_fault is cut back by the excess) and on the end of a
retry's off time.

Junction temperature: the Foster stage rises are advanced exactly with the power linear
between stage points (`thermal.foster_step`); where the rise increases at the start of a
step and decreases at its end, the closed form also gives the peak inside it
(`thermal.foster_peak`), so the peak is not under-sampled. The step control bounds the
thermal state too: the part of the rise owed to the bend of the power at the stage point
(the difference from the power linear over the whole step; an estimate of the error of
the piecewise-linear power) must stay below TJ_RTOL of (tj_max - t_ambient), and where
Rds(on) follows Tj (a temperature coefficient) the rise may change by at most TJ_STEP of that
span per step while the switch conducts (the step factor for that bound is linear in h).
Rds(on) of a stage follows the junction temperature extrapolated to the stage with the
slope of the previous step. Checked against scipy's solve_ivp within 0.5 % of the rise
(tests/analysis/test_tj_peak.py).

Fault timer (``timer=True``): each attempt accumulates the time the switch regulates
(v_reg > 0); when it reaches the row's t_fault the switch turns off at that instant: its
current is 0 from then on (the voltage spike of the series inductance at turn-off is not
modelled; without c_in the series current simply stops). "latch": the switch stays off and
the run goes on until the input side has settled (with c_in it rings, and the ring belongs
to the dip: settled when its energy is within the stop band, or after two periods of
2 pi sqrt(l c_in), by when an undamped ring has shown its lowest point, and the input back
above the UVLO threshold) and a quarter of the attempt's length of the output's decay is in
the waveform. "retry": off for retry_off,
then a new attempt (the turn-on ramp restarts, the regulation count resets), up to
RETRY_ATTEMPTS attempts, or 1 + the timer's retries before latching where fewer. While the switch is off a started load stops drawing when v_out
falls to v_on (its own undervoltage lockout) and no load draws at v_out <= 0; while it is
on a started load keeps drawing (the hysteresis of that lockout).

The switch input: v_in is the c_in state, or without c_in v_out + v_ds (v_s - r i_L - l
di_L/dt), sampled at the stage points and taken as linear in between for the time below the
UVLO threshold (crossings interpolated). Without c_in a regulated stage's sample holds the
inductive drop as its mean over the interval, l (i_b - i_a) / dt, so two shapes are put
back: entering regulation, the fully-on switch passes the inductance's current until it
reaches the reference, and the input is lowest just before, v_out + R_sw i_ref at the
crossing located between the stage values (then di/dt stops and it steps up); and where a
load switching on steps the regulated reference up, the ideal FET is fully on for the few
nanoseconds the inductance needs to take the new current and the input falls to
v_out + R_sw i for l delta-i / depth seconds: that notch is shorter than any step and is put
back with its floor and width (`_notch`). Such a floor, and any fully-on sample (or entry
edge) of an instant turn-on (t_on = 0), is a dip that only input capacitance bounds: the
row's ``unb`` flag says the lowest value was set there.

The peak power is found between stage points as well (the vertex of the quadratic through
a step's three power values, with v_ds and the current on their own quadratics there). Its
operating point is the peak's own, except under a power limit, where it is the highest v_ds
among the points whose power lies within ``PEAK_BAND`` (5 %) of the peak: the plateau's
harder end for the SOA, which a brief overshoot does not move (the reference neglects the
inductive drop, so a load switching on can lift the power a few percent for a step; common
practice, no source).

A row stops when its attempt completes (the switch no longer regulates, the turn-on ramp
is over and the energy of the deviation from the DC operating point,
l (i_L - i_f)^2 + c_in (v_in - v_s + r i_f)^2 + c (v_c - v_f)^2, is below
c (1e-3 v_f)^2), when a tripped switch has been followed far enough, or when its junction
passes tj_max + TJ_RUNAWAY_K (the FET would be destroyed, and Rds(on) extrapolated that
far means nothing). Rows still running at the step cap keep what they computed.
"""

from __future__ import annotations

import math
import operator

import numpy as np

from .bank import charge, fraction, voltage
from .circuit import NO_LIMIT, R_OFF, Circuit
from .foldback import foldback_floats, foldback_limit, foldback_slope
from .thermal import (foster_peak, foster_peak_floats, foster_rate, foster_rate_floats, foster_step,
                      foster_step_floats)

__all__ = ["RTOL", "SETTLE_BAND", "STOP_BAND", "TJ_RTOL", "TJ_STEP", "RETRY_ATTEMPTS", "TJ_RUNAWAY_K",
           "OUTCOME_RUNNING", "OUTCOME_COMPLETE", "OUTCOME_OFF", "OUTCOME_RUNAWAY", "integrate"]

PEAK_BAND = 0.05  # under a power limit, points within 5 % of the peak power count as its plateau
RTOL = 2e-4  # local error tolerance relative to v_s and to the largest current so far
SETTLE_BAND = 0.01  # t_settle: output within 1 % of its final value
STOP_BAND = 1e-3  # stop when the deviation energy corresponds to 0.1 % of v_f
TJ_RTOL = 5e-4  # local error of the junction rise per step, of (tj_max - t_ambient)
TJ_STEP = 0.1  # largest change of the junction rise per step while Rds(on) follows it, of (tj_max - t_ambient)
RETRY_ATTEMPTS = 8  # attempts of a retrying switch before the run gives up
TJ_RUNAWAY_K = 100.0  # K above tj_max: the row stops as destroyed
OUTCOME_RUNNING, OUTCOME_COMPLETE, OUTCOME_OFF, OUTCOME_RUNAWAY = 0, 1, 2, 3

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
_DH_INSTANT = 1e-200  # s: the stage of a switching instant (differential states hold)
_LAND = 1e-12  # relative: a step ending this close to an instant has landed on it
_INF = math.inf


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
        return bool(m.any()) if isinstance(m, np.ndarray) else bool(m)

    @staticmethod
    def not_(m):
        return ~m

    foster = staticmethod(foster_step)
    rate = staticmethod(foster_rate)

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

    foster = staticmethod(foster_step_floats)
    rate = staticmethod(foster_rate_floats)

    @staticmethod
    def rise(theta):
        return sum(theta)


class _Stage:
    __slots__ = ("i", "il", "vc", "vout", "vin", "ic", "fi", "fin", "vds", "p", "lim", "exc", "event", "bad",
                 "r_sw", "on", "vg", "fg", "exc_c", "bq", "bv", "bi")


class _Model:
    """Coefficients of the circuit rows, with the model branches fixed once per run."""

    def __init__(self, cz: Circuit, ops, timer: bool = False) -> None:
        self.cz = cz
        self.ops = ops
        if ops is _FloatOps:
            pick = lambda a: float(a[0])  # noqa: E731
            self.r_th, self.tau_th = tuple(map(float, cz.r_th)), tuple(map(float, cz.tau_th))
        else:
            pick = lambda a: a  # noqa: E731
            self.r_th, self.tau_th = cz.r_th, cz.tau_th
        self.v_s, self.r, self.l, self.c = pick(cz.v_s), pick(cz.r), pick(cz.l), pick(cz.c)
        self.esr, self.i_lim = pick(cz.esr), pick(cz.i_lim)
        self.bank = cz.bank is not None
        if self.bank:
            self.bk_tables, self.bk_esr = cz.bank.tables, cz.bank.esr
            self.bk_c = cz.bank_c[0] if ops is _FloatOps else cz.bank_c
            # the error control and the predictors read the bank's lowest capacitance
            self.c = pick((cz.bank_c * cz.bank.lowest_fraction()).sum(axis=1))
        self.gate = cz.gate
        self.limit = cz.has_limit or cz.gate is not None
        # a gate drive replaces the turn-on ramp and the slew reference
        self.t_on = cz.t_on if cz.gate is None else 0.0
        self.instant = cz.t_on == 0.0 and cz.gate is None  # an instant turn-on (no ramp, no gate)
        self.fold = cz.fold
        if cz.fold is not None:
            self.fold_scale = pick(cz.fold_scale())
            if ops is _FloatOps:
                self.fold_f, self.fold_df = foldback_floats(cz.fold)
        self.load = cz.load
        self.v_on = cz.v_on
        self.continuous = cz.load == "none" or (cz.load == "resistive" and cz.v_on == 0.0)
        self.g_free = cz.load in ("none", "constant_current")  # no load conductance
        self.cdvdt = self.c * cz.dvdt
        self.has_l = bool(np.any(cz.l > 0))  # (no rows at all: the compaction left none)
        # the input capacitance matters only behind some series resistance or inductance
        self.c_in = float(cz.c_in) if (cz.c_in > 0.0 and bool(np.any(cz.l + cz.r > 0))) else 0.0
        self.has_cin = self.c_in > 0.0
        # the dip only input capacitance bounds: none here, and series inductance
        self.dip_flag = self.has_l and not self.has_cin
        self.notch = self.dip_flag and self.limit and not self.continuous
        self.t_ring = 2.0 * math.pi * math.sqrt((float(np.max(cz.l)) if cz.l.size else 0.0) * self.c_in)
        self.uvlo = float(cz.uvlo)
        self.has_uvlo = math.isfinite(self.uvlo)
        self.timer = timer
        self.retry = cz.after_fault == "retry"
        self.retry_off = float(cz.retry_off)
        # attempts before the switch latches: 1 + its retries, never more than the run's cap
        self.attempts = RETRY_ATTEMPTS if cz.attempts is None else min(int(cz.attempts), RETRY_ATTEMPTS)
        self.t_fault = pick(cz.t_fault) if timer else None
        self.th_span = float(cz.tj_max - cz.t_amb)
        self.tj_runaway = float(cz.tj_max + TJ_RUNAWAY_K)
        # shared constants looked up once (the float back end calls these every stage)
        self.floats = ops is _FloatOps
        self.mode = cz.mode
        self.slew = cz.mode == "slew" and cz.gate is None
        self.regulates = self.slew or cz.mode == "power_limit" or cz.fold is not None
        # the limits whose reference is linearised again at the solution
        self.relinearise = cz.mode == "power_limit" or cz.fold is not None
        self.i_nom, self.p_load, self.p_lim = cz.i_nom, cz.p_load, cz.p_lim
        self.g_load = 1.0 / cz.r_load if cz.load == "resistive" else 0.0
        self.rds_on, self.alpha = pick(cz.rds_on), cz.alpha
        self.rds_t = cz.rds_t
        # the lowest ratio the Rds(on) data allows (the linear coefficient's floor: 0.1, see rds_at)
        self.r_floor_ratio = 0.1 if cz.rds_t.curve is None else min(k for _, k in cz.rds_t.curve)
        # the step control's bounds on the junction's change, and whether Rds(on) follows it
        self.tol_th = TJ_RTOL * self.th_span
        self.step_th = TJ_STEP * self.th_span
        self.varies = cz.rds_t.varies

    def take(self, rows) -> "_Model":
        return _Model(self.cz.take(rows), self.ops, self.timer)

    def r_on(self, tj):
        """Switch on-resistance at junction temperature ``tj`` (held at the edge of the part's data)."""
        if self.floats:
            return self.rds_on * self.rds_t.ratio_float(tj)
        return self.rds_on * self.rds_t.ratio(tj)

    def switch_r(self, t, r_on):
        """Switch resistance ``t`` seconds after turn-on: log-linear from R_OFF to r_on over
        t_on, then r_on."""
        if self.t_on > 0.0:
            if self.floats and t >= self.t_on:
                return r_on
            ops = self.ops
            x = ops.minimum(ops.maximum(t * (1.0 / self.t_on), 0.0), 1.0)
            return ops.where(x < 1.0, ops.exp(_LOG_ROFF + x * (ops.log(r_on) - _LOG_ROFF)), r_on)
        return r_on

    def load_linear(self, v, started, sw_on):
        """Load current linearised at v: i_load ~ a + g v; and whether the load is on.

        A load is on above v_on and, once started, stays on while the switch is on (a
        load's own undervoltage lockout has hysteresis, so the dip its start causes does
        not turn it off again). While the switch is off (``sw_on`` False) a started load
        stops once v falls to v_on (to 0 V for v_on = 0).
        """
        ops = self.ops
        if self.load == "none":
            return 0.0, 0.0, None
        if self.load == "resistive" and self.v_on == 0.0:
            return 0.0, self.g_load, None
        above = v > self.v_on
        if sw_on is None:
            on = started | above
        else:
            on = ops.where(sw_on, started | above, started & above)
        if self.load == "resistive":
            return 0.0, ops.where(on, self.g_load, 0.0), on
        if self.load == "constant_current":
            return ops.where(on, self.i_nom, 0.0), 0.0, on
        vv = ops.maximum(v, self.v_on)
        a = ops.where(on, 2.0 * self.p_load / vv, 0.0)
        return a, -0.5 * a / vv, on

    def reference(self, v_p, a, g, e_ref, z_ref, cdvdt=None):
        """Limit reference linearised at the predictor v_p: i_ref ~ q + s v_out.

        The power limit holds (e_ref - z_ref i - v_out) i = p_lim: the switch faces the
        source e_ref behind z_ref (v_s and r without c_in, the l di/dt of the regulated
        current neglected; the stage's Thevenin source with c_in).
        """
        ops = self.ops
        lq, ls = self.limit_line(v_p, e_ref, z_ref)
        if self.slew:
            q = (self.cdvdt if cdvdt is None else cdvdt) + a
            if self.fold is None:
                use_lim = q + g * v_p > self.i_lim
            else:
                use_lim = q + g * v_p > lq + ls * v_p
            return ops.where(use_lim, lq, q), ops.where(use_lim, ls, g)
        if self.mode == "power_limit":
            p_lim = self.p_lim
            vd = ops.maximum(e_ref - v_p, 0.0)
            disc = vd * vd - 4.0 * z_ref * p_lim
            root = ops.sqrt(ops.maximum(disc, 0.0))
            ip = ops.where(disc > 0.0, 2.0 * p_lim / ops.maximum(vd + root, 1e-300), NO_LIMIT)
            use_lim = ip >= (self.i_lim if self.fold is None else lq + ls * v_p)
            s = ip / ops.maximum(root, 1e-3 * vd + 1e-300)
            return ops.where(use_lim, lq, ip - s * v_p), ops.where(use_lim, ls, s)
        return lq, ls

    def limit_line(self, v_p, e_ref, z_ref):
        """The current limit linearised at the predictor v_p: i_lim ~ q + s v_out.

        Constant: (i_lim, 0). Foldback: the curve F (scaled per row) at V_DS = e_ref -
        z_ref i - v_out, linearised at V_DS_p = e_ref - v_p - z_ref F(e_ref - v_p) with its
        segment's slope F' (<= 0): i = F(V_p) + F' (e_ref - z_ref i - v_out - V_p), solved for i.
        """
        if self.fold is None:
            return self.i_lim, 0.0
        ops = self.ops
        sc = self.fold_scale
        vd = ops.maximum(e_ref - v_p, 0.0)
        if self.floats:
            vd1 = max(vd - z_ref * sc * self.fold_f(vd), 0.0)
            f1, df = sc * self.fold_f(vd1), sc * self.fold_df(vd1)
        else:
            vd = np.broadcast_to(vd, np.shape(sc)) if np.ndim(vd) < np.ndim(sc) else vd
            vd1 = np.maximum(vd - z_ref * sc * foldback_limit(self.fold, vd), 0.0)
            f1, df = sc * foldback_limit(self.fold, vd1), sc * foldback_slope(self.fold, vd1)
        den = ops.maximum(1.0 + df * z_ref, 0.1)
        return (f1 + df * (e_ref - vd1)) / den, -df / den

    def _gate_current(self, dh, E, Z, rhs_g, vo0, vo1):
        """The FET's channel current in a stage, and the gate voltage v_g = g0 + g1 i.

        The gate charge q_g = C_t v_g - C_gd v_in - C_gs v_out (C_t = C_gs + C_gd + C_ext)
        obeys dq_g/dt = i_g0 - g_g v_g; its stage equation q_g - dh (i_g0 - g_g v_g) = rhs_g with
        v_in = E - Z i and v_out = vo0 + vo1 i gives v_g linear in the switch current i, so the
        overdrive V_GS - V_th = A - beta i (beta >= 0: more current lifts the source and,
        through C_gd, lowers the gate) and V_DS = D - delta i are linear in i. The channel is
        the SPICE level-1 MOSFET with lambda = 0 (H. Shichman and D. A. Hodges, IEEE J.
        Solid-State Circuits 3 (1968) 285-289): in saturation (V_DS >= u) i = k/2 u^2, the
        quadratic (k beta / 2) u^2 + u - A = 0 in the overdrive u, solved in its stable form
        u = 2 A / (1 + sqrt(1 + 2 k beta A)); in the linear region i = k (u V_DS - V_DS^2 / 2),
        a quadratic a2 i^2 + a1 i + a0 = 0 whose root on the falling side is
        (-a1 - sqrt(a1^2 - 4 a2 a0)) / (2 a2), taken in the form without cancellation (Press et
        al., "Numerical Recipes", section 5.6), never above the saturation current. Both are
        exact for the stage's linear relations; 0 below the threshold. The stage takes the smaller of this current and the fully
        enhanced V_DS / Rds(on) (`stage`).
        """
        gm = self.gate
        ops = self.ops
        cd = gm.c_total + dh * gm.g_g
        g0 = (rhs_g + dh * gm.i_g0 + gm.c_gd * E + gm.c_gs * vo0) / cd
        g1 = (gm.c_gs * vo1 - gm.c_gd * Z) / cd
        a = ops.maximum(g0 - vo0 - gm.v_th, 0.0)
        beta = ops.maximum(vo1 - g1, 0.0)
        k = gm.k
        u = 2.0 * a / (1.0 + ops.sqrt(1.0 + 2.0 * k * beta * a))
        i_sat = 0.5 * k * u * u
        d, delta = E - vo0, Z + vo1
        linear = d - delta * i_sat < u  # the saturation solution would have V_DS below its overdrive
        if ops.any(linear):
            a2 = k * (beta * delta - 0.5 * delta * delta)
            a1 = k * (d * delta - a * delta - beta * d) - 1.0
            a0 = k * (a * d - 0.5 * d * d)
            disc = a1 * a1 - 4.0 * a2 * a0
            root = ops.sqrt(ops.maximum(disc, 0.0))
            # the root on the falling side, (-a1 - root) / (2 a2), in the form without cancellation
            up = a1 > 0.0
            i_lin = ops.where(up, (-a1 - root) / ops.where(a2 < 0.0, 2.0 * a2, -1.0),
                              2.0 * a0 / ops.where(up, 1.0, root - a1 + 1e-300))
            ok_lin = linear & (disc >= 0.0) & (ops.not_(up) | (a2 < 0.0))
            i_sat = ops.where(ok_lin, ops.minimum(ops.maximum(i_lin, 0.0), i_sat), i_sat)
        return i_sat, g0, g1

    def _gate_node(self, st: _Stage, dh, rhs_g, g0, g1, sw_on) -> None:
        """The stage's gate voltage and gate current into ``st`` (``vg``, ``fg``).

        v_g = g0 + g1 i and the drive's current i_g0 - g_g v_g, whichever of the channel, the
        fully enhanced Rds(on) or the current limit sets the current: while the current limit holds
        it, the gate goes on charging from its drive (the controller's pull-down of the gate is not
        modelled), so that once the limit lets go the channel passes at once what the gate then
        allows, no less than the real gate rising again from its held level would (the higher
        current, conservatively). An off switch has its gate pulled to its source (V_GS = 0),
        no gate current.
        """
        gm = self.gate
        ops = self.ops
        i = st.i
        vg = g0 + g1 * i
        fg = gm.i_g0 - gm.g_g * vg
        if sw_on is not None:
            vg = ops.where(sw_on, vg, st.vout)
            fg = ops.where(sw_on, fg, 0.0)
        st.vg, st.fg = vg, fg

    def r_final(self, r_on):
        """The switch resistance of the DC operating point: Rds(on), or with a voltage gate
        drive the level-1 channel at the drive's overdrive, 1 / (k (v_drive - v_s - V_th)),
        where that is higher (a drive that never enhances the FET fully)."""
        gm = self.gate
        if gm is None or gm.g_g == 0.0:
            return r_on
        over = self.ops.maximum(gm.i_g0 / gm.g_g - self.v_s - gm.v_th, 1e-9)
        return self.ops.maximum(r_on, 1.0 / (gm.k * over))

    def gate_charge(self, vg, vin, vout):
        """The gate charge state q_g = C_t v_g - C_gd v_in - C_gs v_out, C."""
        gm = self.gate
        return gm.c_total * vg - gm.c_gd * vin - gm.c_gs * vout

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
            i = 2.0 * self.p_load / (self.v_s + self.ops.sqrt(self.ops.maximum(disc, 0.0)))
        return self.v_s - rt * i, i

    def source(self, dh, rhs_l, rhs_in):
        """The Thevenin source (E, Z) the switch faces in a stage (V, ohm)."""
        if self.has_cin:
            yl = self.l + dh * self.r
            den = 1.0 / (self.c_in * yl + dh * dh)
            return (rhs_in * yl + dh * (rhs_l + dh * self.v_s)) * den, dh * yl * den
        return rhs_l / dh + self.v_s, self.l / dh + self.r

    def bank_branch(self, dh, rhs_k, vp_k):
        """A capacitor bank in a stage, reduced exactly to one branch for the stage's linear solve.

        Each group k obeys q_k(v_k) - dh i_k = rhs_k (its charge equation, ``rhs_k`` in C) and
        v_out = v_k + esr_k i_k. Its charge is linearised at the predictor ``vp_k`` (one Newton
        step): q_k ~ Q_p + C_p (v_k - v_p), C_p the incremental capacitance there, so that
        i_k = (v_out - e_k) / z_k with e_k = v_p + (rhs_k - Q_p) / C_p, z_k = dh / C_p + esr_k:
        the groups in parallel are the Norton source i = G v_out - J, G = sum 1 / z_k,
        J = sum e_k / z_k. One branch with capacitance c_eq = sum C_p, ESR 1 / G - dh / c_eq
        (never negative: each z_k >= dh / C_p) and right-hand side c_eq J / G has the same
        relation, and the stage solves it as the single capacitor. Returns ((e, z), the branch
        (c_eq, esr_eq, c_eq dv/dt for a slew limit), rhs_eq).
        """
        dh_k = np.asarray(dh, dtype=float)[..., None]
        cap = np.empty_like(vp_k)
        q_p = np.empty_like(vp_k)
        for k, tab in enumerate(self.bk_tables):
            cap[..., k] = fraction(tab, vp_k[..., k])
            q_p[..., k] = charge(tab, vp_k[..., k])
        cap = cap * self.bk_c
        q_p = q_p * self.bk_c
        e = vp_k + (rhs_k - q_p) / cap
        z = dh_k / cap + self.bk_esr
        y = 1.0 / z
        big_g = y.sum(axis=-1)
        c_eq = cap.sum(axis=-1)
        esr_eq = np.maximum(1.0 / big_g - dh / c_eq, 0.0)
        rhs_eq = c_eq * (e * y).sum(axis=-1) / big_g
        if self.floats:
            c_eq, esr_eq, rhs_eq = float(c_eq), float(esr_eq), float(rhs_eq)
        cdvdt = c_eq * self.cz.dvdt if self.slew else None
        return (e, z), (c_eq, esr_eq, cdvdt), rhs_eq

    def bank_groups(self, st: _Stage, dh, rhs_k, ez) -> None:
        """Each group's current, charge and voltage after the stage's solve (``st.bi``, ``st.bq``,
        ``st.bv``): i_k = (v_out - e_k) / z_k, q_k = rhs_k + dh i_k (the charge equation held
        exactly) and v_k the voltage of that charge on the group's DC-bias curve (exact inverse)."""
        e, z = ez
        i_k = (np.asarray(st.vout, dtype=float)[..., None] - e) / z
        q_k = rhs_k + np.asarray(dh, dtype=float)[..., None] * i_k
        v_k = np.empty_like(q_k)
        for k, tab in enumerate(self.bk_tables):
            v_k[..., k] = voltage(tab, q_k[..., k] / self.bk_c[..., k])
        st.bi, st.bq, st.bv = i_k, q_k, v_k

    def bank_stage(self, ts, dh, E, Z, rhs_in, rhs_k, vp_k, v_p, r_on, i_prev, dt_prev, started, sw_on,
                   rhs_g=0.0) -> _Stage:
        """`stage` with a capacitor bank: the groups' charge equations ``rhs_k`` linearised at the
        group voltages ``vp_k`` (`bank_branch`), then each group's state (`bank_groups`)."""
        ez, branch, rhs_eq = self.bank_branch(dh, rhs_k, vp_k)
        st = self.stage(ts, dh, E, Z, rhs_in, rhs_eq, v_p, r_on, i_prev, dt_prev, started, sw_on, rhs_g, branch)
        self.bank_groups(st, dh, rhs_k, ez)
        return st

    def bank_cap(self, v_k):
        """Each group's incremental capacitance at its voltage ``v_k`` (F)."""
        cap = np.empty_like(v_k)
        for k, tab in enumerate(self.bk_tables):
            cap[..., k] = fraction(tab, v_k[..., k])
        return cap * self.bk_c

    def bank_deviation(self, state, v_f):
        """The bank's share of the deviation energy from the DC operating point (sum of
        C_k (v_k - v_f)^2 at the groups' present capacitances) and the capacitance it is
        measured against (their sum)."""
        cap = self.bank_cap(state.bv)
        dv = state.bv - np.asarray(v_f, dtype=float)[..., None]
        dev, c_ref = (cap * dv * dv).sum(axis=-1), cap.sum(axis=-1)
        if self.floats:
            return float(dev), float(c_ref)
        return dev, c_ref

    def stage(self, ts, dh, E, Z, rhs_in, rhs_v, v_p, r_on, i_prev, dt_prev, started, sw_on, rhs_g=0.0,
              bank=None) -> _Stage:
        """Solve (Z + R_sw) i + v_out = E and c v_c - dh (i - i_load(v_out)) = rhs_v, or
        i = i_ref where that is smaller, or i = 0 where the switch is off (``sw_on``);
        ``ts`` is the time since the switch turned on. With a gate drive, i_ref is also the
        FET's saturation current at the stage's gate voltage (`_gate_current`; ``rhs_g`` the
        gate charge equation's right-hand side). ``bank``: a capacitor bank's equivalent branch for
        the stage (`bank_branch`: capacitance, ESR, C dv/dt of a slew limit) in place of c and esr."""
        ops = self.ops
        r_sw = self.switch_r(ts, r_on)
        a, g, on_p = self.load_linear(v_p, started, sw_on)
        if bank is None:
            c, esr, cdvdt = self.c, self.esr, None
        else:
            c, esr, cdvdt = bank
        st = _Stage()
        if self.g_free:
            av, ai = 1.0, esr
            a0 = -a * esr
            m21 = -dh
            m22 = c
            b2 = rhs_v - dh * a
            st.bad = None
        else:
            den = 1.0 + esr * g
            st.bad = den < 0.5
            av = 1.0 / ops.where(st.bad, 1.0, den)
            ai = esr * av
            a0 = -a * ai
            m21 = -dh * (1.0 - g * ai)
            m22 = c + dh * g * av
            bad22 = m22 < 0.5 * c
            st.bad = st.bad | bad22
            m22 = ops.where(bad22, c, m22)
            b2 = rhs_v - dh * (a + g * a0)
        m11 = Z + r_sw + ai
        b1 = E - a0
        w = 1.0 / m22
        avw = av * w
        i_free = (b1 - avw * b2) / (m11 - avw * m21)
        if self.limit:
            if self.has_cin:
                q, s = self.reference(v_p, a, g, E, Z, cdvdt)
            else:
                q, s = self.reference(v_p, a, g, self.v_s, self.r, cdvdt)
            den_l = 1.0 - s * (ai - avw * m21)
            if self.regulates:
                weak = den_l < 0.1
                if sw_on is not None:  # an off switch regulates nothing
                    weak = weak & sw_on
                st.bad = weak if st.bad is None else (st.bad | weak)
                den_l = ops.where(weak, 1.0, den_l)
            i_lim = (q + s * (a0 + avw * b2)) / den_l
            if self.relinearise:
                # one more linearisation of the power limit's reference, at the output this
                # solution gives rather than at the predictor: where the regulation passes
                # from the power to the current limit the predictor may pick the wrong branch,
                # and the FET would read a few percent above its power limit
                v_l = av * ((b2 - m21 * i_lim) * w) + ai * i_lim + a0
                if self.has_cin:
                    q, s = self.reference(v_l, a, g, E, Z, cdvdt)
                else:
                    q, s = self.reference(v_l, a, g, self.v_s, self.r, cdvdt)
                den_l = 1.0 - s * (ai - avw * m21)
                if self.regulates:
                    weak = den_l < 0.1
                    if sw_on is not None:
                        weak = weak & sw_on
                    st.bad = weak if st.bad is None else (st.bad | weak)
                    den_l = ops.where(weak, 1.0, den_l)
                i_lim = (q + s * (a0 + avw * b2)) / den_l
            if self.gate is not None:
                vo0, vo1 = a0 + avw * b2, ai - avw * m21  # v_out = vo0 + vo1 i
                i_sat, g0, g1 = self._gate_current(dh, E, Z, rhs_g, vo0, vo1)
                st.exc_c = ops.minimum(i_free, i_sat) - i_lim  # the current limit binding
                i_lim = ops.minimum(i_lim, i_sat)
            exc = i_free - i_lim
            lim = exc > 0.0
            if sw_on is not None:
                lim = lim & sw_on
                exc = ops.where(sw_on, exc, -1.0)
                if self.gate is not None:
                    st.exc_c = ops.where(sw_on, st.exc_c, -1.0)
            i = ops.where(lim, i_lim, i_free)
        else:
            exc = lim = None
            i = i_free
        if sw_on is not None:
            i = ops.where(sw_on, i, 0.0)
        vc = (b2 - m21 * i) * w
        vout = av * vc + ai * i + a0
        ic = i - a - g * vout
        if self.has_cin:
            vin = E - Z * i
            il = i + (self.c_in * vin - rhs_in) / dh
            st.fi = self.v_s - self.r * il - vin
            st.fin = il - i
            vds = vin - vout
        else:
            il = i
            if self.limit:
                fi = ops.where(lim, self.l * (i - i_prev) / dt_prev, self.v_s - (self.r + r_sw) * i - vout)
                vds = ops.where(lim, self.v_s - self.r * i - vout - fi, r_sw * i)
            else:
                fi = self.v_s - (self.r + r_sw) * i - vout
                vds = r_sw * i
            if sw_on is not None:  # off: no current, no inductive drop, the FET blocks
                fi = ops.where(sw_on, fi, 0.0)
                vds = ops.where(sw_on, vds, self.v_s - vout)
            st.fi = fi
            vin = vout + vds
        st.i, st.il, st.vc, st.vout, st.vin, st.ic, st.vds, st.lim, st.exc = i, il, vc, vout, vin, ic, vds, lim, exc
        if self.gate is not None:
            self._gate_node(st, dh, rhs_g, g0, g1, sw_on)
        st.p = vds * i
        st.r_sw = r_sw
        if on_p is None:
            st.event = st.on = None
        else:
            st.on = ops.where(sw_on, started | (vout > self.v_on), started & (vout > self.v_on)) \
                if sw_on is not None else started | (vout > self.v_on)
            st.event = st.on ^ on_p
        return st


class _State:
    """Working values of the rows still being integrated (arrays, or floats for one row)."""


FIGURES = ("i_peak", "t_i_peak", "p_peak", "v_pk", "i_pk", "e_fet", "t_reg", "v_in_min", "unb", "bl_max", "bl_t0",
           "t_settle", "tj_peak", "t", "tj", "steps", "active", "outcome", "attempt", "t_trip", "i", "vout")
_PULSES = ("e_att", "pp_att", "v_att", "i_att", "tj_att")


def _instant(model: _Model, state, idx=None):
    """The algebraic quantities at a switching instant (t = 0, a trip, a retry), the
    differential states (series current where l > 0, the capacitor voltages) holding.

    Returns the `_Stage` of rows ``idx`` of ``state`` (all rows where None) for the model
    ``model`` of those rows; where c_in is modelled the series current is the held state
    (or v_s - r i_L = v_in where l = 0).
    """
    ops = model.ops
    g = (lambda x: x) if idx is None else (lambda x: x[idx])  # noqa: E731
    il, vin, vc, vout = g(state.il), g(state.vin), g(state.vc), g(state.vout)
    dh = _DH_INSTANT
    if model.has_cin:
        E, Z = vin, 0.0 * vin
    else:
        E, Z = model.l * il / dh + model.v_s, model.l / dh + model.r
    sw_on = g(state.on) if model.timer else None
    t_rel = g(state.t) - g(state.t_att)
    rhs_g = model.gate_charge(g(state.vg), vin, vout) if model.gate is not None else 0.0
    if model.bank:  # every group's charge holds
        st = model.bank_stage(t_rel, dh, E, Z, model.c_in * vin, g(state.bq), g(state.bv), vout, g(state.r_on), il,
                              1.0, g(state.started), sw_on, rhs_g)
    else:
        st = model.stage(t_rel, dh, E, Z, model.c_in * vin, model.c * vc, vout, g(state.r_on), il, 1.0,
                         g(state.started), sw_on, rhs_g)
    if model.has_cin:
        r_safe = ops.where(model.r > 0.0, model.r, 1.0)
        il = ops.where(model.l > 0.0, il, ops.where(model.r > 0.0, (model.v_s - vin) / r_safe, st.i))
        st.il = il
        st.vin = vin
        st.fi = model.v_s - model.r * il - vin
        st.fin = il - st.i
    else:
        # the input before the inductance has taken up any change of current
        st.vin = ops.where(model.l > 0.0, model.v_s - model.r * st.i, st.vin)
    return st


def _put(state, name, idx, val):
    """Write ``val`` into rows ``idx`` of state ``name`` (all rows where idx is None)."""
    if idx is None:
        setattr(state, name, val)
    else:
        arr = getattr(state, name)
        arr[idx] = val


def _apply_instant(model: _Model, state, st: _Stage, idx=None) -> None:
    """Take the algebraic quantities of `_instant` into the state."""
    for name, val in (("i", st.i), ("il", st.il), ("vout", st.vout), ("vin", st.vin), ("ic", st.ic),
                      ("fi", st.fi), ("p", st.p)):
        _put(state, name, idx, val)
    if model.has_cin:
        _put(state, "fin", idx, st.fin)
    if model.limit:
        _put(state, "exc", idx, st.exc)
        _put(state, "lim", idx, st.lim)
    if model.gate is not None:
        for name in ("vg", "fg", "exc_c"):
            _put(state, name, idx, getattr(st, name))
    if model.bank:  # the groups' charges hold; their currents follow the output
        _put(state, "bi", idx, st.bi)
    g = (lambda x: x) if idx is None else (lambda x: x[idx])  # noqa: E731
    _put(state, "dtj", idx, model.ops.rate(g(state.theta), st.p, model.r_th, model.tau_th))


def _initial(model: _Model, t_est, i_typ, rows, active, t_amb: float) -> _State:
    """State at t = 0: capacitors discharged, no series current, the input at v_s."""
    ops, cz = model.ops, model.cz
    n = cz.n
    zero = np.zeros(n)
    r_on0 = cz.rds_on * cz.rds_t.ratio(t_amb) * np.ones(n)
    k = cz.r_th.shape[0]
    vals = {
        "il": zero, "vc": zero, "vout": zero, "vin": np.array(cz.v_s, dtype=float), "i": zero, "ic": zero,
        "fi": zero, "fin": zero, "p": zero, "exc": -np.ones(n), "lim": np.zeros(n, bool),
        "tj": np.full(n, t_amb), "r_on": r_on0, "r_rate": zero, "dtj": zero,
        "t": zero, "h": 1e-7 * t_est, "grow": np.full(n, 8.0), "phase": np.zeros(n, np.int8), "h_back": zero,
        "t_hi": zero, "h_cut": zero, "aimed": np.zeros(n, bool), "h_evt": 1e-4 * t_est, "t_est": t_est,
        "atol_i": 1e-6 * i_typ, "i_scale": i_typ, "atol_v": 1e-7 * cz.v_s, "steps": np.zeros(n, np.int64),
        "e_fet": zero, "t_reg": zero, "v_in_min": np.array(cz.v_s, dtype=float), "unb": np.zeros(n, bool),
        "bl_max": zero, "bl_t0": np.where(cz.v_s < cz.uvlo, 0.0, np.inf), "t_settle": zero,
        "rows": rows, "active": active, "started": np.zeros(n, bool), "on": np.ones(n, bool),
        "t_att": zero, "attempt": np.ones(n, np.int64), "t_restart": np.full(n, np.inf),
        "t_trip": np.full(n, np.nan), "t_off": np.full(n, np.inf), "latched": np.zeros(n, bool),
        "outcome": np.zeros(n, np.int8), "t_i_peak": zero,
        "vg": zero, "fg": zero, "exc_c": -np.ones(n),
    }
    state = _State()
    if ops is _FloatOps:
        for key, val in vals.items():
            v = val[0]
            setattr(state, key, v.item() if hasattr(v, "item") else v)
        state.theta = [0.0] * k
    else:
        for key, val in vals.items():
            setattr(state, key, np.array(val, copy=True))
        state.theta = np.zeros((n, k))
    if model.bank:  # the groups discharged: charge, voltage and current of each
        groups = cz.bank.n_groups
        for key in ("bq", "bv", "bi"):
            setattr(state, key, np.zeros(groups) if ops is _FloatOps else np.zeros((n, groups)))
    _apply_instant(model, state, _instant(model, state))
    state.i_peak = ops.maximum(state.i, 0.0)
    state.p_peak = state.p
    state.v_pk = state.vin - state.vout
    state.i_pk = state.i
    state.tj_peak = state.tj
    for name, val in zip(_PULSES, (0.0, state.p, state.vin - state.vout, state.i, t_amb)):
        setattr(state, name, val if ops is _FloatOps else np.array(np.broadcast_to(val, (n,)), dtype=float))
    return state


def integrate(cz: Circuit, *, t_est, i_typ, active, t_amb: float, record: int | None, max_steps: int,
              timer: bool = False):
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
    timer : bool
        Whether the fault timer acts (each row's ``cz.t_fault``).

    Returns
    -------
    figures : dict of ndarray
        Names in `FIGURES` (shape (n,)) and the per-attempt ``pulse_e``, ``pulse_p_peak``,
        ``pulse_v_ds``, ``pulse_i``, ``pulse_tj_start`` (shape (n, RETRY_ATTEMPTS)).
        ``outcome`` is OUTCOME_COMPLETE, OUTCOME_OFF (the switch turned off for good),
        OUTCOME_RUNAWAY or OUTCOME_RUNNING (stopped by the step cap).
    waveform : dict or None
    """
    n = cz.n
    ops = _FloatOps if n == 1 else _ArrayOps
    model = _Model(cz, ops, timer)
    state = _initial(model, t_est, i_typ, np.arange(n), active.copy(), t_amb)
    final = {name: np.array(np.atleast_1d(getattr(state, name)), copy=True) for name in FIGURES}
    k = RETRY_ATTEMPTS if timer else 1
    for name in ("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start"):
        final[name] = np.full((n, k), np.nan)
    wave = None
    rec = None
    if record is not None and active[record]:
        rec = record
        wave = {key: [] for key in ("t", "v_out", "v_in", "i", "v_ds", "p_fet", "tj", "on")}
        if cz.gate is not None:
            wave["v_g"] = []
        _record(wave, state, rec if ops is _ArrayOps else None)
    if ops is _ArrayOps and not active.all():
        model, state = _compact(model, state, final)
        rec = _locate(state, record, rec)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        state = _run(model, state, final, wave, rec, record, t_amb, max_steps)
    _store(model, state, final, ops)
    return final, wave


def _record(wave: dict, state, j) -> None:
    """Append the present point of row ``j`` (None: the float back end) to the waveform."""
    take = (lambda x: x) if j is None else (lambda x: x[j])  # noqa: E731
    wave["t"].append(float(take(state.t)))
    wave["v_out"].append(float(take(state.vout)))
    wave["v_in"].append(float(take(state.vin)))
    wave["i"].append(float(take(state.i)))
    wave["v_ds"].append(float(take(state.vin) - take(state.vout)))
    wave["p_fet"].append(float(take(state.p)))
    wave["tj"].append(float(take(state.tj)))
    wave["on"].append(1.0 if take(state.on) else 0.0)
    if "v_g" in wave:
        wave["v_g"].append(float(take(state.vg)))


def _locate(state: _State, record, rec):
    if rec is None:
        return None
    hit = np.nonzero(state.rows == record)[0]
    return int(hit[0]) if hit.size else None


class _Step:
    """One attempted step of the working rows: where it starts (``t``) and ends (``t1``), its
    size (``h``; the stage at ``t + gh``, ``dh`` = d h of the stage equations, the second
    interval ``dt1``), the switch state it was taken in
    (``sw_on``, None without a timer), its two stages (``s1``, ``s2``), the junction at each
    (Foster rises ``th_g``, ``th_1``; temperatures ``tj_g``, ``tj_1``), the events it holds
    (``evt``, None where no kind of event applies) and its time in regulation (``dtl``)."""

    __slots__ = ("t", "h", "gh", "dh", "dt1", "t1", "sw_on", "s1", "s2", "th_g", "th_1", "tj_g", "tj_1", "evt",
                 "dtl")


def _run(model: _Model, state: _State, final: dict, wave, rec, record, t_amb: float, max_steps: int) -> _State:
    """Step every active row until it stops (`_finished`) or the step cap is reached: propose
    a step, take its stages, control its error, and for the rows that accept it update the
    running figures, commit the new state and record the waveform."""
    ops = model.ops
    arrays = ops is _ArrayOps
    iterations = 0
    while ops.any(state.active):
        iterations += 1
        if iterations > max_steps:
            return state  # rows still active keep what they computed
        if arrays and state.rows.size > 64 and np.count_nonzero(state.active) < 0.6 * state.rows.size:
            model, state = _compact(model, state, final)
            rec = _locate(state, record, rec)
        active = state.active
        state.steps = state.steps + active
        step = _take_stages(model, state, _propose_step(model, state))
        err, fac_err = _local_error(model, state, step, t_amb)
        ok = _control_step(model, state, step, active, err, fac_err)
        if not ops.any(ok):
            continue
        _peak_current(model, state, step, ok)
        _peak_power_and_energy(model, state, step, ok)
        _dip(model, state, ok, step.t, step.gh, step.h, state.i, step.s1, step.s2, step.evt)
        tj_hi, rate_1 = _junction_peak(model, state, step, ok, t_amb)
        r_on1 = model.r_on(step.tj_1) if model.varies else state.r_on
        v_f, i_f = model.final_output(model.r_final(r_on1))  # the DC operating point at the step's end
        _settling(model, state, step, ok, v_f)
        _commit(model, state, step, ok, rate_1, r_on1)
        if rec is not None and (ok[rec] if arrays else ok):
            _record(wave, state, rec if arrays else None)
        done = _finished(model, state, step, ok, tj_hi, v_f, i_f, final, wave, rec)
        state.active = active & ops.not_(done)
    return state


def _propose_step(model: _Model, state: _State):
    """Each row's next step size: its adaptive size, at most 0.1 of the time scale or of the
    elapsed time, cut to land on the end of the turn-on ramp, on the instant the regulation
    time reaches t_fault and on the end of a retry's off time."""
    ops = model.ops
    t = state.t
    h = ops.minimum(state.h, 0.1 * ops.maximum(state.t_est, t))
    t_on = model.t_on
    if t_on > 0.0:
        t_full = (state.t_att + t_on) if model.timer else t_on
        cut = (t < t_full) & (t + h > t_full)
        h = ops.where(cut, ops.maximum(t_full - t, 1e-300), h)
    if model.timer:
        if model.limit:  # land on the instant the regulation time reaches t_fault
            h = ops.where(state.on & state.lim, ops.minimum(h, model.t_fault - state.t_reg), h)
        h = ops.where(t + h > state.t_restart, ops.maximum(state.t_restart - t, 1e-300), h)
    return h


def _take_stages(model: _Model, state: _State, h) -> _Step:
    """The two stages of a step of size ``h`` (stage 1: trapezoidal rule to t + gamma h;
    stage 2: BDF2 to t + h), Rds(on) at the junction temperature extrapolated to each stage,
    and the exact Foster update of the junction with the power linear between stages."""
    ops = model.ops
    step = _Step()
    t, i, il, vc, vout, vin, ic, fi = state.t, state.i, state.il, state.vc, state.vout, state.vin, state.ic, state.fi
    sw_on = state.on if model.timer else None
    c = model.c
    gh = _G * h
    dh = _D * h
    dt1 = h - gh
    t_rel = (t - state.t_att) if (model.t_on > 0.0 and model.timer) else t  # time since the switch turned on
    if model.varies:  # Rds(on) at the junction temperature extrapolated to the stage
        r_floor = model.rds_on * model.r_floor_ratio  # the data's lowest ratio (rds_at's floor: 0.1)
        r_on_g = ops.maximum(state.r_on + state.r_rate * gh, r_floor)
        r_on_1 = ops.maximum(state.r_on + state.r_rate * h, r_floor)
    else:
        r_on_g = r_on_1 = state.r_on
    rhs_in1 = model.c_in * vin + dh * state.fin if model.has_cin else 0.0
    e1, z1 = model.source(dh, model.l * il + dh * fi, rhs_in1)
    if model.gate is not None:
        q0 = model.gate_charge(state.vg, vin, vout)
        rhs_g1 = q0 + dh * state.fg
    else:
        rhs_g1 = 0.0
    if model.bank:
        bq, bv, bi = state.bq, state.bv, state.bi
        vp_k = bv + np.asarray(gh, dtype=float)[..., None] * bi / model.bank_cap(bv)
        s1 = model.bank_stage(t_rel + gh, dh, e1, z1, rhs_in1, bq + np.asarray(dh, dtype=float)[..., None] * bi, vp_k,
                              vout + gh * ic / c, r_on_g, i, gh, state.started, sw_on, rhs_g1)
    else:
        s1 = model.stage(t_rel + gh, dh, e1, z1, rhs_in1, c * vc + dh * ic, vout + gh * ic / c, r_on_g, i, gh,
                         state.started, sw_on, rhs_g1)
    rhs_in2 = model.c_in * (_C1 * s1.vin - _C2 * vin) if model.has_cin else 0.0
    e2, z2 = model.source(dh, model.l * (_C1 * s1.il - _C2 * il), rhs_in2)
    rhs_g2 = _C1 * model.gate_charge(s1.vg, s1.vin, s1.vout) - _C2 * q0 if model.gate is not None else 0.0
    if model.bank:
        s2 = model.bank_stage(t_rel + h, dh, e2, z2, rhs_in2, _C1 * s1.bq - _C2 * bq, bv + (s1.bv - bv) * (1.0 / _G),
                              vout + (s1.vout - vout) * (1.0 / _G), r_on_1, s1.i, dt1, state.started, sw_on, rhs_g2)
    else:
        s2 = model.stage(t_rel + h, dh, e2, z2, rhs_in2, c * (_C1 * s1.vc - _C2 * vc),
                         vout + (s1.vout - vout) * (1.0 / _G), r_on_1, s1.i, dt1, state.started, sw_on, rhs_g2)
    step.t, step.t1, step.h, step.gh, step.dh, step.dt1 = t, t + h, h, gh, dh, dt1
    step.sw_on, step.s1, step.s2 = sw_on, s1, s2
    return step


def _local_error(model: _Model, state: _State, step: _Step, t_amb: float):
    """The step's local error relative to its tolerance (1: at the tolerance) and the step
    factor it asks for (0.9 err^(-1/3), or the factor of the bound on the change of Tj).

    The electrical states' estimates are filtered by the iteration matrix; the junction's
    error is what the bend of the power at the stage point adds to the rise (the Foster
    update, with the power linear between stage points, is taken here into ``step``).
    """
    ops = model.ops
    h, gh, dh, dt1, s1, s2, sw_on = step.h, step.gh, step.dh, step.dt1, step.s1, step.s2, step.sw_on
    c = model.c
    ic, fi = state.ic, state.fi
    eh = _EC * h
    tol_v = state.atol_v + RTOL * model.v_s
    err = ops.fabs(eh * (_W0 * ic + _W1 * s1.ic + _W2 * s2.ic) / c) / tol_v
    if model.gate is not None:
        # the gate charge's estimate as a gate voltage, and what the estimates of the gate and
        # the output do to the channel current through its transconductance k (V_GS - V_th)
        gm = model.gate
        e_g = eh * (_W0 * state.fg + _W1 * s1.fg + _W2 * s2.fg) / (gm.c_total + dh * gm.g_g)
        e_v = eh * (_W0 * ic + _W1 * s1.ic + _W2 * s2.ic) / c
        # dI_D/dV_GS of the level-1 channel: k (V_GS - V_th) in saturation, k V_DS in the linear
        # region; none where the channel does not set the current (fully on at Rds(on))
        g_m = gm.k * ops.maximum(ops.minimum(s2.vg - s2.vout - gm.v_th, s2.vds), 0.0)
        g_m = ops.where(s2.lim, g_m, 0.0)
        if model.timer:
            g_m = ops.where(sw_on, g_m, 0.0)
        err = ops.maximum(err, ops.fabs(e_g) / tol_v)
        err = ops.maximum(err, ops.fabs(g_m * (e_g - e_v)) / (state.atol_i + RTOL * state.i_scale))
    if model.has_cin:
        # (i_L, v_in) estimates filtered by their 2x2 block of the iteration matrix, the
        # switch a conductance to the output where it is fully on
        ea = eh * (_W0 * fi + _W1 * s1.fi + _W2 * s2.fi)
        eb = eh * (_W0 * state.fin + _W1 * s1.fin + _W2 * s2.fin)
        g_sw = 1.0 / (s2.r_sw + model.esr)
        if model.limit:
            g_sw = ops.where(s2.lim, 0.0, g_sw)
        if model.timer:
            g_sw = ops.where(sw_on, g_sw, 0.0)
        yl = model.l + dh * model.r
        cg = model.c_in + dh * g_sw
        inv = 1.0 / (yl * cg + dh * dh)
        err = ops.maximum(err, ops.fabs((yl * eb + dh * ea) * inv) / tol_v)
        if model.has_l:
            err = ops.maximum(err, ops.fabs((cg * ea - dh * eb) * inv) / (state.atol_i + RTOL * state.i_scale))
    elif model.has_l:
        # the current is a differential state only where no point of the step regulates
        ei = eh * (_W0 * fi + _W1 * s1.fi + _W2 * s2.fi) / (model.l + dh * (model.r + s2.r_sw + model.esr))
        if model.limit:
            ei = ops.where(state.lim | s1.lim | s2.lim, 0.0, ei)
        err = ops.maximum(err, ops.fabs(ei) / (state.atol_i + RTOL * state.i_scale))

    # junction temperature: exact Foster update with the power linear between stages;
    # what the bend of the power at the stage point adds measures the error of taking
    # the power as linear between stage points
    th_g, th_1, bend = ops.foster(state.theta, state.p, s1.p, s2.p, gh, dt1, model.r_th, model.tau_th)
    step.th_g, step.th_1 = th_g, th_1
    step.tj_g = t_amb + ops.rise(th_g)
    tj_1 = step.tj_1 = t_amb + ops.rise(th_1)
    err = ops.maximum(err, ops.fabs(bend) / model.tol_th)
    fac_err = 0.9 * ops.maximum(err, 1e-12) ** (-1.0 / 3.0)
    if model.varies:  # Rds(on) follows Tj: bound the change of Tj while the switch conducts
        e_tj = ops.fabs(tj_1 - state.tj) / model.step_th
        if model.timer:
            e_tj = ops.where(sw_on, e_tj, 0.0)
        err = ops.maximum(err, e_tj)
        fac_err = ops.minimum(fac_err, 0.9 / ops.maximum(e_tj, 1e-12))  # the change is ~ h
    return err, fac_err


def _step_events(model: _Model, state: _State, step: _Step):
    """Where the step holds an event: a load switching on or off (against the predictor of
    either stage, or between the start of the step and its end) or the switch entering or
    leaving regulation; None where neither kind applies. Under a limit the step's time in
    regulation goes into ``step.dtl``."""
    ops = model.ops
    s1, s2 = step.s1, step.s2
    evt = None
    if s1.event is not None:
        above = state.vout > model.v_on
        if model.timer:
            on_n = ops.where(step.sw_on, state.started | above, state.started & above)
        else:
            on_n = state.started | above
        evt = s1.event | s2.event | (s2.on ^ on_n)
    if model.limit:
        turn = (state.lim ^ s1.lim) | (s1.lim ^ s2.lim)
        evt = turn if evt is None else (evt | turn)
        if model.gate is None:
            step.dtl = _lim_time(ops, state.exc, s1.exc, step.gh) + _lim_time(ops, s1.exc, s2.exc, step.dt1)
        else:  # the time the current limit (not the gate's saturation) holds the current
            step.dtl = (_lim_time(ops, state.exc_c, s1.exc_c, step.gh)
                        + _lim_time(ops, s1.exc_c, s2.exc_c, step.dt1))
    step.evt = evt
    return evt


def _control_step(model: _Model, state: _State, step: _Step, active, err, fac_err):
    """Accept or reject the step of each active row and set its next step size (``state.h``).

    Rejected: an error above the tolerance, a failed stage, a step that carries the
    regulation time past t_fault (cut back by the excess), and a step longer than h_evt
    that holds an event (`_event_steps` aims the next one at it). Returns the accepted rows.
    """
    ops = model.ops
    s1, s2, h = step.s1, step.s2, step.h
    bad = ops.not_(err <= 1e300)
    if s1.bad is not None:
        bad = bad | s1.bad | s2.bad
    evt = _step_events(model, state, step)
    ok = active & (err <= 1.0) & ops.not_(bad)
    over = None
    if model.timer and model.limit:
        # a step must not carry the regulation time past t_fault: cut it back by the excess
        excess = state.t_reg + step.dtl - model.t_fault
        over = ok & (excess > 1e-9 * model.t_fault)
        if ops.any(over):
            ok = ok & ops.not_(over)
        else:
            over = None
    if evt is not None:
        # ... is located within 1e-4 of the time scale (t_limit and the load's start to
        # that accuracy): a step holding an event must not be longer than h_evt
        long_evt = evt & (h > state.h_evt)
        ok = ok & ops.not_(long_evt)
    fac = ops.minimum(ops.maximum(fac_err, 0.2), state.grow)
    h_next = ops.where(ok, h * fac, ops.where(bad, 0.25 * h, h * ops.maximum(fac, 0.1)))
    if evt is not None:
        hit = long_evt & ops.not_(bad)
        f_on = (state.vout, s1.vout, s2.vout, model.v_on) if s1.event is not None else None
        f_lim = (state.exc, s1.exc, s2.exc, 0.0) if model.limit else None
        if ops is _ArrayOps:
            h_next = _event_rows(state, ok, hit, evt, f_on, f_lim, step.t, h, h_next, fac_err)
        elif hit or state.phase == 1:
            h_next = _event_steps(ops, state, ok, hit, evt, _event_frac(ops, hit, f_on, f_lim), step.t, h, h_next,
                                  fac_err)
    if over is not None:
        h_next = ops.where(over, ops.minimum(h_next, h - excess), h_next)
    state.h = h_next
    state.grow = ops.where(ok, 8.0, 1.0)  # no growth right after a rejected step (Hairer & Wanner)
    return ok


def _peak_current(model: _Model, state: _State, step: _Step, ok) -> None:
    """The running peak current and its time: stage values, and the vertex of the quadratic
    through the step's currents where the switch is free throughout."""
    ops = model.ops
    t, h, s1, s2, i = step.t, step.h, step.s1, step.s2, state.i
    s1_hi = s1.i > s2.i
    pk = ops.where(s1_hi, s1.i, s2.i)
    t1 = step.t1
    tpk = ops.where(s1_hi, t + step.gh, t1)
    if not model.limit:
        ci = (s1.i - i - _G * (s2.i - i)) * (1.0 / (_G * _G - _G))
        bi = (s2.i - i) - ci
        cneg = ci < 0
        cs = ops.where(cneg, ci, -1.0)
        xv = -bi / (2.0 * cs)
        use = cneg & (xv > 0) & (xv < 1)
        vert = i - bi * bi / (4.0 * cs)
        use = use & (vert > pk)
        pk = ops.where(use, vert, pk)
        tpk = ops.where(use, t + xv * h, tpk)
    new_pk = ok & (pk > state.i_peak)
    state.i_peak = ops.where(new_pk, pk, state.i_peak)
    state.t_i_peak = ops.where(new_pk, tpk, state.t_i_peak)


def _peak_power_and_energy(model: _Model, state: _State, step: _Step, ok) -> None:
    """The running peak power (found inside the step too) and its operating point, the FET
    energy, their counts of the attempt under way, and the time in regulation.

    Under a power limit the operating point is the highest v_ds among the points within
    PEAK_BAND of the peak (the plateau and its edges alike), the harder point for the SOA,
    which a slight overshoot at one end of the plateau does not move.
    """
    ops = model.ops
    s1, s2 = step.s1, step.s2
    vertex = _power_vertex(ops, state, s1, s2, model.limit)
    band = PEAK_BAND if model.mode == "power_limit" else 0.0
    state.v_pk, state.i_pk, state.p_peak = _peak_point(ops, ok, s1, s2, vertex, band, state.v_pk, state.i_pk,
                                                       state.p_peak)
    if model.timer:
        state.v_att, state.i_att, state.pp_att = _peak_point(ops, ok, s1, s2, vertex, band, state.v_att, state.i_att,
                                                             state.pp_att)
    de = step.h * (_Q0 * state.p + _Q1 * s1.p + _Q2 * s2.p)
    state.e_fet = ops.where(ok, state.e_fet + de, state.e_fet)
    if model.timer:
        state.e_att = ops.where(ok, state.e_att + de, state.e_att)
    if model.limit:
        state.t_reg = ops.where(ok, state.t_reg + step.dtl, state.t_reg)


def _junction_peak(model: _Model, state: _State, step: _Step, ok, t_amb: float):
    """The running peak junction temperature: stage points, and the interior peak the closed
    form gives where the rise increases at the start of the step and decreases at its end
    (the stage point's rate tells in which interval). Returns the step's highest junction
    temperature and the rate of the rises at its end."""
    ops = model.ops
    s1, s2 = step.s1, step.s2
    rate_1 = ops.rate(step.th_1, s2.p, model.r_th, model.tau_th)
    tj_hi = ops.maximum(step.tj_g, step.tj_1)
    turns = ok & (state.dtj > 0.0) & (rate_1 < 0.0)
    if ops.any(turns):
        rate_g = ops.rate(step.th_g, s1.p, model.r_th, model.tau_th)
        tj_hi = _interior_peak(model, state, tj_hi, turns & (rate_g < 0.0), turns & (rate_g >= 0.0), step.th_g, s1, s2,
                               step.gh, step.dt1, t_amb)
    state.tj_peak = ops.where(ok, ops.maximum(state.tj_peak, tj_hi), state.tj_peak)
    return tj_hi, rate_1


def _settling(model: _Model, state: _State, step: _Step, ok, v_f) -> None:
    """The settling time: the last instant the output entered the band of SETTLE_BAND around
    its final value ``v_f`` (the end of the step while it is outside), crossings linear
    between the stage values."""
    ops = model.ops
    t, gh, dt1, t1, s1, s2 = step.t, step.gh, step.dt1, step.t1, step.s1, step.s2
    band = SETTLE_BAND * ops.fabs(v_f)
    d1 = ops.fabs(s2.vout - v_f) - band
    out_1 = d1 > 0
    if ops.any(ops.not_(out_1)):  # some row ends the step inside the band: where did it enter
        d0 = ops.fabs(state.vout - v_f) - band
        dg = ops.fabs(s1.vout - v_f) - band
        x1 = dg / ops.where(dg > d1, dg - d1, 1.0)
        x0 = d0 / ops.where(d0 > dg, d0 - dg, 1.0)
        cross_g1 = t + gh + dt1 * ops.minimum(ops.maximum(x1, 0.0), 1.0)
        cross_0g = t + gh * ops.minimum(ops.maximum(x0, 0.0), 1.0)
        ts_new = ops.where(out_1, t1, ops.where(dg > 0, cross_g1, ops.where(d0 > 0, cross_0g, state.t_settle)))
    else:
        ts_new = t1
    state.t_settle = ops.where(ok, ts_new, state.t_settle)


def _commit(model: _Model, state: _State, step: _Step, ok, rate_1, r_on1) -> None:
    """Take the end of the step into the state of the accepted rows (the others keep theirs):
    time, currents, voltages, power, regulation, junction (and Rds(on) following it), the
    largest current so far and whether the load has started.

    On the float back end the one row has accepted the step (otherwise the loop has gone on
    to the next attempt), so its state is the step's end without a choice per value."""
    ops = model.ops
    s1, s2 = step.s1, step.s2
    if ops is _FloatOps:
        state.t, state.i, state.vc, state.vout = step.t1, s2.i, s2.vc, s2.vout
        state.vin, state.ic, state.fi, state.p = s2.vin, s2.ic, s2.fi, s2.p
        if model.has_cin:
            state.il, state.fin = s2.il, s2.fin
        if model.limit:
            state.exc, state.lim = s2.exc, s2.lim
        if model.gate is not None:
            state.vg, state.fg, state.exc_c = s2.vg, s2.fg, s2.exc_c
        if model.bank:
            state.bq, state.bv, state.bi = s2.bq, s2.bv, s2.bi
        state.theta, state.tj, state.dtj = step.th_1, step.tj_1, rate_1
        if model.varies:
            state.r_rate = (r_on1 - state.r_on) / step.h
            state.r_on = r_on1
    else:
        state.t = ops.where(ok, step.t1, state.t)
        state.i = ops.where(ok, s2.i, state.i)
        state.vc = ops.where(ok, s2.vc, state.vc)
        state.vout = ops.where(ok, s2.vout, state.vout)
        state.vin = ops.where(ok, s2.vin, state.vin)
        state.ic = ops.where(ok, s2.ic, state.ic)
        state.fi = ops.where(ok, s2.fi, state.fi)
        state.p = ops.where(ok, s2.p, state.p)
        if model.has_cin:
            state.il = ops.where(ok, s2.il, state.il)
            state.fin = ops.where(ok, s2.fin, state.fin)
        if model.limit:
            state.exc = ops.where(ok, s2.exc, state.exc)
            state.lim = ops.where(ok, s2.lim, state.lim)
        if model.gate is not None:
            state.vg = ops.where(ok, s2.vg, state.vg)
            state.fg = ops.where(ok, s2.fg, state.fg)
            state.exc_c = ops.where(ok, s2.exc_c, state.exc_c)
        if model.bank:
            for key in ("bq", "bv", "bi"):
                setattr(state, key, np.where(ok[:, None], getattr(s2, key), getattr(state, key)))
        state.theta = ops.where(ok[:, None], step.th_1, state.theta)
        state.tj = ops.where(ok, step.tj_1, state.tj)
        state.dtj = ops.where(ok, rate_1, state.dtj)
        if model.varies:
            state.r_rate = ops.where(ok, (r_on1 - state.r_on) / step.h, state.r_rate)
            state.r_on = ops.where(ok, r_on1, state.r_on)
    if not model.has_cin:
        state.il = state.i
    state.i_scale = ops.maximum(state.i_scale, ops.fabs(state.i))
    if not model.continuous:
        if model.timer:
            state.started = ops.where(step.sw_on,
                                      state.started | (ok & (ops.maximum(s1.vout, s2.vout) > model.v_on)),
                                      state.started & ops.not_(ok & (s2.vout <= model.v_on)))
        else:
            state.started = state.started | (ok & (ops.maximum(s1.vout, s2.vout) > model.v_on))
        if model.gate is not None and s1.event is not None:
            # a load the stage took as on (its predictor reached v_on) has started: the gate's
            # current may be below the load's, and without the latch the load would chatter at v_on
            took_on = (s1.on ^ s1.event) | (s2.on ^ s2.event)
            if model.timer:
                took_on = took_on & step.sw_on
            state.started = state.started | (ok & took_on)


def _finished(model: _Model, state: _State, step: _Step, ok, tj_hi, v_f, i_f, final: dict, wave, rec):
    """The rows done after the committed step, their outcome set: complete (out of regulation,
    the turn-on ramp over, the deviation energy from the DC operating point ``v_f``, ``i_f``
    within the stop band), destroyed (the junction past the runaway threshold), or tripped
    and followed far enough (`_switch_events`, which also carries out trips and retries)."""
    ops = model.ops
    t_on = model.t_on
    if model.bank:
        dev_c, c_ref = model.bank_deviation(state, v_f)
        dev = model.l * (state.il - i_f) ** 2 + dev_c
    else:
        dev = model.l * (state.il - i_f) ** 2 + model.c * (state.vc - v_f) ** 2
        c_ref = model.c
    if model.has_cin:
        dev = dev + model.c_in * (state.vin - model.v_s + model.r * i_f) ** 2
    done = ok & (dev <= c_ref * (STOP_BAND * v_f) ** 2)
    if model.gate is not None:  # out of saturation (V_DS below the overdrive) and out of the current limit
        sat = (state.vin >= state.vg - model.gate.v_th) | (state.exc_c > 0.0)
        done = done & ops.not_(state.lim & sat)
    elif model.limit:
        done = done & ops.not_(state.lim)
    if t_on > 0.0:
        done = done & ((state.t - state.t_att) >= t_on if model.timer else state.t >= t_on)
    if model.timer:
        done = done & step.sw_on
    state.outcome = ops.where(done, OUTCOME_COMPLETE, state.outcome)
    hot = ok & (tj_hi > model.tj_runaway)
    if ops.any(hot):
        state.outcome = ops.where(hot & ops.not_(done), OUTCOME_RUNAWAY, state.outcome)
        done = done | hot
    if model.timer:
        done = done | _switch_events(model, state, ok, final, wave, rec)
    return done


def _dip(model: _Model, state, ok, t, gh, h, i, s1, s2, evt) -> None:
    """The lowest switch-input voltage and the longest time below the UVLO threshold over
    the accepted step (the input linear between its start, its stage point and its end,
    with the edges and notches of an inductance without c_in put back)."""
    ops = model.ops
    unb = None
    if model.dip_flag and model.instant:  # a fully-on sample of an instant turn-on
        lo_g = s1.vin <= s2.vin
        v_lo = ops.where(lo_g, s1.vin, s2.vin)
        unb = ops.where(lo_g, ops.not_(s1.lim) if model.limit else True, ops.not_(s2.lim) if model.limit else True)
        if model.timer:
            unb = unb & state.on
    else:
        v_lo = ops.minimum(s1.vin, s2.vin)
        if model.dip_flag:
            unb = False
    cut_g = cut_1 = edge = None
    if model.dip_flag and model.limit:
        entry = ok & ops.not_(state.lim) & (s1.lim | s2.lim)
        if ops.any(entry):
            # entering regulation, the fully-on switch passes the inductance's current up to
            # the instant it reaches the reference: the input is lowest just before,
            # v_out + R_sw i_ref there, and steps up as di/dt stops
            frac = ops.minimum(ops.maximum(_crossing(ops, state.exc, s1.exc, s2.exc), 0.0), 1.0)
            t_e = t + frac * h
            i_e = ops.where(s1.lim, s1.i, s2.i)  # the current is the reference there
            v_e = _at(ops, frac, state.vout, s1.vout, s2.vout) + model.switch_r(t_e - state.t_att, state.r_on) * i_e
            deeper = entry & (v_e < v_lo)
            v_lo = ops.where(deeper, v_e, v_lo)
            if unb is not None and model.instant:
                unb = unb | deeper
            edge = (entry, t_e, v_e, _at(ops, frac, state.vin, s1.vin, s2.vin))
    if model.notch and evt is not None and ops.any(evt & ok):
        # a load switching on while the FET regulates steps the reference up
        floor_g = s1.vout + s1.r_sw * s1.i
        floor_1 = s2.vout + s2.r_sw * s2.i
        on_0 = state.started | (state.vout > model.v_on)
        w_g, w_1 = model.v_s - model.r * s1.i, model.v_s - model.r * s2.i
        cut_g = _notch(ops, s1.lim & s1.on & ops.not_(on_0), w_g, floor_g, model.l * (s1.i - i), gh)
        cut_1 = _notch(ops, s2.lim & s2.on & ops.not_(s1.on), w_1, floor_1, model.l * (s2.i - s1.i), h - gh)
        # the notch holds the interval's inductive drop: the input is v_s - r i up to it, and
        # right after it (the sample, the drop's mean over the interval, stands for neither)
        if cut_g is not None:
            cut_g = cut_g + (floor_g,)
            s1.vin = ops.where(cut_g[0], w_g, s1.vin)
        if cut_1 is not None:
            cut_1 = cut_1 + (floor_1,)
            s2.vin = ops.where(cut_1[0], w_1, s2.vin)
        for cut in (cut_g, cut_1):
            if cut is not None:
                deeper = cut[0] & (cut[2] < v_lo)
                v_lo = ops.where(deeper, cut[2], v_lo)
                if unb is not None:
                    unb = unb | deeper
    if unb is None:
        state.v_in_min = ops.where(ok, ops.minimum(state.v_in_min, v_lo), state.v_in_min)
    else:
        new_min = ok & (v_lo < state.v_in_min)
        state.v_in_min = ops.where(new_min, v_lo, state.v_in_min)
        state.unb = ops.where(new_min, unb, state.unb)
    if not model.has_uvlo:
        return
    u = model.uvlo
    if not (ops.any(v_lo < u) or ops.any(state.bl_t0 < _INF)):
        return
    piece = _below_arrays if model.ops is _ArrayOps else _below_floats
    t_g, t_1 = t + gh, t + h
    for ta, va, tb, vb, cut in ((t, state.vin, t_g, s1.vin, cut_g), (t_g, s1.vin, t_1, s2.vin, cut_1)):
        if edge is not None:  # the sample line up to the edge, its low point, then on
            here = edge[0] & (edge[1] >= ta) & (edge[1] <= tb)
            t_e = ops.where(here, edge[1], ta)
            piece(state, ok, ta, va, t_e, ops.where(here, edge[2], va), u)
            ta, va = t_e, ops.where(here, edge[3], va)
        if cut is None:
            piece(state, ok, ta, va, tb, vb, u)
            continue
        # a notch at the end of the interval: the sample line up to it, then its floor
        use, width, floor = cut
        t_n = ops.where(use, ops.maximum(tb - width, ta), tb)
        piece(state, ok, ta, va, t_n, vb, u)
        piece(state, ok & use, t_n, floor, tb, floor, u)


def _at(ops, frac, x0, xg, x1):
    """Value at ``frac`` of the step of x, linear between the step start (x0), the stage
    point (xg, at gamma) and the end (x1)."""
    return ops.where(frac < _G, x0 + (xg - x0) * (frac * (1.0 / _G)), xg + (x1 - xg) * ((frac - _G) / (1.0 - _G)))


def _below_arrays(state, ok, ta, va, tb, vb, u: float) -> None:
    """Time below ``u`` (V) over a piece linear from (ta, va) to (tb, vb), rows of arrays:
    opens a run where the input falls below, closes it (keeping the longest, state.bl_max)
    where it rises above, a jump at ta included."""
    t0 = state.bl_t0
    open_ = t0 < _INF
    ina, inb = va < u, vb < u
    close_a = ok & open_ & ~ina
    best = np.where(close_a, np.maximum(state.bl_max, ta - t0), state.bl_max)
    t0 = np.where(close_a, _INF, np.where(ok & ina & ~open_, ta, t0))
    cross = ok & (ina ^ inb)
    tc = ta + (tb - ta) * (va - u) / np.where(cross, va - vb, 1.0)
    down = cross & inb
    up = cross & ina
    best = np.where(up, np.maximum(best, tc - t0), best)
    state.bl_t0 = np.where(down, tc, np.where(up, _INF, t0))
    state.bl_max = best


def _below_floats(state, ok, ta, va, tb, vb, u: float) -> None:
    """`_below_arrays` for one row on Python floats."""
    if not ok:
        return
    t0 = state.bl_t0
    ina, inb = va < u, vb < u
    if t0 < _INF and not ina:
        state.bl_max = max(state.bl_max, ta - t0)
        t0 = _INF
    elif ina and t0 == _INF:
        t0 = ta
    if ina != inb:
        tc = ta + (tb - ta) * (va - u) / (va - vb)
        if inb:
            t0 = tc
        else:
            state.bl_max = max(state.bl_max, tc - t0)
            t0 = _INF
    state.bl_t0 = t0


def _interior_peak(model: _Model, state, tj_hi, in_g, in_1, th_g, s1, s2, gh, dt1, t_amb: float):
    """The junction peak inside the step's intervals where the rise turns from rising to
    falling (`thermal.foster_peak`), merged into ``tj_hi``.

    Only where it can matter: each stage rise stays below the larger of its start and
    r_i times the interval's largest power (tau dT/dt + T = r P), and where that bound is
    not above the peak so far the interval is passed over.
    """
    floor = model.ops.maximum(state.tj_peak, tj_hi) - t_amb
    if model.ops is _FloatOps:
        for sel, theta, pa, pb, dt in ((in_g, state.theta, state.p, s1.p, gh), (in_1, th_g, s1.p, s2.p, dt1)):
            if sel:
                p_hi = max(pa, pb)
                if sum(max(th, ri * p_hi) for th, ri in zip(theta, model.r_th)) > floor:
                    rise, _ = foster_peak_floats(theta, pa, pb, dt, model.r_th, model.tau_th)
                    tj_hi = max(tj_hi, t_amb + rise)
        return tj_hi
    tj_hi = np.array(tj_hi, copy=True)
    for sel, theta, pa, pb, dt in ((in_g, state.theta, state.p, s1.p, gh), (in_1, th_g, s1.p, s2.p, dt1)):
        idx = np.flatnonzero(sel)
        if idx.size:
            th = theta[idx]
            bound = np.add.reduce(np.maximum(th, model.r_th * np.maximum(pa[idx], pb[idx])[:, None]), axis=1)
            keep = bound > floor[idx]
            if keep.any():
                idx, th = idx[keep], th[keep]
                if idx.size <= 8:  # a few rows: the float code costs less than NumPy's calls
                    rt, tt = model.r_th.tolist(), model.tau_th.tolist()
                    rise = np.array([foster_peak_floats(th[j].tolist(), float(pa[i]), float(pb[i]), float(dt[i]),
                                                        rt, tt)[0] for j, i in enumerate(idx)])
                else:
                    rise, _ = foster_peak(th, pa[idx], pb[idx], dt[idx], model.r_th, model.tau_th)
                tj_hi[idx] = np.maximum(tj_hi[idx], t_amb + rise)
    return tj_hi


def _switch_events(model: _Model, state, ok, final: dict, wave, rec):
    """Trips, retries and the end of a tripped row, after an accepted step (timer runs).

    Returns the rows that are done (the switch off for good and followed far enough).
    """
    ops = model.ops
    on = state.on
    trip = ok & on & (state.t_reg >= model.t_fault * (1.0 - _LAND)) if model.limit else ok & False
    restart = ok & ops.not_(on) & (state.t >= state.t_restart * (1.0 - _LAND))
    if ops.any(trip) or ops.any(restart):
        if ops is _FloatOps:
            _switch_row(model, state, trip, final, wave, rec is not None)
        else:
            for sel, is_trip in ((trip, True), (restart, False)):
                idx = np.flatnonzero(sel)
                if idx.size:
                    _switch_rows(model, state, idx, is_trip, final)
                    if rec is not None and sel[rec]:
                        _record(wave, state, rec)
    # a switch off for good: follow the input's ring and a piece of the output's decay
    if not ops.any(state.latched):
        return False
    t_since = state.t - state.t_off
    shown = state.latched & (t_since >= 0.25 * (state.t_off - state.t_att))
    if model.has_cin:
        amp2 = (model.l * state.il * state.il) / model.c_in + (state.vin - model.v_s) ** 2
        calm = (amp2 <= (STOP_BAND * model.v_s) ** 2) | (t_since >= 2.0 * model.t_ring)
        if model.has_uvlo:
            calm = calm & (state.vin >= model.uvlo)
        shown = shown & calm
    end = ok & shown
    state.outcome = ops.where(end, OUTCOME_OFF, state.outcome)
    return end


def _trip_bookkeeping(model: _Model, state, final: dict, rows, j) -> None:
    """Write the finished attempt's pulse of state row ``j`` (output row ``rows``)."""
    k = int(state.attempt if j is None else state.attempt[j]) - 1
    take = (lambda x: x) if j is None else (lambda x: x[j])  # noqa: E731
    for name, src in zip(("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start"), _PULSES):
        final[name][rows, k] = take(getattr(state, src))


def _switch_row(model: _Model, state, trip: bool, final: dict, wave, recording: bool) -> None:
    """A trip or a retry of the single row of the float back end."""
    if trip:
        _trip_bookkeeping(model, state, final, 0, None)
        state.on = False
        state.t_off = state.t
        if state.t_trip != state.t_trip:  # NaN: the first trip
            state.t_trip = state.t
        if model.retry and state.attempt < model.attempts:
            state.t_restart = state.t + model.retry_off
        else:
            state.latched = True
    else:
        state.on = True
        state.attempt += 1
        state.t_att = state.t
        state.t_reg = 0.0
        state.t_restart = _INF
        state.e_att, state.pp_att, state.tj_att = 0.0, 0.0, state.tj
    state.phase = 0
    state.h = min(state.h, 1e-7 * state.t_est)
    st = _instant(model, state)
    _apply_instant(model, state, st)
    if not trip:
        state.v_att, state.i_att, state.pp_att = state.vin - state.vout, state.i, state.p
    if recording:
        _record(wave, state, None)


def _switch_rows(model: _Model, state, idx: np.ndarray, trip: bool, final: dict) -> None:
    """Trips (``trip``) or retries of rows ``idx`` of the array back end."""
    if trip:
        for j in idx:
            _trip_bookkeeping(model, state, final, state.rows[j], j)
        state.on[idx] = False
        state.t_off[idx] = state.t[idx]
        first = np.isnan(state.t_trip[idx])
        state.t_trip[idx[first]] = state.t[idx[first]]
        again = model.retry & (state.attempt[idx] < model.attempts)
        state.t_restart[idx] = np.where(again, state.t[idx] + model.retry_off, np.inf)
        state.latched[idx] = ~again
    else:
        state.on[idx] = True
        state.attempt[idx] += 1
        state.t_att[idx] = state.t[idx]
        state.t_reg[idx] = 0.0
        state.t_restart[idx] = np.inf
        state.e_att[idx] = 0.0
        state.tj_att[idx] = state.tj[idx]
    state.phase[idx] = 0
    state.h[idx] = np.minimum(state.h[idx], 1e-7 * state.t_est[idx])
    sub = model.take(idx)
    st = _instant(sub, state, idx)
    _apply_instant(sub, state, st, idx)
    if not trip:
        state.v_att[idx] = state.vin[idx] - state.vout[idx]
        state.i_att[idx] = state.i[idx]
        state.pp_att[idx] = state.p[idx]


def _store(model: _Model, state: _State, final: dict, ops) -> None:
    for name in FIGURES:
        val = getattr(state, name)
        if ops is _FloatOps:
            final[name][0] = val
        else:
            final[name][state.rows] = val
    if model.timer:  # the attempt under way (a finished one is written again unchanged)
        if ops is _FloatOps:
            _trip_bookkeeping(model, state, final, 0, None)
        else:
            k = state.attempt - 1
            for name, src in zip(("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start"), _PULSES):
                final[name][state.rows, k] = getattr(state, src)


def _compact(model: _Model, state: _State, final: dict):
    """Write the figures of all working rows, then keep only the active ones."""
    _store(model, state, final, _ArrayOps)
    keep = np.nonzero(state.active)[0]
    n_old = state.rows.shape[0]
    for name, val in list(vars(state).items()):
        if isinstance(val, np.ndarray) and val.ndim >= 1 and val.shape[0] == n_old:
            setattr(state, name, val[keep])
    return model.take(keep), state


def _notch(ops, event, w_b, floor, area, dt):
    """Where the regulated reference stepped up inside a stage interval: the notch.

    The ideal FET is then fully on until the inductance carries the new current: the
    switch input falls to ``floor`` = v_out + R_sw i (V) for area / (w_b - floor) seconds,
    ``area`` = l (i_b - i_a) (V s) being the inductive drop's integral, w_b = v_s - r i_b
    (V). Returns None where no row has such a notch, else (mask, width in s) for the rows
    whose notch is shorter than the interval (``dt``, s): the others resolve it.
    """
    if not ops.any(event):
        return None
    depth = w_b - floor
    width = area / ops.where(depth > 0.0, depth, 1.0)
    use = event & (depth > 0.0) & (width > 0.0) & (width < dt)
    if not ops.any(use):
        return None
    return use, ops.where(use, width, 0.5 * dt)


def _quadratic(ops, f0, f1, f2):
    """Coefficients (b, c) of f(x) = f0 + b x + c x^2 through the step start (x = 0), the
    trapezoidal stage (x = gamma) and the step end (x = 1)."""
    c = (f1 - f0 - _G * (f2 - f0)) * (1.0 / (_G * _G - _G))
    return (f2 - f0) - c, c


def _power_vertex(ops, state, s1, s2, limit: bool):
    """The peak of the power inside a step where the quadratic through its three values has
    one: (mask, power, v_ds and current there, the latter two on their own quadratics). Only
    where the switch does not regulate at any point of the step: a regulated power follows
    its reference, whose kinks (from the power to the current limit, say) no quadratic
    represents."""
    b, c = _quadratic(ops, state.p, s1.p, s2.p)
    neg = c < 0.0
    cs = ops.where(neg, c, -1.0)
    x = -b / (2.0 * cs)
    p_v = state.p - b * b / (4.0 * cs)
    use = neg & (x > 0.0) & (x < 1.0) & (p_v > ops.maximum(s1.p, s2.p))
    if limit:
        use = use & ops.not_(state.lim | s1.lim | s2.lim)
    i0 = state.i
    v0 = ops.where(i0 > 0.0, state.p / ops.where(i0 > 0.0, i0, 1.0), s1.vds)
    bi, ci = _quadratic(ops, i0, s1.i, s2.i)
    bv, cv = _quadratic(ops, v0, s1.vds, s2.vds)
    return use, p_v, v0 + bv * x + cv * x * x, i0 + bi * x + ci * x * x


def _peak_point(ops, ok, s1, s2, vertex, band: float, v_pk, i_pk, p_peak):
    """The running peak power and the operating point the SOA reads it at, after one step.

    The candidates are the stage points and the interior vertex of the power (`_power_vertex`).
    The point is the highest v_ds among the candidates whose power lies within ``band`` of the
    peak so far (0: the peak itself); it is kept while its own power (v_pk i_pk) stays within
    the band of the peak, and replaced by the step's best point once it does not.
    """
    use_v, p_v, v_v, i_v = vertex
    p_hi = ops.maximum(ops.maximum(s1.p, s2.p), ops.where(use_v, p_v, 0.0))
    p_new = ops.maximum(p_peak, p_hi)
    floor = (1.0 - band) * p_new - 1e-12 * ops.fabs(p_new)
    in1 = s1.p >= floor
    in2 = s2.p >= floor
    inv = use_v & (p_v >= floor)
    pick2 = in2 & (ops.not_(in1) | (s2.vds >= s1.vds))
    v_c = ops.where(pick2, s2.vds, s1.vds)
    i_c = ops.where(pick2, s2.i, s1.i)
    pickv = inv & (ops.not_(in1 | in2) | (v_v > v_c))
    v_c = ops.where(pickv, v_v, v_c)
    i_c = ops.where(pickv, i_v, i_c)
    cand = in1 | in2 | inv
    kept = v_pk * i_pk >= floor
    take = ok & cand & (ops.not_(kept) | (v_c > v_pk))
    return ops.where(take, v_c, v_pk), ops.where(take, i_c, i_pk), ops.where(ok, p_new, p_peak)


def _crossing(ops, f0, f1, f2):
    """Fraction of the step where f, linear between the step start (f0), the trapezoidal
    stage (f1, at gamma) and the end (f2), first changes sign; 2 where it does not."""
    p0, p1, p2 = f0 > 0.0, f1 > 0.0, f2 > 0.0
    c01 = p0 ^ p1
    c12 = p1 ^ p2
    x01 = _G * f0 / ops.where(c01, f0 - f1, 1.0)
    x12 = _G + (1.0 - _G) * f1 / ops.where(c12, f1 - f2, 1.0)
    return ops.where(c01, x01, ops.where(c12, x12, 2.0))


def _event_frac(ops, hit, f_on, f_lim):
    """Where in the step the stage values put the event (`_crossing`): v_out crossing v_on
    (``f_on``: v_out at the step start, the stage and the end, and v_on) or the limit
    excess crossing 0 (``f_lim``), the earlier one; 2 where no row is hit."""
    if not ops.any(hit):
        return 2.0
    frac = None
    for f in (f_on, f_lim):
        if f is not None:
            x = _crossing(ops, f[0] - f[3], f[1] - f[3], f[2] - f[3])
            frac = x if frac is None else ops.minimum(frac, x)
    return frac


_EVENT_STATE = ("h_evt", "phase", "h_back", "t_hi", "aimed", "h_cut")


def _event_rows(state: _State, ok, hit, evt, f_on, f_lim, t, h, h_next, fac_err):
    """`_event_steps` on the array back end, on the rows it concerns (those hit or still
    locating an event): in a large batch a few rows at a time, so it runs on those
    rows alone and writes back (the same arithmetic, row by row)."""
    ops = _ArrayOps
    sel = hit | (state.phase == 1)
    k = int(np.count_nonzero(sel))
    if k == 0:
        return h_next
    if k == sel.size or sel.size <= 64:
        return _event_steps(ops, state, ok, hit, evt, _event_frac(ops, hit, f_on, f_lim), t, h, h_next, fac_err)
    idx = np.flatnonzero(sel)
    sub = _State()
    for name in _EVENT_STATE:
        setattr(sub, name, getattr(state, name)[idx])
    pick = lambda f: None if f is None else tuple(x[idx] for x in f[:3]) + (f[3],)  # noqa: E731
    hit_i = hit[idx]
    hn = _event_steps(ops, sub, ok[idx], hit_i, evt[idx], _event_frac(ops, hit_i, pick(f_on), pick(f_lim)),
                      t[idx], h[idx], h_next[idx], fac_err[idx])
    for name in _EVENT_STATE[1:]:
        getattr(state, name)[idx] = getattr(sub, name)
    h_next = np.array(h_next, copy=True)
    h_next[idx] = hn
    return h_next


def _event_steps(ops, state: _State, ok, hit, evt, frac, t, h, h_next, fac_err):
    """Next step sizes while an event (a load switching on or off, the switch entering or
    leaving regulation) is being located, and the bookkeeping of each row.

    A step longer than h_evt that holds an event is rejected (``hit``); its end bounds the
    event (``state.t_hi``). Where the stage values put the event beyond the first quarter of
    the step (its sign change, linear between them: ``frac``) the next step ends half an
    h_evt before that estimate and, once accepted, the one after it tries the rest of the
    bracket, short enough by then to cross the event. Otherwise the step is cut to a
    quarter, and the accepted steps keep that size (they do not grow back) until the event
    is reached (growing back to it after a cut for the error). Never shorter than h_evt.
    When an accepted step holds the event (``evt``) the steps grow back at once, by the
    error control's own factor 0.9 err^(-1/3) (``fac_err``) without its limit of x4, up to
    the step size the event cut (``state.h_back``).
    """
    h_evt = state.h_evt
    if ops.any(hit):
        land = ops.where(frac < 1.0, frac * h - 0.5 * h_evt, 0.0)
        aimed = land >= 0.25 * h
        state.h_back = ops.where(hit & (state.phase == 0), h, state.h_back)
        state.t_hi = ops.where(hit, t + h, state.t_hi)
        state.aimed = ops.where(hit, aimed, state.aimed)
        state.phase = ops.where(hit, 1, state.phase)
        h_cut = ops.maximum(ops.where(aimed, land, 0.25 * h), h_evt)
        state.h_cut = ops.where(hit, h_cut, state.h_cut)
        h_next = ops.where(hit, h_cut, h_next)
    # crossed it, or passed the bracket without meeting it (an event the predictor saw)
    crossed = ok & (evt | (t + h >= state.t_hi))
    rest = ops.maximum(state.t_hi - (t + h), h_evt)
    go_on = ops.where(state.aimed, rest, ops.minimum(ops.minimum(h_next, state.h_cut), rest))
    resume = ops.maximum(ops.minimum(state.h_back, h * fac_err), h_evt)
    h_next = ops.where(ok & (state.phase == 1), ops.where(crossed, resume, go_on), h_next)
    state.phase = ops.where(crossed, 0, state.phase)
    return h_next


def _lim_time(ops, e0, e1, dt):
    """Time with positive limit excess over a step where the excess varies linearly:
    dt times the part of [0, 1] where it is positive, max(e0, e1) / |e0 - e1| clipped to
    [0, 1] (1 where both are positive, 0 where neither is)."""
    frac = ops.maximum(e0, e1) / (ops.fabs(e0 - e1) + 1e-300)
    return dt * ops.minimum(ops.maximum(frac, 0.0), 1.0)
