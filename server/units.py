"""Engineering notation in and out: "680uF", "4.7 mOhm", "50 nH", "1 V/ms" <-> SI floats.

Formatting is the analysis core's (:func:`server.analysis.units.quantity`: "470 µF", "4.7 mΩ",
"125.0 °C", "5 V/ms", "20 %"), so pages, reports and the CLI print the same text. Parsing
accepts what engineers type: u, µ or μ for micro, degC or °C, V/s, V/ms or V/us.

Parsing uses quantiphy (a small, well-kept library made for exactly this: numbers with SI
scale factors and units, as engineers write them), then checks that the unit fits the
quantity asked for. Everything stored and computed is in SI base units.

Provides :func:`parse_quantity`, :func:`format_quantity`, :data:`KINDS` and
:class:`UnitError`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache

from quantiphy import InvalidNumber, Quantity

from server.analysis.bounds import magnitude_problem
from server.analysis.units import quantity

__all__ = ["UnitError", "Kind", "KINDS", "parse_quantity", "format_quantity"]

_PREFIX = {"T": 1e12, "G": 1e9, "M": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6,
           "n": 1e-9, "p": 1e-12, "f": 1e-15}
_OHM = {"ohm", "Ohm", "ohms", "Ohms", "Ω", "Ω"}


class UnitError(ValueError):
    """A value that is not a number with a unit fitting its quantity."""


@dataclass(frozen=True)
class Kind:
    """A physical quantity: its SI unit symbol, the spellings accepted, and the word for it."""

    symbol: str
    spellings: frozenset[str]
    word: str


def _kind(symbol: str, word: str, *spellings: str) -> Kind:
    return Kind(symbol, frozenset({symbol, *spellings}), word)


KINDS: dict[str, Kind] = {
    "V": _kind("V", "voltage", "volt", "volts"),
    "A": _kind("A", "current", "amp", "amps"),
    "F": _kind("F", "capacitance"),
    "H": _kind("H", "inductance"),
    "ohm": _kind("Ω", "resistance", *_OHM),
    "s": _kind("s", "time", "sec"),
    "W": _kind("W", "power"),
    "J": _kind("J", "energy"),
    "K/W": _kind("K/W", "thermal resistance", "°C/W", "degC/W", "C/W"),
    "degC": _kind("°C", "temperature", "degC", "C"),
    "K": _kind("K", "temperature difference", "kelvin", "degC", "°C"),
    "V/s": _kind("V/s", "slew rate"),
    "1/K": _kind("1/K", "temperature coefficient"),
    "fraction": _kind("", "fraction"),
    "ratio": _kind("", "ratio"),
    "S": _kind("S", "transconductance", "A/V", "mho"),
    "A/V2": _kind("A/V²", "square-law constant", "A/V^2", "A/V2", "A/V**2"),
}

# Rates and temperature coefficients carry a scaled denominator that quantiphy leaves alone.
_RATE = re.compile(r"^(?P<num>[^/]*?)\s*V\s*/\s*(?P<den>[a-zµμ]*s)$")
_TEMPCO = re.compile(r"^(?P<num>.*?)\s*(?P<scale>%|ppm|1)?\s*/\s*(K|°C|degC)$")
_TEMPERATURE = re.compile(r"^(?P<num>[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?)\s*(?P<unit>\S*)$")
_TIME_SCALE = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "μs": 1e-6, "ns": 1e-9}


def _number(text: str) -> tuple[float, str]:
    if "," in text:
        raise UnitError(f"'{text}' has a comma: write the decimal point as '.' (1.5, not 1,5) and no thousands "
                        "separator")
    try:
        q = Quantity(text)
    except InvalidNumber:
        raise UnitError(f"'{text}' is not a number (write it like 470uF, 4.7 mOhm or 0.0047)") from None
    return float(q), q.units.strip()


def _apply_prefix(value: float, units: str, kind: Kind) -> tuple[float, str]:
    """quantiphy does not split a prefix that follows an exponent ("1e3 uF"): do it here."""
    if units and units not in kind.spellings and units[0] in _PREFIX and units[1:] in kind.spellings:
        return value * _PREFIX[units[0]], units[1:]
    return value, units


def parse_quantity(value: object, kind: str) -> float:
    """Return ``value`` as an SI float of quantity ``kind`` (a key of :data:`KINDS`).

    Accepts an int or float (already SI) or a string in engineering notation. Raises
    :class:`UnitError` with a sentence for a wrong unit, a non-number, NaN or infinity.
    """
    k = KINDS[kind]
    if isinstance(value, bool) or value is None:
        raise UnitError(f"expected a {k.word}, got {value!r}")
    if isinstance(value, (int, float)):
        if isinstance(value, int) and (problem := magnitude_problem(value)) is not None:
            raise UnitError(f"{problem} (a {k.word} in {k.symbol or 'SI units'})")
        number = float(value)
    elif isinstance(value, str):
        number = _parse_text(value.strip(), kind, k)
    else:
        raise UnitError(f"expected a {k.word} as a number or text like '470uF', got {type(value).__name__}")
    if not math.isfinite(number):
        raise UnitError(f"expected a finite {k.word}, got {value!r}")
    return number


def _parse_text(text: str, kind: str, k: Kind) -> float:
    if not text:
        raise UnitError(f"expected a {k.word}, got an empty text")
    if kind == "V/s" and (m := _RATE.match(text)):
        num, _ = _number(m["num"] or "1")
        den = _TIME_SCALE.get(m["den"])
        if den is None:
            raise UnitError(f"unknown time unit '{m['den']}' in slew rate '{text}' (use V/s, V/ms or V/us)")
        return num / den
    if kind in ("degC", "K"):
        # No scale factors on temperatures: "25 K" is 25 kelvin, not 25 kilo.
        m = _TEMPERATURE.match(text)
        if m is None:
            raise UnitError(f"'{text}' is not a {k.word} (write it like 25, 25 degC or 125 °C)")
        if m["unit"] and m["unit"] not in k.spellings:
            raise UnitError(f"unknown or wrong unit '{m['unit']}' for a {k.word} (expected {k.symbol})")
        return float(m["num"])
    if kind == "1/K" and (m := _TEMPCO.match(text)):
        num, units = _number(m["num"])
        if units:
            raise UnitError(f"'{text}' is not a temperature coefficient (write it like 0.5 %/K or 5000 ppm/K)")
        return num * {"%": 1e-2, "ppm": 1e-6}.get(m["scale"] or "", 1.0)
    number, units = _number(text)
    number, units = _apply_prefix(number, units, k)
    if units == "%" and kind in ("fraction", "ratio"):
        return number / 100.0
    if units and units not in k.spellings:
        expected = k.symbol or "no unit"
        raise UnitError(f"unknown or wrong unit '{_written_unit(text)}' in '{text}' for a {k.word} "
                        f"(expected {expected}, with an optional prefix like m, u or k)")
    return number


def _written_unit(text: str) -> str:
    """The unit as written after the number ("5 furlongs" -> "furlongs"), prefix included: quantiphy takes
    a leading letter for a scale factor ("f" of "furlongs"), which is no help in a message."""
    m = re.match(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*(?P<unit>.*)$", text)
    return m["unit"] if m and m["unit"] else text


@lru_cache(maxsize=65536)
def _format(value: float, kind: str, digits: int) -> str:
    return quantity(value, kind, digits)


def format_quantity(value: float | None, kind: str, digits: int = 3) -> str:
    """Engineering notation for display, as the analysis core writes it: 0.00047, "F" -> "470 µF";
    None -> "-" (an empty cell). One formatter (:func:`server.analysis.units.quantity`), cached."""
    if value is None:
        return "-"
    return _format(float(value), kind, digits)
