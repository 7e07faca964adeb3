"""Design headroom: how far the load capacitance and the current limit can go.

Provides
--------
capacitance_headroom(rail, rules, params, nominal)
    The largest load capacitance with which every capacitance-dependent check still
    passes, found on the same start-up model.
limit_headroom(rail, rules, params)
    The highest current limit whose short circuit the FET still survives with the team's
    fault_margin under the given timer.

Method
------
Capacitance: the smallest normalised margin over the checks that depend on C
(`checks.C_DEPENDENT`, each >= 1 exactly when it passes) is a continuous function of
log C. Its crossing of 1 is bracketed from c_nom (first trial at c_nom times the margin,
as if the margin fell as 1/C, then steps of x4, within c_nom / 4^10 .. c_nom * 4^10) and
then located by regula falsi on (log C, log margin), in its Illinois form and with a
bisection step whenever an iteration fails to shrink the bracket by 40 % (a safeguarded
bisection; G. Dahlquist and A. Bjorck, "Numerical Methods", section 6.2), until the bracket
is narrower than 0.5 % or a passing capacitance has a margin below 1.002. Each trial runs the full start-up transient. The lower
end of the final bracket, the largest capacitance known to pass, is reported.

Current limit: the short-circuit margin falls with the limit; it is evaluated on a grid
of 193 limits (log-spaced over six decades around the nominal limit, all at once), then
on a grid of 193 inside the bracketing interval; the largest passing grid value is
reported (resolution below 0.01 %).
"""

from __future__ import annotations

import math

import numpy as np

from .checks import C_DEPENDENT, CHECKS, PASS, normalised_margin
from .document import Rail
from .errors import AnalysisError
from .evaluation import RowParams, evaluate_rows
from .shortcircuit import has_limit, short_circuit
from .startup import STATUS_OK

__all__ = ["capacitance_headroom", "limit_headroom"]

_SPECS = {c.id: c for c in CHECKS}
_MAX_TRIALS = 40
_C_TOL = math.log(1.005)  # the search stops when the bracket on C is narrower than 0.5 %
_M_TOL = math.log(1.002)  # ... or when a passing capacitance has a margin below 1.002
_TRIAL_STEPS = 4000  # a trial capacitance whose start-up does not settle within this fails


def _c_margins(rail: Rail, rules: dict, params: RowParams, c: float) -> dict:
    """Normalised margin of every capacitance-dependent check at load capacitance c."""
    p = RowParams(**{k: getattr(params, k).copy() for k in params.__dataclass_fields__})
    p.c[:] = c
    fig, checks, st = evaluate_rows(rail, rules, p, startup_only=True, max_steps=_TRIAL_STEPS)
    if st.status[0] != STATUS_OK:  # stalls, or does not settle: does not pass
        return {cid: 0.0 for cid in C_DEPENDENT}
    return _margins(rail, checks, 0)


def _margins(rail: Rail, checks: dict, row: int) -> dict:
    out = {}
    for cid in C_DEPENDENT:
        ch = checks[cid]
        out[cid] = float(normalised_margin(_SPECS[cid], ch["value"][row], ch["limit"][row], rail.t_ambient))
    return out


