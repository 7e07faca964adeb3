"""Reading and validating a rail document (schema ``railsign.rail/1``): the one home of its rules.

Provides
--------
read_rail(doc, team_rules=None)
    Validate a rail document (a JSON-like dict in SI units) and return a `Rail`.
read_fet(fet)
    Validate a MOSFET on its own (a part library entry: the rail document's ``fet``).
read_zth_points(points)
    Validate the points of a transient thermal impedance curve (``fet.zth_points``).
DEFAULTS, OPTIONAL, BOUNDS, Bound, FIELD_KEYS, NAME_MAX_LENGTH, LOAD_MODELS, SWITCH_MODES, AFTER_FAULT
    The defaults, the optional fields, the bounds, the keys of each object and the choices of
    the document: the web schema (``server.schemas.rail``) imports them and checks only shape
    and units.
Rail, Supply, SeriesPath, Load, Timer, Switch, SoaCurve, Fet
    Frozen dataclasses holding the validated values (SI units, degC for temperatures).

Every problem is reported as a `DocumentError` naming the field in words and by its dotted
path ("Supply minimum (supply.v_min): must be above 0 V"); every problem of a document is
collected, and the error raised holds them all in ``.errors``. Numbers are SI numbers here:
engineering notation ("680uF") is the web schema's job.

Refuses only what cannot be computed: shape (required fields, known keys, choices, numbers),
non-physical values (zero or negative capacitance, a tolerance of 100 % or more, v_min above
v_max, SOA points that are not positive or whose V_DS does not rise, fewer than two pulse
widths, tj_max not above the ambient or the SOA case temperature, Zth points that are not
positive, not ordered in time or falling), a constant-power load with v_on = 0 (it would draw infinite current), and a
mode without its parameter. A design that cannot work (a load turning on at or above the
supply minimum, an upstream UVLO at or above it, a current limit below the load current) is
read and analysed: its checks fail with the reason. SOA curves as read off a chart may cross (a
longer pulse allowing more current than a shorter one somewhere) or rise with V_DS: they are
read, and the analysis uses their conservative envelope (`soa.soa_envelope_notes` says where).

``fet.zth_points`` (optional, [[t s, Zth K/W], ...]) are the points of the datasheet's
single-pulse transient thermal impedance curve that the Foster stages ``fet.zth`` were fitted
to (`zth_fit`): provenance only, the analysis uses the stages.

``supply.uvlo_filter`` (s, optional) is the upstream UVLO's deglitch time from its
datasheet: the UVLO trips only when the switch input stays below it continuously for that
long. Absent, the raw dip is compared. ``supply.c_in`` (F, optional) is the capacitance at
the switch input, which bounds the dip. ``environment.t_ambient`` has no default: a default
ambient of our own would make the thermal checks easier to pass.

``fet.rds_on_max`` (ohm, optional, at least ``rds_on``) is the datasheet maximum Rds(on) at
25 degC: Rds(on) then spreads from typical to maximum in the corners, the worst-case search
and the Monte Carlo. ``fet.rds_on_curve`` (optional) is the datasheet's normalised Rds(on)
curve as [Tj degC, Rds(on)/Rds(on, 25 degC)] points, Tj strictly rising and ratios
positive, used instead of ``rds_on_alpha``. ``fet.count`` (a whole number, default 1) is the
rail's number of identical FETs in parallel (the rail's figure, not the part's).
``switch.foldback`` (optional): the current limit against the FET's V_DS, a list of
``[v_ds V, i_limit A]`` points, V_DS strictly increasing from 0 V or more, the current
positive and not rising with V_DS; piecewise linear between points and held flat beyond
the ends (`foldback`). It needs ``switch.i_limit``: the points are nominal currents and the
row's limit (``i_limit`` with its tolerance, in corners and Monte Carlo) scales the whole
curve by ``row limit / switch.i_limit``; the curve replaces the constant limit.

``switch.gate`` (optional): the controller's gate drive, a current source ("current":
``i_gate``, a charge pump) or a voltage source behind a resistance ("voltage": ``v_drive``,
measured from ground, and ``r_gate``), with an optional external gate capacitor ``c_ext``
to ground. It needs the FET's gate data ``fet.gate``: the threshold ``v_th``, the square-law
constant ``k`` (A/V^2) or the forward transconductance ``g_fs`` at the drain current
``i_gfs`` (k = g_fs^2 / (2 i_gfs)), and the capacitances ``c_iss`` and ``c_rss`` (C_gd =
c_rss, C_gs = c_iss - c_rss). Given, the gate replaces the turn-on ramp (``t_on``) and the
slew rate (``dvdt``, not needed then) in every mode; a current or power limit stays on top.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from .bank import (DIELECTRICS, MAX_BANK_GROUPS, MAX_GROUP_COUNT, BankGroup, bank_esr, bank_spread, bank_total,
                   group_factor)
from .bounds import (MAX_FOSTER_STAGES, MAX_RETRIES, MAX_SOA_CURVES, MAX_SOA_POINTS, MAX_ZTH_POINTS, NAME_MAX_LENGTH,
                     NUMBER_LARGEST, magnitude_problem, text_problem)

MAX_PARALLEL_FETS = 64  # fet.count: more parallel FETs than this are not read
MAX_RDS_POINTS = MAX_SOA_POINTS  # fet.rds_on_curve: at most this many points
from .errors import DocumentError
from .rules import DEFAULT_RULES, RULE_RANGES
from .units import KIND_SYMBOLS, quantity
from .words import FIELD_TITLES, generic_path

__all__ = [
    "SCHEMA",
    "GATE_DRIVES",
    "GateDrive",
    "FetGate",
    "NAME_MAX_LENGTH",
    "LOAD_MODELS",
    "SWITCH_MODES",
    "AFTER_FAULT",
    "DEFAULTS",
    "OPTIONAL",
    "Bound",
    "BOUNDS",
    "FIELD_KEYS",
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
    "read_zth_points",
]

SCHEMA = "railsign.rail/1"
ABSOLUTE_ZERO = -273.15  # degC

LOAD_MODELS = ("none", "resistive", "constant_current", "constant_power")
SWITCH_MODES = ("hard", "slew", "current_limit", "power_limit")
AFTER_FAULT = ("latch", "retry")
GATE_DRIVES = ("current", "voltage")

# The value a field takes when the document leaves it out (DESIGN.md section 3).
DEFAULTS: dict[str, float | str] = {
    "supply.r_source": 0.0,
    "supply.l_source": 0.0,
    "path.r": 0.0,
    "path.l": 0.0,
    "load.c_tol": 0.0,
    "load.esr": 0.0,
    "load.bank[].c_tol": 0.0,
    "load.bank[].esr": 0.0,
    "load.model": "none",
    "load.i_nom": 0.0,
    "load.v_on": 0.0,
    "switch.t_on": 0.0,
    "switch.i_limit_tol": 0.0,
    "switch.timer.c_tol": 0.0,
    "switch.timer.i_charge_tol": 0.0,
    "switch.timer.v_trip_tol": 0.0,
    "switch.timer.after_fault": "latch",
    "fet.rds_on_alpha": 0.005,
    "fet.soa.t_case": 25.0,
    "fet.count": 1,
    "switch.gate.c_ext": 0.0,
}

# Fields that may be absent or null, with no default: absent means "none" (no UVLO, no timer,
# the DC curve for a null pulse width, the team's rule).
OPTIONAL: frozenset[str] = frozenset({
    "supply.i_max", "supply.uvlo", "supply.uvlo_filter", "supply.c_in", "supply.v_clamp",
    "switch.dvdt", "switch.i_limit", "switch.p_limit", "switch.timer", "switch.timer.retry_off",
    "switch.timer.retries", "switch.loop_response", "switch.fast_trip", "switch.fast_trip_delay",
    "fet.id_pulse_max", "fet.e_avalanche", "fet.soa.curves[].t_pulse", "fet.rds_on_max", "fet.rds_on_curve",
    "switch.foldback", "switch.gate", "switch.gate.i_gate", "switch.gate.v_drive", "switch.gate.r_gate",
    "fet.gate", "fet.gate.k", "fet.gate.g_fs", "fet.gate.i_gfs", "fet.zth_points",
    "load.c_nom", "load.bank", "load.bank[].refs", "load.bank[].dc_bias", "load.bank[].tempco",
    "load.bank[].derating",
    *(f"rules.{k}" for k in DEFAULT_RULES),
})


@dataclass(frozen=True)
class Bound:
    """The range of a number: ``> above``, ``>= minimum``, ``< below``, ``<= maximum`` (None: open)."""

    above: float | None = None
    minimum: float | None = None
    below: float | None = None
    maximum: float | None = None
    note: str = ""  # said after the problem: what the field is

    def problem(self, value: float, kind: str | None) -> str | None:
        """What is wrong with ``value`` (a sentence), or None when it lies in the range."""
        text = None
        if self.above is not None and not value > self.above:
            text = f"must be above {_show(self.above, kind)}"
        elif self.minimum is not None and not value >= self.minimum:
            text = "must not be negative" if self.minimum == 0.0 else f"must be at least {_show(self.minimum, kind)}"
        elif self.below is not None and not value < self.below:
            text = f"must be below {_show(self.below, kind)}"
        elif self.maximum is not None and not value <= self.maximum:
            text = f"must be at most {_show(self.maximum, kind)}"
        if text is None:
            return None
        return f"{text} ({self.note})" if self.note else text


def _show(value: float, kind: str | None) -> str:
    """A bound as written (no rounding: -273.15 °C stays -273.15 °C)."""
    if kind in (None, "ratio"):
        return f"{value:g}"
    if kind in ("degC", "K"):
        return f"{value:g} {KIND_SYMBOLS[kind]}"
    return quantity(value, kind)


POSITIVE = Bound(above=0.0)
NON_NEGATIVE = Bound(minimum=0.0)
TOLERANCE = Bound(minimum=0.0, below=1.0, note="a tolerance is a fraction of the nominal value, like 0.2 or 20 %")
TEMPERATURE = Bound(above=ABSOLUTE_ZERO, note="absolute zero")

# The range of every number of the document (generic paths, list items as "[]").
BOUNDS: dict[str, Bound] = {
    "supply.v_min": POSITIVE, "supply.v_nom": POSITIVE, "supply.v_max": POSITIVE,
    "supply.r_source": NON_NEGATIVE, "supply.l_source": NON_NEGATIVE, "supply.i_max": POSITIVE,
    "supply.uvlo": POSITIVE, "supply.uvlo_filter": NON_NEGATIVE, "supply.c_in": POSITIVE, "supply.v_clamp": POSITIVE,
    "path.r": NON_NEGATIVE, "path.l": NON_NEGATIVE,
    "load.c_nom": POSITIVE, "load.c_tol": TOLERANCE, "load.esr": NON_NEGATIVE, "load.i_nom": NON_NEGATIVE,
    "load.v_on": NON_NEGATIVE,
    "load.bank[].count": Bound(minimum=1.0, maximum=float(MAX_GROUP_COUNT), note="a whole number of capacitors"),
    "load.bank[].c_nom": POSITIVE, "load.bank[].c_tol": TOLERANCE, "load.bank[].v_rated": POSITIVE,
    "load.bank[].esr": NON_NEGATIVE,
    "load.bank[].tempco": Bound(minimum=-0.05, maximum=0.05, note="a fraction of nominal per kelvin, e.g. -0.1 %/K"),
    "switch.t_on": NON_NEGATIVE, "switch.dvdt": POSITIVE, "switch.i_limit": POSITIVE,
    "switch.i_limit_tol": TOLERANCE, "switch.p_limit": POSITIVE,
    "switch.timer.c": POSITIVE, "switch.timer.c_tol": TOLERANCE, "switch.timer.i_charge": POSITIVE,
    "switch.timer.i_charge_tol": TOLERANCE, "switch.timer.v_trip": POSITIVE, "switch.timer.v_trip_tol": TOLERANCE,
    "switch.timer.retry_off": POSITIVE,
    "switch.timer.retries": Bound(minimum=1.0, maximum=float(MAX_RETRIES),
                                  note=f"a whole number of retries from 1 to {MAX_RETRIES}"),
    "switch.loop_response": NON_NEGATIVE, "switch.fast_trip": POSITIVE, "switch.fast_trip_delay": NON_NEGATIVE,
    "fet.e_avalanche": POSITIVE,
    "fet.vds_max": POSITIVE, "fet.id_pulse_max": POSITIVE, "fet.rds_on": POSITIVE, "fet.rds_on_alpha": NON_NEGATIVE,
    "fet.rds_on_max": POSITIVE, "fet.count": Bound(minimum=1.0, maximum=float(MAX_PARALLEL_FETS),
                                                 note="identical FETs in parallel, a whole number"),
    "fet.tj_max": TEMPERATURE, "fet.rth_ja": POSITIVE, "fet.zth[].r": POSITIVE, "fet.zth[].tau": POSITIVE,
    "fet.soa.t_case": TEMPERATURE, "fet.soa.curves[].t_pulse": POSITIVE,
    "environment.t_ambient": TEMPERATURE,
    "switch.gate.i_gate": POSITIVE, "switch.gate.v_drive": POSITIVE, "switch.gate.r_gate": POSITIVE,
    "switch.gate.c_ext": NON_NEGATIVE,
    "fet.gate.v_th": POSITIVE, "fet.gate.k": POSITIVE, "fet.gate.g_fs": POSITIVE, "fet.gate.i_gfs": POSITIVE,
    "fet.gate.c_iss": POSITIVE, "fet.gate.c_rss": POSITIVE,
    **{f"rules.{name}": Bound(**limits) for name, limits in RULE_RANGES.items()},
}

# The keys each object of the document may hold.
FIELD_KEYS: dict[str, tuple[str, ...]] = {
    "": ("schema", "name", "supply", "path", "load", "switch", "fet", "environment", "rules"),
    "supply": ("v_min", "v_nom", "v_max", "r_source", "l_source", "i_max", "uvlo", "uvlo_filter", "c_in", "v_clamp"),
    "path": ("r", "l"),
    "load": ("c_nom", "c_tol", "esr", "model", "i_nom", "v_on", "bank"),
    "load.bank[]": ("refs", "count", "c_nom", "c_tol", "dielectric", "v_rated", "esr", "dc_bias", "tempco",
                    "derating"),
    "switch": ("mode", "t_on", "dvdt", "i_limit", "i_limit_tol", "p_limit", "timer", "loop_response", "fast_trip",
               "fast_trip_delay", "foldback", "gate"),
    "switch.gate": ("drive", "i_gate", "v_drive", "r_gate", "c_ext"),
    "switch.timer": ("c", "c_tol", "i_charge", "i_charge_tol", "v_trip", "v_trip_tol", "after_fault", "retry_off",
                     "retries"),
    "fet": ("name", "vds_max", "id_pulse_max", "rds_on", "rds_on_alpha", "tj_max", "rth_ja", "zth", "zth_points",
            "soa", "e_avalanche", "rds_on_max", "rds_on_curve", "count", "gate"),
    "fet.gate": ("v_th", "k", "g_fs", "i_gfs", "c_iss", "c_rss"),
    "fet.zth[]": ("r", "tau"),
    "fet.soa": ("t_case", "curves"),
    "fet.soa.curves[]": ("t_pulse", "points"),
    "environment": ("t_ambient",),
    "rules": tuple(DEFAULT_RULES),
}


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
    v_clamp: float | None = None  # V: clamp (TVS) at the switch input limiting a turn-off overshoot; None: none


@dataclass(frozen=True)
class SeriesPath:
    r: float
    l: float


@dataclass(frozen=True)
class Load:
    """The load. With a capacitor ``bank`` (groups, `bank.BankGroup`), ``c_nom`` is the bank's
    nominal total at 0 V, ``c_tol`` its largest group tolerance (0: no spread) and ``esr`` the
    groups' ESRs in parallel, for words and estimates; the transient reads the groups."""

    c_nom: float
    c_tol: float
    esr: float
    model: str
    i_nom: float
    v_on: float
    bank: tuple[BankGroup, ...] | None = None


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
    retries: int | None = None  # retries before latching; None: endless


