"""Move profiles: end points, limits and durations against closed-form results (derived)."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.profiles import jerk_limited_profile, trapezoid_profile


@pytest.mark.parametrize("d, v, a, expected_s, source", [
    (0.05, 0.5, 5.0, 0.05 / 0.5 + 0.5 / 5.0, "derived: T = d/v + v/a when d >= v^2/a"),
    (0.01, 0.5, 5.0, 2.0 * math.sqrt(0.01 / 5.0), "derived: triangle T = 2 sqrt(d/a)"),
    (-3.0, 10.0, 100.0, 3.0 / 10.0 + 10.0 / 100.0, "derived, negative distance"),
])
def test_trapezoid_duration_and_end(d, v, a, expected_s, source):
    p = trapezoid_profile(d, v, a)
    assert_allclose(p.duration_s, expected_s, rtol=1e-12, err_msg=source)
    t = np.linspace(0, p.duration_s, 20001)
    pos, vel, acc = p.evaluate(t)
    assert_allclose(pos[-1], d, rtol=1e-12)
    assert np.max(np.abs(vel)) <= v * (1 + 1e-12)
    assert np.max(np.abs(acc)) <= a * (1 + 1e-12)
    # velocity is the derivative of position (derived), to the finite-difference error
    assert_allclose(np.gradient(pos, t), vel, atol=2e-3 * v)


@pytest.mark.parametrize("d, v, a, j, expected_s, source", [
    (1.0, 0.5, 5.0, 200.0, 1.0 / 0.5 + 0.5 / 5.0 + 5.0 / 200.0, "derived: T = d/v + v/a + a/j"),
    (0.02, 0.5, 5.0, 200.0, None, "speed not reached"),
    (0.5, 0.5, 5.0, 20.0, None, "acceleration not reached (v < a^2/j)"),
    (0.001, 0.5, 5.0, 200.0, 4.0 * (0.001 / (2 * 200.0)) ** (1 / 3), "derived: pure jerk T = 4 (d/2j)^(1/3)"),
])
def test_jerk_limited_limits_and_end(d, v, a, j, expected_s, source):
    p = jerk_limited_profile(d, v, a, j)
    if expected_s is not None:
        assert_allclose(p.duration_s, expected_s, rtol=1e-9, err_msg=source)
    t = np.linspace(0, p.duration_s, 40001)
    pos, vel, acc = p.evaluate(t)
    assert_allclose(pos[-1], d, rtol=1e-9)
    assert abs(vel[-1]) < 1e-9 * v and abs(acc[-1]) < 1e-9 * a
    assert np.max(np.abs(vel)) <= v * (1 + 1e-9)
    assert np.max(np.abs(acc)) <= a * (1 + 1e-9)
    assert np.max(np.abs(np.diff(acc))) <= j * (t[1] - t[0]) * (1 + 1e-6)   # acceleration continuous
    assert_allclose(np.gradient(vel, t), acc, atol=1e-2 * a)


def test_profile_rejects_bad_limits():
    with pytest.raises(InputError) as e:
        trapezoid_profile(1.0, 0.0, 1.0, field="scenarios[0]")
    assert e.value.field == "scenarios[0].speed"
    with pytest.raises(InputError):
        jerk_limited_profile(0.0, 1.0, 1.0, 1.0)
