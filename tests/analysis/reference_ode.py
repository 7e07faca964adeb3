"""An independent reference for the start-up transient: scipy's solve_ivp on the same circuit.

The circuit is written here as an explicit ODE, independently of the engine: ideal supply,
series r and l (the series current a state where l > 0), the switch as the resistance R_sw(t)
of the log-linear turn-on ramp at Rds(on)(Tj), with a current limit min(i_free, i_limit)
where l = 0, the output capacitor with its ESR, a resistive load (or none), and the Foster
stages tau_i dT_i/dt + T_i = r_i P with P = v_ds i. Rds(on) follows the junction
temperature at every instant (no lag). Integrated by Radau (scipy.integrate.solve_ivp; E.
Hairer and G. Wanner, "Solving Ordinary Differential Equations II", section IV.8) at tight
tolerances, and the junction rise is read on a fine grid of the dense output.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp

from server.analysis.circuit import R_OFF

__all__ = ["reference_startup"]


def reference_startup(rail, *, v_s: float, c: float, t_end: float, grid: int = 400001, rtol: float = 1e-10) -> dict:
    """Integrate the start-up of ``rail`` at supply ``v_s`` (V) and output capacitance ``c``
    (F) up to ``t_end`` (s).

    Returns
    -------
    dict
        ``tj_peak`` (degC, the largest junction temperature on the grid and at the solver's
        points), ``e_fet`` (J), ``t`` and ``tj`` (the grid).
    """
    s, p, ld, fet = rail.supply, rail.path, rail.load, rail.fet
    r = s.r_source + p.r
    l = s.l_source + p.l
    esr = ld.esr
    if ld.model not in ("none", "resistive") or (ld.model == "resistive" and ld.v_on > 0):
        raise ValueError("the reference models no load or a resistive load without v_on")
    g = ld.i_nom / s.v_nom if ld.model == "resistive" else 0.0
    rth = np.array([a for a, _ in fet.zth])
    tau = np.array([b for _, b in fet.zth])
    k = rth.size
    t_on = rail.switch.t_on
    i_lim = rail.switch.i_limit if rail.switch.mode == "current_limit" else None
    if rail.switch.mode not in ("hard", "current_limit") or (l > 0 and i_lim is not None):
        raise ValueError("the reference models hard starts, and current-limited ones without inductance")
    ln_off = math.log(R_OFF)

    def r_sw(t, tj):
        r_on = fet.rds_on * max(1.0 + fet.rds_on_alpha * (tj - 25.0), 0.1)
        if t_on > 0.0 and t < t_on:
            return math.exp(ln_off + (t / t_on) * (math.log(r_on) - ln_off))
        return r_on

    den = 1.0 + g * esr

    def rhs(t, y):
        tj = rail.t_ambient + float(np.sum(y[2:2 + k]))
        rs = r_sw(t, tj)
        if l > 0.0:
            i = y[0]
            v_out = (y[1] + esr * i) / den
            di = (v_s - (r + rs) * i - v_out) / l
        else:
            i = (v_s - y[1] / den) / (r + rs + esr / den)
            if i_lim is not None:
                i = min(i, i_lim)
            v_out = (y[1] + esr * i) / den
            di = 0.0
        v_ds = v_s - r * i - v_out - (l * di if l > 0.0 else 0.0)
        pw = v_ds * i
        return np.concatenate(([di, (i - g * v_out) / c], (rth * pw - y[2:2 + k]) / tau, [pw]))

    with np.errstate(over="ignore"):  # Radau's finite-difference Jacobian probes far out
        sol = solve_ivp(rhs, (0.0, t_end), np.zeros(k + 3), method="Radau", rtol=rtol, atol=1e-13,
                        dense_output=True, max_step=t_end / 500)
    t = np.linspace(0.0, t_end, grid)
    tj = rail.t_ambient + np.sum(sol.sol(t)[2:2 + k], axis=0)
    tj_solver = rail.t_ambient + np.sum(sol.y[2:2 + k], axis=0)
    return {"tj_peak": float(max(tj.max(), tj_solver.max())), "e_fet": float(sol.y[k + 2, -1]), "t": t, "tj": tj}
