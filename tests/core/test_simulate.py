"""The sampled drive against independent references: scipy, python-control and closed forms.

Every expected value names its source beside it: "derived" (recomputed here from the
model equations), "common practice", or the reference implementation used.
"""

import json
import math
import os
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import control
import numpy as np
import pytest
import scipy.linalg
import scipy.signal
from numpy.testing import assert_allclose

from core.errors import InputError
from core.gains import PI, Notch
from core.loops import CascadeModel, ControlAlgebra, control_models
from core.simulate import (discretise_zoh, plant_matrices, result_to_json, simulate_scenario, tustin_lowpass,
                           tustin_notch, warm_up, write_csv)

try:
    from sim_fixtures import compliant_axis, linear_axis, make_axis, make_drive, make_gains, make_motor
except ImportError:  # pragma: no cover - run from another root
    from tests.core.sim_fixtures import compliant_axis, linear_axis, make_axis, make_drive, make_gains, make_motor

FINE = 2.0 ** 32     # encoder counts per rev for the linear checks: quantisation noise ~1e-5 rad/s


def setup_module(_):
    warm_up()


# --------------------------------------------------------------------------- plant
@pytest.mark.parametrize("axis_fn", [make_axis, compliant_axis, linear_axis])
def test_plant_zoh_matches_cont2discrete_and_expm(axis_fn):
    """Reference: scipy.signal.cont2discrete(method="zoh"), and expm(A T) for Ad."""
    ax = axis_fn()
    a, b = plant_matrices(ax)
    t = 1.0 / 16000.0
    ad, bd = discretise_zoh(a, b, t)
    ref = scipy.signal.cont2discrete((a, b, np.eye(a.shape[0]), np.zeros(b.shape)), t, method="zoh")
    assert_allclose(ad, ref[0], rtol=1e-12, atol=1e-14)
    assert_allclose(bd, ref[1], rtol=1e-12, atol=1e-14)
    assert_allclose(ad, scipy.linalg.expm(a * t), rtol=1e-12, atol=1e-14)


def test_current_loop_equals_exact_discrete_recursion():
    """The kernel's current loop equals a recursion written here from the model (derived):
    x+ = Ad x + Bd v[k-1], v[k] = Kp e[k] + I[k], I[k] = I[k-1] + Ki T e[k]; tolerance 1e-9
    (round-off only: the same equations, independently coded, with scipy's ZOH matrices)."""
    ax = make_axis(drive=make_drive(encoder_counts_per_rev=FINE))
    g = make_gains(ax, decouple=False)
    r = simulate_scenario(ax, g, dict(kind="current_step", step="0.5 A", duration="4 ms", limits=False))
    a, b = plant_matrices(ax)
    t = 1.0 / 16000.0
    ad, bd, *_ = scipy.signal.cont2discrete((a, b[:, :1], np.eye(3), np.zeros((3, 1))), t, method="zoh")
    kp, ki = g.current.pi.kp, g.current.pi.ki
    x = np.zeros(3)
    integ = v_prev = 0.0
    ref = []
    for _ in range(len(r.time_s)):
        ref.append(x[0])
        e = 0.5 - x[0]
        integ += ki * t * e
        v = kp * e + integ
        x = ad @ x + bd[:, 0] * v_prev
        v_prev = v
    assert_allclose(r.current_a, ref, rtol=0, atol=1e-9 * 0.5)


@pytest.mark.parametrize("comp_samples", [1.0, 2.0, 3.0])
def test_pure_delay_of_k_samples(comp_samples):
    """A computation delay of k samples (PWM 0.5, carried by the ZOH) shows exactly k
    samples of dead time: v_applied[n] = v_cmd[n-k], and the current is exactly zero until
    sample k+1 after the step (derived)."""
    k = int(comp_samples)
    ax = make_axis(drive=make_drive(computation_delay_samples=comp_samples))
    r = simulate_scenario(ax, make_gains(ax), dict(kind="current_step", step="1 A", step_time="1 ms",
                                                   duration="3 ms", limits=False))
    k0 = 16
    assert r.voltage_command_v[k0] != 0.0
    assert_allclose(r.voltage_applied_v[k:], r.voltage_command_v[:-k], rtol=0, atol=0)
    assert np.all(r.current_a[: k0 + k + 1] == 0.0)
    assert r.current_a[k0 + k + 1] > 0.0


