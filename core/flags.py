"""Results -> violations in words, each with its loop and severity."""

from __future__ import annotations

import math
from dataclasses import dataclass

from core.axis import Axis
from core.gains import GainSet
from core.errors import InputError, require_range
from core.flagtypes import Flag
from core.margins import LOOPS, LoopMargins
from core.motor import ConstantsCheck

__all__ = ["Flag", "Targets", "margin_flags", "quantisation_flags", "step_flags", "targets_from_dict"]


@dataclass(frozen=True)
class Targets:
    """Margin and separation targets (degrees, dB, ratios).

    Defaults are common practice for servo axes: phase margin >= 45 deg, gain
    margin >= 6 dB, Ms <= 2 (Skogestad & Postlethwaite, "Multivariable Feedback
    Control", 2nd ed. 2005, section 2.4.3, from memory: Ms < 2 is a usual limit), each
    outer loop at least 3x slower than the loop inside it.
    """

    current_phase_margin_deg: float = 45.0
    speed_phase_margin_deg: float = 45.0
    position_phase_margin_deg: float = 45.0
    current_gain_margin_db: float = 6.0
    speed_gain_margin_db: float = 6.0
    position_gain_margin_db: float = 6.0
    sensitivity_peak_max: float = 2.0
    separation_min: float = 3.0
    delay_margin_min_s: float = 0.0
    step_overshoot_max_pct: float = math.inf
    current_bandwidth_min_hz: float = 0.0
    speed_bandwidth_min_hz: float = 0.0
    position_bandwidth_min_hz: float = 0.0
    current_crossover_max_fraction: float = 0.1
    resonance_clearance: float = 2.0
    jitter_max_fraction: float = 0.1
    load_step_nm: float = math.nan

    def __post_init__(self):
        for loop in LOOPS:
            require_range(f"targets.{loop}_phase_margin", getattr(self, f"{loop}_phase_margin_deg"), 0.0, 90.0, "deg")
            require_range(f"targets.{loop}_gain_margin", getattr(self, f"{loop}_gain_margin_db"), 0.0, 40.0, "dB")
            require_range(f"targets.{loop}_bandwidth_min", getattr(self, f"{loop}_bandwidth_min_hz"), 0.0, 1e6, "Hz")
        require_range("targets.delay_margin_min", self.delay_margin_min_s, 0.0, 1.0, "s")
        if not self.step_overshoot_max_pct >= 0:
            raise InputError("targets.step_overshoot_max", self.step_overshoot_max_pct, "a percentage >= 0")
        require_range("targets.sensitivity_peak_max", self.sensitivity_peak_max, 1.0, 10.0, "")
        require_range("targets.separation_min", self.separation_min, 1.0, 100.0, "")
        require_range("targets.current_crossover_max_fraction", self.current_crossover_max_fraction, 0.01, 0.5,
                      "(of the current sample rate)")
        require_range("targets.resonance_clearance", self.resonance_clearance, 1.0, 100.0, "")
        require_range("targets.jitter_max_fraction", self.jitter_max_fraction, 0.0, 1.0, "(of the current limit)")

    def phase_margin_deg(self, loop: str) -> float:
        """The phase-margin target of ``loop``, deg."""
        return getattr(self, f"{loop}_phase_margin_deg")

    def gain_margin_db(self, loop: str) -> float:
        """The gain-margin target of ``loop``, dB."""
        return getattr(self, f"{loop}_gain_margin_db")


# Preset [targets] keys (see core.presets.TARGET_UNITS) -> Targets fields, with a scale.
_TARGET_KEYS = {
    **{f"{loop}_phase_margin_min": (f"{loop}_phase_margin_deg", 1.0) for loop in LOOPS},
    **{f"{loop}_gain_margin_min": (f"{loop}_gain_margin_db", 1.0) for loop in LOOPS},
    **{f"{loop}_bandwidth_min": (f"{loop}_bandwidth_min_hz", 1.0) for loop in LOOPS},
    "ms_max": ("sensitivity_peak_max", 1.0),
    "separation_min": ("separation_min", 1.0),
    "delay_margin_min": ("delay_margin_min_s", 1.0),
    "step_overshoot_max": ("step_overshoot_max_pct", 100.0),   # stored as a fraction
}