@dataclass(frozen=True)
class GateDrive:
    """The controller's gate drive: ``drive`` "current" (``i_gate`` A into the gate) or
    "voltage" (``v_drive`` V from ground behind ``r_gate`` ohm); ``c_ext`` F gate to ground."""

    drive: str
    i_gate: float | None
    v_drive: float | None
    r_gate: float | None
    c_ext: float


@dataclass(frozen=True)
class FetGate:
    """The FET's gate data: threshold ``v_th`` (V), square-law constant ``k`` (A/V^2; from
    g_fs at i_gfs where given so), input and reverse-transfer capacitances (F)."""

    v_th: float
    k: float
    c_iss: float
    c_rss: float

    @property
    def c_gd(self) -> float:
        return self.c_rss

    @property
    def c_gs(self) -> float:
        return self.c_iss - self.c_rss


@dataclass(frozen=True)
class Switch:
    mode: str
    t_on: float
    dvdt: float | None
    i_limit: float | None
    i_limit_tol: float
    p_limit: float | None
    timer: Timer | None
    loop_response: float | None = None  # s: the current loop's response time; None: not given
    fast_trip: float | None = None  # A: fast-trip comparator threshold; None: no fast trip
    fast_trip_delay: float | None = None  # s: delay of the fast trip (required with it)
    foldback: tuple[tuple[float, float], ...] | None = None  # (v_ds V, i A), nominal currents
    gate: GateDrive | None = None


