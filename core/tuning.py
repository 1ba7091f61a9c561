"""Published tuning rules: axis + settings -> gains and a rationale in words.

Rules (each cited where it is used):

* current loop: pole-zero cancellation at a chosen bandwidth, the same from a
  phase-margin target given the loop delay, or the magnitude optimum;
* speed loop: bandwidth separation from the current loop, or the symmetric
  optimum with a chosen ``a``, both on the current loop's equivalent lag plus the
  speed loop's own delay and feedback filter;
* position loop: separation from the speed loop, with feedforward defaults.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from core.axis import Axis
from core.errors import InputError, require_positive, require_range
from core.gains import PI, CurrentGains, GainSet, PositionGains, SpeedGains

CURRENT_RULES = ("pole_zero", "phase_margin", "magnitude_optimum")
SPEED_RULES = ("separation", "symmetric_optimum")


@dataclass(frozen=True)
class TuningSettings:
    """Which rules to use and their parameters (SI; angles in degrees).

    Attributes
    ----------
    current_rule : {"pole_zero", "phase_margin", "magnitude_optimum"}
    current_bandwidth_hz : float
        Target current-loop crossover for "pole_zero", Hz.
    current_phase_margin_deg : float
        Target phase margin for "phase_margin", deg.
    speed_rule : {"separation", "symmetric_optimum"}
    current_to_speed_ratio : float
        Current-loop bandwidth over speed-loop crossover (common practice: 3-10).
    speed_integral_ratio : float
        Speed crossover over the PI zero frequency for "separation" (common practice: 3-5).
    symmetric_optimum_a : float
        The symmetric optimum's ``a`` (> 1; a = 2 is Kessler's original choice).
    speed_to_position_ratio : float
        Speed crossover over position-loop gain (common practice: 3-10).
    speed_crossover_hz, position_crossover_hz : float
        Explicit crossover targets, Hz; 0 means "from the separation ratio".
    speed_feedback_lowpass_hz : float
        Feedback low-pass to put in the speed loop, Hz (0 = none); included in the lag.
    velocity_ff, acceleration_ff : float
        Feedforward fractions to propose.
    """

    current_rule: str = "pole_zero"
    current_bandwidth_hz: float = 1000.0
    current_phase_margin_deg: float = 60.0
    speed_rule: str = "separation"
    current_to_speed_ratio: float = 5.0
    speed_integral_ratio: float = 4.0
    symmetric_optimum_a: float = 3.0
    speed_to_position_ratio: float = 4.0
    speed_crossover_hz: float = 0.0
    position_crossover_hz: float = 0.0
    speed_feedback_lowpass_hz: float = 0.0
    velocity_ff: float = 1.0
    acceleration_ff: float = 1.0

    def __post_init__(self):
        if self.current_rule not in CURRENT_RULES:
            raise InputError("tuning.current_rule", self.current_rule, " | ".join(CURRENT_RULES))
        if self.speed_rule not in SPEED_RULES:
            raise InputError("tuning.speed_rule", self.speed_rule, " | ".join(SPEED_RULES))
        require_positive("tuning.current_bandwidth", self.current_bandwidth_hz, "Hz")
        require_range("tuning.current_phase_margin", self.current_phase_margin_deg, 5.0, 85.0, "deg")
        require_range("tuning.current_to_speed_ratio", self.current_to_speed_ratio, 1.0, 100.0, "")
        require_range("tuning.speed_integral_ratio", self.speed_integral_ratio, 1.0, 100.0, "")
        require_range("tuning.symmetric_optimum_a", self.symmetric_optimum_a, 1.1, 20.0, "")
        require_range("tuning.speed_to_position_ratio", self.speed_to_position_ratio, 1.0, 100.0, "")
        require_range("tuning.speed_feedback_lowpass", self.speed_feedback_lowpass_hz, 0.0, 1e6, "Hz")
        require_range("tuning.velocity_ff", self.velocity_ff, 0.0, 1.5, "(fraction)")
        require_range("tuning.acceleration_ff", self.acceleration_ff, 0.0, 1.5, "(fraction)")


@dataclass(frozen=True)
class Proposal:
    """Gains proposed for one loop, with the reasoning behind them.

    Attributes
    ----------
    loop : str
    rule : str
    rationale : str
        A few sentences a practitioner can check, with the numbers used.
    expected_crossover_hz : float
        Crossover the rule aims at, Hz.
    """

    loop: str
    rule: str
    rationale: str
    expected_crossover_hz: float


def _lag_of_lowpass(corner_hz: float) -> float:
    return 0.0 if corner_hz <= 0 else 1.0 / (2.0 * math.pi * corner_hz)


def current_small_lag_s(axis: Axis) -> float:
    """Tsigma of the current loop: its delay plus the feedback filter's time constant, s."""
    return axis.drive.loop_delays_s()[0] + _lag_of_lowpass(axis.drive.current_filter_hz)


