"""Controller gains and filters as plain data (SI, parallel PI form inside).

Units
-----
current PI : Kp in V/A, Ki in V/(A*s)
speed PI   : Kp in A/(rad/s), Ki in A/rad
position   : Kp in (rad/s)/rad = 1/s, Ki in 1/s^2
feedforward: dimensionless fractions (1 = full velocity / inertia feedforward)

A PI in series (ideal) form ``Kp (1 + 1/(Ti s))`` is the same controller as the
parallel ``Kp + Ki/s`` with ``Ki = Kp/Ti``; :func:`pi_from_series` and
:meth:`PI.integral_time_s` convert.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Literal

from core.errors import InputError, require_nonnegative, require_positive, require_range

NotchPlace = Literal["command", "feedback"]


@dataclass(frozen=True)
class PI:
    """A PI controller ``kp + ki/s`` in the loop's own SI units."""

    kp: float
    ki: float = 0.0

    def checked(self, loop: str) -> "PI":
        """Return self after checking kp > 0 and ki >= 0 (errors name ``loop``)."""
        require_positive(f"{loop}.kp", self.kp, "(SI gain units)")
        require_nonnegative(f"{loop}.ki", self.ki, "(SI gain units)")
        return self

    @property
    def integral_time_s(self) -> float:
        """Ti = Kp / Ki, s (inf when there is no integral action)."""
        return math.inf if self.ki == 0.0 else self.kp / self.ki


def pi_from_series(kp: float, integral_time_s: float) -> PI:
    """A series-form PI ``Kp (1 + 1/(Ti s))`` as parallel gains (``Ti = inf`` gives P only)."""
    return PI(kp, 0.0 if math.isinf(integral_time_s) else kp / integral_time_s)


@dataclass(frozen=True)
class Notch:
    """A notch ``(s^2 + 2 zz wn s + wn^2) / (s^2 + 2 zp wn s + wn^2)``.

    Attributes
    ----------
    centre_hz : float
        Notch frequency fn = wn / 2 pi, Hz.
    zeta_zero : float
        Damping of the zeros; depth at fn is zeta_zero / zeta_pole.
    zeta_pole : float
        Damping of the poles; sets the width.
    place : {"command", "feedback"}
        Filters the speed command (outside the loop) or the speed feedback (inside).
    """

    centre_hz: float
    zeta_zero: float = 0.05
    zeta_pole: float = 0.5
    place: NotchPlace = "feedback"

    def __post_init__(self):
        require_positive("notch.centre", self.centre_hz, "Hz")
        require_range("notch.zeta_zero", self.zeta_zero, 0.0, 10.0, "")
        require_range("notch.zeta_pole", self.zeta_pole, 1e-3, 10.0, "")
        if self.place not in ("command", "feedback"):
            raise InputError("notch.place", self.place, '"command" or "feedback"')

    @property
    def depth_db(self) -> float:
        """Attenuation at the centre, dB (derived: |N(j wn)| = zeta_zero / zeta_pole)."""
        return -math.inf if self.zeta_zero == 0 else 20.0 * math.log10(self.zeta_zero / self.zeta_pole)


@dataclass(frozen=True)
class CurrentGains:
    """Current (q-axis) PI, with optional back-EMF decoupling feedforward."""

    pi: PI
    decouple_back_emf: bool = True


@dataclass(frozen=True)
class SpeedGains:
    """Speed PI with its feedback low-pass (0 = off, Hz) and notch filters."""

    pi: PI
    feedback_lowpass_hz: float = 0.0
    notches: tuple[Notch, ...] = ()

    def __post_init__(self):
        require_nonnegative("speed.feedback_lowpass", self.feedback_lowpass_hz, "Hz")


@dataclass(frozen=True)
class PositionGains:
    """Position P (optionally PI) with velocity and acceleration feedforward fractions."""

    kp_per_s: float
    ki_per_s2: float = 0.0
    velocity_ff: float = 1.0
    acceleration_ff: float = 0.0

    def __post_init__(self):
        require_positive("position.kp", self.kp_per_s, "1/s")
        require_nonnegative("position.ki", self.ki_per_s2, "1/s^2")
        require_range("position.velocity_ff", self.velocity_ff, 0.0, 1.5, "(fraction)")
        require_range("position.acceleration_ff", self.acceleration_ff, 0.0, 1.5, "(fraction)")

    @property
    def pi(self) -> PI:
        """The position controller as a PI in (rad/s)/rad."""
        return PI(self.kp_per_s, self.ki_per_s2)


@dataclass(frozen=True)
class GainSet:
    """The three loops' gains, with a name and a free-text note."""

    current: CurrentGains
    speed: SpeedGains
    position: PositionGains
    name: str = "nominal"
    note: str = ""

    def __post_init__(self):
        self.current.pi.checked("current")
        self.speed.pi.checked("speed")

    def renamed(self, name: str, note: str | None = None) -> "GainSet":
        """A copy under another name (and note)."""
        return replace(self, name=name, note=self.note if note is None else note)
