"""Capacitor banks: groups of capacitors with their own value, tolerance, ESR and DC-bias curve.

Provides
--------
DIELECTRICS, CLASS_II, DIELECTRIC_WORDS
    The dielectric classes a group names, those that lose capacitance at DC bias (EIA
    class II ceramics), and their names for people.
BankGroup
    One group of identical capacitors (the document's ``load.bank[]``).
group_factor(group, t_ambient), group_total(group, t_ambient)
    A group's nominal factor (temperature coefficient at the ambient, middle of a derating
    range) and its nominal total capacitance at 0 V (F).
bank_total(groups, t_ambient), group_esr(group), bank_esr(groups)
    The bank's nominal total at 0 V (F); a group's ESR (its capacitors in parallel) and the
    groups' ESRs in parallel (ohm).
multipliers(groups, level)
    Each group's capacitance relative to its nominal total at a corner ("low", "high").
sample_multipliers(draw, groups)
    Each group's capacitance relative to nominal for Monte Carlo draws, every group its own.
BankShape, bank_shape(groups, t_ambient)
    The shared per-group data the transient reads: DC-bias tables, ESRs, nominal totals.
fraction(table, v), charge(table, v), voltage(table, x)
    A group's DC-bias fraction f(v), its normalised charge F(v) = integral of f from 0 to v
    (V), and the inverse of F.
bank_summary(groups, t_ambient, v_max, v_nom)
    The bank's C(v) for the rail page and report (nominal, low and high), each group's
    capacitance at the working voltage, and the notes a reader needs.

Method
------
A group of ``count`` capacitors of nominal value C_n has the capacitance
C(v) = count C_n k f(v) at DC bias v: k the row's factor (tolerance, temperature
coefficient, derating range) and f the DC-bias curve (fraction of nominal against volts,
linear between points and held at the end values beyond them; 1 without a curve). The
charge at voltage v is Q(v) = count C_n k F(v), F(v) the integral of f from 0 to v, in closed
form (piecewise quadratic); the voltage at a charge inverts it exactly (the root of the
quadratic in its stable form, Numerical Recipes section 5.6). dq = C(v) dv is the definition
of the incremental (small-signal) capacitance the datasheet DC-bias curves give.

Beyond the last point the curve is held flat, so a bank driven past its curve reads more
capacitance than a falling curve would give: the inrush (more charge) is then on the high
side, the hold-up on the low one; `bank_summary` says so where a rail reaches past a
curve. Without a curve a class II group is read at its nominal value with a note that its
capacitance at working voltage may be much lower (common practice, no source); a
``derating`` range [low, high] (fractions of nominal) is read as such: its middle at the
nominal point, its ends at the corners, uniform in the Monte Carlo.

The temperature coefficient (1/K) is taken linearly at the document's worst-case high
ambient against 25 degC: 1 + tc (t_ambient - 25).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["DIELECTRICS", "CLASS_II", "DIELECTRIC_WORDS", "BankGroup", "BankShape", "bank_shape", "group_factor",
           "group_total", "bank_total", "bank_spread", "group_esr", "bank_esr", "multipliers", "sample_multipliers", "fraction",
           "charge", "voltage", "bank_summary", "bank_curve", "effective_capacitance", "document_capacitance", "MAX_BANK_GROUPS", "MAX_GROUP_COUNT"]

DIELECTRICS = ("c0g", "x5r", "x7r", "electrolytic", "polymer", "film", "other")
CLASS_II = frozenset({"x5r", "x7r"})
DIELECTRIC_WORDS = {"c0g": "C0G ceramic", "x5r": "X5R ceramic", "x7r": "X7R ceramic",
                    "electrolytic": "aluminium electrolytic", "polymer": "polymer", "film": "film", "other": "other"}
MAX_BANK_GROUPS = 64
MAX_GROUP_COUNT = 10_000
T_REFERENCE = 25.0  # degC: the temperature of the nominal value
SUMMARY_POINTS = 61  # points of the C(v) curve in the summary


@dataclass(frozen=True)
class BankGroup:
    """One group of identical capacitors (SI units): ``count`` of nominal ``c_nom`` F each with
    tolerance ``c_tol`` (fraction), ``dielectric`` (one of `DIELECTRICS`), voltage rating
    ``v_rated`` V, ``esr`` ohm per capacitor, optional ``dc_bias`` ((V, fraction), V rising,
    fraction not rising), ``tempco`` (1/K) and ``derating`` (low, high fractions of nominal);
    ``refs`` the reference designators, as given."""

    count: int
    c_nom: float
    c_tol: float
    dielectric: str
    v_rated: float
    esr: float
    dc_bias: tuple[tuple[float, float], ...] | None = None
    tempco: float | None = None
    derating: tuple[float, float] | None = None
    refs: str | None = None

    @property
    def class_ii(self) -> bool:
        return self.dielectric in CLASS_II


def group_factor(group: BankGroup, t_ambient: float) -> float:
    """The group's nominal factor: its temperature coefficient at ``t_ambient`` (degC) and the
    middle of its derating range (1 without them)."""
    k = 1.0
    if group.tempco is not None:
        k *= 1.0 + group.tempco * (t_ambient - T_REFERENCE)
    if group.derating is not None:
        k *= 0.5 * (group.derating[0] + group.derating[1])
    return k


def group_total(group: BankGroup, t_ambient: float) -> float:
    """The group's nominal total capacitance at 0 V, F."""
    return group.count * group.c_nom * group_factor(group, t_ambient)


