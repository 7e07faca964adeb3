"""The board power-up sequence: every rail of a board starting on one time line from shared supplies.

Provides
--------
SCHEMA
    ``"railsign.sequence/1"``, the board sequence document.
read_sequence(doc, rail_documents=None, team_rules=None)
    Validate a sequence document and return a `Sequence` (`BoardSupply`, `SequenceRail`).
analyze_sequence(doc_or_sequence, rail_documents=None, team_rules=None)
    The board start-up at the nominal supply and at the supply-low corner, with its checks,
    as a JSON-ready dict (keys in its docstring).
format_sequence_report(result)
    That result as a readable text (the command line's report).
simulate_sequence(seq)
    The coupled time line alone (`Timeline`), full resolution.

The document
------------
``supplies``: the shared supplies, each ``{id, name, v_nom, v_min, r_source, l_source?,
i_max?, i_limit?, c_bus?, uvlo?}``: the source voltage at nominal and at the supply-low
corner (V), its output resistance and inductance (ohm, H), what it can deliver (``i_max``,
A, checked), its own current limit (``i_limit``, A: above it the source current is held
there and the bus voltage falls), capacitance on the shared bus (``c_bus``, F) and a list
of UVLO thresholds of parts on it (V). ``rails``: each ``{id, rail | ref, supply,
power_good?, enable}``: its rail document inline (``rail``) or by reference (``ref``,
resolved by the caller through ``rail_documents``), the supply id it draws from, its own
power-good threshold (fraction of its nominal output, optional) and ``enable``: either
``{"at": seconds}`` or ``{"after": rail id, "threshold": fraction, "delay": seconds}`` (the
rail whose power-good output enables it; the threshold a fraction of that rail's nominal
output). ``t_stop`` (s, optional) bounds the simulated time (default `T_STOP_DEFAULT`).

When a rail is on a shared supply, the board supply replaces the rail's own ``supply`` for the
sequence (its source voltages, resistance, inductance, capability); the rail's upstream UVLO
(``supply.uvlo`` with its deglitch time) stays a threshold on that shared supply, and its
``supply.c_in`` sits on the shared bus. The rail's own analysis is unchanged.

Model
-----
Each supply s is an ideal source ``v_src`` (v_nom, or v_min at the supply-low corner) behind
r_source and l_source, its current held at ``i_limit`` where given, feeding a bus with
capacitance c_bus + the rails' c_in; the bus voltage is the supply voltage every rail on it
sees. Each rail is its path resistance, its switch (a resistance R_sw falling log-linearly
from R_OFF to R_DS(on) over t_on from its enable instant, the current capped by the
regulation reference of its mode: current limit, slew c dv/dt + i_load, power limit; the
algebra of `circuit.Circuit.limit_reference`; the switch conducts forward only, so a rail's
output capacitance never holds up the shared bus: conservative for the dip, and what a
reverse-blocking eFuse or ideal-diode stage does), and its output capacitor with ESR in
parallel with its load (a capacitor bank: the groups' C(v) summed, charged as dq = C(v) dv with
C at the start of each step, behind the groups' ESRs in parallel) (`circuit.Circuit.load_current`: nothing below v_on, then resistive,
constant current or constant power; once started the load keeps drawing). R_DS(on) is taken
at the ambient temperature; the fault timer, path inductance and self-heating are left to
each rail's own analysis (the board time line is about currents and voltages).

A rail's power-good output asserts when its output reaches ``threshold x v_nominal``, where
v_nominal is the rail's DC output at the supply's nominal voltage (`Circuit.final_output`):
a fixed voltage, as a comparator with a divider sets it, so at the supply-low corner a
threshold above the low output is never reached and the chain stops there (a failing
check, as on the board). A rail with no threshold of its own or of a rail it enables is
read as started when its output comes within 2 % of its final value (common practice, no
source).

Method
------
Backward Euler on the stacked state of every rail and supply at both corners (each corner
its own copy of the board, all advanced together, vectorised over rows): the output
capacitor voltages, the bus voltages and the source currents. In a step the load is
linearised at the start of the step (resistive exactly; constant power explicitly) and the
regulation reference is taken at the start of the step, so each rail's switch current is a
piecewise-linear, non-decreasing function of its bus voltage: the full-on current clipped to
[0, reference].
The bus voltage of each supply is then the root of one monotone scalar equation (source
current - bus capacitor current - sum of the rails' currents = 0), solved by Newton's method
safeguarded by bisection. Kirchhoff's current law and Ohm's law (C. K. Alexander and M. N.
O. Sadiku, "Fundamentals of Electric Circuits", chapters 2-4); backward Euler (E. Hairer and
G. Wanner, "Solving Ordinary Differential Equations II", section IV.3; from memory: first
order, L-stable). The step is accepted when no capacitor or bus voltage changes by more than
`RTOL` of its supply voltage (and no source current by more than `RTOL` of the largest so
far), otherwise shortened; steps land on enable instants, are short (t_on / 50) during
turn-on ramps, and grow by at most 2x. The run ends when every rail that will be enabled is,
its ramp over and every capacitor and bus at rest, or at ``t_stop``. Checked against each
rail's own start-up (`startup.simulate_startup`) and against ngspice
(tests/analysis/test_sequence.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from .bank import bank_curve, effective_capacitance
from .bounds import magnitude_problem
from .checks import FAIL, NA, PASS, VERDICTS
from .circuit import NO_LIMIT, R_OFF, circuit_rows
from .document import Rail, read_rail
from .document import _Reader as RailReader
from .errors import DocumentError
from .startup import _time_scale
from .timer import fault_times
from .units import quantity
from .words import generic_path

__all__ = [
    "SCHEMA",
    "T_STOP_DEFAULT",
    "MAX_SEQUENCE_RAILS",
    "MAX_SUPPLIES",
    "RTOL",
    "CORNERS",
    "BoardSupply",
    "SequenceRail",
    "Sequence",
    "Timeline",
    "SEQUENCE_TITLES",
    "SEQUENCE_UNITS",
    "timeline_csv",
    "sequence_title",
    "read_sequence",
    "simulate_sequence",
    "analyze_sequence",
    "format_sequence_report",
]

SCHEMA = "railsign.sequence/1"
T_STOP_DEFAULT = 10.0  # s: the longest time line when the document gives no t_stop
MAX_SEQUENCE_RAILS = 200
MAX_SUPPLIES = 20
MAX_UVLO = 10
MAX_STEPS = 400_000
RTOL = 2e-3  # largest change of a voltage per step, fraction of its supply voltage
R_FLOOR = 1e-9  # ohm: an ideal source (no r, no l) is taken as this resistance
SETTLE = 1e-3  # at rest: each state would move less than this fraction of its scale over its time scale
STARTED = 0.98  # a rail with no power-good threshold has started at 98 % of its final output
DECIMATE = 400  # points kept of each time series (plus the extremes)
CORNERS = (("nominal", "nominal supply"), ("supply_low", "supply-low corner"))

LOAD_NONE, LOAD_RES, LOAD_CC, LOAD_CP = 0, 1, 2, 3
_LOAD_CODES = {"none": LOAD_NONE, "resistive": LOAD_RES, "constant_current": LOAD_CC, "constant_power": LOAD_CP}
MODE_HARD, MODE_SLEW, MODE_LIMIT, MODE_POWER = 0, 1, 2, 3
_MODE_CODES = {"hard": MODE_HARD, "slew": MODE_SLEW, "current_limit": MODE_LIMIT, "power_limit": MODE_POWER}

# ---------------------------------------------------------------------------
# words of the document's fields (list items as "[]", {0} the 1-based item number)

SEQUENCE_TITLES: dict[str, str] = {
    "document": "Sequence document",
    "schema": "Document schema",
    "name": "Sequence name",
    "t_stop": "Simulated time",
    "supplies": "Shared supplies",
    "supplies[]": "Shared supply {0}",
    "supplies[].id": "Shared supply {0} id",
    "supplies[].name": "Shared supply {0} name",
    "supplies[].v_nom": "Shared supply {0} nominal voltage",
    "supplies[].v_min": "Shared supply {0} supply-low voltage",
    "supplies[].r_source": "Shared supply {0} source resistance",
    "supplies[].l_source": "Shared supply {0} source inductance",
    "supplies[].i_max": "Shared supply {0} current capability",
    "supplies[].i_limit": "Shared supply {0} current limit",
    "supplies[].c_bus": "Shared supply {0} bus capacitance",
    "supplies[].uvlo": "Shared supply {0} UVLO thresholds",
    "supplies[].uvlo[]": "Shared supply {0} UVLO threshold {1}",
    "rails": "Rails of the sequence",
    "rails[]": "Sequence rail {0}",
    "rails[].id": "Sequence rail {0} id",
    "rails[].rail": "Sequence rail {0} document",
    "rails[].ref": "Sequence rail {0} reference",
    "rails[].supply": "Sequence rail {0} supply",
    "rails[].power_good": "Sequence rail {0} power-good threshold",
    "rails[].enable": "Sequence rail {0} enable",
    "rails[].enable.at": "Sequence rail {0} enable time",
    "rails[].enable.after": "Sequence rail {0} enabling rail",
    "rails[].enable.threshold": "Sequence rail {0} enabling power-good threshold",
    "rails[].enable.delay": "Sequence rail {0} power-good delay",
}

# the unit of each number of the document (a kind of :func:`server.analysis.units.quantity`); the power-good
# thresholds are fractions of the rail's nominal output
SEQUENCE_UNITS: dict[str, str] = {
    "t_stop": "s", "supplies[].v_nom": "V", "supplies[].v_min": "V", "supplies[].r_source": "ohm",
    "supplies[].l_source": "H", "supplies[].i_max": "A", "supplies[].i_limit": "A", "supplies[].c_bus": "F",
    "supplies[].uvlo": "V", "rails[].enable.at": "s", "rails[].enable.delay": "s",
}

_KEYS = {
    "": ("schema", "name", "supplies", "rails", "t_stop"),
    "supplies[]": ("id", "name", "v_nom", "v_min", "r_source", "l_source", "i_max", "i_limit", "c_bus", "uvlo"),
    "rails[]": ("id", "rail", "ref", "supply", "power_good", "enable"),
    "rails[].enable": ("at", "after", "threshold", "delay"),
}


def sequence_title(path: str) -> str:
    """The words of a sequence-document path: ``"rails[2].enable.after"`` -> ``"Sequence rail 3 enabling
    rail"``; a path inside a rail's document reads ``"Sequence rail 3: Supply minimum"``."""
    head, sep, inner = path.partition(".rail.")
    if sep and head.startswith("rails["):
        from .words import field_title
        return f"{sequence_title(head)}: {field_title(inner)}"
    title = SEQUENCE_TITLES.get(generic_path(path))
    if title is None:
        return path
    import re
    numbers = [int(i) + 1 for i in re.findall(r"\[(\d+)\]", path)]
    return title.format(*numbers) if numbers else title