def test_fractional_pwm_delay_is_a_sample_average():
    """PWM delay 1 sample (total 2 = ZOH 0.5 + 1.5 buffered): applied = 0.5 (u[n-1] + u[n-2]) (derived)."""
    ax = make_axis(drive=make_drive(pwm_delay_samples=1.0))
    r = simulate_scenario(ax, make_gains(ax), dict(kind="current_step", step="1 A", duration="2 ms", limits=False))
    u = r.voltage_command_v
    assert_allclose(r.voltage_applied_v[2:], 0.5 * (u[1:-1] + u[:-2]), rtol=1e-15, atol=1e-15)


# --------------------------------------------------------------------------- linear references
def _linear(ax, g, loop):
    return control_models(ax, g, pade_order=6)[loop].closed_loop


@pytest.mark.parametrize("speed_rate, decouple, rms_tol, overshoot_tol_pp", [
    # The linear model replaces the sampling and ZOH by a 1.5-sample delay; at wc*T = 0.39 rad
    # that is a few % of the step during the rise (first samples of the staircase).
    (16000.0, True, 0.05, 1.5),
    (16000.0, False, 0.05, 1.5),
    (8000.0, False, 0.05, 1.5),
])
def test_current_step_matches_linear_model(speed_rate, decouple, rms_tol, overshoot_tol_pp):
    """Reference: python-control step response of core.loops' current closed loop (Pade 6)."""
    ax = make_axis(drive=make_drive(speed_rate_hz=speed_rate, encoder_counts_per_rev=FINE))
    g = make_gains(ax, decouple=decouple)
    r = simulate_scenario(ax, g, dict(kind="current_step", step="0.1 A", duration="5 ms", limits=False))
    _, y = control.step_response(_linear(ax, g, "current"), T=r.time_s)
    y = 0.1 * y
    err = r.current_a - y
    assert np.sqrt(np.mean(err ** 2)) / 0.1 < rms_tol
    assert abs((r.current_a.max() - y.max()) / 0.1 * 100) < overshoot_tol_pp
    # final value (including the back-EMF droop when not decoupled) within 0.2 % of the step
    assert abs(r.current_a[-1] - y[-1]) / 0.1 < 2e-3


@pytest.mark.parametrize("speed_rate, rms_tol", [
    (16000.0, 0.025),   # ZOH of the speed loop output approximated by the delay model: ~1 %
    (8000.0, 0.03),     # at 8 kHz the current loop samples a held i* (extra ZOH the linear model lacks)
])
def test_speed_step_matches_linear_model(speed_rate, rms_tol):
    """Reference: python-control step response of core.loops' speed closed loop (Pade 6)."""
    ax = make_axis(drive=make_drive(speed_rate_hz=speed_rate, position_rate_hz=4000.0, encoder_counts_per_rev=FINE))
    g = make_gains(ax)
    r = simulate_scenario(ax, g, dict(kind="speed_step", step="10 rad/s", duration="40 ms", limits=False))
    _, y = control.step_response(_linear(ax, g, "speed"), T=r.time_s)
    y = 10 * y
    assert np.sqrt(np.mean((r.motor_speed_rad_s - y) ** 2)) / 10 < rms_tol
    assert abs((r.motor_speed_rad_s.max() - y.max()) / 10 * 100) < 1.5
    assert abs(r.motor_speed_rad_s[-1] - y[-1]) / 10 < 2e-3


@pytest.mark.parametrize("speed_rate, peak_tol", [(16000.0, 0.02), (8000.0, 0.03)])
def test_load_step_matches_linear_disturbance_response(speed_rate, peak_tol):
    """Reference: step response of CascadeModel.speed_disturbance (w_m / T_load, speed loop
    closed) on the Pade model; the peak dip within 2-3 % (sampling and ZOH, as above)."""
    ax = make_axis(drive=make_drive(speed_rate_hz=speed_rate, position_rate_hz=4000.0, encoder_counts_per_rev=FINE))
    g = make_gains(ax)
    r = simulate_scenario(ax, g, dict(kind="speed_step", step="0 rad/s", load_step="0.1 N*m",
                                      load_step_time="1 ms", duration="40 ms", limits=False))
    k0 = 16
    tf = CascadeModel(ax, g, ControlAlgebra(6)).speed_disturbance
    _, y = control.step_response(tf, T=r.time_s[k0:] - r.time_s[k0])
    y = 0.1 * y
    sim = r.motor_speed_rad_s[k0:]
    assert abs(sim.min() - y.min()) / abs(y.min()) < peak_tol
    assert np.sqrt(np.mean((sim - y) ** 2)) / abs(y.min()) < 0.01
    assert_allclose(r.metrics.speed_dip_rad_s, -sim.min(), rtol=1e-12)


