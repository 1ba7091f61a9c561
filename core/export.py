"""The drive configuration sheet: a gain set in a drive's own units, forms and resolutions.

An *export profile* (our own TOML format, ``presets/profiles/README.md``) lists the
rows a drive expects: which gain, in which unit and form (parallel Ki, series
Ki/Kp, integral time Ti), continuous or per sample of the loop (discrete), per unit
of rated current / rated speed / bus voltage, with the drive's resolution and
range. :func:`sheet` turns a preset's gain set into those rows, flags every value
that rounds to nothing, is heavily quantised or lies outside the drive's range, and
carries the analysis flags and the safety caution. Writers: CSV, XLSX, JSON (which
:func:`import_sheet_json` reads back into the exact gain set) and a PDF report
(:mod:`core.report_pdf`). Every file is written atomically.

Conventions (the classic commissioning accidents are factors of sqrt(2), 2*pi and 60):

* The model's PMSM currents are A peak of phase current (amplitude-invariant dq).
  A profile says how its drive counts amperes (``current_convention``); for "rms"
  a current-bearing gain is divided by sqrt(2) (derived: I_rms = I_peak / sqrt(2)
  for a sinusoid). Current-loop gains (V/A) are taken as impedance-like: the drive
  counts its volts in the same convention as its amperes, so the ratio is unchanged.
  A DC motor's current is the same in either convention.
* Speeds and angles convert through pint (1 rpm = 2*pi/60 rad/s); ``count`` in a
  unit is one encoder count, ``1 rev / counts_per_rev``.
* Per unit: ``i_pu = i / I_rated``, ``w_pu = w / w_rated``, ``v_pu = v / V_bus``
  with v the model's voltage (PMSM: phase peak; DC: armature).
* Discrete integral gains are the continuous ones times the loop's sample time,
  ``Ki_d = Ki * Ts`` (Ti in samples: ``Ti / Ts``); the row states which difference
  equation the drive runs (backward Euler, forward Euler or Tustin), for which
  ``Kp + Ki_d / (1 - z^-1)``, ``Kp + Ki_d z^-1 / (1 - z^-1)`` and
  ``Kp + (Ki_d / 2)(1 + z^-1)/(1 - z^-1)`` are the exact discretisations of
  ``Kp + Ki/s`` (derived; checked against scipy.signal.cont2discrete in the tests).
"""

from __future__ import annotations

import csv
import datetime as _dt
import hashlib
import io
import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, replace
from decimal import Decimal
from pathlib import Path
from typing import Any, Callable

import pint

import core
from core.analysis import Analysis, analyse, analysis_summary
from core.errors import InputError
from core.files import atomic_write as _atomic_write
from core.files import read_text
from core.safety import CAUTION  # the caution every export carries
from core.flags import Flag, targets_from_dict
from core.gains import PI, CurrentGains, GainSet, Notch, PositionGains, SpeedGains
from core.presets import Preset, dumps_preset
from core.units import _REGISTRY

PROFILE_FORMAT = "loopwright-export-profile"
PROFILE_FORMAT_VERSION = 1
SHEET_FORMAT = "loopwright-config-sheet"
SHEET_FORMAT_VERSION = 1

QUANTISATION_WARN = 0.05
"""Relative rounding error above which a row is flagged as heavily quantised (5 %)."""



FORMATS = ("csv", "xlsx", "json", "pdf")


# --- what can be exported ----------------------------------------------------------------

@dataclass(frozen=True)
class GainSpec:
    """A gain the profile rows may name.

    Attributes
    ----------
    loop : str
        "current", "speed" or "position" (sets the sample time of discrete rows).
    kind : str
        "kp", "ki" (integral gain, the only kind with a form), "filter", "fraction", "switch".
    si_unit : str
        SI unit of the value in parallel form, model amperes.
    amp_power, volt_power, speed_power : int
        Powers of A, V and rad/s in the unit (for per-unit and the rms/peak convention).
    """

    loop: str
    kind: str
    si_unit: str
    amp_power: int = 0
    volt_power: int = 0
    speed_power: int = 0


GAINS: dict[str, GainSpec] = {
    "current.kp": GainSpec("current", "kp", "V/A", -1, 1),
    "current.ki": GainSpec("current", "ki", "V/(A*s)", -1, 1),
    "current.decouple_back_emf": GainSpec("current", "switch", ""),
    "speed.kp": GainSpec("speed", "kp", "A*s/rad", 1, 0, -1),
    "speed.ki": GainSpec("speed", "ki", "A/rad", 1, 0, -1),
    "speed.feedback_lowpass": GainSpec("speed", "filter", "Hz"),
    "position.kp": GainSpec("position", "kp", "1/s"),
    "position.ki": GainSpec("position", "ki", "1/s^2"),
    "position.velocity_ff": GainSpec("position", "fraction", ""),
    "position.acceleration_ff": GainSpec("position", "fraction", ""),
}
"""Gain names of profile rows (plus the aliases ``*.ti`` and ``speed.notchN.*``)."""

_ALIASES = {"current.ti": "current.ki", "speed.ti": "speed.ki", "position.ti": "position.ki"}
_NOTCH = re.compile(r"^speed\.notch([1-9][0-9]?)\.(centre|zeta_zero|zeta_pole)$")
_NOTCH_UNITS = {"centre": "Hz", "zeta_zero": "", "zeta_pole": ""}
FORMS = ("parallel", "series", "integral_time")
TIME_BASES = ("continuous", "discrete")
DISCRETISATIONS = ("backward_euler", "forward_euler", "tustin")
BASE_KEYS = ("current_convention", "rated_current", "rated_speed", "bus_voltage", "counts_per_rev")
ROW_KEYS = ("label", "gain", "unit", "form", "time_base", "discretisation", "per_unit", "resolution",
            "significant_digits", "min", "max", "off_value", "note")