# ---------------------------------------------------------------------------
# the document


@dataclass(frozen=True)
class BoardSupply:
    """A shared supply (SI units); ``uvlo`` the thresholds listed on it."""

    id: str
    name: str
    v_nom: float
    v_min: float
    r_source: float
    l_source: float
    i_max: float | None
    i_limit: float | None
    c_bus: float
    uvlo: tuple[float, ...]


@dataclass(frozen=True)
class SequenceRail:
    """A rail of the sequence: its validated rail (own supply as written), its supply, its enable."""

    id: str
    rail: Rail
    supply: str
    power_good: float | None
    enable_at: float | None
    after: str | None
    threshold: float | None
    delay: float


@dataclass(frozen=True)
class Sequence:
    name: str
    supplies: tuple[BoardSupply, ...]
    rails: tuple[SequenceRail, ...]
    t_stop: float


class _Reader(RailReader):
    """The rail reader's collecting of problems and its text rule, with the sequence's own titles,
    objects, numbers and lists."""

    def fail(self, field: str, reason: str, title: str | None = None) -> None:
        self.errors.append(DocumentError(field, reason, title=title or sequence_title(field)))

    def raise_errors(self) -> None:
        if self.errors:
            first = self.errors[0]
            raise DocumentError(first.field, first.reason, errors=self.errors, title=first.title)

    def obj(self, value: Any, field: str, keys: str) -> dict | None:
        if not isinstance(value, dict):
            self.fail(field, "must be an object")
            return None
        for key in value:
            if key not in _KEYS[keys]:
                self.fail(f"{field}.{key}" if field != "document" else str(key),
                          "is not a known field here (check the spelling)")
        return value

    def number(self, sec: dict, key: str, where: str, *, required: bool = True, above: float | None = None,
               minimum: float | None = None, below: float | None = None, kind: str = "V") -> float | None:
        field = f"{where}.{key}" if where else key
        value = sec.get(key)
        if value is None:
            if required:
                self.fail(field, "is required")
            return None
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(field, "must be a number in SI units")
            return None
        if (problem := magnitude_problem(value)) is not None:
            self.fail(field, problem)
            return None
        value = float(value)
        if above is not None and not value > above:
            self.fail(field, f"must be above {quantity(above, kind) if above else '0'}")
        elif minimum is not None and not value >= minimum:
            self.fail(field, "must not be negative")
        elif below is not None and not value < below:
            self.fail(field, f"must be below {below:g} (a fraction of the rail's nominal output, like 0.9)")
        else:
            return value
        return None

    def items(self, doc: dict, key: str, largest: int) -> list:
        value = doc.get(key)
        if not isinstance(value, list) or not value:
            self.fail(key, "is required: a non-empty list" if value is None else "must be a non-empty list")
            return []
        if len(value) > largest:
            self.fail(key, f"has {len(value)} items; at most {largest} are read")
            return []
        return value


def _read_supplies(r: _Reader, doc: dict) -> dict[str, BoardSupply]:
    out: dict[str, BoardSupply] = {}
    for k, item in enumerate(r.items(doc, "supplies", MAX_SUPPLIES)):
        w = f"supplies[{k}]"
        sec = r.obj(item, w, "supplies[]")
        if sec is None:
            continue
        sid = r.text(sec, "id", w)
        name = r.text(sec, "name", w) if "name" in sec else sid
        v_nom = r.number(sec, "v_nom", w, above=0.0)
        v_min = r.number(sec, "v_min", w, above=0.0)
        if v_nom is not None and v_min is not None and v_min > v_nom:
            r.fail(f"{w}.v_min", f"must not be above the nominal voltage ({quantity(v_nom, 'V')})")
        r_source = r.number(sec, "r_source", w, minimum=0.0)
        l_source = r.number(sec, "l_source", w, required=False, minimum=0.0)
        i_max = r.number(sec, "i_max", w, required=False, above=0.0, kind="A")
        i_limit = r.number(sec, "i_limit", w, required=False, above=0.0, kind="A")
        c_bus = r.number(sec, "c_bus", w, required=False, minimum=0.0)
        uvlo: list[float] = []
        raw = sec.get("uvlo")
        if raw is not None:
            if not isinstance(raw, list) or len(raw) > MAX_UVLO:
                r.fail(f"{w}.uvlo", f"must be a list of at most {MAX_UVLO} thresholds in V")
            else:
                for j in range(len(raw)):
                    v = r.number({"x": raw[j]}, "x", "", above=0.0)
                    if v is None:
                        r.errors.pop()
                        r.fail(f"{w}.uvlo[{j}]", "must be a voltage above 0 V")
                    else:
                        uvlo.append(v)
        if sid is not None and sid in out:
            r.fail(f"{w}.id", f"repeats the id of another supply ({sid!r}): give each supply its own id")
        elif sid is not None and None not in (v_nom, v_min, r_source):
            out[sid] = BoardSupply(sid, name or sid, v_nom, v_min, r_source, l_source or 0.0, i_max, i_limit,
                                   c_bus or 0.0, tuple(uvlo))
    return out


