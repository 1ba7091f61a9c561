"""Per-parameter tolerances: how far each datasheet value may sit from nominal.

A tolerance is stored as a range of *factors* on the nominal value (``0.9 .. 1.4``
means "10 % low to 40 % high"). The preset's ``[tolerances]`` table writes them as

* a symmetric percentage: ``load_inertia = "±30 %"`` (also ``"+-30 %"`` or ``"30 %"``);
* a two-element range of deviations: ``resistance = ["-10 %", "+40 %"]``;
* a two-element range of factors: ``stiffness = ["0.5", "1.5"]`` or ``[0.5, 1.5]``;
* for ``load_inertia`` and ``stiffness`` only, a two-element range of absolute
  values with units in the load's own units: ``load_inertia = ["6 kg", "14 kg"]``.

Absolute values are refused for the motor constants and delays: their datasheet
conventions (line or phase, rms or peak) and the three loop delays make a bare
number ambiguous, while a factor is not. Units and percentages are parsed by
:mod:`core.units` (pint).

What each tolerance scales (why: the physics each one stands for):

================  ==========================================================================
``load_inertia``  load inertia or moving mass (what the machine carries)
``resistance``    winding resistance (copper is about 40 % more resistive hot than cold)
``inductance``    q-axis inductance (falls at peak current as the iron saturates)
``kt``            Kt and Ke together: both are the magnet flux, which falls with temperature
``friction``      viscous and Coulomb friction of motor and load together
``stiffness``     transmission stiffness (compliant loads only; a coupling's is a guess)
``delays``        all three loop delays together (computation, PWM, speed estimate)
================  ==========================================================================
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace

from core.axis import Axis
from core.errors import InputError
from core.units import parse_quantity

PARAMETERS = ("load_inertia", "resistance", "inductance", "kt", "friction", "stiffness", "delays")
"""Every parameter a tolerance can be given for, in the column order of factor arrays."""

DESCRIPTIONS = {
    "load_inertia": "load inertia",
    "resistance": "winding resistance",
    "inductance": "inductance",
    "kt": "torque constant (Kt and Ke)",
    "friction": "friction",
    "stiffness": "transmission stiffness",
    "delays": "loop delays",
}
"""Words for each parameter, for reports."""

_ABSOLUTE = ("load_inertia", "stiffness")
_SYMMETRIC = re.compile(r"^\s*(±|\+-|\+/-)?\s*(?P<rest>.+%|.+percent)\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class ParameterTolerance:
    """One parameter's range as factors on its nominal value.

    Attributes
    ----------
    name : str
        One of :data:`PARAMETERS`.
    low_factor, high_factor : float
        Smallest and largest multiple of nominal (dimensionless, > 0, low <= high).
    text : str
        The tolerance as written, for reports.
    """

    name: str
    low_factor: float
    high_factor: float
    text: str = ""

    @property
    def varied(self) -> bool:
        """True when the range is not a single value."""
        return self.high_factor > self.low_factor


@dataclass(frozen=True)
class Tolerances:
    """The tolerances of one axis (parameters without one are held at nominal).

    Attributes
    ----------
    items : tuple of ParameterTolerance
        In :data:`PARAMETERS` order.
    """

    items: tuple[ParameterTolerance, ...] = ()

    @property
    def varied(self) -> tuple[ParameterTolerance, ...]:
        """The tolerances whose range is not a single value."""
        return tuple(t for t in self.items if t.varied)

    def get(self, name: str) -> ParameterTolerance:
        """The tolerance of ``name`` (factor range 1..1 when none was given)."""
        for t in self.items:
            if t.name == name:
                return t
        return ParameterTolerance(name, 1.0, 1.0, "nominal")


def _element_factor(field: str, value: object, name: str, nominal: float, unit: str) -> float:
    """One end of a range: a deviation ("-10 %"), a factor (0.5, "0.5") or, where allowed, a quantity."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(field, value, 'a percentage ("-10 %"), a factor (0.9) or a quantity with its unit')
    if isinstance(value, str) and ("%" in value or "percent" in value.lower()):
        return 1.0 + parse_quantity(value, "dimensionless", field)
    if isinstance(value, (int, float)):
        return float(value)
    try:
        return parse_quantity(value, "dimensionless", field)
    except InputError:
        pass
    if name not in _ABSOLUTE:
        raise InputError(field, value, "a percentage or a factor on nominal (absolute values are ambiguous "
                                       "for the motor constants and delays)")
    if not nominal > 0:
        raise InputError(field, value, "a percentage or a factor (the nominal value is zero)")
    return parse_quantity(value, unit, field) / nominal


