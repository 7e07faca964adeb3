"""Engineering notation for figures shown to people.

Provides
--------
eng(x, unit, digits=3)
    ``4.70 mF``, ``12.3 A``, ``850 us``: three significant figures and an SI prefix
    (BIPM, "The International System of Units", 9th ed., table 7: SI prefixes), ``u``
    standing for micro so that reports stay plain ASCII.
temp(x)
    A temperature in degC with one decimal: ``85.0 degC``.
"""

from __future__ import annotations

import math

__all__ = ["eng", "temp"]

_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}


def eng(x, unit: str = "", digits: int = 3) -> str:
    """Format a number in engineering notation.

    Parameters
    ----------
    x : float or None
        The value in SI base units; None, NaN and infinities are written as words.
    unit : str
        Unit symbol appended after the prefix ("F", "A", "s", "ohm"...).
    digits : int
        Significant figures (>= 1).

    Returns
    -------
    str
    """
    if x is None:
        return "n/a"
    x = float(x)
    if math.isnan(x):
        return "n/a"
    if math.isinf(x):
        return ("unlimited" if x > 0 else "-unlimited")
    sep = " " if unit else ""
    if x == 0.0:
        return f"{0:.{max(digits - 1, 0)}f}{sep}{unit}"
    e3 = int(math.floor(math.log10(abs(x)) / 3.0) * 3)
    e3 = max(min(e3, 12), -15)
    m = x / 10.0**e3
    # rounding can carry into the next prefix: 999.7 -> 1.00 k
    if abs(float(f"{m:.{digits}g}")) >= 1000.0 and e3 < 12:
        e3 += 3
        m = x / 10.0**e3
    mr = float(f"{m:.{digits}g}")
    ndig = max(digits - 1 - int(math.floor(math.log10(abs(mr)))), 0) if mr != 0 else digits - 1
    return f"{mr:.{ndig}f}{sep}{_PREFIXES[e3]}{unit}"


def temp(x) -> str:
    """Format a temperature, degC, with one decimal (``n/a`` for None or NaN)."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    x = float(x)
    if math.isnan(x):
        return "n/a"
    return f"{x:.1f} degC"
