"""One gain: a slider (log-scaled where the range spans decades) and a typed value."""

from __future__ import annotations

import math

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QGridLayout, QLabel, QSlider, QWidget

from app.panels.quantity_edit import QuantityEdit
from app.signals import signals_blocked

STEPS = 1000
"""Slider positions over the range: a keyboard step is 1/1000 of it."""


class GainControl(QWidget):
    """Slider + field for one gain, in SI gain units.

    Keyboard: arrows on the slider move one step (0.1 % of the range, about 0.6 % of
    the value on a 400:1 log range), Page Up/Down fifty; Up/Down in the field change
    the value by 1 % (Shift: 10 %).

    Signals
    -------
    value_changed(float)
        The user moved the slider or entered a value.
    drag_started(), drag_finished()
    """

    value_changed = Signal(float)
    drag_started = Signal()
    drag_finished = Signal()

    def __init__(self, path: str, label: str, unit: str, log: bool = True, allow_zero: bool = False,
                 span: float = 20.0, linear_range: tuple[float, float] = (0.0, 1.5),
                 tooltip: str = "", parent: QWidget | None = None):
        super().__init__(parent)
        self.path, self.log, self.allow_zero, self.span = path, log, allow_zero, span
        self.lo, self.hi = linear_range
        self._value = math.nan
        self.setObjectName(f"gain:{path}")
        self.label = QLabel(label)
        self.label.setToolTip(tooltip)
        self.label.setMinimumWidth(86)
        self.slider = QSlider(Qt.Orientation.Horizontal)
        self.slider.setRange(0, STEPS)
        self.slider.setSingleStep(1)
        self.slider.setPageStep(50)
        self.slider.setObjectName(f"slider:{path}")
        self.slider.setToolTip(tooltip)
        self.field = QuantityEdit(path, unit, unit)
        self.field.setObjectName(f"field:{path}")
        self.field.setFixedWidth(132)
        self.field.installEventFilter(self)
        self.reason = QLabel()
        self.reason.setProperty("role", "reason")
        self.reason.setWordWrap(True)
        self.reason.hide()
        grid = QGridLayout(self)
        grid.setContentsMargins(0, 1, 0, 1)
        grid.setHorizontalSpacing(6)
        grid.setVerticalSpacing(0)
        grid.addWidget(self.label, 0, 0)
        grid.addWidget(self.slider, 0, 1)
        grid.addWidget(self.field, 0, 2)
        grid.addWidget(self.reason, 1, 0, 1, 3)
        grid.setColumnStretch(1, 1)
        self.slider.valueChanged.connect(self._slider_moved)
        self.slider.sliderPressed.connect(self.drag_started)
        self.slider.sliderReleased.connect(self.drag_finished)
        self.field.value_entered.connect(self._entered)
        self.field.invalid_changed.connect(self._show_reason)

    # --- slider mapping -------------------------------------------------------------
    def centre_on(self, value: float) -> None:
        """Put ``value`` at the middle of a log range ``value/span .. value*span``."""
        if self.log and value > 0:
            self.lo, self.hi = value / self.span, value * self.span

    def value_at(self, position: int) -> float:
        if self.log:
            if self.allow_zero and position == 0:
                return 0.0
            return self.lo * (self.hi / self.lo) ** (position / STEPS)
        return self.lo + (self.hi - self.lo) * position / STEPS

    def position_of(self, value: float) -> int:
        if self.log:
            if value <= 0:
                return 0
            pos = STEPS * math.log(value / self.lo) / math.log(self.hi / self.lo)
        else:
            pos = STEPS * (value - self.lo) / (self.hi - self.lo)
        return int(round(min(max(pos, 0), STEPS)))

    # --- session -> widget ----------------------------------------------------------
    def set_value(self, value: float) -> None:
        """Show ``value`` (signals blocked); re-centres the range when it falls outside."""
        if value == self._value:
            return
        self._value = value
        if self.log and value > 0 and not (self.lo <= value <= self.hi):
            self.centre_on(value)
        with signals_blocked(self.slider, self.field):
            self.slider.setValue(self.position_of(value))
            self.field.set_value(value)

    @property
    def value(self) -> float:
        return self._value

    # --- widget -> session ----------------------------------------------------------
    def _slider_moved(self, position: int) -> None:
        value = self.value_at(position)
        if self.position_of(self._value) == position:
            return
        self.value_changed.emit(value)

    def _entered(self, value: float) -> None:
        self.value_changed.emit(value)

    def mark_invalid(self, reason: str) -> None:
        """Show a reason the session refused a value (the typed text stays)."""
        self.field.set_invalid(reason)

    def _show_reason(self, reason: str) -> None:
        self.reason.setText(reason)
        self.reason.setVisible(bool(reason))

    def step(self, factor: float) -> None:
        """Multiply (log) or nudge (linear) the value: the keyboard's fine adjustment."""
        v = self._value
        if self.log:
            new = v * factor if v > 0 else self.value_at(1)
        else:
            new = min(max(v + (self.hi - self.lo) * (factor - 1.0) / 10.0, self.lo), self.hi)
        self.value_changed.emit(new)

    def eventFilter(self, obj, event):  # noqa: N802 - Qt's name
        if obj is self.field and event.type() == event.Type.KeyPress:
            big = bool(event.modifiers() & Qt.KeyboardModifier.ShiftModifier)
            if event.key() == Qt.Key.Key_Up:
                self.step(1.10 if big else 1.01)
                return True
            if event.key() == Qt.Key.Key_Down:
                self.step(1 / 1.10 if big else 1 / 1.01)
                return True
        return super().eventFilter(obj, event)
