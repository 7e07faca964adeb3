"""The sign-off worst case: the tolerance corners and a deterministic search inside the box.

Provides
--------
find_worst_case(rail, rules, *, t_fault_range, progress=None) -> WorstCase
    Every corner, a fixed set of quasi-random points of the tolerance box and a compass
    search from each check's worst point, all evaluated with the full model; the worst
    row of every check and what found it.
evaluate_unique(rail, rules, params)
    `evaluation.evaluate_rows` on the distinct rows only (corners share many).
SEARCH_SEED, QUASI_RANDOM_POINTS, COMPASS_ROUNDS, COMPASS_STEP
    The fixed budget of the search (part of the engine: the verdict depends only on the
    revision and the engine version).

Method
------
Corners bound a check only where it is monotone in every toleranced parameter; the
start-up figures are not always (the SOA ratio of a ramped hard start, say, moves along a
piecewise chart as the pulse changes shape). The box is the product of the parameter
ranges: supply [v_min, v_max], load capacitance c_nom (1 -/+ c_tol), current limit
i_limit (1 -/+ i_limit_tol) and, when some corner's start trips the fault timer, the trip
time [t_fault_min, t_fault_max] (elsewhere the start-up does not depend on it, and the
timer check takes the shortest trip time), and where the part gives a maximum Rds(on) the
FET's Rds(on) at 25 degC [rds_on, rds_on_max]. Coordinates are scaled to [0, 1] per parameter.

1. The corners (`corners.corner_set`).
2. ``QUASI_RANDOM_POINTS`` points of a Halton sequence (bases 2, 3, 5, 7), shifted by a fixed
   offset drawn with seed ``SEARCH_SEED`` (a Cranley-Patterson rotation, so that no point
   repeats a corner's coordinates): a low-discrepancy cover of the box's interior (J. H.
   Halton, "On the efficiency of certain quasi-random sequences of points in evaluating
   multi-dimensional integrals", Numer. Math. 2 (1960) 84-90; R. Cranley and T. N. L.
   Patterson, SIAM J. Numer. Anal. 13 (1976) 904-914).
3. From each start-up check's ``WALKERS`` worst points so far, ``COMPASS_ROUNDS`` rounds of
   a compass search (T. G. Kolda, R. M. Lewis and V. Torczon, "Optimization by direct search: new
   perspectives on some classical and modern methods", SIAM Review 45 (2003) 385-482,
   section 3): the 2 d neighbours at distance ``COMPASS_STEP`` along each coordinate are
   evaluated, the worst one taken when it is worse, the step halved when none is. All the
   checks' neighbours of a round run as one batch.

A row is worse when its verdict is more severe, then when its normalised margin is
smaller (`checks.normalised_margin`). The checks computed in closed form (short circuit,
retry, steady state, V_DS derating) are monotone in each parameter and take their worst
corner. Every row of every stage counts: a check's worst case is its worst row of all.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .checks import CHECKS, NA, STARTUP_CHECKS
from .circuit import NO_LIMIT
from .corners import ALL_PARAMETERS, c_range, corner_params, corner_set, point_words
from .document import Rail
from .evaluation import RowParams, evaluate_rows
from .startup import STATUS_RETRIED, STATUS_RETRY_EXHAUSTED, STATUS_TRIPPED

__all__ = ["SEARCH_SEED", "QUASI_RANDOM_POINTS", "WALKERS", "halton_points", "COMPASS_ROUNDS", "COMPASS_STEP", "WorstCase", "find_worst_case",
           "evaluate_unique", "worse", "TIE"]

SEARCH_SEED = 20_261_202
QUASI_RANDOM_POINTS = 128
WALKERS = 3
COMPASS_ROUNDS = 6
COMPASS_STEP = 0.25
TIE = 1e-3  # a searched row must beat the worst corner by more than this (relative margin; the
# integration error of two separate runs) for the search to be named as finding it


@dataclass
class WorstCase:
    """Every evaluated row of the tolerance box and the worst row of every check.

    ``params``, ``fig`` and ``checks`` hold all rows (corners first, then the search);
    ``source`` says per row "corner" or "search"; ``names`` the row in words; ``worst``
    maps a check id to its worst row and ``found_by`` to what found it; ``corners`` is the
    list of `corners.corner_set`.
    """

    params: RowParams
    fig: dict
    checks: dict
    source: list[str]
    names: list[str]
    worst: dict[str, int]
    found_by: dict[str, str]
    corners: list[dict]
    n_search: int = 0
    budget: dict = field(default_factory=dict)
    rail: Rail | None = None

    def words(self, row: int, keys=ALL_PARAMETERS) -> str:
        """Row ``row`` in words, naming only the parameters of ``keys`` (`corners.point_words`)."""
        p = self.params
        corner = self.corners[row] if row < len(self.corners) else None
        parts = (corner["timer_c"], corner["i_charge"], corner["v_trip"]) if corner and corner["timer_c"] else None
        return point_words(self.rail, float(p.v_s[row]), float(p.c[row]), float(p.i_lim[row]),
                           float(p.t_fault[row]), parts, keys, rds=float(p.rds[row]))


_PRIMES = (2, 3, 5, 7, 11, 13)


def _radical_inverse(k: np.ndarray, base: int) -> np.ndarray:
    """The van der Corput radical inverse of the integers k in ``base`` (digits mirrored about the point)."""
    out = np.zeros(k.shape)
    f = 1.0 / base
    k = k.copy()
    while np.any(k > 0):
        out += f * (k % base)
        k //= base
        f /= base
    return out


def halton_points(d: int, n: int) -> np.ndarray:
    """n points of the d-dimensional Halton sequence in [0, 1)^d, rotated by a fixed offset
    (seeded with `SEARCH_SEED`) modulo 1."""
    k = np.arange(1, n + 1)
    u = np.stack([_radical_inverse(k, _PRIMES[j]) for j in range(d)], axis=1)
    shift = np.random.default_rng(SEARCH_SEED).uniform(0.0, 1.0, d)
    return np.mod(u + shift, 1.0)


def _expand(fig: dict, checks: dict, idx: np.ndarray, n_unique: int) -> tuple[dict, dict]:
    def take(v):
        if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == n_unique:
            return v[idx]
        return v

    fig2 = {k: take(v) for k, v in fig.items()}
    fig2["n"] = idx.shape[0]
    checks2 = {cid: {k: take(v) for k, v in ch.items()} for cid, ch in checks.items()}
    return fig2, checks2


def evaluate_unique(rail: Rail, rules: dict, params: RowParams) -> tuple[dict, dict]:
    """`evaluate_rows` on the distinct rows of ``params``, the figures spread back to every row."""
    key = params.key()
    uniq, first, idx = np.unique(key, axis=0, return_index=True, return_inverse=True)
    idx = idx.reshape(-1)
    fig, checks, _ = evaluate_rows(rail, rules, params.take(first))
    return _expand(fig, checks, idx, first.shape[0])


def worse(sev_a, m_a, sev_b, m_b) -> np.ndarray:
    """Whether row a is worse than row b: more severe, or as severe with a smaller margin."""
    return (sev_a > sev_b) | ((sev_a == sev_b) & (m_a < m_b * (1.0 - TIE)))


class _Box:
    """The tolerance box in coordinates scaled to [0, 1] per parameter with a spread."""

    def __init__(self, rail: Rail, t_fault_range: tuple[float, float], with_timer: bool) -> None:
        s, sw = rail.supply, rail.switch
        self.fixed = {"v_s": s.v_nom, "c": rail.load.c_nom,
                      "i_lim": sw.i_limit if sw.i_limit is not None else NO_LIMIT,
                      "t_fault": t_fault_range[0], "rds": rail.fet.rds_on}
        dims = []
        if s.v_max > s.v_min:
            dims.append(("v_s", s.v_min, s.v_max))
        if rail.load.c_tol > 0:
            dims.append(("c", *c_range(rail)))
        if sw.i_limit is not None and sw.i_limit_tol > 0:
            dims.append(("i_lim", sw.i_limit * (1 - sw.i_limit_tol), sw.i_limit * (1 + sw.i_limit_tol)))
        lo_t, hi_t = t_fault_range
        if with_timer and math.isfinite(hi_t) and hi_t > lo_t:
            dims.append(("t_fault", lo_t, hi_t))
        fet = rail.fet
        if fet.rds_on_max is not None and fet.rds_on_max > fet.rds_on:
            dims.append(("rds", fet.rds_on, fet.rds_on_max))
        self.dims = dims

    @property
    def d(self) -> int:
        return len(self.dims)

    def params(self, u: np.ndarray) -> RowParams:
        m = u.shape[0]
        cols = {k: np.full(m, float(v)) for k, v in self.fixed.items()}
        for j, (name, lo, hi) in enumerate(self.dims):
            cols[name] = lo + u[:, j] * (hi - lo)
        return RowParams(**cols)

    def coords(self, params: RowParams) -> np.ndarray:
        u = np.zeros((params.n, self.d))
        for j, (name, lo, hi) in enumerate(self.dims):
            u[:, j] = np.clip((getattr(params, name) - lo) / (hi - lo), 0.0, 1.0)
        return u


class _Pool:
    """Every evaluated row so far (parameters, figures, checks, source, coordinates)."""

    def __init__(self) -> None:
        self.parts: list[tuple[RowParams, dict, dict, str, np.ndarray]] = []

    def add(self, params: RowParams, fig: dict, checks: dict, source: str, u: np.ndarray) -> None:
        self.parts.append((params, fig, checks, source, u))

    def merged(self) -> tuple[RowParams, dict, dict, list[str], np.ndarray]:
        params = RowParams.stack([p[0] for p in self.parts])
        figs = [p[1] for p in self.parts]
        fig = {}
        for k, v in figs[0].items():
            if isinstance(v, np.ndarray) and v.ndim >= 1:
                fig[k] = np.concatenate([f[k] for f in figs])
            else:
                fig[k] = v
        fig["n"] = params.n
        checks = {cid: {k: np.concatenate([p[2][cid][k] for p in self.parts]) for k in self.parts[0][2][cid]}
                  for cid in self.parts[0][2]}
        source = [p[3] for p in self.parts for _ in range(p[0].n)]
        u = np.concatenate([p[4] for p in self.parts], axis=0)
        return params, fig, checks, source, u


def _worst_rows(checks: dict, source: list[str]) -> tuple[dict, dict]:
    """Each check's worst row (severity, then margin; a corner wins a tie) and its source."""
    is_corner = np.array([s == "corner" for s in source])
    worst, found = {}, {}
    for spec in CHECKS:
        ch = checks[spec.id]
        sev, mu = ch["verdict"].astype(int), ch["margin"]
        best = None
        for j in range(sev.shape[0]):
            if best is None or worse(sev[j], mu[j], sev[best], mu[best]):
                best = j
        # a corner as bad as the searched row (within the tie tolerance) names the case
        if not is_corner[best]:
            rival = [j for j in np.nonzero(is_corner)[0] if not worse(sev[best], mu[best], sev[j], mu[j])]
            if rival:
                best = min(rival, key=lambda j: (-sev[j], mu[j]))
        worst[spec.id] = int(best)
        found[spec.id] = "corner" if is_corner[best] else "search"
    return worst, found


