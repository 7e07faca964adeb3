"""The rail form: its fields, the document a submitted form makes, and errors placed beside fields.

Pure functions over plain dicts (no HTTP, no database). Field names are paths into the
rail document ("supply.v_min", "switch.timer.c"), so an error the schema reports for a
document path lands beside the field of that path. People read each field's title (from
:data:`server.analysis.words.FIELD_TITLES`); the path is shown small beside it. Values go
to the schema as typed: engineering notation ("680uF", "4.7 mOhm", "5 V/ms") is parsed
there, once, by the units library; a blank field's placeholder says the default the
analysis package fills in.

Provides :class:`FormField`, :func:`titled_field`, :data:`RAIL_SECTIONS`, :func:`rail_fields`,
:func:`document_from_form`, :func:`form_from_document`, :func:`form_value`,
:func:`place_errors`, :func:`compare_rows`, :func:`field_titles`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace
from typing import Any

from server.analysis.bank import DIELECTRIC_WORDS, DIELECTRICS, MAX_BANK_GROUPS
from server.analysis.document import AFTER_FAULT, DEFAULTS, GATE_DRIVES, LOAD_MODELS, SWITCH_MODES
from server.analysis.rules import DEFAULT_RULES
from server.analysis.words import FIELD_TITLES, field_title
from server.schemas.rail import SCHEMA_ID
from server.units import UnitError, format_quantity, parse_quantity

__all__ = ["FormField", "titled_field", "RAIL_SECTIONS", "rail_fields", "document_from_form", "form_from_document",
           "form_value", "place_errors", "compare_rows", "field_titles", "PART_FIELD", "OWN_FET", "points_from_text",
           "points_to_text", "BANK_KEYS", "bank_fields", "bank_rows", "bank_values", "compact_bank", "bank_names",
           "MAX_BANK_GROUPS"]

PART_FIELD = "part"
OWN_FET = "own"


@dataclass(frozen=True)
class FormField:
    name: str                              # the form control's name: a path in the document the form makes
    label: str                             # the title people read (FIELD_TITLES)
    kind: str | None = None                # quantity kind of server.units; None: text or a choice
    required: bool = False
    choices: tuple[str, ...] = ()
    placeholder: str = ""
    hint: str = ""
    modes: tuple[str, ...] = ()            # switch modes that use the field (empty: every mode)
    points: bool = False                   # a list of [a, b] pairs, typed one pair per line
    choice_words: tuple[str, ...] = ()     # the words people read for ``choices`` (empty: the choices)

    @property
    def html_id(self) -> str:
        return "f-" + self.name.replace("[", "-").replace("]", "").replace(".", "-").replace("_", "-")

    @property
    def path(self) -> str:
        """The JSON path, shown small beside the title for whoever writes documents by hand."""
        return self.name


def titled_field(path: str, *, name: str | None = None, required: bool = False, choices: tuple[str, ...] = (),
                 example: str = "", modes: tuple[str, ...] = (), points: bool = False) -> FormField:
    """A form field worded from :data:`server.analysis.words.FIELD_TITLES`.

    ``path`` is the rail-document path (its title, unit kind, hint and default); ``name`` the
    control's name when it differs (the part form names fields from the ``fet`` section).
    The placeholder says what a blank field means: the default of the analysis package
    (``DEFAULTS``), or ``example`` for a field without one.
    """
    words = FIELD_TITLES[path]
    placeholder = f"e.g. {example}" if example else ""
    if path in DEFAULTS and words.kind is not None:
        placeholder = f"{format_quantity(DEFAULTS[path], words.kind)} if blank"
    return FormField(name or path, words.title, words.kind, required, choices, placeholder, words.hint, modes, points)


def _section_title(path: str, note: str = "") -> str:
    return f"{FIELD_TITLES[path].title} ({note})" if note else FIELD_TITLES[path].title


F = titled_field
_LIMITING = ("current_limit", "power_limit")
RAIL_SECTIONS: list[tuple[str, str, list[FormField]]] = [
    ("Rail", "rail", [F("name", required=True, example="VOUT_12V")]),
    (_section_title("supply"), "supply", [
        F("supply.v_min", required=True, example="11.4 V"),
        F("supply.v_nom", required=True, example="12 V"),
        F("supply.v_max", required=True, example="12.6 V"),
        F("supply.r_source"),
        F("supply.l_source"),
        F("supply.i_max"),
        F("supply.uvlo"),
        F("supply.uvlo_filter"),
        F("supply.c_in"),
        F("supply.v_clamp"),
    ]),
    (_section_title("path"), "path", [F("path.r"), F("path.l")]),
    (_section_title("load"), "load", [
        F("load.c_nom", example="680 \u00b5F (or a capacitor bank below)"),
        F("load.c_tol"),
        F("load.esr"),
        F("load.model", choices=LOAD_MODELS, required=True),
        F("load.i_nom"),
        F("load.v_on"),
    ]),
    (_section_title("switch"), "switch", [
        F("switch.mode", choices=SWITCH_MODES, required=True),
        F("switch.t_on", modes=("hard",)),
        F("switch.dvdt", modes=("slew",), example="5 V/ms"),
        F("switch.i_limit", modes=_LIMITING),
        F("switch.i_limit_tol", modes=_LIMITING),
        F("switch.p_limit", modes=("power_limit",)),
        F("switch.loop_response", modes=_LIMITING, example="2 \u00b5s"),
        F("switch.fast_trip", example="30 A"),
        F("switch.fast_trip_delay", example="500 ns"),
        F("switch.foldback", modes=_LIMITING, example="2 V, 5 A / 10 V, 1 A (one pair per line)", points=True),
    ]),
    (_section_title("switch.timer", "leave blank for none"), "timer", [
        F("switch.timer.c", example="100 nF"),
        F("switch.timer.c_tol"),
        F("switch.timer.i_charge", example="10 \u00b5A"),
        F("switch.timer.i_charge_tol"),
        F("switch.timer.v_trip", example="1.2 V"),
        F("switch.timer.v_trip_tol"),
        F("switch.timer.after_fault", choices=AFTER_FAULT),
        F("switch.timer.retry_off"),
        F("switch.timer.retries", example="3"),
    ]),
    (_section_title("switch.gate", "leave blank for none"), "gate", [
        F("switch.gate.drive", choices=GATE_DRIVES),
        F("switch.gate.i_gate", example="10 \u00b5A"),
        F("switch.gate.v_drive", example="22 V"),
        F("switch.gate.r_gate", example="100 k\u03a9"),
        F("switch.gate.c_ext"),
    ]),
    (_section_title("environment"), "environment", [
        F("environment.t_ambient", required=True, example="55 \u00b0C"),
    ]),
    # the rail's number of parallel FETs: the part (library or own) gives one FET's data
    ("MOSFETs of the rail (blank: one)", "fets", [F("fet.count", example="2")]),
    (_section_title("rules", "blank: the team's rule; common practice, not a standard"), "rules",
     [F(f"rules.{name}") for name in DEFAULT_RULES]),
]
del F
_TIMER_VALUES = [f.name for f in RAIL_SECTIONS[5][2] if f.name != "switch.timer.after_fault"]
_GATE_VALUES = [f.name for f in RAIL_SECTIONS[6][2]]
_PAIR_SPLIT = re.compile(r"\s*[,;\t]\s*")


def points_from_text(text: str) -> list[list[str]] | str:
    """The [a, b] pairs of a points field, one pair per line ("2 V, 5 A"; comma, semicolon, tab or
    spaces between the two; blank lines and lines starting with # skipped), as typed (the schema
    parses the units); a line that is not a pair is kept as the text it is, for the reader to refuse
    on its own point."""
    out: list[Any] = []
    for line in text.splitlines():
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        cells = [c for c in (_PAIR_SPLIT.split(line) if _PAIR_SPLIT.search(line) else line.split()) if c]
        out.append(cells if len(cells) == 2 else line)
    return out


def points_to_text(points: Any, kinds: tuple[str, str] = ("V", "A")) -> str:
    """A stored points list as the form shows it, one pair per line, reading back to the same numbers."""
    if not points:
        return ""
    return "\n".join(f"{form_value(a, kinds[0])}, {form_value(b, kinds[1])}" for a, b in points)


# -- the capacitor bank: one row of fields per group, named by the group's document path ------

BANK_KEYS = ("refs", "count", "c_nom", "c_tol", "dielectric", "v_rated", "esr", "dc_bias", "tempco", "derating[0]",
             "derating[1]")
_BANK_KEY = re.compile(r"^load\.bank\[(\d+)\]\.(.+)$")
_BANK_EXAMPLES = {"refs": "C410-C433", "count": "24", "c_nom": "22 \u00b5F", "v_rated": "25 V", "esr": "4 m\u03a9",
                  "dc_bias": "0 V, 1 / 8 V, 0.62 / 16 V, 0.36 (one pair per line)", "tempco": "-0.1 %/K"}
_DERATING_ENDS = ("low", "high")


def bank_fields(k: int) -> list[FormField]:
    """The fields of capacitor group ``k`` (0-based): titles, hints and defaults of ``load.bank[]``."""
    out = []
    for key in BANK_KEYS:
        name = f"load.bank[{k}].{key}"
        if key.startswith("derating"):
            end = _DERATING_ENDS[int(key[-2])]
            words = FIELD_TITLES["load.bank[].derating"]
            out.append(FormField(name, f"{field_title(f'load.bank[{k}].derating')}, {end}", "ratio",
                                 placeholder="e.g. 0.4" if end == "low" else "e.g. 0.8",
                                 hint=f"{end} end, a fraction of nominal; only without a DC-bias curve"
                                 if end == "low" else words.hint))
            continue
        f = titled_field(f"load.bank[].{key}", name=name, example=_BANK_EXAMPLES.get(key, ""),
                         required=key in ("c_nom", "dielectric", "v_rated") or key == "count",
                         choices=DIELECTRICS if key == "dielectric" else (), points=key == "dc_bias")
        out.append(replace(f, label=field_title(name),
                           choice_words=tuple(DIELECTRIC_WORDS[d] for d in DIELECTRICS) if key == "dielectric"
                           else ()))
    return out


def bank_names(values: dict[str, str]) -> list[str]:
    """The names of every bank field the form's values hold rows for, and ``load.bank`` itself."""
    return ["load.bank"] + [f.name for k in range(_bank_size(values)) for f in bank_fields(k)]