TOP_KEYS = ("format", "format_version", "name", "description", "bases", "rows")


def gain_names() -> list[str]:
    """Every gain name a profile row may use (notches shown for notch 1)."""
    return list(GAINS) + list(_ALIASES) + [f"speed.notch1.{k}" for k in _NOTCH_UNITS]


def _spec(gain: str) -> GainSpec | None:
    gain = _ALIASES.get(gain, gain)
    if gain in GAINS:
        return GAINS[gain]
    m = _NOTCH.match(gain)
    if m:
        return GainSpec("speed", "filter" if m[2] == "centre" else "fraction", _NOTCH_UNITS[m[2]])
    return None


def gain_value(gains: GainSet, gain: str) -> float:
    """The SI value of ``gain`` (parallel form, model amperes) in ``gains``.

    ``*.ti`` gives the parallel Ki like ``*.ki`` (the row's form makes it Ti); a notch
    the set does not have is NaN; a switch is 1.0 (on) or 0.0 (off).
    """
    gain = _ALIASES.get(gain, gain)
    m = _NOTCH.match(gain)
    if m:
        index = int(m[1]) - 1
        notches = gains.speed.notches
        return math.nan if index >= len(notches) else float(getattr(notches[index], m[2] if m[2] != "centre" else "centre_hz"))
    return float({
        "current.kp": gains.current.pi.kp, "current.ki": gains.current.pi.ki,
        "current.decouple_back_emf": 1.0 if gains.current.decouple_back_emf else 0.0,
        "speed.kp": gains.speed.pi.kp, "speed.ki": gains.speed.pi.ki,
        "speed.feedback_lowpass": gains.speed.feedback_lowpass_hz,
        "position.kp": gains.position.kp_per_s, "position.ki": gains.position.ki_per_s2,
        "position.velocity_ff": gains.position.velocity_ff,
        "position.acceleration_ff": gains.position.acceleration_ff,
    }[gain])


def _kp_of(gains: GainSet, loop: str) -> float:
    return {"current": gains.current.pi.kp, "speed": gains.speed.pi.kp, "position": gains.position.kp_per_s}[loop]


# --- profiles ----------------------------------------------------------------------------

@dataclass(frozen=True)
class ProfileRow:
    """One output row of a profile, as read and checked (see presets/profiles/README.md)."""

    label: str
    gain: str
    unit: str
    form: str = "parallel"
    time_base: str = "continuous"
    discretisation: str = "backward_euler"
    per_unit: bool = False
    resolution: float = 0.0
    significant_digits: int = 0
    minimum: float = -math.inf
    maximum: float = math.inf
    off_value: float | None = None
    note: str = ""

    @property
    def spec(self) -> GainSpec:
        """What the row's gain is."""
        return _spec(self.gain)

    @property
    def form_text(self) -> str:
        """The row's form and time base in words."""
        words = {"parallel": "", "series": "series Ki/Kp", "integral_time": "integral time Kp/Ki"}[self.form]
        if self.time_base == "discrete":
            words = (words + ", " if words else "") + f"per sample ({self.discretisation.replace('_', ' ')})"
        if self.per_unit:
            words = (words + ", " if words else "") + "per unit"
        return words


@dataclass(frozen=True)
class Profile:
    """An export profile: how one kind of drive wants its gains.

    Attributes
    ----------
    name, description : str
    current_convention : {"rms", "peak"}
        How the drive counts amperes (gains and the rated-current base).
    rated_current : float or None
        Per-unit current base in the drive's ampere convention, A (None: the motor's continuous current).
    rated_speed_rad_s : float or None
        Per-unit speed base, rad/s (None: the motor's maximum speed).
    bus_voltage_v : float or None
        Per-unit voltage base, V (None: the drive's bus voltage).
    counts_per_rev : float or None
        Encoder counts per motor revolution for units with ``count`` (None: the drive's).
    rows : tuple of ProfileRow
    source : str
        File the profile came from ("<text>" for text).
    """

    name: str
    description: str
    current_convention: str
    rated_current: float | None
    rated_speed_rad_s: float | None
    bus_voltage_v: float | None
    counts_per_rev: float | None
    rows: tuple[ProfileRow, ...]
    source: str = "<text>"


