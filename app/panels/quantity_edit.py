"""A line edit for one physical quantity: shows it in a chosen unit, accepts typed units.

"2.4 mH", "2.4e-3 H" and a bare "2.4" (read in the displayed unit) all give the same
value. Text that cannot be used stays as typed, marked, with the reason beside it.
"""

from __future__ import annotations

import math

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QLineEdit, QWidget

from core.errors import InputError
from core.units import convert, parse_quantity


def format_number(value: float, digits: int = 4) -> str:
    """Compact text for a number (no trailing noise)."""
    if value == 0:
        return "0"
    if not math.isfinite(value):
        return "∞" if value > 0 else ("-∞" if value < 0 else "—")
    return f"{value:.{digits}g}"


class QuantityEdit(QLineEdit):
    """Edits one value stored in ``si_unit`` and shown in ``display_unit``.

    Signals
    -------
    value_entered(float)
        The user finished editing and the text parsed; the value is in ``si_unit``.
    """

    value_entered = Signal(float)
    invalid_changed = Signal(str)

    def __init__(self, field: str, si_unit: str, display_unit: str | None = None,
                 integer: bool = False, parent: QWidget | None = None, digits: int = 4):
        super().__init__(parent)
        self.field = field
        self.si_unit = si_unit
        self.display_unit = display_unit if display_unit is not None else si_unit
        self.integer = integer
        self.digits = digits
        self._shown = ""
        self._value = math.nan
        self.reason = ""
        self.setProperty("invalid", False)
        self.editingFinished.connect(self._finish)
        self.setMinimumWidth(110)

    # --- display ----------------------------------------------------------------
    def text_for(self, value_si: float) -> str:
        if self.integer:
            return str(int(value_si))
        shown = value_si
        if self.display_unit != self.si_unit and math.isfinite(value_si):
            shown = convert(value_si, self.si_unit, self.display_unit)
        number = format_number(shown, self.digits)
        return f"{number} {self.display_unit}".strip() if self.display_unit else number

    def set_value(self, value_si: float) -> None:
        """Show ``value_si`` (the session pushing a value in); clears any mark."""
        self._value = value_si
        text = self.text_for(value_si)
        self.set_invalid("")
        if text != self.text():
            self.setText(text)
            self.setCursorPosition(0)
        self._shown = text

    @property
    def value(self) -> float:
        return self._value

    def set_invalid(self, reason: str) -> None:
        """Mark (or unmark) the field; the typed text is kept either way."""
        if reason == self.reason:
            return
        self.reason = reason
        self.setProperty("invalid", bool(reason))
        self.setToolTip(reason)
        self.style().unpolish(self)
        self.style().polish(self)
        self.invalid_changed.emit(reason)

    # --- input ------------------------------------------------------------------
    def parse(self, text: str) -> float:
        """The text as a value in ``si_unit`` (InputError when it cannot be)."""
        text = text.strip().replace("∞", "inf")
        try:
            bare = float(text)
        except ValueError:
            bare = None
        if bare is not None:
            if not math.isfinite(bare):
                raise InputError(self.field, text, f"a finite quantity in {self.display_unit or 'plain numbers'}")
            value = bare if self.display_unit == self.si_unit or not self.display_unit else \
                convert(bare, self.display_unit, self.si_unit)
        else:
            value = parse_quantity(text, self.si_unit or "dimensionless", self.field)
        if self.integer:
            if value != int(value):
                raise InputError(self.field, text, "a whole number")
            value = int(value)
        return value

    def _finish(self) -> None:
        text = self.text()
        if text == self._shown and not self.reason:
            return
        try:
            value = self.parse(text)
        except InputError as err:
            self.set_invalid(str(err))
            return
        self.set_invalid("")
        self.value_entered.emit(value)

    def keyPressEvent(self, event):  # noqa: N802 - Qt's name
        # Escape gives back the last good value.
        if event.key() == Qt.Key.Key_Escape and (self.reason or self.text() != self._shown):
            self.set_value(self._value)
            return
        super().keyPressEvent(event)
