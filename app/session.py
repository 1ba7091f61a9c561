"""The one object that owns what the user is working on and calls the core.

Widgets read from a :class:`Session` and write to it through its methods; it keeps
the model state (axis, gain sets, targets, tuning choices) as frozen core objects,
records every change on an undo stack, and recomputes the analysis once per burst
of edits on a zero-delay single-shot timer. Results leave through signals.
"""

from __future__ import annotations

import contextlib
import importlib
import math
from dataclasses import dataclass, replace
from pathlib import Path

from PySide6.QtCore import QObject, QTimer, Signal
from PySide6.QtGui import QUndoCommand, QUndoStack

from app import warmup
from app.preset_mapping import targets_from_table, tuning_from_table
from core.analysis import Analysis, analyse
from core.axis import Axis
from core.errors import InputError
from core.gains import GainSet
from core.motor import KT_KE_TOLERANCE, ConstantsCheck
from core.presets import Preset, builtin_names, builtin_preset, load_preset, save_preset
from core import export as core_export
from core import gainsets as core_gainsets
from core.tuning import Proposal, tune_current, tune_position, tune_speed

DEMO_PRESET = "belt_gantry"

# Gain paths the window edits: "loop.attribute" -> (gain-set part, attribute chain).
GAIN_PATHS = (
    "current.kp", "current.ki",
    "speed.kp", "speed.ki", "speed.feedback_lowpass_hz",
    "position.kp_per_s", "position.ki_per_s2", "position.velocity_ff", "position.acceleration_ff",
)


def demo_preset() -> Preset:
    """The embedded demo preset (the belt gantry, or the first built-in one)."""
    names = builtin_names()
    return builtin_preset(DEMO_PRESET if DEMO_PRESET in names else names[0])


def gain_value(gains: GainSet, path: str) -> float:
    """The value of one gain addressed by a :data:`GAIN_PATHS` entry."""
    loop, attr = path.split(".")
    part = getattr(gains, loop)
    if attr in ("kp", "ki"):
        return getattr(part.pi, attr)
    return getattr(part, attr)


def with_gain(gains: GainSet, path: str, value: float) -> GainSet:
    """A copy of ``gains`` with one gain changed (InputError when the value is refused)."""
    loop, attr = path.split(".")
    part = getattr(gains, loop)
    if attr in ("kp", "ki") and loop != "position":
        part = replace(part, pi=replace(part.pi, **{attr: value}))
    else:
        part = replace(part, **{attr: value})
    return replace(gains, **{loop: part})


@dataclass(frozen=True)
class ModelState:
    """Everything undo can bring back: one immutable snapshot of the user's model."""

    axis: Axis
    constants: ConstantsCheck
    gain_sets: tuple[GainSet, ...]
    active: str
    targets: tuple[tuple[str, float], ...]
    tuning: tuple[tuple[str, object], ...]
    tolerances: tuple[tuple[str, object], ...] = ()

    @property
    def gains(self) -> GainSet:
        """The active gain set."""
        for g in self.gain_sets:
            if g.name == self.active:
                return g
        return self.gain_sets[0]


class _StateCommand(QUndoCommand):
    """Moves the session between two snapshots; consecutive edits of one field merge."""

    def __init__(self, session: "Session", label: str, old: ModelState, new: ModelState, merge_id: int):
        super().__init__(label)
        self._session, self._old, self._new, self._merge_id = session, old, new, merge_id

    def id(self) -> int:  # noqa: A003 - Qt's name
        return self._merge_id

    def mergeWith(self, other: QUndoCommand) -> bool:  # noqa: N802 - Qt's name
        if not isinstance(other, _StateCommand) or other._merge_id != self._merge_id or self._merge_id < 0:
            return False
        self._new = other._new
        return True

    def redo(self) -> None:
        self._session._apply_state(self._new)

    def undo(self) -> None:
        self._session._apply_state(self._old)


def simulation_module():
    """:mod:`core.simulate` when it is installed, else None (the window then skips the move view)."""
    try:
        return importlib.import_module("core.simulate")
    except Exception:  # noqa: BLE001 - missing or broken: the window works without it
        return None


