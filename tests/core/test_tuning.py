"""Reference tests of core.tuning: each rule's gains from its published formula, and the
margins those gains actually give on the core's model (where the rule is exact)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.gains import PI, GainSet, Notch
from core.loops import CascadeModel, FrequencyAlgebra
from core.margins import loop_margins
from core.tuning import (TuningSettings, current_equivalent_lag_s, current_small_lag_s, propose_gains,
                         tune_current, tune_position, tune_speed)

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

TWO_PI = 2 * math.pi


def test_pole_zero_rule_gains():
    """Kp = L wc, Ki = R wc (common practice, CHECKS.md "current loop, pole-zero cancellation"), rtol 1e-12."""
    axis = axes.rigid_axis(current_delay_s=93.75e-6)
    pi, proposal = tune_current(axis, TuningSettings(current_rule="pole_zero", current_bandwidth_hz=1000.0))
    wc = TWO_PI * 1000.0
    assert_allclose([pi.kp, pi.ki], [axes.L_H * wc, axes.R_OHM * wc], rtol=1e-12)
    assert_allclose(proposal.expected_crossover_hz, 1000.0, rtol=1e-12)
    assert proposal.loop == "current" and proposal.rule == "pole_zero"
    assert "56.2" in proposal.rationale   # expected PM 90 - wc Td = 56.25 deg is stated


@pytest.mark.parametrize("pm_target, td", [(45.0, 93.75e-6), (60.0, 93.75e-6), (70.0, 40e-6)])
def test_phase_margin_rule_reaches_its_target(pm_target, td):
    """PM = 90 deg - wc Td on wc e^(-s Td)/s (derived, CHECKS.md "integrator + delay"): the
    rule's gains give the target on loop_margins within +-0.01 deg."""
    axis = axes.rigid_axis(current_delay_s=td)
    pi, proposal = tune_current(axis, TuningSettings(current_rule="phase_margin",
                                                     current_phase_margin_deg=pm_target))
    wc = math.radians(90 - pm_target) / td
    assert_allclose([pi.kp, pi.ki], [axes.L_H * wc, axes.R_OHM * wc], rtol=1e-12)
    m = loop_margins(axis, axes.gains(pi, PI(0.01, 0.1), position_kp=1.0))[0]["current"]
    assert_allclose(m.phase_margin_deg, pm_target, atol=0.01)
    assert_allclose(m.crossover_hz, proposal.expected_crossover_hz, rtol=1e-6)


@pytest.mark.parametrize("td, filter_hz", [(50e-6, 0.0), (0.0, 1 / (TWO_PI * 50e-6)), (30e-6, 1 / (TWO_PI * 20e-6))])
def test_magnitude_optimum_rule_gains(td, filter_hz):
    """Ti = Ta = L/R, Kp = Ta/(2 K Tsigma) = L/(2 Tsigma), Tsigma = delay + filter time constant.

    Source: Umland & Safiuddin, "Magnitude and symmetric optimum criterion for the design of
    linear control systems", IEEE Trans. Ind. Appl. 26(3), 1990 (from memory for content). rtol 1e-12.
    """
    axis = axes.rigid_axis(current_delay_s=td, current_filter_hz=filter_hz)
    t_sigma = td + (1 / (TWO_PI * filter_hz) if filter_hz else 0.0)
    assert_allclose(current_small_lag_s(axis), t_sigma, rtol=1e-12)
    pi, proposal = tune_current(axis, TuningSettings(current_rule="magnitude_optimum"))
    assert_allclose([pi.kp, pi.integral_time_s], [axes.L_H / (2 * t_sigma), axes.L_H / axes.R_OHM], rtol=1e-12)
    assert "Umland" in proposal.rationale


def test_magnitude_optimum_equivalent_lag_is_two_t_sigma():
    """An MO-tuned current loop acts on the outer loop as a first-order lag 2 Tsigma.

    Source: common practice (drive-control textbooks, e.g. Schroeder, "Elektrische Antriebe -
    Regelung von Antriebssystemen", from memory); CHECKS.md "equivalent small lag" Teq = 2 Tsigma.
    Checked twice: current_equivalent_lag_s (rtol 1e-12), and the closed MO loop
    1/(2 Tsigma^2 s^2 + 2 Tsigma s + 1) against 1/(1 + 2 Tsigma s) at w Tsigma <= 0.05 where
    they differ by O((w Tsigma)^2) (derived: rtol 5e-3).
    """
    t_sigma = 50e-6
    # Tsigma as the current filter; the unity-feedback closure of the open loop is the MO loop.
    axis = axes.rigid_axis(current_filter_hz=1 / (TWO_PI * t_sigma))
    pi, _ = tune_current(axis, TuningSettings(current_rule="magnitude_optimum"))
    assert_allclose(current_equivalent_lag_s(axis, pi), 2 * t_sigma, rtol=1e-12)
    w = np.logspace(1, math.log10(0.05 / t_sigma), 50)
    ol = CascadeModel(axis, axes.gains(pi, PI(0.01, 0.1)), FrequencyAlgebra(w)).current_open
    assert_allclose(ol / (1 + ol), 1 / (1 + 2j * t_sigma * w), rtol=5e-3)