def targets_from_dict(values: dict) -> Targets:
    """Targets from a preset's ``[targets]`` table (already in SI, see core.presets)."""
    kwargs = {}
    for key, value in values.items():
        if key not in _TARGET_KEYS:
            raise InputError(f"targets.{key}", value, "one of " + ", ".join(_TARGET_KEYS))
        name, scale = _TARGET_KEYS[key]
        kwargs[name] = float(value) * scale
    return Targets(**kwargs)


def _hz(f: float) -> str:
    return f"{f / 1000:.3g} kHz" if f >= 1000 else f"{f:.3g} Hz"


def quantisation_flags(axis: Axis, gains: GainSet, targets: Targets) -> list[Flag]:
    """Current-command jitter from the speed estimate's quantisation step.

    One encoder count per speed sample is a speed step ``2 pi / (N Ts)`` (derived);
    times the speed Kp it is a current-command step. Above ``jitter_max_fraction`` of
    the current limit it is flagged (common practice: keep it to a few per cent).
    """
    quantum = axis.drive.speed_quantum_rad_s()
    jitter = gains.speed.pi.kp * quantum
    limit = axis.current_limit_a
    if jitter > targets.jitter_max_fraction * limit:
        return [Flag("speed", "warning",
                     f"One encoder count per speed sample is {quantum:.3g} rad/s ({quantum * 60 / (2 * math.pi):.3g} rpm); "
                     f"times speed Kp it steps the current command by {jitter:.3g} A, {jitter / limit:.0%} of the "
                     f"{limit:.3g} A limit. Use a finer encoder, a speed filter or a lower Kp.", kind="quantisation")]
    return []