# --------------------------------------------------------------------------- physics
def test_steady_speed_under_constant_voltage():
    """w = V Kt / (R B + Kt Ke) (derived from the armature and mechanical equations)."""
    ax = make_axis(motor=make_motor(viscous_friction_nm_s_per_rad=2e-3))
    m = ax.motor
    r = simulate_scenario(ax, make_gains(ax), dict(kind="voltage_step", step="24 V", duration="0.2 s"))
    expected = 24.0 * m.torque_constant_nm_per_a / (
        m.resistance_ohm * ax.total_viscous_nm_s_per_rad + m.torque_constant_nm_per_a * m.back_emf_v_s_per_rad)
    assert_allclose(r.motor_speed_rad_s[-1], expected, rtol=1e-6)
    assert_allclose(r.motor_speed_rad_s[-1], 24.0 * ax.dc_speed_gain_rad_s_per_v, rtol=1e-6)


def test_torque_limited_acceleration():
    """While the current command sits at the limit, dw/dt = Kt Ipeak / J_total (derived; B = 0)."""
    ax = make_axis(motor=make_motor(viscous_friction_nm_s_per_rad=0.0))
    r = simulate_scenario(ax, make_gains(ax), dict(kind="speed_step", step="300 rad/s", duration="60 ms"))
    sat = r.saturated_current
    assert sat.sum() > 100 and not r.saturated_voltage.any()
    idx = np.nonzero(sat)[0]
    sel = idx[len(idx) // 4: 3 * len(idx) // 4]          # middle of the saturated stretch
    slope = np.polyfit(r.time_s[sel], r.motor_speed_rad_s[sel], 1)[0]
    expected = ax.motor.torque_constant_nm_per_a * ax.current_limit_a / ax.total_inertia_kgm2
    assert_allclose(slope, expected, rtol=0.005)


def _energy_terms(ax, r):
    """Integrals over the run from the sampled traces (exact for piecewise-linear signals)."""
    m = ax.motor
    pf = m.power_factor
    t = 1.0 / ax.drive.current_rate_hz
    i, w = r.current_a, r.motor_speed_rad_s
    i0, i1, w0, w1 = i[:-1], i[1:], w[:-1], w[1:]
    e_in = pf * np.sum(r.voltage_applied_v[:-1] * (i0 + i1) / 2) * t
    copper = pf * m.resistance_ohm * np.sum((i0 ** 2 + i0 * i1 + i1 ** 2) / 3) * t
    wl = r.load_speed * ax.load.ratio
    wl0, wl1 = wl[:-1], wl[1:]
    if ax.load.compliant:
        visc = (m.viscous_friction_nm_s_per_rad * np.sum((w0 ** 2 + w0 * w1 + w1 ** 2) / 3)
                + ax.load_viscous_nm_s_per_rad * np.sum((wl0 ** 2 + wl0 * wl1 + wl1 ** 2) / 3)
                + ax.damping_nm_s_per_rad * np.sum(((w0 - wl0) ** 2 + (w0 - wl0) * (w1 - wl1) + (w1 - wl1) ** 2) / 3)) * t
        twist = r.motor_position_rad - r.load_position * ax.load.ratio
        spring = 0.5 * ax.stiffness_nm_per_rad * (twist[-1] ** 2 - twist[0] ** 2)
        kin = 0.5 * m.inertia_kgm2 * (w[-1] ** 2 - w[0] ** 2) + 0.5 * ax.load_inertia_kgm2 * (wl[-1] ** 2 - wl[0] ** 2)
    else:
        visc = ax.total_viscous_nm_s_per_rad * np.sum((w0 ** 2 + w0 * w1 + w1 ** 2) / 3) * t
        spring = 0.0
        kin = 0.5 * ax.total_inertia_kgm2 * (w[-1] ** 2 - w[0] ** 2)
    coulomb = np.sum(r.friction_power_w[:-1]) * t
    load_work = np.sum(r.load_torque_motor_nm[:-1] * (wl0 + wl1) / 2) * t
    magnetic = pf * 0.5 * m.inductance_h * (i[-1] ** 2 - i[0] ** 2)
    return e_in, copper + visc + coulomb + load_work + kin + magnetic + spring


@pytest.mark.parametrize("axis_fn, scenario", [
    (linear_axis, dict(kind="move", distance="50 mm", speed="0.5 m/s", acceleration="5 m/s^2",
                       load_step="50 N", load_step_time="0.12 s", duration="0.25 s")),
    (compliant_axis, dict(kind="move", profile="jerk_limited", distance="3 rev", speed="2000 rpm",
                          acceleration="5000 rad/s^2", jerk="1e6 rad/s^3", duration="0.25 s")),
])
def test_energy_balance_over_a_move(axis_fn, scenario):
    """Electrical input pf*v*i = copper pf*R*i^2 + viscous + Coulomb + load work + change of
    kinetic, magnetic (pf*L*i^2/2) and spring energy (derived; needs Kt = pf*Ke, true here).
    Tolerance 0.5 % of the input: the traces are sampled, so the integrals assume i and w are
    linear within a 62.5 us sample (tau_e = 2 ms, error ~ (T/tau)^2)."""
    ax = axis_fn()
    r = simulate_scenario(ax, make_gains(ax), scenario)
    e_in, e_out = _energy_terms(ax, r)
    assert e_in > 0
    assert abs(e_in - e_out) / e_in < 5e-3


def test_coulomb_friction_sticks_below_breakaway():
    """A torque below the Coulomb level (70 %: the current loop overshoots 11 %) leaves the motor exactly at rest; above it,
    dw/dt = (Kt i - Fc)/J (derived)."""
    fc = 0.2
    ax = make_axis(motor=make_motor(coulomb_friction_nm=fc, viscous_friction_nm_s_per_rad=0.0))
    g = make_gains(ax)
    below = simulate_scenario(ax, g, dict(kind="current_step", step=f"{0.7 * fc / 0.45} A", duration="10 ms"))
    assert np.all(below.motor_speed_rad_s == 0.0)
    i = 2.0 * fc / 0.45
    above = simulate_scenario(ax, g, dict(kind="current_step", step=f"{i} A", duration="10 ms"))
    late = above.time_s > 5e-3
    slope = np.polyfit(above.time_s[late], above.motor_speed_rad_s[late], 1)[0]
    assert_allclose(slope, (0.45 * i - fc) / ax.total_inertia_kgm2, rtol=5e-3)


def test_coulomb_friction_no_chatter_at_reversal():
    """A move and its return on a frictional axis: the speed never flips sign from one sample
    to the next (it stops at zero first), and the axis holds still at the end."""
    ax = linear_axis()
    r = simulate_scenario(ax, make_gains(ax), dict(kind="move", distance="-20 mm", speed="0.2 m/s",
                                                   acceleration="4 m/s^2", duration="0.3 s"))
    w = r.motor_speed_rad_s
    assert not np.any(w[:-1] * w[1:] < 0)


# --------------------------------------------------------------------------- anti-windup
def test_anti_windup_reduces_overshoot_after_saturation():
    """Common practice: with the integrator winding up ("off") a saturating speed step
    overshoots more than with conditional integration or back-calculation."""
    ax = make_axis()
    g = make_gains(ax)
    os_ = {}
    for aw in ("off", "clamp", "back_calculation"):
        r = simulate_scenario(ax, g, dict(kind="speed_step", step="300 rad/s", duration="80 ms", anti_windup=aw))
        assert r.metrics.time_current_saturated_s > 5e-3
        os_[aw] = r.metrics.overshoot_pct
    assert os_["off"] > 2.0 * os_["clamp"]
    assert os_["off"] > 2.0 * os_["back_calculation"]
    assert os_["off"] > 10.0


# --------------------------------------------------------------------------- filters
@pytest.mark.parametrize("fs", [16000.0, 4000.0])
def test_tustin_notch_and_lowpass_are_exact_at_their_frequency(fs):
    """Prewarped Tustin keeps the analogue response at the prewarp frequency (derived):
    notch depth zeta_z/zeta_p at fn (Ellis 2012, from memory), unity at DC; low-pass -3.01 dB, -45 deg."""
    t = 1.0 / fs
    row = tustin_notch(400.0, 0.05, 0.5, t)
    _, h = scipy.signal.freqz(row[:3], [1.0, row[3], row[4]], worN=[400.0, 1e-6], fs=fs)
    assert_allclose(abs(h[0]), 0.1, rtol=1e-9)
    assert_allclose(abs(h[1]), 1.0, rtol=1e-9)
    lp = tustin_lowpass(300.0, t)
    _, h = scipy.signal.freqz(lp[:2], [1.0, lp[3]], worN=[300.0], fs=fs)
    assert_allclose(abs(h[0]), 1 / math.sqrt(2), rtol=1e-9)
    assert_allclose(np.angle(h[0], deg=True), -45.0, atol=1e-7)


def test_notched_feedback_runs_and_matches_linear_speed_loop():
    """With a feedback low-pass and a notch the sampled loop still follows the linear model."""
    ax = make_axis(drive=make_drive(encoder_counts_per_rev=FINE))
    g = make_gains(ax, feedback_lowpass_hz=1500.0, notches=(Notch(700.0, 0.1, 0.5, "feedback"),))
    r = simulate_scenario(ax, g, dict(kind="speed_step", step="10 rad/s", duration="40 ms", limits=False))
    _, y = control.step_response(_linear(ax, g, "speed"), T=r.time_s)
    assert np.sqrt(np.mean((r.motor_speed_rad_s - 10 * y) ** 2)) / 10 < 0.03


# --------------------------------------------------------------------------- limits, flags, bad runs
def test_unstable_loop_stops_with_a_diverged_flag():
    ax = make_axis()
    g = replace(make_gains(ax), speed=replace(make_gains(ax).speed, pi=PI(200.0, 0.0)))
    r = simulate_scenario(ax, g, dict(kind="speed_step", step="10 rad/s", duration="0.5 s", limits=False))
    assert math.isfinite(r.diverged_at_s) and r.diverged_at_s < 0.5
    assert len(r.time_s) < 0.5 * 16000
    errors = [f for f in r.flags if f.severity == "error"]
    assert errors and errors[0].message.startswith("diverged at t = ")
    assert np.all(np.isfinite(r.current_a))
    json.dumps(result_to_json(r), allow_nan=False)


def test_saturating_and_gentle_moves_are_flagged():
    ax = linear_axis()
    g = make_gains(ax)
    hard = simulate_scenario(ax, g, dict(kind="move", distance="100 mm", speed="1.5 m/s", acceleration="60 m/s^2",
                                         duration="0.3 s"))
    msgs = [f.message for f in hard.flags if f.loop == "speed" and f.severity == "warning"]
    assert any(m.startswith("current command saturated for") and "during the move" in m for m in msgs)
    assert hard.metrics.time_current_saturated_s > 0
    gentle = simulate_scenario(ax, g, dict(kind="move", distance="10 mm", speed="0.1 m/s", acceleration="1 m/s^2",
                                           duration="0.3 s"))
    assert gentle.metrics.time_current_saturated_s == 0 and gentle.metrics.time_voltage_saturated_s == 0
    assert any(f.message.startswith("no limit reached") for f in gentle.flags)
    assert gentle.metrics.settling_time_s >= 0
    assert gentle.metrics.peak_voltage_pct < 100


def test_voltage_saturation_is_reported():
    """A speed step beyond the no-load speed of the bus saturates the voltage."""
    ax = make_axis(motor=make_motor(max_speed_rad_s=2000.0), drive=make_drive(bus_voltage_v=100.0))
    r = simulate_scenario(ax, make_gains(ax), dict(kind="speed_step", step="300 rad/s", duration="50 ms"))
    assert r.metrics.time_voltage_saturated_s > 0
    assert r.metrics.peak_voltage_pct >= 100
    assert np.all(np.abs(r.voltage_command_v) <= ax.drive.voltage_limit_v * (1 + 1e-12))
    assert any(f.loop == "current" and "voltage command saturated" in f.message for f in r.flags)


def test_speed_command_clamped_at_max_speed():
    ax = make_axis(motor=make_motor(max_speed_rad_s=100.0))
    r = simulate_scenario(ax, make_gains(ax), dict(kind="move", distance="20 rad", speed="300 rad/s",
                                                   acceleration="5000 rad/s^2", duration="0.4 s"))
    assert np.max(np.abs(r.speed_command_rad_s)) <= 100.0 * (1 + 1e-12)
    assert r.metrics.time_speed_saturated_s > 0


def test_non_integer_rate_ratio_is_refused():
    ax = make_axis(drive=make_drive(speed_rate_hz=7000.0, position_rate_hz=3500.0))
    with pytest.raises(InputError) as e:
        simulate_scenario(ax, make_gains(ax), dict(kind="speed_step", step="1 rad/s", duration="10 ms"))
    assert e.value.field == "drive.speed_rate" and "whole number" in str(e.value)


# --------------------------------------------------------------------------- export
def test_json_and_csv(tmp_path):
    ax = linear_axis()
    r = simulate_scenario(ax, make_gains(ax), dict(kind="move", distance="50 mm", speed="0.5 m/s",
                                                   acceleration="5 m/s^2", load_step="50 N",
                                                   load_step_time="0.22 s", duration="0.3 s"))
    j = result_to_json(r, max_points=500)
    text = json.dumps(j, allow_nan=False)
    assert len(j["traces"]["time_s"]) <= 501 and j["traces"]["time_s"][-1] == r.time_s[-1]
    assert j["trace_units"]["load_position"] == "m" and "metrics" in j and "flags" in j
    assert j["metrics"]["speed_dip_rad_s"] > 0 and json.loads(text)["scenario"]["kind"] == "move"
    path = tmp_path / "run.csv"
    write_csv(r, path)
    data = np.genfromtxt(path, delimiter=",", skip_header=1)
    assert data.shape == (len(r.time_s), len(j["traces"]))
    assert_allclose(data[:, 0], r.time_s, rtol=1e-8)
    assert [p for p in os.listdir(tmp_path) if p.startswith(".sim-")] == []


# --------------------------------------------------------------------------- presets
def test_demo_preset_scenarios_run_and_some_saturate():
    """Every stored demo scenario simulates; at least one reaches a limit and one does not."""
    import glob

    from core.presets import load_preset
    from core.simulate import simulate_preset_scenario

    saturated, clean = [], []
    here = os.path.join(os.path.dirname(__file__), "..", "..", "presets", "*.toml")
    for path in sorted(glob.glob(here)):
        preset = load_preset(path)
        for i, sc in enumerate(preset.scenarios):
            r = simulate_preset_scenario(preset, preset.active_gain_set, i)
            assert math.isnan(r.diverged_at_s), (path, sc["name"])
            m = r.metrics
            hit = m.time_voltage_saturated_s + m.time_current_saturated_s + m.time_speed_saturated_s > 0
            (saturated if hit else clean).append(sc["name"])
            assert any(f.message.startswith("no limit reached") for f in r.flags) != hit
    assert saturated and clean


def test_numba_kernel_equals_its_python_source():
    """The benchmark's pure-Python reference computes the same traces (same source, interpreted)."""
    from core import sim_kernel as K
    from core.scenario import scenario_from_dict
    from core.simulate import _prepare

    ax = compliant_axis()
    sc = scenario_from_dict(dict(kind="move", distance="1 rev", speed="1000 rpm", acceleration="5000 rad/s^2",
                                 load_step="0.2 N*m", load_step_time="0.08 s", duration="0.1 s"), ax)
    pr = _prepare(ax, make_gains(ax, notches=(Notch(400.0),)), sc)
    outs = []
    helpers = ("_pi_step", "_biquads", "_at_rest")
    saved = {h: getattr(K, h) for h in helpers}
    for python in (False, True):
        out = np.zeros((K.N_CH, pr.n))
        try:
            if python:
                for h in helpers:
                    setattr(K, h, saved[h].py_func)
            fn = K.run_kernel.py_func if python else K.run_kernel
            fn(pr.ad, pr.bd, pr.ac, pr.bc, pr.fp, pr.ip, pr.sos_fb, pr.sos_cmd, pr.ref_a, pr.ref_b, pr.ref_c,
               pr.t_load, out)
        finally:
            for h in helpers:
                setattr(K, h, saved[h])
        outs.append(out)
    assert_allclose(outs[0], outs[1], rtol=1e-12, atol=1e-12)


def test_warm_up_compiles_the_signature_real_runs_use():
    """The window compiles the kernel in the background with warm_up; a real run must then
    find its signature compiled (read-only plant and references included), or it would
    compile again on the GUI thread at the first move (derived: numba types read-only
    and writable arrays apart). A fresh process, so no other test has compiled it."""
    code = (
        "from core import sim_kernel as K\n"
        "from core.presets import builtin_names, builtin_preset\n"
        "from core.simulate import simulate_preset_scenario, warm_up\n"
        "warm_up()\n"
        "after_warm_up = len(K.run_kernel.signatures)\n"
        "for name in builtin_names():\n"
        "    preset = builtin_preset(name)\n"
        "    for index in range(len(preset.scenarios)):\n"
        "        simulate_preset_scenario(preset, None, index)\n"
        "print(after_warm_up, len(K.run_kernel.signatures))\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600,
                          cwd=Path(__file__).resolve().parents[2])
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["1", "1"]