def find_worst_case(rail: Rail, rules: dict, *, t_fault_range: tuple[float, float],
                    progress=None) -> WorstCase:
    """The worst case of every check over the corners and a search inside the tolerance box.

    Parameters
    ----------
    rail : Rail
    rules : dict
        Team rules.
    t_fault_range : (float, float)
        Shortest and longest fault-timer trip time, s (inf, inf without a timer).
    progress : callable, optional
        Called with the fraction done (0 .. 1); an exception it raises propagates.

    Returns
    -------
    WorstCase
    """
    report = progress or (lambda x: None)
    report(0.0)
    cs = corner_set(rail)
    cp = corner_params(cs)
    fig_c, checks_c = evaluate_unique(rail, rules, cp)
    tripping = np.isin(fig_c["status"], (STATUS_TRIPPED, STATUS_RETRIED, STATUS_RETRY_EXHAUSTED))
    box = _Box(rail, t_fault_range, with_timer=bool(tripping.any()))
    pool = _Pool()
    pool.add(cp, fig_c, checks_c, "corner", box.coords(cp))
    report(0.2)
    n_search = 0
    live = [cid for cid in STARTUP_CHECKS if np.any(checks_c[cid]["verdict"] != NA)]
    if box.d and live:
        u = halton_points(box.d, QUASI_RANDOM_POINTS)
        sp = box.params(u)
        fig_s, checks_s = evaluate_unique(rail, rules, sp)
        pool.add(sp, fig_s, checks_s, "search", u)
        n_search += sp.n
        report(0.35)
        n_search += _compass(rail, rules, box, pool, live, report)
    params, fig, checks, source, _ = pool.merged()
    worst, found = _worst_rows(checks, source)
    names = [c["name"] for c in cs] + [
        point_words(rail, params.v_s[j], params.c[j], params.i_lim[j], params.t_fault[j], rds=params.rds[j])
        for j in range(len(cs), params.n)]
    report(1.0)
    return WorstCase(params=params, fig=fig, checks=checks, source=source, names=names, worst=worst,
                     found_by=found, corners=cs, n_search=n_search, rail=rail,
                     budget={"quasi_random_points": QUASI_RANDOM_POINTS if box.d and live else 0, "walkers": WALKERS, "compass_rounds": COMPASS_ROUNDS,
                             "compass_step": COMPASS_STEP, "seed": SEARCH_SEED,
                             "parameters": [d[0] for d in box.dims]})


