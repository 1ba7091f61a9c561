"""The mechanical load behind the motor: transmission, inertia, friction, compliance.

Everything is given on the load side and reflected to the motor shaft through the
transmission ratio ``r`` = motor radians per load unit (rad for a rotary load, m
for a linear one): ``r = n`` for a gearbox of ratio n, ``r = 2*pi*n/lead`` for a
lead screw or a belt pulley (lead = travel per load-side revolution). Inertia,
viscous friction and stiffness reflect with ``1/r**2``, torque with ``1/r``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from core.errors import InputError, require_nonnegative, require_positive

LoadMotion = Literal["rotary", "linear"]


@dataclass(frozen=True)
class Load:
    """Load-side parameters (SI, in the load's own units).

    Attributes
    ----------
    motion : {"rotary", "linear"}
    gear_ratio : float
        Motor revolutions per gearbox-output revolution (>= 1 for a reducer).
    lead_m : float
        Linear axes only: travel per gearbox-output revolution, m (screw lead, or
        2*pi*pulley radius for a belt). Ignored for rotary loads.
    inertia : float
        Load inertia, kg*m^2 (rotary) or moving mass, kg (linear).
    viscous_friction : float
        N*m*s/rad (rotary) or N*s/m (linear).
    coulomb_friction : float
        N*m (rotary) or N (linear).
    compliant : bool
        True for a two-mass model with the stiffness and damping below.
    stiffness : float
        Transmission stiffness between motor and load, N*m/rad at the gearbox
        output (rotary) or N/m along the axis (linear).
    damping : float
        Transmission damping, N*m*s/rad (rotary) or N*s/m (linear).
    """

    motion: LoadMotion = "rotary"
    gear_ratio: float = 1.0
    lead_m: float = 0.0
    inertia: float = 0.0
    viscous_friction: float = 0.0
    coulomb_friction: float = 0.0
    compliant: bool = False
    stiffness: float = 0.0
    damping: float = 0.0

    def __post_init__(self):
        if self.motion not in ("rotary", "linear"):
            raise InputError("load.motion", self.motion, '"rotary" or "linear"')
        require_positive("load.gear_ratio", self.gear_ratio, "(motor rev per output rev)")
        unit_j, unit_b, unit_f, unit_k, unit_c = self.units()
        if self.motion == "linear":
            require_positive("load.lead", self.lead_m, "m per revolution")
        require_nonnegative("load.inertia", self.inertia, unit_j)
        require_nonnegative("load.viscous_friction", self.viscous_friction, unit_b)
        require_nonnegative("load.coulomb_friction", self.coulomb_friction, unit_f)
        if self.compliant:
            require_positive("load.stiffness", self.stiffness, unit_k)
            require_nonnegative("load.damping", self.damping, unit_c)
            require_positive("load.inertia", self.inertia, unit_j + " (a compliant load needs a mass)")

    def units(self) -> tuple[str, str, str, str, str]:
        """SI units of (inertia, viscous friction, Coulomb friction, stiffness, damping)."""
        if self.motion == "linear":
            return "kg", "N*s/m", "N", "N/m", "N*s/m"
        return "kg*m^2", "N*m*s/rad", "N*m", "N*m/rad", "N*m*s/rad"

    @property
    def ratio(self) -> float:
        """Motor radians per load unit (rad or m)."""
        if self.motion == "linear":
            return 2.0 * math.pi * self.gear_ratio / self.lead_m
        return self.gear_ratio

    @property
    def position_unit(self) -> str:
        """SI unit of load position: "rad" or "m"."""
        return "m" if self.motion == "linear" else "rad"