def margin_flags(axis: Axis, margins: dict[str, LoopMargins], targets: Targets,
                 constants: ConstantsCheck | None = None) -> list[Flag]:
    """Every violated margin, separation or sizing rule, in words.

    Parameters
    ----------
    axis : Axis
    margins : dict of str -> LoopMargins
    targets : Targets
    constants : ConstantsCheck, optional
        The datasheet Kt/Ke comparison, when the axis came from a datasheet.

    Returns
    -------
    list of Flag, errors first
    """
    flags: list[Flag] = []
    for loop in LOOPS:
        m = margins[loop]
        if not m.stable:
            flags.append(Flag(loop, "error", f"The closed {loop} loop is unstable: {m.unstable_poles} pole(s) "
                                             "in the right half plane. Lower the gains or add margin.", kind="unstable"))
            continue
        pm_min = targets.phase_margin_deg(loop)
        if m.phase_margin_deg < pm_min:
            flags.append(Flag(loop, "warning", f"Phase margin {m.phase_margin_deg:.1f} deg at {_hz(m.phase_margin_hz)} "
                                               f"is below the {pm_min:g} deg target.", kind="phase_margin"))
        gm_min = targets.gain_margin_db(loop)
        if m.gain_margin_db < gm_min:
            flags.append(Flag(loop, "warning", f"Gain margin {m.gain_margin_db:.1f} dB at {_hz(m.gain_margin_hz)} "
                                               f"is below the {gm_min:g} dB target.", kind="gain_margin"))
        if m.delay_margin_s < targets.delay_margin_min_s:
            flags.append(Flag(loop, "warning", f"Delay margin {m.delay_margin_s * 1e6:.0f} us is below the "
                                               f"{targets.delay_margin_min_s * 1e6:.0f} us target.", kind="delay_margin"))
        bw_min = getattr(targets, f"{loop}_bandwidth_min_hz")
        if bw_min > 0 and not m.bandwidth_hz >= bw_min:
            flags.append(Flag(loop, "warning", f"Closed-loop bandwidth {_hz(m.bandwidth_hz)} is below the "
                                               f"{_hz(bw_min)} target.", kind="bandwidth"))
        if m.sensitivity_peak > targets.sensitivity_peak_max:
            flags.append(Flag(loop, "warning", f"Sensitivity peak Ms = {m.sensitivity_peak:.2f} at "
                                               f"{_hz(m.sensitivity_peak_hz)} exceeds {targets.sensitivity_peak_max:g}: "
                                               "disturbances near that frequency are amplified.", kind="sensitivity"))
        if not math.isfinite(m.crossover_hz):
            flags.append(Flag(loop, "warning", f"The {loop} loop gain never reaches 1: it has no crossover.", kind="no_crossover"))

    cur, spd, pos = margins["current"], margins["speed"], margins["position"]
    for inner, outer, a, b in (("current", "speed", cur, spd), ("speed", "position", spd, pos)):
        if math.isfinite(a.crossover_hz) and math.isfinite(b.crossover_hz) and b.crossover_hz > 0:
            ratio = a.crossover_hz / b.crossover_hz
            if ratio < targets.separation_min:
                flags.append(Flag(outer, "warning",
                                  f"The {outer} loop crosses over at {_hz(b.crossover_hz)}, only {ratio:.2g}x below the "
                                  f"{inner} loop ({_hz(a.crossover_hz)}); the target separation is "
                                  f"{targets.separation_min:g}x.", kind="separation"))
    limit = targets.current_crossover_max_fraction * axis.drive.current_rate_hz
    if math.isfinite(cur.crossover_hz) and cur.crossover_hz > limit:
        flags.append(Flag("current", "warning",
                          f"Current crossover {_hz(cur.crossover_hz)} is above {targets.current_crossover_max_fraction:g} "
                          f"of the {_hz(axis.drive.current_rate_hz)} sample rate; the continuous model "
                          "and its margins grow unreliable this close to the sampling.", kind="sampling"))
    for label, f_res in (("resonance", axis.resonance_hz), ("anti-resonance", axis.antiresonance_hz)):
        if not math.isfinite(f_res):
            continue
        for loop in ("speed", "position"):
            fc = margins[loop].crossover_hz
            if math.isfinite(fc) and fc / targets.resonance_clearance <= f_res <= fc * targets.resonance_clearance:
                flags.append(Flag(loop, "warning",
                                  f"The load {label} at {_hz(f_res)} lies within {targets.resonance_clearance:g}x of the "
                                  f"{loop} crossover ({_hz(fc)}); consider a notch or a lower bandwidth.", kind="resonance"))
    if constants is not None and not constants.consistent:
        flags.append(Flag("axis", "warning",
                          f"Datasheet Kt and Ke disagree by {constants.relative_difference * 100:+.1f} % after conversion "
                          f"(Kt {constants.kt_given_nm_per_a:.4g} vs {constants.kt_from_ke_nm_per_a:.4g} N*m/A implied "
                          "by Ke); check the rms/peak and line/phase conventions.", kind="constants"))
    order = {"error": 0, "warning": 1, "info": 2}
    return sorted(flags, key=lambda f: order.get(f.severity, 3))


def step_flags(steps: dict, targets: Targets) -> list[Flag]:
    """Step overshoot above the target, per loop (``steps``: loop -> StepResponse)."""
    flags = []
    for loop, st in steps.items():
        if math.isfinite(targets.step_overshoot_max_pct) and st.overshoot_pct > targets.step_overshoot_max_pct:
            flags.append(Flag(loop, "warning", f"Step overshoot {st.overshoot_pct:.1f} % exceeds the "
                                               f"{targets.step_overshoot_max_pct:g} % target.", kind="step_overshoot"))
    return flags
