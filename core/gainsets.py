"""Named gain sets of a preset: edit them as values, and compare them side by side.

Every edit is a pure function ``Preset -> Preset`` (the preset is frozen; a new one
is built with :func:`dataclasses.replace`) and raises :class:`core.errors.InputError`
for a name that is empty, already taken or not there.

:func:`compare` analyses each set (and simulates the preset's first ``move``
scenario, when it has one) and lays the figures out as rows: one per loop and
metric, each knowing which direction is better, its difference from a baseline
set and which set is best.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Literal

from core.analysis import Analysis, analyse
from core.errors import InputError
from core.flags import targets_from_dict
from core.gains import GainSet
from core.margins import LOOPS
from core.presets import Preset

Better = Literal["higher", "lower"]

NAME_MAX_CHARS = 60
"""Longest gain-set name accepted (it heads a table column and a sheet)."""


# --- edits -------------------------------------------------------------------------------

def _checked_name(preset: Preset, name: object, field: str, taken_ok: str | None = None) -> str:
    if not isinstance(name, str) or not name.strip():
        raise InputError(field, name, "a non-empty name")
    name = name.strip()
    if len(name) > NAME_MAX_CHARS or any(ord(ch) < 32 for ch in name):
        raise InputError(field, name, f"one line of at most {NAME_MAX_CHARS} characters")
    if name != taken_ok and any(g.name == name for g in preset.gain_sets):
        raise InputError(field, name, "a name no other gain set of this preset has")
    return name


def _existing(preset: Preset, name: object, field: str) -> GainSet:
    for g in preset.gain_sets:
        if g.name == name:
            return g
    raise InputError(field, name, "one of the gain sets: " + (", ".join(g.name for g in preset.gain_sets) or "(none)"))


def add_gain_set(preset: Preset, name: str, note: str = "") -> Preset:
    """A preset with a new gain set copied from the active one, appended and made active.

    Parameters
    ----------
    preset : Preset
        Must have an active gain set to copy.
    name : str
        Name of the new set (stripped; must be new).
    note : str
        Its free-text note.

    Returns
    -------
    Preset
    """
    source = preset.active_gain_set
    if source is None:
        raise InputError("gain_sets", "(none)", "an active gain set to copy from")
    name = _checked_name(preset, name, "gain_set.name")
    new = source.renamed(name, note)
    return replace(preset, gain_sets=preset.gain_sets + (new,), active=name)


def duplicate_gain_set(preset: Preset, source: str, name: str) -> Preset:
    """A preset with a copy of ``source`` (note included) inserted after it as ``name``.

    The active set does not change.
    """
    original = _existing(preset, source, "gain_set")
    name = _checked_name(preset, name, "gain_set.name")
    sets = list(preset.gain_sets)
    sets.insert(sets.index(original) + 1, original.renamed(name))
    return replace(preset, gain_sets=tuple(sets))


def rename_gain_set(preset: Preset, old: str, new: str) -> Preset:
    """A preset where gain set ``old`` is called ``new`` (the active name follows)."""
    original = _existing(preset, old, "gain_set")
    new = _checked_name(preset, new, "gain_set.name", taken_ok=old)
    sets = tuple(g.renamed(new) if g is original else g for g in preset.gain_sets)
    return replace(preset, gain_sets=sets, active=new if preset.active == old else preset.active)


def delete_gain_set(preset: Preset, name: str) -> Preset:
    """A preset without gain set ``name``; the last set cannot be deleted.

    When the deleted set was active, the set before it becomes active (the first
    set when it was the first).
    """
    original = _existing(preset, name, "gain_set")
    if len(preset.gain_sets) == 1:
        raise InputError("gain_set", name, "another gain set to keep: a preset keeps at least one")
    index = preset.gain_sets.index(original)
    sets = preset.gain_sets[:index] + preset.gain_sets[index + 1:]
    active = preset.active
    if active == name:
        active = sets[max(index - 1, 0)].name
    return replace(preset, gain_sets=sets, active=active)


def set_active(preset: Preset, name: str) -> Preset:
    """A preset whose active gain set is ``name``."""
    _existing(preset, name, "active_gain_set")
    return preset if preset.active == name else replace(preset, active=name)


def set_note(preset: Preset, name: str, note: str) -> Preset:
    """A preset where gain set ``name`` carries ``note`` (free text)."""
    original = _existing(preset, name, "gain_set")
    if not isinstance(note, str):
        raise InputError("gain_set.note", note, "text")
    sets = tuple(g.renamed(g.name, note) if g is original else g for g in preset.gain_sets)
    return replace(preset, gain_sets=sets)


def replace_gain_set(preset: Preset, gains: GainSet) -> Preset:
    """A preset where the set named ``gains.name`` is replaced by ``gains`` (edited gains)."""
    original = _existing(preset, gains.name, "gain_set")
    return replace(preset, gain_sets=tuple(gains if g is original else g for g in preset.gain_sets))


# --- comparison --------------------------------------------------------------------------

@dataclass(frozen=True)
class MetricRow:
    """One figure of every compared set.

    Attributes
    ----------
    group : str
        "current", "speed", "position", "load step", "move" or "flags".
    metric : str
        Machine name with its unit, e.g. ``"phase_margin_deg"``.
    label : str
        Words for a table, e.g. "phase margin".
    unit : str
        Unit of ``values`` ("" for counts).
    better : {"higher", "lower"}
        Which direction is better.
    values : tuple of float
        One per compared set, in the comparison's order (NaN: not available;
        inf: the margin does not exist, e.g. no phase crossover).
    deltas : tuple of float
        ``value - baseline value`` per set (NaN when either is not finite).
    best : tuple of str
        Names of the sets with the best value; empty when no two values differ
        or none is available.
    """

    group: str
    metric: str
    label: str
    unit: str
    better: Better
    values: tuple[float, ...]
    deltas: tuple[float, ...]
    best: tuple[str, ...]


@dataclass(frozen=True)
class Comparison:
    """Gain sets of one preset side by side.

    Attributes
    ----------
    axis : str
        Axis name.
    sets : tuple of str
        Compared set names, in column order.
    baseline : str
        The set the deltas are taken against.
    scenario : str
        Name of the move scenario simulated ("" when the preset has none).
    rows : tuple of MetricRow
    analyses : tuple of Analysis
        One per set (for overlay plots).
    simulations : tuple
        One :class:`core.simulate.SimulationResult` per set, or all None without a scenario.
    """

    axis: str
    sets: tuple[str, ...]
    baseline: str
    scenario: str
    rows: tuple[MetricRow, ...]
    analyses: tuple[Analysis, ...]
    simulations: tuple

    def row(self, group: str, metric: str) -> MetricRow:
        """The row of ``group`` and ``metric`` (KeyError when absent)."""
        for r in self.rows:
            if r.group == group and r.metric == metric:
                return r
        raise KeyError((group, metric))


# (metric, label, unit, better): the figures of each loop, from its LoopMargins and StepResponse.
_LOOP_METRICS = (
    ("bandwidth_hz", "bandwidth", "Hz", "higher"),
    ("crossover_hz", "crossover", "Hz", "higher"),
    ("phase_margin_deg", "phase margin", "deg", "higher"),
    ("gain_margin_db", "gain margin", "dB", "higher"),
    ("sensitivity_peak", "Ms", "", "lower"),
    ("step_overshoot_pct", "step overshoot", "%", "lower"),
    ("step_settling_time_s", "step settling", "s", "lower"),
    ("flag_count", "flags", "", "lower"),
)


def _loop_value(a: Analysis, loop: str, metric: str) -> float:
    if metric == "step_overshoot_pct":
        return float(a.steps[loop].overshoot_pct)
    if metric == "step_settling_time_s":
        return float(a.steps[loop].settling_time_s)
    if metric == "flag_count":
        return float(sum(1 for f in a.flags if f.loop == loop))
    return float(getattr(a.margins[loop], metric))


def _first_move(preset: Preset) -> int | None:
    for i, s in enumerate(preset.scenarios):
        if s.get("kind") == "move":
            return i
    return None


def _best(names: tuple[str, ...], values: tuple[float, ...], better: Better) -> tuple[str, ...]:
    usable = [v for v in values if not math.isnan(v)]
    if len(usable) < 2 or min(usable) == max(usable):
        return ()
    target = max(usable) if better == "higher" else min(usable)
    return tuple(n for n, v in zip(names, values) if v == target)


def _row(group, metric, label, unit, better, names, values, base_index) -> MetricRow:
    values = tuple(float(v) for v in values)
    base = values[base_index]
    deltas = tuple(v - base if math.isfinite(v) and math.isfinite(base) else math.nan for v in values)
    return MetricRow(group, metric, label, unit, better, values, deltas, _best(names, values, better))


def compare(preset: Preset, names: list[str] | tuple[str, ...] | None = None, baseline: str | None = None,
            simulate_move: bool = True) -> Comparison:
    """Analyse gain sets of ``preset`` and lay their figures side by side.

    Parameters
    ----------
    preset : Preset
    names : sequence of str, optional
        Sets to compare, in column order (default: all, in file order). Duplicates
        and unknown names raise InputError.
    baseline : str, optional
        Set the deltas are taken against (default: the first compared set); it
        must be one of ``names``.
    simulate_move : bool
        Simulate the first scenario of kind "move" for peak current and voltage
        (about 0.1 to 0.5 s per set); when False, or without such a scenario, those
        rows hold NaN. The rows are the same either way.

    Returns
    -------
    Comparison
    """
    if not preset.gain_sets:
        raise InputError("gain_sets", "(none)", "at least one gain set to compare")
    if names is None:
        names = tuple(g.name for g in preset.gain_sets)
    names = tuple(names)
    if not names:
        raise InputError("--sets", "", "one or more gain-set names")
    if len(set(names)) != len(names):
        raise InputError("--sets", ",".join(names), "each gain set named once")
    sets = tuple(_existing(preset, n, "--sets") for n in names)
    baseline = names[0] if baseline is None else baseline
    if baseline not in names:
        raise InputError("--baseline", baseline, "one of the compared sets: " + ", ".join(names))

    targets = targets_from_dict(preset.targets)
    analyses = tuple(analyse(preset.axis, g, targets, preset.constants_check) for g in sets)
    index = _first_move(preset) if simulate_move else None
    if index is not None:
        from core.simulate import simulate_preset_scenario  # numba start-up only when needed

        simulations = tuple(simulate_preset_scenario(preset, g, index) for g in sets)
        scenario = str(preset.scenarios[index]["name"])
    else:
        simulations, scenario = tuple(None for _ in sets), ""
    return comparison_of(preset.axis, names, baseline, analyses, simulations, scenario)


def comparison_of(axis, names, baseline: str, analyses, simulations=None, scenario: str = "") -> Comparison:
    """Lay already computed results of gain sets side by side (what :func:`compare` returns).

    For front ends that keep the analyses of unchanged sets: nothing is recomputed here.

    Parameters
    ----------
    axis : Axis
        The axis the sets were analysed on (its name heads the table; its motor kind names the ampere).
    names : sequence of str
        Set names, in column order, one per analysis.
    baseline : str
        One of ``names``: the set the deltas are taken against.
    analyses : sequence of Analysis
        One per set.
    simulations : sequence, optional
        One :class:`core.simulate.SimulationResult` or None per set (None: the move rows
        of that set hold NaN); default all None.
    scenario : str
        Name of the simulated move scenario ("" when none).

    Returns
    -------
    Comparison
    """
    names, analyses = tuple(names), tuple(analyses)
    simulations = tuple(simulations) if simulations is not None else tuple(None for _ in names)
    if not names or len(analyses) != len(names) or len(simulations) != len(names):
        raise InputError("analyses", len(analyses), f"one analysis and one simulation slot per set ({len(names)})")
    if baseline not in names:
        raise InputError("--baseline", baseline, "one of the compared sets: " + ", ".join(names))
    b = names.index(baseline)

    rows = []
    for loop in LOOPS:
        for metric, label, unit, better in _LOOP_METRICS:
            rows.append(_row(loop, metric, label, unit, better, names,
                             [_loop_value(a, loop, metric) for a in analyses], b))
    # The load-step dip is signed (a drop is negative); its size is what matters.
    rows.append(_row("load step", "speed_dip_rad_s", "speed dip", "rad/s", "lower", names,
                     [abs(a.load_step.speed_dip_rad_s) for a in analyses], b))
    rows.append(_row("load step", "recovery_time_s", "recovery", "s", "lower", names,
                     [a.load_step.recovery_time_s for a in analyses], b))

    def sim(attr):
        return [math.nan if s is None else getattr(s.metrics, attr) for s in simulations]

    amp = "A peak" if axis.motor.kind == "pmsm" else "A"  # the model's ampere
    rows.append(_row("move", "peak_current_a", "peak current", amp, "lower", names, sim("peak_current_a"), b))
    rows.append(_row("move", "peak_voltage_pct", "peak voltage", "% of available", "lower", names,
                     sim("peak_voltage_pct"), b))
    rows.append(_row("move", "flag_count", "flags", "", "lower", names,
                     [math.nan if s is None else len(s.flags) for s in simulations], b))
    rows.append(_row("flags", "error_count", "errors", "", "lower", names,
                     [sum(f.severity == "error" for f in a.flags) for a in analyses], b))
    rows.append(_row("flags", "flag_count", "all analysis flags", "", "lower", names,
                     [len(a.flags) for a in analyses], b))
    return Comparison(axis.name, names, baseline, scenario, tuple(rows), analyses, simulations)


# --- output ------------------------------------------------------------------------------

def _num(x: float):
    return None if not math.isfinite(x) else float(x)


def comparison_to_json(comparison: Comparison) -> dict:
    """The comparison as JSON-ready data (``loopwright compare --json``).

    ``{"axis", "sets": [..], "baseline", "scenario", "rows": [{"group", "metric", "label",
    "unit", "better", "values": {set: v}, "deltas": {set: d}, "best": [sets]}]}``; a value
    that is not finite (no margin, not simulated) is null.
    """
    rows = [{"group": r.group, "metric": r.metric, "label": r.label, "unit": r.unit, "better": r.better,
             "values": {n: _num(v) for n, v in zip(comparison.sets, r.values)},
             "deltas": {n: _num(d) for n, d in zip(comparison.sets, r.deltas)},
             "best": list(r.best)} for r in comparison.rows]
    return {"axis": comparison.axis, "sets": list(comparison.sets), "baseline": comparison.baseline,
            "scenario": comparison.scenario, "rows": rows}


def _cell(value: float, delta: float, is_base: bool) -> str:
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        return "none" if value > 0 else "-inf"
    text = f"{value:.4g}"
    if not is_base and math.isfinite(delta) and delta != 0:
        text += f" ({delta:+.3g})"
    return text


def comparison_table(comparison: Comparison) -> str:
    """A plain-text table: one column per set, ``*`` marks the best value of each row.

    Columns other than the baseline show the difference from it in brackets;
    "none" is a margin that does not exist (no crossover), "n/a" a figure not computed.
    """
    names = comparison.sets
    b = names.index(comparison.baseline)
    header = ["group", "metric"] + [f"{n}{' (baseline)' if i == b else ''}" for i, n in enumerate(names)]
    lines = [header]
    for r in comparison.rows:
        label = f"{r.label} [{r.unit}]" if r.unit else r.label
        cells = [("*" if n in r.best else " ") + _cell(v, d, i == b)
                 for i, (n, v, d) in enumerate(zip(names, r.values, r.deltas))]
        lines.append([r.group, f"{label} ({r.better} better)"] + cells)
    widths = [max(len(row[i]) for row in lines) for i in range(len(header))]
    out = [f"{comparison.axis}: {len(names)} gain set(s), baseline '{comparison.baseline}'"
           + (f", move scenario '{comparison.scenario}'" if comparison.scenario else ", no move scenario")]
    for k, row in enumerate(lines):
        out.append("  ".join(c.ljust(w) if i < 2 else c.rjust(w) for i, (c, w) in enumerate(zip(row, widths))).rstrip())
        if k == 0:
            out.append("  ".join("-" * w for w in widths))
    out.append("* best of the row; (+x) difference from the baseline")
    return "\n".join(out)
