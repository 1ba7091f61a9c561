"""Presets: one servo axis with its gain sets, targets, tuning choices and test scenarios.

A preset is a TOML file people edit by hand. Every physical value is text with
its unit ("2.4 mH", "12 kg*cm^2", "45 V/krpm"), converted to SI by
:func:`core.units.parse_quantity` when the file is read; plain ratios are bare
numbers. Motor values are given as the datasheet states them, with the
datasheet's conventions named, and :func:`core.motor.motor_from_datasheet`
turns them into the model's convention. The keys are listed in
``presets/README.md`` and in the ``*_KEYS`` tuples below.

Anything wrong in a file -- broken TOML, a missing or unknown key, a wrong
unit, a value out of range -- raises :class:`core.errors.InputError` naming the
field, so a front end can show it beside the field.

Writing (:func:`dumps_preset`) uses SI units, model conventions and full float
precision, so that reading the text back rebuilds equal objects.
"""

from __future__ import annotations

import math
import os
import re
import tomllib
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path
from typing import Any

import tomli_w

from core.axis import Axis
from core.drive import Drive
from core.errors import InputError
from core.files import atomic_write, read_text
from core.gains import PI, CurrentGains, GainSet, Notch, PositionGains, SpeedGains
from core.load import Load
from core.motor import ConstantsCheck, current_to_model, motor_from_datasheet
from core.tolerances import tolerances_from_dict
from core.units import parse_quantity

FORMAT_VERSION = 1
"""The preset format this module reads and writes."""

TOP_KEYS = ("format_version", "active_gain_set", "axis", "motor", "load", "drive",
            "targets", "tuning", "tolerances", "gain_sets", "scenarios")
AXIS_KEYS = ("name", "description")
MOTOR_KEYS = ("kind", "pole_pairs", "resistance", "inductance", "winding_convention", "kt",
              "kt_convention", "ke", "ke_convention", "inertia", "viscous_friction",
              "coulomb_friction", "continuous_current", "peak_current", "current_convention",
              "max_speed")
LOAD_KEYS = ("motion", "gear_ratio", "lead", "inertia", "mass", "viscous_friction",
             "coulomb_friction", "compliant", "stiffness", "damping")
DRIVE_KEYS = ("bus_voltage", "modulation", "max_modulation", "current_limit", "current_convention",
              "pwm_frequency", "current_rate", "speed_rate", "position_rate",
              "computation_delay_samples", "pwm_delay_samples", "speed_estimate_delay_samples",
              "current_delay", "speed_delay", "position_delay", "current_filter",
              "encoder_counts_per_rev")
GAIN_SET_KEYS = ("name", "note", "current", "speed", "position")
CURRENT_KEYS = ("kp", "ki", "decouple_back_emf")
SPEED_KEYS = ("kp", "ki", "feedback_lowpass", "notches")
NOTCH_KEYS = ("centre", "zeta_zero", "zeta_pole", "place")
POSITION_KEYS = ("kp", "ki", "velocity_ff", "acceleration_ff")

TARGET_UNITS: dict[str, str] = {
    "current_phase_margin_min": "deg",
    "speed_phase_margin_min": "deg",
    "position_phase_margin_min": "deg",
    "current_gain_margin_min": "dB",
    "speed_gain_margin_min": "dB",
    "position_gain_margin_min": "dB",
    "ms_max": "",
    "separation_min": "",
    "delay_margin_min": "s",
    "step_overshoot_max": "",
    "current_bandwidth_min": "Hz",
    "speed_bandwidth_min": "Hz",
    "position_bandwidth_min": "Hz",
}
"""[targets] keys and the unit each value is stored in ("" = a plain ratio; "25 %" reads 0.25)."""

