"""Reference tests of core.responses: Laplace-inverted step and load-step responses.

Closed-form overshoots of CHECKS.md (magnitude optimum, symmetric optimum with and
without prefilter, second order) through step_response / inverse_laplace /
step_figures, and the traces against python-control and scipy on delay-free loops.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal
from scipy.optimize import brentq

from core.gains import PI
from core.loops import CascadeModel, FrequencyAlgebra
from core.responses import inverse_laplace, load_step_response, step_figures, step_response
from core.tuning import TuningSettings, tune_current, tune_speed

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

TWO_PI = 2 * math.pi
UNIT = 1e3   # python-control references in krad/s, i.e. their time unit is the millisecond

# Wrap-around of the shifted Fourier series is exp(-sigma T) = exp(-10) = 4.54e-5 of the
# value one period later (core.responses docstring; Dubner & Abate 1968, from memory).
WRAP = math.exp(-10.0)


# --- magnitude optimum, unity feedback ---------------------------------------------------

T_SIGMA = 50e-6
MO_SOURCE = ("Umland & Safiuddin, 'Magnitude and symmetric optimum criterion for the design of linear "
             "control systems', IEEE Trans. Ind. Appl. 26(3), 1990 (from memory for content)")


def _mo_model():
    axis = axes.rigid_axis(current_filter_hz=1 / (TWO_PI * T_SIGMA))
    pi, _ = tune_current(axis, TuningSettings(current_rule="magnitude_optimum"))
    return axis, axes.gains(pi, PI(0.01, 0.1), position_kp=1.0)


def _unity_feedback_of_current_open(axis, g):
    def transfer(alg):
        ol = CascadeModel(axis, g, alg).current_open
        return ol / (1 + ol)
    return transfer


def test_magnitude_optimum_step_overshoot():
    """L/(1 + L) of the MO loop overshoots 4.32 % (+-0.5 %, relative): via inverse_laplace."""
    axis, g = _mo_model()
    t, y = inverse_laplace(_unity_feedback_of_current_open(axis, g), 40 * T_SIGMA)
    final, overshoot, rise, settle = step_figures(t, y)
    assert_allclose(overshoot, 4.32, rtol=0.005, err_msg=MO_SOURCE)
    assert_allclose(final, 1.0, atol=2 * WRAP)


def test_magnitude_optimum_bandwidth():
    """|L/(1 + L)| falls 3 dB at 0.7071/Tsigma (+-0.5 %), found with scipy brentq on the core's L."""
    axis, g = _mo_model()
    transfer = _unity_feedback_of_current_open(axis, g)

    def gain(w):
        return abs(transfer(FrequencyAlgebra(np.array([w])))[0]) - 1 / math.sqrt(2)

    w3 = brentq(gain, 0.1 / T_SIGMA, 2 / T_SIGMA, xtol=1e-6)
    assert_allclose(w3 * T_SIGMA, 0.7071, rtol=0.005, err_msg=MO_SOURCE)


# --- symmetric optimum -------------------------------------------------------------------

SO_SOURCE = ("derived; the classic 43 % / 8 % figures are in Umland & Safiuddin 1990 (from memory); "
             "Kessler, 'Das symmetrische Optimum', Regelungstechnik 6, 1958 (from memory)")
T_EQ = 1 / (TWO_PI * 1000.0)


def _so_model(a):
    axis = axes.rigid_axis()
    settings = TuningSettings(current_rule="pole_zero", current_bandwidth_hz=1000.0,
                              speed_rule="symmetric_optimum", symmetric_optimum_a=a)
    current, _ = tune_current(axis, settings)
    speed, _ = tune_speed(axis, current, settings)
    return axis, axes.gains(current, speed, position_kp=1.0)


@pytest.mark.parametrize("a, overshoot_pct, tol_pct", [(2.0, 43.4, 0.2), (3.0, 24.9, 0.2)])
def test_symmetric_optimum_step_without_prefilter(a, overshoot_pct, tol_pct):
    """Speed closed loop, no prefilter: a = 2 43.4 %, a = 3 24.9 % (+-0.2 % points, CHECKS.md)."""
    axis, g = _so_model(a)
    r = step_response(axis, g, "speed", 20 * a * a * T_EQ)
    assert_allclose(r.overshoot_pct, overshoot_pct, atol=tol_pct, err_msg=SO_SOURCE)
    assert_allclose(r.final_value, 1.0, atol=2 * WRAP)


def test_symmetric_optimum_step_with_prefilter():
    """With the prefilter 1/(1 + a^2 Teq s), a = 2: 8.15 % (+-0.2 % points), via inverse_laplace."""
    a = 2.0
    axis, g = _so_model(a)
    t, y = inverse_laplace(lambda alg: CascadeModel(axis, g, alg).speed_closed / (1 + a * a * T_EQ * alg.s),
                           20 * a * a * T_EQ)
    _, overshoot, _, _ = step_figures(t, y)
    assert_allclose(overshoot, 8.15, atol=0.2, err_msg=SO_SOURCE)


