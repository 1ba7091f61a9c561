"""The caution shown on first launch and in Help > About."""

from __future__ import annotations

from PySide6.QtCore import QSettings
from PySide6.QtWidgets import QCheckBox, QDialog, QDialogButtonBox, QLabel, QVBoxLayout, QWidget

from core.safety import CAUTION_LONG

CAUTION_TITLE = "Before you use these gains on a machine"

CAUTION_TEXT = CAUTION_LONG

ABOUT_TEXT = (
    "<h3>Loopwright</h3>"
    "<p>A workbench for tuning and checking cascaded servo loops: current, speed and position "
    "loops over a motor, load and drive model, with margins, responses and findings that "
    "follow every change.</p>"
    "<p><b>Caution.</b> " + CAUTION_TEXT.replace("\n\n", "</p><p>") + "</p>"
    "<p>Licence: MIT.</p>"
)

_SETTINGS_KEY = "caution/acknowledged"


class CautionDialog(QDialog):
    """The first-launch caution, with a box to stop showing it."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle(CAUTION_TITLE)
        self.setObjectName("CautionDialog")
        layout = QVBoxLayout(self)
        heading = QLabel(f"<b>{CAUTION_TITLE}</b>")
        body = QLabel(CAUTION_TEXT)
        body.setWordWrap(True)
        body.setMinimumWidth(460)
        self.dont_show = QCheckBox("I understand; do not show this again")
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok)
        buttons.accepted.connect(self.accept)
        for w in (heading, body, self.dont_show, buttons):
            layout.addWidget(w)


def caution_needed(settings: QSettings) -> bool:
    """True until the user has ticked "do not show this again"."""
    return settings.value(_SETTINGS_KEY, False, type=bool) is not True


def show_caution(parent: QWidget | None, settings: QSettings) -> None:
    """Show the caution (modal) and remember the user's choice."""
    dialog = CautionDialog(parent)
    dialog.exec()
    if dialog.dont_show.isChecked():
        settings.setValue(_SETTINGS_KEY, True)
