"""Evaluation of rows of operating conditions: every figure and every check of a rail.

Provides
--------
RowParams
    Per-row operating conditions (nominal, a corner or a Monte Carlo sample).
evaluate_rows(rail, rules, params, *, startup=None, record=None)
    Start-up transient, equivalent-rectangle SOA ratio, short circuit, fault timer,
    retry and steady state for every row, and the graded checks.

A row carries separate conditions for the start-up (v_s, c, i_lim), the short circuit
(v_sc, i_sc), the timer (t_fault_start: the shortest trip time a good start must not
reach; t_fault_sc: the longest time a short circuit lasts) and steady conduction
(v_steady). The nominal evaluation uses the worst cases that DESIGN.md section 4 builds
into the short-circuit and timer figures; a corner or a sample uses its own values
throughout.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .checks import evaluate_checks
from .circuit import NO_LIMIT, circuit_rows
from .document import Rail
from .retry import retry_figures
from .shortcircuit import has_limit, short_circuit
from .soa import allowed_current, derating_factor, equivalent_rectangle
from .startup import MAX_STEPS, STATUS_OK, StartupFigures, simulate_startup
from .steady import steady_state
from .thermal import foster_arrays

__all__ = ["RowParams", "evaluate_rows", "startup_rows"]


@dataclass
class RowParams:
    """Operating conditions per row (arrays of shape (n,); V, F, A, s)."""

    v_s: np.ndarray
    c: np.ndarray
    i_lim: np.ndarray
    v_sc: np.ndarray
    i_sc: np.ndarray
    t_fault_start: np.ndarray
    t_fault_sc: np.ndarray
    v_steady: np.ndarray

    @property
    def n(self) -> int:
        return self.v_s.shape[0]

    def take(self, rows) -> "RowParams":
        return RowParams(**{k: getattr(self, k)[rows] for k in self.__dataclass_fields__})


def startup_rows(rail: Rail, params: RowParams, *, record: int | None = None,
                 max_steps: int = MAX_STEPS) -> StartupFigures:
    """Start-up transient of every row (one batch integration)."""
    cz = circuit_rows(rail, v_s=params.v_s, c=params.c, i_limit=params.i_lim)
    return simulate_startup(cz, record=record, max_steps=max_steps)


def evaluate_rows(rail: Rail, rules: dict, params: RowParams, *, startup: StartupFigures | None = None,
                  record: int | None = None, startup_only: bool = False,
                  max_steps: int = MAX_STEPS) -> tuple[dict, dict, StartupFigures]:
    """Every figure and check for rows of operating conditions.

    Parameters
    ----------
    rail : Rail
    rules : dict
        Team rules.
    params : RowParams
    startup : StartupFigures, optional
        Already computed start-up figures for these rows.
    record : int, optional
        Row whose start-up waveform is kept.
    max_steps : int
        Step cap of the transient per row.
    startup_only : bool
        Skip the short circuit, retry and steady state (their checks become n/a): what
        the capacitance headroom search needs.

    Returns
    -------
    fig : dict
        Arrays of shape (n,) (SI units, degC) and flags ``has_limit``, ``has_timer``,
        ``has_retry``.
    checks : dict
        `checks.evaluate_checks` output.
    startup : StartupFigures
    """
    n = params.n
    if startup is None:
        startup = startup_rows(rail, params, record=record, max_steps=max_steps)
    fet = rail.fet
    t_amb = rail.t_ambient
    ok = startup.status == STATUS_OK
    cz = circuit_rows(rail, v_s=params.v_s, c=params.c, i_limit=params.i_lim)
    v_target = cz.final_output(t_amb)[0]
    fig: dict = {"n": n, "status_ok": ok, "v_target": v_target, "v_stall": startup.v_stall,
                 "v_final": startup.v_final, "v_sc": params.v_sc}
    for name in ("i_peak", "t_i_peak", "t_limit", "t_settle", "e_fet", "p_fet_peak", "tj_peak", "v_supply_min",
                 "v_supply_min_raw", "v_ds_at_peak", "i_at_peak"):
        fig[name] = getattr(startup, name)

    # start-up pulse against the SOA: rectangle of the same energy and peak power
    t_eq = equivalent_rectangle(np.nan_to_num(startup.e_fet), np.nan_to_num(startup.p_fet_peak))
    with np.errstate(invalid="ignore", divide="ignore"):
        i_allowed = allowed_current(fet, np.where(ok, startup.v_ds_at_peak, 1.0), np.where(t_eq > 0, t_eq, 1.0), t_amb)
        ratio = np.where(startup.i_at_peak > 0, i_allowed / startup.i_at_peak, np.inf)
    fig["pulse_t_equiv"] = np.where(ok, t_eq, np.nan)
    fig["pulse_p_peak"] = startup.p_fet_peak
    fig["soa_i_allowed"] = np.where(ok, i_allowed, np.nan)
    fig["soa_ratio"] = np.where(ok, ratio, np.nan)
    fig["soa_derating"] = np.full(n, float(derating_factor(fet, t_amb)))

    # short circuit
    fig["has_limit"] = has_limit(rail) and not startup_only
    fig["t_fault_sc"] = params.t_fault_sc
    if fig["has_limit"]:
        sc = short_circuit(rail, v_ds=params.v_sc, i_limit=params.i_sc, t_fault=params.t_fault_sc)
    else:
        nan = np.full(n, np.nan)
        sc = {k: nan for k in ("v_ds", "i", "p", "t_soa", "t_thermal", "t_allow", "margin")}
    for k, v in sc.items():
        fig["sc_" + k] = v

    # fault timer
    timer = rail.switch.timer
    fig["has_timer"] = timer is not None
    fig["t_fault_start"] = params.t_fault_start
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = np.where(startup.t_limit > 0, params.t_fault_start / startup.t_limit, np.inf)
    fig["startup_margin"] = np.where(ok, sm, np.nan) if timer is not None else np.full(n, np.nan)

    # retry
    fig["has_retry"] = bool(timer is not None and timer.after_fault == "retry" and fig["has_limit"])
    if fig["has_retry"]:
        r, tau = foster_arrays(fet.zth)
        rt = retry_figures(r, tau, p=sc["p"], t_on=params.t_fault_sc, t_off=timer.retry_off, t_ambient=t_amb)
    else:
        nan = np.full(n, np.nan)
        rt = {"duty": nan, "p_avg": nan, "tj_peak": nan, "tj_valley": nan}
    for k, v in rt.items():
        fig["retry_" + k] = v

    # steady conduction
    if startup_only:
        nan = np.full(n, np.nan)
        st = {"i": nan, "p_fet": nan, "tj": nan, "v_drop": nan, "stable": np.zeros(n, bool),
              "dc_ok": np.zeros(n, bool)}
    else:
        st = steady_state(rail, v_s=params.v_steady)
    for k, v in st.items():
        fig["steady_" + k] = v

    checks = evaluate_checks(rail, rules, fig)
    return fig, checks, startup


def limit_rows(rail: Rail, n: int) -> np.ndarray:
    """The rail's nominal current limit repeated n times (``NO_LIMIT`` without one)."""
    return np.full(n, rail.switch.i_limit if rail.switch.i_limit is not None else NO_LIMIT)
