"""The motor: brushed DC, or a PMSM seen on its q axis, in one model.

Model (SI, per modelled current)::

    L di/dt + R i = v - Ke * w        (armature, or q axis with d-axis current held at zero)
    T = Kt * i

For a brushed DC motor ``i`` is the armature current and ``Kt == Ke`` in SI.
For a PMSM the model is the amplitude-invariant dq frame: ``i`` is the q-axis
current (the phase-current amplitude, A peak), ``v`` the q-axis voltage (phase
amplitude, V peak), R and L per phase, ``Ke = p * psi`` (V peak per mechanical
rad/s) and ``Kt = 1.5 * p * psi`` (N*m per A peak). Power is then
``1.5 * v * i``: :attr:`Motor.power_factor` carries that 1.5 (1 for DC).

Datasheets give these constants in other conventions (Ke in V/krpm line-to-line
rms, Kt per A rms, line-to-line R and L); :func:`motor_from_datasheet` converts
them explicitly and reports whether Kt and Ke agree.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from core.errors import InputError, require_nonnegative, require_positive, require_positive_or_inf

MotorKind = Literal["dc", "pmsm"]
EmfConvention = Literal["line_rms", "line_peak", "phase_rms", "phase_peak"]
CurrentConvention = Literal["rms", "peak"]
WindingConvention = Literal["phase", "line"]

KT_KE_TOLERANCE = 0.10
"""Relative Kt/Ke disagreement above which the datasheet is flagged (issue spec: 10 %)."""


@dataclass(frozen=True)
class Motor:
    """Motor parameters in the model's own convention (see module docstring).

    Attributes
    ----------
    kind : {"dc", "pmsm"}
    resistance_ohm : float
        Armature (DC) or per-phase (PMSM) resistance, ohm.
    inductance_h : float
        Armature or per-phase q-axis inductance, H.
    torque_constant_nm_per_a : float
        Kt per modelled ampere (DC: armature A; PMSM: A peak of phase current), N*m/A.
    back_emf_v_s_per_rad : float
        Ke, modelled volts per mechanical rad/s (PMSM: phase V peak), V*s/rad.
    inertia_kgm2 : float
        Rotor inertia, kg*m^2.
    viscous_friction_nm_s_per_rad : float
        Viscous friction at the motor shaft, N*m*s/rad.
    coulomb_friction_nm : float
        Coulomb (dry) friction torque at the motor shaft, N*m.
    pole_pairs : int
        Pole pairs (1 for a brushed DC motor).
    continuous_current_a, peak_current_a : float
        Current ratings per modelled ampere, A.
    max_speed_rad_s : float
        Rated maximum mechanical speed, rad/s.
    """

    kind: MotorKind
    resistance_ohm: float
    inductance_h: float
    torque_constant_nm_per_a: float
    back_emf_v_s_per_rad: float
    inertia_kgm2: float
    viscous_friction_nm_s_per_rad: float = 0.0
    coulomb_friction_nm: float = 0.0
    pole_pairs: int = 1
    continuous_current_a: float = math.inf
    peak_current_a: float = math.inf
    max_speed_rad_s: float = math.inf

    def __post_init__(self):
        if self.kind not in ("dc", "pmsm"):
            raise InputError("motor.kind", self.kind, '"dc" or "pmsm"')
        require_positive("motor.resistance", self.resistance_ohm, "ohm")
        require_positive("motor.inductance", self.inductance_h, "H")
        require_positive("motor.kt", self.torque_constant_nm_per_a, "N*m/A")
        require_positive("motor.ke", self.back_emf_v_s_per_rad, "V*s/rad")
        require_positive("motor.inertia", self.inertia_kgm2, "kg*m^2")
        require_nonnegative("motor.viscous_friction", self.viscous_friction_nm_s_per_rad, "N*m*s/rad")
        require_nonnegative("motor.coulomb_friction", self.coulomb_friction_nm, "N*m")
        if not isinstance(self.pole_pairs, int) or isinstance(self.pole_pairs, bool) or not 1 <= self.pole_pairs <= 200:
            raise InputError("motor.pole_pairs", self.pole_pairs, "a whole number from 1 to 200")
        require_positive_or_inf("motor.continuous_current", self.continuous_current_a, "A")
        require_positive_or_inf("motor.peak_current", self.peak_current_a, "A")
        require_positive_or_inf("motor.max_speed", self.max_speed_rad_s, "rad/s")
        if self.peak_current_a < self.continuous_current_a:
            raise InputError("motor.peak_current", self.peak_current_a,
                             f"at least the continuous current ({self.continuous_current_a:g} A)")

    @property
    def power_factor(self) -> float:
        """Electrical power = power_factor * v * i: 1 for DC, 1.5 for amplitude-invariant dq."""
        return 1.0 if self.kind == "dc" else 1.5

    @property
    def electrical_time_constant_s(self) -> float:
        """tau_e = L / R, s."""
        return self.inductance_h / self.resistance_ohm


@dataclass(frozen=True)
class ConstantsCheck:
    """How well the datasheet's Kt and Ke agree once both are in the model convention.

    Attributes
    ----------
    kt_given_nm_per_a : float
        Kt from the datasheet, converted to the model convention, N*m/A (NaN if not given).
    kt_from_ke_nm_per_a : float
        Kt implied by Ke (DC: Kt = Ke; PMSM: Kt = 1.5 Ke in the amplitude-invariant frame).
    relative_difference : float
        (given - implied) / implied; NaN when only one constant was given.
    consistent : bool
        True when within :data:`KT_KE_TOLERANCE` or when only one constant was given.
    """

    kt_given_nm_per_a: float
    kt_from_ke_nm_per_a: float
    relative_difference: float
    consistent: bool


def ke_to_model(ke_v_s_per_rad: float, kind: MotorKind, convention: EmfConvention) -> float:
    """Convert a back-EMF constant to the model's Ke, V*s/rad.

    ``ke_v_s_per_rad`` is the datasheet figure already in V per mechanical rad/s
    (use :mod:`core.units` to turn "45 V/krpm" into that). For a PMSM the model Ke
    is the phase-voltage amplitude per rad/s: line values divide by sqrt(3), rms
    values multiply by sqrt(2) (sinusoidal EMF, star connection; common practice).
    A DC motor has no such convention; it is ignored.
    """
    if kind == "dc":
        return ke_v_s_per_rad
    factor = {"line_rms": math.sqrt(2.0) / math.sqrt(3.0), "line_peak": 1.0 / math.sqrt(3.0),
              "phase_rms": math.sqrt(2.0), "phase_peak": 1.0}
    if convention not in factor:
        raise InputError("motor.ke_convention", convention, ", ".join(factor))
    return ke_v_s_per_rad * factor[convention]


def current_to_model(current_a: float, kind: MotorKind, convention: CurrentConvention) -> float:
    """A datasheet current (A rms or A peak) to the model's ampere (DC: as is; PMSM: A peak)."""
    if kind == "dc":
        return current_a
    if convention not in ("rms", "peak"):
        raise InputError("motor.current_convention", convention, '"rms" or "peak"')
    return current_a * (math.sqrt(2.0) if convention == "rms" else 1.0)


