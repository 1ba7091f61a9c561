"""Loop gains: a slider and a field per gain, grouped by loop, with a tuning-rule action per loop."""

from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QComboBox, QGroupBox, QHBoxLayout, QLabel, QPlainTextEdit, QPushButton,
                               QVBoxLayout, QWidget)

from app.panels.gain_control import GainControl
from app.session import Session, gain_value
from app.signals import signals_blocked
from app.theme import LOOP_COLOURS, LOOP_TITLES

# (path, label, unit, log, allow_zero, tooltip)
GAIN_ROWS = {
    "current": (
        ("current.kp", "Kp", "V/A", True, False, "Proportional gain of the current PI, V/A"),
        ("current.ki", "Ki", "V/(A*s)", True, True, "Integral gain of the current PI, V/(A·s)"),
    ),
    "speed": (
        ("speed.kp", "Kp", "A*s/rad", True, False, "Proportional gain of the speed PI, A per rad/s"),
        ("speed.ki", "Ki", "A/rad", True, True, "Integral gain of the speed PI, A/rad"),
        ("speed.feedback_lowpass_hz", "Feedback LP", "Hz", True, True,
         "First-order low-pass on the speed feedback, Hz (slider far left = off)"),
    ),
    "position": (
        ("position.kp_per_s", "Kp", "1/s", True, False, "Position gain, (rad/s)/rad"),
        ("position.ki_per_s2", "Ki", "1/s^2", True, True, "Position integral gain, 1/s²"),
        ("position.velocity_ff", "Velocity FF", "", False, False, "Velocity feedforward, fraction of the profile speed"),
        ("position.acceleration_ff", "Accel. FF", "", False, False,
         "Acceleration (inertia) feedforward, fraction of J·a/Kt"),
    ),
}


def _fallback_centre(path: str, gains) -> float:
    """Where to centre a slider whose gain is zero (no integral action yet)."""
    if path == "current.ki":
        return gains.current.pi.kp * 2000.0
    if path == "speed.ki":
        return gains.speed.pi.kp * 100.0
    if path == "position.ki_per_s2":
        return gains.position.kp_per_s ** 2 / 20.0
    return 1000.0  # feedback low-pass, Hz


class GainsPanel(QWidget):
    """"Loop gains" panel.

    Signals
    -------
    drag_started(), drag_finished()
        A slider is being dragged (plots hold their ranges meanwhile).
    """

    drag_started = Signal()
    drag_finished = Signal()

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.controls: dict[str, GainControl] = {}
        self.propose_buttons: dict[str, QPushButton] = {}
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        top = QHBoxLayout()
        top.addWidget(QLabel("Gain set"))
        self.gain_set_box = QComboBox()
        self.gain_set_box.setObjectName("gain_set_box")
        self.gain_set_box.currentTextChanged.connect(self._choose_set)
        top.addWidget(self.gain_set_box, 1)
        layout.addLayout(top)
        self.note = QLabel()
        self.note.setWordWrap(True)
        self.note.setProperty("role", "derived")
        layout.addWidget(self.note)
        for loop, rows in GAIN_ROWS.items():
            box = QGroupBox(LOOP_TITLES[loop])
            box.setStyleSheet(f"QGroupBox::title {{ color: {LOOP_COLOURS[loop]}; }}")
            inner = QVBoxLayout(box)
            inner.setSpacing(2)
            for path, label, unit, log, allow_zero, tip in rows:
                control = GainControl(path, label, unit, log=log, allow_zero=allow_zero, tooltip=tip,
                                      linear_range=(0.0, 1.5))
                control.value_changed.connect(lambda v, p=path: self._gain_changed(p, v))
                control.drag_started.connect(self.drag_started)
                control.drag_finished.connect(self._drag_finished)
                inner.addWidget(control)
                self.controls[path] = control
            button = QPushButton(f"Propose from rules")
            button.setObjectName(f"propose:{loop}")
            button.setToolTip(f"Set the {loop} gains from the tuning rule chosen under Targets & rules")
            button.clicked.connect(lambda _=False, lp=loop: self.propose(lp))
            row = QHBoxLayout()
            row.addStretch(1)
            row.addWidget(button)
            inner.addLayout(row)
            self.propose_buttons[loop] = button
            layout.addWidget(box)
        heading = QLabel("Rule rationale")
        heading.setProperty("role", "heading")
        layout.addWidget(heading)
        self.rationale = QPlainTextEdit()
        self.rationale.setObjectName("rationale")
        self.rationale.setReadOnly(True)
        self.rationale.setPlaceholderText("Press “Propose from rules” on a loop: the rule used and its "
                                          "numbers appear here.")
        self.rationale.setMinimumHeight(90)
        layout.addWidget(self.rationale, 1)
        session.changed.connect(self.refresh)
        session.preset_loaded.connect(self.reset_ranges)
        self.reset_ranges()

    # --- session -> widgets ---------------------------------------------------------
    def reset_ranges(self) -> None:
        """Centre every log slider on the loaded value (once per preset, not per tick)."""
        gains = self.session.gains
        for path, control in self.controls.items():
            value = gain_value(gains, path)
            control.centre_on(value if value > 0 else _fallback_centre(path, gains))
            control._value = None  # force the next set_value to redraw
        self.rationale.clear()
        self.refresh()

    def refresh(self) -> None:
        gains = self.session.gains
        for path, control in self.controls.items():
            control.set_value(gain_value(gains, path))
        names = [g.name for g in self.session.gain_sets]
        with signals_blocked(self.gain_set_box):
            if [self.gain_set_box.itemText(i) for i in range(self.gain_set_box.count())] != names:
                self.gain_set_box.clear()
                self.gain_set_box.addItems(names)
            self.gain_set_box.setCurrentText(self.session.active)
        if self.note.text() != gains.note:
            self.note.setText(gains.note)

    # --- widgets -> session ---------------------------------------------------------
    def _gain_changed(self, path: str, value: float) -> None:
        reason = self.session.set_gain(path, value)
        control = self.controls[path]
        if reason:
            control.mark_invalid(reason)

    def _drag_finished(self) -> None:
        self.session.end_burst()
        self.drag_finished.emit()

    def _choose_set(self, name: str) -> None:
        if name:
            self.session.set_active_gain_set(name)

    def propose(self, loop: str) -> None:
        """Apply the tuning rule for ``loop`` and show why."""
        proposal = self.session.propose(loop)
        if proposal is None:
            self.rationale.setPlainText(f"{LOOP_TITLES[loop]}: no proposal — {self.session.last_error}")
            return
        self.session.end_burst()
        self.rationale.setPlainText(f"{LOOP_TITLES[loop]} — rule “{proposal.rule}”:\n{proposal.rationale}")