TUNING_UNITS: dict[str, str] = {
    "current_bandwidth": "Hz",
    "current_phase_margin": "deg",
    "speed_bandwidth": "Hz",
    "speed_phase_margin": "deg",
    "speed_separation": "",
    "symmetric_optimum_a": "",
    "position_bandwidth": "Hz",
    "position_separation": "",
}
"""[tuning] numeric keys and the unit each is stored in ("" = a plain ratio)."""

TUNING_CHOICES: dict[str, tuple[str, ...]] = {
    "current_rule": ("pole_zero", "phase_margin", "magnitude_optimum"),
    "speed_rule": ("separation", "symmetric_optimum"),
}
"""[tuning] keys that name a rule, with the accepted names."""

_MISSING = "(missing)"
_NO_DEFAULT = object()


@dataclass(frozen=True)
class Preset:
    """An axis with everything needed to tune, analyse and simulate it.

    Attributes
    ----------
    axis : Axis
        Motor, load and drive in SI and the model's conventions.
    constants_check : ConstantsCheck
        How well the datasheet's Kt and Ke agreed (kept from loading).
    gain_sets : tuple of GainSet
        Named gain sets, in file order.
    active : str
        Name of the gain set in use ("" when there are none).
    description : str
        Free text from ``[axis] description``.
    targets : dict of str to float
        Pass/fail limits, keys and units in :data:`TARGET_UNITS` (deg, dB, s, Hz, ratios).
    tuning : dict of str to float or str
        Rule choices and their parameters, keys in :data:`TUNING_UNITS` and :data:`TUNING_CHOICES`.
    scenarios : tuple of dict
        Time-simulation scenarios as written in the file (values are unit strings,
        parsed by the simulation).
    tolerances : dict
        ``[tolerances]`` as written (checked on reading; :func:`core.tolerances.tolerances_from_dict`
        turns it into factor ranges).
    source_path : Path or None
        Where the preset was read from.
    raw : dict
        The TOML document as read.
    """

    axis: Axis
    constants_check: ConstantsCheck
    gain_sets: tuple[GainSet, ...] = ()
    active: str = ""
    description: str = ""
    targets: dict[str, float] = field(default_factory=dict)
    tuning: dict[str, float | str] = field(default_factory=dict)
    scenarios: tuple[dict[str, Any], ...] = ()
    tolerances: dict[str, Any] = field(default_factory=dict)
    source_path: Path | None = field(default=None, compare=False)
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self):
        names = [g.name for g in self.gain_sets]
        if len(set(names)) != len(names):
            raise InputError("gain_sets", names, "gain sets with distinct names")
        if self.gain_sets and self.active not in names:
            raise InputError("active_gain_set", self.active, "the name of one of the gain sets: " + ", ".join(names))
        if not self.gain_sets and self.active:
            raise InputError("active_gain_set", self.active, "no active gain set when there are no gain sets")

    @property
    def active_gain_set(self) -> GainSet | None:
        """The gain set named by :attr:`active` (None when there are no gain sets)."""
        return self.gain_set(self.active) if self.gain_sets else None

    def gain_set(self, name: str) -> GainSet:
        """The gain set called ``name``; InputError if there is none."""
        for gains in self.gain_sets:
            if gains.name == name:
                return gains
        raise InputError("gain_set", name, "one of: " + ", ".join(g.name for g in self.gain_sets))


# --- reading -----------------------------------------------------------------------------