def bank_total(groups, t_ambient: float) -> float:
    """The bank's nominal total capacitance at 0 V, F."""
    return float(sum(group_total(g, t_ambient) for g in groups))


def group_esr(group: BankGroup) -> float:
    """The group's ESR: its ``count`` capacitors in parallel, ohm."""
    return group.esr / group.count


def document_capacitance(load: dict, t_ambient: float) -> float | None:
    """The load capacitance of a validated document's ``load`` section (SI numbers): its ``c_nom``,
    or a bank's nominal total at 0 V (F); None when neither is there."""
    if load.get("bank"):
        groups = [BankGroup(count=int(g["count"]), c_nom=g["c_nom"], c_tol=g.get("c_tol", 0.0),
                            dielectric=g["dielectric"], v_rated=g["v_rated"], esr=g.get("esr", 0.0),
                            tempco=g.get("tempco"), derating=tuple(g["derating"]) if g.get("derating") else None)
                  for g in load["bank"]]
        return bank_total(groups, t_ambient)
    return load.get("c_nom")


def bank_esr(groups) -> float:
    """The groups' ESRs in parallel, ohm (0 where any group has none). The bank equals one
    capacitor with this ESR only where every group has the same ESR times capacitance."""
    esrs = [group_esr(g) for g in groups]
    if any(e == 0.0 for e in esrs):
        return 0.0
    return 1.0 / sum(1.0 / e for e in esrs)


def bank_spread(groups) -> float:
    """The largest relative deviation of any group at a corner (0: the bank has no spread); a
    flag and a figure for words, not a symmetric tolerance."""
    lo, hi = multipliers(groups, "low"), multipliers(groups, "high")
    return float(max(np.max(1.0 - lo), np.max(hi - 1.0), 0.0))


def _range_ends(group: BankGroup) -> tuple[float, float]:
    """The derating range's ends relative to its middle (1, 1 without one)."""
    if group.derating is None:
        return 1.0, 1.0
    lo, hi = group.derating
    mid = 0.5 * (lo + hi)
    return lo / mid, hi / mid


def multipliers(groups, level: str) -> np.ndarray:
    """Each group's capacitance relative to its nominal total at a corner: "low" (every group
    at its low tolerance and the low end of its derating range), "high", or "nominal"."""
    if level == "nominal":
        return np.ones(len(groups))
    out = []
    for g in groups:
        lo, hi = _range_ends(g)
        out.append((1.0 - g.c_tol) * lo if level == "low" else (1.0 + g.c_tol) * hi)
    return np.array(out)


def sample_multipliers(draw, groups) -> np.ndarray:
    """Monte Carlo multipliers, shape (n, groups): ``draw(n)`` returns standardised draws in
    [-1, 1] (or normal with the tolerance at 3 sigma) for each group's tolerance; a derating
    range is drawn uniformly between its ends (one more uniform draw per group)."""
    cols = []
    for g in groups:
        z, u = draw(g)
        m = 1.0 + g.c_tol * z
        lo, hi = _range_ends(g)
        if g.derating is not None:
            m = m * (lo + u * (hi - lo))
        cols.append(m)
    return np.stack(cols, axis=1)


# -- the DC-bias curve ---------------------------------------------------------


