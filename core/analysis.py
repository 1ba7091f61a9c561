"""One full recompute: margins of every loop, the four time responses, stiffness, flags.

:func:`analyse` is what the window calls on every slider move and what
``loopwright check`` prints; its result has a fixed shape whatever the input.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.axis import Axis
from core.flags import Targets, margin_flags, quantisation_flags, step_flags
from core.gains import GainSet
from core.margins import LOOPS, FrequencyData, LoopMargins, loop_margins
from core.motor import ConstantsCheck
from core.responses import (LoadStepResponse, StepResponse, position_and_load_step, response_horizon_s,
                            step_response)


@dataclass(frozen=True)
class Analysis:
    """Everything the checks and plots need for one axis and one gain set.

    Attributes
    ----------
    margins : dict of str -> LoopMargins
        Keyed "current", "speed", "position".
    frequency : FrequencyData
        Open and closed loops on the grid.
    steps : dict of str -> StepResponse
        Unit-step responses of each closed loop.
    load_step : LoadStepResponse
        All loops closed, a load-torque step at the motor.
    stiffness_hz : ndarray
        Frequencies of the dynamic-stiffness curve, Hz.
    dynamic_stiffness : ndarray
        |load torque / load position| at the load, N*m/rad (rotary) or N/m (linear).
    flags : tuple of Flag
    """

    margins: dict
    frequency: FrequencyData
    steps: dict
    load_step: LoadStepResponse
    stiffness_hz: np.ndarray
    dynamic_stiffness: np.ndarray
    flags: tuple

    @property
    def worst_severity(self) -> str:
        """"error", "warning", "info" or "ok"."""
        for level in ("error", "warning", "info"):
            if any(f.severity == level for f in self.flags):
                return level
        return "ok"


def default_load_step_nm(axis: Axis) -> float:
    """Load-torque step used when the targets do not give one: continuous motor torque, N*m.

    Falls back to 10 % of peak torque (or of the drive limit) when no continuous rating is known.
    """
    kt = axis.motor.torque_constant_nm_per_a
    if math.isfinite(axis.motor.continuous_current_a):
        return kt * axis.motor.continuous_current_a
    return 0.1 * kt * axis.current_limit_a


def analyse(axis: Axis, gains: GainSet, targets: Targets | None = None,
            constants: ConstantsCheck | None = None) -> Analysis:
    """Margins, responses and flags of ``gains`` on ``axis``.

    Parameters
    ----------
    axis, gains : Axis, GainSet
    targets : Targets, optional
        Margin and separation targets; defaults when omitted.
    constants : ConstantsCheck, optional
        The datasheet Kt/Ke comparison, flagged when inconsistent.

    Returns
    -------
    Analysis
    """
    targets = targets or Targets()
    # An unstable or extreme loop can overflow on its way to a trace; it is reported
    # through its flags, so numpy's warnings would only be noise.
    with np.errstate(all="ignore"):
        return _analyse(axis, gains, targets, constants)


def _analyse(axis: Axis, gains: GainSet, targets: Targets, constants: ConstantsCheck | None) -> Analysis:
    margins, freq = loop_margins(axis, gains)
    integral = {"current": gains.current.pi.integral_time_s, "speed": gains.speed.pi.integral_time_s,
                "position": gains.position.pi.integral_time_s}
    # A current PI whose zero cancels the armature pole (Ti ~ L/R) leaves no slow tail
    # in its step, so its trace need not be stretched to show one.
    tau_e = axis.electrical_time_constant_s
    if abs(integral["current"] - tau_e) <= 0.2 * tau_e:
        integral["current"] = math.inf
    steps = {}
    fallback = 10.0 * axis.mechanical_time_constant_s
    horizon, growth = _horizon(margins["current"], integral["current"], fallback)
    steps["current"] = _current_step(axis, gains, horizon, growth)
    horizon, growth = _horizon(margins["speed"], integral["speed"], fallback)
    steps["speed"] = step_response(axis, gains, "speed", horizon, growth)
    load_torque = targets.load_step_nm if math.isfinite(targets.load_step_nm) else default_load_step_nm(axis)
    # The position step and the load step share a horizon long enough for the load
    # step's recovery (set by the speed integral), and so one model evaluation.
    horizon, growth = _horizon(margins["position"], integral["speed"], fallback)
    steps["position"], load = position_and_load_step(axis, gains, load_torque, horizon, growth)
    omega = freq.omega_rad_s
    stiffness = 1.0 / np.abs(freq.dynamic_compliance)
    flags = margin_flags(axis, margins, targets, constants)
    flags += step_flags({k: v for k, v in steps.items() if margins[k].stable}, targets)
    flags += quantisation_flags(axis, gains, targets)
    return Analysis(margins, freq, steps, load, omega / (2 * math.pi), stiffness, tuple(flags))


_CURRENT_STEPS: dict = {}
_CURRENT_STEPS_SIZE = 8


def _current_step(axis: Axis, gains: GainSet, horizon: float, growth: float) -> StepResponse:
    """The current loop's step. It depends on the axis and the current gains only, so
    moving a speed or position gain reuses it (arrays read-only); it is computed from
    the whole gain set's recorded cascade, which the margins have just recorded."""
    key = (axis, gains.current, horizon, growth)
    step = _CURRENT_STEPS.get(key)
    if step is None:
        if len(_CURRENT_STEPS) >= _CURRENT_STEPS_SIZE:
            _CURRENT_STEPS.clear()
        step = _CURRENT_STEPS[key] = step_response(axis, gains, "current", horizon, growth)
        step.time_s.setflags(write=False)
        step.value.setflags(write=False)
    return step