class _Table:
    """A TOML table being read: knows its dotted name and rejects unknown keys."""

    def __init__(self, data: object, where: str, allowed: tuple[str, ...]):
        if not isinstance(data, dict):
            raise InputError(where, data, "a table of keys")
        for key in data:
            if key not in allowed:
                raise InputError(f"{where}.{key}" if where else key, data[key],
                                 f"a known key here ({', '.join(allowed)})")
        self.data, self.where = data, where

    def name(self, key: str) -> str:
        return f"{self.where}.{key}" if self.where else key

    def has(self, key: str) -> bool:
        return key in self.data

    def _get(self, key: str, default: object, expected: str) -> object:
        if key in self.data:
            return self.data[key]
        if default is _NO_DEFAULT:
            raise InputError(self.name(key), _MISSING, f"{expected} (required)")
        return default

    def quantity(self, key: str, unit: str, sign: str = "positive", default: object = _NO_DEFAULT):
        """Key's value in ``unit``; ``sign`` is "positive", "nonnegative" or "any"."""
        shown = unit or "a plain number"
        value = self._get(key, default, f"a quantity in {shown}")
        if key not in self.data:
            return value
        number = parse_quantity(value, unit or "dimensionless", self.name(key))
        if (sign == "positive" and not number > 0) or (sign == "nonnegative" and number < 0):
            word = "positive" if sign == "positive" else "zero or positive"
            raise InputError(self.name(key), value, f"a {word} quantity in {shown}")
        return number

    def integer(self, key: str, low: int, high: int, default: object = _NO_DEFAULT):
        value = self._get(key, default, f"a whole number from {low} to {high}")
        if key in self.data and (isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high):
            raise InputError(self.name(key), value, f"a whole number from {low} to {high}")
        return value

    def text(self, key: str, default: object = _NO_DEFAULT):
        value = self._get(key, default, "text")
        if not isinstance(value, str):
            raise InputError(self.name(key), value, "text in quotes")
        return value

    def flag(self, key: str, default: object = _NO_DEFAULT):
        value = self._get(key, default, "true or false")
        if not isinstance(value, bool):
            raise InputError(self.name(key), value, "true or false")
        return value

    def choice(self, key: str, choices: tuple[str, ...], default: object = _NO_DEFAULT):
        listed = ", ".join(f'"{c}"' for c in choices)
        value = self._get(key, default, f"one of {listed}")
        if value not in choices:
            raise InputError(self.name(key), value, f"one of {listed}")
        return value

    def table(self, key: str, allowed: tuple[str, ...], required: bool = True) -> "_Table":
        if key not in self.data and not required:
            return _Table({}, self.name(key), allowed)
        return _Table(self._get(key, _NO_DEFAULT, "a table"), self.name(key), allowed)

    def tables(self, key: str, allowed: tuple[str, ...] | None) -> list:
        """An array of tables ([[key]]); ``allowed`` None keeps each table's keys free."""
        items = self.data.get(key, [])
        if not isinstance(items, list):
            raise InputError(self.name(key), items, f"an array of tables ([[{key}]])")
        where = self.name(key)
        if allowed is None:
            for i, item in enumerate(items):
                if not isinstance(item, dict):
                    raise InputError(f"{where}[{i}]", item, "a table of keys")
            return items
        return [_Table(item, f"{where}[{i}]", allowed) for i, item in enumerate(items)]


def _rebuilt(prefix: str, build, **kwargs):
    """Call a constructor; its InputError's field is re-rooted at ``prefix`` (e.g. a gain set)."""
    try:
        return build(**kwargs)
    except InputError as err:
        tail = err.field.partition(".")[2] or err.field
        raise InputError(f"{prefix}.{tail}", err.value, err.expected) from None


def _conventions_required(kind: str) -> object:
    # A PMSM datasheet's rms/peak and line/phase conventions differ by sqrt(2), sqrt(3)
    # or 2: silently assuming one is the classic commissioning error, so they are required.
    return _NO_DEFAULT if kind == "pmsm" else "peak"


