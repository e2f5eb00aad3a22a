"""Tests for picker.units: parsing and formatting engineering quantities.

Sources named beside each check: IEC 60062 (RKM value code and tolerance
letters, as listed in REFERENCES.md), the SI Brochure (9th ed.) for prefixes
and the kelvin/degree Celsius relation, and the Boylestad & Nashelsky Colpitts
example frequency (1.047686 MHz) for a formatting case.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from picker.errors import SpecError
from picker.units import (
    format_percent,
    format_quantity,
    json_number,
    parse_fraction,
    parse_quantity,
    parse_tolerance,
    parse_tolerance_bounds,
)

# Exact expectations are written as decimal literals: parse_quantity rounds the
# decimal text once, so the result must equal the float of that literal exactly.


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        # SI prefixes (SI Brochure, 9th ed., table 7)
        ("4.7 nF", "F", 4.7e-9),
        ("4.7nF", "F", 4.7e-9),
        ("4.7n", "F", 4.7e-9),
        ("470p", "F", 470e-12),
        ("470 pF", "F", 470e-12),
        ("0.47uF", "F", 0.47e-6),
        ("0.47 \u00b5F", "F", 0.47e-6),  # micro sign U+00B5
        ("0.47 \u03bcF", "F", 0.47e-6),  # Greek mu U+03BC
        ("1e-9 F", "F", 1e-9),
        ("2.2e-6", "F", 2.2e-6),  # bare number = SI base unit (module rule)
        ("100", "F", 100.0),
        ("1.5 fF", "F", 1.5e-15),
        ("4.7 f", "F", 4.7e-15),  # a lone f is femto, not farad (module rule)
        ("4.7 nf", "F", 4.7e-9),  # case-insensitive unit symbol after a prefix
        ("4.7 mF", "F", 4.7e-3),  # m is milli (SI)
        ("47 M", "F", 47e6),  # M is mega (SI), documented
        ("10 \u00b5H", "H", 10e-6),
        ("220uH", "H", 220e-6),
        ("250 kHz", "Hz", 250e3),
        ("250 khz", "Hz", 250e3),
        ("10 MHz", "Hz", 10e6),
        ("1 GHz", "Hz", 1e9),
        ("3.3 V", "V", 3.3),
        ("10 mA", "A", 10e-3),
        ("10 mS", "S", 10e-3),
        ("10 ms", "s", 10e-3),
        ("4.7k", "ohm", 4.7e3),
        ("4.7 k\u03a9", "ohm", 4.7e3),
        ("4.7 k\u2126", "ohm", 4.7e3),  # ohm sign U+2126
        ("4.7 kohm", "ohm", 4.7e3),
        ("100R", "ohm", 100.0),
        ("47meg", "ohm", 47e6),
        ("2.2 Meg", "ohm", 2.2e6),
        ("\u22125 V", "V", -5.0),  # Unicode minus sign
        ("+5 V", "V", 5.0),
        (".5 V", "V", 0.5),
        ("1E3 Hz", "Hz", 1e3),
    ],
)
def test_parse_quantity_forms(text, unit, expected):
    assert parse_quantity(text, unit) == expected


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        # IEC 60062 RKM code examples (REFERENCES.md): letter in place of the decimal point
        ("4n7", "F", 4.7e-9),  # IEC 60062: 4n7 = 4.7 nF
        ("2u2", "F", 2.2e-6),  # IEC 60062: 2u2 = 2.2 µF
        ("4R7", "ohm", 4.7),  # IEC 60062: 4R7 = 4.7 ohm
        ("4K7", "ohm", 4.7e3),  # IEC 60062: 4K7 = 4.7 kohm
        ("1R0", "ohm", 1.0),  # IEC 60062: R as decimal point, 1R0 = 1.0
        ("4k7", "ohm", 4.7e3),
        ("R47", "ohm", 0.47),
        ("1M5", "ohm", 1.5e6),
        ("p68", "F", 0.68e-12),
        ("6p8", "F", 6.8e-12),
        ("4\u00b57", "F", 4.7e-6),
        ("4n7F", "F", 4.7e-9),
        ("4K7 \u03a9", "ohm", 4.7e3),
    ],
)
def test_rkm_code(text, unit, expected):
    assert parse_quantity(text, unit) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("-40 \u00b0C", -40.0),
        ("-40\u00b0C", -40.0),
        ("-40 C", -40.0),
        ("-40 degC", -40.0),
        ("25 \u2103", 25.0),
        ("25", 25.0),  # bare temperature = °C (module rule)
        (-20, -20.0),
        # SI Brochure, 9th ed.: t/°C = T/K − 273.15
        ("233.15 K", -40.0),
        ("273.15 K", 0.0),
        ("0 K", -273.15),
    ],
)
def test_temperature(text, expected):
    assert parse_quantity(text, "\u00b0C") == expected


def test_temperature_below_absolute_zero():
    with pytest.raises(SpecError, match="absolute zero"):
        parse_quantity("-300 C", "°C", key="env.t_min")


def test_tempco():
    assert parse_quantity("30 ppm/\u00b0C", "ppm/°C") == 30e-6
    assert parse_quantity("-200 ppm/K", "ppm/°C") == -200e-6
    assert parse_quantity("-200", "ppm/°C") == -200e-6  # bare = ppm/°C (module rule)


def test_numbers_pass_through():
    assert parse_quantity(4.7e-9, "F") == 4.7e-9
    assert parse_quantity(3, "V") == 3.0
    assert parse_quantity(np.float64(2.5), "V") == 2.5
    assert isinstance(parse_quantity(3, "V"), float)


@pytest.mark.parametrize(
    ("text", "unit", "fragment"),
    [
        ("10 uH", "F", "expected a capacitance in F (e.g. '4.7 nF'), got '10 uH'"),
        ("4.7 nF", "H", "got '4.7 nF'"),
        ("250 kHz", "F", "frequency"),
        ("10 ms", "S", "that is a time"),  # ms is milliseconds, never millisiemens
        ("10 mS", "s", "that is a conductance"),
        ("10 C", "F", "temperature"),
        ("5 V", "°C", "temperature"),
        ("4,7nF", "F", "decimal point"),
        ("1,000 Hz", "Hz", "decimal point"),
        ("1R0", "F", "only for resistance"),  # capacitor markings: 1R0 = 1.0 pF, so refuse
        ("4.7 mhz", "Hz", "ambiguous"),
        ("4.7 NF", "F", "got '4.7 NF'"),
        ("4.7 n F", "F", "got '4.7 n F'"),
        ("4n7 nF", "F", "got '4n7 nF'"),
        ("±5 V", "V", "tolerance"),
        ("20 °F", "°C", "got '20 °F'"),
        ("", "F", "empty"),
        ("   ", "F", "empty"),
        ("nan", "F", "'nan'"),
        ("inf", "F", "'inf'"),
        ("1e400 F", "F", "finite"),
        (float("nan"), "F", "finite"),
        (float("inf"), "Hz", "finite"),
        (True, "F", "boolean"),
        (np.bool_(False), "F", "boolean"),
        (None, "F", "NoneType"),
        ([4.7e-9], "F", "list"),
        ("abc", "F", "'abc'"),
        ("n", "F", "'n'"),
        ("4.7.1 nF", "F", "'4.7.1 nF'"),
    ],
)
def test_parse_quantity_rejects(text, unit, fragment):
    with pytest.raises(SpecError) as info:
        parse_quantity(text, unit, key="parts.C1.value")
    msg = str(info.value)
    assert fragment in msg
    assert msg.startswith("parts.C1.value: ")
    assert info.value.key == "parts.C1.value"
    assert "\n" not in msg


def test_spec_error_is_value_error():
    with pytest.raises(ValueError):
        parse_quantity("junk", "F")


def test_unknown_expected_unit_is_programming_error():
    with pytest.raises(ValueError, match="unknown unit"):
        parse_quantity("1", "furlong")


# ----------------------------------------------------------------- fractions, tolerances


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("3 %", 0.03),
        ("±3 %", 0.03),
        ("± 3 %", 0.03),
        ("+/-3%", 0.03),
        ("+-3%", 0.03),
        ("3%", 0.03),
        ("0.25 %", 0.0025),
        ("0.03", 0.03),  # bare number = fraction (module rule)
        (0.03, 0.03),
        ("30 ppm", 30e-6),
        ("0", 0.0),
    ],
)
def test_parse_fraction(text, expected):
    assert parse_fraction(text) == expected


@pytest.mark.parametrize("text", ["-3 %", "3 V", "three", "", "3,5 %", True, "nan %", -0.1])
def test_parse_fraction_rejects(text):
    with pytest.raises(SpecError) as info:
        parse_fraction(text, key="window")
    assert info.value.key == "window"


@pytest.mark.parametrize(
    ("letter", "expected"),
    [
        # IEC 60062 tolerance letters (REFERENCES.md)
        ("B", 0.001),
        ("C", 0.0025),
        ("D", 0.005),
        ("F", 0.01),
        ("G", 0.02),
        ("J", 0.05),
        ("K", 0.10),
        ("M", 0.20),
        ("j", 0.05),
    ],
)
def test_tolerance_letters(letter, expected):
    assert parse_tolerance(letter) == expected
    assert parse_tolerance_bounds(letter) == (expected, expected)


def test_tolerance_forms():
    assert parse_tolerance("5 %") == 0.05
    assert parse_tolerance("±0.5 %") == 0.005
    assert parse_tolerance(0.1) == 0.1
    assert parse_tolerance("50 ppm") == 50e-6


def test_asymmetric_tolerance():
    # IEC 60062: Z = +80/−20 %
    assert parse_tolerance_bounds("Z") == (0.20, 0.80)
    assert parse_tolerance_bounds("+80/-20 %") == (0.20, 0.80)
    assert parse_tolerance_bounds("-20/+80%") == (0.20, 0.80)
    # EIA-198 letter V: +22/−82 % (REFERENCES.md), written out
    assert parse_tolerance_bounds("+22 %/-82 %") == (0.82, 0.22)
    for text in ("Z", "+80/-20 %"):
        with pytest.raises(SpecError, match="asymmetric"):
            parse_tolerance(text, key="parts.C1.tolerance")


@pytest.mark.parametrize(
    "text", ["0", "0 %", "100 %", "150%", "1", "-5%", "X", "5 V", "", "+5/+5 %", "+5/-5", True]
)
def test_tolerance_rejects(text):
    with pytest.raises(SpecError) as info:
        parse_tolerance_bounds(text, key="parts.L.tolerance")
    assert info.value.key == "parts.L.tolerance"
    with pytest.raises(SpecError):
        parse_tolerance(text, key="parts.L.tolerance")


def test_tolerance_bounds_lower_below_100():
    with pytest.raises(SpecError, match="below 100"):
        parse_tolerance_bounds("+10/-100 %")


# ----------------------------------------------------------------- formatting


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        (4.7e-9, "F", "4.7 nF"),
        (220e-6, "H", "220 \u00b5H"),
        (1.5e-12, "F", "1.5 pF"),
        (100e-9, "F", "100 nF"),
        (9.2e-9, "F", "9.2 nF"),
        (4.7e-9 * (1 + 1e-13), "F", "4.7 nF"),  # float noise never shows
        (0.1 + 0.2, "V", "300 mV"),
        (999.9999e-12, "F", "1 nF"),  # rounding moves to the next prefix
        (250e3, "Hz", "250 kHz"),
        (0, "F", "0 F"),
        (-20, "°C", "-20 °C"),
        (4700, "ohm", "4.7 k\u03a9"),
        (30e-6, "ppm/°C", "30 ppm/°C"),
        (-3.3, "V", "-3.3 V"),
        (1e-18, "F", "0.001 fF"),
    ],
)
def test_format_quantity(value, unit, expected):
    assert format_quantity(value, unit) == expected


def test_format_digits():
    # Boylestad & Nashelsky FET Colpitts example: f = 1.047686 MHz
    assert format_quantity(1.047686e6, "Hz", digits=6) == "1.04769 MHz"
    assert format_quantity(1.047686e6, "Hz", digits=3) == "1.05 MHz"


@pytest.mark.parametrize(
    ("x", "expected"), [(0.03, "3 %"), (0.0025, "0.25 %"), (0.05, "5 %"), (0.2, "20 %")]
)
def test_format_percent(x, expected):
    assert format_percent(x) == expected


@settings(max_examples=300, deadline=None)
@given(
    mant=st.integers(min_value=100, max_value=999),
    exp=st.integers(min_value=-17, max_value=1),
    unit=st.sampled_from(["F", "H", "Hz", "ohm", "V"]),
)
def test_format_parse_round_trip(mant, exp, unit):
    # Three-digit mantissas (the E192 grid and finer) across 1e-15..1e3.
    value = float(f"{mant}e{exp}")
    text = format_quantity(value, unit)
    back = parse_quantity(text, unit)
    assert math.isclose(back, value, rel_tol=1e-9)


@settings(max_examples=300, deadline=None)
@given(value=st.floats(min_value=1e-15, max_value=1e12))
def test_format_parse_round_trip_six_digits(value):
    back = parse_quantity(format_quantity(value, "F"), "F")
    # six significant digits: relative error at most 5e-6
    assert math.isclose(back, value, rel_tol=5e-6)


_JUNK = st.one_of(
    st.text(max_size=30),
    st.text(alphabet="0123456789.,eE+-±/% pnuµμmkKMGRfFHhzZΩ°CcdgV ", max_size=20),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.none(),
    st.integers(),
)


@settings(max_examples=500, deadline=None)
@given(text=_JUNK, unit=st.sampled_from(["F", "H", "Hz", "ohm", "°C", "ppm/°C", "s", "S"]))
def test_parse_quantity_only_raises_spec_error(text, unit):
    try:
        v = parse_quantity(text, unit, key="k")
    except SpecError as exc:
        assert exc.key == "k"
    else:
        assert isinstance(v, float) and math.isfinite(v)


@settings(max_examples=500, deadline=None)
@given(text=_JUNK)
def test_parse_tolerance_only_raises_spec_error(text):
    for f in (parse_tolerance, parse_fraction):
        try:
            v = f(text, key="k")
        except SpecError as exc:
            assert exc.key == "k"
        else:
            assert math.isfinite(v) and v >= 0
    try:
        lo, hi = parse_tolerance_bounds(text, key="k")
    except SpecError as exc:
        assert exc.key == "k"
    else:
        assert 0 <= lo < 1 and hi >= 0


def test_json_number_nulls_what_json_cannot_write():
    # RFC 8259 section 6: JSON numbers have no NaN or infinity, so these become null;
    # a NumPy scalar or 0-d array must come out as a plain float of the same value.
    for bad in (math.nan, math.inf, -math.inf, np.float64("nan"), np.array(np.inf), None):
        assert json_number(bad) is None
    for x in (np.float64(2.5e-9), np.array(-1.25), np.float32(0.5), 7, 0.0):
        v = json_number(x)
        assert type(v) is float and v == float(x)
    # the text JSON writes for it is the float's own, not NumPy's repr
    assert json.dumps(json_number(np.float64(0.1))) == "0.1"
