"""Quantity parsing at the edge: typed text to SI floats, and clear errors otherwise."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, strategies as st
from numpy.testing import assert_allclose

from core.errors import InputError
from core.units import convert, format_quantity, parse_quantity

# (text, unit, expected SI value, relative tolerance, source)
CASES = [
    ("1 V/krpm", "V*s/rad", 0.0095493, 1e-4, "common practice: Ke[V/krpm] x 0.0095493 = Ke[V*s/rad]"),
    ("1 N*m/A", "V*s/rad", 1.0, 1e-12, "energy balance: 1 N*m/A = 1 V*s/rad"),
    ("2.4 mH", "H", 2.4e-3, 1e-12, "SI prefix"),
    ("12 kg*cm^2", "kg*m^2", 1.2e-3, 1e-12, "SI prefix (1 cm^2 = 1e-4 m^2)"),
    ("3000 rpm", "rad/s", 3000 * 2 * math.pi / 60, 1e-12, "definition of rpm"),
    ("1.5 kHz", "Hz", 1500.0, 1e-12, "SI prefix"),
    ("93.75 us", "s", 93.75e-6, 1e-12, "SI prefix"),
    ("1 arcmin", "rad", math.pi / (180 * 60), 1e-12, "definition of the arc minute"),
    ("25 %", "dimensionless", 0.25, 1e-12, "definition of percent"),
    (4.7, "ohm", 4.7, 0.0, "a bare number is in the requested unit"),
]


@pytest.mark.parametrize("text,unit,expected,rtol,source", CASES, ids=[c[0] for c in CASES])
def test_parse_quantity_converts_to_si(text, unit, expected, rtol, source):
    assert_allclose(parse_quantity(text, unit, "field"), expected, rtol=rtol, err_msg=source)


@pytest.mark.parametrize("bad", ["2.4 kg", "fast", "", "   ", "nan H", "inf H", float("nan"), float("inf"),
                                 None, True, [1.0], {"a": 1}, "2.4 mH mH"])
def test_bad_quantities_raise_input_error_naming_the_field(bad):
    with pytest.raises(InputError) as info:
        parse_quantity(bad, "H", "motor.inductance")
    assert info.value.field == "motor.inductance"
    assert "motor.inductance" in str(info.value) and "H" in info.value.expected


@given(st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=30))
def test_any_text_gives_a_float_or_input_error(text):
    try:
        value = parse_quantity(text, "H", "f")
    except InputError:
        return
    assert math.isfinite(value)


def test_convert_and_format_are_the_display_edges():
    assert_allclose(convert(1.0, "rad/s", "rpm"), 60 / (2 * math.pi), rtol=1e-12)  # definition of rpm
    assert format_quantity(2.4, "mH") == "2.4 mH"
