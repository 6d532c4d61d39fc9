"""SCPI text helpers against the published standard."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from benchlab.instruments.scpi import (STANDARD_ERRORS, describe_error, parse_bool, parse_error_reply,
                                       parse_reading, parse_readings, render, template_fields)


@pytest.mark.parametrize("code, text", [
    # SCPI-1999 Vol. 2, SYSTem:ERRor error/event lists: command, execution, device and query errors (chapter
    # from memory: 21).
    (-102, "Syntax error"),
    (-113, "Undefined header"),
    (-221, "Settings conflict"),
    (-222, "Data out of range"),
    (-224, "Illegal parameter value"),
    (-226, "Lists not same length"),
    (-230, "Data corrupt or stale"),
    (-350, "Queue overflow"),
    (-410, "Query INTERRUPTED"),
    (-420, "Query UNTERMINATED"),
])
def test_standard_error_texts(code, text):
    # Source: SCPI-1999 Vol. 2, SYSTem:ERRor error/event list.
    assert STANDARD_ERRORS[code] == text
    assert describe_error(code) == text


def test_error_classes_fall_back_to_their_hundreds():
    # SCPI-1999 Vol. 2, error/event numbering: -1xx command, -2xx execution, -3xx device-specific, -4xx query errors.
    assert describe_error(-199) == "Command error"
    assert describe_error(-299) == "Execution error"
    assert describe_error(-399) == "Device-specific error"
    assert describe_error(-499) == "Query error"
    # Positive codes belong to the instrument (SCPI-1999 Vol. 2, error/event queue).
    assert describe_error(101) == "Device-specific error"


@pytest.mark.parametrize("reply, expected", [
    ('-222,"Data out of range"', (-222, "Data out of range")),
    ('+0,"No error"', (0, "No error")),          # some instruments send +0 (common practice)
    ('0,"No error"', (0, "No error")),
    ('-113,"Undefined header;VOLTA 1"', (-113, "Undefined header;VOLTA 1")),
    ('-221', (-221, "Settings conflict")),        # no text: the standard's text is used
    # IEEE 488.2 string data: a quote inside is doubled
    ('201,"Output ""A"" overheated"', (201, 'Output "A" overheated')),
])
def test_parse_error_reply(reply, expected):
    assert parse_error_reply(reply) == expected


def test_parse_error_reply_rejects_garbage():
    with pytest.raises(ValueError):
        parse_error_reply("No error")


@pytest.mark.parametrize("text, expected", [
    # SCPI-1999 Vol. 1, numeric data (INF/NINF/NAN; section number from memory: 7.2.1.5): 9.9E37 is +INFinity,
    # -9.9E37 -INFinity, 9.91E37 Not A Number.
    ("9.9E37", math.inf),
    ("+9.90000000E+37", math.inf),
    ("-9.9E37", -math.inf),
    ("1.234E-3", 1.234e-3),
    ("  -0.5\n", -0.5),
    ("+1", 1.0),
])
def test_parse_reading_special_values(text, expected):
    assert parse_reading(text) == expected


def test_parse_reading_not_a_number():
    # SCPI-1999 Vol. 1, numeric data (INF/NINF/NAN; section number from memory: 7.2.1.5): 9.91E37 represents NaN.
    assert math.isnan(parse_reading("9.91E37"))
    assert math.isnan(parse_reading("+9.910000E+37"))


def test_parse_readings_list():
    values = parse_readings("1.0,2.5E-3,9.9E37,9.91E37")
    assert values[:3] == [1.0, 2.5e-3, math.inf]
    assert math.isnan(values[3])
    assert parse_readings("  ") == []
    with pytest.raises(ValueError):
        parse_readings("1.0,abc")


@pytest.mark.parametrize("text, expected", [("1", True), ("0", False), ("ON", True), ("off", False), ("+1", True)])
def test_parse_bool(text, expected):
    # IEEE 488.2 / SCPI-1999 Vol. 1, boolean data: boolean program data ON|OFF|1|0; responses are 0 or 1.
    assert parse_bool(text) is expected


def test_parse_bool_rejects_other_text():
    with pytest.raises(ValueError):
        parse_bool("CV")


def test_templates():
    assert template_fields("VOLT {volts:.6g}") == {"volts"}
    assert template_fields("OUTP ON") == set()
    assert render("VOLT {volts:.6g}", volts=1.25) == "VOLT 1.25"
    assert render("CURR {amps:.6g}", amps=0.0005) == "CURR 0.0005"
    with pytest.raises(ValueError):
        template_fields("VOLT {0}")
    with pytest.raises(ValueError):
        template_fields("VOLT {volts")



@given(st.floats(min_value=-1e6, max_value=1e6, allow_nan=False).filter(lambda v: v == 0 or abs(v) > 1e-30))
def test_six_significant_digits_round_trip(value):
    # Rounding to 6 significant digits leaves a relative error of at most half a unit in the
    # 6th digit, 5e-6 (definition of significant-figure rounding; common practice).
    sent = render("VOLT {volts:.6g}", volts=value).split()[1]
    assert parse_reading(sent) == pytest.approx(value, rel=5e-6, abs=0)


@given(st.integers(min_value=-499, max_value=999),
       st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc"), blacklist_characters='"'), max_size=40))
def test_error_reply_round_trip(code, text):
    parsed_code, parsed_text = parse_error_reply(f'{code:+d},"{text}"')
    assert parsed_code == code
    assert parsed_text == (text or describe_error(code))