def _bank_size(values: dict[str, str]) -> int:
    found = [int(m[1]) for key in values if (m := _BANK_KEY.match(key))]
    return min(max(found) + 1, MAX_BANK_GROUPS + 1) if found else 0


def bank_rows(values: dict[str, str]) -> list[dict[str, str]]:
    """The capacitor groups a form's values give: per row its values by key, rows left wholly blank dropped."""
    rows = []
    for k in range(_bank_size(values)):
        row = {key: values.get(f"load.bank[{k}].{key}", "").strip() for key in BANK_KEYS}
        if any(row.values()):
            rows.append(row)
    return rows


def _bank_form(rows: list[dict[str, str]]) -> dict[str, str]:
    return {f"load.bank[{k}].{key}": value for k, row in enumerate(rows) for key, value in row.items()}


def compact_bank(values: dict[str, str]) -> dict[str, str]:
    """The form's values with the bank's blank rows dropped and the rest numbered from 0, as the
    document numbers them (so that an error on ``load.bank[1]`` lands on the second row shown)."""
    rest = {k: v for k, v in values.items() if not _BANK_KEY.match(k)}
    return rest | _bank_form(bank_rows(values))


def _bank_document(rows: list[dict[str, str]]) -> list[dict[str, Any]]:
    groups = []
    for row in rows:
        group: dict[str, Any] = {}
        for key in ("refs", "count", "c_nom", "c_tol", "dielectric", "v_rated", "esr", "tempco"):
            if row[key]:
                group[key] = row[key]
        if row["dc_bias"]:
            group["dc_bias"] = points_from_text(row["dc_bias"])
        if row["derating[0]"] or row["derating[1]"]:
            group["derating"] = [row["derating[0]"], row["derating[1]"]]
        groups.append(group)
    return groups