@dataclass(frozen=True)
class Table:
    """A group's DC-bias curve: points ``v`` (V, rising), ``f`` (fraction), the cumulative
    integral ``big_f`` of f at the points (V), and the slopes ``s`` of the segments (1/V)."""

    v: np.ndarray
    f: np.ndarray
    big_f: np.ndarray
    s: np.ndarray
    s_ext: np.ndarray  # the slopes with a flat segment beyond the last point (1/V)

    @property
    def flat(self) -> bool:
        return self.v.shape[0] == 1

    @property
    def f_min(self) -> float:
        return float(self.f.min())


def table(dc_bias) -> Table:
    """The `Table` of a DC-bias curve (None: f = 1 everywhere)."""
    if dc_bias is None:
        return Table(np.zeros(1), np.ones(1), np.zeros(1), np.zeros(0), np.zeros(1))
    v = np.array([p[0] for p in dc_bias], dtype=float)
    f = np.array([p[1] for p in dc_bias], dtype=float)
    s = np.diff(f) / np.diff(v)
    seg = np.diff(v) * 0.5 * (f[:-1] + f[1:])
    big_f = f[0] * v[0] + np.concatenate([[0.0], np.cumsum(seg)])
    return Table(v, f, big_f, s, np.concatenate([s, [0.0]]))


def fraction(tab: Table, v):
    """f(v): linear between the points, the end values beyond them."""
    if tab.flat:
        return np.ones_like(np.asarray(v, dtype=float)) if np.ndim(v) else 1.0
    return np.interp(v, tab.v, tab.f)


def charge(tab: Table, v):
    """F(v) = integral of f from 0 to v (V); below the first point f is its first value (also for
    v < 0, so that F is odd-continuous through 0)."""
    v = np.asarray(v, dtype=float)
    if tab.flat:
        return v * 1.0
    j = np.clip(np.searchsorted(tab.v, v, side="right") - 1, 0, tab.v.shape[0] - 1)
    below = v < tab.v[0]
    d = v - tab.v[j]
    s = tab.s_ext[j]  # beyond the last point: flat
    inside = tab.big_f[j] + tab.f[j] * d + 0.5 * s * d * d
    return np.where(below, tab.f[0] * v, inside)


def voltage(tab: Table, x):
    """The inverse of `charge`: the voltage v with F(v) = x (V)."""
    x = np.asarray(x, dtype=float)
    if tab.flat:
        return x * 1.0
    j = np.clip(np.searchsorted(tab.big_f, x, side="right") - 1, 0, tab.v.shape[0] - 1)
    below = x < tab.big_f[0]
    fj = tab.f[j]
    s = tab.s_ext[j]
    dx = x - tab.big_f[j]
    # f_j d + s d^2 / 2 = dx, the root near 0 in the form without cancellation
    root = np.sqrt(np.maximum(fj * fj + 2.0 * s * dx, 0.0))
    d = 2.0 * dx / (fj + root)
    return np.where(below, x / tab.f[0], tab.v[j] + d)


@dataclass(frozen=True)
class BankShape:
    """What every row of a bank shares: per group the DC-bias `Table`, the ESR (ohm, the
    group's capacitors in parallel) and the nominal total at 0 V (F)."""

    tables: tuple[Table, ...]
    esr: np.ndarray
    nominal: np.ndarray

    @property
    def n_groups(self) -> int:
        return len(self.tables)

    def lowest_fraction(self) -> np.ndarray:
        return np.array([t.f_min for t in self.tables])


def bank_shape(groups, t_ambient: float) -> BankShape:
    return BankShape(tables=tuple(table(g.dc_bias) for g in groups),
                     esr=np.array([group_esr(g) for g in groups]),
                     nominal=np.array([group_total(g, t_ambient) for g in groups]))


def bank_curve(groups, t_ambient: float) -> tuple[np.ndarray, np.ndarray]:
    """The whole bank's nominal C(v) as points ``(v, c)`` (V, F), exact: the sum of the groups' curves is
    linear between the union of their points and held at the end values beyond them (as each group's is)."""
    shape = bank_shape(groups, t_ambient)
    v = np.unique(np.concatenate([[0.0]] + [t.v for t in shape.tables]))
    return v, sum(shape.nominal[k] * fraction(t, v) for k, t in enumerate(shape.tables))


