"""The drive: DC bus and modulation, current limit, loop rates, delays, sensors."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from core.errors import InputError, require_nonnegative, require_positive, require_range

Modulation = Literal["svpwm", "sinusoidal", "hbridge"]


@dataclass(frozen=True)
class Drive:
    """Drive parameters (SI).

    Attributes
    ----------
    bus_voltage_v : float
        DC-bus voltage, V.
    modulation : {"svpwm", "sinusoidal", "hbridge"}
        How the bus becomes motor voltage: space-vector PWM gives a phase amplitude
        up to Vdc/sqrt(3), sine-triangle PWM Vdc/2, a DC motor's H bridge Vdc.
    max_modulation : float
        Usable fraction of that linear range (dead time, current sampling), 0..1.
    current_limit_a : float
        Drive peak current in the model's ampere (PMSM: A peak of phase current).
    pwm_frequency_hz, current_rate_hz, speed_rate_hz, position_rate_hz : float
        PWM carrier and the three loops' sample rates, Hz.
    computation_delay_samples : float
        Delay from sampling to the new output being applied, in samples of each loop
        (common practice: 1 sample).
    pwm_delay_samples : float
        PWM update / zero-order-hold delay of the current loop, samples (common practice: 0.5).
    speed_estimate_delay_samples : float
        Delay of a backward-difference speed estimate, speed-loop samples (0.5, derived:
        a difference over one sample is a moving average over that sample).
    current_delay_s, speed_delay_s, position_delay_s : float
        Optional total loop delays, s; NaN means "build it from the samples above".
    current_filter_hz : float
        First-order low-pass on the current feedback (0 = none), Hz.
    encoder_counts_per_rev : float
        Position counts per motor revolution (after quadrature), counts.
    """

    bus_voltage_v: float
    current_limit_a: float
    pwm_frequency_hz: float
    current_rate_hz: float
    speed_rate_hz: float
    position_rate_hz: float
    modulation: Modulation = "svpwm"
    max_modulation: float = 0.95
    computation_delay_samples: float = 1.0
    pwm_delay_samples: float = 0.5
    speed_estimate_delay_samples: float = 0.5
    current_delay_s: float = math.nan
    speed_delay_s: float = math.nan
    position_delay_s: float = math.nan
    current_filter_hz: float = 0.0
    encoder_counts_per_rev: float = 2.0 ** 20

    def __post_init__(self):
        require_positive("drive.bus_voltage", self.bus_voltage_v, "V")
        require_positive("drive.current_limit", self.current_limit_a, "A")
        if self.modulation not in ("svpwm", "sinusoidal", "hbridge"):
            raise InputError("drive.modulation", self.modulation, '"svpwm", "sinusoidal" or "hbridge"')
        require_range("drive.max_modulation", self.max_modulation, 0.05, 1.0, "(fraction)")
        require_positive("drive.pwm_frequency", self.pwm_frequency_hz, "Hz")
        require_positive("drive.current_rate", self.current_rate_hz, "Hz")
        require_positive("drive.speed_rate", self.speed_rate_hz, "Hz")
        require_positive("drive.position_rate", self.position_rate_hz, "Hz")
        if self.current_rate_hz > 2.0 * self.pwm_frequency_hz * (1 + 1e-9):
            raise InputError("drive.current_rate", self.current_rate_hz,
                             f"at most twice the PWM frequency ({2 * self.pwm_frequency_hz:g} Hz): "
                             "a current sample needs a PWM update")
        if self.current_rate_hz < self.pwm_frequency_hz * (1 - 1e-9):
            raise InputError("drive.current_rate", self.current_rate_hz,
                             f"at least the PWM frequency ({self.pwm_frequency_hz:g} Hz): the current "
                             "is sampled once or twice per PWM period")
        if self.speed_rate_hz > self.current_rate_hz * (1 + 1e-9):
            raise InputError("drive.speed_rate", self.speed_rate_hz,
                             f"at most the current-loop rate ({self.current_rate_hz:g} Hz)")
        if self.position_rate_hz > self.speed_rate_hz * (1 + 1e-9):
            raise InputError("drive.position_rate", self.position_rate_hz,
                             f"at most the speed-loop rate ({self.speed_rate_hz:g} Hz)")
        for name in ("computation_delay_samples", "pwm_delay_samples", "speed_estimate_delay_samples"):
            require_range(f"drive.{name}", getattr(self, name), 0.0, 10.0, "samples")
        for name in ("current_delay_s", "speed_delay_s", "position_delay_s"):
            value = getattr(self, name)
            if not (isinstance(value, float) and math.isnan(value)):
                require_range(f"drive.{name}", value, 0.0, 1.0, "s")
        require_nonnegative("drive.current_filter", self.current_filter_hz, "Hz")
        require_range("drive.encoder_counts_per_rev", self.encoder_counts_per_rev, 4.0, 2.0 ** 40, "counts")

    @property
    def voltage_limit_v(self) -> float:
        """Largest voltage the model's v can reach, V (PMSM: phase amplitude; DC: armature)."""
        linear = {"svpwm": 1.0 / math.sqrt(3.0), "sinusoidal": 0.5, "hbridge": 1.0}[self.modulation]
        return self.bus_voltage_v * linear * self.max_modulation

    def loop_delays_s(self) -> tuple[float, float, float]:
        """Total delay of the current, speed and position loops, s."""
        tc, tw, tp = 1.0 / self.current_rate_hz, 1.0 / self.speed_rate_hz, 1.0 / self.position_rate_hz
        built = (
            (self.computation_delay_samples + self.pwm_delay_samples) * tc,
            (self.computation_delay_samples + self.speed_estimate_delay_samples) * tw,
            self.computation_delay_samples * tp,
        )
        given = (self.current_delay_s, self.speed_delay_s, self.position_delay_s)
        return tuple(b if math.isnan(g) else g for b, g in zip(built, given))

    def speed_quantum_rad_s(self, window_s: float | None = None) -> float:
        """Speed-estimate step from counting encoder edges over ``window_s``, rad/s.

        delta_w = 2*pi / (N * Tw) (derived); the window defaults to one speed-loop sample.
        """
        tw = 1.0 / self.speed_rate_hz if window_s is None else window_s
        return 2.0 * math.pi / (self.encoder_counts_per_rev * tw)