def _number(value, field: str, expected: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(field, value, expected)
    return float(value)


def _text(d: dict, key: str, field: str, default: str | None = None) -> str:
    value = d.get(key, default)
    if value is None:
        raise InputError(field, "(missing)", "text (required)")
    if not isinstance(value, str):
        raise InputError(field, value, "text")
    return value


def _choice(d: dict, key: str, field: str, choices: tuple[str, ...], default: str) -> str:
    value = d.get(key, default)
    if value not in choices:
        raise InputError(field, value, "one of " + ", ".join(choices))
    return value


def _base(bases: dict, key: str, unit: str) -> float | None:
    field = f"bases.{key}"
    value = bases.get(key, "axis")
    if value == "axis":
        return None
    if key == "counts_per_rev":
        number = _number(value, field, 'a plain number of counts per revolution, or "axis"')
    else:
        from core.units import parse_quantity

        if isinstance(value, (int, float)) and not isinstance(value, bool):
            raise InputError(field, value, f'a quantity with its unit (e.g. "3000 rpm" or "2.7 A"), or "axis"')
        number = parse_quantity(value, unit, field)
    if not number > 0:
        raise InputError(field, value, f'a positive base (a zero base divides by zero), or "axis"')
    return number


def _unit_expression(unit: str, counts_per_rev: float) -> pint.Quantity:
    # "count" in the registry is a plain number; on a sheet it is one encoder count of a turn.
    text = re.sub(r"\bcounts?\b", f"(rev / {counts_per_rev!r})", unit) if unit.strip() else "dimensionless"
    return _REGISTRY.parse_expression(text) * _REGISTRY.dimensionless


def _row_source_unit(row: ProfileRow) -> str:
    """SI unit of the value the row converts (after form, per unit and time base)."""
    spec = row.spec
    if row.form == "series":
        unit = "1/s"
    elif row.form == "integral_time":
        unit = "s"
    elif row.per_unit:
        unit = "1/s" if spec.kind == "ki" and spec.loop != "position" else ""
    else:
        unit = spec.si_unit
    if row.time_base == "discrete":
        unit = f"({unit or 'dimensionless'})/s" if row.form == "integral_time" else f"({unit or 'dimensionless'})*s"
    return unit or "dimensionless"


def _read_row(d: object, i: int) -> ProfileRow:
    where = f"rows[{i}]"
    if not isinstance(d, dict):
        raise InputError(where, d, "a table ([[rows]])")
    label = d.get("label")
    if not isinstance(label, str) or not label.strip():
        raise InputError(f"{where}.label", label if label is not None else "(missing)", "non-empty text (required)")
    where = f"rows[{i}] ({label})"
    for key in d:
        if key not in ROW_KEYS:
            raise InputError(f"{where}.{key}", d[key], "a known row key (" + ", ".join(ROW_KEYS) + ")")
    gain = _text(d, "gain", f"{where}.gain")
    spec = _spec(gain)
    if spec is None:
        raise InputError(f"{where}.gain", gain, "one of " + ", ".join(gain_names()) + " (notches: speed.notchN.*)")
    default_form = "integral_time" if gain.endswith(".ti") else "parallel"
    form = _choice(d, "form", f"{where}.form", FORMS, default_form)
    if gain.endswith(".ti") and form != "integral_time":
        raise InputError(f"{where}.form", form, f'"integral_time" for {gain} (or name the gain {gain[:-3]}.ki)')
    if spec.kind != "ki" and form != "parallel":
        raise InputError(f"{where}.form", form, f'"parallel": only integral gains have a series or integral-time form')
    time_base = _choice(d, "time_base", f"{where}.time_base", TIME_BASES, "continuous")
    if time_base == "discrete" and not (spec.kind == "ki" or gain == "position.kp"):
        raise InputError(f"{where}.time_base", time_base,
                         '"continuous": only integral gains and the position Kp have a per-sample form')
    discretisation = _choice(d, "discretisation", f"{where}.discretisation", DISCRETISATIONS, "backward_euler")
    per_unit = d.get("per_unit", False)
    if not isinstance(per_unit, bool):
        raise InputError(f"{where}.per_unit", per_unit, "true or false")
    if per_unit and (spec.loop == "position" or spec.kind not in ("kp", "ki")):
        raise InputError(f"{where}.per_unit", per_unit,
                         "false: per unit applies to the current- and speed-loop Kp and Ki only")
    resolution = d.get("resolution", 0.0)
    if resolution == "integer":
        resolution = 1.0
    resolution = _number(resolution, f"{where}.resolution", 'a positive step such as 0.001, or "integer"')
    if resolution < 0 or ("resolution" in d and resolution == 0):
        raise InputError(f"{where}.resolution", d["resolution"], 'a positive step such as 0.001, or "integer"')
    digits = d.get("significant_digits", 0)
    if isinstance(digits, bool) or not isinstance(digits, int) or not 0 <= digits <= 17:
        raise InputError(f"{where}.significant_digits", digits, "a whole number from 1 to 17")
    if resolution and digits:
        raise InputError(f"{where}.significant_digits", digits, "either resolution or significant_digits, not both")
    lo = _number(d.get("min", -math.inf), f"{where}.min", "a number") if "min" in d else -math.inf
    hi = _number(d.get("max", math.inf), f"{where}.max", "a number") if "max" in d else math.inf
    if lo > hi:
        raise InputError(f"{where}.min", d["min"], f"at most the row's max ({d['max']!r})")
    off = d.get("off_value")
    if off is not None:
        off = _number(off, f"{where}.off_value", "a number the drive reads as 'off'")
    unit = _text(d, "unit", f"{where}.unit")
    row = ProfileRow(label.strip(), gain, unit, form, time_base, discretisation, per_unit, resolution, digits,
                     lo, hi, off, _text(d, "note", f"{where}.note", ""))
    # The unit must fit the dimension of what the row converts (count as 1/1000 rev just to test it).
    try:
        target = _unit_expression(unit, 1000.0)
        _REGISTRY.Quantity(1.0, _row_source_unit(row)).to(target.units)
    except pint.DimensionalityError:
        raise InputError(f"{where}.unit", unit,
                         f"a unit convertible from {_row_source_unit(row)} (the dimension of {gain}"
                         f"{', ' + row.form_text if row.form_text else ''})") from None
    except Exception:
        raise InputError(f"{where}.unit", unit, "a unit pint can read (e.g. \"V/A\", \"A/rpm\", \"ms\")") from None
    return row


def loads_profile(text: str, source: str = "<text>") -> Profile:
    """Read an export profile from TOML text (see presets/profiles/README.md).

    Raises
    ------
    InputError
        Naming the row and field: ``rows[2] (speed Ki).unit``.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError("profile", source, f"valid TOML ({err})") from None
    for key in doc:
        if key not in TOP_KEYS:
            raise InputError(key, doc[key], "a known key here (" + ", ".join(TOP_KEYS) + ")")
    if doc.get("format", PROFILE_FORMAT) != PROFILE_FORMAT:
        raise InputError("format", doc.get("format"), f'"{PROFILE_FORMAT}"')
    version = doc.get("format_version", PROFILE_FORMAT_VERSION)
    if version != PROFILE_FORMAT_VERSION:
        raise InputError("format_version", version, str(PROFILE_FORMAT_VERSION))
    name = _text(doc, "name", "name")
    if not name.strip():
        raise InputError("name", name, "a non-empty profile name")
    bases = doc.get("bases", {})
    if not isinstance(bases, dict):
        raise InputError("bases", bases, "a table [bases]")
    for key in bases:
        if key not in BASE_KEYS:
            raise InputError(f"bases.{key}", bases[key], "a known base (" + ", ".join(BASE_KEYS) + ")")
    rows = doc.get("rows")
    if not isinstance(rows, list) or not rows:
        raise InputError("rows", rows if rows is not None else "(missing)", "one or more [[rows]] tables")
    return Profile(
        name=name.strip(), description=_text(doc, "description", "description", ""),
        current_convention=_choice(bases, "current_convention", "bases.current_convention", ("rms", "peak"), "peak"),
        rated_current=_base(bases, "rated_current", "A"), rated_speed_rad_s=_base(bases, "rated_speed", "rad/s"),
        bus_voltage_v=_base(bases, "bus_voltage", "V"), counts_per_rev=_base(bases, "counts_per_rev", ""),
        rows=tuple(_read_row(r, i) for i, r in enumerate(rows)), source=source)


def load_profile(path: str | os.PathLike) -> Profile:
    """Read an export profile file (UTF-8 TOML); errors as :func:`loads_profile`."""
    path = Path(path)
    return loads_profile(read_text(path, "profile", "profile file"), source=path.name)


def _profile_dir() -> Path:
    return Path(__file__).resolve().parents[1] / "presets" / "profiles"


def builtin_profile_names() -> list[str]:
    """Names (file stems) of the shipped profiles, sorted."""
    folder = _profile_dir()
    return sorted(p.stem for p in folder.glob("*.toml")) if folder.is_dir() else []


def builtin_profiles() -> dict[str, Profile]:
    """The shipped profiles, keyed by file stem."""
    return {name: load_profile(_profile_dir() / f"{name}.toml") for name in builtin_profile_names()}


def resolve_profile(name_or_path: str | os.PathLike) -> Profile:
    """A shipped profile by name (``"si"``), else a profile file by path."""
    text = os.fspath(name_or_path)
    stem = text[:-5] if text.endswith(".toml") else text
    if stem in builtin_profile_names() and not Path(text).exists():
        return load_profile(_profile_dir() / f"{stem}.toml")
    if not Path(text).exists():
        raise InputError("--profile", text, "a profile file or one of the shipped profiles: "
                         + ", ".join(builtin_profile_names()))
    return load_profile(text)


# --- the sheet ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Bases:
    """Per-unit bases in force for one sheet (resolved against the axis).

    Attributes
    ----------
    current_convention : str
        "rms" or "peak"; how the drive counts amperes.
    current_factor : float
        Drive ampere per model ampere: 1/sqrt(2) for a PMSM with an rms drive, else 1.
    rated_current_a : float
        In the drive's convention, A (NaN when neither profile nor axis gives it).
    rated_speed_rad_s, bus_voltage_v, counts_per_rev : float
    """

    current_convention: str
    current_factor: float
    rated_current_a: float
    rated_speed_rad_s: float
    bus_voltage_v: float
    counts_per_rev: float


@dataclass(frozen=True)
class SheetRow:
    """One row of a configuration sheet.

    Attributes
    ----------
    label, gain, form_text : str
    loop : str
    si_value : float
        The row's quantity in SI, continuous time, model amperes (Ki in its own unit,
        Ti in s, Ki/Kp in 1/s); NaN for a notch the set lacks, inf for Ti without Ki.
    si_unit : str
    drive_value : float
        In the drive's unit, form and time base, before rounding.
    drive_unit : str
        The profile's unit ("pu" prefixed for per-unit rows, "" for plain numbers).
    rounded_value : float
        What the drive will hold (``off_value`` when the quantity is off; NaN when off without one).
    text : str
        ``rounded_value`` printed at the row's resolution ("off" when off).
    minimum, maximum : float
    flags : tuple of Flag
    """

    label: str
    gain: str
    loop: str
    form_text: str
    si_value: float
    si_unit: str
    drive_value: float
    drive_unit: str
    rounded_value: float
    text: str
    minimum: float
    maximum: float
    flags: tuple[Flag, ...]


@dataclass(frozen=True)
class Sheet:
    """A gain set ready to hand to a drive, with everything the header block needs.

    Attributes
    ----------
    axis_name, gain_set_name, profile_name, profile_description : str
    created : str
        ISO 8601 date and time of the export.
    program_version : str
        ``core.__version__``.
    preset_sha256, axis_sha256 : str
        SHA-256 of the preset as written by ``dumps_preset``, and of its axis alone.
    gains : GainSet
    bases : Bases
    rows : tuple of SheetRow
    analysis : Analysis
        Of the gain set on the axis with the preset's targets.
    flags : tuple of Flag
        Analysis flags, then every row flag.
    caution : str
    """

    axis_name: str
    gain_set_name: str
    profile_name: str
    profile_description: str
    created: str
    program_version: str
    preset_sha256: str
    axis_sha256: str
    gains: GainSet
    bases: Bases
    rows: tuple[SheetRow, ...]
    analysis: Analysis
    flags: tuple[Flag, ...]
    caution: str
    axis_lines: tuple[tuple[str, str], ...] = ()

    @property
    def attention(self) -> str:
        """The line at the top of every export: "" when no flag is active."""
        if not self.flags:
            return ""
        errors = sum(f.severity == "error" for f in self.flags)
        warnings = sum(f.severity == "warning" for f in self.flags)
        return (f"ATTENTION: {len(self.flags)} flag(s) active ({errors} error(s), {warnings} warning(s)); "
                "read them (listed below) before entering any value into the drive.")


def preset_sha256(preset: Preset) -> str:
    """SHA-256 (hex) of the preset as :func:`core.presets.dumps_preset` writes it."""
    return hashlib.sha256(dumps_preset(preset).encode("utf-8")).hexdigest()


def axis_sha256(preset: Preset) -> str:
    """SHA-256 (hex) of the preset's axis alone: name, motor, load and drive.

    Gain sets, targets, tuning and scenarios are left out, so a sheet still imports
    into its preset after the gain sets have been edited, but not into another axis.
    """
    bare = replace(preset, gain_sets=(), active="", targets={}, tuning={}, scenarios=(), description="")
    return preset_sha256(bare)


def resolve_bases(profile: Profile, preset: Preset) -> Bases:
    """The profile's bases, with "axis" filled in from the preset (NaN when unrated)."""
    motor, drive = preset.axis.motor, preset.axis.drive
    factor = 1.0 / math.sqrt(2.0) if (motor.kind == "pmsm" and profile.current_convention == "rms") else 1.0
    rated = profile.rated_current
    if rated is None:
        rated = motor.continuous_current_a * factor if math.isfinite(motor.continuous_current_a) else math.nan
    speed = profile.rated_speed_rad_s
    if speed is None:
        speed = motor.max_speed_rad_s if math.isfinite(motor.max_speed_rad_s) else math.nan
    return Bases(profile.current_convention, factor, rated, speed,
                 drive.bus_voltage_v if profile.bus_voltage_v is None else profile.bus_voltage_v,
                 drive.encoder_counts_per_rev if profile.counts_per_rev is None else profile.counts_per_rev)


