"""Property tests (hypothesis) of the public constructors and core.analysis.analyse.

* Any finite positive parameters give an Analysis or an InputError -- never another
  exception, never a NaN margin without a flag on that loop; an unstable loop is a
  reported result (stable False and an error flag).
* Zero, negative, NaN and infinite values raise InputError naming the field.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.analysis import Analysis, analyse, analysis_summary
from core.axis import Axis
from core.drive import Drive
from core.errors import InputError
from core.flags import Targets
from core.gains import PI, CurrentGains, GainSet, Notch, PositionGains, SpeedGains
from core.load import Load
from core.margins import LOOPS
from core.motor import Motor

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

PROPERTY = settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def around(nominal: float, decades: float = 3.0):
    """Finite positive values log-uniform within +-``decades`` of ``nominal``."""
    return st.floats(-decades, decades, allow_nan=False).map(lambda u: nominal * 10.0 ** u)


@st.composite
def axis_and_gains(draw, decades=3.0):
    """An axis and gains from finite positive parameters, each spread over +-decades around a
    small servo axis; the loop rates are drawn as ratios, some of which break the drive's rate
    rules (current rate 3x PWM, speed rate above the current rate) so InputError is exercised."""
    motor = dict(kind="dc", resistance_ohm=draw(around(1.2, decades)), inductance_h=draw(around(2.4e-3, decades)),
                 torque_constant_nm_per_a=draw(around(0.5, decades)), back_emf_v_s_per_rad=draw(around(0.5, decades)),
                 inertia_kgm2=draw(around(2e-4, decades)),
                 viscous_friction_nm_s_per_rad=draw(around(1e-4, decades)))
    compliant = draw(st.booleans())
    load = dict(gear_ratio=draw(around(3.0, 1.0)), inertia=draw(around(1e-3, decades)),
                viscous_friction=draw(around(1e-3, decades)), compliant=compliant,
                stiffness=draw(around(700.0, decades)) if compliant else 0.0,
                damping=draw(around(0.3, decades)) if compliant else 0.0)
    pwm = draw(around(10e3, 1.0))
    current_rate = pwm * draw(st.sampled_from([1.0, 2.0, 1.5, 3.0]))   # 3x breaks the PWM rule
    speed_rate = current_rate * draw(st.sampled_from([1.0, 0.5, 0.25, 2.0]))  # 2x breaks the rate order
    drive = dict(bus_voltage_v=draw(around(300.0, 1.0)), current_limit_a=draw(around(10.0, 1.0)),
                 pwm_frequency_hz=pwm, current_rate_hz=current_rate, speed_rate_hz=speed_rate,
                 position_rate_hz=speed_rate * draw(st.sampled_from([1.0, 0.5, 0.125])),
                 current_filter_hz=draw(around(5e3, 1.0)))
    gains = dict(current=PI(draw(around(15.0, decades)), draw(around(7500.0, decades))),
                 speed=PI(draw(around(0.2, decades)), draw(around(50.0, decades))),
                 position=draw(around(200.0, decades)))
    return motor, load, drive, gains


def build(motor, load, drive, gains):
    """The public constructors, in the order a front end calls them."""
    axis = Axis(Motor(**motor), Load(**load), Drive(**drive))
    g = GainSet(CurrentGains(gains["current"]), SpeedGains(gains["speed"]), PositionGains(gains["position"]))
    return axis, g


def check_analysis(result: Analysis):
    """Fixed shapes; every NaN margin or unstable loop reported in a flag on that loop."""
    assert isinstance(result, Analysis)
    assert set(result.margins) == set(LOOPS) == set(result.steps)
    n = len(result.frequency.omega_rad_s)
    assert result.stiffness_hz.shape == result.dynamic_stiffness.shape == (n,)
    for loop in LOOPS:
        m = result.margins[loop]
        assert isinstance(m.stable, bool)
        assert m.unstable_poles >= 0 and (m.unstable_poles == 0) == m.stable
        loop_flags = [f for f in result.flags if f.loop == loop]
        if not m.stable:
            assert any(f.severity == "error" for f in loop_flags), (loop, m, result.flags)
        values = (m.phase_margin_deg, m.gain_margin_db, m.sensitivity_peak, m.delay_margin_s)
        if any(math.isnan(v) for v in values):
            assert loop_flags, (loop, m)
        assert not math.isnan(m.sensitivity_peak) or loop_flags
        assert result.frequency.open_loop[loop].shape == (n,)
    for f in result.flags:
        assert f.severity in ("error", "warning", "info") and f.message
    summary = analysis_summary(result)
    assert set(summary["loops"]) == set(LOOPS)


@PROPERTY
@given(st.one_of(axis_and_gains(3.0), axis_and_gains(10.0)))
def test_any_finite_positive_parameters_give_an_analysis_or_an_input_error(params):
    """Physical parameters within +-3 decades of a small servo axis, or +-10 decades (far
    outside anything built, to find overflow and degenerate loops)."""
    try:
        axis, g = build(*params)
    except InputError as err:
        assert err.field and str(err)
        return
    try:
        result = analyse(axis, g, Targets())
    except InputError as err:
        assert err.field
        return
    check_analysis(result)


@PROPERTY
@given(st.floats(0.05, 200.0), st.floats(0.05, 200.0), st.floats(0.05, 200.0))
def test_gain_sweeps_including_unstable_ones_are_reported(current_scale, speed_scale, position_scale):
    """Gains scaled 0.05..200x on the delayed test axis: unstable loops come back stable=False
    with an error flag; nothing raises."""
    axis = axes.rigid_axis(load_inertia=6e-4, current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3,
                           position_delay_s=1 / 8e3)
    base = axes.nominal_gains(axis, 1000.0, 150.0)
    g = axes.gains(PI(base.current.pi.kp * current_scale, base.current.pi.ki * current_scale),
                   PI(base.speed.pi.kp * speed_scale, base.speed.pi.ki * speed_scale),
                   position_kp=base.position.kp_per_s * position_scale)
    check_analysis(analyse(axis, g))


def test_unstable_loop_is_a_reported_result():
    """Speed Kp x20 on the delayed axis: stable False, an error flag, finite step traces."""
    axis = axes.rigid_axis(current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3, position_delay_s=1 / 8e3)
    result = analyse(axis, axes.nominal_gains(axis, 1000.0, 150.0, speed_kp_scale=20.0))
    check_analysis(result)
    assert not result.margins["speed"].stable
    assert result.worst_severity == "error"
    assert np.all(np.isfinite(result.steps["speed"].value))


# --- bad values raise InputError naming the field ---------------------------------------------

def _motor(**kw):
    base = dict(kind="dc", resistance_ohm=1.2, inductance_h=2.4e-3, torque_constant_nm_per_a=0.5,
                back_emf_v_s_per_rad=0.5, inertia_kgm2=2e-4)
    return Motor(**{**base, **kw})


def _load(**kw):
    base = dict(gear_ratio=3.0, inertia=1e-3, compliant=True, stiffness=700.0, damping=0.3)
    return Load(**{**base, **kw})


def _drive(**kw):
    base = dict(bus_voltage_v=300.0, current_limit_a=10.0, pwm_frequency_hz=10e3, current_rate_hz=20e3,
                speed_rate_hz=10e3, position_rate_hz=5e3)
    return Drive(**{**base, **kw})


def _gainset(current=PI(15.0, 7500.0), speed=PI(0.2, 50.0), **position):
    return GainSet(CurrentGains(current), SpeedGains(speed), PositionGains(**{"kp_per_s": 200.0, **position}))


NAN, INF = float("nan"), float("inf")
ANY_BAD = (0.0, -1.0, -1e-9, NAN, INF, -INF)
NOT_FINITE_OR_NEGATIVE = (-1.0, -1e-9, NAN, INF, -INF)   # fields where 0 is allowed
NEGATIVE_OR_ZERO = (0.0, -1.0, NAN, -INF)                  # ratings: inf means "not rated"

# (constructor, keyword, field named in the error, bad values)
FIELDS = [
    (_motor, "resistance_ohm", "motor.resistance", ANY_BAD),
    (_motor, "inductance_h", "motor.inductance", ANY_BAD),
    (_motor, "torque_constant_nm_per_a", "motor.kt", ANY_BAD),
    (_motor, "back_emf_v_s_per_rad", "motor.ke", ANY_BAD),
    (_motor, "inertia_kgm2", "motor.inertia", ANY_BAD),
    (_motor, "viscous_friction_nm_s_per_rad", "motor.viscous_friction", NOT_FINITE_OR_NEGATIVE),
    (_motor, "coulomb_friction_nm", "motor.coulomb_friction", NOT_FINITE_OR_NEGATIVE),
    (_motor, "continuous_current_a", "motor.continuous_current", NEGATIVE_OR_ZERO),
    (_motor, "max_speed_rad_s", "motor.max_speed", NEGATIVE_OR_ZERO),
    (_load, "gear_ratio", "load.gear_ratio", ANY_BAD),
    (_load, "inertia", "load.inertia", ANY_BAD),            # a compliant load needs a mass
    (_load, "viscous_friction", "load.viscous_friction", NOT_FINITE_OR_NEGATIVE),
    (_load, "stiffness", "load.stiffness", ANY_BAD),
    (_load, "damping", "load.damping", NOT_FINITE_OR_NEGATIVE),
    (_drive, "bus_voltage_v", "drive.bus_voltage", ANY_BAD),
    (_drive, "current_limit_a", "drive.current_limit", ANY_BAD),
    (_drive, "pwm_frequency_hz", "drive.pwm_frequency", ANY_BAD),
    (_drive, "current_rate_hz", "drive.current_rate", ANY_BAD),
    (_drive, "speed_rate_hz", "drive.speed_rate", ANY_BAD),
    (_drive, "position_rate_hz", "drive.position_rate", ANY_BAD),
    (_drive, "current_filter_hz", "drive.current_filter", NOT_FINITE_OR_NEGATIVE),
    (_drive, "current_delay_s", "drive.current_delay_s", (-1.0, INF, -INF)),   # NaN means "from samples"
    (_drive, "max_modulation", "drive.max_modulation", ANY_BAD),
    (lambda **kw: _gainset(current=PI(**{"kp": 15.0, "ki": 7500.0, **kw})), "kp", "current.kp", ANY_BAD),
    (lambda **kw: _gainset(current=PI(**{"kp": 15.0, "ki": 7500.0, **kw})), "ki", "current.ki",
     NOT_FINITE_OR_NEGATIVE),
    (lambda **kw: _gainset(speed=PI(**{"kp": 0.2, "ki": 50.0, **kw})), "kp", "speed.kp", ANY_BAD),
    (lambda **kw: _gainset(**kw), "kp_per_s", "position.kp", ANY_BAD),
    (lambda **kw: _gainset(**kw), "ki_per_s2", "position.ki", NOT_FINITE_OR_NEGATIVE),
    (lambda **kw: Notch(**{"centre_hz": 300.0, **kw}), "centre_hz", "notch.centre", ANY_BAD),
    (lambda **kw: SpeedGains(PI(0.2, 50.0), **kw), "feedback_lowpass_hz", "speed.feedback_lowpass",
     NOT_FINITE_OR_NEGATIVE),
]


@pytest.mark.parametrize("make, keyword, field, bad_values", FIELDS, ids=[f[2] for f in FIELDS])
def test_bad_value_raises_input_error_naming_the_field(make, keyword, field, bad_values):
    make()   # the base values are good
    for value in bad_values:
        with pytest.raises(InputError) as err:
            make(**{keyword: value})
        assert err.value.field == field, (value, err.value.field)
        assert field in str(err.value)
        assert "expected" in str(err.value)


@PROPERTY
@given(st.sampled_from(FIELDS), st.data())
def test_bad_values_from_hypothesis_raise_input_error(entry, data):
    """The same over hypothesis-drawn bad values: any negative float, zero where not allowed,
    NaN, +-inf."""
    make, keyword, field, bad_values = entry
    candidates = [st.floats(max_value=-1e-300, allow_nan=False, allow_infinity=True)]
    if 0.0 in bad_values:
        candidates.append(st.just(0.0))
    if any(isinstance(v, float) and math.isnan(v) for v in bad_values):
        candidates.append(st.just(NAN))
    if INF in bad_values:
        candidates.append(st.just(INF))
    value = data.draw(st.one_of(candidates))
    with pytest.raises(InputError) as err:
        make(**{keyword: value})
    assert err.value.field == field


@pytest.mark.parametrize("kwargs, field", [
    (dict(current_rate_hz=5e3), "drive.current_rate"),        # below the PWM frequency
    (dict(current_rate_hz=30e3), "drive.current_rate"),       # above twice the PWM frequency
    (dict(speed_rate_hz=40e3), "drive.speed_rate"),           # faster than the current loop
    (dict(position_rate_hz=20e3), "drive.position_rate"),     # faster than the speed loop
])
def test_inconsistent_rates_name_the_field(kwargs, field):
    with pytest.raises(InputError) as err:
        _drive(**kwargs)
    assert err.value.field == field
