"""Reference tests of core.margins: crossovers, PM, GM, delay margin, Ms, stability.

Closed-form rows of CHECKS.md reached through the core's own public functions
(Drive delays and filter, tuning rules, loop_margins), then python-control's
stability_margins and closed-loop poles of the same axis built independently in
``axes.reference_loops``.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

import control
from core.gains import PI
from core.loops import CascadeModel, FrequencyAlgebra
from core.margins import LOOPS, frequency_grid, loop_margins
from core.tuning import TuningSettings, tune_current, tune_speed

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

TWO_PI = 2 * math.pi
# The python-control references are built with frequencies in krad/s (see axes.reference_loops).
UNIT = 1e3


# --- integrator + delay, pole-zero cancellation ------------------------------------------

WC = TWO_PI * 1000.0
TD = 93.75e-6


def _integrator_delay_margins():
    axis = axes.rigid_axis(current_delay_s=TD)
    g = axes.gains(axes.cancelling_current_pi(WC), PI(0.01, 0.1), position_kp=1.0)
    return loop_margins(axis, g)[0]["current"]


# CHECKS.md "integrator + delay" (derived) reached through "current loop, pole-zero
# cancellation" (common practice): L(s) = wc e^(-s Td)/s, wc = 2 pi 1000 rad/s, Td = 93.75 us.
@pytest.mark.parametrize("field, expected, rtol, atol, source", [
    ("phase_margin_deg", 56.25, 0, 0.01, "CHECKS.md: PM = 90 - wc Td -> 56.25 deg (+-0.01); derived"),
    ("gain_margin_db", 8.519, 0, 0.01, "CHECKS.md: GM = pi/(2 wc Td) -> 8.519 dB (+-0.01); derived"),
    ("crossover_hz", 1000.0, 1e-9, 0, "|L| = 1 at wc exactly; derived"),
    ("gain_margin_hz", 1 / (4 * TD), 1e-5, 0, "phase crossover pi/(2 Td); derived"),
    ("delay_margin_s", math.radians(56.25) / WC, 1e-6, 0, "delay margin PM/wc; derived"),
])
def test_integrator_plus_delay(field, expected, rtol, atol, source):
    assert_allclose(getattr(_integrator_delay_margins(), field), expected, rtol=rtol, atol=atol, err_msg=source)


def test_integrator_plus_delay_bandwidth_and_sensitivity_peak():
    """-3 dB bandwidth and Ms of wc e^(-s Td)/s, derived here with scipy brentq and a dense grid.

    Tolerances: bandwidth rtol 1e-6 (Illinois refinement on the model), Ms rtol 1e-4 (the
    core takes a grid maximum refined by a parabola).
    """
    m = _integrator_delay_margins()
    t = lambda w: abs(WC * np.exp(-1j * w * TD) / (1j * w) / (1 + WC * np.exp(-1j * w * TD) / (1j * w)))
    w_bw = brentq(lambda w: t(w) - 1 / math.sqrt(2), 2 * WC, 3 / TD, xtol=1e-9)
    assert_allclose(m.bandwidth_hz, w_bw / TWO_PI, rtol=1e-6)
    w = np.linspace(0.5 * WC, 3 / TD, 200001)
    ms = np.max(np.abs(1 / (1 + WC * np.exp(-1j * w * TD) / (1j * w))))
    assert_allclose(m.sensitivity_peak, ms, rtol=1e-4)
    assert m.stable and m.unstable_poles == 0


def test_delay_margin_is_the_extra_delay_that_reaches_the_boundary():
    """Adding the reported delay margin to the loop puts PM at 0 (derived), +-0.01 deg."""
    m = _integrator_delay_margins()
    axis = axes.rigid_axis(current_delay_s=TD + m.delay_margin_s)
    g = axes.gains(axes.cancelling_current_pi(WC), PI(0.01, 0.1), position_kp=1.0)
    at_boundary = loop_margins(axis, g)[0]["current"]
    assert_allclose(at_boundary.phase_margin_deg, 0.0, atol=0.01)
    assert_allclose(at_boundary.gain_margin_db, 0.0, atol=0.01)


# --- magnitude optimum -----------------------------------------------------------------

T_SIGMA = 50e-6


@pytest.mark.parametrize("field, expected, rtol, atol, source", [
    ("phase_margin_deg", 65.53, 0, 0.01,
     "Umland & Safiuddin, 'Magnitude and symmetric optimum criterion for the design of linear "
     "control systems', IEEE Trans. Ind. Appl. 26(3), 1990 (from memory for content)"),
    ("crossover_hz", 0.4551 / T_SIGMA / TWO_PI, 0.005, 0, "Umland & Safiuddin 1990: wc = 0.4551/Tsigma (+-0.5 %)"),
    ("sensitivity_peak", 1.272, 0.005, 0, "Umland & Safiuddin 1990: Ms 1.272 (+-0.5 %)"),
])
def test_magnitude_optimum_margins(field, expected, rtol, atol, source):
    """MO on K/(1 + s Ta) 1/(1 + s Tsigma): Tsigma is the current-feedback filter, zero delay,
    gains from tune_current(rule "magnitude_optimum"). The margins of the open loop do not
    depend on where the filter sits."""
    axis = axes.rigid_axis(current_filter_hz=1 / (TWO_PI * T_SIGMA))
    pi, proposal = tune_current(axis, TuningSettings(current_rule="magnitude_optimum"))
    m = loop_margins(axis, axes.gains(pi, PI(0.01, 0.1), position_kp=1.0))[0]["current"]
    assert_allclose(getattr(m, field), expected, rtol=rtol, atol=atol, err_msg=source)
    assert m.stable and math.isinf(m.gain_margin_db)   # phase tends to -180 deg, never reaches it


@pytest.mark.parametrize("field, expected, rtol, atol, source", [
    ("phase_margin_deg", 61.35, 0, 0.01, "CHECKS.md 'MO with a pure delay': PM = 90 - 0.5 rad -> 61.35; derived"),
    ("gain_margin_db", 9.94, 0, 0.01, "CHECKS.md: GM = pi -> 9.94 dB; derived"),
    ("crossover_hz", 0.5 / 50e-6 / TWO_PI, 1e-9, 0, "CHECKS.md: wc = 0.5/Td; derived"),
])
def test_magnitude_optimum_with_pure_delay(field, expected, rtol, atol, source):
    """Kp = L/(2 Td), Ti = L/R on 1/(R + sL) with delay Td = 50 us, via tune_current."""
    td = 50e-6
    axis = axes.rigid_axis(current_delay_s=td)
    pi, _ = tune_current(axis, TuningSettings(current_rule="magnitude_optimum"))
    assert_allclose([pi.kp, pi.ki], [axes.L_H / (2 * td), axes.R_OHM / (2 * td)], rtol=1e-12)
    m = loop_margins(axis, axes.gains(pi, PI(0.01, 0.1), position_kp=1.0))[0]["current"]
    assert_allclose(getattr(m, field), expected, rtol=rtol, atol=atol, err_msg=source)


# --- symmetric optimum ------------------------------------------------------------------

SO_SOURCE = "Kessler, 'Das symmetrische Optimum', Regelungstechnik 6, 1958 (from memory); formula derived"


@pytest.mark.parametrize("a, pm_deg", [(2.0, 36.87), (3.0, 53.13), (4.0, 61.93)])
def test_symmetric_optimum_phase_margin_and_crossover(a, pm_deg):
    """SO on Kt/(J s) 1/(1 + s Teq): PM = asin((a^2-1)/(a^2+1)), wc = 1/(a Teq).

    The plant is reached exactly: zero current delay, pole-zero cancellation at 1 kHz
    (so Teq = 1/wc_i), no viscous friction, rigid load, zero speed delay; gains from
    tune_speed(rule "symmetric_optimum"). Tolerances: PM +-0.01 deg (CHECKS.md), wc rtol 1e-6.
    """
    axis = axes.rigid_axis()
    settings = TuningSettings(current_rule="pole_zero", current_bandwidth_hz=1000.0,
                              speed_rule="symmetric_optimum", symmetric_optimum_a=a)
    current, _ = tune_current(axis, settings)
    speed, proposal = tune_speed(axis, current, settings)
    t_eq = 1 / (TWO_PI * 1000.0)
    assert_allclose([speed.kp, speed.integral_time_s], [axes.J_MOTOR / (a * axes.KT * t_eq), a * a * t_eq],
                    rtol=1e-12, err_msg=SO_SOURCE)
    m = loop_margins(axis, axes.gains(current, speed, position_kp=1.0))[0]["speed"]
    assert_allclose(m.phase_margin_deg, pm_deg, atol=0.01, err_msg=SO_SOURCE)
    assert_allclose(m.phase_margin_deg, math.degrees(math.asin((a * a - 1) / (a * a + 1))), atol=1e-6)
    assert_allclose(m.crossover_hz, 1 / (a * t_eq) / TWO_PI, rtol=1e-6, err_msg=SO_SOURCE)
    assert_allclose(proposal.expected_crossover_hz, m.crossover_hz, rtol=1e-6)


# --- second order ------------------------------------------------------------------------

@pytest.mark.parametrize("zeta, pm_deg", [(0.5, 51.83), (1 / math.sqrt(2), 65.53)])
def test_second_order_phase_margin(zeta, pm_deg):
    """L = wn^2/(s (s + 2 zeta wn)) closes to the standard second order;
    PM = atan(2 zeta / sqrt(sqrt(1 + 4 zeta^4) - 2 zeta^2)).

    Source: Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic Systems" (from
    memory). Reached as the speed loop with a P controller on Kt/(J s) behind a cancelled
    current loop of bandwidth 2 zeta wn (zero delays). Tolerance +-0.01 deg.
    """
    wn = TWO_PI * 100.0
    axis = axes.rigid_axis()
    kp = wn**2 * axes.J_MOTOR / (axes.KT * 2 * zeta * wn)
    g = axes.gains(axes.cancelling_current_pi(2 * zeta * wn), PI(kp, 0.0), position_kp=1.0)
    m = loop_margins(axis, g)[0]["speed"]
    assert_allclose(m.phase_margin_deg, pm_deg, atol=0.01)
    formula = math.degrees(math.atan(2 * zeta / math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)))
    assert_allclose(m.phase_margin_deg, formula, atol=1e-6)


# --- robustness: Ms bounds ---------------------------------------------------------------

ROBUSTNESS_AXIS = dict(viscous=1e-4, load_inertia=4e-4, current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3,
                       position_delay_s=1 / 8e3, current_filter_hz=5e3)


def _swept_gain_sets(current_hz=(300.0, 800.0, 1500.0, 2200.0)):
    axis = axes.rigid_axis(**ROBUSTNESS_AXIS)
    for ci, sw, zr, pr in itertools.product(current_hz, [40.0, 120.0, 300.0, 500.0], [1.5, 4.0], [2.0, 6.0]):
        yield (ci, sw, zr, pr), axis, axes.nominal_gains(axis, ci, sw, speed_zero_ratio=zr, position_ratio=pr)


def test_sensitivity_peak_bounds_gain_and_phase_margin():
    """Ms <= 2 guarantees GM >= Ms/(Ms - 1) and PM >= 2 asin(1/(2 Ms)), on every stable loop
    with Ms <= 2 of a 64-point gain sweep (with delays, filter and a reflected load; current
    crossover up to 2.2 kHz, where the current loop is resonant and the outer loops' |1 + L|
    has narrow dips between grid points).

    Source: Skogestad & Postlethwaite, "Multivariable Feedback Control", 2nd ed. 2005,
    section 2.4.3 (from memory); Astrom & Murray, "Feedback Systems" (from memory).
    Tolerance: Ms is a refined grid maximum, so the bound is taken at Ms * (1 + 1e-4).
    The bound itself at Ms = 2 and Ms = 1.4 as CHECKS.md gives it (+-0.01).
    """
    assert_allclose([20 * math.log10(2 / (2 - 1)), math.degrees(2 * math.asin(1 / 4))], [6.02, 28.96], atol=0.01)
    # CHECKS.md gives 10.9 dB to three digits: +-0.05 there.
    assert_allclose([1.4 / 0.4, math.degrees(2 * math.asin(1 / 2.8))], [3.50, 41.85], atol=0.01)
    assert_allclose(20 * math.log10(1.4 / 0.4), 10.9, atol=0.05)
    checked = 0
    for case, axis, g in _swept_gain_sets():
        margins, _ = loop_margins(axis, g)
        for loop in LOOPS:
            m = margins[loop]
            if not m.stable or m.sensitivity_peak > 2.0:
                continue
            ms = m.sensitivity_peak * (1 + 1e-4)
            if math.isfinite(m.gain_margin_db) and m.gain_margin_db > 0:
                assert m.gain_margin_db >= 20 * math.log10(ms / (ms - 1)), (case, loop, m)
            if math.isfinite(m.phase_margin_deg):
                assert m.phase_margin_deg >= math.degrees(2 * math.asin(1 / (2 * ms))), (case, loop, m)
            checked += 1
    assert checked >= 50


def _sensitivity_at_crossovers_cases():
    axis = axes.rigid_axis(**ROBUSTNESS_AXIS)
    # (gains, loop, rtol of Ms against the dense grid)
    return [pytest.param(axis, axes.nominal_gains(axis, 1000.0, 150.0), "position", 1e-3, id="separated"),
            # PM 8 deg at 1.8 kHz between two close gain crossovers: a dip narrower than the grid.
            pytest.param(axis, axes.nominal_gains(axis, 2200.0, 300.0, speed_zero_ratio=4.0, position_ratio=2.0),
                         "position", 1e-3, id="resonant-inner-loop"),
            # PM 0.47 deg, Ms ~ 119: a peak of relative width ~1e-2; 5e-3 there.
            pytest.param(axis, axes.nominal_gains(axis, 2200.0, 120.0, speed_zero_ratio=1.5, position_ratio=6.0),
                         "speed", 5e-3, id="near-unstable-speed-loop")]


@pytest.mark.parametrize("axis, g, loop, rtol", _sensitivity_at_crossovers_cases())
def test_sensitivity_peak_is_at_least_its_value_at_every_gain_crossover(axis, g, loop, rtol):
    """At a gain crossover |1 + L| = 2 sin(PM/2) (derived), so Ms >= 1/(2 sin(PM/2)); and Ms
    equals the maximum of |1/(1 + L)| on a dense linear grid (0.02 Hz steps) within rtol."""
    m = loop_margins(axis, g)[0][loop]
    assert m.sensitivity_peak >= (1 - 1e-9) / (2 * math.sin(math.radians(m.phase_margin_deg) / 2))
    w = np.linspace(TWO_PI * 1.0, TWO_PI * 8000.0, 400001)
    ol = getattr(CascadeModel(axis, g, FrequencyAlgebra(w)), f"{loop}_open")
    assert_allclose(m.sensitivity_peak, np.max(np.abs(1 / (1 + ol))), rtol=rtol)


# --- python-control stability_margins ----------------------------------------------------

@pytest.mark.parametrize("delays", [False, True], ids=["delay-free", "pade5"])
@pytest.mark.parametrize("loop", LOOPS)
def test_margins_equal_python_control_stability_margins(loop, delays):
    """PM, GM, both crossovers and Ms against control.stability_margins of the hand-built model.

    Delay-free: the same loop. With delays: control.pade(Td, 5) against the exact delay;
    the phase crossovers lie below 2.3 kHz where w Td < 1.4 and the [5/5] approximant's phase
    error is below 1e-7 rad (derived). Tolerances: PM +-1e-4 deg, GM +-1e-3 dB, crossover
    frequencies rtol 1e-5 (the core refines each crossing with 4 Illinois steps), Ms rtol 1e-5.
    """
    axis, g = axes.reference_axis(delays)
    ref = axes.reference_loops(axis, g, 5 if delays else None, UNIT)[f"{loop}_open"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gm, pm, sm, wpc, wgc, _ = control.stability_margins(ref)
    m = loop_margins(axis, g)[0][loop]
    assert_allclose(m.phase_margin_deg, pm, atol=1e-4)
    assert_allclose(m.crossover_hz, wgc * UNIT / TWO_PI, rtol=1e-5)
    assert_allclose(m.sensitivity_peak, 1 / sm, rtol=1e-5)
    if math.isinf(gm):
        assert math.isinf(m.gain_margin_db) and not m.phase_crossovers_hz
    else:
        assert_allclose(m.gain_margin_db, 20 * math.log10(gm), atol=1e-3)
        assert_allclose(m.gain_margin_hz, wpc * UNIT / TWO_PI, rtol=1e-5)


# --- stability: Nyquist count against closed-loop poles ----------------------------------

def _swept_axis(delays, speed_scale, zero_ratio, position_scale, current_ki_scale):
    axis, base = axes.reference_axis(delays)
    g = axes.nominal_gains(axis, 1000.0, 150.0, speed_zero_ratio=zero_ratio, speed_kp_scale=speed_scale,
                           decouple=False, speed_lowpass_hz=1500.0, notches=base.speed.notches)
    cur = g.current.pi
    return axis, replace(g, current=replace(g.current, pi=PI(cur.kp, cur.ki * current_ki_scale)),
                         position=replace(g.position, kp_per_s=g.position.kp_per_s * position_scale))


SWEEP = list(itertools.product([0.1, 1.0, 4.0, 20.0], [0.3, 4.0], [1.0, 30.0], [1.0, 3000.0]))


@pytest.mark.parametrize("delays", [False, True], ids=["delay-free", "pade5"])
def test_stable_flag_agrees_with_closed_loop_poles(delays):
    """The Nyquist count (stable, unstable_poles) equals the right-half-plane poles of each
    closed loop of the hand-built model, over a 32-point sweep that makes every loop unstable
    somewhere (speed Kp x20, integral zero above crossover, position gain x30, current Ki
    x3000 -- negative margins among them).

    Delay-free: exact agreement is required. With delays the reference is the Pade-5 model;
    no sweep point lies near its boundary (the band is tested separately below).
    """
    seen = set()
    for case in SWEEP:
        axis, g = _swept_axis(delays, *case)
        margins, _ = loop_margins(axis, g)
        ref = axes.reference_loops(axis, g, 5 if delays else None, UNIT)
        for loop in LOOPS:
            poles = ref[f"{loop}_closed"].poles()
            rhp = int(np.sum(poles.real > 0))
            assert abs(poles.real).min() * UNIT > 1e-2, (case, loop)   # no pole on the boundary
            assert margins[loop].unstable_poles == rhp, (case, loop, margins[loop])
            assert margins[loop].stable == (rhp == 0), (case, loop)
            seen.add((loop, rhp == 0))
    assert seen == {(loop, s) for loop in LOOPS for s in (True, False)}


def test_stable_flag_agrees_with_pade_poles_near_the_boundary():
    """Near the speed loop's stability boundary (speed Kp scaled), the exact-delay Nyquist
    decision matches the Pade-5 model's poles for gains 1e-4 and more away from the Pade
    boundary; within that band (stated: |k/k_b - 1| < 1e-4) the two models may differ."""
    def rightmost(scale):
        axis, g = _swept_axis(True, scale, 4.0, 1.0, 1.0)
        return axes.reference_loops(axis, g, 5, UNIT)["speed_closed"].poles().real.max()

    k_b = brentq(rightmost, 1.0, 20.0, xtol=1e-10)
    for factor in (1 - 1e-2, 1 - 1e-3, 1 - 1e-4, 1 + 1e-4, 1 + 1e-3, 1 + 1e-2):
        axis, g = _swept_axis(True, k_b * factor, 4.0, 1.0, 1.0)
        m = loop_margins(axis, g)[0]["speed"]
        assert m.stable == (factor < 1), (factor, m)
        assert (m.gain_margin_db > 0) == (factor < 1)
        if not m.stable:
            assert m.delay_margin_s == 0.0


def test_frequency_grid_spans_the_loops():
    """The automatic grid reaches the current loop's Nyquist frequency and lies below the
    position loop's gain (derived from its docstring), strictly increasing."""
    axis, g = axes.reference_axis(True)
    w = frequency_grid(axis, g)
    assert np.all(np.diff(w) > 0)
    assert_allclose(w[-1], TWO_PI * 0.5 * axis.drive.current_rate_hz, rtol=1e-12)
    assert w[0] <= 0.01 * g.position.kp_per_s
