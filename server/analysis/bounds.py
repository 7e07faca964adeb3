"""The limits of what railsign reads: where computation breaks, what is merely implausible, how long
texts and lists may be. One table, read by the document reader (:mod:`.document`), so that the API,
the command line and imports refuse the same things with the same words.

Two kinds of limit, kept apart on purpose:

* **Refused** (bad input): a number whose magnitude lies above ``NUMBER_LARGEST``, or outside the
  range of its field in ``COMPUTABLE`` (zero is fine where the field allows it). Beyond it products like C·V² or I²·R·t leave the
  range of double-precision floats and the transient cannot be stepped; a 400-digit integer is
  not even a float. Texts with control characters (NUL and the like: they cannot be stored in
  every database and never belong in a name or a comment), texts longer than their limit, and
  lists longer than theirs (each item costs computation).
* **Accepted with a warning** (computable, only implausible): a value outside the usual range of
  its quantity, for example a 1e30 F capacitor. A computable design is never bad input; the
  warning names the field and the usual range, and the value is analysed as given.

=========================  ===================================================  ==========
what                       limit                                                kind
=========================  ===================================================  ==========
any number                 magnitude at most NUMBER_LARGEST (1e30)              refused
timer charge current       magnitude at most 1e20 A (COMPUTABLE)                refused
timer capacitance          at least 1e-30 F when not 0 (COMPUTABLE)             refused
timer trip voltage         at least 1e-30 V when not 0 (COMPUTABLE)             refused
text of a name             NAME_MAX_LENGTH characters, no control characters    refused
SOA curves                 at most MAX_SOA_CURVES (20)                          refused
points of one SOA curve    at most MAX_SOA_POINTS (100)                         refused
Foster stages (zth)        at most MAX_FOSTER_STAGES (12)                       refused
Zth curve points           at most MAX_ZTH_POINTS (200)                         refused
numbers of a quantity      outside PLAUSIBLE[kind]                              warned
=========================  ===================================================  ==========

Provides :data:`NUMBER_LARGEST`, :data:`NUMBER_SMALLEST`, :func:`magnitude_problem`,
:func:`text_problem`, :data:`NAME_MAX_LENGTH`, :data:`MAX_SOA_CURVES`, :data:`MAX_SOA_POINTS`,
:data:`MAX_FOSTER_STAGES`, :data:`MAX_ZTH_POINTS`, :data:`PLAUSIBLE`, :func:`plausibility_problem`, :func:`plausibility_warnings`.
"""

from __future__ import annotations

import math
import re
from typing import Any

from .units import KIND_SYMBOLS, quantity
from .words import FIELD_TITLES, generic_path

__all__ = ["NUMBER_LARGEST", "NUMBER_SMALLEST", "COMPUTABLE", "magnitude_problem", "CONTROL_CHARACTERS",
           "LINE_CONTROL_CHARACTERS", "text_problem", "NAME_MAX_LENGTH", "MAX_SOA_CURVES", "MAX_SOA_POINTS",
           "MAX_FOSTER_STAGES", "MAX_RETRIES", "MAX_ZTH_POINTS", "PLAUSIBLE", "plausibility_problem",
           "plausibility_warnings"]

NUMBER_LARGEST = 1e30
NUMBER_SMALLEST = 0.0  # a tiny value (1e-300 H) computes as the zero it nearly is
# Fields whose computation breaks inside the general range, (smallest non-zero, largest) magnitude; measured:
# a timer charge current of 1e30 A, or a timer capacitance or trip voltage of 1e-40, divides by zero where the
# timer voltage rounds away.
COMPUTABLE: dict[str, tuple[float, float]] = {
    "switch.timer.i_charge": (NUMBER_SMALLEST, 1e20),
    "switch.timer.c": (1e-30, NUMBER_LARGEST),
    "switch.timer.v_trip": (1e-30, NUMBER_LARGEST),
}

NAME_MAX_LENGTH = 200  # characters of a rail or MOSFET name
MAX_SOA_CURVES = 20
MAX_SOA_POINTS = 100
MAX_FOSTER_STAGES = 12
MAX_RETRIES = 1000  # retries before latching: the pulse train is summed in closed form, the bound keeps it a count
MAX_ZTH_POINTS = 200  # points of a Zth curve (fet.zth_points)

# Characters no text holds: C0 controls but tab, line feed and carriage return, DEL, and lone
# surrogates (not encodable as UTF-8). A one-line text (a name) refuses tab and line breaks too.
CONTROL_CHARACTERS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f\ud800-\udfff]")
LINE_CONTROL_CHARACTERS = re.compile("[\x00-\x1f\x7f\ud800-\udfff]")