def capacitance_headroom(rail: Rail, rules: dict, params: RowParams, nominal_checks: dict) -> dict:
    """Largest load capacitance that still passes the capacitance-dependent checks.

    Parameters
    ----------
    rail : Rail
    rules : dict
    params : RowParams
        The nominal row (one row); only its capacitance is varied.
    nominal_checks : dict
        Checks of the nominal row (saves one transient).

    Returns
    -------
    dict
        ``c_max`` (F or None), ``c_max_check`` (the check that ends the range),
        ``c_max_note`` (text or None), ``c_max_excluded`` (checks that fail whatever the
        capacitance and are left out), ``c_max_trials`` (transients run).

    Notes
    -----
    Checks that fail at c_nom are tried at c_nom / 64; those that still fail there do
    not depend on the capacitance in a way a smaller capacitor can fix (an upstream UVLO
    below an instant turn-on, say) and are left out of the search, and named.
    """
    c0 = float(params.c[0])
    out = {"c_max": None, "c_max_check": None, "c_max_note": None, "c_max_excluded": [], "c_max_trials": 0}
    if nominal_checks["startup_complete"]["verdict"][0] != PASS:
        out["c_max_note"] = "The start-up does not complete at c_nom; no capacitance headroom."
        return out
    m_nom = _margins(rail, nominal_checks, 0)
    use = [cid for cid, m in m_nom.items() if math.isfinite(m)]
    if not use:
        out["c_max_note"] = "No capacitance-dependent check applies to this rail."
        return out
    trials = 0

    def f(c):
        nonlocal trials
        trials += 1
        if trials > _MAX_TRIALS:
            raise AnalysisError(f"capacitance headroom search did not converge in {_MAX_TRIALS} transients")
        return _c_margins(rail, rules, params, c)

    c_tiny = c0 / 64.0
    if any(m_nom[cid] < 1.0 for cid in use):
        m_tiny = f(c_tiny)
        excluded = [cid for cid in use if m_nom[cid] < 1.0 and m_tiny[cid] < 1.0]
        use = [cid for cid in use if cid not in excluded]
        out["c_max_excluded"] = excluded
        if excluded:
            out["c_max_note"] = ("Left out, failing whatever the capacitance: " + ", ".join(excluded) + ".")
        if not use:
            out["c_max_trials"] = trials
            return out

    def worst(ms):
        cid = min(use, key=lambda k: ms[k])
        return ms[cid], cid

    # bracket the crossing of 1 by the worst margin; the first trial assumes margin ~ 1/C
    m0, w0 = worst(m_nom)
    lo = hi = None
    if m0 >= 1.0:
        lo = (c0, m0, w0)
        c = c0 * min(max(m0, 1.5), 4.0) if math.isfinite(m0) else c0 * 4.0
        for _ in range(12):
            m, w = worst(f(c))
            if m < 1.0:
                hi = (c, m, w)
                break
            lo = (c, m, w)
            c *= 4.0
            if c > c0 * 4.0**10:
                break
        if hi is None:
            out.update(c_max_trials=trials,
                       c_max_note=((out["c_max_note"] or "") +
                                   f" Passes beyond {lo[0] / c0:.3g} x c_nom; no practical limit from the start-up.").strip())
            return out
    else:
        hi = (c0, m0, w0)
        c = c0 * max(m0, 0.25)
        for _ in range(12):
            m, w = worst(f(c))
            if m >= 1.0:
                lo = (c, m, w)
                break
            hi = (c, m, w)
            c /= 4.0
            if c < c_tiny:
                break
        if lo is None:
            out.update(c_max_trials=trials, c_max_check=hi[2],
                       c_max_note=f"Fails even at c_nom / {4**10:g}.")
            return out

    # regula falsi (Illinois) on g(x) = log m, x = log c; bisection when it stalls
    def gl(mv):
        return math.log(max(mv, 1e-300)) if math.isfinite(mv) else 50.0

    xa, ga = math.log(lo[0]), gl(lo[1])
    xb, gb = math.log(hi[0]), gl(hi[1])
    side = 0
    while xb - xa > _C_TOL and ga > _M_TOL:
        width = xb - xa
        x = xb - gb * (xb - xa) / (gb - ga) if ga > gb else 0.5 * (xa + xb)
        x = min(max(x, xa + 0.02 * width), xb - 0.02 * width)
        mv, w = worst(f(math.exp(x)))
        gx = gl(mv)
        if mv >= 1.0:
            xa, ga, lo = x, gx, (math.exp(x), mv, w)
            if side == -1:
                gb *= 0.5
            side = -1
        else:
            xb, gb, hi = x, gx, (math.exp(x), mv, w)
            if side == 1:
                ga *= 0.5
            side = 1
        if xb - xa > 0.6 * width and xb - xa > _C_TOL and ga > _M_TOL:  # slow: one bisection
            xm = 0.5 * (xa + xb)
            mv, w = worst(f(math.exp(xm)))
            if mv >= 1.0:
                xa, ga, lo = xm, gl(mv), (math.exp(xm), mv, w)
            else:
                xb, gb, hi = xm, gl(mv), (math.exp(xm), mv, w)
            side = 0
    out.update(c_max=lo[0], c_max_check=hi[2], c_max_trials=trials)
    return out


def limit_headroom(rail: Rail, rules: dict, *, v_sc: float, t_fault: float) -> dict:
    """Highest current limit whose short circuit passes the team's fault_margin.

    Parameters
    ----------
    rail : Rail
    rules : dict
    v_sc : float
        Voltage across the FET during the short circuit, V (v_max).
    t_fault : float
        Longest fault time, s (``inf`` without a timer).

    Returns
    -------
    dict
        ``i_limit_max`` (A, the nominal limit whose high tolerance just passes; None
        when there is no limit or no bound), ``i_limit_max_note``.
    """
    sw = rail.switch
    if not has_limit(rail):
        return {"i_limit_max": None, "i_limit_max_note": "The switch has no current limit."}
    up = 1.0 + sw.i_limit_tol
    need = rules["fault_margin"]

    def passes(i_nom):
        sc = short_circuit(rail, v_ds=np.full(i_nom.shape, v_sc), i_limit=i_nom * up,
                           t_fault=np.full(i_nom.shape, t_fault))
        return sc["margin"] >= need

    grid = sw.i_limit * np.logspace(-3, 3, 193)
    ok = passes(grid)
    if ok.all():
        return {"i_limit_max": None,
                "i_limit_max_note": "Every limit up to 1000 x the nominal passes (the power limit or the DC SOA bounds the fault)."}
    if not ok[0]:
        return {"i_limit_max": None,
                "i_limit_max_note": "Even 1/1000 of the nominal limit fails: the timer is too slow for this FET."}
    j = int(np.argmin(ok))  # first failing
    fine = np.geomspace(grid[j - 1], grid[j], 193)
    ok2 = passes(fine)
    k = int(np.argmin(ok2)) if not ok2.all() else len(fine)
    return {"i_limit_max": float(fine[max(k - 1, 0)]), "i_limit_max_note": None}
