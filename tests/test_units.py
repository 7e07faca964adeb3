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
    ("680 uH", "F", "wrong unit 'uH'"),
    ("3 Furlongs", "F", "wrong unit"),
    ("5 furlongs", "F", "wrong unit 'furlongs' in '5 furlongs'"),  # not femto-"urlongs"
    ("5 furlongs", "s", "wrong unit 'furlongs'"),
    ("1,5", "F", "comma: write the decimal point as '.'"),  # not 15
    ("1,5 uF", "F", "comma"),
    ("2,200 uF", "F", "comma"),
    (10**400, "F", r"too large: its magnitude must be at most 1e\+30"),
    (-10**400, "V", "too large"),
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
    (470e-6, "F", "470 \u00b5F"),           # µ (U+00B5, the micro sign) for micro, never u
    (10e-6, "s", "10 \u00b5s"),
    (4.7e-3, "ohm", "4.7 m\u03a9"),          # Ω, never "ohm"
    (12.345, "A", "12.3 A"),
    (50e-9, "H", "50 nH"),
    (0.2, "fraction", "20 %"),
    (0.05, "fraction", "5 %"),
    (125.0, "degC", "125.0 \u00b0C"),        # °C, never degC
    (-40.0, "degC", "-40.0 \u00b0C"),
    (25.0, "K", "25.0 K"),
    (0.005, "1/K", "0.5 %/K"),
    (2000.0, "V/s", "2 V/ms"),              # slew rates in V/ms, never "2 kV/s"
    (6000.0, "V/s", "6 V/ms"),
    (250.0, "V/s", "250 mV/ms"),
    (5e6, "V/s", "5 kV/ms"),
    (1.5, "ratio", "1.5"),
    (0.0, "V", "0 V"),
    (float("inf"), "s", "unlimited"),
    (float("nan"), "A", "n/a"),
    (None, "V", "-"),
])
def test_format(value, kind, text):
    assert format_quantity(value, kind) == text


@pytest.mark.parametrize("value,kind", [(470e-6, "F"), (4.7e-3, "ohm"), (85.0, "degC"), (2000.0, "V/s"),
                                        (0.2, "fraction"), (0.005, "1/K"), (12.345, "A"), (None, "V")])
def test_pages_and_the_analysis_core_write_the_same_text(value, kind):
    from server.analysis.units import eng, quantity, temp

    if value is None:
        assert quantity(value, kind) == eng(value, kind) == "n/a"  # a report says n/a; a page cell shows "-"
        return
    assert format_quantity(value, kind) == quantity(value, kind) == eng(value, kind)
    if kind == "degC":
        assert temp(value) == format_quantity(value, kind) == "85.0 \u00b0C"


@pytest.mark.parametrize("value,kind", [(680e-6, "F"), (4.7e-3, "ohm"), (2.5, "A"), (1e-6, "s"), (3.3e-8, "F"),
                                        (2000.0, "V/s"), (125.0, "degC"), (0.2, "fraction"), (0.005, "1/K")])
def test_format_then_parse_round_trips_to_three_digits(value, kind):
    assert math.isclose(parse_quantity(format_quantity(value, kind), kind), value, rel_tol=5e-3)


@pytest.mark.parametrize("text,kind,value", [
    ("470 \u00b5F", "F", 470e-6), ("470 \u03bcF", "F", 470e-6), ("470 uF", "F", 470e-6),  # µ, Greek mu, u
    ("2 V/ms", "V/s", 2000.0), ("2 V/us", "V/s", 2e6), ("2 V/\u00b5s", "V/s", 2e6), ("5 kV/ms", "V/s", 5e6),
    ("250 mV/ms", "V/s", 250.0), ("2000 V/s", "V/s", 2000.0),
    ("85 degC", "degC", 85.0), ("85 \u00b0C", "degC", 85.0), ("85.0 \u00b0C", "degC", 85.0),
])
def test_parsing_keeps_accepting_every_spelling(text, kind, value):
    assert math.isclose(parse_quantity(text, kind), value, rel_tol=1e-12)


_MICRO = {"u": "\u00b5"}  # quantiphy writes u for micro; our pages write µ


@pytest.mark.parametrize("kind,symbol", [("F", "F"), ("ohm", "\u03a9"), ("A", "A"), ("s", "s"), ("V/s", "V/ms")])
def test_fast_rendering_matches_the_units_library(kind, symbol):
    # quantiphy (a general-purpose library for numbers with SI scale factors) is the outside
    # reference for the rounding and the prefix; slew rates are compared in V/ms.
    from quantiphy import Quantity

    scale = 1e-3 if kind == "V/s" else 1.0
    values = [s * m * 10.0 ** e for e in range(-16, 14) for m in (1.0, 1.234, 4.7, 9.995, 99.96, 999.6)
              for s in (1, -1)] + [0.0]
    with Quantity.prefs(map_sf=_MICRO):
        for digits in (2, 3, 4):
            for v in values:
                expected = Quantity(v * scale, symbol).render(prec=digits - 1)
                assert format_quantity(v, kind, digits) == expected, (v, digits)