def sample_time_s(preset: Preset, loop: str) -> float:
    """The sample time of ``loop`` on the preset's drive, s."""
    d = preset.axis.drive
    return 1.0 / {"current": d.current_rate_hz, "speed": d.speed_rate_hz, "position": d.position_rate_hz}[loop]


def _decimals(resolution: float) -> int:
    return max(0, -Decimal(repr(resolution)).normalize().as_tuple().exponent)


def _rounded(value: float, row: ProfileRow) -> tuple[float, str]:
    if row.resolution:
        steps = round(value / row.resolution)
        d = _decimals(row.resolution)
        rounded = float(f"{steps * row.resolution:.{d}f}")
        return rounded, f"{rounded:.{d}f}"
    if row.significant_digits:
        rounded = float(f"{value:.{row.significant_digits}g}")
        return rounded, f"{rounded:.{row.significant_digits}g}"
    return value, repr(value)


def convert_row(row: ProfileRow, gains: GainSet, bases: Bases, sample_s: float) -> tuple[float, float, str]:
    """The row's value: (SI value, drive value before rounding, SI unit).

    See the module docstring for the conventions; raises InputError when a per-unit
    row needs a base the profile and the axis do not give.
    """
    spec = row.spec
    raw = gain_value(gains, row.gain)
    where = f"rows ({row.label})"
    if row.form == "series":
        si, si_unit = raw / _kp_of(gains, spec.loop), "1/s"
    elif row.form == "integral_time":
        si, si_unit = (math.inf if raw == 0 else _kp_of(gains, spec.loop) / raw), "s"
    else:
        si, si_unit = raw, spec.si_unit
    value = si
    if row.form == "parallel":
        if row.per_unit:
            for power, base, name in ((spec.amp_power, bases.rated_current_a / bases.current_factor, "rated_current"),
                                      (spec.volt_power, bases.bus_voltage_v, "bus_voltage"),
                                      (spec.speed_power, bases.rated_speed_rad_s, "rated_speed")):
                if power:
                    if not (math.isfinite(base) and base > 0):
                        raise InputError(f"{where}.per_unit", True,
                                         f"a bases.{name} in the profile: the axis does not rate it")
                    value /= base ** power
        else:
            # Current-loop V/A: volts and amperes in one convention, the factors cancel.
            value *= bases.current_factor ** (spec.amp_power + spec.volt_power)
    if row.time_base == "discrete":
        value = value / sample_s if row.form == "integral_time" else value * sample_s
    if math.isfinite(value):
        target = _unit_expression(row.unit, bases.counts_per_rev)
        value = float(_REGISTRY.Quantity(value, _row_source_unit(row)).to(target.units).magnitude / target.magnitude)
    return si, value, si_unit


