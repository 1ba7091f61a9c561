"""Tolerance parsing: percentages, factors, absolute ranges, and every bad input an InputError."""

from __future__ import annotations

import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.presets import builtin_preset, dumps_preset, loads_preset
from core.tolerances import parse_tolerance, tolerances_from_dict, varied_axis


@pytest.fixture(scope="module")
def axis():
    return builtin_preset("belt_gantry").axis


@pytest.mark.parametrize("value, low, high, source", [
    ("±30 %", 0.7, 1.3, "derived: 1 -+ 0.30"),
    ("+-30 %", 0.7, 1.3, "derived"),
    (["-10 %", "+40 %"], 0.9, 1.4, "derived: 1 + deviation"),
    (["0.5", "1.5"], 0.5, 1.5, "derived: factors as written"),
    ([0.5, 1.5], 0.5, 1.5, "derived"),
])
def test_forms(axis, value, low, high, source):
    t = parse_tolerance("resistance", value, axis)
    assert_allclose([t.low_factor, t.high_factor], [low, high], rtol=1e-12, err_msg=source)


def test_absolute_mass_range_is_divided_by_nominal(axis):
    t = parse_tolerance("load_inertia", ["6 kg", "12 kg"], axis)
    assert_allclose([t.low_factor, t.high_factor], [6 / 8, 12 / 8], rtol=1e-12)   # nominal 8 kg; derived


@pytest.mark.parametrize("name, value", [
    ("resistance", "±100 %"),              # makes R zero
    ("resistance", ["-120 %", "0 %"]),     # negative
    ("resistance", ["1.5", "0.5"]),        # inverted
    ("resistance", ["1 ohm", "2 ohm"]),    # absolute where conventions make it ambiguous
    ("resistance", 0.3),                   # a bare number is ambiguous
    ("resistance", ["a", "b"]),
    ("torque", "±5 %"),                    # unknown parameter
    ("load_inertia", ["6 s", "12 s"]),     # wrong dimension
])
def test_bad_input(axis, name, value):
    with pytest.raises(InputError):
        parse_tolerance(name, value, axis)


def test_stiffness_on_rigid_load_is_refused():
    axis = builtin_preset("dc_spindle").axis
    with pytest.raises(InputError):
        parse_tolerance("stiffness", "±10 %", axis)


def test_preset_round_trip_keeps_tolerances():
    p = builtin_preset("belt_gantry")
    assert p.tolerances
    q = loads_preset(dumps_preset(p))
    assert q.tolerances == p.tolerances
    tolerances_from_dict(q.tolerances, q.axis)


def test_preset_with_bad_tolerance_is_refused():
    text = dumps_preset(builtin_preset("belt_gantry")).replace('resistance = [', 'resistance = ["2", "1"]\nx = [', 1)
    with pytest.raises(InputError):
        loads_preset(text)


def test_varied_axis_scales_the_parameters(axis):
    v = varied_axis(axis, {"resistance": 1.4, "kt": 0.9, "stiffness": 0.5, "delays": 2.0})
    assert_allclose(v.motor.resistance_ohm, 1.4 * axis.motor.resistance_ohm, rtol=1e-12)
    assert_allclose(v.motor.back_emf_v_s_per_rad, 0.9 * axis.motor.back_emf_v_s_per_rad, rtol=1e-12)
    assert_allclose(v.stiffness_nm_per_rad, 0.5 * axis.stiffness_nm_per_rad, rtol=1e-12)
    assert_allclose(v.drive.loop_delays_s(), [2 * d for d in axis.drive.loop_delays_s()], rtol=1e-12)