@dataclass(frozen=True)
class SoaCurve:
    t_pulse: float | None  # seconds; None = DC
    points: tuple[tuple[float, float], ...]  # (vds V, id A) as given, vds strictly increasing


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
    e_avalanche: float | None = None  # J: single-pulse avalanche energy rating; None: not given
    rds_on_max: float | None = None  # ohm: datasheet maximum at 25 degC; None: no spread
    rds_on_curve: tuple[tuple[float, float], ...] | None = None  # (tj degC, Rds/Rds(25 degC)), tj rising
    count: int = 1  # identical FETs in parallel (a rail's figure, not the part's)
    gate: FetGate | None = None


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
# the reader: every field once, every problem collected


def _join(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key


def _kind(generic: str) -> str | None:
    words = FIELD_TITLES.get(generic)
    return words.kind if words is not None else None


def _is_number(value: Any) -> bool:
    return not isinstance(value, bool) and isinstance(value, (int, float))


class _Reader:
    """Reads the fields of a document and collects every problem; a field that fails reads as None."""

    def __init__(self) -> None:
        self.errors: list[DocumentError] = []

    def fail(self, field: str, reason: str) -> None:
        self.errors.append(DocumentError(field, reason))

    def raise_errors(self) -> None:
        if self.errors:
            first = self.errors[0]
            raise DocumentError(first.field, first.reason, errors=self.errors)

    def known_keys(self, sec: dict, where: str) -> None:
        keys = FIELD_KEYS[generic_path(where)]
        for key in sec:
            if key not in keys:
                self.fail(_join(where, str(key)), "is not a known field here (check the spelling)")

    def obj(self, parent: dict, key: str, where: str, *, required: bool = True, what: str = "an object") -> dict | None:
        """The object ``parent[key]`` (unknown keys reported); None when absent or bad."""
        field = _join(where, key)
        value = parent.get(key)
        if value is None:
            if required:
                self.fail(field, "is required")
            elif key in parent:
                self.fail(field, f"must be {what}")
            return None
        return self.item(value, field, what)

    def item(self, value: Any, field: str, what: str = "an object") -> dict | None:
        """An object in a list (or any object at ``field``), or None (reported) when it is not one."""
        if not isinstance(value, dict):
            self.fail(field, f"must be {what}")
            return None
        self.known_keys(value, field)
        return value

    def number(self, sec: dict, key: str, where: str) -> float | None:
        """A number in SI units within its bounds; its default, or None when optional and absent."""
        field = _join(where, key)
        generic = generic_path(field)
        value = sec.get(key)
        if value is None:
            if generic in DEFAULTS:
                return float(DEFAULTS[generic])
            if generic not in OPTIONAL:
                self.fail(field, "is required")
            return None
        if not _is_number(value):
            self.fail(field, "must be a number in SI units")
            return None
        if (problem := magnitude_problem(value, generic)) is not None:  # bounds.py: where computation breaks
            self.fail(field, problem)
            return None
        value = float(value)
        bound = BOUNDS.get(generic)
        problem = bound.problem(value, _kind(generic)) if bound is not None else None
        if problem is not None:
            self.fail(field, problem)
            return None
        return value

    def choice(self, sec: dict, key: str, where: str, choices: tuple[str, ...]) -> str | None:
        field = _join(where, key)
        value = sec.get(key)
        if value is None:
            default = DEFAULTS.get(generic_path(field))
            if default is None:
                self.fail(field, "is required")
            return default
        if not isinstance(value, str) or value not in choices:
            self.fail(field, f"must be one of {', '.join(choices)}")
            return None
        return value

    def text(self, sec: dict, key: str, where: str) -> str | None:
        field = _join(where, key)
        value = sec.get(key)
        if value is None:
            self.fail(field, "is required")
        elif not isinstance(value, str):
            self.fail(field, "must be a text")
        elif not value.strip():
            self.fail(field, "must not be empty")
        elif len(value) > NAME_MAX_LENGTH:
            self.fail(field, f"must be at most {NAME_MAX_LENGTH} characters long")
        elif (problem := text_problem(value)) is not None:
            self.fail(field, problem)
        else:
            return value
        return None


def _read_supply(r: _Reader, doc: dict) -> Supply | None:
    sec = r.obj(doc, "supply", "")
    if sec is None:
        return None
    v = {key: r.number(sec, key, "supply") for key in FIELD_KEYS["supply"]}
    v_min, v_nom, v_max = v["v_min"], v["v_nom"], v["v_max"]
    if v_min is not None and v_max is not None and v_min > v_max:
        r.fail("supply.v_min", f"must not be above the supply maximum ({quantity(v_max, 'V')})")
    elif None not in (v_min, v_nom, v_max) and not v_min <= v_nom <= v_max:
        r.fail("supply.v_nom", f"must lie between the supply minimum and maximum "
                               f"({quantity(v_min, 'V')} to {quantity(v_max, 'V')})")
    return Supply(**v)


def _read_path(r: _Reader, doc: dict) -> SeriesPath:
    sec = r.obj(doc, "path", "", required=False) or {}
    return SeriesPath(r=r.number(sec, "r", "path"), l=r.number(sec, "l", "path"))


def _read_load(r: _Reader, doc: dict) -> Load | None:
    sec = r.obj(doc, "load", "")
    if sec is None:
        return None
    w = "load"
    model = r.choice(sec, "model", w, LOAD_MODELS)
    i_nom = r.number(sec, "i_nom", w)
    v_on = r.number(sec, "v_on", w)
    if model not in (None, "none") and i_nom is not None and i_nom <= 0.0:
        r.fail("load.i_nom", f"must be above 0 A for a {model.replace('_', ' ')} load")
    if model == "constant_power" and v_on is not None and v_on <= 0.0:
        r.fail("load.v_on", "must be above 0 V for a constant-power load: at 0 V it would draw infinite current")
    if sec.get("bank") is None:
        c_nom = r.number(sec, "c_nom", w)
        if sec.get("c_nom") is None:
            r.fail("load.c_nom", "is required (or a capacitor bank, load.bank)")
        return Load(c_nom=c_nom, c_tol=r.number(sec, "c_tol", w), esr=r.number(sec, "esr", w),
                    model=model, i_nom=i_nom, v_on=v_on)
    for key in ("c_nom", "c_tol", "esr"):
        if sec.get(key) not in (None, 0, 0.0) or (key == "c_nom" and sec.get(key) is not None):
            r.fail(f"load.{key}", "must be left out with a capacitor bank: the bank's groups give the capacitance, "
                                  "tolerance and ESR")
    bank = _read_bank(r, sec["bank"])
    if bank is None:
        return Load(c_nom=None, c_tol=0.0, esr=0.0, model=model, i_nom=i_nom, v_on=v_on)
    return Load(c_nom=None, c_tol=bank_spread(bank), esr=bank_esr(bank), model=model, i_nom=i_nom, v_on=v_on,
                bank=bank)


def _read_bank(r: _Reader, groups: Any) -> tuple[BankGroup, ...] | None:
    """The capacitor bank: one to MAX_BANK_GROUPS groups, each read in full (every problem reported)."""
    field = "load.bank"
    if not isinstance(groups, list) or not groups:
        r.fail(field, "must be a list of capacitor groups (at least one)")
        return None
    if len(groups) > MAX_BANK_GROUPS:
        r.fail(field, f"has {len(groups)} groups; at most {MAX_BANK_GROUPS} are read")
        return None
    out = []
    for j, raw in enumerate(groups):
        where = f"{field}[{j}]"
        g = r.item(raw, where)
        if g is None:
            continue
        count = r.number(g, "count", where)
        if count is not None and count != math.floor(count):
            r.fail(f"{where}.count", f"must be a whole number of capacitors (got {count:g})")
            count = None
        refs = g.get("refs")
        if refs is not None:
            refs = r.text(g, "refs", where)
        dielectric = r.choice(g, "dielectric", where, DIELECTRICS)
        values = {key: r.number(g, key, where) for key in ("c_nom", "c_tol", "v_rated", "esr", "tempco")}
        dc_bias = _read_dc_bias(r, g["dc_bias"], f"{where}.dc_bias") if g.get("dc_bias") is not None else None
        derating = _read_derating(r, g["derating"], f"{where}.derating") if g.get("derating") is not None else None
        if g.get("dc_bias") is not None and g.get("derating") is not None:
            r.fail(f"{where}.derating", "give a DC-bias curve or a derating range, not both")
        if None in (count, dielectric, values["c_nom"], values["c_tol"], values["v_rated"], values["esr"]):
            continue
        out.append(BankGroup(count=int(count), dielectric=dielectric, dc_bias=dc_bias, derating=derating, refs=refs,
                             **values))
    return tuple(out) if len(out) == len(groups) else None


def _read_dc_bias(r: _Reader, points: Any, field: str) -> tuple[tuple[float, float], ...] | None:
    """A DC-bias curve's [V, fraction of nominal] points: V from 0 up and strictly rising, the
    fraction positive (at most 2) and not rising with voltage."""
    pairs = _read_pairs(r, points, field, "[V, fraction]", "the DC voltage in V and the capacitance as a fraction "
                        "of nominal", MAX_SOA_POINTS)
    if pairs is None:
        return None
    parsed: list[tuple[float, float]] = []
    for j, (v, f) in enumerate(pairs):
        pw = f"{field}[{j}]"
        if v < 0.0:
            r.fail(pw, f"the voltage must not be negative (got {v:g} V)")
            return None
        if not 0.0 < f <= 2.0:
            r.fail(pw, f"the fraction of nominal must be above 0 and at most 2 (got {f:g})")
            return None
        if parsed and v <= parsed[-1][0]:
            r.fail(pw, f"the voltage must increase from point to point ({v:g} V follows {parsed[-1][0]:g} V)")
            return None
        if parsed and f > parsed[-1][1]:
            r.fail(pw, f"the capacitance must not rise with DC voltage ({f:g} follows {parsed[-1][1]:g}); a DC-bias "
                       "curve falls or stays level")
            return None
        parsed.append((v, f))
    return tuple(parsed)


def _read_derating(r: _Reader, pair: Any, field: str) -> tuple[float, float] | None:
    """A derating range [low, high]: fractions of nominal, 0 < low <= high <= 2."""
    if (not isinstance(pair, (list, tuple)) or len(pair) != 2
            or not all(_is_number(q) and magnitude_problem(q) is None for q in pair)):
        r.fail(field, "must be a [low, high] pair of fractions of nominal, e.g. [0.4, 0.8]")
        return None
    lo, hi = float(pair[0]), float(pair[1])
    if not 0.0 < lo <= hi <= 2.0:
        r.fail(field, f"needs 0 < low <= high <= 2 (got [{lo:g}, {hi:g}])")
        return None
    return lo, hi


def _read_timer(r: _Reader, sec: dict) -> Timer | None:
    if sec.get("timer") is None:  # null: no fault timer
        return None
    t = r.item(sec["timer"], "switch.timer", "an object or null")
    if t is None:
        return None
    w = "switch.timer"
    after = r.choice(t, "after_fault", w, AFTER_FAULT)
    retry_off = r.number(t, "retry_off", w)
    if after == "retry" and t.get("retry_off") is None:
        r.fail("switch.timer.retry_off", "is required when the timer retries after a fault")
    retries = r.number(t, "retries", w)
    if retries is not None and retries != math.floor(retries):
        r.fail("switch.timer.retries", f"must be a whole number of retries (got {retries:g})")
        retries = None
    return Timer(
        c=r.number(t, "c", w),
        c_tol=r.number(t, "c_tol", w),
        i_charge=r.number(t, "i_charge", w),
        i_charge_tol=r.number(t, "i_charge_tol", w),
        v_trip=r.number(t, "v_trip", w),
        v_trip_tol=r.number(t, "v_trip_tol", w),
        after_fault=after,
        retry_off=retry_off,
        retries=int(retries) if retries is not None else None,
    )


# the parameter each switch mode needs
_MODE_NEEDS = {"slew": ("dvdt",), "current_limit": ("i_limit",), "power_limit": ("i_limit", "p_limit")}


def _read_switch(r: _Reader, doc: dict) -> Switch | None:
    sec = r.obj(doc, "switch", "")
    if sec is None:
        return None
    w = "switch"
    mode = r.choice(sec, "mode", w, SWITCH_MODES)
    values = {key: r.number(sec, key, w) for key in ("t_on", "dvdt", "i_limit", "i_limit_tol", "p_limit",
                                                       "loop_response", "fast_trip", "fast_trip_delay")}
    if values["fast_trip"] is not None and sec.get("fast_trip_delay") is None:
        r.fail("switch.fast_trip_delay", "is required with a fast-trip threshold (the comparator's delay from "
                                         "its datasheet)")
    gate = _read_gate_drive(r, sec)
    for key in _MODE_NEEDS.get(mode, ()):
        if key == "dvdt" and sec.get("gate") is not None:  # the gate drive sets the slew
            continue
        if sec.get(key) is None:  # absent; a bad value is reported already
            r.fail(f"switch.{key}", f"is required in {mode.replace('_', ' ')} mode")
    if mode != "power_limit":
        values["p_limit"] = None
    foldback = None
    if sec.get("foldback") is not None:
        foldback = _read_foldback(r, sec["foldback"])
        if sec.get("i_limit") is None:
            r.fail("switch.i_limit", "is required with a foldback curve: its tolerance scales the curve's "
                                     "nominal currents")
    return Switch(mode=mode, timer=_read_timer(r, sec), foldback=foldback, gate=gate, **values)


def _read_foldback(r: _Reader, points: Any) -> tuple[tuple[float, float], ...] | None:
    """The foldback curve's [V_DS, I] points: at least two, V_DS from 0 V up and strictly
    increasing, the current positive and not rising with V_DS."""
    field = "switch.foldback"
    pairs = _read_pairs(r, points, field, "[V_DS, current limit]", "V_DS in V and the current limit in A",
                        MAX_SOA_POINTS)
    if pairs is None:
        return None
    parsed: list[tuple[float, float]] = []
    for j, (v, i) in enumerate(pairs):
        pw = f"{field}[{j}]"
        if v < 0.0:
            r.fail(pw, f"V_DS must not be negative (got {v:g} V)")
            return None
        if i <= 0.0:
            r.fail(pw, f"the current limit must be above 0 A (got {i:g} A)")
            return None
        if parsed and v <= parsed[-1][0]:
            r.fail(pw, f"V_DS must increase from point to point ({v:g} V follows {parsed[-1][0]:g} V)")
            return None
        if parsed and i > parsed[-1][1]:
            r.fail(pw, f"the current limit must not rise with V_DS ({i:g} A follows {parsed[-1][1]:g} A)")
            return None
        parsed.append((v, i))
    return tuple(parsed)


# what each gate drive needs
_DRIVE_NEEDS = {"current": ("i_gate",), "voltage": ("v_drive", "r_gate")}


def _read_gate_drive(r: _Reader, sec: dict) -> GateDrive | None:
    if sec.get("gate") is None:
        return None
    g = r.item(sec["gate"], "switch.gate", "an object or null")
    if g is None:
        return None
    w = "switch.gate"
    drive = r.choice(g, "drive", w, GATE_DRIVES)
    values = {key: r.number(g, key, w) for key in ("i_gate", "v_drive", "r_gate", "c_ext")}
    for key in _DRIVE_NEEDS.get(drive, ()):
        if g.get(key) is None:
            r.fail(f"{w}.{key}", f"is required with a {drive} gate drive")
    if drive == "current":
        values["v_drive"] = values["r_gate"] = None
    elif drive == "voltage":
        values["i_gate"] = None
    return GateDrive(drive=drive, **values)


def _read_fet_gate(r: _Reader, sec: dict) -> FetGate | None:
    if sec.get("gate") is None:
        return None
    g = r.item(sec["gate"], "fet.gate", "an object or null")
    if g is None:
        return None
    w = "fet.gate"
    v = {key: r.number(g, key, w) for key in FIELD_KEYS["fet.gate"]}
    k = v["k"]
    has_gfs = g.get("g_fs") is not None or g.get("i_gfs") is not None
    if g.get("k") is not None and has_gfs:
        r.fail("fet.gate.k", "give either the square-law constant or the transconductance g_fs at i_gfs, not both")
    elif g.get("k") is None:
        if g.get("g_fs") is None or g.get("i_gfs") is None:
            r.fail("fet.gate.g_fs" if g.get("g_fs") is None else "fet.gate.i_gfs",
                   "is required: give the square-law constant k, or g_fs with the drain current i_gfs it is "
                   "stated at")
        elif v["g_fs"] is not None and v["i_gfs"] is not None:
            k = v["g_fs"] ** 2 / (2.0 * v["i_gfs"])  # g_fs = sqrt(2 k I_D) in saturation (square law)
    if v["c_iss"] is not None and v["c_rss"] is not None and v["c_rss"] >= v["c_iss"]:
        r.fail("fet.gate.c_rss", f"must be below the input capacitance ({quantity(v['c_iss'], 'F')}): "
                                 "C_iss = C_gs + C_gd")
    if None in (v["v_th"], k, v["c_iss"], v["c_rss"]):
        return None
    return FetGate(v_th=v["v_th"], k=k, c_iss=v["c_iss"], c_rss=v["c_rss"])


def _read_pairs(r: _Reader, points: Any, field: str, pair: str, units: str,
                most: int) -> list[tuple[float, float]] | None:
    """A list of at least two ``pair`` points (e.g. "[V_DS, I_D]") as floats: every malformed
    point is reported (``units`` says what each number is, e.g. "V_DS in V and I_D in A"); None
    when the list or any point is bad. The caller checks the values and their order."""
    if not isinstance(points, list) or len(points) < 2:
        r.fail(field, f"needs at least two {pair} points")
        return None
    if len(points) > most:
        r.fail(field, f"has {len(points)} points; at most {most} are read")
        return None
    well_formed = True
    for j, p in enumerate(points):
        if not isinstance(p, (list, tuple)) or len(p) != 2:
            r.fail(f"{field}[{j}]", f"must be a {pair} pair")
            well_formed = False
        elif not all(_is_number(q) and magnitude_problem(q) is None for q in p):
            r.fail(f"{field}[{j}]", f"must hold two finite numbers of at most {NUMBER_LARGEST:g}: {units}")
            well_formed = False
    return [(float(a), float(b)) for a, b in points] if well_formed else None


def _read_points(r: _Reader, points: Any, where: str) -> tuple[tuple[float, float], ...] | None:
    """A curve's [V_DS, I_D] points: every malformed point is reported; then the first point that is
    not positive or whose V_DS does not rise (a later one would only repeat the problem). I_D rising
    with V_DS is read (the analysis takes the running minimum, and says so)."""
    field = f"{where}.points"
    pairs = _read_pairs(r, points, field, "[V_DS, I_D]", "V_DS in V and I_D in A", MAX_SOA_POINTS)
    if pairs is None:
        return None
    parsed: list[tuple[float, float]] = []
    for j, (v, i) in enumerate(pairs):
        pw = f"{field}[{j}]"
        if v <= 0.0 or i <= 0.0:
            r.fail(pw, f"V_DS and I_D must be positive, the curves are drawn on log-log axes (got {v:g} V, {i:g} A)")
            return None
        if parsed and v <= parsed[-1][0]:
            r.fail(pw, f"V_DS must increase from point to point ({v:g} V follows {parsed[-1][0]:g} V)")
            return None
        parsed.append((v, i))
    return tuple(parsed)


def _read_curves(r: _Reader, soa: dict) -> tuple[SoaCurve, ...] | None:
    w = "fet.soa.curves"
    curves = soa.get("curves")
    if curves is None:
        r.fail(w, "is required: a list of curves, one per pulse width")
        return None
    if not isinstance(curves, list):
        r.fail(w, "must be a list of curves, one per pulse width")
        return None
    if len(curves) > MAX_SOA_CURVES:
        r.fail(w, f"has {len(curves)} curves; at most {MAX_SOA_CURVES} are read")
        return None
    if len(curves) < 2:
        r.fail(w, f"needs at least two pulse widths (got {len(curves)}), so that the allowed time can be "
                  "interpolated between them")
    out: list[SoaCurve] = []
    seen: set[float | None] = set()
    complete = True
    for k, c in enumerate(curves):
        cw = f"{w}[{k}]"
        c = r.item(c, cw)
        if c is None:
            complete = False
            continue
        before = len(r.errors)
        t_pulse = r.number(c, "t_pulse", cw)
        if len(r.errors) == before:
            if t_pulse in seen:
                r.fail(f"{cw}.t_pulse", "repeats the pulse width of another curve: give each pulse width once")
            seen.add(t_pulse)
        points = _read_points(r, c.get("points"), cw)
        if len(r.errors) > before:
            complete = False
            continue
        out.append(SoaCurve(t_pulse=t_pulse, points=points))
    if not complete or len(out) < 2:
        return None
    out.sort(key=lambda c: math.inf if c.t_pulse is None else c.t_pulse)
    return tuple(out)


def _read_zth(r: _Reader, sec: dict) -> tuple[tuple[float, float], ...] | None:
    w = "fet.zth"
    zth = sec.get("zth")
    if not isinstance(zth, list) or not zth:
        r.fail(w, "is required: a list of Foster stages {r, tau}" if zth is None else
               "must be a non-empty list of Foster stages {r, tau}")
        return None
    if len(zth) > MAX_FOSTER_STAGES:
        r.fail(w, f"has {len(zth)} Foster stages; at most {MAX_FOSTER_STAGES} are read")
        return None
    stages = []
    for k, s in enumerate(zth):
        s = r.item(s, f"{w}[{k}]", "an object {r, tau}")
        if s is not None:
            stages.append((r.number(s, "r", f"{w}[{k}]"), r.number(s, "tau", f"{w}[{k}]")))
    return tuple(stages)


def _read_zth_points(r: _Reader, points: Any, field: str = "fet.zth_points") -> tuple[tuple[float, float], ...] | None:
    """The [t, Zth] points of a single-pulse Zth curve: every malformed point is reported; then the
    first point that is not positive, not later than the one before, or below it."""
    pairs = _read_pairs(r, points, field, "[t, Zth]", "t in s and Zth in K/W", MAX_ZTH_POINTS)
    if pairs is None:
        return None
    parsed: list[tuple[float, float]] = []
    for j, (t, z) in enumerate(pairs):
        pw = f"{field}[{j}]"
        if t <= 0.0 or z <= 0.0:
            r.fail(pw, f"t and Zth must be positive, the curve is drawn on log-log axes "
                       f"(got {quantity(t, 's')}, {z:g} K/W)")
            return None
        if parsed and t <= parsed[-1][0]:
            r.fail(pw, f"t must increase from point to point ({quantity(t, 's')} follows "
                       f"{quantity(parsed[-1][0], 's')})")
            return None
        if parsed and z < parsed[-1][1]:
            r.fail(pw, f"Zth must not fall as the pulse gets longer ({z:g} K/W follows {parsed[-1][1]:g} K/W): "
                       "a single-pulse Zth curve only rises")
            return None
        parsed.append((t, z))
    return tuple(parsed)


def read_zth_points(points: Any) -> tuple[tuple[float, float], ...]:
    """Validate the points of a single-pulse Zth curve (``fet.zth_points``): [[t s, Zth K/W], ...].

    At least two, positive, t strictly increasing, Zth not falling; raises `DocumentError`
    naming the field (every problem in ``.errors``). Returns the points as float pairs.
    """
    r = _Reader()
    pts = _read_zth_points(r, points)
    r.raise_errors()
    return pts


def _read_fet_section(r: _Reader, doc: dict, t_ambient: float | None) -> Fet | None:
    sec = r.obj(doc, "fet", "")
    if sec is None:
        return None
    w = "fet"
    name = r.text(sec, "name", w)
    tj_max = r.number(sec, "tj_max", w)
    if tj_max is not None and t_ambient is not None and tj_max <= t_ambient:
        r.fail("fet.tj_max", f"must be above the worst-case high ambient temperature ({quantity(t_ambient, 'degC')})")
    values = {key: r.number(sec, key, w) for key in ("vds_max", "id_pulse_max", "rds_on", "rds_on_alpha", "rth_ja",
                                                       "e_avalanche")}
    values.update(_read_rds_spread(r, sec, values["rds_on"]))
    zth = _read_zth(r, sec)
    if sec.get("zth_points") is not None:  # provenance of the stages: checked, not analysed
        _read_zth_points(r, sec["zth_points"])
    soa = r.obj(sec, "soa", w)
    t_case = curves = None
    if soa is not None:
        t_case = r.number(soa, "t_case", "fet.soa")
        if t_case is not None and tj_max is not None and t_case >= tj_max:
            r.fail("fet.soa.t_case", f"must be below the MOSFET maximum junction temperature "
                                     f"({quantity(tj_max, 'degC')}): the curves are measured below it")
        curves = _read_curves(r, soa)
    gate = _read_fet_gate(r, sec)
    return Fet(name=name, tj_max=tj_max, zth=zth, t_case=t_case, curves=curves, gate=gate, **values)


def _read_rds_spread(r: _Reader, sec: dict, rds_on: float | None) -> dict:
    """``rds_on_max`` (at least rds_on), ``rds_on_curve`` (points) and ``count`` (a whole number)."""
    rds_max = r.number(sec, "rds_on_max", "fet")
    if rds_max is not None and rds_on is not None and rds_max < rds_on:
        r.fail("fet.rds_on_max", f"must not be below the typical R_DS(on) ({quantity(rds_on, 'ohm')}): it is the "
                                 "datasheet maximum at 25 \u00b0C")
    count = r.number(sec, "count", "fet")
    if count is not None and count != int(count):
        r.fail("fet.count", f"must be a whole number of FETs (got {count:g})")
        count = None
    curve = _read_rds_curve(r, sec.get("rds_on_curve"))
    return {"rds_on_max": rds_max, "rds_on_curve": curve, "count": int(count) if count is not None else 1}


def _read_rds_curve(r: _Reader, points: Any) -> tuple[tuple[float, float], ...] | None:
    """The [Tj degC, Rds(on)/Rds(on, 25 degC)] points: Tj strictly rising, ratios positive."""
    field = "fet.rds_on_curve"
    if points is None:
        return None
    pairs = _read_pairs(r, points, field, "[T_j, ratio]",
                        "T_j in \u00b0C and R_DS(on) / R_DS(on) at 25 \u00b0C", MAX_RDS_POINTS)
    if pairs is None:
        return None
    parsed: list[tuple[float, float]] = []
    for j, (tj, ratio) in enumerate(pairs):
        pw = f"{field}[{j}]"
        if tj <= ABSOLUTE_ZERO:
            r.fail(pw, f"T_j must be above absolute zero (got {tj:g} \u00b0C)")
            return None
        if ratio <= 0.0:
            r.fail(pw, f"the ratio must be positive (got {ratio:g})")
            return None
        if parsed and tj <= parsed[-1][0]:
            r.fail(pw, f"T_j must increase from point to point ({tj:g} \u00b0C follows {parsed[-1][0]:g} \u00b0C)")
            return None
        parsed.append((tj, ratio))
    return tuple(parsed)


def _read_fet(doc: dict, t_ambient: float | None) -> Fet:
    """The ``fet`` section of ``doc`` on its own (tj_max checked against ``t_ambient`` unless None)."""
    r = _Reader()
    fet = _read_fet_section(r, doc, t_ambient)
    r.raise_errors()
    return fet


def read_fet(fet: Any) -> Fet:
    """Validate a FET on its own (a part library entry: the rail document's ``fet`` section).

    The checks that involve the rest of a rail (tj_max above the ambient) are left to
    `read_rail`; raises `DocumentError` with paths starting at ``fet``.
    """
    return _read_fet({"fet": fet}, t_ambient=None)


def _read_rule_overrides(r: _Reader, src: Any) -> dict[str, float]:
    if src is None:
        return {}
    src = r.item(src, "rules")
    if src is None:
        return {}
    out = {}
    for key in DEFAULT_RULES:
        value = r.number(src, key, "rules")
        if value is not None:
            out[key] = value
    return out


def read_rail(doc: Any, team_rules: dict | None = None) -> Rail:
    """Validate a rail document and return it as a `Rail`.

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
        Naming the first bad field in words and by path; ``.errors`` holds every problem.
    """
    if not isinstance(doc, dict):
        raise DocumentError("document", "must be an object")
    r = _Reader()
    r.known_keys(doc, "")
    if "schema" in doc and doc["schema"] != SCHEMA:
        r.fail("schema", f"unsupported schema {doc['schema']!r}; expected {SCHEMA!r}")
    name = r.text(doc, "name", "")
    env = r.obj(doc, "environment", "")
    t_ambient = r.number(env, "t_ambient", "environment") if env is not None else None
    supply = _read_supply(r, doc)
    path = _read_path(r, doc)
    load = _read_load(r, doc)
    switch = _read_switch(r, doc)
    fet = _read_fet_section(r, doc, t_ambient)
    rules = dict(DEFAULT_RULES)
    for src in (team_rules, doc.get("rules")):
        rules.update(_read_rule_overrides(r, src))
    if "rules" in doc and doc["rules"] is None:
        r.fail("rules", "must be an object")
    if switch is not None and switch.gate is not None and isinstance(doc.get("fet"), dict) \
            and doc["fet"].get("gate") is None:
        r.fail("fet.gate", "is required with a gate drive (switch.gate): the threshold, transconductance and "
                           "capacitances of the FET")
    if load is not None and load.bank is not None and t_ambient is not None:
        for j, g in enumerate(load.bank):
            if group_factor(g, t_ambient) <= 0.0:
                r.fail(f"load.bank[{j}].tempco", f"leaves no capacitance at the ambient {quantity(t_ambient, 'degC')}")
        load = replace(load, c_nom=bank_total(load.bank, t_ambient))
    r.raise_errors()
    return Rail(name=name, supply=supply, path=path, load=load, switch=switch, fet=fet, t_ambient=t_ambient,
                rules=rules)
