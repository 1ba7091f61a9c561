"""A preset's stored [targets] and [tuning] tables as the core's settings dataclasses.

The conversion itself is the core's (:func:`core.flags.targets_from_dict`,
:func:`core.tuning.tuning_from_dict`); this module adds the defaults a panel shows
for keys the file leaves out.
"""

from __future__ import annotations

from dataclasses import fields, replace

from core.flags import Targets, targets_from_dict
from core.tuning import TuningSettings, tuning_from_dict

LOOPS = ("current", "speed", "position")

# preset [targets] key -> (Targets field, file value per field value) for the defaults shown
_TARGET_DEFAULTS = {
    **{f"{loop}_phase_margin_min": (f"{loop}_phase_margin_deg", 1.0) for loop in LOOPS},
    **{f"{loop}_gain_margin_min": (f"{loop}_gain_margin_db", 1.0) for loop in LOOPS},
    "ms_max": ("sensitivity_peak_max", 1.0),
    "separation_min": ("separation_min", 1.0),
    "step_overshoot_max": ("step_overshoot_max_pct", 0.01),  # the file stores a fraction
}
_TUNING_DEFAULTS = {
    "current_rule": "current_rule",
    "speed_rule": "speed_rule",
    "current_bandwidth": "current_bandwidth_hz",
    "current_phase_margin": "current_phase_margin_deg",
    "speed_separation": "current_to_speed_ratio",
    "symmetric_optimum_a": "symmetric_optimum_a",
    "position_separation": "speed_to_position_ratio",
}


def targets_from_table(table: dict) -> Targets:
    """:class:`Targets` from a preset's ``[targets]`` dict (InputError when out of range)."""
    return targets_from_dict(table)


def target_value(table: dict, key: str) -> float:
    """The value shown for a ``[targets]`` key: the file's, or what the checks default to."""
    if key in table:
        return float(table[key])
    name, scale = _TARGET_DEFAULTS[key]
    return float(getattr(Targets(), name)) * scale


def tuning_from_table(table: dict, speed_feedback_lowpass_hz: float = 0.0) -> TuningSettings:
    """:class:`TuningSettings` from a preset's ``[tuning]`` dict, with the speed loop's present
    feedback low-pass included in the lag the rules allow for."""
    return replace(tuning_from_dict(table), speed_feedback_lowpass_hz=speed_feedback_lowpass_hz)


def tuning_value(table: dict, key: str):
    """The value shown for a ``[tuning]`` key: the file's, or the rule's default."""
    if key in table:
        return table[key]
    defaults = {f.name: f.default for f in fields(TuningSettings)}
    return defaults[_TUNING_DEFAULTS[key]]


TARGET_KEYS = tuple(_TARGET_DEFAULTS)
TUNING_KEYS = tuple(_TUNING_DEFAULTS)
