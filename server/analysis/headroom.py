"""Design headroom: how far the load capacitance and the current limit can go.

Provides
--------
capacitance_headroom(rail, rules, base, owner, start_checks, nominal_fig=None)
    The largest nominal load capacitance with which every capacitance-dependent check
    still passes on the sign-off basis, found on the same start-up model.
limit_headroom(rail, rules, *, v_sc, t_fault)
    The highest current limit (or, where a power limit sets the short circuit, the highest
    power limit) whose short circuit the FET still survives with the team's fault_margin.
load_headroom(rail, *, t_fault)
    With a foldback current limit: the largest load (the load's nominal current, of the
    document's load model) whose start-up still completes at every start-hard corner.
C_TOL, M_TOL
    The stopping tolerances of the capacitance search (ln 1.005 in C, ln 1.002 in margin).

Basis
-----
The headroom is computed on the sign-off basis: each capacitance-dependent check is
evaluated at its own worst point of the tolerance box (from the corners and the
worst-case search, `worstcase`), with the load capacitance of that point scaled with the
nominal capacitance tried (the tolerance band moves with it); the current limit's short
circuit at v_max, the limit's high tolerance and the longest trip time. A check is assumed
to keep its worst point as the capacitance changes (a convention: the search is not
repeated per trial). With the nominal basis (no corners) the nominal point stands for all.

Method
------
Capacitance: the normalised margin m_k of every check that depends on C
(`checks.C_DEPENDENT`, each >= 1 exactly when it passes) is a continuous function of C,
and close to a simple one: where a limit holds the current the start-up stretches in time
in proportion to C and, the SOA and Zth curves being power laws piecewise, ln m_k is
nearly straight in ln C; where a ramp sets the time the current is C dv/dt plus the
load's, and 1 / m_k is nearly straight in C (`_first_slopes`). The search works on one
such line per check, in x = ln C, and steps to where the first of them falls to ln 1.001,
the middle of the stopping window below: a secant method per check (G. Dahlquist and A.
Bjorck, "Numerical Methods", section 6.2) whose lines pass through the two latest
transients; the first step, with only the nominal run known, takes the slopes the scaling
gives. Steps are kept inside the bracket once one exists (with a bisection whenever an
iteration shrinks neither the bracket by 40 % nor the margin error by 4: a safeguarded
secant), grow C at most x4 or shrink it at most /4 at a time, and stay within c_nom / 64
.. c_nom * 4^10. Each trial runs the full start-up transient, one row on the float back
end: with a handful of rows a NumPy call costs more than the arithmetic it does (a batch
of 16 candidate rows on the array back end costs about fifteen single-row transients), and
the secant needs 1 to 3 trials (tests/benchmarks/bench_analysis.py measures both).

Tolerance: the reported c_max is a capacitance whose transient passes every
capacitance-dependent check, and either a capacitance at most 0.5 % larger fails (the
bracket), or c_max's smallest normalised margin is below 1.002 (within 0.2 % of its
limit). The nominal run is the first point of the search; checks that fail whatever the
capacitance are left out and named (`capacitance_headroom`).

Current limit: the short circuit passes while t_allow >= fault_margin * t_fault_max, and
t_allow falls with the current, so the highest short-circuit current is the smaller of
the current the derated SOA curves allow for a pulse of that length (`soa.allowed_current`,
the inverse of `soa.soa_allowed_time`) and the current whose constant power heats the
Foster network to tj_max in that time, (tj_max - t_ambient) / (Zth(t) V_ds). Divided by
the limit's high tolerance it is the highest nominal limit; it is reported 1e-6 below that
and verified with the short-circuit figures themselves: the reported limit passes, 0.01 %
more fails. Should the check disagree (a curve set the inverse does not represent), a grid
of 193 limits over six decades and 193 more inside the bracket decides instead.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .checks import C_DEPENDENT
from .circuit import circuit_rows
from .corners import c_levels
from .document import Rail
from .evaluation import RowParams, evaluate_rows, linear_share
from .shortcircuit import has_limit, short_circuit
from .soa import allowed_current
from .startup import STATUS_OK, simulate_startup
from .thermal import foster_arrays, zth

__all__ = ["capacitance_headroom", "limit_headroom", "load_headroom", "basis_rows", "C_TOL", "M_TOL", "LOAD_TOL"]

LOAD_TOL = 0.005  # the load search ends at a bracket narrower than 0.5 %
_LOAD_TRIALS = 40

_MAX_TRIALS = 30
C_TOL = math.log(1.005)  # a bracket on C narrower than 0.5 % ends the search
M_TOL = math.log(1.002)  # ... and so does a passing capacitance with its margin below 1.002
_AIM = 0.5 * M_TOL  # the secant aims at a margin of 1.001, inside that window
_G_CAP = 50.0  # |ln m| beyond this (a check that cannot bind, or a start that fails) is clipped
_TRIAL_STEPS = 4000  # a trial capacitance whose start-up does not settle within this fails
_UP, _DOWN = math.log(4.0**10), math.log(64.0)  # the range searched around c_nom


def _log_margin(m: float) -> float:
    if not m > 0.0:
        return -_G_CAP
    if not math.isfinite(m):
        return _G_CAP
    return min(max(math.log(m), -_G_CAP), _G_CAP)


def basis_rows(params: RowParams, checks: dict, worst: dict[str, int]) -> tuple[RowParams, dict, dict]:
    """The rows a capacitance search reads each check at: the distinct worst rows of the
    checks (``worst``: check id -> row of ``params`` / ``checks``).

    Returns ``(base, owner, start)``: the rows, check id -> row of ``base``, and the checks
    of ``base`` as evaluated (the search's first point).
    """
    rows = sorted(set(worst.values()))
    idx = np.array(rows)
    owner = {cid: rows.index(row) for cid, row in worst.items()}
    start = {cid: {k: v[idx] for k, v in ch.items()} for cid, ch in checks.items()}
    return params.take(idx), owner, start


def _c_margins(rail: Rail, rules: dict, base: RowParams, owner: dict, scale: float) -> dict:
    """ln of the normalised margin of every capacitance-dependent check, each at its own row of
    ``base`` with the load capacitance scaled by ``scale``."""
    p = base.copy()
    p.c = p.c * scale
    fig, checks, st = evaluate_rows(rail, rules, p, startup_only=True, max_steps=_TRIAL_STEPS)
    out = {}
    for cid, row in owner.items():
        if st.status[row] != STATUS_OK:  # stalls, trips or does not settle: does not pass
            out[cid] = -_G_CAP
        else:
            out[cid] = _log_margin(float(checks[cid]["margin"][row]))
    return out


def _margins(checks: dict, owner: dict) -> dict:
    """ln margins of the checks of ``owner`` (check id -> row of ``checks``)."""
    return {cid: _log_margin(float(checks[cid]["margin"][row])) for cid, row in owner.items()}


def _first_slopes(rail: Rail, fig: dict | None, use: list) -> tuple[dict, dict]:
    """d ln m / d ln C of each check at c_nom, and the kind of line it lies on.

    Where a limit holds the current (current or power limit, a slew whose ramp current
    reaches i_limit, an instant hard start whose time scale is R C) the start-up stretches
    in time in proportion to C: the SOA and Zth margins follow their curves' log-log
    slopes at the equivalent pulse, the timer margin falls as 1 / C, the peak current
    stays; these lines are straight in (ln C, ln m), kind "log". Where a ramp sets the
    time (slew, a hard start over t_on) the current is C dv/dt plus the load's at a fixed
    time scale, so the SOA, Tj and peak-current margins go as 1 / current: straight in
    (C, 1 / m), kind "share", with slope -f at c_nom, f the capacitor's share of the
    current there; the timer margin stays. The supply dip is taken flat. These only place
    the first trial; the secant takes over from there, on the same kinds of line.
    """
    slopes = {cid: -1.0 for cid in use}
    kinds = {cid: "log" for cid in use}
    if fig is None:
        return slopes, kinds
    sw = rail.switch
    t_eq, v_pk = float(fig["pulse_t_equiv"][0]), float(fig["v_ds_at_peak"][0])
    i_pk, i_at = float(fig["i_peak"][0]), float(fig["i_at_peak"][0])
    limited = sw.mode in ("current_limit", "power_limit") or (sw.mode == "hard" and sw.t_on == 0.0)
    if sw.i_limit is not None and i_pk >= 0.999 * sw.i_limit:
        limited = True

    def share(i, v_out):
        cz = circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom])
        i_load = float(cz.load_current(np.array([max(v_out, 0.0)]))[0])
        return max(i - i_load, 0.0) / i if i > 0.0 else 0.0

    k = 1.1
    if limited:
        if t_eq > 0.0 and math.isfinite(t_eq):
            if "startup_soa" in slopes and v_pk > 0.0:
                ia = allowed_current(rail.fet, np.array([v_pk, v_pk]), np.array([t_eq, k * t_eq]), rail.t_ambient)
                if ia[0] > 0.0 and ia[1] > 0.0:
                    slopes["startup_soa"] = math.log(ia[1] / ia[0]) / math.log(k)
            if "startup_tj" in slopes:
                z = zth(rail.fet.zth, np.array([t_eq, k * t_eq]))
                slopes["startup_tj"] = -math.log(z[1] / z[0]) / math.log(k)
        cur = 0.0 if sw.mode != "hard" else -share(i_pk, 0.0)
    else:
        f = share(i_at, rail.supply.v_nom - v_pk)  # the capacitor's share at the peak power
        for cid in ("startup_soa", "startup_tj"):
            if cid in slopes:
                slopes[cid], kinds[cid] = -f, "share"
        if "timer_startup" in slopes:
            slopes["timer_startup"] = 0.0
        cur = -share(i_pk, float(fig["v_final"][0]))
    for cid in ("supply_current", "fet_pulse_current"):
        if cid in slopes:
            slopes[cid] = cur
            if not limited:
                kinds[cid] = "share"
    if "supply_dip" in slopes:
        slopes["supply_dip"] = 0.0
    return slopes, kinds


def _secant(kind: str, xa: float, ga: float, xb: float, gb: float) -> float:
    """d ln m / d ln C at b of the line of ``kind`` through (xa, ga) and (xb, gb)."""
    if kind == "share":  # 1 / m linear in C
        ya, yb = math.exp(-ga), math.exp(-gb)
        ca, cb = math.exp(xa), math.exp(xb)
        return -(yb - ya) / (cb - ca) * cb / yb
    return (gb - ga) / (xb - xa)


def _line(kind: str, xb: float, gb: float, slope: float, x: float) -> float:
    """ln m at x on the line of ``kind`` through (xb, gb) with d ln m / d ln C = slope there."""
    if kind == "share":
        y = math.exp(-gb) * (1.0 - slope * (math.exp(x - xb) - 1.0))
        return -math.log(y) if y > 0.0 else _G_CAP
    return gb + slope * (x - xb)


def _aim(x_b: float, g_b: dict, slopes: dict, kinds: dict) -> float:
    """x where the first falling line (through x_b, of each check's kind) reaches _AIM
    (inf where no line falls; -inf where one never rises to it at any C)."""
    best = math.inf
    for cid, s in slopes.items():
        if s < -1e-9:
            if kinds[cid] == "share":  # 1 / m = (1 / m_b) (1 - s (C / C_b - 1))
                ratio = 1.0 + (math.exp(g_b[cid] - _AIM) - 1.0) / -s
                best = min(best, x_b + math.log(ratio) if ratio > 0.0 else -math.inf)
            else:
                best = min(best, x_b + (_AIM - g_b[cid]) / s)
    return best


def _unfixable(g: dict, slopes: dict, kinds: dict, floor: float, x0: float) -> bool:
    """Whether a check failing at x0 would, on its line, still fail at x = floor."""
    return any(g[cid] < 0.0 and _line(kinds[cid], x0, g[cid], slopes[cid], floor) < 0.0 for cid in slopes)


def capacitance_headroom(rail: Rail, rules: dict, base: RowParams, owner: dict, start_checks: dict,
                         nominal_fig: dict | None = None) -> dict:
    """Largest nominal load capacitance that still passes the capacitance-dependent checks.

    Parameters
    ----------
    rail : Rail
    rules : dict
    base : RowParams
        The points the checks are evaluated at (each check's worst point, or the nominal
        point); their load capacitance is scaled with the capacitance tried.
    owner : dict
        Check id -> row of ``base`` where that check is read.
    start_checks : dict
        Checks evaluated at ``base`` as it is (the first point of the search).
    nominal_fig : dict, optional
        Figures of the nominal row; they set the first step (without them every margin
        is taken to fall as 1 / C).

    Returns
    -------
    dict
        ``c_max`` (F or None), ``check`` (the check that ends the range), ``status``
        ("found"; "unbounded", with ``beyond`` the factor over c_nom that still passes;
        "fails_everywhere": no capacitance down to c_nom / 64 passes; "not_settled": the
        search used its budget; "not_applicable": no capacitance-dependent check applies),
        ``excluded`` (checks that fail whatever the capacitance and are left out),
        ``trials`` (transients run).

    Notes
    -----
    Method and tolerance in the module docstring. A check that fails at c_nom and, by its
    line, cannot be made to pass by a smaller capacitor (an upstream UVLO below an
    instant turn-on, say, or a timer against a slew ramp that C does not change) is left
    out of the search and named, once the search confirms it: it still fails, and no
    better, at the smaller c_max found without it. Where the search finds no c_max below
    c_nom, or contradicts the line, the check is tried at c_nom / 64 instead, and left
    out only if it still fails there. The search also tries c_nom / 64 when it gets there
    without a passing capacitance.
    """
    c0 = rail.load.c_nom
    out = {"c_max": None, "check": None, "status": "not_applicable", "excluded": [], "trials": 0, "beyond": None}
    owner = {cid: row for cid, row in owner.items() if cid in C_DEPENDENT}
    g_nom = _margins(start_checks, owner)
    use = [cid for cid, g in g_nom.items() if g < _G_CAP]
    if not use:
        return out
    x0 = math.log(c0)
    first, kinds = _first_slopes(rail, nominal_fig, use)
    search = _CSearch(rail, rules, base, owner, x0, g_nom, first, kinds)
    try:
        use, excluded, res = _search_excluding(search, use, g_nom, first, kinds, x0)
    except _SearchExhausted:
        out.update(status="not_settled", trials=search.trials)
        return out
    out["excluded"] = excluded
    out["trials"] = search.trials
    if not use:
        out["status"] = "fails_everywhere"
        return out
    if res.get("status") == "unbounded":
        out.update(status="unbounded", beyond=res["beyond"])
    elif res.get("status") == "fails_everywhere":
        out.update(status="fails_everywhere", check=res.get("check"))
    else:
        out.update(status="found", c_max=math.exp(res["lo"]), check=res["check"])
    return out


def _search_excluding(search: "_CSearch", use: list, g_nom: dict, first: dict, kinds: dict, x0: float):
    """Run the search, leaving out the checks that fail whatever the capacitance.

    Returns the checks searched, those left out, and the search's answer.
    """
    x_tiny = x0 - _DOWN
    # checks that fail at c_nom and whose lines still fail at c_nom / 64
    suspects = [cid for cid in use if g_nom[cid] < 0.0 and _unfixable(g_nom, {cid: first[cid]}, kinds, x_tiny, x0)]
    if suspects and len(suspects) < len(use):
        rest = [cid for cid in use if cid not in suspects]
        res = search.run(rest)
        lo = res.get("lo")
        if lo is not None and lo < x0 and all(search.points[lo][cid] < 0.0 and
                                              search.points[lo][cid] <= g_nom[cid] + 1e-9 for cid in suspects):
            return rest, suspects, res
        search.restart()
    excluded = []
    if suspects:
        g_tiny = search.trial(x_tiny, keep=False)
        excluded = [cid for cid in use if g_nom[cid] < 0.0 and g_tiny[cid] < 0.0]
        use = [cid for cid in use if cid not in excluded]
    return use, excluded, (search.run(use) if use else {})


class _SearchExhausted(Exception):
    """The capacitance search used its whole budget of transients."""


class _CSearch:
    """The secant search of the module docstring over ln C, with every transient kept."""

    def __init__(self, rail: Rail, rules: dict, base: RowParams, owner: dict, x0: float, g_nom: dict, first: dict,
                 kinds: dict) -> None:
        self.rail, self.rules, self.base, self.owner = rail, rules, base, owner
        self.x0, self.g_nom, self.first, self.kinds = x0, g_nom, first, kinds
        self.points: dict[float, dict] = {x0: g_nom}
        self.order = [x0]  # the search's own points, latest last
        self.trials = 0
        self.tried_tiny = False

    def restart(self) -> None:
        """Search again (with other checks) from the nominal point; transients are kept."""
        self.order = [self.x0]

    def trial(self, x: float, keep: bool = True) -> dict:
        """ln margins at C = exp(x): one start-up transient (none if x was tried)."""
        if x not in self.points:
            self.trials += 1
            if self.trials > _MAX_TRIALS:
                raise _SearchExhausted
            self.points[x] = _c_margins(self.rail, self.rules, self.base, self.owner, math.exp(x - self.x0))
        if keep:
            self.order.append(x)
        if x == self.x0 - _DOWN:
            self.tried_tiny = True
        return self.points[x]

    def run(self, use: list) -> dict:
        """Largest ln C passing the checks ``use``: {"lo", "check"}, or {"status", "check"} when
        the search finds no bound ("unbounded", with "beyond": the factor over c_nom reached) or no
        passing capacitance ("fails_everywhere")."""
        points, order, x0 = self.points, self.order, self.x0
        x_tiny = x0 - _DOWN

        def worst(g: dict) -> tuple[float, str]:
            cid = min(use, key=lambda k: g[k])
            return g[cid], cid

        width_before = g_best_before = math.inf
        while True:
            lo = max((x for x, g in points.items() if worst(g)[0] >= 0.0), default=None)
            hi = min((x for x, g in points.items() if worst(g)[0] < 0.0 and (lo is None or x > lo)), default=None)
            if lo is not None and (worst(points[lo])[0] <= M_TOL or (hi is not None and hi - lo <= C_TOL)):
                end = points[hi] if hi is not None else points[lo]
                return {"lo": lo, "check": worst(end)[1]}
            # per-check secant through the two latest points; from the nominal run alone,
            # or when they lie more than x4 apart, the first slopes at the nominal point
            xb = order[-1]
            xa = order[-2] if len(order) > 1 else None
            kinds = self.kinds
            if xa is not None and xa != xb and abs(xa - xb) <= 1.001 * math.log(4.0):
                slopes = {cid: _secant(kinds[cid], xa, points[xa][cid], xb, points[xb][cid]) for cid in use}
                x = _aim(xb, points[xb], slopes, kinds)
            else:
                x = _aim(x0, self.g_nom, {cid: self.first[cid] for cid in use}, kinds)
            g_last = abs(worst(points[xb])[0])
            if lo is not None and hi is not None:
                width = hi - lo
                slow = width > 0.6 * width_before and g_last > 0.25 * g_best_before
                if not math.isfinite(x) or slow:
                    x = 0.5 * (lo + hi)  # safeguard: bisection
                edge = min(0.02 * width, 0.1 * C_TOL)
                x = min(max(x, lo + edge), hi - edge)
                width_before, g_best_before = width, g_last
            elif hi is None:  # passing so far: look upwards, at most x4 at a time
                x = min(x, lo + math.log(4.0)) if math.isfinite(x) and x > lo else lo + math.log(4.0)
                x = max(x, lo + 0.5 * C_TOL)
                if x > x0 + _UP:
                    return {"status": "unbounded", "beyond": math.exp(lo - x0), "check": None}
            else:  # failing so far: look downwards, at most /4 at a time, down to c_nom / 64
                x = max(x, hi - math.log(4.0)) if math.isfinite(x) and x < hi else hi - math.log(4.0)
                x = min(x, hi - 0.5 * C_TOL)
                if x < x_tiny:
                    if not self.tried_tiny:
                        x = x_tiny
                    else:
                        return {"status": "fails_everywhere", "check": worst(points[hi])[1]}
            self.trial(x)


def limit_headroom(rail: Rail, rules: dict, *, v_sc: float, t_fault: float, t_start: float | None = None) -> dict:
    """Highest current limit (or power limit) whose short circuit passes the team's fault_margin.

    Parameters
    ----------
    rail : Rail
    rules : dict
    v_sc : float
        Voltage across the FET during the short circuit, V (v_max).
    t_fault : float
        Longest fault time, s (``inf`` without a timer).
    t_start : float, optional
        Junction temperature the short starts from, degC (default: the ambient).

    Returns
    -------
    dict
        ``kind`` ("current": the nominal current limit whose high tolerance just passes,
        A; "power": the power limit, W, where the power limit sets the short circuit;
        None without a limit), ``value`` (None unless found), ``present`` (the rail's own
        limit), ``status`` ("found", "unbounded": every limit up to 1000 x the present
        passes or another limit bounds the fault, "fails_everywhere": even 1/1000 of it
        fails, "not_applicable").

    Notes
    -----
    Closed form and its verification in the module docstring.
    """
    sw = rail.switch
    if not has_limit(rail):
        return {"kind": None, "value": None, "present": None, "status": "not_applicable"}
    up = 1.0 + sw.i_limit_tol
    need = rules["fault_margin"]
    fet = rail.fet
    # the largest short-circuit current the FET survives for fault_margin * t_fault
    t_need = need * t_fault
    t0 = rail.t_ambient if t_start is None else t_start
    i_soa = float(allowed_current(fet, np.array([v_sc]), np.array([t_need]), t0)[0])
    r, _ = foster_arrays(fet.zth)
    z = float(r.sum()) if math.isinf(t_need) else float(zth(fet.zth, t_need))
    i_sc = min(i_soa, (fet.tj_max - t0) / (z * v_sc))
    share = linear_share(rail, rules)
    if share != 1.0:  # the worst of parallel FETs carries this share of the switch's current
        i_sc = i_sc / share
    if sw.mode == "power_limit" and sw.p_limit is not None and sw.p_limit / v_sc < sw.i_limit * up:
        return _power_headroom(rail, need, v_sc, t_fault, i_sc, t_start, share)

    def passes(i_nom):
        i_nom = np.asarray(i_nom, dtype=float)
        sc = short_circuit(replace(rail, switch=replace(sw, p_limit=None)), v_ds=np.full(i_nom.shape, v_sc),
                           i_limit=i_nom * up, t_fault=np.full(i_nom.shape, t_fault), t_start=t_start, share=share)
        return sc["margin"] >= need

    found = _highest_passing(passes, i_sc / up, sw.i_limit)
    return {"kind": "current", "present": sw.i_limit, **found}


def _power_headroom(rail: Rail, need: float, v_sc: float, t_fault: float, i_sc: float,
                    t_start: float | None = None, share: float = 1.0) -> dict:
    """The power limit's headroom where the power limit sets the short-circuit current."""
    sw = rail.switch
    i_hi = sw.i_limit * (1.0 + sw.i_limit_tol)

    def passes(p):
        p = np.atleast_1d(np.asarray(p, dtype=float))
        out = np.empty(p.shape, bool)
        for k, pk in enumerate(p):
            sc = short_circuit(replace(rail, switch=replace(sw, p_limit=float(pk))), v_ds=np.array([v_sc]),
                               i_limit=np.array([i_hi]), t_fault=np.array([t_fault]), t_start=t_start,
                               share=share)
            out[k] = sc["margin"][0] >= need
        return out

    if i_sc >= i_hi and passes([v_sc * i_hi])[0]:  # the current limit bounds the fault before the power does
        return {"kind": "power", "value": None, "present": sw.p_limit, "status": "unbounded"}
    found = _highest_passing(passes, v_sc * i_sc, sw.p_limit)
    return {"kind": "power", "present": sw.p_limit, **found}


def _highest_passing(passes, candidate: float, present: float) -> dict:
    """The highest passing limit: the closed-form ``candidate`` verified (it passes, 0.01 %
    more fails), else a grid of 193 limits over six decades around ``present`` and 193 more
    inside the bracket."""
    lo_b, hi_b = present * 1e-3, present * 1e3
    if candidate >= hi_b and passes([hi_b])[0]:
        return {"value": None, "status": "unbounded"}
    if candidate < lo_b and not passes([lo_b])[0]:
        return {"value": None, "status": "fails_everywhere"}
    if lo_b <= candidate < hi_b:
        got = float(candidate * (1.0 - 1e-6))
        ok = passes([got, candidate * (1.0 + 1e-4)])
        if ok[0] and not ok[1]:
            return {"value": got, "status": "found"}
    grid = present * np.logspace(-3, 3, 193)
    ok = passes(grid)
    if ok.all():
        return {"value": None, "status": "unbounded"}
    if not ok[0]:
        return {"value": None, "status": "fails_everywhere"}
    j = int(np.argmin(ok))  # first failing
    fine = np.geomspace(grid[j - 1], grid[j], 193)
    ok2 = passes(fine)
    k = int(np.argmin(ok2)) if not ok2.all() else len(fine)
    return {"value": float(fine[max(k - 1, 0)]), "status": "found"}


def _start_corners(rail: Rail, t_fault: float) -> RowParams:
    """The corners hardest for a start under a foldback limit: the limit at its low tolerance and
    the shortest trip time, at each supply (minimum, nominal, maximum; the foldback current
    depends on V_DS, so no one supply is the worst for every load) and each load capacitance
    extreme (the longer start against the timer, the shorter one)."""
    sup, load, sw = rail.supply, rail.load, rail.switch
    v = np.repeat([sup.v_min, sup.v_nom, sup.v_max], 2)
    levels = c_levels(rail)
    if len(levels) == 1:  # no spread: the same capacitance twice
        levels = levels * 2
    c = np.tile([c for c, _ in levels], 3)
    n = v.size
    bank = None
    if load.bank is not None and levels[0][1] is not None:
        bank = np.tile(np.array([m for _, m in levels]), (3, 1))
    return RowParams(v_s=v, c=c, i_lim=np.full(n, sw.i_limit * (1.0 - sw.i_limit_tol)), t_fault=np.full(n, t_fault),
                     bank=bank)


def load_headroom(rail: Rail, *, t_fault: float) -> dict:
    """The largest load whose start-up completes under the foldback limit at every start-hard corner.

    Parameters
    ----------
    rail : Rail
        With ``switch.foldback`` and a load model other than "none".
    t_fault : float
        The shortest trip time of the fault timer, s (``inf`` without a timer).

    Returns
    -------
    dict
        ``value`` (A: the load's nominal current, ``load.i_nom`` of its own model: a resistance
        v_nom / i_nom, a constant current, or a power v_nom i_nom; None unless found),
        ``present`` (the rail's own), ``status`` ("found"; "unbounded": 64 x the present load
        still starts; "fails_everywhere": not even 1/64 of it starts; "not_applicable": no
        foldback or no load), ``trials`` (start-up batches run).

    Method
    ------
    Whether a start completes is monotone in the load (more load leaves less of the limit for
    the capacitor, and the start stalls or takes longer against the timer), so the largest
    load is bracketed by doubling or halving from the present one and then bisected in ln
    i_nom until the bracket is narrower than LOAD_TOL; each trial runs the start-up transient
    of the six corners of `_start_corners` in one batch, and a corner that does not settle
    within the trial's step budget does not start. The reported load starts.
    """
    load, sw = rail.load, rail.switch
    if sw.foldback is None or load.model == "none" or load.i_nom <= 0.0:
        return {"value": None, "present": load.i_nom if load.model != "none" else None,
                "status": "not_applicable", "trials": 0}
    corners = _start_corners(rail, t_fault)
    trials = 0

    def starts(i_nom: float) -> bool:
        nonlocal trials
        trials += 1
        trial = replace(rail, load=replace(load, i_nom=float(i_nom)))
        cz = circuit_rows(trial, v_s=corners.v_s, c=corners.c, i_limit=corners.i_lim, t_fault=corners.t_fault,
                          bank=corners.bank)
        return bool(np.all(simulate_startup(cz, max_steps=_TRIAL_STEPS).status == STATUS_OK))

    present = load.i_nom
    lo = hi = None
    if starts(present):
        lo = present
        for _ in range(6):
            if not starts(lo * 2.0):
                hi = lo * 2.0
                break
            lo *= 2.0
        if hi is None:
            return {"value": None, "present": present, "status": "unbounded", "trials": trials}
    else:
        hi = present
        for _ in range(6):
            if starts(hi / 2.0):
                lo = hi / 2.0
                break
            hi /= 2.0
        if lo is None:
            return {"value": None, "present": present, "status": "fails_everywhere", "trials": trials}
    while hi / lo > 1.0 + LOAD_TOL and trials < _LOAD_TRIALS:
        mid = math.sqrt(lo * hi)
        if starts(mid):
            lo = mid
        else:
            hi = mid
    return {"value": float(lo), "present": present, "status": "found", "trials": trials}
