"""Engineering notation: parse_value and format_value.

Sources
-------
[SI] BIPM, *The International System of Units (SI)*, 9th edition, 2019, section
     3 "Decimal multiples and sub-multiples of SI units": the prefixes f 1e-15,
     p 1e-12, n 1e-9, µ 1e-6, m 1e-3, k 1e3, M 1e6, G 1e9; prefixes are case
     sensitive (m milli, M mega) and the micro sign is µ.  (Section number from
     memory; the prefix values are the standard ones.)
[RKM] IEC 60062:2016, *Marking codes for resistors and capacitors*, letter and
     digit code: the multiplier letter stands in the decimal point ("4k7" =
     4.7 kohm, "2m2", and "R" for the unit multiplier of resistance, "1R5" =
     1.5 ohm).  From memory.
[SPICE] "meg" for mega (1e6), as in SPICE netlists: Nagel, "SPICE2: A Computer
     Program to Simulate Semiconductor Circuits", UCB/ERL M520, 1975 (from memory).
Expected values are written as Python literals, which are the doubles nearest
to the decimal (IEEE 754), so equality is exact.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopkit.errors import DesignError
from loopkit.units import format_value, parse_value

PARSE_CASES = [
    # text, expected SI value, source
    ("22u", 22e-6, "SI"),
    ("4.7k", 4.7e3, "SI"),
    ("100n", 100e-9, "SI"),
    ("1.5M", 1.5e6, "SI"),
    ("330µ", 330e-6, "SI"),  # micro sign U+00B5
    ("330μ", 330e-6, "SI"),  # Greek mu U+03BC, typed on many keyboards
    ("10p", 10e-12, "SI"),
    ("10f", 10e-15, "SI"),
    ("2.5G", 2.5e9, "SI"),
    ("15m", 15e-3, "SI"),  # m is milli ...
    ("15M", 15e6, "SI"),  # ... and M mega
    ("4.7K", 4.7e3, "common practice, no source: K for kilo on resistor drawings"),
    ("1meg", 1e6, "SPICE"),
    ("1.5Meg", 1.5e6, "SPICE"),
    ("2m2", 2.2e-3, "RKM"),
    ("4k7", 4.7e3, "RKM"),
    ("1R5", 1.5, "RKM"),
    ("0R1", 0.1, "RKM"),
    ("4u7", 4.7e-6, "RKM"),
    ("2M2", 2.2e6, "RKM"),
    ("-4k7", -4.7e3, "RKM"),
    ("22uH", 22e-6, "SI"),
    ("4.7kohm", 4.7e3, "SI"),
    ("4.7kΩ", 4.7e3, "SI"),
    ("4.7k\u2126", 4.7e3, "SI"),  # OHM SIGN U+2126
    ("400kHz", 400e3, "SI"),
    ("1MHz", 1e6, "SI"),
    ("100nF", 100e-9, "SI"),
    ("100nf", 100e-9, "SI"),
    ("3.3V", 3.3, "SI"),
    ("300mA", 0.3, "SI"),
    ("10R", 10.0, "RKM"),
    ("4.7 k", 4.7e3, "SI"),  # blank between number and prefix
    ("  22 uH ", 22e-6, "SI"),
    ("1e3", 1e3, "plain number"),
    ("1.5e-6", 1.5e-6, "plain number"),
    ("2e3k", 2e6, "plain number with prefix"),
    (".5", 0.5, "plain number"),
    ("5.", 5.0, "plain number"),
    ("+3.3", 3.3, "plain number"),
    ("-15", -15.0, "plain number"),
    ("0", 0.0, "plain number"),
]


@pytest.mark.parametrize("text, expected, source", PARSE_CASES, ids=[c[0] for c in PARSE_CASES])
def test_parse(text, expected, source):
    got = parse_value(text)
    assert type(got) is float
    assert got == expected


@pytest.mark.parametrize("value", [22e-6, 3, -2, 0.0, np.float64(4.7e3), np.float32(0.5), np.int64(12)])
def test_numbers_pass_through(value):
    got = parse_value(value, "x")
    assert type(got) is float and got == float(value)


UNIT_CASES = [
    ("22uH", "H", 22e-6),
    ("22u", "H", 22e-6),
    ("22uh", "H", 22e-6),
    ("4.7kohm", "ohm", 4.7e3),
    ("4.7kΩ", "ohm", 4.7e3),
    ("4k7", "ohm", 4.7e3),
    ("1R5", "ohm", 1.5),
    ("1R5", "Ω", 1.5),
    ("10R", "ohm", 10.0),
    ("400kHz", "Hz", 400e3),
    ("400k", "Hz", 400e3),
    ("100nF", "F", 100e-9),
    ("1fF", "F", 1e-15),
    ("1F", "F", 1.0),
    ("3.3V", "V", 3.3),
    ("1.5A", "A", 1.5),
]


@pytest.mark.parametrize("text, unit, expected", UNIT_CASES)
def test_parse_with_expected_unit(text, unit, expected):
    assert parse_value(text, "stage.x", unit) == expected


WRONG_UNIT = [
    ("22uF", "H"),
    ("22uH", "F"),
    ("400kH", "Hz"),  # H is henry, not hertz
    ("10H", "Hz"),
    ("4.7kohm", "F"),
    ("10V", "A"),
    ("3A", "V"),
    ("4.7kHz", "ohm"),
    ("1R5", "H"),  # "1R5" on an inductor means 1.5 uH to some, 1.5 H to others: refused
    ("2R2", "F"),
    ("10R", "H"),
]


@pytest.mark.parametrize("text, unit", WRONG_UNIT)
def test_wrong_unit_is_rejected(text, unit):
    with pytest.raises(DesignError) as err:
        parse_value(text, "stage.inductance", unit)
    msg = str(err.value)
    assert msg.startswith(f"stage.inductance = {text}: ")
    assert unit in msg
    assert err.value.field == "stage.inductance" and err.value.value == text


NONSENSE = [
    "abc",
    "1..2",
    "-",
    "",
    "   ",
    "1e",
    "inf",
    "nan",
    "-inf",
    "1 2",
    "1.2.3",
    "k",
    "0x10",
    "1,5",
    "--1",
    "1kk",
    "1e999",
    "4k7k",
    "1_000",
    "22 u H x",
    "1m2m",
    "µ",
    "R5",
]


@pytest.mark.parametrize("text", NONSENSE)
def test_nonsense_is_rejected_with_field_and_value(text):
    with pytest.raises(DesignError) as err:
        parse_value(text, "stage.fsw", "Hz")
    assert isinstance(err.value, ValueError)
    assert err.value.field == "stage.fsw"
    assert err.value.value == text
    assert str(err.value).startswith(f"stage.fsw = {text}: ")
    assert len(err.value.allowed) > 10  # says what is allowed, not just "invalid"


@pytest.mark.parametrize("value", [math.inf, -math.inf, math.nan, True, None, [1.0], {"a": 1}])
def test_non_numbers_are_rejected(value):
    with pytest.raises(DesignError) as err:
        parse_value(value, "operating.vout")
    assert str(err.value).startswith("operating.vout = ")


def test_error_messages_say_what_is_allowed():
    with pytest.raises(DesignError, match=r"expected e\.g\. 22u, 4\.7k"):
        parse_value("abc", "x")
    with pytest.raises(DesignError, match=r"expected a value in H, not 'F'"):
        parse_value("22uF", "x", "H")
    with pytest.raises(DesignError, match=r"unknown unit 'furlong'"):
        parse_value("3furlong", "x")
    with pytest.raises(DesignError, match=r"is empty"):
        parse_value("", "x")


# ---------------------------------------------------------------- formatting
FORMAT_CASES = [
    # value, unit, digits, ascii_only, text
    (2.2e-5, "H", 3, False, "22µH"),  # as in the CLI and the stage table
    (2.2e-5, "H", 3, True, "22uH"),
    (12.0, "V", 4, True, "12V"),  # CLI corner names: vin=12V load=750mA
    (0.75, "A", 4, True, "750mA"),
    (1.0e-6, "", 3, True, "1u"),
    (49.9e3, "Ω", 4, False, "49.9kΩ"),  # bill of materials, 4 digits
    (4.7e3, "Ω", 3, False, "4.7kΩ"),
    (49.9e3, "Ω", 4, False, "49.9kΩ"),
    (400e3, "Hz", 3, False, "400kHz"),
    (100e-9, "F", 3, False, "100nF"),
    (4.7e-12, "F", 3, False, "4.7pF"),
    (1e-15, "F", 3, False, "1fF"),
    (1.5e6, "", 3, False, "1.5M"),
    (2.5e9, "Hz", 3, False, "2.5GHz"),
    (3.3, "V", 3, False, "3.3V"),
    (-15.0, "V", 3, False, "-15V"),
    (0.3, "A", 3, False, "300mA"),
    (0.0, "V", 3, False, "0V"),
    (999.9999, "", 3, False, "1k"),  # rounds up into the next prefix
    (999.4, "", 3, False, "999"),
    (0.99999, "", 3, False, "1"),
    (123456.0, "", 3, False, "123k"),
    (123456.0, "", 6, False, "123.456k"),
    (15.0, "", 1, False, "20"),  # 1.5 -> 2 (round half to even)
    (1234.5, "", 2, False, "1.2k"),
    (1e-18, "F", 3, False, "1e-18F"),  # below the prefixes
    (1.234e-16, "F", 3, False, "1.23e-16F"),
    (1.5e12, "Hz", 3, False, "1.5e12Hz"),  # beyond G
    (999.5e9, "", 3, False, "1e12"),
    (math.nan, "V", 3, False, "—"),
    (math.inf, "V", 3, True, "-"),
]


@pytest.mark.parametrize("value, unit, digits, ascii_only, text", FORMAT_CASES)
def test_format(value, unit, digits, ascii_only, text):
    assert format_value(value, unit, digits, ascii_only) == text


def test_format_rejects_zero_digits():
    with pytest.raises(ValueError):
        format_value(1.0, "", 0)


finite = st.floats(allow_nan=False, allow_infinity=False).filter(lambda v: v != 0 and abs(v) < 1e307)


@settings(max_examples=800, deadline=None)
@given(
    x=finite,
    digits=st.integers(1, 17),
    unit=st.sampled_from(["", "H", "F", "Hz", "V", "A", "Ω", "ohm"]),
    ascii_only=st.booleans(),
)
def test_format_parse_round_trip_respects_digits(x, digits, unit, ascii_only):
    text = format_value(x, unit, digits, ascii_only)
    # the text reads back as exactly the value rounded to `digits` significant figures
    assert parse_value(text, "f", unit or None) == float(f"{x:.{digits}g}")
    mantissa = text.rstrip("".join(set(unit))).rstrip("fpnuµmkMG").split("e")[0].lstrip("-")
    assert len(mantissa.replace(".", "").strip("0")) <= digits  # no more figures than asked for
    assert not ("." in mantissa and mantissa.endswith("0"))  # trailing zeros dropped
    if ascii_only:
        assert text.isascii() or unit == "Ω"


@settings(max_examples=500, deadline=None)
@given(x=finite)
def test_seventeen_digits_round_trip_exactly(x):
    assert parse_value(format_value(x, digits=17)) == x