def effective_capacitance(groups, t_ambient: float, v: float) -> float:
    """The charge-equivalent capacitance of the bank at ``v`` (V): Q(v) / v, F (the one capacitor
    that holds the bank's charge at that voltage; at 0 V, the bank's total)."""
    shape = bank_shape(groups, t_ambient)
    if v <= 0.0:
        return float(shape.nominal.sum())
    return float(sum(shape.nominal[k] * charge(t, v) for k, t in enumerate(shape.tables)) / v)


# -- the summary for people -----------------------------------------------------


def bank_summary(groups, t_ambient: float, v_max: float, v_nom: float) -> dict:
    """The bank as the rail page and the report show it.

    Returns
    -------
    dict
        ``v`` (V, 0 to v_max), ``c_nominal``, ``c_low``, ``c_high`` (F: the bank's C(v) at
        the nominal point and the low and high corners); ``groups``: per group its words,
        count, nominal total (F), C at the nominal supply (F) and its fraction, the
        effective (charge-equivalent) capacitance Q(v_nom) / v_nom (F) and the rating;
        ``c_at_v_nom``, its ``fraction_at_v_nom`` of the total at 0 V and ``c_effective`` for the
        whole bank (F); ``notes``: sentences.
    """
    shape = bank_shape(groups, t_ambient)
    lo, hi = multipliers(groups, "low"), multipliers(groups, "high")
    v = np.linspace(0.0, v_max, SUMMARY_POINTS)
    per = np.array([shape.nominal[k] * fraction(t, v) for k, t in enumerate(shape.tables)])
    rows, notes = [], []
    q_nom = 0.0
    for k, g in enumerate(groups):
        tab = shape.tables[k]
        c_v = float(shape.nominal[k] * fraction(tab, v_nom))
        q = float(shape.nominal[k] * charge(tab, v_nom))
        q_nom += q
        rows.append({"refs": g.refs, "dielectric": DIELECTRIC_WORDS[g.dielectric], "count": g.count,
                     "c_each": g.c_nom, "c_total": float(shape.nominal[k]), "c_at_v_nom": c_v,
                     "fraction_at_v_nom": c_v / float(shape.nominal[k]), "c_effective": q / v_nom,
                     "v_rated": g.v_rated, "esr": group_esr(g), "c_tol": g.c_tol,
                     "derating": list(g.derating) if g.derating is not None else None,
                     "has_curve": g.dc_bias is not None})
        name = g.refs or f"group {k + 1}"
        if g.class_ii and g.dc_bias is None:
            taken = (f"; the analysis takes {_pct(g.derating[0])} to {_pct(g.derating[1])} of nominal as set"
                     if g.derating is not None else "; the analysis takes the nominal value")
            notes.append(f"{name} ({DIELECTRIC_WORDS[g.dielectric]}) has no DC-bias curve: its capacitance at "
                         f"working voltage may be much lower than nominal (common practice, no source){taken}.")
        if g.dc_bias is not None and g.dc_bias[-1][0] < v_max:
            notes.append(f"{name}: the DC-bias curve ends at {g.dc_bias[-1][0]:g} V, below the supply maximum "
                         f"{v_max:g} V; it is held at its last value ({_pct(g.dc_bias[-1][1])}) beyond, which reads "
                         "more capacitance than a falling curve would (more inrush, less hold-up).")
        if g.v_rated < v_max:
            notes.append(f"{name}: rated {g.v_rated:g} V, below the supply maximum {v_max:g} V.")
    if len(groups) > 1 and not _same_time_constant(groups, shape):
        notes.append("The groups have different ESR times capacitance: each group is its own branch in the "
                     "transient (one equivalent ESR would not be exact).")
    c_at_v_nom, c_total = float(sum(r["c_at_v_nom"] for r in rows)), float(shape.nominal.sum())
    return {"v": v.tolist(), "c_nominal": per.sum(axis=0).tolist(),
            "c_low": (lo[:, None] * per).sum(axis=0).tolist(), "c_high": (hi[:, None] * per).sum(axis=0).tolist(),
            "groups": rows, "c_at_v_nom": c_at_v_nom, "fraction_at_v_nom": c_at_v_nom / c_total,
            "c_effective": q_nom / v_nom, "c_total": c_total, "v_nom": v_nom, "notes": notes}


def _same_time_constant(groups, shape: BankShape) -> bool:
    taus = [group_esr(g) * float(shape.nominal[k]) for k, g in enumerate(groups)]
    return all(math.isclose(t, taus[0], rel_tol=1e-9, abs_tol=0.0) for t in taus)


def _pct(x: float) -> str:
    return f"{100.0 * x:.3g} %"