class Session(QObject):
    """State, undo and recompute for one open preset.

    Signals
    -------
    changed()
        The model state changed (any field); views re-read what they show.
    preset_loaded()
        A new preset replaced the old one (views may reset ranges).
    results_ready(Analysis)
        A recompute finished.
    simulation_ready(object)
        The time simulation of the selected scenario finished (when core.simulate exists).
    error(str)
        Something the user asked for could not be done; the text says why.
    comparison_ready(object)
        The compared gain sets side by side (a :class:`core.gainsets.Comparison`), or None
        when fewer than two sets are chosen for comparison.
    """

    changed = Signal()
    preset_loaded = Signal()
    results_ready = Signal(object)
    simulation_ready = Signal(object)
    error = Signal(str)
    comparison_ready = Signal(object)
    file_changed = Signal()

    def __init__(self, preset: Preset | None = None, parent: QObject | None = None):
        super().__init__(parent)
        self.undo_stack = QUndoStack(self)
        self.undo_stack.cleanChanged.connect(self._clean_changed)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(0)
        self._timer.timeout.connect(self.recompute)
        # The time simulation runs as a second stage, after the analysis has been shown.
        self._sim_timer = QTimer(self)
        self._sim_timer.setSingleShot(True)
        self._sim_timer.setInterval(0)
        self._sim_timer.timeout.connect(self.run_simulation)
        self.simulation_count = 0
        self._simulation_stale = False
        self._batch_depth = 0
        self._batch_dirty = False
        self._burst = 0
        self.recompute_count = 0
        self.analysis: Analysis | None = None
        self.simulation = None
        self.last_error = ""
        self.simulate_enabled = True
        self.scenario_name = ""
        self._sim = simulation_module()
        self.path: Path | None = None
        self._init_comparison()
        self.load_preset(preset if preset is not None else demo_preset())

    def _clean_changed(self, _clean: bool) -> None:
        self.file_changed.emit()

    # --- reading ------------------------------------------------------------------
    @property
    def state(self) -> ModelState:
        return self._state

    @property
    def axis(self) -> Axis:
        return self._state.axis

    @property
    def gains(self) -> GainSet:
        return self._state.gains

    @property
    def gain_sets(self) -> tuple[GainSet, ...]:
        return self._state.gain_sets

    @property
    def active(self) -> str:
        return self._state.active

    @property
    def targets_table(self) -> dict:
        return dict(self._state.targets)

    @property
    def tuning_table(self) -> dict:
        return dict(self._state.tuning)

    @property
    def preset(self) -> Preset:
        """The current state as a preset (what Save writes)."""
        s = self._state
        return replace(self._preset, axis=s.axis, constants_check=s.constants, gain_sets=s.gain_sets,
                       active=s.active, targets=dict(s.targets), tuning=dict(s.tuning),
                       tolerances=dict(s.tolerances))

    @property
    def dirty(self) -> bool:
        """True when there are changes since the last load or save."""
        return not self.undo_stack.isClean()

    @property
    def display_name(self) -> str:
        return self.path.name if self.path else f"{self.axis.name} (demo)"

    @property
    def scenarios(self) -> tuple[dict, ...]:
        return self._preset.scenarios

    @property
    def simulation_available(self) -> bool:
        return self._sim is not None

    # --- loading and saving -----------------------------------------------------------
    def load_preset(self, preset: Preset, path: Path | str | None = None) -> None:
        """Replace everything with ``preset``: one recompute, a fresh undo history."""
        gain_sets = preset.gain_sets
        if not gain_sets:
            raise InputError("gain_sets", "(none)", "at least one gain set to tune")
        self._preset = preset
        self.path = Path(path) if path is not None else None
        self._state = ModelState(preset.axis, preset.constants_check, gain_sets,
                                 preset.active or gain_sets[0].name,
                                 tuple(preset.targets.items()), tuple(preset.tuning.items()),
                                 tuple(preset.tolerances.items()))
        moves = [s.get("name", "") for s in preset.scenarios if s.get("kind") == "move"]
        self.scenario_name = moves[0] if moves else ""   # the first (gentle) move: a calm first look
        self._reset_comparison()
        self.undo_stack.clear()
        self.undo_stack.setClean()
        self.analysis = None
        self.simulation = None
        self.preset_loaded.emit()
        self._notify()

    def open_file(self, path: str | Path) -> None:
        """Load a preset file; on InputError nothing changes and the error propagates."""
        preset = load_preset(path)
        self.load_preset(preset, path)
        self.file_changed.emit()

    def save(self, path: str | Path | None = None) -> Path:
        """Write the current state (atomic); InputError when the file cannot be written."""
        target = Path(path) if path is not None else self.path
        if target is None:
            raise InputError("file", "(none)", "a file name: use Save As")
        written = save_preset(self.preset, target)
        self.path = written
        self._preset = replace(self.preset, source_path=written)
        self.undo_stack.setClean()
        self.file_changed.emit()
        return written

    # --- editing ------------------------------------------------------------------------
    @contextlib.contextmanager
    def batch(self):
        """Group edits: one ``changed`` and one recompute when the outermost batch ends."""
        self._batch_depth += 1
        try:
            yield self
        finally:
            self._batch_depth -= 1
            if self._batch_depth == 0 and self._batch_dirty:
                self._batch_dirty = False
                self._notify()

    def end_burst(self) -> None:
        """The current run of edits is over (a slider was released): the next edit is a new undo step."""
        self._burst += 1

    def _push(self, label: str, new: ModelState, merge_key: str | None = None) -> bool:
        if new == self._state:
            return False
        merge_id = -1 if merge_key is None else hash((merge_key, self._burst)) & 0x7FFFFFFF
        self.undo_stack.push(_StateCommand(self, label, self._state, new, merge_id))
        return True

    def _apply_state(self, state: ModelState) -> None:
        self._state = state
        if self._batch_depth:
            self._batch_dirty = True
        else:
            self._notify()

    def _notify(self) -> None:
        self.changed.emit()
        self.schedule()

    def _set_active_gains(self, gains: GainSet) -> ModelState:
        sets = tuple(gains if g.name == self._state.active else g for g in self._state.gain_sets)
        return replace(self._state, gain_sets=sets)

    def _refuse(self, err: InputError) -> str:
        self.last_error = str(err)
        self.error.emit(self.last_error)
        return self.last_error

    def set_gain(self, path: str, value: float) -> str | None:
        """Change one gain of the active set; returns the reason when it is refused."""
        if gain_value(self.gains, path) == value:
            return None
        try:
            gains = with_gain(self.gains, path, float(value))
        except InputError as err:
            return self._refuse(err)
        self._push(f"Set {path}", self._set_active_gains(gains), merge_key=f"gain:{path}")
        return None

    def set_gains(self, gains: GainSet, label: str = "Set gains") -> None:
        """Replace the active gain set's values (its name stays)."""
        self._push(label, self._set_active_gains(replace(gains, name=self.active)))

    def set_active_gain_set(self, name: str) -> None:
        """Switch which gain set is analysed."""
        if name == self.active or name not in [g.name for g in self.gain_sets]:
            return
        self._push(f"Use gain set {name}", replace(self._state, active=name))

    def set_axis_value(self, part: str, attr: str, value: object, typed: str | None = None) -> str | None:
        """Change one field of the motor, load or drive; returns the reason when refused.

        The model is only replaced when the new part constructs cleanly, so a bad
        value leaves the last good model in place. ``typed`` is the text as the user
        wrote it ("-5 mH"), quoted in the reason instead of the SI number.
        """
        axis = self.axis
        old_part = getattr(axis, part)
        if getattr(old_part, attr) == value and type(getattr(old_part, attr)) is type(value):
            return None
        try:
            new_part = replace(old_part, **{attr: value})
            new_axis = replace(axis, **{part: new_part})
            _ = new_axis.total_inertia_kgm2, new_axis.mechanical_time_constant_s  # reflected values must exist
        except InputError as err:
            return self._refuse(err if typed is None else InputError(err.field, typed, err.expected))
        except (ZeroDivisionError, OverflowError, ValueError, TypeError) as err:
            return self._refuse(InputError(f"{part}.{attr}", value if typed is None else typed,
                                           f"a value the model can use ({err})"))
        constants = self._state.constants
        if part == "motor" and attr in ("torque_constant_nm_per_a", "back_emf_v_s_per_rad", "kind"):
            constants = _constants_of(new_part)
        self._push(f"Set {part}.{attr}", replace(self._state, axis=new_axis, constants=constants),
                   merge_key=f"axis:{part}.{attr}")
        return None

    def set_axis_name(self, name: str) -> None:
        self._push("Rename axis", replace(self._state, axis=replace(self.axis, name=name)))

    def set_target(self, key: str, value: float) -> str | None:
        """Change one ``[targets]`` entry; returns the reason when the checks refuse it."""
        table = dict(self._state.targets)
        if table.get(key) == value:
            return None
        table[key] = float(value)
        try:
            targets_from_table(table)
        except InputError as err:
            return self._refuse(err)
        self._push(f"Set target {key}", replace(self._state, targets=tuple(table.items())), f"target:{key}")
        return None

    def set_tuning(self, key: str, value) -> str | None:
        """Change one ``[tuning]`` entry (a rule name or a ratio)."""
        table = dict(self._state.tuning)
        if table.get(key) == value:
            return None
        table[key] = value
        try:
            tuning_from_table(table)
        except InputError as err:
            return self._refuse(err)
        self._push(f"Set tuning {key}", replace(self._state, tuning=tuple(table.items())), f"tuning:{key}")
        return None

    def propose(self, loop: str) -> Proposal | None:
        """Set one loop's gains from the tuning rules; returns the rule and its rationale.

        The speed rule builds on the current loop as it is now, and the position rule on
        the speed loop's present crossover, so proposing loop by loop from the inside out
        gives the same as the rules applied to the whole cascade.
        """
        gains = self.gains
        try:
            settings = tuning_from_table(self.tuning_table, gains.speed.feedback_lowpass_hz)
            if loop == "current":
                pi, proposal = tune_current(self.axis, settings)
                new = replace(gains, current=replace(gains.current, pi=pi))
            elif loop == "speed":
                fc = self._crossover("current")
                pi, proposal = tune_speed(self.axis, gains.current.pi, settings, fc)
                new = replace(gains, speed=replace(gains.speed, pi=pi))
            else:
                fc = self._crossover("speed")
                if fc is None:
                    raise InputError("speed.crossover", "none", "a speed loop that crosses over (tune it first)")
                position, proposal = tune_position(self.axis, fc, settings)
                new = replace(gains, position=position)
        except InputError as err:
            self._refuse(err)
            return None
        self.set_gains(new, f"Propose {loop} gains")
        return proposal

    def _crossover(self, loop: str) -> float | None:
        if self.analysis is None or self._timer.isActive():
            self.flush()
        if self.analysis is None:
            return None
        fc = self.analysis.margins[loop].crossover_hz
        return fc if fc is not None and math.isfinite(fc) and fc > 0 else None

    # --- recompute ----------------------------------------------------------------------
    def schedule(self) -> None:
        """Ask for a recompute; many requests in one pass of the event loop give one."""
        if self._batch_depth:
            self._batch_dirty = True
            return
        if not self._timer.isActive():
            self._timer.start()

    def flush(self) -> None:
        """Run a pending recompute now (tests, benchmarks, and rules that need fresh margins)."""
        if self._timer.isActive():
            self._timer.stop()
            self.recompute()
        elif self.analysis is None:
            self.recompute()

    def recompute(self) -> None:
        """Analyse the current state and emit :attr:`results_ready` (the only place core runs)."""
        self.recompute_count += 1
        state = self._state
        try:
            targets = targets_from_table(dict(state.targets))
            result = analyse(state.axis, state.gains, targets, state.constants)
        except InputError as err:
            self._refuse(err)
            return
        except Exception as err:  # noqa: BLE001 - a core failure must not take the window down
            self._refuse(InputError("analysis", type(err).__name__, f"a model the analysis can solve ({err})"))
            return
        self.analysis = result
        self.results_ready.emit(result)
        self._compare(result)
        self._simulation_stale = True
        if self.simulate_enabled and self._sim is not None:
            self._sim_timer.start()

    def set_simulate_enabled(self, enabled: bool) -> None:
        """Turn the move simulation on or off (off while a slider is dragged and the move is not shown)."""
        self.simulate_enabled = enabled
        if enabled and self._sim is not None and self._simulation_stale:
            self._sim_timer.start()

    def run_simulation(self) -> None:
        """Simulate the chosen scenario with the current gains; emits :attr:`simulation_ready`.

        The result is a :class:`core.simulate.SimulationResult`, or an :class:`InputError`
        saying why the scenario could not run (the move view shows it; nothing else stops).
        """
        self._sim_timer.stop()
        if self._sim is None:
            return
        if not warmup.ready():
            # The kernel is still compiling in the background: look again shortly.
            self._simulation_stale = True
            self._sim_timer.start(100)
            return
        self._sim_timer.setInterval(0)
        index = next((i for i, s in enumerate(self._preset.scenarios) if s.get("name") == self.scenario_name), None)
        if index is None:
            return
        self._simulation_stale = False
        self.simulation_count += 1
        state = self._state
        try:
            result = self._sim.simulate_scenario(state.axis, state.gains, self._preset.scenarios[index],
                                                 f"scenarios[{index}]")
        except InputError as err:
            result = err
        except Exception as err:  # noqa: BLE001 - a simulation failure must not take the window down
            result = InputError("simulation", type(err).__name__, f"a scenario the simulation can run ({err})")
        self.simulation = None if isinstance(result, Exception) else result
        self.simulation_ready.emit(result)

    def set_scenario(self, name: str) -> None:
        """Choose which of the preset's scenarios the move view simulates."""
        if name != self.scenario_name:
            self.scenario_name = name
            self._simulation_stale = True
            if self._sim is not None:
                self._sim_timer.start()


    # --- robustness (issue 6): tolerances, auto-tuned sets, resonance notches ----------------------
    @property
    def tolerances_table(self) -> dict:
        return dict(self._state.tolerances)

    def tolerances(self):
        """The tolerances as :class:`core.tolerances.Tolerances` (InputError when the table is refused)."""
        from core.tolerances import tolerances_from_dict

        return tolerances_from_dict(self.tolerances_table, self.axis)

    def set_tolerance(self, name: str, low_pct: float, high_pct: float) -> str | None:
        """One tolerance as a low/high % deviation (0/0 removes it), one undo step; the reason when refused."""
        from core.tolerances import tolerances_from_dict

        table = self.tolerances_table
        if low_pct == 0 and high_pct == 0:
            table.pop(name, None)
        else:
            table[name] = [f"{low_pct:+g} %", f"{high_pct:+g} %"]
        try:
            tolerances_from_dict(table, self.axis)
        except InputError as err:
            return self._refuse(err)
        self._push(f"Tolerance of {name}", replace(self._state, tolerances=tuple(table.items())))
        return None

    def add_tuned_gain_set(self, gains: GainSet) -> str | None:
        """An auto-tuned set as a new, active gain set (core.gainsets add + replace), one undo step."""
        taken = {g.name for g in self.gain_sets}
        name, k = gains.name, 2
        while name in taken:
            name, k = f"{gains.name} {k}", k + 1

        def edit(p: Preset) -> Preset:
            p = core_gainsets.add_gain_set(p, name, gains.note)
            return core_gainsets.replace_gain_set(p, gains.renamed(name, gains.note))

        return self._edit_gain_sets(f"Auto-tuned gain set {name}", edit)

    def add_speed_notches(self, notches: tuple) -> str | None:
        """Append proposed notches to the active set's speed feedback, one undo step."""
        g = self.gains
        try:
            new = replace(g, speed=replace(g.speed, notches=g.speed.notches + tuple(notches)))
        except InputError as err:
            return self._refuse(err)
        self._push("Add resonance notch", self._set_active_gains(new))
        return None

    # --- gain sets, comparison and sheets ---------------------------------------------------
    def _edit_gain_sets(self, label: str, edit) -> str | None:
        """Apply ``edit(preset) -> preset`` (a :mod:`core.gainsets` edit) as one undo step.

        Returns the reason when the core refuses the edit (nothing changes then).
        """
        try:
            new = edit(self.preset)
        except InputError as err:
            return self._refuse(err)
        self._push(label, replace(self._state, gain_sets=new.gain_sets, active=new.active))
        return None

    def add_gain_set(self, name: str, note: str = "") -> str | None:
        """A new gain set copied from the active one, made active; the reason when refused."""
        return self._edit_gain_sets(f"New gain set {name}", lambda p: core_gainsets.add_gain_set(p, name, note))

    def duplicate_gain_set(self, source: str, name: str) -> str | None:
        """A copy of ``source`` called ``name``, placed after it."""
        return self._edit_gain_sets(f"Duplicate {source}",
                                    lambda p: core_gainsets.duplicate_gain_set(p, source, name))

    def rename_gain_set(self, old: str, new: str) -> str | None:
        """Rename a gain set (the comparison choice follows the new name)."""
        reason = self._edit_gain_sets(f"Rename {old}", lambda p: core_gainsets.rename_gain_set(p, old, new))
        if reason is None:
            new = new.strip()
            self._compared = tuple(new if n == old else n for n in self._compared)
            if self._baseline == old:
                self._baseline = new
        return reason

    def delete_gain_set(self, name: str) -> str | None:
        """Delete a gain set; the last one is kept (the reason says so)."""
        return self._edit_gain_sets(f"Delete gain set {name}", lambda p: core_gainsets.delete_gain_set(p, name))

    def set_gain_set_note(self, name: str, note: str) -> str | None:
        """Change a gain set's free-text note."""
        if any(g.name == name and g.note == note for g in self.gain_sets):
            return None
        return self._edit_gain_sets(f"Note of {name}", lambda p: core_gainsets.set_note(p, name, note))

    def import_gain_set(self, path: str | Path) -> str | None:
        """Restore the gain set of a JSON sheet as a new, active gain set; the reason when refused.

        The set keeps its stored name unless that is taken; then " (imported)" is added.
        """
        try:
            gains = core_export.import_sheet_json(path, self.preset)
        except InputError as err:
            return self._refuse(err)
        taken = {g.name for g in self.gain_sets}
        name, k = gains.name, 1
        while name in taken:
            name = f"{gains.name} (imported{'' if k == 1 else f' {k}'})"
            k += 1

        def edit(p: Preset) -> Preset:
            p = core_gainsets.add_gain_set(p, name, gains.note)
            return core_gainsets.replace_gain_set(p, gains.renamed(name))

        return self._edit_gain_sets(f"Import gain set {name}", edit)

    def config_sheet(self, name: str, profile) -> "core_export.Sheet":
        """The drive configuration sheet of gain set ``name`` through ``profile`` (InputError when refused)."""
        return core_export.sheet(self.preset, name, profile)

    def write_sheet(self, sheet, path: str | Path, fmt: str) -> Path:
        """Write ``sheet`` as ``fmt`` (csv, xlsx, json, pdf), atomically; InputError when it cannot."""
        return core_export.write_sheet(sheet, path, fmt)

    def _init_comparison(self) -> None:
        self._compared: tuple[str, ...] = ()
        self._baseline = ""
        self.comparison = None
        # Results of sets that are not being edited, kept by what they depend on (GainSet is hashable),
        # so a slider tick re-analyses only the active set.
        self._analysis_cache: dict = {}
        self._sim_cache: dict = {}
        self.simulation_ready.connect(self._simulate_compared)

    def _reset_comparison(self) -> None:
        self._compared, self._baseline, self.comparison = (), "", None
        self._analysis_cache.clear()
        self._sim_cache.clear()

    @property
    def compared(self) -> tuple[str, ...]:
        """Names of the gain sets chosen for comparison that still exist, in file order."""
        chosen = set(self._compared)
        return tuple(g.name for g in self.gain_sets if g.name in chosen)

    @property
    def baseline(self) -> str:
        """The compared set differences are taken against (the first compared one by default)."""
        names = self.compared
        return self._baseline if self._baseline in names else (names[0] if names else "")

    def set_compared(self, names) -> None:
        """Choose the gain sets to compare (two or more draw together); one recompute."""
        names = tuple(dict.fromkeys(names))
        if set(names) == set(self._compared):
            return
        self._compared = names
        self.schedule()

    def set_baseline(self, name: str) -> None:
        """Choose the set the comparison's differences are taken against."""
        if name != self._baseline:
            self._baseline = name
            if len(self.compared) > 1:
                self.schedule()

    @staticmethod
    def _remember(cache: dict, key, value, size: int = 24) -> None:
        cache[key] = value
        while len(cache) > size:
            cache.pop(next(iter(cache)))

    def _scenario_index(self) -> int | None:
        return next((i for i, s in enumerate(self._preset.scenarios) if s.get("name") == self.scenario_name), None)

    def _compare(self, active_analysis: Analysis) -> None:
        """Lay the compared sets side by side (only when two or more are chosen)."""
        names, state = self.compared, self._state
        if len(names) < 2:
            if self.comparison is not None:
                self.comparison = None
                self.comparison_ready.emit(None)
            return
        sets = {g.name: g for g in state.gain_sets}
        try:
            targets = targets_from_table(dict(state.targets))
            analyses = []
            for name in names:
                key = (state.axis, sets[name], state.targets, state.constants)
                if name == state.active:
                    result = active_analysis
                else:
                    result = self._analysis_cache.get(key)
                    if result is None:
                        result = analyse(state.axis, sets[name], targets, state.constants)
                self._remember(self._analysis_cache, key, result)
                analyses.append(result)
            sims = [self._sim_cache.get((state.axis, sets[n], self.scenario_name)) for n in names]
            self.comparison = core_gainsets.comparison_of(state.axis, names, self.baseline, analyses, sims,
                                                          self.scenario_name if any(sims) else "")
        except InputError as err:
            self._refuse(err)
            return
        except Exception as err:  # noqa: BLE001 - a core failure must not take the window down
            self._refuse(InputError("comparison", type(err).__name__, f"gain sets the analysis can solve ({err})"))
            return
        self.comparison_ready.emit(self.comparison)

    def _simulate_compared(self, active_result) -> None:
        """After the active set's move: the other compared sets' moves (cached), then the comparison again."""
        names, state = self.compared, self._state
        index = self._scenario_index()
        if len(names) < 2 or index is None or self._sim is None or self.comparison is None \
                or self.comparison.sets != names:
            return
        sets = {g.name: g for g in state.gain_sets}
        scenario = self._preset.scenarios[index]
        sims = []
        for name in names:
            key = (state.axis, sets[name], self.scenario_name)
            result = self._sim_cache.get(key)
            if name == state.active and not isinstance(active_result, Exception):
                result = active_result
            elif result is None:
                try:
                    result = self._sim.simulate_scenario(state.axis, sets[name], scenario, f"scenarios[{index}]")
                except Exception:  # noqa: BLE001 - that set's move rows stay empty
                    result = None
            if result is not None:
                self._remember(self._sim_cache, key, result)
            sims.append(result)
        self.comparison = core_gainsets.comparison_of(state.axis, names, self.baseline, self.comparison.analyses,
                                                      sims, self.scenario_name)
        self.comparison_ready.emit(self.comparison)


def _constants_of(motor) -> ConstantsCheck:
    """A Kt/Ke check for constants typed in the model convention (both count as given).

    Mirrors :func:`core.motor.motor_from_datasheet`: Kt = Ke for DC, 1.5 Ke for the
    amplitude-invariant dq frame.
    """
    implied = (1.0 if motor.kind == "dc" else 1.5) * motor.back_emf_v_s_per_rad
    rel = (motor.torque_constant_nm_per_a - implied) / implied
    return ConstantsCheck(motor.torque_constant_nm_per_a, implied, rel, abs(rel) <= KT_KE_TOLERANCE)