def bank_values(groups: Any) -> dict[str, str]:
    """The form's values for a stored bank (``load.bank``), reading back to the same numbers."""
    rows = []
    for g in groups or ():
        derating = g.get("derating") or (None, None)
        rows.append({"refs": g.get("refs") or "", "count": str(g.get("count", "")),
                     "c_nom": form_value(g.get("c_nom"), "F"), "c_tol": form_value(g.get("c_tol"), "fraction"),
                     "dielectric": str(g.get("dielectric") or ""), "v_rated": form_value(g.get("v_rated"), "V"),
                     "esr": form_value(g.get("esr"), "ohm"),
                     "dc_bias": points_to_text(g.get("dc_bias"), ("V", "ratio")),
                     "tempco": form_value(g.get("tempco"), "1/K"),
                     "derating[0]": form_value(derating[0], "ratio"), "derating[1]": form_value(derating[1], "ratio")})
    return _bank_form(rows)


def rail_fields() -> list[FormField]:
    return [f for _, _, fields in RAIL_SECTIONS for f in fields]


def field_titles(fields: list[FormField]) -> dict[str, str]:
    """Field name -> title, for the error summary."""
    return {f.name: f.label for f in fields}


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
    has_gate = any(form.get(name, "").strip() for name in _GATE_VALUES)
    for f in rail_fields():
        raw = form.get(f.name, "").strip()
        if f.name.startswith("switch.timer.") and not has_timer:
            continue
        if f.name.startswith("switch.gate.") and not has_gate:
            continue
        if raw:
            _put(doc, f.name, points_from_text(raw) if f.points else raw)
    rows = bank_rows(form)
    if rows:  # the bank's groups give the load capacitance: its single fields go only where typed
        doc["load"]["bank"] = _bank_document(rows)
    if fet is not None:  # the rail's own FET, with the count this form gives (blank: one)
        doc["fet"] = {k: v for k, v in fet.items() if k != "count"} | doc.get("fet", {})
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
    """The form's values for a stored rail document (a capacitor bank as its rows of fields)."""
    values = {f.name: points_to_text(_get(document, f.name)) if f.points else form_value(_get(document, f.name), f.kind)
              for f in rail_fields()}
    if _get(document, "load.bank"):  # the bank gives tolerance and ESR: the single fields stay blank (0)
        values.update({name: "" for name in ("load.c_tol", "load.esr") if not _get(document, name)})
    return values | bank_values(_get(document, "load.bank"))


def _named(path: str, message: str) -> str:
    """A message for a field without a place of its own: its title first, then its path."""
    title = field_title(path)
    return f"{path}: {message}" if title == path else f"{title} ({path}): {message}"


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
            other.append(_named(path, message) if path else message)
            continue
        if target in aliases:
            target, message = aliases[target], _named(path, message)
        by_field[target] = f"{by_field[target]}; {message}" if target in by_field else message
    return by_field, other


def compare_rows(mine: dict[str, str], theirs: dict[str, str]) -> list[dict[str, Any]]:
    """Side-by-side rows of two versions of the form (typed values against the saved revision)."""
    rows = []
    groups = max(len(bank_rows(mine)), len(bank_rows(theirs)))
    mine, theirs = compact_bank(mine), compact_bank(theirs)
    for f in rail_fields() + [f for k in range(groups) for f in bank_fields(k)]:
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