def kt_to_model(kt_nm_per_a: float, kind: MotorKind, convention: CurrentConvention) -> float:
    """A datasheet Kt (per A rms or per A peak) to the model's N*m per modelled ampere."""
    if kind == "dc":
        return kt_nm_per_a
    if convention not in ("rms", "peak"):
        raise InputError("motor.kt_convention", convention, '"rms" or "peak"')
    return kt_nm_per_a / (math.sqrt(2.0) if convention == "rms" else 1.0)


def winding_to_phase(value: float, kind: MotorKind, convention: WindingConvention, field: str) -> float:
    """Line-to-line R or L of a star-connected PMSM to per phase (divide by 2)."""
    if kind == "dc":
        return value
    if convention not in ("phase", "line"):
        raise InputError(field, convention, '"phase" or "line"')
    return value / 2.0 if convention == "line" else value


def motor_from_datasheet(
    *,
    kind: MotorKind,
    resistance_ohm: float,
    inductance_h: float,
    inertia_kgm2: float,
    kt_nm_per_a: float | None = None,
    ke_v_s_per_rad: float | None = None,
    kt_convention: CurrentConvention = "rms",
    ke_convention: EmfConvention = "line_rms",
    winding_convention: WindingConvention = "line",
    current_convention: CurrentConvention = "rms",
    viscous_friction_nm_s_per_rad: float = 0.0,
    coulomb_friction_nm: float = 0.0,
    pole_pairs: int = 1,
    continuous_current_a: float = math.inf,
    peak_current_a: float = math.inf,
    max_speed_rad_s: float = math.inf,
) -> tuple[Motor, ConstantsCheck]:
    """Build a :class:`Motor` from datasheet values in their stated conventions.

    At least one of Kt and Ke must be given; a missing one is derived from the
    other (DC: Kt = Ke; PMSM amplitude-invariant dq: Kt = 1.5 Ke). When both
    are given the model uses each as given and the returned check reports their
    disagreement.

    Parameters are in SI (values parsed with :mod:`core.units`); conventions say
    whether currents and Kt are per A rms or A peak, whether Ke is line-to-line
    or phase, rms or peak, and whether R and L are per phase or line-to-line.

    Returns
    -------
    (Motor, ConstantsCheck)
    """
    if kt_nm_per_a is None and ke_v_s_per_rad is None:
        raise InputError("motor.kt", None, "Kt (N*m/A) or Ke (V/krpm), at least one of them")
    ratio = 1.0 if kind == "dc" else 1.5
    ke = None if ke_v_s_per_rad is None else ke_to_model(
        require_positive("motor.ke", ke_v_s_per_rad, "V*s/rad"), kind, ke_convention)
    kt = None if kt_nm_per_a is None else kt_to_model(
        require_positive("motor.kt", kt_nm_per_a, "N*m/A"), kind, kt_convention)
    if kt is not None and ke is not None:
        implied = ratio * ke
        rel = (kt - implied) / implied
        check = ConstantsCheck(kt, implied, rel, abs(rel) <= KT_KE_TOLERANCE)
    elif kt is None:
        kt = ratio * ke
        check = ConstantsCheck(math.nan, kt, math.nan, True)
    else:
        ke = kt / ratio
        check = ConstantsCheck(kt, math.nan, math.nan, True)
    pole_pairs = 1 if kind == "dc" else pole_pairs
    motor = Motor(
        kind=kind,
        resistance_ohm=winding_to_phase(resistance_ohm, kind, winding_convention, "motor.winding_convention"),
        inductance_h=winding_to_phase(inductance_h, kind, winding_convention, "motor.winding_convention"),
        torque_constant_nm_per_a=kt,
        back_emf_v_s_per_rad=ke,
        inertia_kgm2=inertia_kgm2,
        viscous_friction_nm_s_per_rad=viscous_friction_nm_s_per_rad,
        coulomb_friction_nm=coulomb_friction_nm,
        pole_pairs=pole_pairs,
        continuous_current_a=current_to_model(continuous_current_a, kind, current_convention),
        peak_current_a=current_to_model(peak_current_a, kind, current_convention),
        max_speed_rad_s=max_speed_rad_s,
    )
    return motor, check
