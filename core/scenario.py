"""Simulation scenarios: what to do to the axis, parsed from the strings presets store.

A preset keeps a scenario as a dict of strings with units, e.g.::

    {"name": "gentle move", "kind": "move", "profile": "trapezoid",
     "distance": "50 mm", "speed": "0.5 m/s", "acceleration": "5 m/s^2",
     "load_step": "5 N", "load_step_time": "0.12 s", "duration": "0.2 s",
     "limits": "true", "anti_windup": "clamp"}

:func:`scenario_from_dict` turns it into a frozen :class:`Scenario` in SI. Move
quantities (distance, speed, acceleration, jerk) and the load step are on the
LOAD side, in the load's own units (m and N for a linear axis, rad and N*m for a
rotary one); a speed step is on the MOTOR side (the speed loop's own variable);
a current step is in the motor model's ampere (PMSM: A peak). Several effects
combine in one run: a move (or a step) plus a load-torque step or pulse.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from core.axis import Axis
from core.errors import InputError
from core.units import parse_quantity

KINDS = ("move", "current_step", "speed_step", "load_step", "voltage_step")
PROFILES = ("trapezoid", "jerk_limited", "s_curve")
"""Move profiles; "s_curve" is another name for "jerk_limited"."""
ANTI_WINDUP = ("clamp", "back_calculation", "off")
MAX_SAMPLES = 10_000_000
"""Largest horizon in current-loop samples; longer runs are refused before allocating."""

_KEYS = {"name", "kind", "profile", "distance", "speed", "acceleration", "jerk", "start_time",
         "step", "step_time", "load_step", "load_step_time", "load_pulse_width", "duration",
         "limits", "anti_windup", "gain_set"}
"""``gain_set`` names the preset's gain set the scenario is meant for (read by
:func:`core.simulate.simulate_preset_scenario`, not by the scenario itself)."""


@dataclass(frozen=True)
class Scenario:
    """One simulation run, SI (side stated in each name).

    Attributes
    ----------
    name : str
    kind : {"move", "current_step", "speed_step", "load_step", "voltage_step"}
        Which loops are closed: a current step runs the current loop alone, a speed
        step (and a voltage step, open loop) leave the position loop open, a move and
        a load step close all three.
    profile : {"trapezoid", "jerk_limited"}
    distance_load, speed_load, acceleration_load, jerk_load : float
        Move limits on the load side: m or rad, per s, per s^2, per s^3 (jerk inf for
        a trapezoid). Zero when there is no move.
    start_time_s : float
        Move start, s.
    step : float
        Size of a current step (A), a speed step (motor rad/s) or a voltage step (V).
    step_time_s : float
        When the step is applied, s.
    load_step_load : float
        Load force or torque on the load side, N or N*m (0 = none); positive opposes
        positive motion.
    load_step_time_s : float
        When it is applied, s.
    load_pulse_width_s : float
        How long it lasts, s (inf = a step that stays).
    duration_s : float
        Simulated horizon, s.
    limits : bool
        Apply the voltage, current and speed limits.
    anti_windup : {"clamp", "back_calculation", "off"}
    """

    name: str
    kind: str
    duration_s: float
    profile: str = "trapezoid"
    distance_load: float = 0.0
    speed_load: float = 0.0
    acceleration_load: float = 0.0
    jerk_load: float = math.inf
    start_time_s: float = 0.0
    step: float = 0.0
    step_time_s: float = 0.0
    load_step_load: float = 0.0
    load_step_time_s: float = 0.0
    load_pulse_width_s: float = math.inf
    limits: bool = True
    anti_windup: str = "clamp"

    @property
    def has_move(self) -> bool:
        """True when the run contains a position move."""
        return self.kind == "move"

    @property
    def has_load_step(self) -> bool:
        """True when a load force or torque is applied."""
        return self.load_step_load != 0.0


def _rev_words(text: object) -> object:
    # The unit registry spells it "revolution"; "rev" and "revs" are what people type.
    if isinstance(text, str):
        return re.sub(r"\brevs?\b", "revolution", text)
    return text


def _q(d: dict, key: str, unit: str, prefix: str) -> float:
    return parse_quantity(_rev_words(d[key]), unit, f"{prefix}.{key}")


def _bool(value: object, field: str) -> bool:
    if isinstance(value, bool):
        return value
    if isinstance(value, str) and value.strip().lower() in ("true", "on", "yes", "1"):
        return True
    if isinstance(value, str) and value.strip().lower() in ("false", "off", "no", "0"):
        return False
    raise InputError(field, value, "true or false")


def _positive(value: float, field: str, raw: object, unit: str) -> float:
    if not value > 0.0:
        raise InputError(field, raw, f"a positive value in {unit}")
    return value


def _nonnegative(value: float, field: str, raw: object, unit: str) -> float:
    if value < 0.0:
        raise InputError(field, raw, f"zero or a positive value in {unit}")
    return value


def scenario_from_dict(d: dict, axis: Axis, field_prefix: str = "scenario") -> Scenario:
    """Parse a preset's scenario dict into a :class:`Scenario`.

    Parameters
    ----------
    d : dict
        Strings with units (or bare SI numbers); keys as in the module docstring.
    axis : Axis
        Gives the load's units (linear: m, N; rotary: rad, N*m) and the loop rates
        used to check the horizon.
    field_prefix : str
        Names fields in errors, e.g. ``"scenarios[1]"`` gives ``"scenarios[1].distance"``.

    Returns
    -------
    Scenario

    Raises
    ------
    InputError
        Unknown keys, bad units or values, a move that does not fit in the horizon,
        or a horizon of more than :data:`MAX_SAMPLES` current-loop samples.
    """
    if not isinstance(d, dict):
        raise InputError(field_prefix, d, "a table of scenario fields")
    for key in d:
        if key not in _KEYS:
            raise InputError(f"{field_prefix}.{key}", d[key], "one of " + ", ".join(sorted(_KEYS)))
    p = field_prefix
    name = str(d.get("name", "scenario"))
    kind = d.get("kind", "move")
    if kind not in KINDS:
        raise InputError(f"{p}.kind", kind, " | ".join(KINDS))
    unit = axis.load.position_unit
    force = "N" if axis.load.motion == "linear" else "N*m"
    kw: dict = {}

    kw["limits"] = _bool(d.get("limits", True), f"{p}.limits")
    aw = d.get("anti_windup", "clamp")
    if aw not in ANTI_WINDUP:
        raise InputError(f"{p}.anti_windup", aw, " | ".join(ANTI_WINDUP))
    kw["anti_windup"] = aw

    move_time = 0.0
    if kind == "move":
        prof = d.get("profile", "trapezoid")
        if prof not in PROFILES:
            raise InputError(f"{p}.profile", prof, " | ".join(PROFILES))
        prof = "jerk_limited" if prof == "s_curve" else prof
        kw["profile"] = prof
        for key in ("distance", "speed", "acceleration") + (("jerk",) if prof == "jerk_limited" else ()):
            if key not in d:
                raise InputError(f"{p}.{key}", None, f"a value (a {prof} move needs distance, speed, "
                                 "acceleration" + (", jerk)" if prof == "jerk_limited" else ")"))
        dist = _q(d, "distance", unit, p)
        if dist == 0.0:
            raise InputError(f"{p}.distance", d["distance"], f"a non-zero distance in {unit}")
        kw["distance_load"] = dist
        kw["speed_load"] = _positive(_q(d, "speed", f"{unit}/s", p), f"{p}.speed", d["speed"], f"{unit}/s")
        kw["acceleration_load"] = _positive(_q(d, "acceleration", f"{unit}/s^2", p), f"{p}.acceleration",
                                            d["acceleration"], f"{unit}/s^2")
        if prof == "jerk_limited":
            kw["jerk_load"] = _positive(_q(d, "jerk", f"{unit}/s^3", p), f"{p}.jerk", d["jerk"], f"{unit}/s^3")
        if "start_time" in d:
            kw["start_time_s"] = _nonnegative(_q(d, "start_time", "s", p), f"{p}.start_time", d["start_time"], "s")
        from core.profiles import jerk_limited_profile, trapezoid_profile
        if prof == "trapezoid":
            mp = trapezoid_profile(dist, kw["speed_load"], kw["acceleration_load"], p)
        else:
            mp = jerk_limited_profile(dist, kw["speed_load"], kw["acceleration_load"], kw["jerk_load"], p)
        move_time = kw.get("start_time_s", 0.0) + mp.duration_s
    elif kind in ("current_step", "speed_step", "voltage_step"):
        if "step" not in d:
            raise InputError(f"{p}.step", None, "a step size (A, rpm or V)")
        step_unit = {"current_step": "A", "speed_step": "rad/s", "voltage_step": "V"}[kind]
        kw["step"] = _q(d, "step", step_unit, p)
        if "step_time" in d:
            kw["step_time_s"] = _nonnegative(_q(d, "step_time", "s", p), f"{p}.step_time", d["step_time"], "s")
    if kind == "load_step" and "load_step" not in d:
        raise InputError(f"{p}.load_step", None, f"a load force or torque in {force}")
    if "load_step" in d:
        kw["load_step_load"] = _q(d, "load_step", force, p)
        if "load_step_time" in d:
            kw["load_step_time_s"] = _nonnegative(_q(d, "load_step_time", "s", p), f"{p}.load_step_time",
                                                  d["load_step_time"], "s")
        if "load_pulse_width" in d:
            kw["load_pulse_width_s"] = _positive(_q(d, "load_pulse_width", "s", p), f"{p}.load_pulse_width",
                                                 d["load_pulse_width"], "s")

    if "duration" in d:
        duration = _positive(_q(d, "duration", "s", p), f"{p}.duration", d["duration"], "s")
    else:
        # Default horizon: the move (or step, or load step) plus 50 % and at least 50 ms to settle.
        last = max(move_time, kw.get("step_time_s", 0.0), kw.get("load_step_time_s", 0.0))
        duration = last + max(0.05, 0.5 * last)
    n = duration * axis.drive.current_rate_hz
    if n > MAX_SAMPLES:
        raise InputError(f"{p}.duration", d.get("duration", duration),
                         f"at most {MAX_SAMPLES / axis.drive.current_rate_hz:g} s: that is already "
                         f"{MAX_SAMPLES:.0e} samples at the {axis.drive.current_rate_hz:g} Hz current-loop rate")
    if n < 4:
        raise InputError(f"{p}.duration", d.get("duration", duration),
                         f"at least 4 current-loop samples ({4 / axis.drive.current_rate_hz:g} s)")
    if move_time > duration:
        raise InputError(f"{p}.duration", d.get("duration", duration),
                         f"at least the move time, {move_time:.6g} s (the move would not finish)")
    for key in ("step_time_s", "load_step_time_s"):
        if kw.get(key, 0.0) >= duration:
            src = key[:-2]
            raise InputError(f"{p}.{src}", d.get(src), f"a time before the end of the run ({duration:g} s)")
    return Scenario(name=name, kind=kind, duration_s=duration, **kw)