def _row_flags(row: ProfileRow, drive_value: float, rounded: float, unit: str) -> list[Flag]:
    loop, flags = row.spec.loop, []
    shown = f"{row.label} ({row.gain})"
    if math.isnan(drive_value):
        return flags
    if math.isinf(drive_value):
        if row.off_value is None:
            flags.append(Flag(loop, "warning", f"{shown} is off (no integral action) and the profile gives no "
                                               "off_value: set it as the drive's manual says."))
        return flags
    if drive_value != 0 and rounded == 0:
        flags.append(Flag(loop, "error", f"{shown} rounds to 0 at this resolution ({drive_value:.4g} {unit} with a "
                                         f"step of {row.resolution:g}): the drive would lose this gain."))
    elif drive_value != 0 and abs(rounded - drive_value) > QUANTISATION_WARN * abs(drive_value):
        flags.append(Flag(loop, "warning", f"{shown} is quantised by {abs(rounded - drive_value) / abs(drive_value):.0%} "
                                           f"at this resolution ({drive_value:.4g} becomes {rounded:g} {unit})."))
    if not row.minimum <= rounded <= row.maximum:
        flags.append(Flag(loop, "error", f"{shown} = {rounded:g} {unit} is outside the drive's range "
                                         f"[{row.minimum:g}, {row.maximum:g}]."))
    return flags


