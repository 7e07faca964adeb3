"""The rail form: its fields, the document a submitted form makes, and errors placed beside fields.

Pure functions over plain dicts (no HTTP, no database). Field names are paths into the
rail document ("supply.v_min", "switch.timer.c"), so an error the schema reports for a
document path lands beside the field of that path. Values go to the schema as typed:
engineering notation ("680uF", "4.7 mOhm") is parsed there, once, by the units library.

Provides :data:`RAIL_SECTIONS`, :func:`rail_fields`, :func:`document_from_form`,
:func:`form_from_document`, :func:`form_value`, :func:`place_errors`, :func:`compare_rows`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from server.schemas.rail import SCHEMA_ID
from server.units import UnitError, format_quantity, parse_quantity

__all__ = ["FormField", "RAIL_SECTIONS", "rail_fields", "document_from_form", "form_from_document", "form_value",
           "place_errors", "compare_rows", "PART_FIELD", "OWN_FET"]

PART_FIELD = "part"
OWN_FET = "own"


@dataclass(frozen=True)
class FormField:
    name: str                              # path in the rail document
    label: str
    kind: str | None = None                # quantity kind of server.units; None: text or a choice
    required: bool = False
    choices: tuple[str, ...] = ()
    placeholder: str = ""
    hint: str = ""
    modes: tuple[str, ...] = ()            # switch modes that use the field (empty: every mode)

    @property
    def html_id(self) -> str:
        return "f-" + self.name.replace(".", "-").replace("_", "-")


F = FormField
RAIL_SECTIONS: list[tuple[str, str, list[FormField]]] = [
    ("Rail", "rail", [F("name", "Rail name", required=True, placeholder="e.g. VOUT_12V")]),
    ("Supply", "supply", [
        F("supply.v_min", "Lowest supply voltage (V min)", "V", True, placeholder="e.g. 11.4 V"),
        F("supply.v_nom", "Nominal supply voltage (V nom)", "V", True, placeholder="e.g. 12 V"),
        F("supply.v_max", "Highest supply voltage (V max)", "V", True, placeholder="e.g. 12.6 V"),
        F("supply.r_source", "Source resistance", "ohm", placeholder="0 if blank"),
        F("supply.l_source", "Source inductance", "H", placeholder="0 if blank"),
        F("supply.i_max", "Current the supply can deliver (i_max)", "A", hint="optional"),
        F("supply.uvlo", "Upstream undervoltage lockout (UVLO)", "V", hint="optional"),
        F("supply.uvlo_filter", "UVLO deglitch time constant", "s", placeholder="1 us if blank"),
    ]),
    ("Path (traces, connector, sense resistor)", "path", [
        F("path.r", "Path resistance", "ohm", placeholder="0 if blank"),
        F("path.l", "Path inductance", "H", placeholder="0 if blank"),
    ]),
    ("Load", "load", [
        F("load.c_nom", "Load capacitance", "F", True, placeholder="e.g. 680uF"),
        F("load.c_tol", "Capacitance tolerance", "fraction", placeholder="e.g. 20 % or 0.2"),
        F("load.esr", "Capacitor ESR", "ohm", placeholder="0 if blank"),
        F("load.model", "Load model", choices=("none", "resistive", "constant_current", "constant_power"),
          required=True),
        F("load.i_nom", "Load current at V nom", "A", hint="needed unless the model is none"),
        F("load.v_on", "Voltage at which the load starts drawing", "V", hint="needed for constant power"),
    ]),
    ("Switch", "switch", [
        F("switch.mode", "Turn-on mode", choices=("hard", "slew", "current_limit", "power_limit"), required=True),
        F("switch.t_on", "Turn-on time", "s", modes=("hard",), placeholder="0 if blank"),
        F("switch.dvdt", "Output slew rate", "V/s", modes=("slew",), placeholder="e.g. 5 V/ms"),
        F("switch.i_limit", "Current limit", "A", modes=("current_limit", "power_limit")),
        F("switch.i_limit_tol", "Current limit tolerance", "fraction", modes=("current_limit", "power_limit")),
        F("switch.p_limit", "FET power limit", "W", modes=("power_limit",)),
    ]),
    ("Fault timer (leave blank for none)", "timer", [
        F("switch.timer.c", "Timer capacitor", "F", placeholder="e.g. 100 nF"),
        F("switch.timer.c_tol", "Timer capacitor tolerance", "fraction"),
        F("switch.timer.i_charge", "Timer charge current", "A", placeholder="e.g. 10 uA"),
        F("switch.timer.i_charge_tol", "Charge current tolerance", "fraction"),
        F("switch.timer.v_trip", "Timer trip voltage", "V"),
        F("switch.timer.v_trip_tol", "Trip voltage tolerance", "fraction"),
        F("switch.timer.after_fault", "After a fault", choices=("latch", "retry")),
        F("switch.timer.retry_off", "Off time between retries", "s", hint="needed for retry"),
    ]),
    ("Environment", "environment", [
        F("environment.t_ambient", "Worst-case high ambient temperature", "degC", placeholder="25 \u00b0C if blank"),
    ]),
    ("Rule overrides (blank: the team's rule; common practice, not a standard)", "rules", [
        F("rules.tj_headroom", "Junction temperature headroom below tj_max (K)", "K"),
        F("rules.soa_margin", "Start-up SOA margin (ratio)", "ratio"),
        F("rules.fault_margin", "Short-circuit time margin (ratio)", "ratio"),
        F("rules.timer_margin", "Fault timer start-up margin (ratio)", "ratio"),
        F("rules.vds_derating", "V_DS derating (fraction of the rating)", "ratio"),
    ]),
]
_TIMER_VALUES = [f.name for f in RAIL_SECTIONS[5][2] if f.name != "switch.timer.after_fault"]


def rail_fields() -> list[FormField]:
    return [f for _, _, fields in RAIL_SECTIONS for f in fields]


def _put(doc: dict[str, Any], path: str, value: Any) -> None:
    *heads, last = path.split(".")
    node = doc
    for h in heads:
        node = node.setdefault(h, {})
    node[last] = value


def _get(doc: dict[str, Any], path: str) -> Any:
    node: Any = doc
    for h in path.split("."):
        if not isinstance(node, dict):
            return None
        node = node.get(h)
    return node


def document_from_form(form: dict[str, str], fet: dict[str, Any] | None = None) -> dict[str, Any]:
    """The rail document a submitted form describes; blank optional fields are left out.

    Every section is present (so a missing value is reported at its own field); the fault
    timer only when one of its values is given. ``fet``: the rail's own MOSFET, when it
    pins no library part.
    """
    doc: dict[str, Any] = {"schema": SCHEMA_ID, "supply": {}, "path": {}, "load": {}, "switch": {},
                           "environment": {}, "rules": {}}
    has_timer = any(form.get(name, "").strip() for name in _TIMER_VALUES)
    for f in rail_fields():
        raw = form.get(f.name, "").strip()
        if f.name.startswith("switch.timer.") and not has_timer:
            continue
        if raw:
            _put(doc, f.name, raw)
    if fet is not None:
        doc["fet"] = fet
    return doc


def _plain(value: float) -> str:
    text = f"{value:.15g}"
    return text if float(text) == value else repr(value)


def form_value(value: Any, kind: str | None) -> str:
    """A stored value as the form shows it: engineering notation that reads back to exactly this number."""
    if value is None:
        return ""
    if kind is None or isinstance(value, str):
        return str(value)
    value = float(value)
    if kind in ("ratio", "K") or not math.isfinite(value):
        return _plain(value)
    for digits in range(3, 16):
        text = format_quantity(value, kind, digits)
        try:
            if parse_quantity(text, kind) == value:
                return text
        except UnitError:
            break
    return _plain(value)


def form_from_document(document: dict[str, Any]) -> dict[str, str]:
    """The form's values for a stored rail document."""
    return {f.name: form_value(_get(document, f.name), f.kind) for f in rail_fields()}