def _read_motor(t: _Table):
    kind = t.choice("kind", ("dc", "pmsm"))
    required = _conventions_required(kind)
    if kind == "pmsm":
        pole_pairs = t.integer("pole_pairs", 1, 200)
    else:
        pole_pairs = t.integer("pole_pairs", 1, 1, default=1)
    kw: dict[str, Any] = dict(
        kind=kind,
        pole_pairs=pole_pairs,
        resistance_ohm=t.quantity("resistance", "ohm"),
        inductance_h=t.quantity("inductance", "H"),
        inertia_kgm2=t.quantity("inertia", "kg*m^2"),
        viscous_friction_nm_s_per_rad=t.quantity("viscous_friction", "N*m*s/rad", "nonnegative", 0.0),
        coulomb_friction_nm=t.quantity("coulomb_friction", "N*m", "nonnegative", 0.0),
        kt_nm_per_a=t.quantity("kt", "N*m/A", default=None),
        ke_v_s_per_rad=t.quantity("ke", "V*s/rad", default=None),
    )
    if kw["kt_nm_per_a"] is None and kw["ke_v_s_per_rad"] is None:
        raise InputError(t.name("ke"), _MISSING, "ke (e.g. \"45 V/krpm\") or kt (N*m/A), at least one (required)")
    kw["winding_convention"] = t.choice("winding_convention", ("phase", "line"),
                                        _NO_DEFAULT if kind == "pmsm" else "phase")
    if kw["kt_nm_per_a"] is not None:
        kw["kt_convention"] = t.choice("kt_convention", ("rms", "peak"), required)
    if kw["ke_v_s_per_rad"] is not None:
        kw["ke_convention"] = t.choice("ke_convention", ("line_rms", "line_peak", "phase_rms", "phase_peak"),
                                       _NO_DEFAULT if kind == "pmsm" else "phase_peak")
    for key in ("continuous_current", "peak_current"):
        if t.has(key):
            kw[f"{key}_a"] = t.quantity(key, "A")
            kw["current_convention"] = t.choice("current_convention", ("rms", "peak"), required)
    if t.has("max_speed"):
        kw["max_speed_rad_s"] = t.quantity("max_speed", "rad/s")
    return _rebuilt("motor", motor_from_datasheet, **kw)


_PER_REVOLUTION = re.compile(r"/\s*\(?\s*(rev|revolution|turn|cycle|rad|radian|count)s?\b", re.IGNORECASE)


def _read_load(t: _Table) -> Load:
    motion = t.choice("motion", ("rotary", "linear"), "rotary")
    unit_j, unit_b, unit_f, unit_k, unit_c = Load(motion=motion, lead_m=1.0).units()
    kw: dict[str, Any] = dict(motion=motion, gear_ratio=t.quantity("gear_ratio", "", default=1.0))
    mass_key, other = ("mass", "inertia") if motion == "linear" else ("inertia", "mass")
    if t.has(other):
        raise InputError(t.name(other), t.data[other], f'"{mass_key}" for a {motion} load')
    kw["inertia"] = t.quantity(mass_key, unit_j, "nonnegative", 0.0)
    if motion == "linear":
        lead = t.data.get("lead")
        # pint counts a revolution as 2*pi, so "100 mm/rev" would silently read 15.9 mm.
        if isinstance(lead, str) and _PER_REVOLUTION.search(lead):
            raise InputError(t.name("lead"), lead, 'the travel per revolution written as a length, e.g. "100 mm"')
        kw["lead_m"] = t.quantity("lead", "m")
    elif t.has("lead"):
        raise InputError(t.name("lead"), t.data["lead"], 'no lead for a rotary load (set motion = "linear")')
    kw["viscous_friction"] = t.quantity("viscous_friction", unit_b, "nonnegative", 0.0)
    kw["coulomb_friction"] = t.quantity("coulomb_friction", unit_f, "nonnegative", 0.0)
    kw["compliant"] = t.flag("compliant", False)
    required = _NO_DEFAULT if kw["compliant"] else 0.0
    kw["stiffness"] = t.quantity("stiffness", unit_k, "positive" if kw["compliant"] else "nonnegative", required)
    kw["damping"] = t.quantity("damping", unit_c, "nonnegative", 0.0)
    return _rebuilt("load", Load, **kw)


