"""Units that lie: a value of the wrong physical dimension for its key is an error naming
the key, for every key family (frequency, part values, tolerances, parasitics, amplifier,
temperatures and temperature coefficients); and the documented rules for ambiguous forms.

The rules under test (README, "Units and bare numbers"): a bare number is in the SI
base unit of the key (farads, henries, hertz, ohms, volts), except fractions, where
0.03 means 3 %; a bare number from 1 to 100 given as a tolerance or window is an error
that suggests the per-cent form; the three-digit capacitor code is not decoded.
SI prefixes and unit symbols are from the SI Brochure (BIPM, 9th edition, 2019).
"""

from __future__ import annotations

import copy

import pytest
from test_fuzz_harness import cheap, load_demo, set_path

from picker.errors import SpecError
from picker.spec.load import spec_from_dict

COLPITTS = cheap(load_demo("probe_exciter.toml"))
AMPLIFIED = cheap(load_demo("colpitts_bjt.toml"))
PRODUCTION = cheap(load_demo("production_exciter.toml"))


def _error(base: dict, path: tuple, value) -> SpecError:
    with pytest.raises(SpecError) as info:
        spec_from_dict(set_path(base, path, value), file="spec.toml")
    return info.value


# key path, a value of another dimension, the dimension the message must ask for
WRONG_DIMENSION = [
    # frequency: farads, henries, volts, ohms for hertz
    (COLPITTS, ("frequency", "target"), "10 nF", "frequency"),
    (COLPITTS, ("frequency", "target"), "10 uH", "frequency"),
    (COLPITTS, ("frequency", "target"), "5 V", "frequency"),
    (load_demo("tone_source.toml"), ("frequency", "min"), "2.55 kohm", "frequency"),
    (COLPITTS, ("frequency", "window"), "1 kHz", "fraction"),
    # part values: henries for a capacitor, farads for an inductor, hertz for either
    (COLPITTS, ("parts", "C1", "min"), "10 uH", "capacitance"),
    (COLPITTS, ("parts", "C2", "max"), "1 kHz", "capacitance"),
    (COLPITTS, ("parts", "L", "max"), "10 nF", "inductance"),
    (COLPITTS, ("parts", "L", "min"), "1 ohm", "inductance"),
    # tolerances: hertz, henries, farads for a fraction
    (COLPITTS, ("parts", "C1", "tolerance"), "1 kHz", "tolerance"),
    (COLPITTS, ("parts", "L", "tolerance"), "5 H", "tolerance"),
    (COLPITTS, ("parts", "C2", "tolerance"), "5 pF", "tolerance"),
    # parasitics: henries, volts, hertz for a capacitance
    (COLPITTS, ("parasitics", "stray"), "15 nH", "capacitance"),
    (COLPITTS, ("parasitics", "c1_shunt"), "1 V", "capacitance"),
    (COLPITTS, ("parasitics", "c2_shunt"), "3 Hz", "capacitance"),
    # amplifier: ohms for a voltage, volts for a resistance, henries for a capacitor...
    (AMPLIFIED, ("amplifier", "supply"), "9 kohm", "voltage"),
    (AMPLIFIED, ("amplifier", "r_load"), "9 V", "resistance"),
    (AMPLIFIED, ("amplifier", "c_emitter"), "10 uH", "capacitance"),
    (AMPLIFIED, ("amplifier", "c_coupling"), "1 kHz", "capacitance"),
    (AMPLIFIED, ("amplifier", "r_emitter"), "1 mA", "resistance"),
    # per-part physical detail
    (AMPLIFIED, ("parts", "L", "q_frequency"), "5 nF", "frequency"),
    (AMPLIFIED, ("parts", "C1", "voltage_rating"), "50 ohm", "voltage"),
    # temperatures and temperature coefficients
    (PRODUCTION, ("yield", "temperature"), ["-40 Hz", "85 °C"], "temperature"),
    (PRODUCTION, ("yield", "temperature"), ["-40 °C", "85 V"], "temperature"),
    (PRODUCTION, ("parts", "L", "tempco"), "250 nF", "temperature coefficient"),
    (PRODUCTION, ("parts", "L", "tempco_spread"), "100 Hz", "temperature coefficient"),
]


