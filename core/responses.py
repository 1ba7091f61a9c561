"""Linear time responses of the cascade, from the same exact-delay model as the margins.

The responses are computed by numerical inversion of the Laplace transform on a
shifted Fourier contour (Dubner & Abate, "Numerical inversion of Laplace
transforms by relating them to the finite Fourier cosine transform", J. ACM 15(1),
1968 — from memory): with a period ``T`` and a shift ``sigma``,

    f(t) ~ exp(sigma t) / T * sum_k F(sigma + j k 2 pi / T) exp(j k 2 pi t / T),

evaluated by one inverse real FFT. The wrap-around error is ``exp(-sigma T)``
times the response one period later; ``sigma T = 10`` keeps it near 5e-5 of the
final value, and only the first half of the period is returned. Delays enter as
``exp(-s Td)`` exactly, so these traces and the Bode margins describe one model.
A loop that is unstable still gets a trace: ``sigma`` is raised above the growth
rate seen in the response, and the result says it is unstable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from core.axis import Axis
from core.gains import GainSet
from core.loops import CascadeModel, FrequencyAlgebra

SAMPLES = 1024
_SIGMA_T = 10.0


@dataclass(frozen=True)
class StepResponse:
    """A unit-step response and the usual figures of it.

    Attributes
    ----------
    time_s : ndarray
    value : ndarray
        Output per unit of the step (e.g. A per A, rad/s per rad/s).
    final_value : float
        Value at the end of the trace.
    overshoot_pct : float
        Peak above the final value, % of the final value (0 when none).
    rise_time_s : float
        10 % to 90 % of the final value, s (NaN when not reached).
    settling_time_s : float
        Last time outside +-2 % of the final value, s (NaN when it never settles in the trace).
    """

    time_s: np.ndarray
    value: np.ndarray
    final_value: float
    overshoot_pct: float
    rise_time_s: float
    settling_time_s: float


@dataclass(frozen=True)
class LoadStepResponse:
    """Motor speed and position after a load-torque step with all loops closed.

    Attributes
    ----------
    time_s : ndarray
    load_torque_nm : float
        Step size at the motor shaft, N*m.
    speed_rad_s : ndarray
        Motor speed deviation, rad/s.
    position_rad : ndarray
        Motor position deviation, rad.
    speed_dip_rad_s : float
        Largest speed deviation (signed), rad/s.
    position_error_rad : float
        Largest position deviation (signed), rad.
    recovery_time_s : float
        Time after which the speed stays within 5 % of its largest deviation, s.
    """

    time_s: np.ndarray
    load_torque_nm: float
    speed_rad_s: np.ndarray
    position_rad: np.ndarray
    speed_dip_rad_s: float
    position_error_rad: float
    recovery_time_s: float


def inverse_laplace(transfer: Callable[[FrequencyAlgebra], np.ndarray], horizon_s: float,
                    integrations: int = 1, samples: int = SAMPLES, growth_per_s: float = 0.0):
    """Time response of ``transfer(s) / s**integrations`` over ``[0, horizon_s]``.

    Parameters
    ----------
    transfer : callable
        Maps a :class:`FrequencyAlgebra` to the transfer function's values.
    horizon_s : float
        Length of the returned trace, s (the Fourier period is twice this).
    integrations : int
        1 gives the step response, 2 the ramp response / integral of the step.
    samples : int
        FFT length; half of it is returned.
    growth_per_s : float
        Known exponential growth rate to stay above (unstable loops), 1/s.

    Returns
    -------
    (time_s, value) : tuple of ndarray, each ``samples // 2`` long
    """
    contour = _Contour(horizon_s, samples, growth_per_s)
    values = transfer(contour.algebra)
    return contour.time_s, contour.invert(values, integrations)


class _Contour:
    """The shifted Fourier contour of one inversion, and the inversion itself.

    The periodic extension of ``f(t) exp(-sigma t)`` is continuous at the wrap only
    if ``f(0+) = 0`` and has a continuous slope only if ``f'(0+) = 0``; otherwise the
    Fourier coefficients fall off like 1/k or 1/k^2 and the first samples ring. So
    the value and slope at 0+ are read from the transfer far out on the real axis
    (initial-value theorem; delayed paths vanish there), carried by
    ``q(t) = (d + c t) exp(-a t)`` whose transform is known, and only ``f - q`` is
    inverted numerically (derived).
    """

    def __init__(self, horizon_s: float, samples: int, growth_per_s: float):
        self.samples = samples
        self.period = 2.0 * horizon_s
        self.sigma = _SIGMA_T / self.period + max(growth_per_s, 0.0)
        k = np.arange(samples // 2 + 1)
        self.s_far = 50.0 * math.pi * samples / self.period + 10.0 * self.sigma
        grid = self.sigma + 2j * math.pi * k / self.period
        self.algebra = FrequencyAlgebra.at(np.concatenate([grid, [self.s_far, 2.0 * self.s_far]]))
        self.time_s = (np.arange(samples) * (self.period / samples))[:samples // 2]
        self.decay = 20.0 / self.period + self.sigma
        # What every inversion on this contour shares: 1/s, the transforms 1/(s+a) and
        # 1/(s+a)^2 of the carried part, and the exponentials that undo the shift.
        self._per_s = 1.0 / grid
        self._q1 = 1.0 / (grid + self.decay)
        self._q2 = self._q1 * self._q1
        self._grow = np.exp(self.sigma * self.time_s)
        self._fade = np.exp(-self.decay * self.time_s)

    def invert(self, values: np.ndarray, integrations: int) -> np.ndarray:
        """``values`` (on :attr:`algebra`, along the last axis; rows of variants allowed)
        divided by s**integrations, back to time."""
        n = self.samples // 2 + 1
        h1, h2 = values[..., n].real, values[..., n + 1].real
        h_inf = 2.0 * h2 - h1                          # H(inf), Richardson on two far points
        slope = 2.0 * self.s_far * (h1 - h2)           # lim s (H(s) - H(inf))
        zero = 0.0 * h1
        f0, df0 = (h_inf, slope) if integrations == 1 else (zero, h_inf if integrations == 2 else zero)
        usable = np.isfinite(f0) & np.isfinite(df0)
        f0 = np.where(usable, f0, 0.0)[..., None]
        c = np.where(usable, df0, 0.0)[..., None] + self.decay * f0
        divided = values[..., :n] * self._per_s
        for _ in range(integrations - 1):
            divided = divided * self._per_s
        spectrum = (divided - (f0 * self._q1 + c * self._q2)) * (self.samples / self.period)
        series = np.fft.irfft(spectrum, n=self.samples, axis=-1)[..., :n - 1]
        return series * self._grow + (f0 + c * self.time_s) * self._fade


def step_figures(t: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float]:
    """(final value, overshoot %, 10-90 % rise time s, 2 % settling time s) of a step trace."""
    final = float(np.mean(y[-max(len(y) // 50, 1):]))
    if not np.all(np.isfinite(y)) or final == 0.0:
        return final, math.nan, math.nan, math.nan
    peak = float(np.max(y) if final > 0 else np.min(y))
    overshoot = max(0.0, (peak - final) / final * 100.0)
    rel = y / final
    rise = math.nan
    above10 = np.nonzero(rel >= 0.1)[0]
    above90 = np.nonzero(rel >= 0.9)[0]
    if len(above10) and len(above90):
        rise = float(t[above90[0]] - t[above10[0]])
    outside = np.nonzero(np.abs(rel - 1.0) > 0.02)[0]
    if len(outside) == 0:
        settle = 0.0
    elif outside[-1] >= len(t) - 2:
        settle = math.nan
    else:
        settle = float(t[outside[-1] + 1])
    return final, overshoot, rise, settle


def response_horizon_s(crossover_hz: float, integral_time_s: float, fallback_s: float) -> float:
    """A trace length that shows a loop's step and most of its integral tail, s.

    ``15 / wc`` covers the step of any reasonably damped loop (common practice: a loop
    settles within a few crossover periods); a PI zero far below the crossover adds a
    slow tail of time constant ~Ti, so up to ``4 Ti`` more is shown, capped at ``60/wc``.
    """
    if not (crossover_hz > 0 and math.isfinite(crossover_hz)):
        return fallback_s
    wc = 2.0 * math.pi * crossover_hz
    tail = 4.0 * integral_time_s if math.isfinite(integral_time_s) else 0.0
    return max(15.0 / wc, min(tail, 60.0 / wc))


def step_response(axis: Axis, gains: GainSet, loop: str, horizon_s: float,
                  growth_per_s: float = 0.0) -> StepResponse:
    """Closed-loop unit-step response of ``loop`` ("current", "speed" or "position").

    The position step is taken without feedforward (a step has no finite speed).
    """
    attr = f"{loop}_closed"
    t, y = inverse_laplace(lambda alg: getattr(CascadeModel(axis, gains, alg), attr),
                           horizon_s, growth_per_s=growth_per_s)
    return StepResponse(t, y, *step_figures(t, y))


def load_step_response(axis: Axis, gains: GainSet, load_torque_nm: float, horizon_s: float,
                       growth_per_s: float = 0.0) -> LoadStepResponse:
    """Speed and position deviation after a load-torque step of ``load_torque_nm`` (motor side)."""
    return position_and_load_step(axis, gains, load_torque_nm, horizon_s, growth_per_s)[1]


def position_and_load_step(axis: Axis, gains: GainSet, load_torque_nm: float, horizon_s: float,
                           growth_per_s: float = 0.0) -> tuple[StepResponse, LoadStepResponse]:
    """The position step and the load step over one horizon, from one model evaluation.

    Returns
    -------
    (StepResponse, LoadStepResponse)
        The position loop's unit step (no feedforward) and the load-torque step.
    """
    contour = _Contour(horizon_s, SAMPLES, growth_per_s)
    model = CascadeModel(axis, gains, contour.algebra)
    y = contour.invert(model.position_closed, 1)
    h = model.position_disturbance_speed * load_torque_nm
    speed = contour.invert(h, 1)
    position = contour.invert(h, 2)
    t = contour.time_s
    half = len(t)
    j = int(np.argmax(np.abs(speed)))
    dip = float(speed[j])
    pj = int(np.argmax(np.abs(position)))
    outside = np.nonzero(np.abs(speed) > 0.05 * abs(dip))[0] if dip != 0 else np.zeros(0, int)
    if len(outside) == 0:
        recovery = 0.0
    elif outside[-1] >= half - 2:
        recovery = math.nan
    else:
        recovery = float(t[outside[-1] + 1])
    step = StepResponse(t, y, *step_figures(t, y))
    return step, LoadStepResponse(t, load_torque_nm, speed, position, dip, float(position[pj]), recovery)
