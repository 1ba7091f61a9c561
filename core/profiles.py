"""Point-to-point move profiles: trapezoidal and jerk-limited (7-segment S-curve).

A profile is a list of segments of constant jerk, each starting from a known
(position, velocity, acceleration); evaluating it at any time is a polynomial of
degree three in the time since the segment started. A trapezoid is the same list
with zero jerk and the acceleration stepping at the segment boundaries.

Both profiles start and end at rest. When the distance is too short to reach the
speed (or the acceleration) the peak is lowered so the move stays time-optimal
under the given limits: velocity, acceleration and jerk never exceed them
(derived from integrating the constant-jerk segments).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.errors import InputError


@dataclass(frozen=True)
class MoveProfile:
    """A rest-to-rest move as constant-jerk segments (units of the caller: m or rad).

    Attributes
    ----------
    start_s : ndarray
        Start time of each segment, s (first is 0).
    position, velocity, acceleration, jerk : ndarray
        State at each segment start and the segment's constant jerk (unit, unit/s, unit/s^2, unit/s^3).
    duration_s : float
        Total move time, s.
    distance : float
        Signed distance, unit.
    peak_velocity, peak_acceleration : float
        Largest |velocity| and |acceleration| actually reached, unit/s and unit/s^2.
    """

    start_s: np.ndarray
    position: np.ndarray
    velocity: np.ndarray
    acceleration: np.ndarray
    jerk: np.ndarray
    duration_s: float
    distance: float
    peak_velocity: float
    peak_acceleration: float

    def evaluate(self, t_s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Position, velocity and acceleration at times ``t_s`` (s, from the move start).

        Before the start the move is at rest at 0; after the end at rest at ``distance``.
        """
        t = np.asarray(t_s, dtype=float)
        idx = np.clip(np.searchsorted(self.start_s, t, side="right") - 1, 0, len(self.start_s) - 1)
        tau = np.clip(t, 0.0, self.duration_s) - self.start_s[idx]
        tau = np.maximum(tau, 0.0)
        p0, v0, a0, j = self.position[idx], self.velocity[idx], self.acceleration[idx], self.jerk[idx]
        pos = p0 + v0 * tau + a0 * tau ** 2 / 2.0 + j * tau ** 3 / 6.0
        vel = v0 + a0 * tau + j * tau ** 2 / 2.0
        acc = a0 + j * tau
        done = t >= self.duration_s
        before = t < 0.0
        pos = np.where(done, self.distance, np.where(before, 0.0, pos))
        vel = np.where(done | before, 0.0, vel)
        acc = np.where(done | before, 0.0, acc)
        return pos, vel, acc


def _build(segments: list[tuple[float, float, float]], sign: float) -> tuple:
    """Integrate (duration, a_start, jerk) segments from rest; returns arrays."""
    starts, ps, vs, accs, js = [], [], [], [], []
    t = p = v = 0.0
    for dur, a0, j in segments:
        if dur <= 0.0:
            continue
        starts.append(t); ps.append(p); vs.append(v); accs.append(a0); js.append(j)
        p += v * dur + a0 * dur ** 2 / 2.0 + j * dur ** 3 / 6.0
        v += a0 * dur + j * dur ** 2 / 2.0
        t += dur
    return (np.array(starts), sign * np.array(ps), sign * np.array(vs),
            sign * np.array(accs), sign * np.array(js), t, p)


def trapezoid_profile(distance: float, speed: float, acceleration: float, field: str = "profile") -> MoveProfile:
    """Trapezoidal velocity profile (triangular when the speed is not reached).

    Parameters
    ----------
    distance : float
        Signed distance, unit (m or rad).
    speed, acceleration : float
        Limits, unit/s and unit/s^2, > 0.
    field : str
        Prefix for error messages.
    """
    _check(distance, speed, acceleration, math.inf, field)
    d = abs(distance)
    v = min(speed, math.sqrt(d * acceleration))        # triangle when d < v^2/a (derived)
    ta = v / acceleration
    tc = d / v - ta
    segs = [(ta, acceleration, 0.0), (max(tc, 0.0), 0.0, 0.0), (ta, -acceleration, 0.0)]
    return _finish(segs, distance, v, acceleration)


def jerk_limited_profile(distance: float, speed: float, acceleration: float, jerk: float,
                         field: str = "profile") -> MoveProfile:
    """Seven-segment jerk-limited (S-curve) profile, rest to rest.

    The peak velocity is lowered when the distance is short, and the peak
    acceleration when the speed is reached before the acceleration can be
    (``v < a^2/j``), both solved in closed form (derived).
    """
    _check(distance, speed, acceleration, jerk, field)
    d = abs(distance)

    def accel_phase(vp: float) -> tuple[float, float]:
        """(peak acceleration, duration of the acceleration phase) to reach vp from rest."""
        if vp * jerk >= acceleration ** 2:
            return acceleration, vp / acceleration + acceleration / jerk
        ap = math.sqrt(vp * jerk)
        return ap, 2.0 * ap / jerk

    vp = speed
    ap, ta = accel_phase(vp)
    if vp * ta > d:                                    # speed not reached: distance = vp * Ta(vp)
        vp = (d * math.sqrt(jerk) / 2.0) ** (2.0 / 3.0)
        if vp * jerk >= acceleration ** 2:
            q = acceleration / jerk
            vp = acceleration / 2.0 * (-q + math.sqrt(q * q + 4.0 * d / acceleration))
        ap, ta = accel_phase(vp)
    tj = ap / jerk
    tconst = max(ta - 2.0 * tj, 0.0)
    tcruise = max(d / vp - ta, 0.0)
    segs = [(tj, 0.0, jerk), (tconst, ap, 0.0), (tj, ap, -jerk), (tcruise, 0.0, 0.0),
            (tj, 0.0, -jerk), (tconst, -ap, 0.0), (tj, -ap, jerk)]
    return _finish(segs, distance, vp, ap)


def _finish(segs, distance, vp, ap) -> MoveProfile:
    sign = 1.0 if distance >= 0 else -1.0
    starts, ps, vs, accs, js, total, end = _build(segs, sign)
    # Round-off in the segment sums leaves |end - d| ~ 1e-16 d; the evaluator returns
    # exactly `distance` after the end, so the tiny step there is harmless.
    return MoveProfile(starts, ps, vs, accs, js, float(total), float(distance), float(vp), float(ap))


def _check(distance, speed, acceleration, jerk, field):
    if not (math.isfinite(distance) and distance != 0.0):
        raise InputError(f"{field}.distance", distance, "a non-zero finite distance")
    for name, value in (("speed", speed), ("acceleration", acceleration), ("jerk", jerk)):
        if not value > 0.0 or math.isnan(value):
            raise InputError(f"{field}.{name}", value, "a positive value")
