"""Engineering notation in and out. SI prefixes as defined by the BIPM SI Brochure (9th edition)."""

from __future__ import annotations

import math

import pytest

from server.units import UnitError, format_quantity, parse_quantity

PARSED = [
    ("680uF", "F", 680e-6),
    ("2.2 mF", "F", 2.2e-3),
    ("1e3 uF", "F", 1e-3),
    ("470u", "F", 470e-6),
    (0.00047, "F", 470e-6),
    (12, "V", 12.0),
    ("4.7 mOhm", "ohm", 4.7e-3),
    ("4.7mΩ", "ohm", 4.7e-3),
    ("10 ohm", "ohm", 10.0),
    ("50 nH", "H", 50e-9),
    ("10 us", "s", 10e-6),
    ("1 µs", "s", 1e-6),
    ("2 MV/s", "V/s", 2e6),
    ("1 V/ms", "V/s", 1e3),
    ("12 mV/ms", "V/s", 12.0),
    ("5000 ppm/K", "1/K", 5e-3),
    ("0.5 %/K", "1/K", 5e-3),
    ("20%", "fraction", 0.2),
    ("0.2", "fraction", 0.2),
    ("-40 degC", "degC", -40.0),
    ("125 °C", "degC", 125.0),
    ("25 K", "K", 25.0),  # a temperature difference: K is kelvin here, never kilo
    ("2 K/W", "K/W", 2.0),
    ("3A", "A", 3.0),
]


@pytest.mark.parametrize("text,kind,value", PARSED)
def test_parse(text, kind, value):
    assert math.isclose(parse_quantity(text, kind), value, rel_tol=1e-12)


@pytest.mark.parametrize("text,kind,words", [
    ("680 uH", "F", "wrong unit 'H'"),
    ("3 Furlongs", "F", "wrong unit"),
    ("abc", "V", "not a number"),
    ("", "V", "empty"),
    ("nan", "F", "finite"),
    ("inf", "V", "finite"),
    (float("nan"), "V", "finite"),
    (True, "V", "expected a voltage"),
    (None, "A", "expected a current"),
    ("25 kK", "K", "wrong unit"),
    ("1 V/fortnight", "V/s", "unknown"),
])
def test_refused(text, kind, words):
    with pytest.raises(UnitError, match=words):
        parse_quantity(text, kind)


@pytest.mark.parametrize("value,kind,text", [
    (470e-6, "F", "470 uF"),
    (4.7e-3, "ohm", "4.7 mΩ"),
    (12.345, "A", "12.3 A"),
    (50e-9, "H", "50 nH"),
    (0.2, "fraction", "20 %"),
    (125.0, "degC", "125.0 °C"),
    (0.005, "1/K", "0.5 %/K"),
    (None, "V", "-"),
])
def test_format(value, kind, text):
    assert format_quantity(value, kind) == text


@pytest.mark.parametrize("value,kind", [(680e-6, "F"), (4.7e-3, "ohm"), (2.5, "A"), (1e-6, "s"), (3.3e-8, "F")])
def test_format_then_parse_round_trips_to_three_digits(value, kind):
    assert math.isclose(parse_quantity(format_quantity(value, kind), kind), value, rel_tol=5e-3)


@pytest.mark.parametrize("kind,symbol", [("F", "F"), ("ohm", "Ω"), ("A", "A"), ("s", "s"), ("V/s", "V/s")])
def test_fast_rendering_matches_the_units_library(kind, symbol):
    from quantiphy import Quantity

    values = [s * m * 10.0 ** e for e in range(-16, 14) for m in (1.0, 1.234, 4.7, 9.995, 99.96, 999.6)
              for s in (1, -1)] + [0.0]
    for digits in (2, 3, 4):
        for v in values:
            assert format_quantity(v, kind, digits) == Quantity(v, symbol).render(prec=digits - 1), (v, digits)
