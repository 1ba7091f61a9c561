"""Motor constants, conventions and what follows for the axis, against CHECKS.md rows."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, strategies as st
from numpy.testing import assert_allclose
from scipy import linalg

from core.axis import Axis
from core.drive import Drive
from core.errors import InputError
from core.load import Load
from core.motor import KT_KE_TOLERANCE, Motor, motor_from_datasheet
from core.units import parse_quantity

DRIVE = Drive(bus_voltage_v=48.0, current_limit_a=10.0, pwm_frequency_hz=16e3,
              current_rate_hz=16e3, speed_rate_hz=8e3, position_rate_hz=4e3)


def dc_motor(**changes) -> Motor:
    values = dict(kind="dc", resistance_ohm=1.2, inductance_h=0.9e-3, torque_constant_nm_per_a=0.068,
                  back_emf_v_s_per_rad=0.068, inertia_kgm2=1.2e-5, viscous_friction_nm_s_per_rad=1e-5)
    values.update(changes)
    return Motor(**values)


# --- DC motor constants: common practice; energy balance ------------------------------------

def test_dc_kt_equals_ke_in_si():
    # Source: energy balance; common practice (1 N*m/A = 1 V*s/rad).
    motor, check = motor_from_datasheet(kind="dc", resistance_ohm=1.0, inductance_h=1e-3, inertia_kgm2=1e-5,
                                        ke_v_s_per_rad=parse_quantity("10 V/krpm", "V*s/rad", "ke"))
    assert_allclose(motor.torque_constant_nm_per_a, 10 * 0.0095493, rtol=1e-4)
    assert motor.torque_constant_nm_per_a == motor.back_emf_v_s_per_rad
    assert check.consistent


# --- PMSM constants: common practice (datasheet convention); torque equation standard ---------

def test_pmsm_kt_from_line_rms_ke():
    # Source: common practice (datasheet convention): Kt[N*m/Arms] = 0.016540 x Ke[Vrms line/krpm].
    ke = parse_quantity("40 V/krpm", "V*s/rad", "motor.ke")
    motor, check = motor_from_datasheet(kind="pmsm", resistance_ohm=1.0, inductance_h=5e-3, inertia_kgm2=1e-4,
                                        ke_v_s_per_rad=ke, ke_convention="line_rms", pole_pairs=4)
    kt_per_a_rms = motor.torque_constant_nm_per_a * math.sqrt(2.0)  # model Kt is per A peak
    assert_allclose(kt_per_a_rms, 0.6616, atol=1e-4)
    assert_allclose(kt_per_a_rms / 40.0, math.sqrt(3) * 60 / (2 * math.pi * 1000), rtol=1e-12)
    assert check.consistent


def test_pmsm_kt_from_flux_linkage():
    # Source: torque equation standard, amplitude-invariant dq: T = 1.5 * p * psi * iq.
    p, psi = 4, 0.1
    motor, _ = motor_from_datasheet(kind="pmsm", resistance_ohm=1.0, inductance_h=5e-3, inertia_kgm2=1e-4,
                                    ke_v_s_per_rad=p * psi, ke_convention="phase_peak", pole_pairs=p)
    assert_allclose(motor.torque_constant_nm_per_a, 0.600, atol=1e-12)          # Kt, peak
    assert_allclose(motor.torque_constant_nm_per_a * math.sqrt(2), 0.8485, atol=1e-4)  # Kt, rms
    # Kt,rms given per A rms comes back to the same model Kt.
    again, check = motor_from_datasheet(kind="pmsm", resistance_ohm=1.0, inductance_h=5e-3, inertia_kgm2=1e-4,
                                        kt_nm_per_a=0.6 * math.sqrt(2), kt_convention="rms", pole_pairs=p)
    assert_allclose(again.torque_constant_nm_per_a, 0.6, rtol=1e-12)
    assert_allclose(again.back_emf_v_s_per_rad, p * psi, rtol=1e-12)


@pytest.mark.parametrize("excess,consistent", [(0.05, True), (0.09, True), (0.11, False), (0.15, False), (-0.15, False)])
def test_kt_ke_mismatch_over_ten_percent_is_flagged(excess, consistent):
    # Source: common practice (datasheet convention) for the Kt-Ke relation; 10 % from the spec.
    ke = parse_quantity("40 V/krpm", "V*s/rad", "motor.ke")
    _, check = motor_from_datasheet(kind="pmsm", resistance_ohm=1.0, inductance_h=5e-3, inertia_kgm2=1e-4,
                                    ke_v_s_per_rad=ke, ke_convention="line_rms",
                                    kt_nm_per_a=0.66158 * (1 + excess), kt_convention="rms", pole_pairs=4)
    assert_allclose(check.relative_difference, excess, atol=2e-4)
    assert check.consistent is consistent
    assert KT_KE_TOLERANCE == 0.10


def test_line_to_line_winding_values_halve():
    # Source: common practice (star connection: line-to-line R and L are twice the phase values).
    motor, _ = motor_from_datasheet(kind="pmsm", resistance_ohm=2.8, inductance_h=10.4e-3, inertia_kgm2=1e-4,
                                    kt_nm_per_a=0.47, winding_convention="line", pole_pairs=4)
    assert (motor.resistance_ohm, motor.inductance_h) == (1.4, 5.2e-3)


# --- time constants and DC gain: derived -----------------------------------------------------

def test_time_constants_and_dc_speed_gain():
    # Source: derived from the armature and mechanical equations.
    motor = dc_motor()
    axis = Axis(motor, Load(), DRIVE)
    r, l, kt, ke, j, b = 1.2, 0.9e-3, 0.068, 0.068, 1.2e-5, 1e-5
    assert_allclose(axis.electrical_time_constant_s, l / r, rtol=1e-12)
    assert_allclose(axis.mechanical_time_constant_s, r * j / (kt * ke), rtol=1e-12)
    assert_allclose(axis.dc_speed_gain_rad_s_per_v, kt / (r * b + kt * ke), rtol=1e-12)
    # Independently: the steady state of  R i + Ke w = V,  Kt i - B w = 0  solved by numpy.
    i_w = np.linalg.solve([[r, ke], [kt, -b]], [1.0, 0.0])
    assert_allclose(axis.dc_speed_gain_rad_s_per_v, i_w[1], rtol=1e-12)


def test_mechanical_time_constant_is_the_slow_pole():
    # Source: derived; with L << and B = 0 the slow eigenvalue of the DC motor is -1/tau_m.
    r, l, k, j = 1.2, 1e-7, 0.068, 1.2e-5
    axis = Axis(dc_motor(inductance_h=l, viscous_friction_nm_s_per_rad=0.0), Load(), DRIVE)
    a = np.array([[-r / l, -k / l], [k / j, 0.0]])  # states i, w
    slow = max(linalg.eigvals(a).real)
    assert_allclose(-1.0 / slow, axis.mechanical_time_constant_s, rtol=1e-4)


# --- load reflection: derived ----------------------------------------------------------------

def test_gearbox_reflects_by_ratio_squared():
    # Source: derived (energy: J_load * w_load^2 = J_refl * w_motor^2).
    axis = Axis(dc_motor(), Load(gear_ratio=10.0, inertia=0.3, viscous_friction=0.5, coulomb_friction=4.0), DRIVE)
    assert_allclose(axis.load_inertia_kgm2, 0.3 / 100, rtol=1e-12)
    assert_allclose(axis.load_viscous_nm_s_per_rad, 0.5 / 100, rtol=1e-12)
    assert_allclose(axis.load_coulomb_nm, 4.0 / 10, rtol=1e-12)


def test_lead_screw_reflects_by_two_pi_over_lead():
    # Source: derived: motor rad per metre r = 2*pi*n / lead; mass reflects as m / r^2.
    lead, mass = 5e-3, 20.0
    axis = Axis(dc_motor(), Load(motion="linear", lead_m=lead, inertia=mass, coulomb_friction=30.0), DRIVE)
    r = 2 * math.pi / lead
    assert_allclose(axis.load.ratio, r, rtol=1e-12)
    assert_allclose(axis.load_inertia_kgm2, mass * (lead / (2 * math.pi)) ** 2, rtol=1e-12)
    assert_allclose(axis.load_coulomb_nm, 30.0 / r, rtol=1e-12)


# --- two-mass frequencies: Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015 -------------------

def test_two_mass_resonance_and_antiresonance():
    # Source: Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015, DOI 10.1109/TIA.2015.2416128
    # (formula; from memory for the paper). JM = JL = 0.005 kg*m^2, k = 700 N*m/rad.
    axis = Axis(dc_motor(inertia_kgm2=0.005), Load(inertia=0.005, compliant=True, stiffness=700.0), DRIVE)
    assert_allclose(axis.resonance_hz, 84.22, atol=0.01)
    assert_allclose(axis.antiresonance_hz, 59.55, atol=0.01)
    assert_allclose(axis.resonance_hz / axis.antiresonance_hz, math.sqrt(2), rtol=1e-12)
    # Independently: undamped modes of M x'' + K x = 0 by scipy (one rigid mode, one at w_r).
    m = np.diag([0.005, 0.005])
    k = 700.0 * np.array([[1.0, -1.0], [-1.0, 1.0]])
    w2 = np.sort(linalg.eigvals(k, m).real)
    assert_allclose(math.sqrt(w2[1]) / (2 * math.pi), axis.resonance_hz, rtol=1e-10)


def test_rigid_load_has_no_resonance():
    axis = Axis(dc_motor(), Load(inertia=1e-4), DRIVE)
    assert math.isnan(axis.resonance_hz) and math.isnan(axis.antiresonance_hz)


# --- speed quantisation: derived; common practice ------------------------------------------------

def test_speed_quantisation():
    # Source: derived: delta_w = 2*pi / (N * Tw); N = 10,000 counts/rev, Tw = 125 us -> 5.03 rad/s.
    drive = Drive(bus_voltage_v=48.0, current_limit_a=10.0, pwm_frequency_hz=8e3, current_rate_hz=8e3,
                  speed_rate_hz=8e3, position_rate_hz=4e3, encoder_counts_per_rev=10_000)
    assert_allclose(drive.speed_quantum_rad_s(), 5.03, atol=0.005)
    assert_allclose(drive.speed_quantum_rad_s(125e-6) * 60 / (2 * math.pi), 48.0, atol=0.01)


# --- property tests: constructors give an object or an InputError ----------------------------------

positive = st.floats(min_value=1e-200, max_value=1e200, allow_nan=False, allow_infinity=False)
nonneg = st.one_of(st.just(0.0), positive)


@given(r=positive, l=positive, kt=positive, ke=positive, j=positive, b=nonneg, f=nonneg,
       kind=st.sampled_from(["dc", "pmsm"]), p=st.integers(1, 200), ic=positive, ip=positive, w=positive)
def test_motor_takes_positive_values_or_says_why(r, l, kt, ke, j, b, f, kind, p, ic, ip, w):
    try:
        Motor(kind, r, l, kt, ke, j, b, f, p, ic, ip, w)
    except InputError:
        pass
    try:
        motor_from_datasheet(kind=kind, resistance_ohm=r, inductance_h=l, inertia_kgm2=j, kt_nm_per_a=kt,
                             ke_v_s_per_rad=ke, viscous_friction_nm_s_per_rad=b, coulomb_friction_nm=f,
                             pole_pairs=p, continuous_current_a=ic, peak_current_a=ip, max_speed_rad_s=w)
    except InputError:
        pass


@given(motion=st.sampled_from(["rotary", "linear"]), n=positive, lead=positive, m=nonneg, b=nonneg, f=nonneg,
       compliant=st.booleans(), k=positive, c=nonneg)
def test_load_takes_positive_values_or_says_why(motion, n, lead, m, b, f, compliant, k, c):
    try:
        Load(motion, n, lead, m, b, f, compliant, k, c)
    except InputError:
        pass


@given(v=positive, i=positive, pwm=positive, fc=positive, fs=positive, fp=positive,
       mod=st.sampled_from(["svpwm", "sinusoidal", "hbridge"]), frac=st.floats(0.0, 1.0),
       counts=st.floats(1.0, 1e13))
def test_drive_takes_positive_values_or_says_why(v, i, pwm, fc, fs, fp, mod, frac, counts):
    try:
        drive = Drive(v, i, pwm, fc, fs, fp, modulation=mod, max_modulation=frac, encoder_counts_per_rev=counts)
    except InputError:
        return
    assert all(d >= 0 for d in drive.loop_delays_s())


BAD = [math.nan, math.inf, -math.inf, -1.0, 0.0]
MOTOR_POSITIVE = ["resistance_ohm", "inductance_h", "torque_constant_nm_per_a", "back_emf_v_s_per_rad",
                  "inertia_kgm2"]
MOTOR_NONNEG = ["viscous_friction_nm_s_per_rad", "coulomb_friction_nm"]


def bad_cases(positive_names, nonneg_names):
    """(field, bad value) pairs: zero is bad only where the field must be positive."""
    return [(n, b) for n in positive_names for b in BAD] + [(n, b) for n in nonneg_names for b in BAD if b != 0.0]


@pytest.mark.parametrize("name,bad", bad_cases(MOTOR_POSITIVE, MOTOR_NONNEG))
def test_motor_rejects_nan_inf_negative_zero(name, bad):
    with pytest.raises(InputError):
        dc_motor(**{name: bad})


DRIVE_VALUES = dict(bus_voltage_v=48.0, current_limit_a=10.0, pwm_frequency_hz=16e3, current_rate_hz=16e3,
                    speed_rate_hz=8e3, position_rate_hz=4e3)


@pytest.mark.parametrize("name,bad", bad_cases(list(DRIVE_VALUES) + ["max_modulation", "encoder_counts_per_rev"], []))
def test_drive_rejects_nan_inf_negative_zero(name, bad):
    with pytest.raises(InputError):
        Drive(**{**DRIVE_VALUES, name: bad})


LOAD_VALUES = dict(motion="linear", gear_ratio=3.0, lead_m=0.1, inertia=8.0, compliant=True,
                   stiffness=3e5, damping=150.0)


@pytest.mark.parametrize("name,bad", bad_cases(["gear_ratio", "lead_m", "inertia", "stiffness"],
                                               ["viscous_friction", "coulomb_friction", "damping"]))
def test_load_rejects_nan_inf_negative_zero(name, bad):
    with pytest.raises(InputError):
        Load(**{**LOAD_VALUES, name: bad})
