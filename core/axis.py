"""Motor + load + drive, and the quantities that follow from them.

All quantities are on the motor shaft unless a name says otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from core.drive import Drive
from core.load import Load
from core.motor import Motor


@dataclass(frozen=True)
class Axis:
    """One servo axis: what the loops act on.

    Attributes
    ----------
    name : str
        A label for reports.
    motor, load, drive : Motor, Load, Drive
    """

    motor: Motor
    load: Load
    drive: Drive
    name: str = "axis"

    # --- reflected load -------------------------------------------------------------
    @property
    def load_inertia_kgm2(self) -> float:
        """Load inertia reflected to the motor shaft, kg*m^2."""
        return self.load.inertia / self.load.ratio ** 2

    @property
    def load_viscous_nm_s_per_rad(self) -> float:
        """Load viscous friction reflected to the motor, N*m*s/rad."""
        return self.load.viscous_friction / self.load.ratio ** 2

    @property
    def load_coulomb_nm(self) -> float:
        """Load Coulomb friction reflected to the motor, N*m."""
        return self.load.coulomb_friction / self.load.ratio

    @property
    def stiffness_nm_per_rad(self) -> float:
        """Transmission stiffness reflected to the motor, N*m/rad (inf when rigid)."""
        return self.load.stiffness / self.load.ratio ** 2 if self.load.compliant else math.inf

    @property
    def damping_nm_s_per_rad(self) -> float:
        """Transmission damping reflected to the motor, N*m*s/rad."""
        return self.load.damping / self.load.ratio ** 2 if self.load.compliant else 0.0

    # --- totals ---------------------------------------------------------------------
    @property
    def total_inertia_kgm2(self) -> float:
        """Motor plus reflected load inertia, kg*m^2."""
        return self.motor.inertia_kgm2 + self.load_inertia_kgm2

    @property
    def total_viscous_nm_s_per_rad(self) -> float:
        """Motor plus reflected load viscous friction, N*m*s/rad."""
        return self.motor.viscous_friction_nm_s_per_rad + self.load_viscous_nm_s_per_rad

    @property
    def inertia_ratio(self) -> float:
        """Reflected load inertia over rotor inertia (dimensionless)."""
        return self.load_inertia_kgm2 / self.motor.inertia_kgm2

    @property
    def current_limit_a(self) -> float:
        """The lower of the drive and motor peak currents, A (model convention)."""
        return min(self.drive.current_limit_a, self.motor.peak_current_a)

    # --- time constants and gains (derived from the armature and mechanical equations) -
    @property
    def electrical_time_constant_s(self) -> float:
        """tau_e = L / R, s."""
        return self.motor.electrical_time_constant_s

    @property
    def mechanical_time_constant_s(self) -> float:
        """tau_m = R * J / (Kt * Ke), s, with the total reflected inertia."""
        m = self.motor
        return m.resistance_ohm * self.total_inertia_kgm2 / (m.torque_constant_nm_per_a * m.back_emf_v_s_per_rad)

    @property
    def dc_speed_gain_rad_s_per_v(self) -> float:
        """Steady speed per volt, w/V = Kt / (R*B + Kt*Ke), rad/(V*s)."""
        m = self.motor
        kt, ke = m.torque_constant_nm_per_a, m.back_emf_v_s_per_rad
        return kt / (m.resistance_ohm * self.total_viscous_nm_s_per_rad + kt * ke)

    @property
    def no_load_speed_rad_s(self) -> float:
        """Speed reached at the full available voltage with no load torque, rad/s."""
        return self.drive.voltage_limit_v * self.dc_speed_gain_rad_s_per_v

    # --- compliance -----------------------------------------------------------------
    @property
    def resonance_hz(self) -> float:
        """Two-mass resonance f_r = sqrt(k (JM+JL)/(JM JL)) / 2 pi, Hz (NaN when rigid).

        Formula: Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015.
        """
        if not self.load.compliant:
            return math.nan
        jm, jl, k = self.motor.inertia_kgm2, self.load_inertia_kgm2, self.stiffness_nm_per_rad
        return math.sqrt(k * (jm + jl) / (jm * jl)) / (2.0 * math.pi)

    @property
    def antiresonance_hz(self) -> float:
        """Two-mass anti-resonance f_a = sqrt(k/JL) / 2 pi, Hz (NaN when rigid)."""
        if not self.load.compliant:
            return math.nan
        return math.sqrt(self.stiffness_nm_per_rad / self.load_inertia_kgm2) / (2.0 * math.pi)
