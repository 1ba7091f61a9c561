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
from numba import njit

from core.axis import Axis
from core.gains import GainSet
from core.loops import FrequencyAlgebra
from core.tape import cascade_tape

SAMPLES = 1024
_jit = njit(cache=True, error_model="numpy")
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
    values = transfer(FrequencyAlgebra.at(contour.s))
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
        self.s_far = 50.0 * math.pi * samples / self.period + 10.0 * self.sigma
        self.decay = 20.0 / self.period + self.sigma
        # With the contour, what every inversion on it shares: 1/s, the transforms 1/(s+a)
        # and 1/(s+a)^2 of the carried part, and the exponentials that undo the shift.
        (self.s, self.time_s, self._per_s, self._q1, self._q2, self._grow,
         self._fade) = _contour(samples, self.period, self.sigma, self.s_far, self.decay)

    def invert(self, values: np.ndarray, integrations: int) -> np.ndarray:
        """``values`` (at :attr:`s`, along the last axis; rows of variants allowed)
        divided by s**integrations, back to time; ``integrations`` may be given per row."""
        n = self.samples // 2 + 1
        rows = np.ascontiguousarray(values, dtype=complex).reshape(-1, np.shape(values)[-1])
        per_row = np.ascontiguousarray(np.broadcast_to(np.asarray(integrations, np.int64), len(rows)))
        spectrum, f0, c = _spectrum(rows, n, self._per_s, self._q1, self._q2, self.s_far, per_row,
                                    self.samples / self.period, self.decay)
        series = np.fft.irfft(spectrum, n=self.samples, axis=-1)
        out = _undo_shift(series, n - 1, self._grow, self._fade, self.time_s, f0, c)
        return out.reshape(np.shape(values)[:-1] + (n - 1,))


@_jit
def _contour(samples, period, sigma, s_far, decay):
    """The points ``sigma + j 2 pi k / period`` (k = 0 .. samples/2) and two far ones, the
    first ``samples/2`` sample times, and the arrays the inversions share (see _Contour)."""
    n, half = samples // 2 + 1, samples // 2
    s = np.empty(n + 2, np.complex128)
    per_s, q1, q2 = np.empty(n, np.complex128), np.empty(n, np.complex128), np.empty(n, np.complex128)
    for k in range(n):
        s[k] = sigma + 2j * math.pi * k / period
        per_s[k] = 1.0 / s[k]
        q1[k] = 1.0 / (s[k] + decay)
        q2[k] = q1[k] * q1[k]
    s[n], s[n + 1] = s_far, 2.0 * s_far
    time_s, grow, fade = np.empty(half), np.empty(half), np.empty(half)
    for k in range(half):
        time_s[k] = k * (period / samples)
        grow[k] = math.exp(sigma * time_s[k])
        fade[k] = math.exp(-decay * time_s[k])
    return s, time_s, per_s, q1, q2, grow, fade


@_jit
def _spectrum(values, n, per_s, q1, q2, s_far, integrations, scale, decay):
    """The spectrum of ``f - q`` for each row, and each row's (f(0+), c) of ``q``.

    ``f(0+)`` and the slope come from two far points (``values[:, n]``, ``values[:, n + 1]``)
    by Richardson extrapolation: ``H(inf) = 2 H(2 s_far) - H(s_far)``,
    ``lim s (H(s) - H(inf)) = 2 s_far (H(s_far) - H(2 s_far))``; they are dropped when
    not finite.
    """
    rows = values.shape[0]
    spectrum = np.empty((rows, n), dtype=np.complex128)
    f0s, cs = np.empty(rows), np.empty(rows)
    for r in range(rows):
        h1, h2 = values[r, n].real, values[r, n + 1].real
        h_inf = 2.0 * h2 - h1
        if integrations[r] == 1:
            f0, df0 = h_inf, 2.0 * s_far * (h1 - h2)
        elif integrations[r] == 2:
            f0, df0 = 0.0, h_inf
        else:
            f0, df0 = 0.0, 0.0
        if not (math.isfinite(f0) and math.isfinite(df0)):
            f0, df0 = 0.0, 0.0
        c = df0 + decay * f0
        for k in range(n):
            divided = values[r, k] * per_s[k]
            for _ in range(integrations[r] - 1):
                divided = divided * per_s[k]
            spectrum[r, k] = (divided - (f0 * q1[k] + c * q2[k])) * scale
        f0s[r], cs[r] = f0, c
    return spectrum, f0s, cs


@_jit
def _undo_shift(series, n, grow, fade, time_s, f0, c):
    """``series * exp(sigma t) + q(t)`` over the first ``n`` samples of each row."""
    out = np.empty((series.shape[0], n))
    for r in range(series.shape[0]):
        for k in range(n):
            out[r, k] = series[r, k] * grow[k] + (f0[r] + c[r] * time_s[k]) * fade[k]
    return out


def step_figures(t: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float]:
    """(final value, overshoot %, 10-90 % rise time s, 2 % settling time s) of a step trace.

    The final value is the mean of the last 2 % of the trace; the settling time is NaN when
    the trace leaves the 2 % band in its last two samples, the figures all NaN (but the
    final value) when the trace is not finite or ends at 0.
    """
    return _step_figures(np.ascontiguousarray(t, dtype=float), np.ascontiguousarray(y, dtype=float))


@_jit
def _step_figures(t, y):
    n = len(y)
    tail = max(n // 50, 1)
    final = 0.0
    for k in range(n - tail, n):
        final += y[k]
    final /= tail
    finite = True
    for k in range(n):
        finite = finite and math.isfinite(y[k])
    if not finite or final == 0.0:
        return final, math.nan, math.nan, math.nan
    peak = y[0]
    for k in range(n):
        peak = max(peak, y[k]) if final > 0 else min(peak, y[k])
    overshoot = max(0.0, (peak - final) / final * 100.0)
    first10, first90, last_out = -1, -1, -1
    for k in range(n):
        rel = y[k] / final
        if first10 < 0 and rel >= 0.1:
            first10 = k
        if first90 < 0 and rel >= 0.9:
            first90 = k
        if abs(rel - 1.0) > 0.02:
            last_out = k
    rise = t[first90] - t[first10] if first10 >= 0 and first90 >= 0 else math.nan
    if last_out < 0:
        settle = 0.0
    elif last_out >= n - 2:
        settle = math.nan
    else:
        settle = t[last_out + 1]
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
    contour = _Contour(horizon_s, SAMPLES, growth_per_s)
    values, = cascade_tape(axis, gains).evaluate(contour.s, [f"{loop}_closed"])
    y = contour.invert(values, 1)
    return StepResponse(contour.time_s, y, *step_figures(contour.time_s, y))


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
    closed, disturbance = cascade_tape(axis, gains).evaluate(
        contour.s, ["position_closed", "position_disturbance_speed"])
    h = disturbance * load_torque_nm
    y, speed, position = contour.invert(np.stack([closed, h, h]), [1, 1, 2])
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