def _drive_unit(row: ProfileRow) -> str:
    if row.per_unit and row.form == "parallel":
        return f"pu {row.unit}" if row.unit.strip() else "pu"
    return row.unit


def _axis_lines(preset: Preset, bases: Bases) -> tuple[tuple[str, str], ...]:
    a, m, d = preset.axis, preset.axis.motor, preset.axis.drive
    amp = "A peak" if m.kind == "pmsm" else "A"
    return (
        ("motor", f"{m.kind.upper()}, {m.pole_pairs} pole pair(s)"),
        ("resistance / inductance (model)", f"{m.resistance_ohm:.4g} ohm, {m.inductance_h * 1e3:.4g} mH"),
        ("Kt / Ke (model)", f"{m.torque_constant_nm_per_a:.4g} N*m/{amp}, {m.back_emf_v_s_per_rad:.4g} V*s/rad"),
        ("inertia motor / total", f"{m.inertia_kgm2:.4g} / {a.total_inertia_kgm2:.4g} kg*m^2"),
        ("load", f"{a.load.motion}, gear ratio {a.load.gear_ratio:g}"
                 + (f", resonance {a.resonance_hz:.4g} Hz" if math.isfinite(a.resonance_hz) else "")),
        ("bus voltage / voltage limit", f"{d.bus_voltage_v:.4g} V / {d.voltage_limit_v:.4g} V ({d.modulation})"),
        ("current limit (model)", f"{a.current_limit_a:.4g} {amp}"),
        ("loop rates current / speed / position", f"{d.current_rate_hz:g} / {d.speed_rate_hz:g} / {d.position_rate_hz:g} Hz"),
        ("encoder", f"{d.encoder_counts_per_rev:g} counts/rev"),
        ("sheet bases", f"rated current {bases.rated_current_a:.4g} A {bases.current_convention}, rated speed "
                        f"{bases.rated_speed_rad_s * 30 / math.pi:.5g} rpm, bus {bases.bus_voltage_v:.4g} V, "
                        f"{bases.counts_per_rev:g} counts/rev"),
    )


def sheet(preset: Preset, gain_set_name: str, profile: Profile, now: _dt.datetime | None = None) -> Sheet:
    """The configuration sheet of one gain set through one profile.

    Parameters
    ----------
    preset : Preset
    gain_set_name : str
    profile : Profile
    now : datetime, optional
        Time stamp of the sheet (default: now, local time).

    Returns
    -------
    Sheet
    """
    gains = preset.gain_set(gain_set_name)
    bases = resolve_bases(profile, preset)
    rows, row_flags = [], []
    for prow in profile.rows:
        si, value, si_unit = convert_row(prow, gains, bases, sample_time_s(preset, prow.spec.loop))
        unit = _drive_unit(prow)
        if math.isnan(value) or math.isinf(value):
            rounded = math.nan if prow.off_value is None else prow.off_value
            text = "off" if prow.off_value is None else _rounded(prow.off_value, prow)[1]
        else:
            rounded, text = _rounded(value, prow)
        flags = tuple(_row_flags(prow, value, rounded, unit))
        row_flags.extend(flags)
        rows.append(SheetRow(prow.label, prow.gain, prow.spec.loop, prow.form_text, si, si_unit, value, unit,
                             rounded, text, prow.minimum, prow.maximum, flags))
    result = analyse(preset.axis, gains, targets_from_dict(preset.targets), preset.constants_check)
    stamp = (now or _dt.datetime.now().astimezone()).isoformat(timespec="seconds")
    return Sheet(preset.axis.name, gains.name, profile.name, profile.description, stamp, core.__version__,
                 preset_sha256(preset), axis_sha256(preset), gains, bases, tuple(rows), result,
                 tuple(result.flags) + tuple(row_flags), CAUTION, _axis_lines(preset, bases))


# --- atomic writing ----------------------------------------------------------------------

def atomic_write(path: str | os.PathLike, write: Callable[[Path], None]) -> Path:
    """:func:`core.files.atomic_write` with errors naming the ``-o`` option."""
    return _atomic_write(path, write, "-o")


def _write_text(path, text: str) -> Path:
    def write(tmp: Path):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
    return atomic_write(path, write)


# --- CSV and XLSX ------------------------------------------------------------------------

ROW_HEADER = ("label", "gain", "form", "SI value", "SI unit", "drive value (exact)", "drive value", "drive unit",
              "min", "max", "flags")