@pytest.mark.parametrize(
    ("base", "path", "value", "dimension"),
    WRONG_DIMENSION,
    ids=[f"{'.'.join(p)}={v}" for _, p, v, _ in WRONG_DIMENSION],
)
def test_a_value_of_the_wrong_dimension_is_an_error_naming_the_key(base, path, value, dimension):
    exc = _error(base, path, value)
    assert exc.file == "spec.toml"
    assert exc.key == ".".join(path), exc.one_line()
    assert f"expected a {dimension}" in exc.message or f"expected an {dimension}" in exc.message, (
        exc.message
    )
    assert "\n" not in exc.one_line()


def test_the_message_says_what_the_wrong_unit_is():
    # "10 uH" is an inductance: the message names what was given as well as what was expected
    exc = _error(COLPITTS, ("parts", "C1", "min"), "10 uH")
    assert "that is an inductance" in exc.message and "'10 uH'" in exc.message


@pytest.mark.parametrize("value", ["5", 5, 5.0, "20"])
def test_a_bare_tolerance_above_one_is_an_error_that_suggests_per_cent(value):
    # the rule: a bare number is a fraction; 5 would be 500 %, so it is refused with a hint
    exc = _error(COLPITTS, ("parts", "C1", "tolerance"), value)
    assert exc.key == "parts.C1.tolerance"
    shown = str(value).strip() if isinstance(value, str) else f"{value:g}"
    assert f"did you mean '{shown} %'" in exc.message


def test_a_bare_window_above_one_suggests_per_cent_too():
    exc = _error(COLPITTS, ("frequency", "window"), 3)
    assert exc.key == "frequency.window" and "did you mean '3 %'" in exc.message


def test_a_tolerance_above_100_gets_no_per_cent_hint():
    exc = _error(COLPITTS, ("parts", "C1", "tolerance"), "150")
    assert "did you mean" not in exc.message


@pytest.mark.parametrize(
    ("path", "value", "expected"),
    [
        # bare numbers are SI base units
        (("frequency", "target"), 310000, 310e3),
        (("frequency", "target"), "310e3", 310e3),
        (("parts", "C1", "min"), 1e-10, 1e-10),
        (("parts", "L", "max"), "0.01", 0.01),
        # fractions: 0.03 is 3 %
        (("parts", "C1", "tolerance"), 0.05, 0.05),
        (("frequency", "window"), 0.03, 0.03),
        # a lone prefix is a prefix ("47 u" is 47 µF), units in any case when unambiguous
        (("parts", "C2", "max"), "47 u", 47e-6),
        (("parts", "C2", "max"), "4.7 nf", 4.7e-9),
        # IEC 60062 RKM code: 4n7 = 4.7 nF
        (("parts", "C1", "max"), "4n7", 4.7e-9),
    ],
)
def test_the_ambiguous_forms_follow_the_documented_rule(path, value, expected):
    s = spec_from_dict(set_path(COLPITTS, path, value), file="spec.toml")
    node = s
    for k in path:
        node = node[k] if isinstance(node, dict) else getattr(node, k)
    assert node == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(
    ("value", "why"),
    [
        ("4,7nF", "decimal point"),  # a decimal comma is refused, never read as 47
        ("1R0", "'R' as a decimal point"),  # 1.0 pF on a capacitor marking: ambiguous
        ("4.7 mf", "ambiguous prefix"),  # milli or mega? refused
    ],
)
def test_forms_that_could_be_misread_are_refused(value, why):
    exc = _error(COLPITTS, ("parts", "C1", "max"), value)
    assert exc.key == "parts.C1.max" and why in exc.message


def test_no_base_spec_was_changed_by_the_cases():
    assert COLPITTS == cheap(load_demo("probe_exciter.toml"))
    assert copy.deepcopy(AMPLIFIED) == cheap(load_demo("colpitts_bjt.toml"))


def test_the_three_digit_capacitor_code_is_refused_not_read_as_farads():
    # IEC 60062: "103" marks 10 000 pF; picker does not decode it, and 103 F
    # (the bare-number reading) lies beyond the accepted range, so it is refused.
    exc = _error(COLPITTS, ("parts", "C1", "max"), "103")
    assert exc.key == "parts.C1.max"
    assert "three-digit code is not read" in exc.message and "10 nF" in exc.message


@pytest.mark.parametrize(
    ("path", "value"),
    [
        (("parts", "C1", "max"), "11 F"),
        (("parts", "C1", "min"), 1e-19),
        (("parts", "L", "max"), "101 H"),
        (("parts", "L", "min"), "0.5 pH"),
    ],
)
def test_part_values_beyond_any_tank_part_are_refused(path, value):
    exc = _error(COLPITTS, path, value)
    assert exc.key == ".".join(path) and "expected a value between" in exc.message
