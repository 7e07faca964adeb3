"""Monte Carlo over the tolerances of a rail: yield, the spread of every margin, and a check
of the sign-off worst case.

Provides
--------
PARAMETERS, DISTRIBUTIONS, DEFAULT_DISTRIBUTION
    The toleranced parameters, the distributions a parameter may take, and the default.
distributions_for(distribution)
    The distribution of every parameter, from one word for all or a per-parameter dict.
sample_params(rail, n, *, seed, distribution)
    Reproducible random points of the tolerance box (`RowParams`) for n samples.
wilson_interval(k, n, z=1.959963984540054)
    Wilson score interval of a binomial proportion.
run_monte_carlo(rail, rules, n, *, seed=0, distribution="uniform", worst=None, progress=None, chunk=2500)
    Yield with its 95 % interval; per check the share failing and marginal, percentiles of
    its value and normalised margin, a histogram of the margin; and every sample worse than
    the sign-off worst case, flagged (never folded into the verdict).

Method
------
Each toleranced parameter is drawn independently, inside the tolerance box the corners
span (no sample leaves it): ``uniform`` over its tolerance band (the supply uniform on
[v_min, v_max]), or ``normal`` with the tolerance as 3 sigma, truncated at 3 sigma (the
supply: a two-piece normal around v_nom whose 3 sigma reach v_min and v_max; the FET's
Rds(on), where the part gives a maximum: uniform on [rds_on, rds_on_max], or a normal around
the typical with the maximum at 3 sigma folded at the typical, since the box starts there).
The default
is uniform for every parameter: with no distribution known, it weighs the band's edges
most (common practice, no source). Truncated draws are made by inverting the normal
distribution function on a uniform draw restricted to [Phi(-3), Phi(3)] (the inverse
transform method, L. Devroye, "Non-Uniform Random Variate Generation", 1986, section
II.2). NumPy's ``Generator`` (PCG64) seeded with ``seed`` makes a run reproducible; all
samples are drawn before the first chunk, so the chunk size does not change the result.
Yield: the share of samples whose every check passes (``yield``) and whose no check fails
(``yield_no_fail``), each with the Wilson score interval (E. B. Wilson, "Probable
inference, the law of succession, and statistical inference", J. Am. Stat. Assoc. 22
(1927) 209-212). Percentiles by linear interpolation (``numpy.percentile``, Hyndman and
Fan definition 7). Margins are those of `checks.normalised_margin` (1.0: the team's
limit).

A sample is flagged as worse than the sign-off worst case when its verdict is more severe
than the worst case's, or its margin lies more than ``FLAG_TOLERANCE`` (relative) below the
worst case's margin: the tolerance covers the integration error of two separate runs.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr, ndtri

from .bank import group_total, sample_multipliers
from .checks import CHECKS, FAIL, MARGINAL, NA, PASS, SEVERITY
from .circuit import NO_LIMIT
from .corners import point_words
from .document import Rail
from .evaluation import RowParams, evaluate_rows

__all__ = ["PARAMETERS", "DISTRIBUTIONS", "DEFAULT_DISTRIBUTION", "FLAG_TOLERANCE", "distributions_for",
           "sample_params", "wilson_interval", "run_monte_carlo"]

PARAMETERS = ("v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip")
# drawn only where the part gives a maximum Rds(on) (and listed in a result only then)
SPREAD_PARAMETERS = ("rds_on",)
DISTRIBUTIONS = ("uniform", "normal")
DEFAULT_DISTRIBUTION = "uniform"
FLAG_TOLERANCE = 2e-3
HISTOGRAM_BINS = 40
_Z95 = 1.959963984540054
_PERCENTILES = (1, 5, 50, 95, 99)
_P3 = float(ndtr(-3.0))


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


def distributions_for(distribution: str | dict | None) -> dict[str, str]:
    """The distribution of every toleranced parameter.

    Parameters
    ----------
    distribution : str, dict or None
        "uniform" or "normal" for every parameter, or ``{parameter: distribution}`` for
        some (the others take `DEFAULT_DISTRIBUTION`).

    Returns
    -------
    dict
        ``{parameter: "uniform" | "normal"}`` for every name of `PARAMETERS`, and for a
        name of `SPREAD_PARAMETERS` (``rds_on``) only where it is given or off the default
        (so that the options of a run without it read as before).
    """
    if distribution is None:
        distribution = {}
    if isinstance(distribution, str):
        if distribution not in DISTRIBUTIONS:
            raise ValueError("distribution: must be uniform or normal")
        out = {p: distribution for p in PARAMETERS}
        if distribution != DEFAULT_DISTRIBUTION:  # the spread parameters are named only off their default
            out.update({p: distribution for p in SPREAD_PARAMETERS})
        return out
    if not isinstance(distribution, dict):
        raise ValueError("distribution: a word or a dict of parameter -> word")
    out = {p: DEFAULT_DISTRIBUTION for p in PARAMETERS}
    for key, value in distribution.items():
        if key not in PARAMETERS + SPREAD_PARAMETERS:
            raise ValueError(f"distribution: unknown parameter {key!r} (one of {', '.join(PARAMETERS)})")
        if value not in DISTRIBUTIONS:
            raise ValueError(f"distribution.{key}: must be uniform or normal")
        out[key] = value
    return out


def _draw(rng, n: int, kind: str) -> np.ndarray:
    """Draws in units of the tolerance, inside [-1, 1]: uniform, or normal with sigma 1/3
    truncated at 3 sigma (inverse transform on a restricted uniform draw)."""
    u = rng.uniform(0.0, 1.0, n)
    if kind == "uniform":
        return 2.0 * u - 1.0
    return np.clip(ndtri(_P3 + u * (1.0 - 2.0 * _P3)) / 3.0, -1.0, 1.0)


def sample_params(rail: Rail, n: int, *, seed: int, distribution: str | dict | None = None
                  ) -> tuple[RowParams, dict]:
    """Random points of the tolerance box for n samples.

    Parameters
    ----------
    rail : Rail
    n : int
    seed : int
    distribution : str or dict, optional
        See `distributions_for`.

    Returns
    -------
    params : RowParams
    draws : dict of ndarray
        The sampled parameter values (``v_s``, ``c``, ``i_limit``, ``timer_c``,
        ``i_charge``, ``v_trip``) for inspection.
    """
    kinds = distributions_for(distribution)
    rng = np.random.default_rng(seed)
    s = rail.supply
    z = _draw(rng, n, kinds["v_s"])
    if kinds["v_s"] == "uniform":
        v = s.v_min + (z + 1.0) * 0.5 * (s.v_max - s.v_min)
    else:
        v = s.v_nom + np.where(z >= 0, z * (s.v_max - s.v_nom), z * (s.v_nom - s.v_min))

    def scaled(nominal, tol, key):
        return nominal * (1.0 + tol * _draw(rng, n, kinds[key]))

    c = scaled(rail.load.c_nom, rail.load.c_tol, "c")
    sw = rail.switch
    il = scaled(sw.i_limit, sw.i_limit_tol, "i_limit") if sw.i_limit is not None else np.full(n, NO_LIMIT)
    t = sw.timer
    if t is not None:
        tc = scaled(t.c, t.c_tol, "timer_c")
        ich = scaled(t.i_charge, t.i_charge_tol, "i_charge")
        vt = scaled(t.v_trip, t.v_trip_tol, "v_trip")
        tf = tc * vt / ich
    else:
        tc = ich = vt = np.full(n, np.nan)
        tf = np.full(n, np.inf)
    fet = rail.fet
    if fet.rds_on_max is not None and fet.rds_on_max > fet.rds_on:
        # drawn last, so the other parameters' draws stay those of a part without a maximum
        kind = kinds.get("rds_on", DEFAULT_DISTRIBUTION)
        zr = _draw(rng, n, kind)
        if kind == "uniform":  # uniform on [typical, maximum]
            rds = fet.rds_on + (zr + 1.0) * 0.5 * (fet.rds_on_max - fet.rds_on)
        else:  # normal around the typical with the maximum at 3 sigma, folded at the typical
            rds = fet.rds_on + np.abs(zr) * (fet.rds_on_max - fet.rds_on)
    else:
        rds = np.full(n, fet.rds_on)
    bank = None
    if rail.load.bank is not None:
        # drawn last: every group its own tolerance draw (and a uniform draw in its derating range)
        groups = rail.load.bank
        bank = sample_multipliers(lambda g: (_draw(rng, n, kinds["c"]), rng.uniform(0.0, 1.0, n)), groups)
        c = bank @ np.array([group_total(g, rail.t_ambient) for g in groups])
    params = RowParams(v_s=v, c=c, i_lim=il, t_fault=tf, rds=rds, bank=bank)
    draws = {"v_s": v, "c": c, "i_limit": il, "timer_c": tc, "i_charge": ich, "v_trip": vt, "rds_on": rds}
    return params, draws


def _percentiles(x: np.ndarray) -> dict | None:
    x = x[np.isfinite(x)]
    if x.size == 0:
        return None
    out = {f"p{p:02d}": float(v) for p, v in zip(_PERCENTILES, np.percentile(x, _PERCENTILES))}
    out.update(min=float(x.min()), max=float(x.max()))
    return out


def _histogram(margin: np.ndarray, edge: float | None) -> dict | None:
    """Histogram of the finite margins, over a range that shows the team limit (1.0) and
    the physical edge when the samples come near them."""
    m = margin[np.isfinite(margin)]
    if m.size == 0:
        return None
    lo, hi = float(m.min()), float(m.max())
    marks = [1.0] + ([edge] if edge is not None else [])
    for mark in marks:
        if lo <= 3.0 * mark and mark < lo:
            lo = mark
        if hi < mark <= 3.0 * hi:
            hi = mark
    pad = 0.02 * (hi - lo) if hi > lo else max(abs(lo) * 0.01, 1e-9)
    counts, edges = np.histogram(m, bins=HISTOGRAM_BINS, range=(lo - pad, hi + pad))
    return {"edges": edges.tolist(), "counts": counts.tolist(), "total": int(m.size)}


def run_monte_carlo(rail: Rail, rules: dict, n: int, *, seed: int = 0, distribution: str | dict | None = None,
                    worst: list[dict] | None = None, progress=None, chunk: int = 2500) -> dict:
    """Monte Carlo yield, margin statistics and a check of the worst case.

    Parameters
    ----------
    rail : Rail
    rules : dict
    n : int
        Number of samples (> 0).
    seed : int
    distribution : str or dict, optional
        See `distributions_for` (default uniform for every parameter).
    worst : list of dict, optional
        The check records of the sign-off worst case (``id``, ``verdict``, ``margin``):
        samples worse than it are flagged.
    progress : callable, optional
        Called with the fraction done after every chunk; an exception propagates.
    chunk : int
        Samples per batch integration.

    Returns
    -------
    dict
        ``n``, ``seed``, ``distributions`` (per parameter), ``yield``, ``yield_ci95``,
        ``yield_no_fail``, ``yield_no_fail_ci95``, ``checks`` (per check: ``applies``
        (samples where it applies), ``fail_share``, ``marginal_share``, ``value`` and
        ``margin`` percentiles, ``histogram`` of the margin, ``margin_edge``,
        ``worst_case_margin``, ``beaten``), ``flags`` (samples worse than the worst case)
        and ``flag_tolerance``.
    """
    kinds = distributions_for(distribution)
    params, _ = sample_params(rail, n, seed=seed, distribution=kinds)
    values = {c.id: np.empty(n) for c in CHECKS}
    margins = {c.id: np.empty(n) for c in CHECKS}
    verdicts = {c.id: np.empty(n, np.int8) for c in CHECKS}
    starts = list(range(0, n, chunk))
    for j, a in enumerate(starts):
        b = min(a + chunk, n)
        _, checks, _ = evaluate_rows(rail, rules, params.take(slice(a, b)))
        for cid, ch in checks.items():
            values[cid][a:b] = ch["value"]
            margins[cid][a:b] = ch["margin"]
            verdicts[cid][a:b] = ch["verdict"]
        if progress is not None:
            progress((j + 1) / len(starts))
    every = np.max(np.stack([verdicts[c.id] for c in CHECKS]), axis=0)
    k_pass = int(np.count_nonzero(every < MARGINAL))
    k_nofail = int(np.count_nonzero(every < FAIL))
    records = {r["id"]: r for r in (worst or [])}
    per_check, flags = {}, []
    for spec in CHECKS:
        ver, mu = verdicts[spec.id], margins[spec.id]
        applies = int(np.count_nonzero(ver != NA))
        rec = records.get(spec.id)
        entry = {"title": spec.title, "unit": spec.unit, "sense": spec.sense, "applies": applies,
                 "fail_share": float(np.count_nonzero(ver == FAIL)) / n,
                 "marginal_share": float(np.count_nonzero(ver == MARGINAL)) / n,
                 "pass_share": float(np.count_nonzero(ver == PASS)) / n,
                 "value": _percentiles(values[spec.id][ver != NA]),
                 "margin": _percentiles(mu[ver != NA]),
                 "margin_edge": rec.get("margin_edge") if rec else None,
                 "worst_case_margin": rec.get("margin") if rec else None,
                 "histogram": None, "beaten": None}
        if applies and spec.sense != "flag":
            entry["histogram"] = _histogram(mu[ver != NA], entry["margin_edge"])
        if rec is not None and applies:
            beaten = _beaten(rail, spec.id, rec, ver, mu, params)
            if beaten is not None:
                entry["beaten"] = beaten
                flags.append({"check": spec.id, "title": spec.title, **beaten})
        per_check[spec.id] = entry
    return {
        "n": n,
        "seed": seed,
        "distributions": {k: v for k, v in kinds.items() if k in PARAMETERS}
                         | ({"rds_on": kinds.get("rds_on", DEFAULT_DISTRIBUTION)}
                            if rail.fet.rds_on_max is not None else {}),
        "yield": k_pass / n,
        "yield_ci95": list(wilson_interval(k_pass, n)),
        "yield_no_fail": k_nofail / n,
        "yield_no_fail_ci95": list(wilson_interval(k_nofail, n)),
        "checks": per_check,
        "flags": flags,
        "flag_tolerance": FLAG_TOLERANCE,
    }


def _beaten(rail: Rail, cid: str, rec: dict, ver: np.ndarray, mu: np.ndarray, params: RowParams) -> dict | None:
    """The sample furthest beyond the worst case of one check, or None when none is."""
    w_sev = SEVERITY[rec["verdict"]]
    sev = ver.astype(int)
    worse = sev > w_sev
    if rec["margin"] is not None:  # a graded check: also a smaller margin at the same verdict
        worse = worse | ((sev == w_sev) & (sev != NA) & (mu < rec["margin"] * (1.0 - FLAG_TOLERANCE)))
    if not worse.any():
        return None
    idx = np.nonzero(worse)[0]
    j = int(idx[np.lexsort((mu[idx], -sev[idx]))[0]])
    return {"samples": int(idx.size), "margin": float(mu[j]) if math.isfinite(mu[j]) else None,
            "verdict": {0: "n/a", 1: "pass", 2: "marginal", 3: "fail"}[int(sev[j])],
            "worst_case_margin": rec["margin"], "worst_case_verdict": rec["verdict"],
            "point": point_words(rail, float(params.v_s[j]), float(params.c[j]), float(params.i_lim[j]),
                                 float(params.t_fault[j]), rds=float(params.rds[j]))}