def _read_drive(t: _Table, motor_kind: str) -> Drive:
    kw: dict[str, Any] = dict(
        bus_voltage_v=t.quantity("bus_voltage", "V"),
        modulation=t.choice("modulation", ("svpwm", "sinusoidal", "hbridge"),
                            "hbridge" if motor_kind == "dc" else "svpwm"),
        max_modulation=t.quantity("max_modulation", "", default=0.95),
        pwm_frequency_hz=t.quantity("pwm_frequency", "Hz"),
        current_rate_hz=t.quantity("current_rate", "Hz"),
        speed_rate_hz=t.quantity("speed_rate", "Hz"),
        position_rate_hz=t.quantity("position_rate", "Hz"),
        current_filter_hz=t.quantity("current_filter", "Hz", "nonnegative", 0.0),
    )
    limit = t.quantity("current_limit", "A")
    convention = t.choice("current_convention", ("rms", "peak"), _conventions_required(motor_kind))
    kw["current_limit_a"] = current_to_model(limit, motor_kind, convention)
    for key in ("computation_delay_samples", "pwm_delay_samples", "speed_estimate_delay_samples"):
        if t.has(key):
            kw[key] = t.quantity(key, "", "nonnegative")
    for key in ("current_delay", "speed_delay", "position_delay"):
        if t.has(key):  # absent keeps the Drive's NaN: "build the delay from samples"
            kw[f"{key}_s"] = t.quantity(key, "s", "nonnegative")
    if t.has("encoder_counts_per_rev"):
        counts = t.data["encoder_counts_per_rev"]
        # A bare number: pint's "count" is a fraction of a revolution, i.e. of 2*pi.
        if isinstance(counts, bool) or not isinstance(counts, (int, float)):
            raise InputError(t.name("encoder_counts_per_rev"), counts, "a plain number of counts per revolution")
        kw["encoder_counts_per_rev"] = float(counts)
    return _rebuilt("drive", Drive, **kw)


def _read_gain_set(t: _Table, index: int) -> GainSet:
    name = t.text("name")
    if not name.strip():
        raise InputError(t.name("name"), name, "a non-empty name")
    c = t.table("current", CURRENT_KEYS)
    current = CurrentGains(PI(c.quantity("kp", "V/A"), c.quantity("ki", "V/(A*s)", "nonnegative", 0.0)),
                           c.flag("decouple_back_emf", True))
    s = t.table("speed", SPEED_KEYS)
    notches = tuple(
        _rebuilt(n.where, Notch, centre_hz=n.quantity("centre", "Hz"),
                 zeta_zero=n.quantity("zeta_zero", "", "nonnegative", 0.05),
                 zeta_pole=n.quantity("zeta_pole", "", "positive", 0.5),
                 place=n.choice("place", ("command", "feedback"), "feedback"))
        for n in s.tables("notches", NOTCH_KEYS))
    speed = _rebuilt(s.where, SpeedGains, pi=PI(s.quantity("kp", "A*s/rad"), s.quantity("ki", "A/rad", "nonnegative", 0.0)),
                     feedback_lowpass_hz=s.quantity("feedback_lowpass", "Hz", "nonnegative", 0.0), notches=notches)
    p = t.table("position", POSITION_KEYS)
    position = _rebuilt(p.where, PositionGains, kp_per_s=p.quantity("kp", "1/s"),
                        ki_per_s2=p.quantity("ki", "1/s^2", "nonnegative", 0.0),
                        velocity_ff=p.quantity("velocity_ff", "", "nonnegative", 1.0),
                        acceleration_ff=p.quantity("acceleration_ff", "", "nonnegative", 0.0))
    return GainSet(current, speed, position, name=name, note=t.text("note", ""))


def _read_targets(t: _Table) -> dict[str, float]:
    targets = {key: t.quantity(key, TARGET_UNITS[key], "nonnegative") for key in TARGET_UNITS if t.has(key)}
    if targets.get("ms_max", 1.0) < 1.0:
        raise InputError(t.name("ms_max"), t.data["ms_max"], "at least 1 (the sensitivity peak is never below 1)")
    return targets