@pytest.mark.parametrize("a", [2.0, 3.0, 4.0])
def test_symmetric_optimum_closed_loop_factors(a):
    """The SO closed loop is (a^2 T s + 1) / ((a T s + 1)(a^2 T^2 s^2 + a(a-1) T s + 1)) (derived,
    CHECKS.md "SO step"): the core's speed_closed equals it, rtol 1e-9; and its step from scipy
    equals the core's Laplace-inverted trace within 1e-3 (wrap-around 4.5e-5 plus truncation)."""
    axis, g = _so_model(a)
    w = np.logspace(1, 5, 200)
    s = 1j * w
    T = T_EQ
    expected = (a * a * T * s + 1) / ((a * T * s + 1) * (a * a * T * T * s * s + a * (a - 1) * T * s + 1))
    assert_allclose(CascadeModel(axis, g, FrequencyAlgebra(w)).speed_closed, expected, rtol=1e-9)
    r = step_response(axis, g, "speed", 20 * a * a * T)
    num = [a * a * T, 1.0]
    den = np.polymul([a * T, 1.0], [a * a * T * T, a * (a - 1) * T, 1.0])
    _, y = signal.step((num, den), T=r.time_s)
    assert_allclose(r.value, y, atol=1e-3)


# --- second order --------------------------------------------------------------------------

@pytest.mark.parametrize("zeta, overshoot_pct, tol_pct", [(0.5, 16.30, 0.01), (1 / math.sqrt(2), 4.32, 0.01)])
def test_second_order_step_overshoot(zeta, overshoot_pct, tol_pct):
    """overshoot = exp(-pi zeta / sqrt(1 - zeta^2)): zeta 0.5 -> 16.30 %, 0.7071 -> 4.32 %.

    Source: Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic Systems" (from
    memory). Reached as the speed loop with a P controller behind a cancelled current loop
    of bandwidth 2 zeta wn (zero delays): T = wn^2/(s^2 + 2 zeta wn s + wn^2). Tolerance
    +-0.01 % points (CHECKS.md gives two decimals; trace sampling and the wrap-around bias
    of the final value cost ~1e-3 points).
    """
    wn = TWO_PI * 100.0
    axis = axes.rigid_axis()
    kp = wn**2 * axes.J_MOTOR / (axes.KT * 2 * zeta * wn)
    g = axes.gains(axes.cancelling_current_pi(2 * zeta * wn), PI(kp, 0.0), position_kp=1.0)
    r = step_response(axis, g, "speed", 20 / (zeta * wn))
    assert_allclose(r.overshoot_pct, overshoot_pct, atol=tol_pct)
    assert_allclose(r.overshoot_pct, 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2)), atol=tol_pct)
    # The same trace from a second-order transfer written directly (FrequencyAlgebra.tf).
    t, y = inverse_laplace(lambda alg: alg.tf([wn * wn], [1.0, 2 * zeta * wn, wn * wn]), 20 / (zeta * wn))
    assert_allclose(step_figures(t, y)[1], overshoot_pct, atol=tol_pct)
    assert_allclose(y, r.value, atol=1e-9)


# --- python-control and scipy on the delay-free cascade ------------------------------------

STEP_CASES = [("current", 3e-3), ("speed", 30e-3), ("position", 0.2)]


