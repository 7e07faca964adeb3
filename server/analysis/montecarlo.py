"""Monte Carlo over the tolerances of a rail: yield and the spread of every margin.

Provides
--------
sample_params(rail, n, *, seed, distribution)
    Reproducible random operating conditions (`RowParams`) for n samples.
wilson_interval(k, n, z=1.959963984540054)
    Wilson score interval of a binomial proportion.
run_monte_carlo(rail, rules, n, *, seed=0, distribution="uniform", progress=None, chunk=2500)
    Yield with its 95 % interval, percentiles and histograms of every check value.

Method
------
Each toleranced parameter is drawn independently: ``uniform`` within its tolerance band
(the supply uniform on [v_min, v_max]), or ``normal`` with the tolerance as 3 sigma (the
supply: a two-piece normal around v_nom whose 3 sigma reach v_min and v_max). Normal
draws are not truncated, so about 0.27 % of them lie outside the band, as a 3-sigma
tolerance means; values are kept above 0.1 % of nominal so that they stay physical.
NumPy's ``Generator`` (PCG64) seeded with ``seed`` makes a run reproducible; all samples
are drawn before the first chunk, so the chunk size does not change the result. The
samples are evaluated in chunks (one batch integration each) and ``progress`` is called
after every chunk. Yield: the fraction of samples whose every check passes (``yield``)
and whose no check fails (``yield_no_fail``), each with the Wilson score interval
(E. B. Wilson, "Probable inference, the law of succession, and statistical inference",
J. Am. Stat. Assoc. 22 (1927) 209-212). Percentiles by linear interpolation
(``numpy.percentile``, Hyndman and Fan definition 7); 40-bin histograms of the finite
values.
"""

from __future__ import annotations

import math

import numpy as np

from .checks import CHECKS, FAIL, MARGINAL
from .circuit import NO_LIMIT
from .document import Rail
from .errors import AnalysisError
from .evaluation import RowParams, evaluate_rows
from .startup import STATUS_NO_CONVERGENCE

__all__ = ["sample_params", "wilson_interval", "run_monte_carlo"]

_Z95 = 1.959963984540054
_PERCENTILES = (1, 5, 50, 95, 99)


