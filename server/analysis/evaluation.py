"""Evaluation of rows of operating conditions: every figure and every check of a rail.

Provides
--------
RowParams
    Per-row operating conditions: a point of the tolerance box (the nominal point, a
    corner, a point of the worst-case search or a Monte Carlo sample).
evaluate_rows(rail, rules, params, *, startup=None, record=None, startup_only=False, max_steps)
    Start-up transient, equivalent-rectangle SOA ratio, short circuit, fault timer,
    retry and steady state for every row, and the graded checks.
startup_rows(rail, params, *, record=None, max_steps)
    The start-up transient of every row (one batch integration).

A row is one point (v_s, c, i_lim, t_fault) of the tolerance box and every figure of the
row is computed at that point: the start-up at supply v_s into load capacitance c with
current limit i_lim and the fault timer tripping after t_fault of regulation; the output
short circuit at V_ds = v_s (DESIGN.md section 4: the supply across the FET, the drop in
the source and path resistance not subtracted, conservatively) with the current limit
i_lim, cleared after t_fault, starting from the steady junction temperature at v_s; the
onset of that short and the hard turn-off that ends it (`faults`); the retry pulse train
of that short circuit; and steady conduction at v_s. The nominal row is the nominal point; the worst cases come from the
corners and the worst-case search (`worstcase`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .checks import evaluate_checks
from .circuit import NO_LIMIT, circuit_rows
from .document import Rail
from .faults import onset, onset_applies, start_temperature, turn_off, turn_off_applies
from .retry import retry_figures
from .shortcircuit import has_limit, short_circuit
from .soa import allowed_current, equivalent_rectangle
from .startup import MAX_STEPS, STATUS_OK, StartupFigures, simulate_startup
from .steady import steady_state
from .thermal import foster_arrays

__all__ = ["RowParams", "evaluate_rows", "startup_rows", "nominal_point", "PARAMS"]

PARAMS = ("v_s", "c", "i_lim", "t_fault", "rds")


@dataclass
class RowParams:
    """Points of the tolerance box, one per row (arrays of shape (n,)).

    ``v_s`` supply (V), ``c`` load capacitance (F), ``i_lim`` current limit (A,
    ``NO_LIMIT`` without one), ``t_fault`` fault-timer trip time (s, ``inf`` without a
    timer), ``rds`` Rds(on) at 25 degC of the FET (ohm: the part's typical ``rds_on``, or
    between it and ``rds_on_max`` where the part gives a maximum; 0 or left out: the
    typical). ``bank`` (shape (n, groups), with a capacitor bank): each group's capacitance
    relative to its nominal (the corners and the Monte Carlo set them; None: nominal), scaled
    per row to add up to ``c`` (`circuit.bank_rows`).
    """

    v_s: np.ndarray
    c: np.ndarray
    i_lim: np.ndarray
    t_fault: np.ndarray
    rds: np.ndarray | None = None
    bank: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.rds is None:  # the part's typical Rds(on) (see `rds_rows`)
            self.rds = np.zeros(np.shape(self.v_s))

    @property
    def n(self) -> int:
        return self.v_s.shape[0]

    def take(self, rows) -> "RowParams":
        return RowParams(**{k: getattr(self, k)[rows] for k in PARAMS},
                         bank=None if self.bank is None else self.bank[rows])

    def copy(self) -> "RowParams":
        return RowParams(**{k: np.array(getattr(self, k), dtype=float, copy=True) for k in PARAMS},
                         bank=None if self.bank is None else self.bank.copy())

    def key(self) -> np.ndarray:
        """The rows as a (n, k) array of every parameter (to find the distinct rows)."""
        cols = np.stack([getattr(self, k) for k in PARAMS], axis=1)
        return cols if self.bank is None else np.concatenate([cols, self.bank], axis=1)

    @staticmethod
    def stack(parts: list["RowParams"]) -> "RowParams":
        banks = [p.bank for p in parts]
        bank = None
        if any(b is not None for b in banks):
            groups = next(b for b in banks if b is not None).shape[1]
            bank = np.concatenate([np.ones((p.n, groups)) if p.bank is None else p.bank for p in parts])
        return RowParams(**{k: np.concatenate([getattr(p, k) for p in parts]) for k in PARAMS}, bank=bank)


def nominal_point(rail: Rail, t_fault_nom: float) -> RowParams:
    """The nominal point: v_nom, c_nom, the nominal current limit and trip time."""
    sw = rail.switch
    a = lambda x: np.array([float(x)])  # noqa: E731
    return RowParams(v_s=a(rail.supply.v_nom), c=a(rail.load.c_nom),
                     i_lim=a(sw.i_limit if sw.i_limit is not None else NO_LIMIT), t_fault=a(t_fault_nom),
                     rds=a(rail.fet.rds_on))


def rds_rows(rail: Rail, params: RowParams) -> np.ndarray:
    """The FET's Rds(on) at 25 degC of every row, ohm (a row without one: the part's typical)."""
    return np.where(params.rds > 0.0, params.rds, rail.fet.rds_on)


def linear_share(rail: Rail, rules: dict) -> float:
    """The share of the switch current the worst FET carries in linear mode (start-up regulation,
    short circuit): 1 for one FET; for parallel FETs the team rule ``linear_share`` (default 1:
    one FET carries it all, threshold spread; common practice, no source), never below the
    average 1 / count."""
    count = rail.fet.count
    if count == 1:
        return 1.0
    return max(float(rules["linear_share"]), 1.0 / count)


def startup_rows(rail: Rail, params: RowParams, *, record: int | None = None,
                 max_steps: int = MAX_STEPS, share: float = 1.0) -> StartupFigures:
    """Start-up transient of every row (one batch integration); ``share``: `linear_share`."""
    cz = circuit_rows(rail, v_s=params.v_s, c=params.c, i_limit=params.i_lim, t_fault=params.t_fault,
                      rds=rds_rows(rail, params), share=share, bank=params.bank)
    return simulate_startup(cz, record=record, max_steps=max_steps)


def _attempts(st: StartupFigures, t_amb: float) -> dict:
    """The start-up pulse of every attempt, arrays (n, k)."""
    keys = ("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start")
    if all(hasattr(st, k) for k in keys):
        return {k: np.atleast_2d(np.asarray(getattr(st, k), dtype=float)) for k in keys}
    # one attempt: the run's own figures
    col = lambda x: np.asarray(x, dtype=float)[:, None]  # noqa: E731
    return {"pulse_e": col(st.e_fet), "pulse_p_peak": col(st.p_fet_peak), "pulse_v_ds": col(st.v_ds_at_peak),
            "pulse_i": col(st.i_at_peak), "pulse_tj_start": np.full((st.status.shape[0], 1), float(t_amb))}


def _soa_pulses(rail: Rail, st: StartupFigures, share: float = 1.0) -> dict:
    """Each attempt's pulse as its equivalent rectangle (its energy at the power of the peak's
    operating point, V_DS I) against the SOA derated from the attempt's starting junction
    temperature; the worst attempt per row. With parallel FETs the pulse is the worst FET's:
    ``share`` of the current, energy and power at the same V_DS (so the same rectangle length)."""
    n = st.status.shape[0]
    att = _attempts(st, rail.t_ambient)
    e, p, v, i, tj0 = (att[k] for k in ("pulse_e", "pulse_p_peak", "pulse_v_ds", "pulse_i", "pulse_tj_start"))
    if share != 1.0:
        e, p, i = e * share, p * share, i * share
    k = e.shape[1]
    if k == 0:  # no row made an attempt (every start stalled before it began)
        nan = np.full(n, np.nan)
        return {"soa_ratio": nan, "soa_i_allowed": nan, "soa_attempt": np.zeros(n, int), "pulse_t_equiv": nan,
                "pulse_p_peak": nan, "pulse_e": nan, "pulse_v_ds": nan, "pulse_i": nan, "pulse_tj_start": nan}
    valid = np.isfinite(e) & np.isfinite(p) & (p > 0) & np.isfinite(v) & (v > 0) & (i > 0)
    # the rectangle stands at the peak's operating point (V_DS, I): its power V I is the peak
    # power (under a power limit, the plateau's, not a discrete overshoot at one end of it)
    with np.errstate(invalid="ignore"):
        p = np.where(valid, v * i, p)
    t_eq = equivalent_rectangle(np.nan_to_num(e), np.nan_to_num(p))
    with np.errstate(invalid="ignore", divide="ignore"):
        allowed = allowed_current(rail.fet, np.where(valid, v, 1.0).ravel(), np.where(valid, t_eq, 1.0).ravel(),
                                  np.where(valid, tj0, rail.t_ambient).ravel()).reshape(n, k)
        ratio = np.where(valid, allowed / np.where(valid, i, 1.0), np.inf)
    worst = np.argmin(ratio, axis=1)
    rows = np.arange(n)
    any_pulse = valid.any(axis=1)

    def pick(x):
        return np.where(any_pulse, x[rows, worst], np.nan)

    return {"soa_ratio": pick(ratio), "soa_i_allowed": pick(allowed), "soa_attempt": worst,
            "pulse_t_equiv": pick(t_eq), "pulse_p_peak": pick(p), "pulse_e": pick(e), "pulse_v_ds": pick(v),
            "pulse_i": pick(i), "pulse_tj_start": pick(tj0)}


_ONSET_KEYS = ("i_peak", "t_act", "acted", "fired", "i_off", "v_in_off", "e", "i_final", "rds", "soa_allowed",
               "soa_ratio")
_TURN_OFF_KEYS = ("v_peak", "by", "e_clamp", "e_fet", "e_half", "v_c", "i")


def _fault_edges(rail: Rail, params: RowParams, st: dict, t_start: np.ndarray, sc: dict, has_limit: bool,
                 startup_only: bool) -> dict:
    """The onset of a short during operation and the hard turn-off that ends it, per row
    (`faults`): ``onset_*`` and ``off_*`` figures, NaN where the rail does not describe them.

    The turn-off current is the path current when the fast trip acts, else (a fault timer
    and a current limit) the regulated short-circuit current when the timer trips; a row
    with neither has no hard turn-off."""
    n = params.n
    nan = np.full(n, np.nan)
    out = {"has_onset": onset_applies(rail) and not startup_only,
           "has_turn_off": turn_off_applies(rail) and not startup_only}
    if out["has_onset"]:
        on = onset(rail, v_s=params.v_s, i_lim=params.i_lim, i_load=st["i"], tj_start=t_start)
    else:
        on = {k: nan for k in _ONSET_KEYS}
        on["fired"] = np.zeros(n, bool)
        on["acted"] = np.zeros(n, int)
    out.update({"onset_" + k: v for k, v in on.items()})
    if out["has_turn_off"]:
        timed = has_limit and rail.switch.timer is not None
        i_off = np.where(on["fired"], on["i_off"], sc["i"] if timed else np.nan)
        off = turn_off(rail, v_s=params.v_s, i_off=i_off, v_in0=np.where(on["fired"], on["v_in_off"], np.nan))
        off["i"] = i_off
    else:
        off = {k: nan for k in _TURN_OFF_KEYS}
        off["by"] = np.zeros(n, int)
    out.update({"off_" + k: v for k, v in off.items()})
    return out


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
    startup_only : bool
        Skip the short circuit, retry and steady state (their checks become n/a): what
        the capacitance headroom search needs.
    max_steps : int
        Step cap of the transient per row.

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
    share = linear_share(rail, rules)
    if startup is None:
        startup = startup_rows(rail, params, record=record, max_steps=max_steps, share=share)
    t_amb = rail.t_ambient
    rds = rds_rows(rail, params)
    cz = circuit_rows(rail, v_s=params.v_s, c=params.c, i_limit=params.i_lim, t_fault=params.t_fault, rds=rds,
                      bank=params.bank)
    fig: dict = {"n": n, "status": startup.status, "v_s": params.v_s, "c": params.c, "i_lim": params.i_lim,
                 "t_fault": params.t_fault, "v_target": cz.final_output(t_amb)[0]}
    for name in ("i_peak", "t_i_peak", "t_limit", "t_settle", "e_fet", "p_fet_peak", "tj_peak", "v_supply_min",
                 "v_ds_at_peak", "i_at_peak", "v_final", "v_stall", "v_end", "t_end", "steps"):
        fig[name] = getattr(startup, name)
    fig["attempts"] = getattr(startup, "attempts", np.ones(n, int))
    fig["t_trip"] = getattr(startup, "t_trip", np.full(n, np.nan))
    fig["t_below_uvlo"] = getattr(startup, "t_below_uvlo", np.zeros(n))
    fig["dip_unbounded"] = np.asarray(getattr(startup, "dip_unbounded", np.zeros(n, bool)), dtype=bool)
    fig.update(_soa_pulses(rail, startup, share))
    # the Rds(on) of the row, the worst FET's share of the pulse, and where the junction left the part's data
    fig["rds"] = rds
    fig["linear_share"] = share
    fig["fet_i_peak"] = fig["i_peak"] * share if share != 1.0 else fig["i_peak"]
    rds_t = cz.rds_t
    with np.errstate(invalid="ignore"):
        fig["tj_beyond"] = rds_t.beyond(fig["tj_peak"]) | bool(rds_t.beyond(t_amb))

    # steady conduction: the operating point a short during operation starts from
    nan = np.full(n, np.nan)
    if startup_only:
        st = {"i": nan, "i_fet": nan, "p_fet": nan, "tj": nan, "v_drop": nan, "stable": np.zeros(n, bool),
              "dc_ok": np.zeros(n, bool), "beyond": np.zeros(n, bool)}
    else:
        st = steady_state(rail, v_s=params.v_s, rds=rds)
    for k, v in st.items():
        fig["steady_" + k] = v
    t_start = start_temperature(rail, st) if not startup_only else np.full(n, float(t_amb))

    # short circuit at the row's supply, limit and trip time
    fig["has_limit"] = has_limit(rail) and not startup_only
    if fig["has_limit"]:
        sc = short_circuit(rail, v_ds=params.v_s, i_limit=params.i_lim, t_fault=params.t_fault, t_start=t_start,
                           share=share)
    else:
        sc = {k: nan for k in ("v_ds", "i", "i_fet", "p", "t_soa", "t_thermal", "t_allow", "margin", "t_start")}
    for k, v in sc.items():
        fig["sc_" + k] = v

    # fault timer: the row's trip time against the regulation the start needs without it
    timer = rail.switch.timer
    fig["has_timer"] = timer is not None
    t_need = startup.t_limit
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = np.where(t_need > 0, params.t_fault / t_need, np.inf)
    fig["startup_margin"] = np.where(np.isfinite(t_need), sm, np.nan) if timer is not None else np.full(n, np.nan)

    fig.update(_fault_edges(rail, params, st, t_start, sc, fig["has_limit"], startup_only))

    # retry
    fig["has_retry"] = bool(timer is not None and timer.after_fault == "retry" and fig["has_limit"])
    if fig["has_retry"]:
        r, tau = foster_arrays(rail.fet.zth)
        pulses = None if timer.retries is None else 1 + timer.retries
        rt = retry_figures(r, tau, p=sc["p"], t_on=params.t_fault, t_off=timer.retry_off, t_ambient=t_start,
                           pulses=pulses)
    else:
        rt = {"duty": nan, "p_avg": nan, "cooldown": nan, "tj_peak": nan, "tj_valley": nan}
    for k, v in rt.items():
        fig["retry_" + k] = v

    fig["complete"] = startup.status == STATUS_OK
    checks = evaluate_checks(rail, rules, fig)
    return fig, checks, startup
