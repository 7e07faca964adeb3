"""Preferred-number series for resistors and capacitors (IEC 60063).

Provides
--------
e_series(name)
    The mantissas of a series in one decade: ``"E3"``, ``"E6"``, ``"E12"``, ``"E24"``.
e12_values()
    The twelve E12 mantissas 1.0 ... 8.2.
values_between(lo, hi, series="E12")
    All values of a series within [lo, hi] (any decades), ascending.
round_to_series(x, series="E12", mode="nearest")
    The series value nearest to ``x`` on a logarithmic scale, or the next one up/down.

Reference: IEC 60063:2015, "Preferred number series for resistors and capacitors", table 1
(E3 to E24, two significant figures). The E3 and E6 series are every fourth and every
second E12 value; E12 is every second E24 value.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["e_series", "e12_values", "values_between", "round_to_series"]

_E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
_SERIES = {
    "E24": _E24,
    "E12": _E24[::2],
    "E6": _E24[::4],
    "E3": _E24[::8],
}


def e_series(name: str = "E12") -> tuple[float, ...]:
    """Mantissas of one decade of an IEC 60063 series.

    Parameters
    ----------
    name : {"E3", "E6", "E12", "E24"}

    Returns
    -------
    tuple of float
        Ascending values in [1, 10).
    """
    try:
        return _SERIES[name.upper()]
    except KeyError:
        raise ValueError(f"series: unknown E-series {name!r}; known: {', '.join(_SERIES)}") from None


def e12_values() -> tuple[float, ...]:
    """The E12 mantissas of IEC 60063: 1.0 1.2 1.5 1.8 2.2 2.7 3.3 3.9 4.7 5.6 6.8 8.2."""
    return e_series("E12")


def _decade_values(series: str, lo_exp: int, hi_exp: int) -> np.ndarray:
    m = np.asarray(e_series(series))
    exps = np.arange(lo_exp, hi_exp + 1)
    # round to two significant figures of the mantissa to keep 4.7e-6 exact-looking
    return np.array([float(f"{v:.1f}e{e}") for e in exps for v in m])


def values_between(lo: float, hi: float, series: str = "E12") -> list[float]:
    """All values of a series between ``lo`` and ``hi`` inclusive.

    Parameters
    ----------
    lo, hi : float
        Bounds in the unit of the component (F, ohm); 0 < lo <= hi < inf.
    series : str

    Returns
    -------
    list of float
        Ascending.
    """
    if not (0 < lo <= hi and math.isfinite(hi)):
        raise ValueError("lo, hi: need 0 < lo <= hi < inf")
    vals = _decade_values(series, math.floor(math.log10(lo)) - 1, math.floor(math.log10(hi)) + 1)
    tol = 1e-12
    return [float(v) for v in vals if lo * (1 - tol) <= v <= hi * (1 + tol)]


def round_to_series(x: float, series: str = "E12", mode: str = "nearest") -> float:
    """Round to a value of an IEC 60063 series.

    Parameters
    ----------
    x : float
        Value to round (> 0), in the component's unit.
    series : str
    mode : {"nearest", "up", "down"}
        ``nearest`` on a logarithmic scale (the series is geometric), or the smallest
        series value >= x, or the largest <= x.

    Returns
    -------
    float
    """
    if not (x > 0 and math.isfinite(x)):
        raise ValueError("x: must be a positive finite number")
    e = math.floor(math.log10(x))
    vals = _decade_values(series, e - 1, e + 1)
    tol = 1e-12
    if mode == "up":
        return float(vals[vals >= x * (1 - tol)][0])
    if mode == "down":
        return float(vals[vals <= x * (1 + tol)][-1])
    if mode != "nearest":
        raise ValueError("mode: must be nearest, up or down")
    return float(vals[np.argmin(np.abs(np.log(vals / x)))])
