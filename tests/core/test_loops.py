"""Reference tests of core.loops: the cascade's frequency responses.

Held against closed-form loops (CHECKS.md rows "current loop, pole-zero
cancellation", "digital delay", "notch", "two-mass load") and against python-control
models of the same axis written here by hand from the physics (1/(R+sL), Kt/(Js+B),
PI, feedback), with the delays as Pade approximants where python-control needs them.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.gains import PI, Notch
from core.loops import CascadeModel, FrequencyAlgebra, control_models, notch

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

# Frequencies of the loop studies below, rad/s (1 rad/s .. 100 krad/s).
OMEGA = np.logspace(0, 5, 301)

# The integrator-plus-delay case of CHECKS.md: wc = 2 pi 1000 rad/s, Td = 93.75 us.
WC_CURRENT = 2 * math.pi * 1000.0
TD_CURRENT = 93.75e-6


# --- closed forms --------------------------------------------------------------------

def test_pole_zero_cancellation_gives_integrator_plus_delay():
    """Kp = L wc, Ki = R wc with back-EMF decoupled: L(s) = wc e^(-s Td)/s exactly.

    Source: common practice (CHECKS.md "current loop, pole-zero cancellation").
    Tolerance rtol 1e-12: the same expression up to rounding.
    """
    axis = axes.rigid_axis(current_delay_s=TD_CURRENT)
    g = axes.gains(axes.cancelling_current_pi(WC_CURRENT), PI(0.01, 0.1))
    model = CascadeModel(axis, g, FrequencyAlgebra(OMEGA))
    s = 1j * OMEGA
    assert_allclose(model.current_open, WC_CURRENT * np.exp(-s * TD_CURRENT) / s, rtol=1e-12)


def test_cancelled_current_loop_closes_to_first_order_lag_for_the_speed_loop():
    """Zero current delay, cancellation: i/i* = 1/(1 + s/wc), so w/i* = Kt/(J s) / (1 + s Teq).

    That is the symmetric-optimum plant with Teq = 1/wc (derived; CHECKS.md "symmetric
    optimum" plant). Tolerance rtol 1e-12.
    """
    axis = axes.rigid_axis()
    g = axes.gains(axes.cancelling_current_pi(WC_CURRENT), PI(0.01, 0.1))
    model = CascadeModel(axis, g, FrequencyAlgebra(OMEGA))
    s = 1j * OMEGA
    assert_allclose(model.current_closed, 1.0 / (1.0 + s / WC_CURRENT), rtol=1e-12)
    expected = axes.KT / (axes.J_MOTOR * s) / (1.0 + s / WC_CURRENT)
    assert_allclose(model.speed_plant, expected, rtol=1e-12)


def test_magnitude_optimum_open_loop_shape():
    """Ti = L/R, Kp = L/(2 Tsigma) with the filter as Tsigma: L = 1/(2 Tsigma s (1 + Tsigma s)).

    Source: Umland & Safiuddin, "Magnitude and symmetric optimum criterion for the design
    of linear control systems", IEEE Trans. Ind. Appl. 26(3), 1990 (from memory for
    content). Tolerance rtol 1e-12.
    """
    t_sigma = 50e-6
    axis = axes.rigid_axis(current_filter_hz=1.0 / (2 * math.pi * t_sigma))
    kp = axes.L_H / (2 * t_sigma)
    g = axes.gains(PI(kp, kp * axes.R_OHM / axes.L_H), PI(0.01, 0.1))
    s = 1j * OMEGA
    model = CascadeModel(axis, g, FrequencyAlgebra(OMEGA))
    assert_allclose(model.current_open, 1.0 / (2 * t_sigma * s * (1 + t_sigma * s)), rtol=1e-12)


# Digital delay, CHECKS.md: at f = fs/10 a 1.5-sample delay lags -54.0 deg; the ZOH alone
# lags -wT/2 = -18.0 deg with gain sinc(wT/2) = 0.9836.
# Source: Franklin, Powell & Workman, "Digital Control of Dynamic Systems", 1997 (from memory).
@pytest.mark.parametrize("samples, expected_deg, tol_deg", [
    (1.5, -54.0, 0.01),   # computation (1 T) + PWM/ZOH (0.5 T)
    (0.5, -18.0, 0.01),   # ZOH phase alone
    (1.0, -36.0, 0.01),   # derived: one sample at fs/10 = 360/10
])
def test_digital_delay_phase_at_tenth_of_sample_rate(samples, expected_deg, tol_deg):
    fs = 16e3
    w = 2 * math.pi * fs / 10
    alg = FrequencyAlgebra(np.array([w]))
    d = alg.delay(samples / fs)
    assert_allclose(np.degrees(np.angle(d)), [expected_deg], atol=tol_deg)
    assert_allclose(np.abs(d), [1.0], rtol=1e-14)


def test_zero_order_hold_gain_and_phase_at_tenth_of_sample_rate():
    """ZOH (1 - e^(-sT))/(sT) at fs/10: gain sinc(wT/2) = 0.9836, phase -18.0 deg.

    Source: Franklin, Powell & Workman, "Digital Control of Dynamic Systems", 1997 (from
    memory); the numpy evaluation is derived. Tolerances: gain +-5e-5 (4 digits given),
    phase +-0.01 deg.
    """
    T = 1 / 16e3
    w = 2 * math.pi / (10 * T)
    alg = FrequencyAlgebra(np.array([w]))
    zoh = (1.0 - alg.delay(T)) / (alg.s * T)
    assert_allclose(np.abs(zoh), [0.9836], atol=5e-5)
    assert_allclose(np.abs(zoh), [np.sinc(w * T / 2 / np.pi)], rtol=1e-12)
    assert_allclose(np.degrees(np.angle(zoh)), [-18.0], atol=0.01)


# Notch, CHECKS.md: zz = 0.05, zp = 0.5; depth zz/zp = -20.0 dB at wn; at wn/2 -1.58 dB, -29.9 deg.
# Source: Ellis, "Control System Design Guide", 4th ed. 2012 (from memory).
@pytest.mark.parametrize("fraction, gain_db, phase_deg, tol_db, tol_deg", [
    (1.0, -20.0, 0.0, 1e-9, 1e-9),
    (0.5, -1.58, -29.9, 0.005, 0.05),
    (2.0, -1.58, 29.9, 0.005, 0.05),  # derived: the notch is symmetric in log(w)
])
def test_notch_depth_and_shoulder(fraction, gain_db, phase_deg, tol_db, tol_deg):
    fn = 300.0
    alg = FrequencyAlgebra(np.array([2 * math.pi * fn * fraction]))
    n = notch(alg, fn, 0.05, 0.5)
    assert_allclose(20 * np.log10(np.abs(n)), [gain_db], atol=tol_db)
    assert_allclose(np.degrees(np.angle(n)), [phase_deg], atol=tol_deg)


def test_notch_depth_matches_gainset_property():
    """Notch.depth_db = 20 log10(zz/zp) (derived) equals the evaluated depth."""
    n = Notch(250.0, 0.05, 0.5)
    alg = FrequencyAlgebra(np.array([2 * math.pi * 250.0]))
    assert_allclose(20 * np.log10(np.abs(notch(alg, 250.0, 0.05, 0.5))), [n.depth_db], rtol=1e-12)
    assert_allclose(n.depth_db, -20.0, rtol=1e-12)


@pytest.mark.parametrize("damping", [0.0, 0.3])
def test_two_mass_motor_speed_per_torque_formula(damping):
    """w_m/T_m = (JL s^2 + c s + k) / (s (JM JL s^2 + (JM+JL) c s + (JM+JL) k)).

    Source: Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015,
    DOI 10.1109/TIA.2015.2416128 (formula; from memory for the paper). rtol 1e-9.
    """
    axis = axes.two_mass_axis(damping=damping)
    g = axes.nominal_gains(axis)
    w = np.logspace(0, 4, 400)
    s = 1j * w
    jm = jl = axes.TWO_MASS_J
    k, c = axes.TWO_MASS_K, damping
    expected = (jl * s**2 + c * s + k) / (s * (jm * jl * s**2 + (jm + jl) * c * s + (jm + jl) * k))
    model = CascadeModel(axis, g, FrequencyAlgebra(w))
    assert_allclose(model.motor_speed_per_torque, expected, rtol=1e-9)


# --- python-control, built independently here -------------------------------------------

TRANSFERS = ["current_open", "current_closed", "speed_open", "speed_closed", "position_open",
             "position_closed"]


@pytest.mark.parametrize("name", TRANSFERS)
def test_delay_free_responses_equal_python_control(name):
    """Every loop transfer equals the hand-built python-control model (delay-free axis).

    Source: derived (the physics of the module docstring, written independently). rtol
    1e-9: both evaluate the same rational functions; python-control's polynomial products
    lose a few digits, nothing more.
    """
    axis, g = axes.reference_axis(delays=False)
    ref = axes.reference_loops(axis, g)[name]
    model = CascadeModel(axis, g, FrequencyAlgebra(OMEGA))
    assert_allclose(getattr(model, name), ref(1j * OMEGA), rtol=1e-9)


@pytest.mark.parametrize("name", TRANSFERS)
def test_responses_with_delays_equal_pade_model_at_low_frequency(name):
    """With delays, equal to python-control with control.pade(Td, 5) where w*Td < 1.

    A [5/5] Pade approximant of e^(-x) errs by about (5!)^2/(10! 11!) x^11 ~ 1e-10 at
    x = 1 (derived), so rtol 1e-7 leaves room for the loop's amplification of that error.
    """
    axis, g = axes.reference_axis(delays=True)
    td_max = max(axis.drive.loop_delays_s())
    w = OMEGA[OMEGA * td_max < 1.0]
    ref = axes.reference_loops(axis, g, pade_order=5)[name]
    model = CascadeModel(axis, g, FrequencyAlgebra(w))
    assert_allclose(getattr(model, name), ref(1j * w), rtol=1e-7)


@pytest.mark.parametrize("loop", ["current", "speed", "position"])
def test_control_models_agree_with_frequency_algebra_at_low_frequency(loop):
    """core.loops.control_models (ControlAlgebra, Pade 5) against the exact-delay FrequencyAlgebra.

    Same Pade argument as above; the balanced state-space realisations add rounding,
    so rtol 1e-6 where w*Td < 1.
    """
    axis, g = axes.reference_axis(delays=True)
    td_max = max(axis.drive.loop_delays_s())
    w = OMEGA[OMEGA * td_max < 1.0]
    models = control_models(axis, g, pade_order=5)
    exact = CascadeModel(axis, g, FrequencyAlgebra(w))
    lt = models[loop]
    assert lt.pade_order == 5
    assert isinstance(lt.open_loop, control.StateSpace)
    assert_allclose(lt.open_loop(1j * w), getattr(exact, f"{loop}_open"), rtol=1e-6)
    assert_allclose(lt.closed_loop(1j * w), getattr(exact, f"{loop}_closed"), rtol=1e-6)


def test_control_models_delay_free_equal_exact():
    """Without delays the Pade order does not matter: control_models equals FrequencyAlgebra, rtol 1e-8."""
    axis, g = axes.reference_axis(delays=False)
    models = control_models(axis, g, pade_order=3)
    exact = CascadeModel(axis, g, FrequencyAlgebra(OMEGA))
    for loop in ("current", "speed", "position"):
        assert_allclose(models[loop].open_loop(1j * OMEGA), getattr(exact, f"{loop}_open"), rtol=1e-8)


def test_following_error_without_feedforward_is_the_position_sensitivity():
    """With no feedforward, (th* - th)/th* = 1/(1 + L_p) (derived); velocity and inertia
    feedforward take the error off the feedback loop: at 0.5 Hz it falls by more than
    20x (derived: with ideal inner loops it would vanish; the loops' lag leaves a rest)."""
    from dataclasses import replace

    axis, g = axes.reference_axis(True)
    w = 2 * math.pi * np.array([0.5, 2.0, 10.0])
    none = replace(g, position=replace(g.position, velocity_ff=0.0, acceleration_ff=0.0))
    m = CascadeModel(axis, none, FrequencyAlgebra(w))
    assert_allclose(m.following_error, 1.0 / (1.0 + m.position_open), rtol=1e-12)
    full = replace(g, position=replace(g.position, velocity_ff=1.0, acceleration_ff=1.0))
    e_full = CascadeModel(axis, full, FrequencyAlgebra(w)).following_error
    assert abs(e_full[0]) < abs(m.following_error[0]) / 20