def _read_rail_doc(r: _Reader, sec: dict, w: str, rail_documents, team_rules) -> Rail | None:
    if ("rail" in sec) == ("ref" in sec):
        r.fail(f"{w}.rail", "give either the rail document (rail) or a reference to it (ref), not both"
               if "rail" in sec else "is required: the rail document (rail) or a reference to it (ref)")
        return None
    if "ref" in sec:
        ref = sec["ref"]
        if not isinstance(ref, str) or rail_documents is None or ref not in rail_documents:
            r.fail(f"{w}.ref", f"names no rail known here ({ref!r})")
            return None
        doc, where = rail_documents[ref], f"{w}.rail"
    else:
        doc, where = sec["rail"], f"{w}.rail"
    try:
        return read_rail(doc, team_rules)
    except DocumentError as exc:
        for e in exc.errors:
            r.fail(f"{where}.{e.field}", e.reason, title=f"{sequence_title(w)}: {e.title}")
        return None


def _read_rails(r: _Reader, doc: dict, supplies: dict, rail_documents, team_rules) -> list[SequenceRail]:
    out: list[SequenceRail] = []
    ids: dict[str, int] = {}
    for k, item in enumerate(r.items(doc, "rails", MAX_SEQUENCE_RAILS)):
        w = f"rails[{k}]"
        sec = r.obj(item, w, "rails[]")
        if sec is None:
            continue
        before = len(r.errors)
        rid = r.text(sec, "id", w)
        if rid is not None:
            if rid in ids:
                r.fail(f"{w}.id", f"repeats the id of another rail ({rid!r}): give each rail its own id")
            ids[rid] = k
        rail = _read_rail_doc(r, sec, w, rail_documents, team_rules)
        sid = r.text(sec, "supply", w)
        if sid is not None and sid not in supplies:
            r.fail(f"{w}.supply", f"names no shared supply of this board ({sid!r}); known: "
                                  f"{', '.join(sorted(supplies)) or 'none'}")
        pg = r.number(sec, "power_good", w, required=False, above=0.0, below=1.0, kind="ratio")
        en = r.obj(sec.get("enable"), f"{w}.enable", "rails[].enable") if "enable" in sec else None
        if "enable" not in sec:
            r.fail(f"{w}.enable", "is required: {\"at\": seconds} or {\"after\": rail id, \"threshold\": "
                                  "fraction, \"delay\": seconds}")
        at = after = threshold = None
        delay = 0.0
        if en is not None:
            if ("at" in en) == ("after" in en):
                r.fail(f"{w}.enable", "give either an enable time (at) or the rail whose power-good enables it "
                                      "(after), not both" if "at" in en else
                       "needs an enable time (at) or the rail whose power-good enables it (after)")
            elif "at" in en:
                at = r.number(en, "at", f"{w}.enable", minimum=0.0)
                for key in ("threshold", "delay"):
                    if key in en:
                        r.fail(f"{w}.enable.{key}", "belongs to an enable by another rail's power-good (after)")
            else:
                after = r.text(en, "after", f"{w}.enable")
                threshold = r.number(en, "threshold", f"{w}.enable", above=0.0, below=1.0, kind="ratio")
                delay = r.number(en, "delay", f"{w}.enable", required=False, minimum=0.0) or 0.0
        if len(r.errors) == before:
            out.append(SequenceRail(rid, rail, sid, pg, at, after, threshold, delay))
    for k, item in enumerate(doc.get("rails") if isinstance(doc.get("rails"), list) else []):
        enable = item.get("enable") if isinstance(item, dict) else None
        after = enable.get("after") if isinstance(enable, dict) else None
        if isinstance(after, str) and after not in ids:
            r.fail(f"rails[{k}].enable.after", f"names no rail of this sequence ({after!r})")
    _check_cycles(r, doc, ids)
    return out


def _check_cycles(r: _Reader, doc: dict, ids: dict[str, int]) -> None:
    """An enable chain that comes back to a rail it started from can never start: each cycle is reported
    once, at the rail of the cycle listed first."""
    after: dict[str, str] = {}
    for rid, k in ids.items():
        item = doc["rails"][k]
        target = (item.get("enable") or {}).get("after") if isinstance(item.get("enable"), dict) else None
        if isinstance(target, str) and target in ids:
            after[rid] = target
    reported: set[str] = set()
    for start in ids:
        path, seen = [start], {start}
        while path[-1] in after:
            nxt = after[path[-1]]
            if nxt in seen:
                cycle = path[path.index(nxt):] + [nxt]
                first = min(cycle[:-1], key=lambda x: ids[x])
                if first not in reported:
                    reported.update(cycle)
                    r.fail(f"rails[{ids[first]}].enable.after",
                           "makes a cycle in the enable chain (" + " waits for ".join(cycle) + "): none of "
                           "these rails could ever start")
                break
            path.append(nxt)
            seen.add(nxt)


def read_sequence(doc: Any, rail_documents: dict[str, Any] | None = None,
                  team_rules: dict | None = None) -> Sequence:
    """Validate a board sequence document (schema ``railsign.sequence/1``).

    Parameters
    ----------
    doc : dict
        The sequence document (module docstring), SI units.
    rail_documents : dict, optional
        Rail documents by reference, for rails given as ``{"ref": ...}``.
    team_rules : dict, optional
        The team's rule overrides, passed to each rail's reader.

    Raises
    ------
    DocumentError
        Naming the first bad field in words and by path (``rails[2].enable.after``); ``.errors``
        holds every problem. Nothing is computed.
    """
    if not isinstance(doc, dict):
        raise DocumentError("document", "must be an object", title=sequence_title("document"))
    r = _Reader()
    r.obj(doc, "document", "")
    if "schema" in doc and doc["schema"] != SCHEMA:
        r.fail("schema", f"unsupported schema {doc['schema']!r}; expected {SCHEMA!r}")
    name = r.text(doc, "name", "")
    t_stop = r.number(doc, "t_stop", "", required=False, above=0.0, kind="s")
    supplies = _read_supplies(r, doc)
    rails = _read_rails(r, doc, supplies, rail_documents, team_rules)
    r.raise_errors()
    return Sequence(name=name, supplies=tuple(supplies.values()), rails=tuple(rails),
                    t_stop=t_stop if t_stop is not None else T_STOP_DEFAULT)


# ---------------------------------------------------------------------------
# the rows: every rail and supply of the board at each corner, stacked