def header_block(s: Sheet) -> list[tuple[str, str]]:
    """The header lines every export starts with: (key, value)."""
    lines = [("title", "Loopwright drive configuration sheet")]
    if s.attention:
        lines.append(("attention", s.attention))
    lines += [("axis", s.axis_name), ("gain set", s.gain_set_name), ("date", s.created),
              ("program version", f"Loopwright {s.program_version}"), ("preset sha256", s.preset_sha256),
              ("profile", f"{s.profile_name}: {s.profile_description}".strip().rstrip(":")),
              ("current convention", f"drive amperes are A {s.bases.current_convention}"),
              ("caution", s.caution)]
    return lines


def _limit(x: float) -> str:
    return "" if math.isinf(x) else f"{x:g}"


def table_rows(s: Sheet) -> list[list[str]]:
    """The sheet's rows as text cells, in :data:`ROW_HEADER` order."""
    out = []
    for r in s.rows:
        si = "off" if math.isinf(r.si_value) else ("n/a" if math.isnan(r.si_value) else repr(r.si_value))
        exact = "off" if math.isinf(r.drive_value) else ("n/a" if math.isnan(r.drive_value) else f"{r.drive_value:.10g}")
        out.append([r.label, r.gain, r.form_text, si, r.si_unit, exact, r.text, r.drive_unit, _limit(r.minimum),
                    _limit(r.maximum), " | ".join(f"[{f.severity}] {f.message}" for f in r.flags)])
    return out