def wilson_interval(k: int, n: int, z: float = _Z95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion k / n.

    Parameters
    ----------
    k : int
        Successes.
    n : int
        Trials (> 0).
    z : float
        Standard normal quantile (1.96 for 95 %).

    Returns
    -------
    (lo, hi) : tuple of float
        Bounds of the proportion, within [0, 1].
    """
    if n <= 0:
        raise ValueError("n: must be > 0")
    p = k / n
    z2 = z * z
    den = 1.0 + z2 / n
    centre = (p + z2 / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n)) / den
    return max(0.0, centre - half), min(1.0, centre + half)


def _spread(rng, n: int, distribution: str) -> np.ndarray:
    """Draws in units of the tolerance: uniform on [-1, 1] or normal with sigma 1/3."""
    if distribution == "uniform":
        return rng.uniform(-1.0, 1.0, n)
    return rng.standard_normal(n) / 3.0


def sample_params(rail: Rail, n: int, *, seed: int, distribution: str) -> tuple[RowParams, dict]:
    """Random operating conditions for n samples.

    Parameters
    ----------
    rail : Rail
    n : int
    seed : int
    distribution : {"uniform", "normal"}

    Returns
    -------
    params : RowParams
    draws : dict of ndarray
        The sampled parameter values (``v_s``, ``c``, ``i_limit``, ``timer_c``,
        ``i_charge``, ``v_trip``) for inspection.
    """
    if distribution not in ("uniform", "normal"):
        raise ValueError("distribution: must be uniform or normal")
    rng = np.random.default_rng(seed)
    s = rail.supply
    u = _spread(rng, n, distribution)
    if distribution == "uniform":
        v = s.v_min + (u + 1.0) * 0.5 * (s.v_max - s.v_min)
    else:
        v = s.v_nom + np.where(u >= 0, u * (s.v_max - s.v_nom), u * (s.v_nom - s.v_min))

    def scaled(nominal, tol):
        return nominal * np.maximum(1.0 + tol * _spread(rng, n, distribution), 1e-3)

    c = scaled(rail.load.c_nom, rail.load.c_tol)
    sw = rail.switch
    il = scaled(sw.i_limit, sw.i_limit_tol) if sw.i_limit is not None else np.full(n, NO_LIMIT)
    t = sw.timer
    if t is not None:
        tc = scaled(t.c, t.c_tol)
        ich = scaled(t.i_charge, t.i_charge_tol)
        vt = scaled(t.v_trip, t.v_trip_tol)
        tf = tc * vt / ich
    else:
        tc = ich = vt = np.full(n, np.nan)
        tf = np.full(n, np.inf)
    params = RowParams(v_s=v, c=c, i_lim=il, v_sc=v, i_sc=il, t_fault_start=tf, t_fault_sc=tf, v_steady=v)
    draws = {"v_s": v, "c": c, "i_limit": il, "timer_c": tc, "i_charge": ich, "v_trip": vt}
    return params, draws


def run_monte_carlo(rail: Rail, rules: dict, n: int, *, seed: int = 0, distribution: str = "uniform",
                    progress=None, chunk: int = 2500) -> dict:
    """Monte Carlo yield and margin statistics.

    Parameters
    ----------
    rail : Rail
    rules : dict
    n : int
        Number of samples (> 0).
    seed : int
    distribution : {"uniform", "normal"}
    progress : callable, optional
        Called with the fraction done after every chunk; an exception propagates.
    chunk : int
        Samples per batch integration.

    Returns
    -------
    dict
        ``n``, ``seed``, ``distribution``, ``yield``, ``yield_ci95``, ``yield_no_fail``,
        ``yield_no_fail_ci95``, ``fail_fraction`` (per check), ``margins`` (per check:
        p01 p05 p50 p95 p99 min max limit unit sense) and ``histograms`` (per check:
        edges, counts).
    """
    params, _ = sample_params(rail, n, seed=seed, distribution=distribution)
    values = {c.id: np.empty(n) for c in CHECKS}
    limits = {c.id: np.empty(n) for c in CHECKS}
    verdicts = {c.id: np.empty(n, np.int8) for c in CHECKS}
    starts = list(range(0, n, chunk))
    for j, a in enumerate(starts):
        b = min(a + chunk, n)
        fig, checks, st = evaluate_rows(rail, rules, params.take(slice(a, b)))
        bad = int(np.count_nonzero(st.status == STATUS_NO_CONVERGENCE))
        if bad:
            raise AnalysisError(f"start-up transient did not converge for {bad} Monte Carlo sample(s)")
        for cid, ch in checks.items():
            values[cid][a:b] = ch["value"]
            limits[cid][a:b] = ch["limit"]
            verdicts[cid][a:b] = ch["verdict"]
        if progress is not None:
            progress((j + 1) / len(starts))
    worst = np.max(np.stack([verdicts[c.id] for c in CHECKS]), axis=0)
    k_pass = int(np.count_nonzero(worst < MARGINAL))
    k_nofail = int(np.count_nonzero(worst < FAIL))
    margins, hists, fails = {}, {}, {}
    for spec in CHECKS:
        val = values[spec.id]
        fails[spec.id] = float(np.count_nonzero(verdicts[spec.id] == FAIL)) / n
        fin = val[np.isfinite(val)]
        if fin.size == 0:
            continue
        lim = limits[spec.id][np.isfinite(limits[spec.id])]
        pct = np.percentile(val[~np.isnan(val)], _PERCENTILES)
        entry = {f"p{p:02d}": float(x) for p, x in zip(_PERCENTILES, pct)}
        entry.update(min=float(np.nanmin(val)), max=float(np.nanmax(val)),
                     limit=float(np.median(lim)) if lim.size else None, unit=spec.unit, sense=spec.sense,
                     n_finite=int(fin.size))
        margins[spec.id] = entry
        lo, hi = float(fin.min()), float(fin.max())
        if hi <= lo:
            hi = lo + (abs(lo) * 1e-9 or 1e-12)
        counts, edges = np.histogram(fin, bins=40, range=(lo, hi))
        hists[spec.id] = {"edges": edges.tolist(), "counts": counts.tolist()}
    return {
        "n": n,
        "seed": seed,
        "distribution": distribution,
        "yield": k_pass / n,
        "yield_ci95": list(wilson_interval(k_pass, n)),
        "yield_no_fail": k_nofail / n,
        "yield_no_fail_ci95": list(wilson_interval(k_nofail, n)),
        "fail_fraction": fails,
        "margins": margins,
        "histograms": hists,
    }