def _read_tuning(t: _Table) -> dict[str, float | str]:
    tuning: dict[str, float | str] = {key: t.choice(key, choices) for key, choices in TUNING_CHOICES.items()
                                      if t.has(key)}
    tuning.update({key: t.quantity(key, TUNING_UNITS[key]) for key in TUNING_UNITS if t.has(key)})
    if tuning.get("symmetric_optimum_a", 2.0) <= 1.0:
        raise InputError(t.name("symmetric_optimum_a"), t.data["symmetric_optimum_a"],
                         "a number above 1 (a = 2 to 4 is usual)")
    return tuning


def _read_scenarios(t: _Table) -> tuple[dict[str, Any], ...]:
    scenarios = t.tables("scenarios", None)
    for i, scenario in enumerate(scenarios):
        for key in ("name", "kind"):
            value = scenario.get(key, _MISSING)
            if not isinstance(value, str) or not value.strip() or value == _MISSING:
                raise InputError(f"scenarios[{i}].{key}", value, "non-empty text (required)")
    return tuple(dict(s) for s in scenarios)


def _preset_from_document(doc: dict[str, Any], source: str) -> Preset:
    top = _Table(doc, "", TOP_KEYS)
    version = top.integer("format_version", 1, FORMAT_VERSION, FORMAT_VERSION)
    del version  # only one version so far; the check above rejects newer files
    axis_t = top.table("axis", AXIS_KEYS, required=False)
    motor, check = _read_motor(top.table("motor", MOTOR_KEYS))
    load = _read_load(top.table("load", LOAD_KEYS, required=False))
    drive = _read_drive(top.table("drive", DRIVE_KEYS), motor.kind)
    gain_sets = tuple(_read_gain_set(g, i) for i, g in enumerate(top.tables("gain_sets", GAIN_SET_KEYS)))
    default_active = gain_sets[0].name if gain_sets else ""
    axis = Axis(motor=motor, load=load, drive=drive, name=axis_t.text("name", "axis" if source.startswith("<") else Path(source).stem))
    tolerances = top.data.get("tolerances", {})
    tolerances_from_dict(tolerances, axis)      # checked here; kept as written
    return Preset(
        axis=axis,
        constants_check=check,
        gain_sets=gain_sets,
        active=top.text("active_gain_set", default_active),
        description=axis_t.text("description", ""),
        targets=_read_targets(top.table("targets", tuple(TARGET_UNITS), required=False)),
        tuning=_read_tuning(top.table("tuning", tuple(TUNING_CHOICES) + tuple(TUNING_UNITS), required=False)),
        scenarios=_read_scenarios(top),
        tolerances=dict(tolerances),
        raw=doc,
    )


def loads_preset(text: str, source: str = "<text>") -> Preset:
    """Read a preset from TOML text.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str
        A name for the text in error messages (a file name); its stem is the default axis name.

    Returns
    -------
    Preset

    Raises
    ------
    InputError
        Field ``"file"`` with the line and column for broken TOML; otherwise the
        dotted name of the offending key (``"motor.resistance"``).
    """
    if not isinstance(text, str):
        raise InputError("file", type(text).__name__, "TOML text")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        where = re.search(r"line (\d+), column (\d+)", str(err))
        shown = f"{source}, line {where[1]}, column {where[2]}" if where else source
        raise InputError("file", shown, f"valid TOML ({err})") from None
    return _preset_from_document(doc, source)


def load_preset(path: str | os.PathLike) -> Preset:
    """Read a preset file (UTF-8 TOML); see :func:`loads_preset` for the errors."""
    path = Path(path)
    return replace(loads_preset(read_text(path, "file", "preset file"), source=path.name), source_path=path)


# --- built-in presets --------------------------------------------------------------------