@pytest.mark.parametrize("loop, horizon_s", STEP_CASES)
def test_step_responses_equal_python_control(loop, horizon_s):
    """step_response of each closed loop against control.step_response of the hand-built
    delay-free model (same samples). Tolerance 1e-3 of the final value: the inversion's
    wrap-around is 4.5e-5 and the truncation of the Fourier series adds ~1e-4 away from
    t = 0. The sample at t = 0 is held separately (test_trace_starts_at_zero).
    """
    axis, g = axes.reference_axis(False)
    r = step_response(axis, g, loop, horizon_s)
    ref = axes.reference_loops(axis, g, None, UNIT)[f"{loop}_closed"]
    y = np.squeeze(control.step_response(ref, T=r.time_s * UNIT).outputs)
    scale = abs(y[-1])
    assert_allclose(r.value, y, atol=1e-3 * scale)
    assert_allclose(r.final_value, np.mean(y[-len(y) // 50:]), atol=1e-3 * scale)



def _load_step_trace():
    axis, _ = axes.reference_axis(False)
    g = axes.nominal_gains(axis, 1000.0, 150.0, decouple=True, speed_lowpass_hz=1500.0)
    r = load_step_response(axis, g, 0.5, 0.05)
    return r.speed_rad_s, np.max(np.abs(r.speed_rad_s))


def _step_trace(loop, horizon_s):
    axis, g = axes.reference_axis(False)
    r = step_response(axis, g, loop, horizon_s)
    return r.value, abs(r.final_value)


@pytest.mark.parametrize("case", [
    pytest.param(("speed", 30e-3), id="speed-step"),
    pytest.param(("position", 0.2), id="position-step"),
    pytest.param(("current", 3e-3), id="current-step"),
    pytest.param("load", id="load-step"),
])
def test_trace_starts_at_zero(case):
    """Every strictly proper response is exactly 0 at t = 0 (derived: initial-value theorem,
    s * F(s)/s -> 0); held to 1e-3 of the trace's scale like the rest of the trace.

    Before the initial value and slope were carried analytically (core.responses._Contour)
    the current step started at 1.9e-3 of its final value and the load step at 6.4e-3 of
    its dip; this is the regression test for that.
    """
    y, scale = _load_step_trace() if case == "load" else _step_trace(*case)
    assert abs(y[0]) <= 1e-3 * scale


def test_step_response_equals_scipy_signal_step():
    """The speed step against scipy.signal.step of the same delay-free transfer (num/den from
    python-control, time in ms), 1e-3 of the final value."""
    axis, g = axes.reference_axis(False)
    r = step_response(axis, g, "speed", 30e-3)
    ref = axes.reference_loops(axis, g, None, UNIT)["speed_closed"]
    _, y = signal.step((ref.num[0][0], ref.den[0][0]), T=r.time_s * UNIT)
    assert_allclose(r.value, y, atol=1e-3 * abs(y[-1]))


def _load_reference(axis, g):
    """w_m / T_load with all loops closed, decoupled back-EMF, from the physics:
    w = M (Kt i - T_l), i = Ic i*, i* = -Cw (Hw + Fw Cp / s) w  (theta* = 0).
    Built on the hand-built loops of axes.reference_loops (delay-free, krad/s units)."""
    refs = axes.reference_loops(axis, g, None, UNIT)
    s = UNIT * control.tf("s")
    j, b = axis.total_inertia_kgm2, axis.total_viscous_nm_s_per_rad
    mech = 1 / (j * s + b)
    kt = axis.motor.torque_constant_nm_per_a
    cw = g.speed.pi.kp + g.speed.pi.ki / s
    hw = 1 / (1 + s / (TWO_PI * g.speed.feedback_lowpass_hz))
    cp = g.position.kp_per_s
    reaction = cw * (hw + cp / s)
    return -mech / (1 + mech * kt * refs["current_closed"] * reaction)


def test_load_step_response_equals_python_control():
    """Speed dip and position error after a 0.5 N*m load step, against control.step_response
    of the hand-built disturbance transfer (and its integral): 1e-3 of the largest deviation
    (the reasoning of test_step_responses_equal_python_control)."""
    axis, base = axes.reference_axis(False)
    g = axes.nominal_gains(axis, 1000.0, 150.0, decouple=True, speed_lowpass_hz=1500.0)
    torque = 0.5
    r = load_step_response(axis, g, torque, 0.05)
    ref = torque * _load_reference(axis, g)
    speed = np.squeeze(control.step_response(ref, T=r.time_s * UNIT).outputs)
    position = np.squeeze(control.step_response(ref / (UNIT * control.tf("s")), T=r.time_s * UNIT).outputs)
    # From the second sample on; t = 0 is held in test_trace_starts_at_zero.
    assert_allclose(r.speed_rad_s, speed, atol=1e-3 * np.max(np.abs(speed)))
    assert_allclose(r.position_rad, position, atol=1e-3 * np.max(np.abs(position)))
    assert_allclose(r.speed_dip_rad_s, speed[np.argmax(np.abs(speed))], rtol=1e-3)
    assert r.speed_dip_rad_s < 0    # a positive load torque slows the motor
    assert 0 < r.recovery_time_s < 0.05


def test_ramp_integration_is_the_integral_of_the_step():
    """integrations=2 gives the integral of the step trace (derived), within 1e-3 of its end value."""
    t, y = inverse_laplace(lambda alg: alg.tf([1.0], [1e-3, 1.0]), 0.02)
    t2, ramp = inverse_laplace(lambda alg: alg.tf([1.0], [1e-3, 1.0]), 0.02, integrations=2)
    exact = t2 - 1e-3 * (1 - np.exp(-t2 / 1e-3))
    assert_allclose(ramp, exact, atol=1e-3 * exact[-1])
    # The whole trace, t = 0 included: the lag starts with slope 1/tau, carried analytically.
    assert_allclose(y, 1 - np.exp(-t / 1e-3), atol=1e-4)


def test_step_figures_of_a_known_trace():
    """step_figures on the analytic second-order step (zeta = 0.5): overshoot, 2 % settling
    and 10-90 % rise from the closed form sampled finely (derived), tolerances one sample."""
    zeta, wn = 0.5, 1.0
    t = np.linspace(0, 60, 60001)
    wd = wn * math.sqrt(1 - zeta**2)
    y = 1 - np.exp(-zeta * wn * t) * (np.cos(wd * t) + zeta / math.sqrt(1 - zeta**2) * np.sin(wd * t))
    final, overshoot, rise, settle = step_figures(t, y)
    assert_allclose(final, 1.0, atol=1e-9)
    assert_allclose(overshoot, 16.30, atol=0.01)
    # Rise and settling from brentq on the closed form.
    f = lambda x, level: 1 - math.exp(-zeta * x) * (math.cos(wd * x) + zeta / math.sqrt(0.75) * math.sin(wd * x)) - level
    assert_allclose(rise, brentq(f, 0.5, 2.4, args=(0.9,)) - brentq(f, 0.01, 1.2, args=(0.1,)), atol=2e-3)
    assert 0 < settle < 60