def parse_tolerance(name: str, value: object, axis: Axis, where: str = "tolerances") -> ParameterTolerance:
    """One ``[tolerances]`` entry as a :class:`ParameterTolerance`.

    Parameters
    ----------
    name : str
        One of :data:`PARAMETERS`.
    value : str or list
        As written in the preset (see the module docstring).
    axis : Axis
        The nominal axis (absolute ranges are divided by its value; stiffness needs a compliant load).
    where : str
        Table name for error messages.

    Raises
    ------
    InputError
        Unknown parameter, unreadable value, a range that makes the parameter zero or
        negative, an inverted range, or a stiffness tolerance on a rigid load.
    """
    field = f"{where}.{name}"
    if name not in PARAMETERS:
        raise InputError(field, value, "one of " + ", ".join(PARAMETERS))
    if name == "stiffness" and not axis.load.compliant:
        raise InputError(field, value, "no stiffness tolerance on a rigid load (set load.compliant = true)")
    unit_j, _, _, unit_k, _ = axis.load.units()
    nominal, unit = {"load_inertia": (axis.load.inertia, unit_j),
                     "stiffness": (axis.load.stiffness, unit_k)}.get(name, (1.0, ""))
    if isinstance(value, str):
        match = _SYMMETRIC.match(value)
        if not match:
            raise InputError(field, value, 'a symmetric percentage ("±30 %") or a [low, high] range')
        half = parse_quantity(match["rest"].strip(), "dimensionless", field)
        if half < 0:
            raise InputError(field, value, 'a positive half-width ("±30 %")')
        low, high = 1.0 - half, 1.0 + half
        text = value
    elif isinstance(value, (list, tuple)) and len(value) == 2:
        low = _element_factor(f"{field}[0]", value[0], name, nominal, unit)
        high = _element_factor(f"{field}[1]", value[1], name, nominal, unit)
        text = f"[{value[0]}, {value[1]}]"
    else:
        raise InputError(field, value, 'a symmetric percentage ("±30 %") or a [low, high] range of two values')
    if not (math.isfinite(low) and math.isfinite(high)):
        raise InputError(field, value, "finite values")
    if not low > 0:
        raise InputError(field, value, f"a range that keeps the {DESCRIPTIONS[name]} positive "
                                       f"(the low end is {low:g} x nominal)")
    if high < low:
        raise InputError(field, value, f"a range written low then high (got {low:g} .. {high:g} x nominal)")
    return ParameterTolerance(name, float(low), float(high), text)


def tolerances_from_dict(values: dict, axis: Axis) -> Tolerances:
    """A preset's ``[tolerances]`` table (raw, as read from TOML) as :class:`Tolerances`."""
    if not isinstance(values, dict):
        raise InputError("tolerances", values, "a table of parameter = tolerance")
    for key in values:
        if key not in PARAMETERS:
            raise InputError(f"tolerances.{key}", values[key], "a known key here (" + ", ".join(PARAMETERS) + ")")
    return Tolerances(tuple(parse_tolerance(name, values[name], axis) for name in PARAMETERS if name in values))


def factor_dict(row) -> dict[str, float]:
    """A row of factors (in :data:`PARAMETERS` order) as ``{name: factor}``."""
    return {name: float(f) for name, f in zip(PARAMETERS, row)}


def varied_axis(axis: Axis, factors: dict[str, float]) -> Axis:
    """A real :class:`Axis` with each parameter multiplied by its factor (missing = 1).

    The scalar counterpart of the sweep's variant arrays: the tests and the
    auto-tuner's independent re-check analyse these with the ordinary functions.
    """
    f = {name: float(factors.get(name, 1.0)) for name in PARAMETERS}
    m, ld, d = axis.motor, axis.load, axis.drive
    motor = replace(m, resistance_ohm=m.resistance_ohm * f["resistance"],
                    inductance_h=m.inductance_h * f["inductance"],
                    torque_constant_nm_per_a=m.torque_constant_nm_per_a * f["kt"],
                    back_emf_v_s_per_rad=m.back_emf_v_s_per_rad * f["kt"],
                    viscous_friction_nm_s_per_rad=m.viscous_friction_nm_s_per_rad * f["friction"],
                    coulomb_friction_nm=m.coulomb_friction_nm * f["friction"])
    load = replace(ld, inertia=ld.inertia * f["load_inertia"],
                   viscous_friction=ld.viscous_friction * f["friction"],
                   coulomb_friction=ld.coulomb_friction * f["friction"],
                   stiffness=ld.stiffness * f["stiffness"] if ld.compliant else ld.stiffness)
    drive = d
    if f["delays"] != 1.0:
        tc, tw, tp = d.loop_delays_s()
        drive = replace(d, current_delay_s=tc * f["delays"], speed_delay_s=tw * f["delays"],
                        position_delay_s=tp * f["delays"])
    return replace(axis, motor=motor, load=load, drive=drive)