def _starts(checks: dict, coords: np.ndarray, cid: str) -> list[int]:
    """The rows a check's compass walkers start from: its ``WALKERS`` worst rows so far, at
    distinct points of the box."""
    sev, mu = checks[cid]["verdict"].astype(int), checks[cid]["margin"]
    out: list[int] = []
    for j in np.lexsort((mu, -sev)):
        if not any(np.allclose(coords[j], coords[k]) for k in out):
            out.append(int(j))
        if len(out) == WALKERS:
            break
    return out


def _compass(rail: Rail, rules: dict, box: _Box, pool: _Pool, live: list[str], report) -> int:
    """Rounds of compass search from each live check's worst rows; returns the rows evaluated.

    Every walker of every check steps in the same batch (one integration per round: a batch's
    cost follows its number of steps far more than its number of rows).
    """
    _, _, checks, source, coords = pool.merged()
    walkers = []  # [check id, point, (severity, margin), step]
    for cid in live:
        sev, mu = checks[cid]["verdict"].astype(int), checks[cid]["margin"]
        for j in _starts(checks, coords, cid):
            step = COMPASS_STEP if source[j] == "corner" else 0.5 * COMPASS_STEP
            walkers.append([cid, coords[j].copy(), (int(sev[j]), float(mu[j])), step])
    evaluated = 0
    for k in range(COMPASS_ROUNDS):
        cand, owner = [], []
        for w, (cid, point, _, step) in enumerate(walkers):
            for j in range(box.d):
                for sign in (1.0, -1.0):
                    u = point.copy()
                    u[j] = min(max(u[j] + sign * step, 0.0), 1.0)
                    if u[j] != point[j]:
                        cand.append(u)
                        owner.append(w)
        if not cand:
            break
        u_all = np.array(cand)
        params = box.params(u_all)
        fig, chk = evaluate_unique(rail, rules, params)
        pool.add(params, fig, chk, "search", u_all)
        evaluated += params.n
        for w, walker in enumerate(walkers):
            cid = walker[0]
            rows = [r for r, o in enumerate(owner) if o == w]
            sev, mu = chk[cid]["verdict"].astype(int), chk[cid]["margin"]
            b = min(rows, key=lambda r: (-sev[r], mu[r])) if rows else None
            if b is not None and worse(sev[b], mu[b], *walker[2]):
                walker[1], walker[2] = u_all[b].copy(), (int(sev[b]), float(mu[b]))
            else:
                walker[3] *= 0.5
        report(0.35 + 0.65 * (k + 1) / COMPASS_ROUNDS)
    return evaluated
