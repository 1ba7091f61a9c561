"""Scenario parsing and bad input: every refusal is an InputError naming the field."""

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from core.errors import InputError
from core.scenario import MAX_SAMPLES, scenario_from_dict
from core.simulate import simulate_scenario, warm_up

try:
    from sim_fixtures import linear_axis, make_axis, make_gains
except ImportError:  # pragma: no cover
    from tests.core.sim_fixtures import linear_axis, make_axis, make_gains


def setup_module(_):
    warm_up()


def test_parse_linear_move_with_load_step():
    ax = linear_axis()
    sc = scenario_from_dict({"name": "gentle move", "kind": "move", "profile": "jerk_limited", "distance": "50 mm",
                             "speed": "0.5 m/s", "acceleration": "5 m/s^2", "jerk": "200 m/s^3",
                             "load_step": "5 N", "load_step_time": "0.12 s", "load_pulse_width": "20 ms",
                             "duration": "0.3 s", "limits": "true", "anti_windup": "back_calculation"},
                            ax, "scenarios[1]")
    assert_allclose([sc.distance_load, sc.speed_load, sc.acceleration_load, sc.jerk_load], [0.05, 0.5, 5, 200])
    assert_allclose([sc.load_step_load, sc.load_step_time_s, sc.load_pulse_width_s, sc.duration_s],
                    [5.0, 0.12, 0.02, 0.3])
    assert sc.limits and sc.anti_windup == "back_calculation" and sc.has_move and sc.has_load_step


def test_parse_rotary_units_and_rev():
    ax = make_axis()
    sc = scenario_from_dict({"kind": "move", "distance": "1 rev", "speed": "3000 rpm",
                             "acceleration": "20 rev/s^2", "duration": "1 s"}, ax)
    assert_allclose(sc.distance_load, 2 * math.pi)
    assert_allclose(sc.speed_load, 100 * math.pi)
    assert_allclose(sc.acceleration_load, 40 * math.pi)
    sc = scenario_from_dict({"kind": "speed_step", "step": "100 rpm"}, ax)
    assert_allclose(sc.step, 100 * 2 * math.pi / 60)
    assert sc.duration_s > 0


BAD = [
    ({"kind": "move", "distance": "50 mm", "speed": "0.5 m/s", "acceleration": "5 m/s^2", "duration": "0 s"},
     "scenarios[1].duration", "zero horizon"),
    ({"kind": "move", "distance": "50 mm", "speed": "-0.5 m/s", "acceleration": "5 m/s^2", "duration": "1 s"},
     "scenarios[1].speed", "negative speed"),
    ({"kind": "move", "distance": "50 mm", "speed": "0.5 m/s", "acceleration": "0 m/s^2"},
     "scenarios[1].acceleration", "zero acceleration"),
    ({"kind": "move", "distance": "0 mm", "speed": "0.5 m/s", "acceleration": "5 m/s^2"},
     "scenarios[1].distance", "zero distance"),
    ({"kind": "move", "distance": "5 m", "speed": "0.5 m/s", "acceleration": "5 m/s^2", "duration": "0.2 s"},
     "scenarios[1].duration", "move longer than the horizon"),
    ({"kind": "move", "distance": "50 mm", "speed": "0.5 m/s", "acceleration": "5 m/s^2", "duration": "1000 s"},
     "scenarios[1].duration", "more than 1e7 samples"),
    ({"kind": "move", "distance": "50 kg", "speed": "0.5 m/s", "acceleration": "5 m/s^2"},
     "scenarios[1].distance", "wrong dimension"),
    ({"kind": "move", "profile": "jerk_limited", "distance": "50 mm", "speed": "0.5 m/s",
      "acceleration": "5 m/s^2"}, "scenarios[1].jerk", "missing jerk"),
    ({"kind": "move", "profile": "sine", "distance": "50 mm"}, "scenarios[1].profile", "unknown profile"),
    ({"kind": "wiggle"}, "scenarios[1].kind", "unknown kind"),
    ({"kind": "current_step", "step": "2 A", "step_time": "-1 ms"}, "scenarios[1].step_time", "negative time"),
    ({"kind": "current_step", "step": "2 A", "step_time": "1 s", "duration": "0.1 s"},
     "scenarios[1].step_time", "step after the end"),
    ({"kind": "current_step"}, "scenarios[1].step", "missing step"),
    ({"kind": "load_step", "load_step": "5 N", "load_pulse_width": "0 s"},
     "scenarios[1].load_pulse_width", "zero pulse"),
    ({"kind": "load_step", "load_step": "5 N*m"}, "scenarios[1].load_step", "torque on a linear axis"),
    ({"kind": "load_step"}, "scenarios[1].load_step", "missing load"),
    ({"kind": "speed_step", "step": "1 rpm", "anti_windup": "maybe"}, "scenarios[1].anti_windup", "bad choice"),
    ({"kind": "speed_step", "step": "1 rpm", "limits": "perhaps"}, "scenarios[1].limits", "bad bool"),
    ({"kind": "speed_step", "step": "1 rpm", "durration": "1 s"}, "scenarios[1].durration", "typo'd key"),
    ({"kind": "speed_step", "step": "nan rpm"}, "scenarios[1].step", "NaN"),
]


