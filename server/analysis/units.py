"""Engineering notation for figures shown to people: the one formatter of pages, reports and the CLI.

Provides
--------
quantity(value, kind, digits=3)
    A value of a quantity kind (the kind names of ``server.units.KINDS``: V, A, F, H, ohm,
    s, W, J, K/W, degC, K, V/s, 1/K, fraction, ratio) as people read it: ``470 µF``,
    ``4.7 mΩ``, ``125.0 °C``, ``5 V/ms``, ``20 %``, ``0.5 %/K``.
eng(x, unit, digits=3)
    Engineering notation with a unit: a kind name (as `quantity`) or any other symbol.
temp(x)
    A temperature in °C with one decimal: ``85.0 °C``.
KIND_SYMBOLS
    The symbol shown for each kind.

Method
------
``digits`` significant figures and an SI prefix from a (atto) to T (tera) (BIPM, "The
International System of Units", 9th ed., table 7), µ (U+00B5) for micro; trailing zeros
dropped; outside a..T the power of ten is written out in steps of three (``1e15 F``). The
rounding is the one of the quantiphy library's ``render(prec=digits - 1)`` (the same
rendering, computed here directly: pages format thousands of numbers, and this package
imports nothing outside numpy and scipy). Slew rates read in V/ms, fractions in %, a
temperature coefficient in %/K, temperatures (and differences) with one decimal.
"""

from __future__ import annotations

import math
from decimal import Decimal

__all__ = ["KIND_SYMBOLS", "eng", "quantity", "temp"]

KIND_SYMBOLS: dict[str, str] = {
    "V": "V", "A": "A", "F": "F", "H": "H", "ohm": "\u03a9", "s": "s", "W": "W", "J": "J", "K/W": "K/W",
    "degC": "\u00b0C", "K": "K", "V/s": "V/ms", "1/K": "%/K", "fraction": "%", "ratio": "", "S": "S", "A/V2": "A/V\u00b2",
}
_PREFIXES = {-18: "a", -15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G",
             12: "T"}
_SYMBOL_KIND = {"ohm": "ohm", "Ohm": "ohm", "\u03a9": "ohm", "degC": "degC", "\u00b0C": "degC"}


def _not_finite(x: float) -> str:
    if math.isnan(x):
        return "n/a"
    return "unlimited" if x > 0 else "-unlimited"


def _engineering(x: float, symbol: str, digits: int) -> str:
    """``digits`` significant figures with an SI prefix, trailing zeros dropped (x finite)."""
    sep = " " if symbol else ""
    if x == 0.0:
        return f"0{sep}{symbol}"
    mantissa, exponent = f"{x:.{max(digits - 1, 0)}e}".split("e")  # rounds once, in decimal
    exp = int(exponent) // 3 * 3
    shifted = float(Decimal(mantissa).scaleb(int(exponent) - exp))  # an exact decimal shift, below 1000
    number = f"{shifted:.{max(digits, 3)}g}"
    if exp in _PREFIXES:
        return f"{number}{sep}{_PREFIXES[exp]}{symbol}"
    return f"{number}e{exp}{sep}{symbol}"


def quantity(value, kind: str, digits: int = 3) -> str:
    """Format a value of a quantity kind for people.

    Parameters
    ----------
    value : float or None
        The value in SI units (temperatures in degC, fractions as fractions). None and NaN
        read ``n/a``, infinities ``unlimited``.
    kind : str
        A key of `KIND_SYMBOLS`.
    digits : int
        Significant figures (>= 1); temperatures get ``digits - 2`` decimals (at least one).

    Returns
    -------
    str
    """
    if value is None:
        return "n/a"
    x = float(value)
    if not math.isfinite(x):
        return _not_finite(x)
    if kind in ("degC", "K"):
        return f"{x:.{max(digits - 2, 1)}f} {KIND_SYMBOLS[kind]}"
    if kind == "fraction":
        return f"{x * 100:.{digits}g} %"
    if kind == "1/K":
        return f"{x * 100:.{digits}g} %/K"
    if kind == "ratio":
        return f"{x:.{digits}g}"
    if kind == "V/s":
        return _engineering(x * 1e-3, "V/ms", digits)
    return _engineering(x, KIND_SYMBOLS[kind], digits)


def eng(x, unit: str = "", digits: int = 3) -> str:
    """Format a number in engineering notation.

    Parameters
    ----------
    x : float or None
        The value in SI units; None, NaN and infinities are written as words.
    unit : str
        A kind name of `quantity` ("F", "ohm", "V/s"...) or any other unit symbol.
    digits : int
        Significant figures (>= 1).

    Returns
    -------
    str
    """
    kind = _SYMBOL_KIND.get(unit, unit)
    if kind in KIND_SYMBOLS:
        return quantity(x, kind, digits)
    if x is None:
        return "n/a"
    x = float(x)
    return _engineering(x, unit, digits) if math.isfinite(x) else _not_finite(x)


def temp(x) -> str:
    """Format a temperature, °C, with one decimal (``n/a`` for None or NaN)."""
    return quantity(x, "degC")
