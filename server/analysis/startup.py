"""Start-up transient of a switched rail: a batch integrator, one row per corner or sample.

Provides
--------
simulate_startup(circuit, *, record=None, max_steps=MAX_STEPS)
    Integrate the start-up of every row of a `Circuit` at once and return the figures
    (`StartupFigures`): i_peak, t_limit, t_settle, e_fet, p_fet_peak, tj_peak,
    v_supply_min (through the UVLO filter) and v_supply_min_raw, and the operating point
    of the peak power; optionally the full-resolution waveform of one row.
StartupFigures
    The figures as arrays of shape (n,) and a per-row status.
STATUS_OK, STATUS_STALLED, STATUS_NO_CONVERGENCE
    Row status codes.

Model
-----
Unknowns: the series current i (through r_source + r, l_source + l) and the capacitor
voltage v_c; the output is v_out = v_c + esr (i - i_load(v_out)). The switch is a
resistance R_sw >= its fully-on value plus a regulation drop v_reg >= 0 that keeps
i <= i_ref (complementarity: v_reg = 0 or i = i_ref):

    l di/dt = v_s - r i - R_sw i - v_reg - v_out,      c dv_c/dt = i - i_load(v_out).

R_sw is Rds(on)(Tj), rising with the junction temperature of the previous step. Over the
turn-on time t_on (hard mode per DESIGN.md; the same gate ramp is honoured in the
regulating modes, default 0 = instant) it falls log-linearly from R_OFF = 1 Mohm:
ln R_sw(t) = ln R_OFF + (t / t_on) (ln Rds(on) - ln R_OFF). i_ref is i_limit (current
limit, and any mode that has one), c dvdt + i_load(v_out) (slew: the capacitor ramps at
dvdt), and the current at which the FET dissipates p_limit with v_ds = v_s - r i - v_out
(power limit; the l di/dt of the regulated current is neglected there). With l = 0 the
current is algebraic (an index-1 DAE). t_limit counts the time with v_reg > 0. A load
draws nothing below v_on and, once started, keeps drawing (its own UVLO hysteresis). The
start-up is computed as if the fault timer never trips; the timer check says whether it
would. No input capacitance is modelled: the switch input is v_out + v_ds, and while the
FET regulates a step of its reference can pull it down to nearly v_out for the few
nanoseconds the series inductance needs to take the new current (an ideal controller of
infinite bandwidth). No real UVLO sees such a notch: its comparator has a deglitch
filter. v_supply_min is therefore the switch input through a first-order lag of time
constant uvlo_filter (default 1 us, common practice, no source), tau dy/dt + y = v_in,
starting from y = v_s (the supply before the switch turns on) and integrated exactly per
step (`lag`; v_s - r i linear between stage points, l di/dt at its mean over each stage
interval so that a notch keeps its area l delta-i, and the notch of a reference step is
put back with its depth and width); v_supply_min_raw is the lowest unfiltered value: the
stage points and the floor of such a notch. With uvlo_filter = 0 the two are the same
number.

Method
------
TR-BDF2 with adaptive steps, every row with its own step, all rows advanced in one
vectorised iteration (`integrator`; Bank et al. 1985, Hosea and Shampine 1996): L-stable,
so nanohenries with farads and microseconds with seconds share one run. A row stops when
the switch no longer regulates, t >= t_on and the energy of the deviation from the DC
operating point, l (i - i_f)^2 + c (v_c - v_f)^2, is below c (1e-3 v_f)^2. A row that
needs more than ``max_steps`` attempted steps is reported as not converged. Before
integrating, a regulated start is checked for a stall: where the reference current does
not exceed the load current somewhere below v_f (checked on 257 voltages), the output
would stop rising there; the row is reported as stalled at that voltage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .circuit import Circuit
from .integrator import integrate

__all__ = [
    "MAX_STEPS",
    "STATUS_OK",
    "STATUS_STALLED",
    "STATUS_NO_CONVERGENCE",
    "STATUS_TRIPPED",
    "STATUS_RETRIED",
    "STATUS_RETRY_EXHAUSTED",
    "STATUS_RUNAWAY",
    "TJ_RUNAWAY_K",
    "StartupFigures",
    "simulate_startup",
]

MAX_STEPS = 20000
STATUS_OK, STATUS_STALLED, STATUS_NO_CONVERGENCE = 0, 1, 2
STATUS_TRIPPED, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_RUNAWAY = 3, 4, 5, 6
TJ_RUNAWAY_K = 100.0  # K above tj_max where a start is taken as destroying the FET


@dataclass
class StartupFigures:
    """Figures of the start-up of each row (arrays of shape (n,), SI units, degC).

    ``status`` is STATUS_OK, STATUS_STALLED (the regulated current cannot lift the load
    to its final voltage: the output stalls at ``v_stall``; or the load has no DC
    operating point) or STATUS_NO_CONVERGENCE. Figures of rows that are not OK are NaN.
    ``v_ds_at_peak`` and ``i_at_peak`` are the FET operating point at its peak power,
    ``t_i_peak`` the time of the current peak. ``v_supply_min`` is the lowest switch-input
    voltage through the UVLO filter, ``v_supply_min_raw`` the lowest unfiltered one.
    ``waveform`` holds the full-resolution waveform of the recorded row.
    """

    status: np.ndarray
    i_peak: np.ndarray
    t_i_peak: np.ndarray
    t_limit: np.ndarray
    t_settle: np.ndarray
    e_fet: np.ndarray
    p_fet_peak: np.ndarray
    tj_peak: np.ndarray
    v_supply_min: np.ndarray
    v_supply_min_raw: np.ndarray
    v_ds_at_peak: np.ndarray
    i_at_peak: np.ndarray
    v_final: np.ndarray
    v_stall: np.ndarray
    t_end: np.ndarray
    steps: np.ndarray
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
    if cz.mode == "slew":
        t = np.maximum(t, cz.v_s / cz.dvdt)
    if cz.mode == "power_limit":
        t = np.maximum(t, cz.c * cz.v_s * cz.v_s / cz.p_lim)
    return np.maximum(t, cz.t_on)


def _stall_voltage(cz: Circuit, v_final: np.ndarray) -> np.ndarray:
    """Output voltage where a regulated start stalls (NaN where it does not).

    The regulated current must exceed the load current at every output voltage on the
    way to v_final; checked on a grid of 257 voltages per row.
    """
    out = np.full(cz.n, np.nan)
    if not cz.has_limit or cz.load == "none":
        return out
    frac = np.linspace(0.0, 1.0, 257)
    v = v_final[None, :] * frac[:, None] * (1.0 - 1e-9)  # (257, n)
    if cz.mode == "slew":
        ref = np.broadcast_to(cz.i_lim, v.shape)  # the slew ramp itself never stalls
    else:
        ref = cz.limit_reference(v)
    short = ref <= cz.load_current(v) * (1.0 + 1e-9)
    first = np.argmax(short, axis=0)
    return np.where(short.any(axis=0), v[first, np.arange(cz.n)], out)


def simulate_startup(cz: Circuit, *, record: int | None = None, max_steps: int = MAX_STEPS) -> StartupFigures:
    """Integrate the start-up of every row of ``cz``.

    Parameters
    ----------
    cz : Circuit
        Rows of circuit parameters (SI units).
    record : int, optional
        Row whose full-resolution waveform is returned (``t``, ``v_out``, ``i``, ``v_ds``,
        ``p_fet``, ``tj`` lists; s, V, A, V, W, degC).
    max_steps : int
        Largest number of attempted steps per row.

    Returns
    -------
    StartupFigures

    Notes
    -----
    Model as in the module docstring; method TR-BDF2 (Bank et al. 1985; Hosea and
    Shampine 1996), see `integrator`.
    """
    v_f0, _, ok_dc = cz.final_output(cz.t_amb)
    v_stall = _stall_voltage(cz, v_f0)
    status = np.where(np.isnan(v_stall), STATUS_OK, STATUS_STALLED).astype(np.int8)
    status[~ok_dc] = STATUS_STALLED
    v_stall = np.where(ok_dc | ~np.isnan(v_stall), v_stall, 0.0)
    t_est = _time_scale(cz)
    i_typ = np.minimum(cz.i_lim, cz.v_s / (cz.r + cz.rds_on + cz.esr + np.sqrt(cz.l / cz.c)))
    fig, wave = integrate(cz, t_est=t_est, i_typ=i_typ, active=status == STATUS_OK,
                          t_amb=cz.t_amb, record=record, max_steps=max_steps)
    status[fig["active"]] = STATUS_NO_CONVERGENCE
    good = status == STATUS_OK
    for name in ("i_peak", "p_peak", "e_fet", "tj_peak", "t_settle", "t_limit", "v_in_min"):
        good &= np.isfinite(fig[name])
    status[(status == STATUS_OK) & ~good] = STATUS_NO_CONVERGENCE

    def out(x):
        return np.where(good, x, np.nan)

    v_raw = np.minimum(fig["v_in_min"], cz.v_s)
    if cz.uvlo_filter > 0.0:
        # after the run the filter output tends to the last input, which it may not
        # have reached yet
        v_flt = np.minimum(np.minimum(fig["v_flt_min"], cz.v_s - cz.r * fig["i"]), cz.v_s)
    else:
        v_flt = v_raw

    if record is not None and not good[record]:
        wave = None
    return StartupFigures(
        status=status,
        i_peak=out(fig["i_peak"]),
        t_i_peak=out(fig["t_i_peak"]),
        t_limit=out(fig["t_limit"]),
        t_settle=out(fig["t_settle"]),
        e_fet=out(fig["e_fet"]),
        p_fet_peak=out(fig["p_peak"]),
        tj_peak=out(fig["tj_peak"]),
        v_supply_min=out(v_flt),
        v_supply_min_raw=out(v_raw),
        v_ds_at_peak=out(fig["v_pk"]),
        i_at_peak=out(fig["i_pk"]),
        v_final=out(cz.final_output(fig["tj"])[0]),
        v_stall=v_stall,
        t_end=out(fig["t"]),
        steps=fig["steps"],
        waveform=wave,
    )