@pytest.mark.parametrize("d, field, why", BAD, ids=[b[2] for b in BAD])
def test_bad_input_names_the_field(d, field, why):
    with pytest.raises(InputError) as e:
        simulate_scenario(linear_axis(), make_gains(linear_axis()), d, "scenarios[1]")
    assert e.value.field == field, why


def test_horizon_limit_is_checked_before_allocating():
    ax = make_axis()
    seconds = (MAX_SAMPLES + 10) / ax.drive.current_rate_hz
    with pytest.raises(InputError) as e:
        scenario_from_dict({"kind": "speed_step", "step": "1 rpm", "duration": f"{seconds} s"}, ax, "s")
    assert "samples" in str(e.value)


_AX = linear_axis()
_GAINS = make_gains(_AX)
_q = st.floats(min_value=1e-6, max_value=1e3, allow_nan=False)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(kind=st.sampled_from(["move", "current_step", "speed_step", "load_step", "voltage_step"]),
       profile=st.sampled_from(["trapezoid", "jerk_limited"]),
       dist=st.floats(-0.5, 0.5, allow_nan=False), speed=_q, acc=_q, jerk=_q, step=st.floats(-50, 50),
       load=st.floats(-200, 200), t_load=st.floats(0, 0.05), duration=st.floats(1e-4, 0.08),
       limits=st.booleans(), aw=st.sampled_from(["clamp", "back_calculation", "off"]))
def test_random_scenarios_give_a_result_or_input_error(kind, profile, dist, speed, acc, jerk, step, load, t_load,
                                                       duration, limits, aw):
    """Any valid-looking scenario gives a result (possibly flagged as diverged) or an InputError."""
    d = {"kind": kind, "profile": profile, "distance": f"{dist} m", "speed": f"{speed} m/s",
         "acceleration": f"{acc} m/s^2", "jerk": f"{jerk} m/s^3", "step": step, "load_step": f"{load} N",
         "load_step_time": f"{t_load} s", "duration": f"{duration} s", "limits": limits, "anti_windup": aw}
    if kind != "move":
        for k in ("profile", "distance", "speed", "acceleration", "jerk"):
            d.pop(k)
    if kind == "move" and profile == "trapezoid":
        d.pop("jerk")
    if kind in ("move", "load_step"):
        d.pop("step")
    try:
        r = simulate_scenario(_AX, _GAINS, d, "s")
    except InputError as e:
        assert e.field.startswith("s.")
        return
    assert len(r.time_s) >= 1
    assert all(f.severity in ("error", "warning", "info") for f in r.flags)