def board_rail(rail: Rail, supply: BoardSupply) -> Rail:
    """The rail as it sits on the shared supply: the board's supply replaces its own for the sequence
    (source voltages, resistance, inductance, capability); its UVLO, deglitch and c_in stay."""
    own = rail.supply
    return replace(rail, supply=replace(own, v_nom=supply.v_nom, v_min=supply.v_min,
                                        v_max=max(own.v_max, supply.v_nom), r_source=supply.r_source,
                                        l_source=supply.l_source, i_max=supply.i_max))


@dataclass
class _Rows:
    """Per-rail-row parameters (corner-major: row = corner * K + k) and per-supply-row parameters."""

    sup: np.ndarray       # supply row of each rail row
    c: np.ndarray
    esr: np.ndarray
    r_p: np.ndarray
    rds: np.ndarray
    t_on: np.ndarray
    i_lim: np.ndarray
    mode: np.ndarray
    dvdt: np.ndarray
    p_lim: np.ndarray
    load: np.ndarray
    g_res: np.ndarray
    i_nom: np.ndarray
    p_load: np.ndarray
    v_on: np.ndarray
    t_scale: np.ndarray
    v_nominal: np.ndarray  # the rail's DC output at the supply's nominal voltage (per rail row)
    pg_level: np.ndarray   # V: the highest power-good level read on the rail (nan: none)
    en_at: np.ndarray      # s: enable instant (inf: waits for a power-good)
    after: np.ndarray      # rail row of the enabling rail (-1: none)
    en_level: np.ndarray   # V: the enabling rail's power-good level for this rail
    delay: np.ndarray
    t_fault: np.ndarray    # s: the fault timer's shortest trip time (inf: no timer)
    v_src: np.ndarray      # per supply row
    r_s: np.ndarray
    l_s: np.ndarray
    i_lim_s: np.ndarray
    c_bus: np.ndarray
    c_slew: np.ndarray     # F: the capacitance a slew controller's current is set for (a bank's total at 0 V)
    # per rail row with a capacitor bank: the bank's C(v) as points (V, F); c is its charge-equivalent value
    bank_curves: dict[int, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.slew_rows = np.flatnonzero(self.mode == MODE_SLEW)
        self.power_rows = np.flatnonzero(self.mode == MODE_POWER)
        self.ramp_rows = np.flatnonzero(self.t_on > 0)


def _highest_limit(rail: Rail, i_lim: float) -> float:
    """The rail's current limit for the board time line: under a foldback curve its highest current
    (the curve at low V_DS), never less than the nominal limit: the larger inrush, conservative for the
    supply's current and dip."""
    fold = rail.switch.foldback
    return i_lim if fold is None else max(i_lim, max(i for _, i in fold))


def _board_capacitance(rail: Rail) -> float:
    """The rail's load capacitance as the board time line's scales read it (the step sizes, the test
    of rest): its capacitance, or a bank's charge-equivalent capacitance at the rail's supply
    (`bank.effective_capacitance`). The steps themselves charge a bank on its C(v) (`_capacitance`)."""
    if rail.load.bank is None:
        return rail.load.c_nom
    return effective_capacitance(rail.load.bank, rail.t_ambient, rail.supply.v_nom)


def _rows(seq: Sequence) -> tuple[_Rows, list[Rail]]:
    supplies = {s.id: j for j, s in enumerate(seq.supplies)}
    S, K = len(seq.supplies), len(seq.rails)
    ids = {sr.id: k for k, sr in enumerate(seq.rails)}
    rails = [board_rail(sr.rail, seq.supplies[supplies[sr.supply]]) for sr in seq.rails]
    cz = [circuit_rows(rail, v_s=[rail.supply.v_nom], c=[rail.load.c_nom]) for rail in rails]
    one = lambda f: np.array([f(k) for k in range(K)], dtype=float)  # noqa: E731
    v_nominal = one(lambda k: cz[k].final_output(rails[k].t_ambient)[0][0])
    after = np.array([ids[sr.after] if sr.after is not None else -1 for sr in seq.rails], dtype=int)
    en_level = np.array([sr.threshold * v_nominal[after[k]] if after[k] >= 0 else np.nan
                         for k, sr in enumerate(seq.rails)])
    pg = np.array([sr.power_good * v_nominal[k] if sr.power_good is not None else np.nan
                   for k, sr in enumerate(seq.rails)])
    for k in range(K):
        if after[k] >= 0:
            pg[after[k]] = np.fmax(pg[after[k]], en_level[k])
    c_in = np.zeros(S)
    for k, sr in enumerate(seq.rails):
        c_in[supplies[sr.supply]] += rails[k].supply.c_in or 0.0
    t_scale = one(lambda k: _time_scale(cz[k])[0])
    two = lambda x: np.concatenate([x, x])  # noqa: E731
    sup_k = np.array([supplies[sr.supply] for sr in seq.rails], dtype=int)
    rows = _Rows(
        sup=np.concatenate([sup_k, sup_k + S]),
        c=two(one(lambda k: _board_capacitance(rails[k]))),
        esr=two(one(lambda k: rails[k].load.esr)),
        r_p=two(one(lambda k: rails[k].path.r)),
        # the switch's R_DS(on) as the rail's own circuit reads it: the part's data over temperature, the
        # FETs in parallel
        rds=two(one(lambda k: float(np.ravel(cz[k].rds_on * cz[k].rds_t.ratio(rails[k].t_ambient))[0]))),
        t_on=two(one(lambda k: cz[k].t_on)),
        i_lim=two(one(lambda k: _highest_limit(rails[k], cz[k].i_lim[0]))),
        mode=two(np.array([_MODE_CODES[c.mode] for c in cz], dtype=int)),
        dvdt=two(one(lambda k: cz[k].dvdt)),
        p_lim=two(one(lambda k: cz[k].p_lim)),
        load=two(np.array([_LOAD_CODES[c.load] for c in cz], dtype=int)),
        g_res=two(one(lambda k: 1.0 / cz[k].r_load if cz[k].load == "resistive" else 0.0)),
        i_nom=two(one(lambda k: cz[k].i_nom)),
        p_load=two(one(lambda k: cz[k].p_load)),
        v_on=two(one(lambda k: cz[k].v_on)),
        t_scale=two(t_scale),
        v_nominal=two(v_nominal),
        pg_level=two(pg),
        en_at=two(np.array([sr.enable_at if sr.enable_at is not None else np.inf for sr in seq.rails])),
        after=np.concatenate([after, np.where(after >= 0, after + K, -1)]),
        en_level=two(en_level),
        delay=two(np.array([sr.delay for sr in seq.rails])),
        t_fault=two(one(lambda k: fault_times(rails[k].switch.timer)[0] if rails[k].switch.timer is not None
                        else np.inf)),
        v_src=np.array([s.v_nom for s in seq.supplies] + [s.v_min for s in seq.supplies]),
        r_s=two(np.array([max(s.r_source, R_FLOOR) if s.l_source == 0.0 else s.r_source for s in seq.supplies])),
        l_s=two(np.array([s.l_source for s in seq.supplies])),
        i_lim_s=two(np.array([s.i_limit if s.i_limit is not None else NO_LIMIT for s in seq.supplies])),
        c_bus=two(np.array([s.c_bus for s in seq.supplies]) + c_in),
        c_slew=two(one(lambda k: rails[k].load.c_nom)),
        bank_curves={corner * K + k: bank_curve(rails[k].load.bank, rails[k].t_ambient)
                     for corner in (0, 1) for k in range(K) if rails[k].load.bank is not None},
    )
    return rows, rails


# ---------------------------------------------------------------------------
# one step's algebra


def _load_linear(p: _Rows, started: np.ndarray, v_out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The load as g v + j for the step (the model of `Circuit.load_current`): resistive exactly, constant
    current, constant power explicitly at the step's start; nothing before the load has started."""
    g = np.where(started & (p.load == LOAD_RES), p.g_res, 0.0)
    j = np.where(started & (p.load == LOAD_CC), p.i_nom, 0.0)
    cp = started & (p.load == LOAD_CP)
    j[cp] = p.p_load[cp] / np.maximum(v_out[cp], p.v_on[cp])
    return g, j


def _capacitance(p: _Rows, v_c: np.ndarray) -> np.ndarray:
    """Each row's output capacitance for a step starting at capacitor voltage ``v_c`` (V): its capacitance, or
    its bank's C(v_c) (incremental: dq = C(v) dv, C taken at the step's start; on a DC-bias curve, which does not
    rise with v, that is the larger side: a little more charge and current, the conservative side)."""
    if not p.bank_curves:
        return p.c
    c = p.c.copy()
    for row, (v, c_v) in p.bank_curves.items():
        c[row] = np.interp(v_c[row], v, c_v)
    return c


def _reference(p: _Rows, v_out: np.ndarray, v_in: np.ndarray, i_load: np.ndarray) -> np.ndarray:
    """Current the switch allows while regulating (the algebra of `Circuit.limit_reference`, per row with
    its own mode; a slew rate into the capacitance at 0 V, as the rail's own analysis reads a bank; the FET
    sees the bus voltage behind the rail's path resistance)."""
    ref = p.i_lim.copy()
    slew = p.slew_rows
    if slew.size:
        ref[slew] = np.minimum(ref[slew], p.c_slew[slew] * p.dvdt[slew] + i_load[slew])
    pw = p.power_rows
    if pw.size:
        vd = np.maximum(v_in[pw] - v_out[pw], 0.0)
        disc = vd * vd - 4.0 * p.r_p[pw] * p.p_lim[pw]
        ip = np.where(disc > 0, 2.0 * p.p_lim[pw] / (vd + np.sqrt(np.maximum(disc, 0.0))), NO_LIMIT)
        ref[pw] = np.minimum(ref[pw], ip)
    return ref


def _r_switch(p: _Rows, t: float, t_en: np.ndarray) -> np.ndarray:
    """Switch resistance at ``t``: log-linear from R_OFF to R_DS(on) over t_on from the enable instant."""
    r = p.rds.copy()
    k = p.ramp_rows
    if k.size:
        frac = np.minimum(np.maximum((t - t_en[k]) / p.t_on[k], 0.0), 1.0)
        r[k] = np.exp(math.log(R_OFF) + frac * (np.log(p.rds[k]) - math.log(R_OFF)))
    return r


def _solve_buses(p: _Rows, h: float, v_b0, i_s0, a, b, ref, n_sup: int):
    """The bus voltage of every supply row: the root of source current - bus capacitor current - the sum
    of the rails' currents clip((v - a) b, 0, ref), decreasing in v (``b`` and ``ref`` are 0 for a rail
    not enabled); Newton safeguarded by bisection."""
    span = np.maximum(p.v_src, np.abs(v_b0)) + 1.0
    lo, hi = -span, 2.0 * span
    v = v_b0
    den_s = p.l_s + h * p.r_s
    i0 = (p.l_s * i_s0 + h * p.v_src) / den_s  # the source current at a bus voltage of 0
    gs = h / den_s
    cb = p.c_bus / h
    sup = p.sup

    def f_and_slope(v):
        i_free = i0 - gs * v
        lim = i_free > p.i_lim_s
        i_src = np.where(lim, p.i_lim_s, i_free)
        full = (v[sup] - a) * b
        i_k = np.minimum(np.maximum(full, 0.0), ref)
        d_k = b * ((full > 0.0) & (full < ref))
        f = i_src - cb * (v - v_b0) - np.bincount(sup, i_k, n_sup)
        df = np.where(lim, 0.0, -gs) - cb - np.bincount(sup, d_k, n_sup)
        return f, df, i_src

    for _ in range(100):
        f, df, i_src = f_and_slope(v)
        # converged: the residual within rounding of the currents, or the root pinned to rounding
        done = (np.abs(f) <= 1e-10 * (np.abs(i_src) + 1e-6)) | (np.abs(f / df) <= 1e-12 * span)
        if done.all():
            break
        lo = np.where(f > 0, v, lo)
        hi = np.where(f < 0, v, hi)
        step = v - f / df
        inside = (step > lo) & (step < hi)
        v = np.where(done, v, np.where(inside, step, 0.5 * (lo + hi)))
    return v, i_src


@dataclass
class Timeline:
    """The coupled start-up at both corners, full resolution (rows corner-major).

    ``t`` (steps,), ``v_bus`` and ``i_src`` (steps, 2 S), ``i_rail`` and ``v_out`` (steps, 2 K);
    per rail row ``t_enable``, ``t_pg`` (first power-good; nan: never), ``pg_drop`` (the lowest output
    after power-good where it fell below its level again, nan where it did not), ``v_end``;
    ``finished`` (at rest before t_stop), ``steps``; ``t_trip`` when a rail's fault timer turned it
    off (its time in regulation reached its shortest trip time; nan: never).
    """

    t: np.ndarray
    v_bus: np.ndarray
    i_src: np.ndarray
    i_rail: np.ndarray
    v_out: np.ndarray
    t_enable: np.ndarray
    t_pg: np.ndarray
    pg_drop: np.ndarray
    v_end: np.ndarray
    finished: bool
    steps: int
    rows: _Rows
    t_trip: np.ndarray | None = None  # per rail row: when its fault timer turned it off (nan: never)


def simulate_sequence(seq: Sequence, *, rtol: float = RTOL, max_steps: int = MAX_STEPS) -> Timeline:
    """Integrate the board start-up at the nominal supply and the supply-low corner together.

    Method in the module docstring (backward Euler, bus voltages by safeguarded Newton).
    """
    p, _ = _rows(seq)
    R, S2 = p.c.size, p.v_src.size
    t = 0.0
    v_c = np.zeros(R)
    v_out = np.zeros(R)
    i_k = np.zeros(R)
    started = np.zeros(R, bool)
    v_b = p.v_src.copy()
    i_s = np.zeros(S2)
    t_en = p.en_at.copy()
    t_pg = np.full(R, np.nan)
    pg_drop = np.full(R, np.nan)
    t_min_scale = float(p.t_scale.min())
    h_max = 0.1 * t_min_scale
    h = 1e-3 * t_min_scale
    rec_t, rec_vb, rec_is, rec_ik, rec_vo = [0.0], [v_b.copy()], [i_s.copy()], [i_k.copy()], [v_out.copy()]
    steps, finished = 0, False
    ran = np.zeros(R, bool)  # rails that have conducted in an accepted step
    sup_v = p.v_src[p.sup]
    # the current scale of a supply: its rails' typical charging currents plus their loads
    i_scale = np.bincount(p.sup, p.c * sup_v / p.t_scale + p.i_nom, S2) + 1e-3
    has_l = p.l_s > 0
    has_c = p.c_bus > 0  # a bus without capacitance is algebraic: it may jump
    any_l, any_c = bool(has_l.any()), bool(has_c.any())
    level = p.pg_level
    has_level = ~np.isnan(level)
    chained = p.after >= 0
    t_reg = np.zeros(R)  # time each rail has regulated (its fault timer's count)
    t_trip = np.full(R, np.nan)
    regulating = np.zeros(R, bool)
    while steps < max_steps and t < seq.t_stop:
        on = (t_en <= t * (1 + 1e-12) + 1e-18) & np.isnan(t_trip)
        future = t_en[np.isfinite(t_en) & ~on & np.isnan(t_trip)]
        h = min(h, h_max, seq.t_stop - t)
        if regulating.any():  # land on the instant a regulating rail's timer trips
            h = min(h, max(float(np.min((p.t_fault - t_reg)[regulating])), 1e-15))
        if future.size:
            h = min(h, max(float(future.min()) - t, 1e-15))
        ramping = on & (p.t_on > 0) & (t - t_en < p.t_on)
        if ramping.any():
            h = min(h, float(p.t_on[ramping].min()) / 50.0)
        g, j = _load_linear(p, started, v_out)
        c_step = _capacitance(p, v_c)
        ref = _reference(p, v_out, v_b[p.sup], g * v_out + j)
        ref_on = np.where(on, ref, 0.0)
        while True:
            steps += 1
            t1 = t + h
            kh = h / c_step
            den = 1.0 + g * (p.esr + kh)
            bb = (kh + p.esr) / den
            aa = (v_c - (kh + p.esr) * j) / den
            rt = _r_switch(p, t1, t_en) + p.r_p
            bk = np.where(on, 1.0 / (rt + bb), 0.0)
            v_b1, i_s1 = _solve_buses(p, h, v_b, i_s, aa, bk, ref_on, S2)
            i1 = np.minimum(np.maximum((v_b1[p.sup] - aa) * bk, 0.0), ref_on)
            vo1 = aa + bb * i1
            vc1 = v_c + kh * (i1 - g * vo1 - j)
            change = float(np.max(np.abs(vc1 - v_c) / sup_v))
            if any_c:
                change = max(change, float(np.max(np.abs(v_b1 - v_b)[has_c] / p.v_src[has_c])))
            if any_l:
                change = max(change, float(np.max(np.abs(i_s1 - i_s)[has_l] / i_scale[has_l])))
            if change <= rtol or h <= 1e-15:
                break
            h = max(h * max(0.2, 0.8 * rtol / change), 1e-15)
        # accept
        regulating = on & (ref_on < NO_LIMIT) & ((v_b1[p.sup] - aa) * bk >= ref_on) & (i1 > 0.0)
        t_reg = t_reg + np.where(regulating, h, 0.0)
        trips = regulating & (t_reg >= p.t_fault * (1.0 - 1e-9))
        if trips.any():
            t_trip = np.where(trips, t1, t_trip)
        crossed = np.isnan(t_pg) & (vo1 >= level) & has_level
        if crossed.any():
            frac = np.clip((level - v_out) / np.where(vo1 > v_out, vo1 - v_out, 1.0), 0.0, 1.0)
            t_pg = np.where(crossed, t + frac * h, t_pg)
        dep = chained & np.isinf(t_en)
        if dep.any():
            src = p.after[dep]
            ok = (vo1[src] >= p.en_level[dep]) & (t_en[src] <= t)
            if ok.any():
                frac = np.clip((p.en_level[dep] - v_out[src]) / np.where(vo1[src] > v_out[src],
                                                                        vo1[src] - v_out[src], 1.0), 0.0, 1.0)
                t_en[np.flatnonzero(dep)[ok]] = (t + frac * h + p.delay[dep])[ok]
        fell = ~np.isnan(t_pg) & (vo1 < level) & ~crossed
        pg_drop = np.where(fell, np.fmin(pg_drop, vo1), pg_drop)
        i_cap = i1 - g * vo1 - j
        dv_b, d_is = v_b1 - v_b, np.abs(i_s1 - i_s) / h
        t, v_c, v_out, i_k, v_b, i_s = t1, vc1, vo1, i1, v_b1, i_s1
        started |= v_out > p.v_on
        rec_t.append(t)
        rec_vb.append(v_b)
        rec_is.append(i_s)
        rec_ik.append(i_k)
        rec_vo.append(v_out)
        h = min(2.0 * h, h * 0.9 * rtol / max(change, 1e-12))
        # at rest: every rail that will start has started, its ramp over, and nothing moves
        ran |= on
        if (np.isfinite(t_en) & ~ran).any():  # a rail still to start
            continue
        if ((p.t_on > 0) & (t - t_en < p.t_on))[np.isfinite(t_en)].any():  # a turn-on ramp not over
            continue
        if (np.all(np.abs(i_cap) / p.c * p.t_scale <= SETTLE * sup_v)
                and np.all(np.abs(dv_b) / h * t_min_scale <= SETTLE * p.v_src)
                and np.all(d_is * t_min_scale <= SETTLE * i_scale)):
            finished = True
            break
    return Timeline(t=np.asarray(rec_t), v_bus=np.asarray(rec_vb), i_src=np.asarray(rec_is),
                    i_rail=np.asarray(rec_ik), v_out=np.asarray(rec_vo), t_enable=np.where(np.isfinite(t_en) &
                                                                                         (t_en <= t), t_en, np.nan),
                    t_pg=t_pg, pg_drop=pg_drop, v_end=v_out.copy(), finished=finished, steps=steps, rows=p,
                    t_trip=t_trip)


# ---------------------------------------------------------------------------
# checks and the result


def _longest_below(t: np.ndarray, v: np.ndarray, level: float) -> float:
    """Longest continuous time (s) ``v`` stays below ``level``, linear between samples."""
    below = v < level
    if not below.any():
        return 0.0
    d = np.diff(below.astype(int))
    starts = list(np.flatnonzero(d == 1) + 1)
    ends = list(np.flatnonzero(d == -1) + 1)
    if below[0]:
        starts = [0] + starts
    if below[-1]:
        ends = ends + [t.size - 1]

    def cross(k):  # the crossing between samples k-1 and k
        if k == 0 or k >= t.size:
            return t[min(k, t.size - 1)]
        v0, v1 = v[k - 1], v[k]
        return t[k - 1] + (t[k] - t[k - 1]) * (v0 - level) / (v0 - v1) if v0 != v1 else t[k]

    return float(max(cross(e) - cross(s) for s, e in zip(starts, ends)))


def _decimate(t: np.ndarray, *series: np.ndarray) -> np.ndarray:
    """Sample indices kept for the plots: evenly spread over the steps (the steps crowd where things
    happen) and over time, plus every series' extremes."""
    n = t.size
    keep = set(np.linspace(0, n - 1, min(n, DECIMATE // 2)).astype(int).tolist())
    keep |= set(np.searchsorted(t, np.linspace(t[0], t[-1], DECIMATE // 2)).clip(0, n - 1).tolist())
    for s in series:
        keep |= set(np.argmax(s, axis=0).tolist()) | set(np.argmin(s, axis=0).tolist())
    return np.array(sorted(keep))


def _num(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def _check(cid: str, corner: str, subject: str, title: str, verdict: int, value, limit, unit: str,
           margin, reason: str) -> dict:
    return {"id": cid, "corner": corner, "subject": subject, "title": title, "verdict": VERDICTS[verdict],
            "value": _num(value) if value is not None else None, "limit": _num(limit) if limit is not None else None,
            "unit": unit, "margin": _num(margin) if margin is not None else None, "reason": reason}


def _uvlos(seq: Sequence, supply: BoardSupply) -> list[tuple[float, float | None, str]]:
    """The thresholds on a supply: (level V, deglitch s or None, whose it is in words)."""
    out = [(v, None, "listed on the supply") for v in supply.uvlo]
    for sr in seq.rails:
        if sr.supply == supply.id and sr.rail.supply.uvlo is not None:
            out.append((sr.rail.supply.uvlo, sr.rail.supply.uvlo_filter, f"upstream UVLO of rail {sr.id}"))
    return out


def _supply_checks(seq: Sequence, tl: Timeline, c: int, corner: str, words: str) -> list[dict]:
    S = len(seq.supplies)
    out = []
    for s, sup in enumerate(seq.supplies):
        row = c * S + s
        i = tl.i_src[:, row]
        v = tl.v_bus[:, row]
        k = int(np.argmax(i))
        peak, t_peak = float(i[k]), float(tl.t[k])
        title = f"{sup.name}: peak total current within its capability ({words})"
        if sup.i_max is None:
            out.append(_check("supply_current", corner, sup.id, title, NA, peak, None, "A", None,
                              f"Peak total current {quantity(peak, 'A')} at {quantity(t_peak, 's')}; not checked: "
                              "the supply gives no current capability."))
        else:
            ok = peak <= sup.i_max
            out.append(_check("supply_current", corner, sup.id, title, PASS if ok else FAIL, peak, sup.i_max, "A",
                              sup.i_max / peak if peak > 0 else math.inf,
                              f"Peak total current {quantity(peak, 'A')} at {quantity(t_peak, 's')} against the "
                              f"capability {quantity(sup.i_max, 'A')}" + ("." if ok else
                              ": the rails starting together ask more than the supply can deliver; spread their "
                              "enables or slow their inrush.")))
        kmin = int(np.argmin(v))
        v_low, t_low = float(v[kmin]), float(tl.t[kmin])
        for level, deglitch, whose in _uvlos(seq, sup):
            below = _longest_below(tl.t, v, level)
            held = deglitch is not None and below < deglitch
            ok = v_low >= level or held
            title = f"{sup.name} stays above the UVLO {quantity(level, 'V')} ({whose}; {words})"
            if v_low >= level:
                reason = (f"Lowest supply voltage {quantity(v_low, 'V')} at {quantity(t_low, 's')}, "
                          f"{quantity(v_low - level, 'V')} above the threshold.")
            elif held:
                reason = (f"Dips to {quantity(v_low, 'V')} at {quantity(t_low, 's')}, below the threshold for "
                          f"{quantity(below, 's')}, shorter than its deglitch time {quantity(deglitch, 's')}.")
            else:
                reason = (f"Dips to {quantity(v_low, 'V')} at {quantity(t_low, 's')}, below the threshold "
                          f"{quantity(level, 'V')} for {quantity(below, 's')}: the part behind it drops out. "
                          "Lower the source resistance, add bus capacitance or stagger the inrush.")
            out.append(_check("supply_uvlo", corner, sup.id, title, PASS if ok else FAIL, v_low, level, "V",
                              1.0 if held and v_low < level else v_low / level, reason))
    return out


def _rail_checks(seq: Sequence, tl: Timeline, c: int, corner: str, words: str) -> list[dict]:
    K = len(seq.rails)
    p = tl.rows
    out = []
    order_problems = []
    for k, sr in enumerate(seq.rails):
        row = c * K + k
        level = p.pg_level[row]
        title = f"Rail {sr.id} reaches power-good ({words})"
        if np.isnan(tl.t_enable[row]):
            if p.after[row] >= 0:
                reason = (f"Never enabled: rail {seq.rails[p.after[row] - c * K].id} never reached the power-good "
                          f"level {quantity(p.en_level[row], 'V')} that enables it.")
            else:
                reason = (f"Never enabled: its enable time {quantity(p.en_at[row], 's')} lies after the simulated "
                          f"time ({quantity(seq.t_stop, 's')}).")
            out.append(_check("power_good", corner, sr.id, title, FAIL, None, None, "s", None, reason))
            continue
        if tl.t_trip is not None and not np.isnan(tl.t_trip[row]):
            out.append(_check("power_good", corner, sr.id, title, FAIL, None, None, "s", None,
                              f"Its fault timer turned it off at {quantity(tl.t_trip[row], 's')}: enabled at "
                              f"{quantity(tl.t_enable[row], 's')}, it had regulated for its shortest trip time "
                              f"{quantity(p.t_fault[row], 's')} before reaching power-good. Its retries, if any, "
                              "are in its own analysis."))
            continue
        if not np.isnan(level):
            t_pg = tl.t_pg[row]
            if np.isnan(t_pg):
                out.append(_check("power_good", corner, sr.id, title, FAIL, None, level, "V", None,
                                  f"Its output ends at {quantity(tl.v_end[row], 'V')}, below its power-good level "
                                  f"{quantity(level, 'V')}" + ("" if tl.finished else
                                                                " (the time line stopped at its end)") + "."))
            else:
                out.append(_check("power_good", corner, sr.id, title, PASS, t_pg, None, "s", None,
                                  f"Enabled at {quantity(tl.t_enable[row], 's')}, power-good "
                                  f"({quantity(level, 'V')}) at {quantity(t_pg, 's')}."))
            if not np.isnan(tl.pg_drop[row]):
                order_problems.append(f"rail {sr.id}'s output falls back to {quantity(tl.pg_drop[row], 'V')} "
                                      f"after power-good, below its level {quantity(level, 'V')}")
        else:
            v_end = tl.v_end[row]
            vf = tl.v_out[:, row]
            reached = np.flatnonzero(vf >= STARTED * v_end)
            ok = tl.finished and v_end > p.v_on[row] and v_end > 0
            out.append(_check("power_good", corner, sr.id, title, PASS if ok else FAIL,
                              tl.t[reached[0]] if ok else None, None, "s", None,
                              (f"Enabled at {quantity(tl.t_enable[row], 's')}, {STARTED:.0%} of its final output "
                               f"{quantity(v_end, 'V')} at {quantity(tl.t[reached[0]], 's')} (no power-good "
                               "threshold given; common practice, no source).") if ok else
                              f"Its output ends at {quantity(v_end, 'V')} and has not come to rest."))
        if p.after[row] >= 0:
            src = p.after[row]
            if not np.isnan(tl.t_pg[src]) and tl.t_enable[row] < tl.t_pg[src] - 1e-12:
                order_problems.append(f"rail {sr.id} starts before rail {seq.rails[src - c * K].id} is good")
    title = f"Rails reach power-good in the order of the chain and stay good ({words})"
    out.append(_check("power_good_order", corner, "board", title, FAIL if order_problems else PASS, None, None,
                      "", None, (_sentence("; ".join(order_problems)) + ".") if order_problems else
                      "Every enabling rail is good before the rails it enables start, and stays good."))
    return out


def _sentence(text: str) -> str:
    """The text with its first letter upper case (units keep their case: 10.1 V, not 10.1 v)."""
    return text[:1].upper() + text[1:]


def analyze_sequence(doc: Any, rail_documents: dict[str, Any] | None = None, team_rules: dict | None = None,
                     *, rtol: float = RTOL) -> dict:
    """The board start-up of a sequence document, at the nominal supply and the supply-low corner.

    Parameters
    ----------
    doc : dict or Sequence
        The sequence document (or an already read `Sequence`).
    rail_documents, team_rules
        As for `read_sequence`.

    Returns
    -------
    dict
        JSON-ready: ``schema``, ``name``, ``caution``, ``verdict`` (the worst check), ``checks`` (``id``,
        ``corner``, ``subject``, ``title``, ``verdict``, ``value``, ``limit``, ``unit``, ``margin``
        (value / limit or limit / value: >= 1 passes), ``reason`` in words), ``corners`` (per corner:
        ``supplies`` and ``rails`` figures, ``series`` decimated: ``t``, per supply ``v`` and ``i``, per
        rail ``i`` and ``v_out``; ``finished``, ``steps``) and ``conventions`` (how to read the figures).
    """
    from .engine import CAUTION

    seq = doc if isinstance(doc, Sequence) else read_sequence(doc, rail_documents, team_rules)
    tl = simulate_sequence(seq, rtol=rtol)
    S, K = len(seq.supplies), len(seq.rails)
    checks: list[dict] = []
    corners = []
    for c, (corner, words) in enumerate(CORNERS):
        sr_rows = slice(c * S, (c + 1) * S)
        r_rows = slice(c * K, (c + 1) * K)
        keep = _decimate(tl.t, tl.i_src[:, sr_rows], tl.v_bus[:, sr_rows], tl.i_rail[:, r_rows])
        checks += _supply_checks(seq, tl, c, corner, words)
        checks += _rail_checks(seq, tl, c, corner, words)
        supplies = []
        for s, sup in enumerate(seq.supplies):
            row = c * S + s
            supplies.append({"id": sup.id, "name": sup.name, "v_source": float(tl.rows.v_src[row]),
                             "i_peak": float(tl.i_src[:, row].max()),
                             "t_i_peak": float(tl.t[np.argmax(tl.i_src[:, row])]),
                             "v_min": float(tl.v_bus[:, row].min()),
                             "t_v_min": float(tl.t[np.argmin(tl.v_bus[:, row])]),
                             "i_max": sup.i_max, "uvlo": [u[0] for u in _uvlos(seq, sup)]})
        rails = []
        for k, sr in enumerate(seq.rails):
            row = c * K + k
            rails.append({"id": sr.id, "name": sr.rail.name, "supply": sr.supply,
                          "t_enable": _num(tl.t_enable[row]), "t_power_good": _num(tl.t_pg[row]),
                          "pg_level": _num(tl.rows.pg_level[row]), "i_peak": float(tl.i_rail[:, row].max()),
                          "v_end": float(tl.v_end[row])})
        corners.append({
            "id": corner, "title": words, "finished": tl.finished, "steps": tl.steps,
            "supplies": supplies, "rails": rails,
            "series": {
                "t": tl.t[keep].tolist(),
                "supplies": {sup.id: {"v": tl.v_bus[keep, c * S + s].tolist(), "i": tl.i_src[keep, c * S + s].tolist()}
                             for s, sup in enumerate(seq.supplies)},
                "rails": {sr.id: {"i": tl.i_rail[keep, c * K + k].tolist(), "v_out": tl.v_out[keep, c * K + k].tolist()}
                          for k, sr in enumerate(seq.rails)},
            },
        })
    order = {"fail": 3, "marginal": 2, "pass": 1, "n/a": 0}
    verdict = max((ch["verdict"] for ch in checks), key=order.__getitem__, default="n/a")
    return {
        "schema": "railsign.sequence-result/1",
        "name": seq.name,
        "caution": CAUTION,
        "verdict": verdict,
        "checks": checks,
        "corners": corners,
        "conventions": [
            "One time line per corner: every rail on its shared supply, the supply at its nominal voltage, then "
            "at its supply-low voltage; the board supply replaces each rail's own supply.",
            "Power-good levels are fixed voltages: the threshold times the rail's DC output at the supply's "
            "nominal voltage.",
            "R_DS(on) at the ambient temperature, current limits at their nominal value (a foldback curve at its "
            "highest current); path inductance, self-heating and a gate drive (read as the turn-on ramp) are in "
            "each rail's own analysis.",
            "Switches conduct forward only: a rail's output capacitance does not hold up the shared bus "
            "(conservative for the dip).",
            "A supply's total current is its source current (rails and bus capacitance); a dip is compared raw "
            "with each UVLO unless the rail gives the UVLO's deglitch time.",
            "A rail's fault timer counts its time in regulation and turns it off at its shortest trip time (the "
            "timer's tolerances); a tripped rail stays off in the time line (its retries are in its own "
            "analysis).",
            "A rail with a capacitor bank charges the bank's total C(v) (every group on its DC-bias curve, "
            "summed; dq = C(v) dv with C at the start of each step, the larger side of a falling curve) behind "
            "the groups' ESRs in parallel; the rail's own analysis follows each group as its own branch.",
        ],
    }


def timeline_csv(result: dict) -> str:
    """The time lines of a sequence result as CSV text, one row per computed instant of each corner: the corner in
    words, the time (s), every shared supply's voltage (V) and total current (A), every rail's input current (A)
    and output (V), headed in words with their units. Each corner keeps its own time steps (the integrator's)."""
    import csv
    import io

    corners = result.get("corners", [])
    supplies = [(s["id"], s["name"]) for s in corners[0]["supplies"]] if corners else []
    rails = [(r["id"], r["name"]) for r in corners[0]["rails"]] if corners else []
    header = ["Corner", "Time (s)"]
    header += [f"{name}: voltage (V)" for _, name in supplies] + [f"{name}: current (A)" for _, name in supplies]
    header += [f"Rail {rid} ({name}): input current (A)" for rid, name in rails]
    header += [f"Rail {rid} ({name}): output (V)" for rid, name in rails]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    for corner in corners:
        series = corner["series"]
        columns = [series["supplies"][sid]["v"] for sid, _ in supplies]
        columns += [series["supplies"][sid]["i"] for sid, _ in supplies]
        columns += [series["rails"][rid]["i"] for rid, _ in rails]
        columns += [series["rails"][rid]["v_out"] for rid, _ in rails]
        for k, t in enumerate(series["t"]):
            writer.writerow([corner["title"], repr(float(t))] + [repr(float(col[k])) for col in columns])
    return out.getvalue()


def format_sequence_report(result: dict) -> str:
    """The result of `analyze_sequence` as a readable text: per corner the supplies' peak current and
    lowest voltage, each rail's enable and power-good instants, then every check with its reason."""
    from .engine import CAUTION

    def s_(x):
        return quantity(x, "s") if x is not None else "never"

    lines = [f"Board power-up sequence: {result['name']}", f"Verdict: {result['verdict']}", ""]
    for corner in result["corners"]:
        lines.append(f"At the {corner['title']}" + ("" if corner["finished"] else
                                                     " (the time line stopped before coming to rest)") + ":")
        for sup in corner["supplies"]:
            lines.append(f"  {sup['name']} ({quantity(sup['v_source'], 'V')} source): peak total current "
                         f"{quantity(sup['i_peak'], 'A')} at {quantity(sup['t_i_peak'], 's')}, lowest voltage "
                         f"{quantity(sup['v_min'], 'V')} at {quantity(sup['t_v_min'], 's')}")
        for rail in corner["rails"]:
            pg = (f", power-good at {s_(rail['t_power_good'])}" if rail["pg_level"] is not None else "")
            lines.append(f"  rail {rail['id']} ({rail['name']}, on {rail['supply']}): enabled at "
                         f"{s_(rail['t_enable'])}{pg}, peak input current {quantity(rail['i_peak'], 'A')}, "
                         f"output {quantity(rail['v_end'], 'V')} at the end")
        lines.append("")
    lines.append("Checks:")
    for c in result["checks"]:
        lines.append(f"  [{c['verdict']}] {c['title']}: {c['reason']}")
    lines += ["", "How to read it:"] + [f"  {text}" for text in result["conventions"]] + ["", CAUTION]
    return "\n".join(lines)
