"""Targets & rules: the margins the checks hold the loops to, and the tuning rules' choices."""

from __future__ import annotations

from PySide6.QtWidgets import QComboBox, QFormLayout, QGroupBox, QVBoxLayout, QWidget

from app.panels.quantity_edit import QuantityEdit
from app.preset_mapping import target_value, tuning_value
from app.session import Session
from app.signals import signals_blocked
from core.tuning import CURRENT_RULES, SPEED_RULES

# (key, label, unit)
TARGET_ROWS = (
    ("current_phase_margin_min", "Current PM ≥", "deg"),
    ("speed_phase_margin_min", "Speed PM ≥", "deg"),
    ("position_phase_margin_min", "Position PM ≥", "deg"),
    ("current_gain_margin_min", "Current GM ≥", "dB"),
    ("speed_gain_margin_min", "Speed GM ≥", "dB"),
    ("position_gain_margin_min", "Position GM ≥", "dB"),
    ("ms_max", "Sensitivity peak Ms ≤", ""),
    ("separation_min", "Loop separation ≥", ""),
    ("step_overshoot_max", "Step overshoot ≤", "percent"),
)
TUNING_ROWS = (
    ("current_bandwidth", "Current bandwidth", "Hz"),
    ("current_phase_margin", "Current PM (PM rule)", "deg"),
    ("speed_separation", "Current / speed ratio", ""),
    ("symmetric_optimum_a", "Symmetric optimum a", ""),
    ("position_separation", "Speed / position ratio", ""),
)


class TargetsPanel(QWidget):
    """"Targets & rules" panel: edits the preset's [targets] and [tuning] tables."""

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.fields: dict[str, QuantityEdit] = {}
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        targets = QGroupBox("Pass / fail targets")
        form = QFormLayout(targets)
        for key, label, unit in TARGET_ROWS:
            edit = QuantityEdit(f"targets.{key}", "dimensionless" if unit == "percent" else unit, unit)
            edit.setObjectName(f"target:{key}")
            edit.value_entered.connect(lambda v, k=key, e=edit: self._target(k, v, e))
            form.addRow(label, edit)
            self.fields[key] = edit
        layout.addWidget(targets)
        rules = QGroupBox("Tuning rules")
        form = QFormLayout(rules)
        self.current_rule = QComboBox()
        self.current_rule.addItems(CURRENT_RULES)
        self.current_rule.setObjectName("tuning:current_rule")
        self.current_rule.currentTextChanged.connect(lambda t: self.session.set_tuning("current_rule", t))
        form.addRow("Current rule", self.current_rule)
        self.speed_rule = QComboBox()
        self.speed_rule.addItems(SPEED_RULES)
        self.speed_rule.setObjectName("tuning:speed_rule")
        self.speed_rule.currentTextChanged.connect(lambda t: self.session.set_tuning("speed_rule", t))
        form.addRow("Speed rule", self.speed_rule)
        for key, label, unit in TUNING_ROWS:
            edit = QuantityEdit(f"tuning.{key}", unit, unit)
            edit.setObjectName(f"tuning:{key}")
            edit.value_entered.connect(lambda v, k=key, e=edit: self._tuning(k, v, e))
            form.addRow(label, edit)
            self.fields[key] = edit
        layout.addWidget(rules)
        layout.addStretch(1)
        session.changed.connect(self.refresh)
        self._shown = None
        self.refresh()

    def refresh(self) -> None:
        state = (self.session.state.targets, self.session.state.tuning)
        if state == self._shown:
            return
        self._shown = state
        targets, tuning = self.session.targets_table, self.session.tuning_table
        for key, _label, _unit in TARGET_ROWS:
            self.fields[key].set_value(target_value(targets, key))
        for key, _label, _unit in TUNING_ROWS:
            self.fields[key].set_value(float(tuning_value(tuning, key)))
        with signals_blocked(self.current_rule, self.speed_rule):
            self.current_rule.setCurrentText(str(tuning_value(tuning, "current_rule")))
            self.speed_rule.setCurrentText(str(tuning_value(tuning, "speed_rule")))

    def _target(self, key: str, value: float, edit: QuantityEdit) -> None:
        reason = self.session.set_target(key, value)
        if reason:
            edit.set_invalid(reason)

    def _tuning(self, key: str, value: float, edit: QuantityEdit) -> None:
        reason = self.session.set_tuning(key, value)
        if reason:
            edit.set_invalid(reason)