def place_errors(details: list[dict[str, Any]], field_names: list[str],
                 aliases: dict[str, str] | None = None) -> tuple[dict[str, str], list[str]]:
    """Errors of a service (``[{field, message}]`` with document paths) beside the form's fields.

    An error goes to the field whose name is the longest prefix of its path; ``aliases`` maps
    path prefixes to fields (e.g. "fet" -> "part"). Returns (errors by field, other errors).
    """
    aliases = aliases or {}
    by_field: dict[str, str] = {}
    other: list[str] = []
    names = sorted(set(field_names) | set(aliases), key=len, reverse=True)
    for d in details:
        path = str(d.get("field") or "").removeprefix("document").lstrip(".")
        target = next((n for n in names if path == n or path.startswith(n + ".") or path.startswith(n + "[")),
                      None)
        message = str(d.get("message", ""))
        if target is None:
            other.append(f"{path}: {message}" if path else message)
            continue
        if target in aliases:
            target, message = aliases[target], f"{path}: {message}"
        by_field[target] = f"{by_field[target]}; {message}" if target in by_field else message
    return by_field, other


def compare_rows(mine: dict[str, str], theirs: dict[str, str]) -> list[dict[str, Any]]:
    """Side-by-side rows of two versions of the form (typed values against the saved revision)."""
    rows = []
    for f in rail_fields():
        a, b = mine.get(f.name, "").strip(), theirs.get(f.name, "").strip()
        same = a == b
        if not same and f.kind is not None and a and b:
            try:
                same = parse_quantity(a, f.kind) == parse_quantity(b, f.kind)
            except UnitError:
                same = False
        rows.append({"name": f.name, "label": f.label, "mine": a or "(blank)", "theirs": b or "(blank)",
                     "differs": not same})
    return rows
