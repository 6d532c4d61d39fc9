"""The one quantity parser and SI formatter (benchlab.units).

SI prefixes and unit symbols: BIPM, The International System of Units (SI Brochure), 9th ed. (2019),
table 7 (prefixes; kilo is lower-case 'k') and table 8.
"""

from __future__ import annotations

import pytest

from benchlab.units import format_si, parse_quantity


@pytest.mark.parametrize("text, unit, expected", [
    # SI Brochure table 7: m = 1e-3, u (micro) = 1e-6, k = 1e3, M = 1e6
    ("20m", "A", 0.02), ("20mA", "A", 0.02), ("20 mA", "A", 0.02), ("0.02", "A", 0.02), (0.02, "A", 0.02),
    ("50ms", "s", 0.05), ("12V", "V", 12.0), ("4.7k", "ohm", 4700.0), ("4.7 kohm", "ohm", 4700.0),
    ("10R", "ohm", 10.0), ("250 uA", "A", 250e-6), ("250µA", "A", 250e-6), ("-1e-5", "A", -1e-5),
    ("-10u", "A", -10e-6), ("1 %", "%", 0.01), ("0.02", "%", 0.02), ("25 degC", "degC", 25.0),
    ("-5 °C", "degC", -5.0), ("-5m", "V/K", -5e-3), ("2.5", "K/W", 2.5), ("1.5M", "ohm", 1.5e6), ("3", "", 3.0),
    ("0.8 A/V", "A/V", 0.8), ("40m", "A/V2", 0.04),
])
def test_parse(text, unit, expected):
    assert parse_quantity(text, unit) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("text, unit, words", [
    ("500 mV", "A", r"not in A .*'500 mA'"),          # a unit slip keeps the prefix typed in its hint
    ("12 A", "V", r"not in V .*'12 V'"),
    ("4.7K", "ohm", r"'K' is not an SI prefix"),        # SI Brochure: kilo is 'k'; 'K' is the kelvin
    ("20 mC", "degC", r"not in degC"),                  # no prefix on a temperature
    ("1 m%", "%", r"fraction"),
    ("abc", "A", r"not a quantity"),
    ("1e999", "A", r"finite"), ("nan", "V", r"finite"), ("-inf", "A", r"finite"),
    (float("nan"), "A", r"finite"),
    (True, "A", r"number"),
    ("", "V", r"not a quantity"),
])
def test_refused(text, unit, words):
    with pytest.raises(ValueError, match=words):
        parse_quantity(text, unit)


@pytest.mark.parametrize("value, unit, digits, text", [
    (0.014021, "A", 3, "14 mA"), (0.014021, "A", 4, "14.02 mA"), (0.008085, "A", 3, "8.09 mA"),
    (0.99996, "A", 3, "1 A"),
    (0.0009996, "A", 3, "1 mA"), (999.6, "ohm", 3, "1 kohm"), (4700.0, "ohm", 4, "4.7 kohm"),
    (120e-6, "A", 2, "120 uA"), (-0.02, "A", 3, "-20 mA"), (0.0, "V", 3, "0 V"), (None, "A", 3, "-"),
    (3e-15, "A", 3, "3e-15 A"), (12.0, "V", 6, "12 V"), (1e-12, "A", 3, "1 pA"), (2.5e9, "Hz", 3, "2.5 GHz"),
])
def test_format(value, unit, digits, text):
    assert format_si(value, unit, digits) == text


@pytest.mark.parametrize("value", [3.3e-9, 47e-6, 0.0123, 1.0, 8.2e3, 2.2e6])
def test_format_reads_back(value):
    # what the formatter writes the parser reads as the same value (to the digits written)
    assert parse_quantity(format_si(value, "A", 6), "A") == pytest.approx(value, rel=1e-6)