def tune_current(axis: Axis, settings: TuningSettings) -> tuple[PI, Proposal]:
    """Current PI from the chosen rule; gains in V/A and V/(A*s)."""
    m = axis.motor
    r, l = m.resistance_ohm, m.inductance_h
    t_sigma = current_small_lag_s(axis)
    rule = settings.current_rule
    if rule == "magnitude_optimum":
        # Umland & Safiuddin, IEEE Trans. Ind. Appl. 26(3), 1990: Ti = Ta, Kp = Ta/(2 K Tsigma)
        # on K/(1 + s Ta) * 1/(1 + s Tsigma), here K = 1/R, Ta = L/R.
        kp = l / (2.0 * t_sigma)
        pi = PI(kp, kp / (l / r))
        wc = 0.5 / t_sigma
        text = (f"Magnitude optimum (Umland & Safiuddin 1990): Ti = L/R = {l / r * 1e3:.3g} ms cancels the "
                f"armature pole; Kp = L/(2*Tsigma) with Tsigma = {t_sigma * 1e6:.4g} us (delay + current filter). "
                f"Aims at a 4.3 % step overshoot and a crossover near {wc / (2 * math.pi):.4g} Hz.")
    else:
        if rule == "pole_zero":
            wc = 2.0 * math.pi * settings.current_bandwidth_hz
        else:
            # With the armature pole cancelled the loop is wc*exp(-s Td)/s: PM = 90 deg - wc*Td.
            wc = math.radians(90.0 - settings.current_phase_margin_deg) / t_sigma
        pi = PI(l * wc, r * wc)
        pm = 90.0 - math.degrees(wc * t_sigma)
        head = ("Pole-zero cancellation" if rule == "pole_zero"
                else f"Pole-zero cancellation placed for a {settings.current_phase_margin_deg:g} deg phase margin")
        text = (f"{head} (common practice): the PI zero Ki/Kp = R/L = {r / l:.4g} 1/s cancels the armature "
                f"pole, so the open loop is wc*exp(-s*Td)/s with wc = 2*pi*{wc / (2 * math.pi):.4g} Hz: "
                f"Kp = L*wc, Ki = R*wc. Expected phase margin 90 - wc*Td = {pm:.3g} deg "
                f"(Td = {t_sigma * 1e6:.4g} us).")
    return pi, Proposal("current", rule, text, wc / (2.0 * math.pi))


def current_equivalent_lag_s(axis: Axis, current: PI) -> float:
    """First-order lag that stands in for the closed current loop, s.

    A loop whose open loop is ``wc exp(-s Td)/s`` closes to about ``1/(1 + s/wc)``;
    an MO-tuned loop behaves for the outer loop like a lag of ``2 Tsigma`` (common
    practice, e.g. Schroeder, "Elektrische Antriebe - Regelung von Antriebssystemen",
    from memory). With cancellation, ``wc = Kp/L``.
    """
    return axis.motor.inductance_h / current.kp


def tune_speed(axis: Axis, current: PI, settings: TuningSettings,
               current_crossover_hz: float | None = None) -> tuple[PI, Proposal]:
    """Speed PI in A/(rad/s) and A/rad, on the current loop's equivalent lag."""
    kt, j = axis.motor.torque_constant_nm_per_a, axis.total_inertia_kgm2
    t_current = current_equivalent_lag_s(axis, current)
    t_eq = t_current + axis.drive.loop_delays_s()[1] + _lag_of_lowpass(settings.speed_feedback_lowpass_hz)
    if settings.speed_rule == "symmetric_optimum":
        a = settings.symmetric_optimum_a
        # Kessler 1958 (from memory); formula derived on Kt/(J s) * 1/(1 + s Teq).
        kp = j / (a * kt * t_eq)
        ti = a * a * t_eq
        wc = 1.0 / (a * t_eq)
        pm = math.degrees(math.asin((a * a - 1) / (a * a + 1)))
        text = (f"Symmetric optimum, a = {a:g} (Kessler 1958): on Kt/(J*s) with the lag Teq = "
                f"{t_eq * 1e6:.4g} us (closed current loop {t_current * 1e6:.4g} us + speed delay + filter), "
                f"Kp = J/(a*Kt*Teq), Ti = a^2*Teq = {ti * 1e3:.4g} ms; crossover 1/(a*Teq) = "
                f"{wc / (2 * math.pi):.4g} Hz, phase margin asin((a^2-1)/(a^2+1)) = {pm:.3g} deg before the "
                f"delay's higher-order phase. J includes the reflected load ({axis.inertia_ratio:.3g}:1).")
    else:
        wc_current = (2.0 * math.pi * current_crossover_hz if current_crossover_hz
                      else 1.0 / t_current)
        wc = wc_current / settings.current_to_speed_ratio
        if settings.speed_crossover_hz > 0:
            wc = 2.0 * math.pi * settings.speed_crossover_hz
        kp = j * wc / kt
        ti = settings.speed_integral_ratio / wc
        phase_lag = math.degrees(wc * t_eq)
        pm = 90.0 - math.degrees(math.atan(1.0 / settings.speed_integral_ratio)) - phase_lag
        how = (f"current bandwidth / {settings.current_to_speed_ratio:g}" if settings.speed_crossover_hz <= 0
               else "the chosen target")
        text = (f"Bandwidth separation (common practice): speed crossover = {how} = {wc / (2 * math.pi):.4g} Hz; Kp = J*wc/Kt puts |L| = 1 "
                f"there on the rigid-body plant Kt/(J*s); the PI zero sits {settings.speed_integral_ratio:g}x "
                f"below (Ti = {ti * 1e3:.4g} ms). Estimated phase margin ~{pm:.3g} deg with Teq = "
                f"{t_eq * 1e6:.4g} us. J includes the reflected load ({axis.inertia_ratio:.3g}:1).")
    return PI(kp, kp / ti), Proposal("speed", settings.speed_rule, text, wc / (2.0 * math.pi))


