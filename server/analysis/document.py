"""Reading and validating a normalized rail document (schema ``railsign.rail/1``).

Provides
--------
read_rail(doc)
    Validate a rail document (a JSON-like dict in SI units) and return a `Rail`.
read_rules(*overrides)
    Merge partial rule dicts over `DEFAULT_RULES` and validate them.
DEFAULT_RULES, RULE_DESCRIPTIONS
    The team rules of DESIGN.md section 5 and what each one means.
Rail, Supply, SeriesPath, Load, Timer, Switch, SoaCurve, Fet
    Frozen dataclasses holding the validated values (SI units, degC for temperatures).

Every problem raises `DocumentError` naming the dotted field path and the reason. The
web schema normally fills the defaults; they are filled here as well so that the
analysis can be called directly on a hand-written document.

Refuses only what cannot be computed (shape, units, non-physical values). A design that
cannot work (a load turning on above the supply minimum, an upstream UVLO above it) is read
and analysed: its checks fail with the reason.

``supply.uvlo_filter`` (s, optional) is the upstream UVLO's deglitch time from its
datasheet: the UVLO trips only when the switch input stays below it continuously for that
long. Absent, the raw dip is compared. ``supply.c_in`` (F, optional) is the capacitance at
the switch input, which bounds the dip.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import DocumentError

__all__ = [
    "SCHEMA",
    "DEFAULT_RULES",
    "RULE_DESCRIPTIONS",
    "Supply",
    "SeriesPath",
    "Load",
    "Timer",
    "Switch",
    "SoaCurve",
    "Fet",
    "Rail",
    "read_rail",
    "read_fet",
    "read_rules",
]

SCHEMA = "railsign.rail/1"

DEFAULT_RULES: dict[str, float] = {
    "tj_headroom": 25.0,
    "soa_margin": 1.5,
    "fault_margin": 1.5,
    "timer_margin": 1.5,
    "vds_derating": 0.8,
}

RULE_DESCRIPTIONS: dict[str, dict[str, str]] = {
    "tj_headroom": {
        "unit": "K",
        "meaning": "start-up, retry and steady junction temperature stay this far below tj_max",
        "basis": "common practice",
    },
    "soa_margin": {
        "unit": "ratio",
        "meaning": "allowed / actual current of the start-up pulse against the derated SOA curves",
        "basis": "common practice",
    },
    "fault_margin": {
        "unit": "ratio",
        "meaning": "t_allow / t_fault_max for an output short circuit",
        "basis": "common practice",
    },
    "timer_margin": {
        "unit": "ratio",
        "meaning": "t_fault_min / worst-case t_limit, so that a good start never trips the timer",
        "basis": "common practice",
    },
    "vds_derating": {
        "unit": "ratio",
        "meaning": "v_max <= vds_derating * vds_max",
        "basis": "common practice",
    },
}

LOAD_MODELS = ("none", "resistive", "constant_current", "constant_power")
SWITCH_MODES = ("hard", "slew", "current_limit", "power_limit")
AFTER_FAULT = ("latch", "retry")


@dataclass(frozen=True)
class Supply:
    v_min: float
    v_nom: float
    v_max: float
    r_source: float
    l_source: float
    i_max: float | None
    uvlo: float | None
    uvlo_filter: float | None = None  # s: the upstream UVLO's deglitch time (datasheet); None: raw dip
    c_in: float | None = None  # F: capacitance at the switch input; None: none modelled


@dataclass(frozen=True)
class SeriesPath:
    r: float
    l: float


@dataclass(frozen=True)
class Load:
    c_nom: float
    c_tol: float
    esr: float
    model: str
    i_nom: float
    v_on: float


@dataclass(frozen=True)
class Timer:
    c: float
    c_tol: float
    i_charge: float
    i_charge_tol: float
    v_trip: float
    v_trip_tol: float
    after_fault: str
    retry_off: float | None


@dataclass(frozen=True)
class Switch:
    mode: str
    t_on: float
    dvdt: float | None
    i_limit: float | None
    i_limit_tol: float
    p_limit: float | None
    timer: Timer | None


@dataclass(frozen=True)
class SoaCurve:
    t_pulse: float | None  # seconds; None = DC
    points: tuple[tuple[float, float], ...]  # (vds V, id A), vds strictly increasing


@dataclass(frozen=True)
class Fet:
    name: str
    vds_max: float
    id_pulse_max: float | None
    rds_on: float
    rds_on_alpha: float
    tj_max: float
    rth_ja: float
    zth: tuple[tuple[float, float], ...]  # (r K/W, tau s)
    t_case: float
    curves: tuple[SoaCurve, ...]  # finite pulses by increasing t_pulse, DC last


@dataclass(frozen=True)
class Rail:
    name: str
    supply: Supply
    path: SeriesPath
    load: Load
    switch: Switch
    fet: Fet
    t_ambient: float
    rules: dict[str, float]


# ---------------------------------------------------------------------------
# field readers


def _section(doc: Any, key: str, where: str) -> dict:
    value = doc.get(key)
    if value is None:
        raise DocumentError(_join(where, key), "required")
    if not isinstance(value, dict):
        raise DocumentError(_join(where, key), "must be an object")
    return value


def _join(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key


def _number(
    sec: dict,
    key: str,
    where: str,
    *,
    default: float | None = None,
    optional: bool = False,
    minimum: float | None = None,
    above: float | None = None,
    below: float | None = None,
) -> float | None:
    field = _join(where, key)
    value = sec.get(key)
    if value is None:
        if default is not None:
            return float(default)
        if optional:
            return None
        raise DocumentError(field, "required")
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise DocumentError(field, "must be a number in SI units")
    value = float(value)
    if not math.isfinite(value):
        raise DocumentError(field, "must be a finite number (no NaN or infinity)")
    if minimum is not None and value < minimum:
        raise DocumentError(field, f"must be >= {minimum:g}")
    if above is not None and value <= above:
        raise DocumentError(field, f"must be > {above:g}")
    if below is not None and value >= below:
        raise DocumentError(field, f"must be < {below:g}")
    return value


def _choice(sec: dict, key: str, where: str, choices: tuple[str, ...], default: str | None = None) -> str:
    value = sec.get(key, default)
    if value is None:
        raise DocumentError(_join(where, key), "required")
    if value not in choices:
        raise DocumentError(_join(where, key), f"must be one of {', '.join(choices)}")
    return value


def _read_supply(doc: dict) -> Supply:
    sec = _section(doc, "supply", "")
    w = "supply"
    v_min = _number(sec, "v_min", w, above=0.0)
    v_nom = _number(sec, "v_nom", w, above=0.0)
    v_max = _number(sec, "v_max", w, above=0.0)
    if v_min > v_max:
        raise DocumentError("supply.v_min", "must not exceed supply.v_max")
    if not v_min <= v_nom <= v_max:
        raise DocumentError("supply.v_nom", "must lie between supply.v_min and supply.v_max")
    return Supply(
        v_min=v_min,
        v_nom=v_nom,
        v_max=v_max,
        r_source=_number(sec, "r_source", w, default=0.0, minimum=0.0),
        l_source=_number(sec, "l_source", w, default=0.0, minimum=0.0),
        i_max=_number(sec, "i_max", w, optional=True, above=0.0),
        uvlo=_number(sec, "uvlo", w, optional=True, minimum=0.0),
        uvlo_filter=_number(sec, "uvlo_filter", w, optional=True, minimum=0.0),
        c_in=_number(sec, "c_in", w, optional=True, above=0.0),
    )


def _read_path(doc: dict) -> SeriesPath:
    sec = doc.get("path") or {}
    if not isinstance(sec, dict):
        raise DocumentError("path", "must be an object")
    return SeriesPath(
        r=_number(sec, "r", "path", default=0.0, minimum=0.0),
        l=_number(sec, "l", "path", default=0.0, minimum=0.0),
    )


def _read_load(doc: dict) -> Load:
    sec = _section(doc, "load", "")
    w = "load"
    model = _choice(sec, "model", w, LOAD_MODELS, default="none")
    i_nom = _number(sec, "i_nom", w, default=0.0, minimum=0.0)
    v_on = _number(sec, "v_on", w, default=0.0, minimum=0.0)
    if model != "none" and i_nom <= 0.0:
        raise DocumentError("load.i_nom", f"must be > 0 for a {model} load")
    if model == "constant_power" and v_on <= 0.0:
        raise DocumentError("load.v_on", "must be > 0 for a constant_power load (it draws P / v)")
    return Load(
        c_nom=_number(sec, "c_nom", w, above=0.0),
        c_tol=_number(sec, "c_tol", w, default=0.0, minimum=0.0, below=1.0),
        esr=_number(sec, "esr", w, default=0.0, minimum=0.0),
        model=model,
        i_nom=i_nom,
        v_on=v_on,
    )


def _read_timer(sec: dict) -> Timer | None:
    t = sec.get("timer")
    if t is None:
        return None
    w = "switch.timer"
    if not isinstance(t, dict):
        raise DocumentError(w, "must be an object or null")
    after = _choice(t, "after_fault", w, AFTER_FAULT, default="latch")
    retry_off = _number(t, "retry_off", w, optional=True, above=0.0)
    if after == "retry" and retry_off is None:
        raise DocumentError("switch.timer.retry_off", "required when after_fault is retry")
    return Timer(
        c=_number(t, "c", w, above=0.0),
        c_tol=_number(t, "c_tol", w, default=0.0, minimum=0.0, below=1.0),
        i_charge=_number(t, "i_charge", w, above=0.0),
        i_charge_tol=_number(t, "i_charge_tol", w, default=0.0, minimum=0.0, below=1.0),
        v_trip=_number(t, "v_trip", w, above=0.0),
        v_trip_tol=_number(t, "v_trip_tol", w, default=0.0, minimum=0.0, below=1.0),
        after_fault=after,
        retry_off=retry_off,
    )


def _read_switch(doc: dict) -> Switch:
    sec = _section(doc, "switch", "")
    w = "switch"
    mode = _choice(sec, "mode", w, SWITCH_MODES)
    dvdt = _number(sec, "dvdt", w, optional=True, above=0.0)
    i_limit = _number(sec, "i_limit", w, optional=True, above=0.0)
    p_limit = _number(sec, "p_limit", w, optional=True, above=0.0)
    if mode == "slew" and dvdt is None:
        raise DocumentError("switch.dvdt", "required in slew mode")
    if mode in ("current_limit", "power_limit") and i_limit is None:
        raise DocumentError("switch.i_limit", f"required in {mode} mode")
    if mode == "power_limit" and p_limit is None:
        raise DocumentError("switch.p_limit", "required in power_limit mode")
    return Switch(
        mode=mode,
        t_on=_number(sec, "t_on", w, default=0.0, minimum=0.0),
        dvdt=dvdt,
        i_limit=i_limit,
        i_limit_tol=_number(sec, "i_limit_tol", w, default=0.0, minimum=0.0, below=1.0),
        p_limit=p_limit if mode == "power_limit" else None,
        timer=_read_timer(sec),
    )


def _read_curves(soa: dict, t_case: float) -> tuple[SoaCurve, ...]:
    curves = soa.get("curves")
    w = "fet.soa.curves"
    if not isinstance(curves, list):
        raise DocumentError(w, "required: a list of curves")
    if len(curves) < 2:
        raise DocumentError(w, "needs at least two pulse widths")
    out: list[SoaCurve] = []
    seen: set[float | None] = set()
    for k, c in enumerate(curves):
        cw = f"{w}[{k}]"
        if not isinstance(c, dict):
            raise DocumentError(cw, "must be an object")
        t_pulse = _number(c, "t_pulse", cw, optional=True, above=0.0)
        if t_pulse in seen:
            raise DocumentError(f"{cw}.t_pulse", "duplicate pulse width")
        seen.add(t_pulse)
        pts = c.get("points")
        if not isinstance(pts, list) or len(pts) < 2:
            raise DocumentError(f"{cw}.points", "needs at least two [vds, id] points")
        parsed: list[tuple[float, float]] = []
        for j, p in enumerate(pts):
            pw = f"{cw}.points[{j}]"
            if not isinstance(p, (list, tuple)) or len(p) != 2:
                raise DocumentError(pw, "must be a [vds, id] pair")
            pair = []
            for q in p:
                if isinstance(q, bool) or not isinstance(q, (int, float)) or not math.isfinite(q):
                    raise DocumentError(pw, "must hold two finite numbers")
                if q <= 0.0:
                    raise DocumentError(pw, "vds and id must be positive")
                pair.append(float(q))
            if parsed and pair[0] <= parsed[-1][0]:
                raise DocumentError(pw, "vds must increase strictly along a curve")
            parsed.append((pair[0], pair[1]))
        out.append(SoaCurve(t_pulse=t_pulse, points=tuple(parsed)))
    out.sort(key=lambda c: math.inf if c.t_pulse is None else c.t_pulse)
    _check_curve_order(out)
    return tuple(out)


def _check_curve_order(curves: list[SoaCurve]) -> None:
    """A longer pulse must not allow more current than a shorter one at any vds."""
    vs = sorted({v for c in curves for v, _ in c.points})
    x = np.log(vs)
    prev = prev_curve = None
    for c in curves:
        # the current the curve allows at each vs: log-log interpolation, 0 beyond its
        # last point (as soa.curve_current)
        pts = np.log(np.asarray(c.points, dtype=float))
        cur = np.where(x > pts[-1, 0] * (1 + 1e-12) + 1e-12, 0.0, np.exp(np.interp(x, pts[:, 0], pts[:, 1])))
        cur = cur.tolist()
        if prev is not None:
            v_end = prev_curve.points[-1][0]  # compare where the shorter pulse is drawn
            for v, a, b in zip(vs, prev, cur):
                if v <= v_end and b > a * (1.0 + 1e-9):
                    label = "DC" if c.t_pulse is None else f"{c.t_pulse:g} s"
                    raise DocumentError(
                        "fet.soa.curves",
                        f"the {label} curve allows more current than a shorter pulse at {v:g} V",
                    )
        prev, prev_curve = cur, c


def _read_fet(doc: dict, t_ambient: float) -> Fet:
    sec = _section(doc, "fet", "")
    w = "fet"
    name = sec.get("name")
    if not isinstance(name, str) or not name.strip():
        raise DocumentError("fet.name", "required: a text")
    tj_max = _number(sec, "tj_max", w)
    if tj_max <= t_ambient:
        raise DocumentError("fet.tj_max", "must be above environment.t_ambient")
    zth = sec.get("zth")
    if not isinstance(zth, list) or not zth:
        raise DocumentError("fet.zth", "required: a list of Foster stages {r, tau}")
    stages = []
    for k, s in enumerate(zth):
        sw = f"fet.zth[{k}]"
        if not isinstance(s, dict):
            raise DocumentError(sw, "must be an object {r, tau}")
        stages.append((_number(s, "r", sw, above=0.0), _number(s, "tau", sw, above=0.0)))
    soa = sec.get("soa")
    if not isinstance(soa, dict):
        raise DocumentError("fet.soa", "required: an object with curves")
    t_case = _number(soa, "t_case", "fet.soa", default=25.0)
    if t_case >= tj_max:
        raise DocumentError("fet.soa.t_case", "must be below fet.tj_max")
    return Fet(
        name=name,
        vds_max=_number(sec, "vds_max", w, above=0.0),
        id_pulse_max=_number(sec, "id_pulse_max", w, optional=True, above=0.0),
        rds_on=_number(sec, "rds_on", w, above=0.0),
        rds_on_alpha=_number(sec, "rds_on_alpha", w, default=0.005, minimum=0.0),
        tj_max=tj_max,
        rth_ja=_number(sec, "rth_ja", w, above=0.0),
        zth=tuple(stages),
        t_case=t_case,
        curves=_read_curves(soa, t_case),
    )


def read_fet(fet: Any) -> Fet:
    """Validate a FET on its own (a part library entry: the rail document's ``fet`` section).

    The checks that involve the rest of a rail (tj_max above the ambient) are left to
    `read_rail`; raises `DocumentError` with paths starting at ``fet``.
    """
    return _read_fet({"fet": fet}, t_ambient=-273.15)


def read_rules(*overrides: Any) -> dict[str, float]:
    """Merge partial rule dicts over `DEFAULT_RULES` and validate them.

    Parameters
    ----------
    *overrides : dict or None
        Partial rule dicts, later ones win (team rules, then the rail's own).

    Returns
    -------
    dict
        All five rules: ``tj_headroom`` (K), ``soa_margin``, ``fault_margin``,
        ``timer_margin`` (ratios >= 1) and ``vds_derating`` (ratio in (0, 1]).
    """
    rules = dict(DEFAULT_RULES)
    for src in overrides:
        if src is None:
            continue
        if not isinstance(src, dict):
            raise DocumentError("rules", "must be an object")
        for key in src:
            if key not in DEFAULT_RULES:
                raise DocumentError(f"rules.{key}", "unknown rule")
        for key in src:
            if key == "tj_headroom":
                rules[key] = _number(src, key, "rules", minimum=0.0)
            elif key == "vds_derating":
                v = _number(src, key, "rules", above=0.0)
                if v > 1.0:
                    raise DocumentError("rules.vds_derating", "must be <= 1")
                rules[key] = v
            else:
                rules[key] = _number(src, key, "rules", minimum=1.0)
    return rules


def read_rail(doc: Any, team_rules: dict | None = None) -> Rail:
    """Validate a normalized rail document and return it as a `Rail`.

    Parameters
    ----------
    doc : dict
        The rail document, schema ``railsign.rail/1`` (DESIGN.md section 3), numbers in
        SI units (V, A, F, H, ohm, s, W, K/W) and temperatures in degC.
    team_rules : dict, optional
        The team's rule overrides; the rail's own ``rules`` win over them.

    Returns
    -------
    Rail

    Raises
    ------
    DocumentError
        Naming the field path and the reason.
    """
    if not isinstance(doc, dict):
        raise DocumentError("document", "must be an object")
    schema = doc.get("schema", SCHEMA)
    if schema != SCHEMA:
        raise DocumentError("schema", f"unsupported schema {schema!r}; expected {SCHEMA!r}")
    name = doc.get("name", "")
    if not isinstance(name, str):
        raise DocumentError("name", "must be a text")
    env = _section(doc, "environment", "")
    t_ambient = _number(env, "t_ambient", "environment")
    supply = _read_supply(doc)
    rules = read_rules(team_rules, doc.get("rules"))
    return Rail(
        name=name,
        supply=supply,
        path=_read_path(doc),
        load=_read_load(doc),
        switch=_read_switch(doc),
        fet=_read_fet(doc, t_ambient),
        t_ambient=t_ambient,
        rules=rules,
    )
