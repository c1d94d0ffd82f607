"""Quantities: SI prefixes and units in, SI numbers out; engineering notation back.

Expected values are the SI prefix definitions (BIPM, The International System of Units, 9th ed.,
2019, Table 7: f = 1e-15 ... T = 1e12; micro written "u" or "µ" as common practice in
plain-text tools) and the design-file contract (percent as a fraction, degrees and decibels kept).
"""

from __future__ import annotations

import math

import pytest

from loopwright.errors import DesignError
from loopwright.quantities import format_eng, parse_quantity


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("22 uH", "H", 22e-6),
        ("22uH", "H", 22e-6),
        ("22 µH", "H", 22e-6),
        ("4.7 nF", "F", 4.7e-9),
        ("100 pF", "F", 100e-12),
        ("1 fF", "F", 1e-15),
        ("10 mohm", "ohm", 10e-3),
        ("10 Ω", "ohm", 10.0),
        ("2.2 kohm", "ohm", 2.2e3),
        ("1 Mohm", "ohm", 1e6),
        ("250 kHz", "Hz", 250e3),
        ("1.5 MHz", "Hz", 1.5e6),
        ("2 GHz", "Hz", 2e9),
        ("1 THz", "Hz", 1e12),
        ("36 V", "V", 36.0),
        ("-12 V", "V", -12.0),
        ("+5 V", "V", 5.0),
        ("450 mV", "V", 0.45),
        ("3 A", "A", 3.0),
        ("300 mA", "A", 0.3),
        ("2 us", "s", 2e-6),
        ("1 mS", "S", 1e-3),
        ("1.5e-3 A", "A", 1.5e-3),
        ("  7 W  ", "W", 7.0),
        (".5 V", "V", 0.5),
    ],
)
def test_prefixes_and_units(text, unit, expected):
    # SI prefix definitions (BIPM SI brochure, 9th ed., Table 7)
    assert parse_quantity(text, unit, key="k") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        ("20 %", "%", 0.2),  # the contract: percent as a fraction
        ("5 %", "%", 0.05),
        ("55 deg", "deg", 55.0),  # degrees stay degrees
        ("10 dB", "dB", 10.0),  # decibels stay decibels
        ("55", "deg", 55.0),
    ],
)
def test_percent_degrees_decibels(value, unit, expected):
    assert parse_quantity(value, unit, key="k") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [(22e-6, "H", 22e-6), (250000, "Hz", 250e3), ("1.5", "", 1.5), ("12", "V", 12.0), (0, "V", 0)],
)
def test_bare_numbers_are_si_base_units(value, unit, expected):
    assert parse_quantity(value, unit, key="k") == expected


def test_bare_string_rejected_when_a_unit_is_required():
    with pytest.raises(DesignError, match="needs a unit"):
        parse_quantity("12", "V", key="power_stage.vin", allow_bare=False)


@pytest.mark.parametrize(
    ("value", "unit", "fragment"),
    [
        ("22 uF", "H", "expected H"),
        ("22 uH", "F", "expected F"),
        ("250 kHz", "H", "expected H"),
        ("3 A", "V", "expected V"),
        ("10 mohm", "H", "expected H"),
        ("5 V", "", "a plain number"),
        ("20 %", "V", "expected V"),
    ],
)
def test_wrong_unit_names_field_and_units(value, unit, fragment):
    with pytest.raises(DesignError, match=fragment) as info:
        parse_quantity(value, unit, key="power_stage.inductor.value")
    msg = str(info.value)
    assert msg.startswith("power_stage.inductor.value:")
    assert value in msg
    assert info.value.key == "power_stage.inductor.value"


@pytest.mark.parametrize("value", ["22 uh", "22 furlongs", "22 kdeg", "1 m%"])
def test_unknown_unit(value):
    with pytest.raises(DesignError, match="unknown unit"):
        parse_quantity(value, "H", key="x")


@pytest.mark.parametrize("value", ["", "uH", "twenty uH", "22 u H", "1,5 uH", "--3 V", "0x10 V"])
def test_unreadable(value):
    with pytest.raises(DesignError, match="x:"):
        parse_quantity(value, "H", key="x")


@pytest.mark.parametrize(
    "value",
    [math.nan, math.inf, -math.inf, "nan uH", "inf uH", "NaN", "-inf", "1e400 H", "1e308 kH"],
)
def test_non_finite_rejected(value):
    with pytest.raises(DesignError) as info:
        parse_quantity(value, "H", key="power_stage.inductor.value")
    assert "power_stage.inductor.value" in str(info.value)


@pytest.mark.parametrize("value", [True, False, None, [1, 2], {"a": 1}])
def test_non_numbers_rejected(value):
    with pytest.raises(DesignError, match="fsw"):
        parse_quantity(value, "Hz", key="fsw")


def test_design_error_is_a_value_error():
    # the contract: bad input is a ValueError subclass that carries the key
    with pytest.raises(ValueError):
        parse_quantity("x", "V", key="k")


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [
        (4.7e-6, "H", "4.7 uH"),
        (250e3, "Hz", "250 kHz"),
        (0.0153, "ohm", "15.3 mohm"),
        (100e-6, "F", "100 uF"),
        (12.0, "V", "12 V"),
        (-12.0, "V", "-12 V"),
        (2.2e-12, "F", "2.2 pF"),
        (1e6, "ohm", "1 Mohm"),
        (0.0, "V", "0 V"),
        (999.99e3, "Hz", "1 MHz"),  # rounding to 4 digits carries into the next prefix
        (0.2, "%", "20 %"),
        (None, "V", "-"),
        (math.nan, "V", "-"),
        (math.inf, "V", "inf V"),
        (-math.inf, "V", "-inf V"),
    ],
)
def test_format_eng(value, unit, text):
    assert format_eng(value, unit) == text


@pytest.mark.parametrize("value", [4.7e-6, 22e-6, 1.234e-9, 56.2e3, 0.0153, 1e-12, 3.3e9])
@pytest.mark.parametrize("unit", ["H", "F", "ohm", "Hz"])
def test_format_then_parse_round_trip(value, unit):
    # engineering notation read back gives the value to the printed 4 significant digits
    text = format_eng(value, unit)
    assert parse_quantity(text, unit, key="k") == pytest.approx(value, rel=5e-4)