def tune_position(axis: Axis, speed_crossover_hz: float, settings: TuningSettings) -> tuple[PositionGains, Proposal]:
    """Position P gain in (rad/s)/rad from separation, and the feedforward fractions."""
    kp = 2.0 * math.pi * speed_crossover_hz / settings.speed_to_position_ratio
    how = f"speed crossover / {settings.speed_to_position_ratio:g}"
    if settings.position_crossover_hz > 0:
        kp, how = 2.0 * math.pi * settings.position_crossover_hz, "2*pi * the chosen crossover"
    text = (f"Separation (common practice): position gain = {how} "
            f"= {kp:.4g} 1/s (crossover ~{kp / (2 * math.pi):.3g} Hz with an ideal speed loop). Velocity feedforward "
            f"{settings.velocity_ff:.0%} and acceleration feedforward {settings.acceleration_ff:.0%} of "
            f"J_total/Kt take the following error off the feedback loop during moves.")
    gains = PositionGains(kp, 0.0, settings.velocity_ff, settings.acceleration_ff)
    return gains, Proposal("position", "separation", text, kp / (2.0 * math.pi))


def propose_gains(axis: Axis, settings: TuningSettings, base: GainSet | None = None,
                  name: str = "proposed") -> tuple[GainSet, tuple[Proposal, ...]]:
    """Gains for all three loops from the rules in ``settings``.

    ``base`` supplies what the rules do not set (back-EMF decoupling, notches).
    The speed rule uses the current loop's expected crossover; the position rule the
    speed loop's.
    """
    current_pi, p_current = tune_current(axis, settings)
    speed_pi, p_speed = tune_speed(axis, current_pi, settings, p_current.expected_crossover_hz)
    position, p_position = tune_position(axis, p_speed.expected_crossover_hz, settings)
    decouple = base.current.decouple_back_emf if base else True
    notches = base.speed.notches if base else ()
    gains = GainSet(
        CurrentGains(current_pi, decouple),
        SpeedGains(speed_pi, settings.speed_feedback_lowpass_hz, notches),
        position,
        name=name,
        note="; ".join(f"{p.loop}: {p.rule}" for p in (p_current, p_speed, p_position)),
    )
    return gains, (p_current, p_speed, p_position)


# Preset [tuning] keys (see core.presets.TUNING_UNITS / TUNING_CHOICES) -> TuningSettings fields.
_TUNING_KEYS = {
    "current_rule": "current_rule",
    "speed_rule": "speed_rule",
    "current_bandwidth": "current_bandwidth_hz",
    "current_phase_margin": "current_phase_margin_deg",
    "speed_bandwidth": "speed_crossover_hz",
    "speed_separation": "current_to_speed_ratio",
    "symmetric_optimum_a": "symmetric_optimum_a",
    "position_bandwidth": "position_crossover_hz",
    "position_separation": "speed_to_position_ratio",
}


def tuning_from_dict(values: dict) -> TuningSettings:
    """TuningSettings from a preset's ``[tuning]`` table (already in SI, see core.presets)."""
    kwargs = {}
    for key, value in values.items():
        if key == "speed_phase_margin":
            continue    # kept in the file for the robust auto-tuner; the rules here do not use it
        if key not in _TUNING_KEYS:
            raise InputError(f"tuning.{key}", value, "one of " + ", ".join(_TUNING_KEYS))
        kwargs[_TUNING_KEYS[key]] = value
    return TuningSettings(**kwargs)