def _show(value: float, kind: str | None) -> str:
    if kind in ("degC", "K"):
        return f"{value:g} {KIND_SYMBOLS[kind]}"
    if kind in (None, "ratio", "fraction", "1/K"):
        return f"{value:g}"
    return quantity(value, kind)


def magnitude_problem(value: int | float, path: str = "") -> str | None:
    """What makes a number uncomputable (a sentence naming the bound), or None.

    ``path``: the field's generic path (its own limits in :data:`COMPUTABLE`). Takes ints of any
    size (a 400-digit integer is refused, not converted)."""
    smallest, largest = COMPUTABLE.get(path, (NUMBER_SMALLEST, NUMBER_LARGEST))
    if isinstance(value, int) and not isinstance(value, bool):
        if abs(value) > 10**40:
            return f"is too large: its magnitude must be at most {largest:g}"
        value = float(value)
    if not math.isfinite(value):
        return "must be a finite number (no NaN or infinity)"
    if abs(value) > largest:
        return f"is too large: its magnitude must be at most {largest:g}"
    if smallest > 0.0 and value != 0.0 and abs(value) < smallest:
        return f"is too small: a non-zero value must be at least {smallest:g} in magnitude"
    return None


def text_problem(value: str, *, one_line: bool = True) -> str | None:
    """What makes a text unstorable (control characters), or None."""
    pattern = LINE_CONTROL_CHARACTERS if one_line else CONTROL_CHARACTERS
    found = pattern.search(value)
    if found is None:
        return None
    return f"must not contain control characters (found U+{ord(found.group()):04X} at position {found.start() + 1})"


# The usual range of each quantity (SI; temperatures in degC): outside it a value is computed but
# warned about. Wide on purpose: a warning is for a slip of the prefix (F for µF), not for an unusual part.
PLAUSIBLE: dict[str, tuple[float, float]] = {
    "V": (1e-3, 1e4),
    "A": (1e-9, 1e4),
    "F": (1e-13, 1e3),
    "H": (1e-15, 1.0),
    "ohm": (1e-6, 1e7),
    "s": (1e-12, 1e5),
    "W": (1e-6, 1e6),
    "J": (1e-9, 1e4),
    "K/W": (1e-4, 1e4),
    "degC": (-100.0, 300.0),
    "K": (0.0, 300.0),
    "V/s": (1.0, 1e10),
    "1/K": (0.0, 0.1),
    "ratio": (0.0, 100.0),
    "S": (1e-3, 1e4),
    "A/V2": (1e-3, 1e5),
}


def plausibility_problem(value: float, kind: str | None) -> str | None:
    """The warning for a computable but implausible value (zero is never warned about), or None."""
    usual = PLAUSIBLE.get(kind or "")
    if usual is None or value == 0.0:
        return None
    low, high = usual
    magnitude = value if kind in ("degC", "K") else abs(value)
    if low <= magnitude <= high:
        return None
    return (f"{_show(value, kind)} is outside the usual range ({_show(low, kind)} to {_show(high, kind)}); "
            "it is analysed as given: check the unit prefix")


# the two numbers of a point of a curve: (name, unit kind) each
_PAIRS = {"fet.soa.curves[].points[]": (("V_DS", "V"), ("I_D", "A")),
          "fet.zth_points[]": (("t", "s"), ("Zth", "K/W")),
          "switch.foldback[]": (("V_DS", "V"), ("I_D", "A"))}


def plausibility_warnings(document: dict[str, Any]) -> list[tuple[str, str]]:
    """Every computable but implausible number of a valid rail document (SI, normalised), as
    ``(path, sentence)`` pairs in document order; empty when every value is in its usual range."""
    out: list[tuple[str, str]] = []

    def walk(value: Any, path: str) -> None:
        if isinstance(value, dict):
            for key, item in value.items():
                walk(item, f"{path}.{key}" if path else str(key))
        elif isinstance(value, list):
            generic = generic_path(path)
            pair = _PAIRS.get(generic)
            if pair is not None and len(value) == 2:
                for number, (what, kind) in zip(value, pair):
                    if isinstance(number, (int, float)) and (problem := plausibility_problem(number, kind)):
                        out.append((path, f"{what}: {problem}"))
                return
            for k, item in enumerate(value):
                walk(item, f"{path}[{k}]")
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            words = FIELD_TITLES.get(generic_path(path))
            if words is not None and (problem := plausibility_problem(float(value), words.kind)):
                out.append((path, problem))

    walk(document, "")
    return out