def sheet_csv(s: Sheet) -> str:
    """The sheet as CSV text: header block, a blank line, the row table, the flags, the caution."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    for key, value in header_block(s):
        w.writerow([key, value])
    w.writerow([])
    w.writerow(ROW_HEADER)
    w.writerows(table_rows(s))
    w.writerow([])
    w.writerow(["flags", str(len(s.flags))])
    for f in s.flags:
        w.writerow([f.severity, f.loop, f.message])
    w.writerow([])
    w.writerow(["caution", s.caution])
    return buf.getvalue()


def write_csv(s: Sheet, path) -> Path:
    """Write the sheet as CSV (UTF-8), atomically."""
    return _write_text(path, sheet_csv(s))


def write_xlsx(s: Sheet, path) -> Path:
    """Write the sheet as an XLSX workbook (one worksheet "sheet"), atomically."""
    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font, PatternFill

    wb = Workbook()
    ws = wb.active
    ws.title = "sheet"
    bold = Font(bold=True)
    for key, value in header_block(s):
        ws.append([key, value])
        ws.cell(ws.max_row, 1).font = bold
        if key in ("attention", "caution"):
            ws.cell(ws.max_row, 2).font = Font(bold=True, color="9C0006")
            ws.cell(ws.max_row, 2).alignment = Alignment(wrap_text=True)
    ws.append([])
    ws.append(list(ROW_HEADER))
    header_row = ws.max_row
    for c in ws[header_row]:
        c.font = bold
        c.fill = PatternFill("solid", fgColor="DDDDDD")
    for r, cells in zip(s.rows, table_rows(s)):
        ws.append(cells)
        # The drive value as a number too, so a spreadsheet can compute with it.
        if math.isfinite(r.rounded_value):
            ws.cell(ws.max_row, 7).value = r.rounded_value
        if r.flags:
            ws.cell(ws.max_row, 11).font = Font(color="9C0006")
    ws.append([])
    ws.append(["flags", len(s.flags)])
    ws.cell(ws.max_row, 1).font = bold
    for f in s.flags:
        ws.append([f.severity, f.loop, f.message])
    ws.append([])
    ws.append(["caution", s.caution])
    ws.cell(ws.max_row, 1).font = bold
    for col, width in zip("ABCDEFGHIJK", (34, 70, 28, 22, 12, 18, 14, 14, 8, 8, 60)):
        ws.column_dimensions[col].width = width
    return atomic_write(path, lambda tmp: wb.save(tmp))


# --- JSON, and back ----------------------------------------------------------------------

def gain_set_to_dict(g: GainSet) -> dict[str, Any]:
    """A gain set as JSON-ready data in SI, parallel form, model amperes (floats exact)."""
    return {
        "name": g.name, "note": g.note,
        "current": {"kp_v_per_a": g.current.pi.kp, "ki_v_per_a_s": g.current.pi.ki,
                    "decouple_back_emf": g.current.decouple_back_emf},
        "speed": {"kp_a_s_per_rad": g.speed.pi.kp, "ki_a_per_rad": g.speed.pi.ki,
                  "feedback_lowpass_hz": g.speed.feedback_lowpass_hz,
                  "notches": [{"centre_hz": n.centre_hz, "zeta_zero": n.zeta_zero, "zeta_pole": n.zeta_pole,
                               "place": n.place} for n in g.speed.notches]},
        "position": {"kp_per_s": g.position.kp_per_s, "ki_per_s2": g.position.ki_per_s2,
                     "velocity_ff": g.position.velocity_ff, "acceleration_ff": g.position.acceleration_ff},
    }


def _get(d: object, key: str, where: str, kind: type | tuple = float):
    if not isinstance(d, dict) or key not in d:
        raise InputError(f"{where}.{key}", "(missing)", "a value (the sheet is incomplete)")
    value = d[key]
    if kind is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"{where}.{key}", value, "a number")
        return float(value)
    if not isinstance(value, kind):
        raise InputError(f"{where}.{key}", value, f"a {kind.__name__}")
    return value


def gain_set_from_dict(d: object, where: str = "gain_set") -> GainSet:
    """The inverse of :func:`gain_set_to_dict`; InputError names the missing or bad field."""
    c, s, p = (_get(d, k, where, dict) for k in ("current", "speed", "position"))
    notches = tuple(Notch(_get(n, "centre_hz", f"{where}.speed.notches[{i}]"),
                          _get(n, "zeta_zero", f"{where}.speed.notches[{i}]"),
                          _get(n, "zeta_pole", f"{where}.speed.notches[{i}]"),
                          _get(n, "place", f"{where}.speed.notches[{i}]", str))
                    for i, n in enumerate(_get(s, "notches", f"{where}.speed", list)))
    return GainSet(
        current=CurrentGains(PI(_get(c, "kp_v_per_a", f"{where}.current"), _get(c, "ki_v_per_a_s", f"{where}.current")),
                             _get(c, "decouple_back_emf", f"{where}.current", bool)),
        speed=SpeedGains(PI(_get(s, "kp_a_s_per_rad", f"{where}.speed"), _get(s, "ki_a_per_rad", f"{where}.speed")),
                         _get(s, "feedback_lowpass_hz", f"{where}.speed"), notches),
        position=PositionGains(_get(p, "kp_per_s", f"{where}.position"), _get(p, "ki_per_s2", f"{where}.position"),
                               _get(p, "velocity_ff", f"{where}.position"),
                               _get(p, "acceleration_ff", f"{where}.position")),
        name=_get(d, "name", where, str), note=_get(d, "note", where, str))


def _num(x: float):
    return x if math.isfinite(x) else None


def sheet_to_json(s: Sheet) -> dict:
    """The sheet as JSON-ready data; ``gain_set`` holds the exact SI gains for re-import."""
    return {
        "format": SHEET_FORMAT, "format_version": SHEET_FORMAT_VERSION,
        "attention": s.attention, "axis": s.axis_name, "gain_set_name": s.gain_set_name, "date": s.created,
        "program_version": s.program_version, "preset_sha256": s.preset_sha256, "axis_sha256": s.axis_sha256,
        "profile": {"name": s.profile_name, "description": s.profile_description},
        "bases": {"current_convention": s.bases.current_convention, "rated_current_a": _num(s.bases.rated_current_a),
                  "rated_speed_rad_s": _num(s.bases.rated_speed_rad_s), "bus_voltage_v": s.bases.bus_voltage_v,
                  "counts_per_rev": s.bases.counts_per_rev},
        "rows": [{"label": r.label, "gain": r.gain, "form": r.form_text, "si_value": _num(r.si_value),
                  "si_unit": r.si_unit, "drive_value": _num(r.drive_value), "drive_unit": r.drive_unit,
                  "value": _num(r.rounded_value), "text": r.text, "min": _num(r.minimum), "max": _num(r.maximum),
                  "flags": [{"loop": f.loop, "severity": f.severity, "message": f.message} for f in r.flags]}
                 for r in s.rows],
        "gain_set": gain_set_to_dict(s.gains),
        "analysis": analysis_summary(s.analysis),
        "flags": [{"loop": f.loop, "severity": f.severity, "message": f.message} for f in s.flags],
        "caution": s.caution,
    }


def write_json(s: Sheet, path) -> Path:
    """Write the sheet as JSON (floats at repr precision), atomically."""
    return _write_text(path, json.dumps(sheet_to_json(s), indent=2, allow_nan=False) + "\n")


def import_sheet_json(path: str | os.PathLike, preset: Preset) -> GainSet:
    """The gain set stored in a JSON sheet, exactly as exported.

    Refused (InputError) when the file is not a sheet, or when it was made for
    another axis (its ``axis_sha256`` differs from the preset's).
    """
    path = Path(path)
    try:
        doc = json.loads(path.read_bytes().decode("utf-8"))
    except OSError as err:
        raise InputError("sheet", str(path), f"a readable JSON sheet ({err.strerror or err})") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        raise InputError("sheet", str(path), f"a JSON sheet written by Loopwright ({err})") from None
    if not isinstance(doc, dict) or doc.get("format") != SHEET_FORMAT:
        raise InputError("sheet.format", doc.get("format") if isinstance(doc, dict) else doc, f'"{SHEET_FORMAT}"')
    if doc.get("format_version") != SHEET_FORMAT_VERSION:
        raise InputError("sheet.format_version", doc.get("format_version"), str(SHEET_FORMAT_VERSION))
    mine = axis_sha256(preset)
    if doc.get("axis_sha256") != mine:
        raise InputError("sheet.axis_sha256", doc.get("axis_sha256"),
                         f"the axis of this preset ({preset.axis.name!r}, {mine[:12]}...): the sheet was made for "
                         f"axis {doc.get('axis')!r}")
    try:
        return gain_set_from_dict(doc.get("gain_set"), "sheet.gain_set")
    except InputError:
        raise
    except (TypeError, ValueError) as err:
        raise InputError("sheet.gain_set", "(as stored)", f"gains a gain set accepts ({err})") from None


# --- all formats -------------------------------------------------------------------------

def write_pdf(s: Sheet, path) -> Path:
    """Write the printable report (see :mod:`core.report_pdf`), atomically."""
    from core.report_pdf import write_report

    return atomic_write(path, lambda tmp: write_report(s, tmp))


def write_sheet(s: Sheet, path, fmt: str) -> Path:
    """Write the sheet in ``fmt`` ("csv", "xlsx", "json" or "pdf"), atomically."""
    writers = {"csv": write_csv, "xlsx": write_xlsx, "json": write_json, "pdf": write_pdf}
    if fmt not in writers:
        raise InputError("--format", fmt, "one of " + ", ".join(FORMATS))
    return writers[fmt](s, path)
