"""Start-up transient of a switched rail: a batch integrator, one row per corner or sample.

Provides
--------
simulate_startup(circuit, *, record=None, max_steps=MAX_STEPS)
    Integrate the start-up of every row of a `Circuit` at once, the fault timer acting
    where it trips, and return the figures (`StartupFigures`): status and attempts,
    i_peak, t_limit, t_settle, e_fet, p_fet_peak, tj_peak, the raw supply dip
    (v_supply_min, t_below_uvlo, dip_unbounded), the operating point of the peak power,
    the pulse of every attempt, and optionally the full-resolution waveform of one row.
StartupFigures
    The figures as arrays of shape (n,) (per attempt (n, K)) and a per-row status.
STATUS_OK, STATUS_STALLED, STATUS_NO_CONVERGENCE, STATUS_TRIPPED, STATUS_RETRIED,
STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY
    Row status codes.
RETRY_ATTEMPTS, TJ_RUNAWAY_K, MAX_STEPS
    Attempts of a retrying switch (8), the junction temperature above tj_max at which a
    row stops as destroyed (100 K), the step cap per row and run.

Model
-----
Unknowns: the series current i_L (through r_source + r, l_source + l), the switch-input
voltage v_in across the input capacitance c_in (supply.c_in; without it v_in is algebraic),
the switch current i and the capacitor voltage v_c; the output is
v_out = v_c + esr (i - i_load(v_out)). The switch is a resistance R_sw >= its fully-on value
plus a regulation drop v_reg >= 0 that keeps i <= i_ref (complementarity: v_reg = 0 or
i = i_ref):

    l di_L/dt = v_s - r i_L - v_in,   c_in dv_in/dt = i_L - i,
    v_in - v_out = R_sw i + v_reg,    c dv_c/dt = i - i_load(v_out).

Without c_in, i_L = i and v_in = v_s - r i - l di/dt. R_sw is Rds(on)(Tj), rising with the
junction temperature. Over the turn-on time t_on (hard mode per DESIGN.md; the same gate
ramp is honoured in the regulating modes, default 0 = instant) it falls log-linearly from
R_OFF = 1 Mohm: ln R_sw(t) = ln R_OFF + (t / t_on) (ln Rds(on) - ln R_OFF). i_ref is
i_limit (current limit, and any mode that has one), c dvdt + i_load(v_out) (slew: the
capacitor ramps at dvdt), and the current at which the FET dissipates p_limit (power limit).
With a foldback curve (`foldback`) the current limit is the curve at V_DS, scaled per row by
the row's limit over the nominal one. With a gate drive (`circuit.GateModel`) the switch is a
source-follower N-channel FET: the gate voltage is one more state (its charge C_t v_g - C_gd v_in -
C_gs v_out driven by the gate current), the channel the SPICE level-1 MOSFET, the current at most
V_DS / Rds(on); the ramp t_on and the slew reference are not used, a current or power limit stays
on top, and the regulation time the fault timer counts is the current limit's alone.
With l = 0 the series current is algebraic (an index-1 DAE). A load draws nothing below
v_on and, once started, keeps drawing while the switch is on (its own UVLO hysteresis).
Initial state: capacitors discharged, v_in = v_s, no series current.

The fault timer (`Circuit.t_fault` per row, from the timer's trip time) counts the time the
switch regulates in each attempt; when it reaches t_fault the switch turns off (its current
is 0; the turn-off voltage spike of the series inductance is not modelled). After a trip
the switch latches off, or retries after retry_off with the ramp and the count restarting,
up to RETRY_ATTEMPTS attempts (`integrator`). While off, a load stops drawing when v_out
falls to its v_on (or to 0 V).

With c_in and series inductance but no series resistance the input's L c_in ring has no
damping while the switch regulates (a current source, or with a power limit a negative
incremental resistance that can even grow it, the input-filter interaction of a
constant-power sink): it rings for the whole regulation, which is resolved step by step and
may exhaust the step budget; the capacitor's ESR belongs in supply.r_source.

The supply dip is reported raw: v_supply_min is the lowest switch-input voltage over the
run, t_below_uvlo the longest time it stays continuously below supply.uvlo (the upstream
UVLO's deglitch time is compared with it by the checks, not applied here). Without c_in and
with series inductance an ideal switch that is fully on while the inductance alone holds
the current (an instant turn-on; a regulated reference stepping up when a load switches on)
pulls the input down to v_out + R_sw i: ``dip_unbounded`` marks rows whose lowest value is
set there, a dip that only input capacitance bounds.

Method
------
TR-BDF2 with adaptive steps, every row with its own step, all rows advanced in one
vectorised iteration (`integrator`; Bank et al. 1985, Hosea and Shampine 1996): L-stable,
so nanohenries with farads and microseconds with seconds share one run. A row stops when
the switch no longer regulates, its turn-on ramp is over and the energy of the deviation
from the DC operating point is within the stop band; a tripped row when it has been
followed far enough; a row whose junction passes tj_max + TJ_RUNAWAY_K at once. A row that
needs more than ``max_steps`` attempted steps keeps the figures of what it computed up to
``t_end`` and is reported as not converged. Before integrating, a regulated start is
checked for a stall: where the reference current does not exceed the load current somewhere
below v_f (checked on 257 voltages), the output would stop rising there; the row is
reported as stalled at that voltage (and integrated only where a timer ends it).

The rows run free first (no timer acting), which gives t_limit, the regulation time the
start needs without a timer; the rows whose regulation time reaches their t_fault (and the
stalled rows with a timer) run again with the timer acting, and their figures are those of
what then happens.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .circuit import Circuit
from .integrator import (OUTCOME_COMPLETE, OUTCOME_OFF, OUTCOME_RUNAWAY, RETRY_ATTEMPTS, TJ_RUNAWAY_K,
                         integrate)

__all__ = [
    "MAX_STEPS",
    "RETRY_ATTEMPTS",
    "TJ_RUNAWAY_K",
    "STATUS_OK",
    "STATUS_STALLED",
    "STATUS_NO_CONVERGENCE",
    "STATUS_TRIPPED",
    "STATUS_RETRIED",
    "STATUS_RETRY_EXHAUSTED",
    "STATUS_RUNAWAY",
    "StartupFigures",
    "simulate_startup",
]

MAX_STEPS = 20000
STATUS_OK, STATUS_STALLED, STATUS_NO_CONVERGENCE = 0, 1, 2
STATUS_TRIPPED, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY = 3, 4, 5, 6

_PULSE_NAMES = ("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start")


@dataclass
class StartupFigures:
    """Figures of the start-up of each row (arrays of shape (n,), SI units, degC).

    ``status`` (int8): STATUS_OK (completes in its first attempt), STATUS_STALLED (cannot
    complete: the regulated current never exceeds the load's, the output stalling at
    ``v_stall``; or no DC operating point, or the load's turn-on voltage above the output it
    can reach, ``v_stall`` 0), STATUS_NO_CONVERGENCE (step budget exhausted), STATUS_TRIPPED
    (the timer latched the switch off, start incomplete), STATUS_RETRIED (completes, but only
    in attempt ``attempts`` > 1), STATUS_RETRY_EXHAUSTED (not complete within RETRY_ATTEMPTS),
    STATUS_RUNAWAY (Tj passed tj_max + TJ_RUNAWAY_K; it takes precedence over a stall). The
    figures are those of what happened up to ``t_end``, whatever the status; NaN only where
    they do not exist (a stalled row without a timer is not integrated; ``t_settle`` where
    the output did not settle, ``t_limit`` where the free run did not complete, ``t_trip``
    where nothing tripped). ``attempts`` is 0 for a row not integrated; ``steps`` counts the
    attempted steps of the run whose figures are given (the run with the timer acting where
    there was one). Times are counted from the first turn-on (``t_settle`` of a retried start
    included).

    ``t_limit`` is the regulation time the start needs with no timer acting (the free run).
    ``v_ds_at_peak`` and ``i_at_peak`` are the FET operating point at its peak power,
    ``t_i_peak`` the time of the current peak. ``v_supply_min`` is the lowest raw
    switch-input voltage, ``t_below_uvlo`` the longest time the input stays continuously
    below the UVLO threshold (0 when never below, NaN without a threshold), ``dip_unbounded``
    whether the lowest value is the ideal notch that only input capacitance bounds.
    ``pulse_*`` have shape (n, K), K the largest number of attempts of any row, NaN-filled:
    the energy (J), peak power (W), its operating point (V, A) and the junction temperature
    at the start (degC) of each attempt. ``waveform`` holds the full-resolution waveform of
    the recorded row: lists ``t``, ``v_out``, ``v_in``, ``i`` (switch current), ``v_ds``,
    ``p_fet``, ``tj``, ``on`` (1.0 switch on, 0.0 off).
    """

    status: np.ndarray
    attempts: np.ndarray
    t_trip: np.ndarray
    i_peak: np.ndarray
    t_i_peak: np.ndarray
    t_limit: np.ndarray
    t_settle: np.ndarray
    e_fet: np.ndarray
    p_fet_peak: np.ndarray
    tj_peak: np.ndarray
    v_supply_min: np.ndarray
    t_below_uvlo: np.ndarray
    dip_unbounded: np.ndarray
    v_ds_at_peak: np.ndarray
    i_at_peak: np.ndarray
    v_final: np.ndarray
    v_stall: np.ndarray
    v_end: np.ndarray
    t_end: np.ndarray
    steps: np.ndarray
    pulse_e: np.ndarray
    pulse_p_peak: np.ndarray
    pulse_v_ds: np.ndarray
    pulse_i: np.ndarray
    pulse_tj_start: np.ndarray
    waveform: dict | None = None


def _time_scale(cz: Circuit) -> np.ndarray:
    """Rough duration of the start-up per row, s (sets the first and largest steps)."""
    rds = cz.rds_on
    tau_rc = (cz.r + rds + cz.esr) * cz.c
    t_lc = 2.0 * math.pi * np.sqrt(cz.l * cz.c)
    t = np.maximum(5.0 * tau_rc, t_lc)
    if cz.load == "resistive":
        t = np.maximum(t, np.minimum(cz.r_load * cz.c, 1e3))
    lim_rate = np.minimum(cz.i_lim, cz.v_s / (cz.r + rds + cz.esr))
    t = np.maximum(t, cz.c * cz.v_s / lim_rate)
    if cz.mode == "slew" and cz.gate is None:
        t = np.maximum(t, cz.v_s / cz.dvdt)
    if cz.mode == "power_limit":
        t = np.maximum(t, cz.c * cz.v_s * cz.v_s / cz.p_lim)
    if cz.gate is not None:  # the gate's charge to the threshold and the Miller plateau
        gm = cz.gate
        i_g = gm.i_g0 if gm.g_g == 0.0 else np.maximum(gm.i_g0 - gm.g_g * (cz.v_s + gm.v_th), 0.1 * gm.i_g0)
        return np.maximum(t, (gm.c_total * gm.v_th + (gm.c_gd + gm.c_ext) * cz.v_s) / i_g)
    return np.maximum(t, cz.t_on)


def _stall_voltage(cz: Circuit, v_final: np.ndarray) -> np.ndarray:
    """Output voltage where a regulated start stalls (NaN where it does not).

    The regulated current must exceed the load current at every output voltage on the
    way to v_final; checked on a grid of 257 voltages per row.
    """
    out = np.full(cz.n, np.nan)
    gm = cz.gate
    if gm is not None and gm.g_g > 0.0:
        # a voltage drive from ground that does not reach v_s + V_th leaves the FET in saturation:
        # the output follows the gate, V_th and an overdrive below it, and never settles
        v_gate = gm.i_g0 / gm.g_g
        short = v_gate - gm.v_th <= cz.v_s
        out = np.where(short, np.clip(v_gate - gm.v_th, 0.0, v_final), out)
        if short.all():
            return out
    if not cz.has_limit or cz.load == "none":
        return out
    frac = np.linspace(0.0, 1.0, 257)
    v = v_final[None, :] * frac[:, None] * (1.0 - 1e-9)  # (257, n)
    if cz.mode == "slew" and cz.fold is None:
        ref = np.broadcast_to(cz.i_lim, v.shape)  # the slew ramp itself never stalls
    else:
        ref = cz.limit_reference(v)
    short = ref <= cz.load_current(v) * (1.0 + 1e-9)
    first = np.argmax(short, axis=0)
    return np.where(short.any(axis=0) & np.isnan(out), v[first, np.arange(cz.n)], out)


def _free_run(cz: Circuit, *, t_est, i_typ, active, record, max_steps):
    """The run without a timer, once per distinct circuit row: rows that differ only in their
    trip time (the corners of a timer's tolerances, say) share it, figures and waveform."""
    key = np.stack([cz.v_s, cz.c, cz.i_lim, cz.r, cz.l, cz.esr], axis=1)
    if cz.bank_c is not None:
        key = np.concatenate([key, cz.bank_c], axis=1)
    _, first, inv = np.unique(key, axis=0, return_index=True, return_inverse=True)
    inv = inv.reshape(-1)
    if first.size == cz.n:
        return integrate(cz, t_est=t_est, i_typ=i_typ, active=active, t_amb=cz.t_amb, record=record,
                         max_steps=max_steps)
    fig, wave = integrate(cz.take(first), t_est=t_est[first], i_typ=i_typ[first], active=active[first],
                          t_amb=cz.t_amb, record=None if record is None else int(inv[record]),
                          max_steps=max_steps)
    return {name: (val[inv] if isinstance(val, np.ndarray) and val.ndim >= 1 and val.shape[0] == first.size
                   else val) for name, val in fig.items()}, wave


def simulate_startup(cz: Circuit, *, record: int | None = None, max_steps: int = MAX_STEPS) -> StartupFigures:
    """Integrate the start-up of every row of ``cz``.

    Parameters
    ----------
    cz : Circuit
        Rows of circuit parameters (SI units); ``cz.t_fault`` is the fault timer's trip
        time per row (``inf``: no timer acting).
    record : int, optional
        Row whose full-resolution waveform is returned (``t``, ``v_out``, ``v_in``, ``i``,
        ``v_ds``, ``p_fet``, ``tj``, ``on`` lists; s, V, V, A, V, W, degC, 1/0).
    max_steps : int
        Largest number of attempted steps per row and run.

    Returns
    -------
    StartupFigures

    Notes
    -----
    Model as in the module docstring; method TR-BDF2 (Bank et al. 1985; Hosea and
    Shampine 1996), see `integrator`.
    """
    n = cz.n
    v_f0, _, ok_dc = cz.final_output(cz.t_amb)
    v_grid = _stall_voltage(cz, v_f0)
    stall_reg = ~np.isnan(v_grid) & ok_dc
    stalled = stall_reg | ~ok_dc
    v_stall = np.where(stalled, np.where(stall_reg, v_grid, 0.0), np.nan)
    t_est = _time_scale(cz)
    i_typ = np.minimum(cz.i_lim, cz.v_s / (cz.r + cz.rds_on + cz.esr + np.sqrt(cz.l / cz.c)))
    if cz.gate is not None:  # the capacitor's current at the gate's slew, and the load's
        i_typ = np.minimum(i_typ, cz.c * cz.v_s / t_est + cz.i_nom)

    free = ~stalled
    fig, wave = _free_run(cz, t_est=t_est, i_typ=i_typ, active=free, record=record, max_steps=max_steps)
    done_free = free & (fig["outcome"] == OUTCOME_COMPLETE)
    t_limit = np.where(done_free, fig["t_reg"], np.nan)
    status = np.where(stalled, STATUS_STALLED, STATUS_NO_CONVERGENCE).astype(np.int8)
    status[done_free] = STATUS_OK
    status[free & (fig["outcome"] == OUTCOME_RUNAWAY)] = STATUS_RUNAWAY
    ran = free.copy()
    attempts = np.where(free, 1, 0)
    k = 1
    pulses = {name: fig[name] for name in _PULSE_NAMES}
    # the attempt of a free run is the whole run
    pulses["pulse_e"][:, 0] = fig["e_fet"]
    pulses["pulse_p_peak"][:, 0] = fig["p_peak"]
    pulses["pulse_v_ds"][:, 0] = fig["v_pk"]
    pulses["pulse_i"][:, 0] = fig["i_pk"]
    pulses["pulse_tj_start"][:, 0] = cz.t_amb
    for val in pulses.values():
        val[~free] = np.nan

    timed = np.isfinite(cz.t_fault) & ((free & (fig["t_reg"] >= cz.t_fault)) | stall_reg)
    if cz.gate is not None and cz.gate.g_g > 0.0:  # a gate that never enhances the FET trips no timer
        timed &= ~(cz.gate.i_g0 / cz.gate.g_g - cz.gate.v_th <= cz.v_s)
    if timed.any():
        rows = np.flatnonzero(timed)
        sub = cz.take(rows)
        rec_sub = None
        if record is not None and timed[record]:
            rec_sub = int(np.flatnonzero(rows == record)[0])
        fig_t, wave_t = integrate(sub, t_est=t_est[rows], i_typ=i_typ[rows], active=np.ones(rows.size, bool),
                                  t_amb=cz.t_amb, record=rec_sub, max_steps=max_steps, timer=True)
        if rec_sub is not None:
            wave = wave_t
        for name, val in fig_t.items():
            if name.startswith("pulse_"):
                continue
            fig[name][rows] = val
        k = int(fig_t["attempt"].max())
        for name in _PULSE_NAMES:
            wide = np.full((n, k), np.nan)
            wide[:, :1] = pulses[name]
            wide[rows] = fig_t[name][:, :k]
            pulses[name] = wide
        ran[rows] = True
        attempts[rows] = fig_t["attempt"]
        outcome, att = fig_t["outcome"], fig_t["attempt"]
        st = np.full(rows.size, STATUS_NO_CONVERGENCE, np.int8)
        st[outcome == OUTCOME_COMPLETE] = np.where(att[outcome == OUTCOME_COMPLETE] > 1, STATUS_RETRIED, STATUS_OK)
        if cz.after_fault == "retry":
            st[outcome == OUTCOME_OFF] = STATUS_RETRY_EXHAUSTED
        else:
            st[outcome == OUTCOME_OFF] = STATUS_TRIPPED
        st[outcome == OUTCOME_RUNAWAY] = STATUS_RUNAWAY
        # a stalled start stays stalled, unless the FET does not survive it
        status[rows] = np.where(stall_reg[rows] & (st != STATUS_RUNAWAY), STATUS_STALLED, st)

    def out(x):
        return np.where(ran, x, np.nan)

    complete = ran & (fig["outcome"] == OUTCOME_COMPLETE)
    t_end = fig["t"]
    t_below = np.maximum(fig["bl_max"], np.where(np.isfinite(fig["bl_t0"]), t_end - fig["bl_t0"], 0.0))
    if not math.isfinite(cz.uvlo):
        t_below = np.full(n, np.nan)
    v_final = np.where(ok_dc & ran, cz.final_output(fig["tj"])[0], np.nan)
    if record is not None and not ran[record]:
        wave = None
    return StartupFigures(
        status=status,
        attempts=attempts.astype(np.int64),
        t_trip=out(fig["t_trip"]),
        i_peak=out(fig["i_peak"]),
        t_i_peak=out(fig["t_i_peak"]),
        t_limit=t_limit,
        t_settle=np.where(complete, fig["t_settle"], np.nan),
        e_fet=out(fig["e_fet"]),
        p_fet_peak=out(fig["p_peak"]),
        tj_peak=out(fig["tj_peak"]),
        v_supply_min=out(np.minimum(fig["v_in_min"], cz.v_s)),
        t_below_uvlo=out(t_below),
        dip_unbounded=ran & fig["unb"].astype(bool),
        v_ds_at_peak=out(fig["v_pk"]),
        i_at_peak=out(fig["i_pk"]),
        v_final=v_final,
        v_stall=v_stall,
        v_end=out(fig["vout"]),
        t_end=out(t_end),
        steps=fig["steps"],
        pulse_e=pulses["pulse_e"],
        pulse_p_peak=pulses["pulse_p_peak"],
        pulse_v_ds=pulses["pulse_v_ds"],
        pulse_i=pulses["pulse_i"],
        pulse_tj_start=pulses["pulse_tj_start"],
        waveform=wave,
    )