def _horizon(m: LoopMargins, integral_time_s: float, fallback_s: float) -> tuple[float, float]:
    """Trace length, s, and the growth rate to invert above, 1/s.

    An unstable loop is shown until it has grown by about e^10 — enough to see how it
    diverges — with the contour shifted right of its fastest growth (estimated from its
    crossover).
    """
    horizon = response_horizon_s(m.crossover_hz, integral_time_s, fallback_s)
    if m.stable:
        return horizon, 0.0
    fc = m.crossover_hz if math.isfinite(m.crossover_hz) else 1.0
    growth = 2 * math.pi * max(fc, 1.0)
    return min(horizon, 10.0 / growth), growth


def analysis_summary(result: Analysis) -> dict:
    """The documented JSON shape of ``loopwright check --json``.

    ``{"loops": {loop: {crossover_hz, phase_margin_deg, gain_margin_db, delay_margin_s,
    bandwidth_hz, sensitivity_peak, stable, unstable_poles, step_overshoot_pct,
    step_settling_time_s}}, "load_step": {...}, "flags": [{loop, severity, message}]}``;
    infinite margins are written as null.
    """
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    loops = {}
    for loop in LOOPS:
        m, st = result.margins[loop], result.steps[loop]
        loops[loop] = {
            "crossover_hz": num(m.crossover_hz),
            "gain_crossovers_hz": [num(f) for f in m.gain_crossovers_hz],
            "phase_margin_deg": num(m.phase_margin_deg),
            "gain_margin_db": num(m.gain_margin_db),
            "phase_crossovers_hz": [num(f) for f in m.phase_crossovers_hz],
            "delay_margin_s": num(m.delay_margin_s),
            "bandwidth_hz": num(m.bandwidth_hz),
            "sensitivity_peak": num(m.sensitivity_peak),
            "stable": bool(m.stable),
            "unstable_poles": int(m.unstable_poles),
            "step_overshoot_pct": num(st.overshoot_pct),
            "step_settling_time_s": num(st.settling_time_s),
        }
    ls = result.load_step
    return {
        "loops": loops,
        "load_step": {"load_torque_nm": num(ls.load_torque_nm), "speed_dip_rad_s": num(ls.speed_dip_rad_s),
                      "position_error_rad": num(ls.position_error_rad), "recovery_time_s": num(ls.recovery_time_s)},
        "flags": [{"loop": f.loop, "severity": f.severity, "message": f.message} for f in result.flags],
    }


def axis_summary(axis: Axis, constants: ConstantsCheck | None = None) -> dict:
    """What follows from the datasheet values, SI, for reports and ``--json`` output.

    Keys: ``electrical_time_constant_s``, ``mechanical_time_constant_s``,
    ``dc_speed_gain_rad_s_per_v``, ``no_load_speed_rad_s``, ``total_inertia_kgm2``,
    ``inertia_ratio``, ``resonance_hz``, ``antiresonance_hz`` (null when rigid),
    ``voltage_limit_v``, ``current_limit_a``, ``loop_delays_s`` (current, speed,
    position), ``speed_quantum_rad_s`` and, when known, ``kt_ke_relative_difference``.
    """
    def num(x):
        return None if not math.isfinite(x) else float(x)

    out = {
        "electrical_time_constant_s": axis.electrical_time_constant_s,
        "mechanical_time_constant_s": axis.mechanical_time_constant_s,
        "dc_speed_gain_rad_s_per_v": axis.dc_speed_gain_rad_s_per_v,
        "no_load_speed_rad_s": axis.no_load_speed_rad_s,
        "total_inertia_kgm2": axis.total_inertia_kgm2,
        "inertia_ratio": axis.inertia_ratio,
        "resonance_hz": num(axis.resonance_hz),
        "antiresonance_hz": num(axis.antiresonance_hz),
        "voltage_limit_v": axis.drive.voltage_limit_v,
        "current_limit_a": num(axis.current_limit_a),
        "loop_delays_s": list(axis.drive.loop_delays_s()),
        "speed_quantum_rad_s": axis.drive.speed_quantum_rad_s(),
    }
    if constants is not None and math.isfinite(constants.relative_difference):
        out["kt_ke_relative_difference"] = constants.relative_difference
    return out