def test_symmetric_optimum_lag_includes_speed_delay_and_filter():
    """Teq = 1/wc_i + speed delay + speed-filter time constant; Kp = J/(a Kt Teq), Ti = a^2 Teq.

    Source: Kessler, "Das symmetrische Optimum", Regelungstechnik 6, 1958 (from memory);
    formula derived. rtol 1e-12 on the gains.
    """
    axis = axes.rigid_axis(load_inertia=6e-4, speed_delay_s=62.5e-6)
    settings = TuningSettings(current_rule="pole_zero", current_bandwidth_hz=1500.0, speed_rule="symmetric_optimum",
                              symmetric_optimum_a=2.5, speed_feedback_lowpass_hz=2000.0)
    current, _ = tune_current(axis, settings)
    speed, proposal = tune_speed(axis, current, settings)
    t_eq = 1 / (TWO_PI * 1500.0) + 62.5e-6 + 1 / (TWO_PI * 2000.0)
    j = axes.J_MOTOR + 6e-4
    assert_allclose([speed.kp, speed.integral_time_s], [j / (2.5 * axes.KT * t_eq), 2.5**2 * t_eq], rtol=1e-12)
    assert_allclose(proposal.expected_crossover_hz, 1 / (2.5 * t_eq) / TWO_PI, rtol=1e-12)


@pytest.mark.parametrize("ratio, zero_ratio", [(3.0, 3.0), (5.0, 4.0), (10.0, 5.0)])
def test_separation_rule_gains(ratio, zero_ratio):
    """wc = wc_i/ratio, Kp = J wc/Kt (|L| = 1 on Kt/(J s)), Ti = zero_ratio/wc (common practice)."""
    axis = axes.rigid_axis(load_inertia=6e-4)
    settings = TuningSettings(current_rule="pole_zero", current_bandwidth_hz=1200.0,
                              current_to_speed_ratio=ratio, speed_integral_ratio=zero_ratio)
    gains, proposals = propose_gains(axis, settings)
    wc = TWO_PI * 1200.0 / ratio
    j = axes.J_MOTOR + 6e-4
    assert_allclose([gains.speed.pi.kp, gains.speed.pi.integral_time_s], [j * wc / axes.KT, zero_ratio / wc],
                    rtol=1e-12)
    assert_allclose(proposals[1].expected_crossover_hz, 1200.0 / ratio, rtol=1e-12)


def test_position_rule_and_feedforward():
    """Kp_pos = w_speed/ratio (common practice); feedforward fractions passed through."""
    axis = axes.rigid_axis()
    settings = TuningSettings(speed_to_position_ratio=5.0, velocity_ff=0.9, acceleration_ff=0.5)
    pos, proposal = tune_position(axis, 100.0, settings)
    assert_allclose(pos.kp_per_s, TWO_PI * 100.0 / 5.0, rtol=1e-12)
    assert (pos.velocity_ff, pos.acceleration_ff) == (0.9, 0.5)
    assert proposal.loop == "position"


def test_propose_gains_keeps_base_notches_and_decoupling():
    axis = axes.rigid_axis()
    base = axes.gains(PI(1.0, 10.0), PI(0.01, 0.1), decouple=False, notches=(Notch(400.0),))
    gains, proposals = propose_gains(axis, TuningSettings(), base=base)
    assert isinstance(gains, GainSet)
    assert gains.speed.notches == base.speed.notches
    assert gains.current.decouple_back_emf is False
    assert [p.loop for p in proposals] == ["current", "speed", "position"]
    assert all(p.rationale for p in proposals)


def test_proposed_default_gains_are_stable_with_margins():
    """The default rules on a realistic axis (sampled delays, no closed form): every loop stable,
    PM above 30 deg (a loose sanity bound, common practice)."""
    axis = axes.rigid_axis(load_inertia=6e-4, current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3,
                           position_delay_s=1 / 8e3)
    gains, _ = propose_gains(axis, TuningSettings())
    margins, _ = loop_margins(axis, gains)
    for loop, m in margins.items():
        assert m.stable, loop
        assert m.phase_margin_deg > 30.0, (loop, m.phase_margin_deg)


@pytest.mark.parametrize("field, kwargs", [
    ("tuning.current_rule", dict(current_rule="ziegler")),
    ("tuning.speed_rule", dict(speed_rule="fast")),
    ("tuning.current_bandwidth", dict(current_bandwidth_hz=0.0)),
    ("tuning.current_bandwidth", dict(current_bandwidth_hz=float("nan"))),
    ("tuning.current_phase_margin", dict(current_phase_margin_deg=95.0)),
    ("tuning.symmetric_optimum_a", dict(symmetric_optimum_a=1.0)),
    ("tuning.current_to_speed_ratio", dict(current_to_speed_ratio=float("inf"))),
    ("tuning.velocity_ff", dict(velocity_ff=-0.1)),
])
def test_settings_reject_bad_values_naming_the_field(field, kwargs):
    with pytest.raises(InputError) as err:
        TuningSettings(**kwargs)
    assert err.value.field == field
    assert field in str(err.value)