def _builtin_dir():
    # In the repository (and an editable install) the presets sit beside core/; an
    # ordinary install ships them as the "presets" package's data.
    here = Path(__file__).resolve().parents[1] / "presets"
    if here.is_dir():
        return here
    return resources.files("presets")


def builtin_names() -> list[str]:
    """Names of the presets shipped with Loopwright (file stems, sorted)."""
    return sorted(item.name[:-5] for item in _builtin_dir().iterdir() if item.name.endswith(".toml"))


def builtin_preset(name: str) -> Preset:
    """A shipped preset by name (``"belt_gantry"``; a trailing ``.toml`` is accepted)."""
    names = builtin_names()
    stem = name[:-5] if isinstance(name, str) and name.endswith(".toml") else name
    if stem not in names:
        raise InputError("preset", name, "one of the built-in presets: " + ", ".join(names))
    item = _builtin_dir() / f"{stem}.toml"
    preset = loads_preset(item.read_text(encoding="utf-8"), source=f"{stem}.toml")
    return replace(preset, source_path=item if isinstance(item, Path) else None)


# --- writing -----------------------------------------------------------------------------

def _q(value: float, unit: str) -> str | float:
    # repr() is the shortest text that reads back as the same float.
    return f"{value!r} {unit}" if unit else float(value)


def _motor_table(preset: Preset) -> dict[str, Any]:
    m, check = preset.axis.motor, preset.constants_check
    pmsm = m.kind == "pmsm"
    out: dict[str, Any] = {"kind": m.kind}
    if pmsm:
        out.update(pole_pairs=m.pole_pairs, winding_convention="phase")
    out["resistance"] = _q(m.resistance_ohm, "ohm")
    out["inductance"] = _q(m.inductance_h, "H")
    # Write what the datasheet gave, so the derived constant and the check come back the same.
    if not math.isnan(check.kt_given_nm_per_a) or math.isnan(check.kt_from_ke_nm_per_a):
        out["kt"] = _q(m.torque_constant_nm_per_a, "N*m/A")
        if pmsm:
            out["kt_convention"] = "peak"
    if not math.isnan(check.kt_from_ke_nm_per_a):
        out["ke"] = _q(m.back_emf_v_s_per_rad, "V*s/rad")
        if pmsm:
            out["ke_convention"] = "phase_peak"
    out["inertia"] = _q(m.inertia_kgm2, "kg*m^2")
    out["viscous_friction"] = _q(m.viscous_friction_nm_s_per_rad, "N*m*s/rad")
    out["coulomb_friction"] = _q(m.coulomb_friction_nm, "N*m")
    for key, value in (("continuous_current", m.continuous_current_a), ("peak_current", m.peak_current_a)):
        if math.isfinite(value):
            out[key] = _q(value, "A")
            if pmsm:
                out["current_convention"] = "peak"
    if math.isfinite(m.max_speed_rad_s):
        out["max_speed"] = _q(m.max_speed_rad_s, "rad/s")
    return out


def _load_table(load: Load) -> dict[str, Any]:
    unit_j, unit_b, unit_f, unit_k, unit_c = load.units()
    out: dict[str, Any] = {"motion": load.motion, "gear_ratio": float(load.gear_ratio)}
    if load.motion == "linear":
        out["lead"] = _q(load.lead_m, "m")
    out["mass" if load.motion == "linear" else "inertia"] = _q(load.inertia, unit_j)
    out["viscous_friction"] = _q(load.viscous_friction, unit_b)
    out["coulomb_friction"] = _q(load.coulomb_friction, unit_f)
    out["compliant"] = load.compliant
    out["stiffness"] = _q(load.stiffness, unit_k)
    out["damping"] = _q(load.damping, unit_c)
    return out


def _drive_table(d: Drive, motor_kind: str) -> dict[str, Any]:
    out: dict[str, Any] = {"bus_voltage": _q(d.bus_voltage_v, "V"), "modulation": d.modulation,
                           "max_modulation": float(d.max_modulation),
                           "current_limit": _q(d.current_limit_a, "A")}
    if motor_kind == "pmsm":
        out["current_convention"] = "peak"
    out.update(pwm_frequency=_q(d.pwm_frequency_hz, "Hz"), current_rate=_q(d.current_rate_hz, "Hz"),
               speed_rate=_q(d.speed_rate_hz, "Hz"), position_rate=_q(d.position_rate_hz, "Hz"),
               computation_delay_samples=float(d.computation_delay_samples),
               pwm_delay_samples=float(d.pwm_delay_samples),
               speed_estimate_delay_samples=float(d.speed_estimate_delay_samples))
    for key in ("current_delay", "speed_delay", "position_delay"):
        value = getattr(d, f"{key}_s")
        if not math.isnan(value):
            out[key] = _q(value, "s")
    out["current_filter"] = _q(d.current_filter_hz, "Hz")
    out["encoder_counts_per_rev"] = float(d.encoder_counts_per_rev)
    return out


def _gain_set_table(g: GainSet) -> dict[str, Any]:
    notches = [{"centre": _q(n.centre_hz, "Hz"), "zeta_zero": float(n.zeta_zero),
                "zeta_pole": float(n.zeta_pole), "place": n.place} for n in g.speed.notches]
    speed: dict[str, Any] = {"kp": _q(g.speed.pi.kp, "A*s/rad"), "ki": _q(g.speed.pi.ki, "A/rad"),
                             "feedback_lowpass": _q(g.speed.feedback_lowpass_hz, "Hz")}
    if notches:
        speed["notches"] = notches
    return {
        "name": g.name,
        "note": g.note,
        "current": {"kp": _q(g.current.pi.kp, "V/A"), "ki": _q(g.current.pi.ki, "V/(A*s)"),
                    "decouple_back_emf": g.current.decouple_back_emf},
        "speed": speed,
        "position": {"kp": _q(g.position.kp_per_s, "1/s"), "ki": _q(g.position.ki_per_s2, "1/s^2"),
                     "velocity_ff": float(g.position.velocity_ff),
                     "acceleration_ff": float(g.position.acceleration_ff)},
    }


def dumps_preset(preset: Preset) -> str:
    """The preset as TOML text, in SI units and model conventions, exact to the last bit.

    Reading the text back with :func:`loads_preset` gives an equal :class:`Preset`
    (axis, gain sets, targets, tuning and scenarios).
    """
    doc: dict[str, Any] = {"format_version": FORMAT_VERSION}
    if preset.gain_sets:
        doc["active_gain_set"] = preset.active
    doc["axis"] = {"name": preset.axis.name, "description": preset.description}
    doc["motor"] = _motor_table(preset)
    doc["load"] = _load_table(preset.axis.load)
    doc["drive"] = _drive_table(preset.axis.drive, preset.axis.motor.kind)
    doc["targets"] = {k: _q(v, TARGET_UNITS[k]) for k, v in preset.targets.items()}
    doc["tuning"] = {k: (v if k in TUNING_CHOICES else _q(v, TUNING_UNITS[k])) for k, v in preset.tuning.items()}
    if preset.tolerances:
        doc["tolerances"] = dict(preset.tolerances)
    doc["gain_sets"] = [_gain_set_table(g) for g in preset.gain_sets]
    doc["scenarios"] = [dict(s) for s in preset.scenarios]
    header = ("# Loopwright preset, written by the program: SI units, motor constants in the\n"
              "# model convention (per phase, A peak). See presets/README.md for every key.\n\n")
    return header + tomli_w.dumps(doc)


def save_preset(preset: Preset, path: str | os.PathLike) -> Path:
    """Write the preset to ``path`` atomically (a temporary file in the same folder, then rename).

    Returns
    -------
    Path
        The path written.
    """
    text = dumps_preset(preset)
    return atomic_write(path, lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"), "file")
