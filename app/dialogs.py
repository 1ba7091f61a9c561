"""Every modal question the window asks goes through here.

Tests replace these functions (``monkeypatch.setattr(app.dialogs, "show_error", ...)``)
so no dialog ever blocks a test run; the window never calls QMessageBox directly.
"""

from __future__ import annotations

from PySide6.QtWidgets import QFileDialog, QMessageBox, QWidget

PRESET_FILTER = "Loopwright presets (*.toml);;All files (*)"


def show_error(parent: QWidget | None, title: str, text: str) -> None:
    """Tell the user something failed (modal)."""
    QMessageBox.warning(parent, title, text)


def show_info(parent: QWidget | None, title: str, text: str) -> None:
    """An informational message (modal)."""
    QMessageBox.information(parent, title, text)


def ask_unsaved(parent: QWidget | None, name: str) -> str:
    """Ask what to do with unsaved changes: returns "save", "discard" or "cancel"."""
    box = QMessageBox(QMessageBox.Icon.Question, "Unsaved changes",
                      f"“{name}” has changes that are not saved.", parent=parent)
    box.setInformativeText("Save them before continuing?")
    box.setStandardButtons(QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard
                           | QMessageBox.StandardButton.Cancel)
    box.setDefaultButton(QMessageBox.StandardButton.Save)
    answer = box.exec()
    if answer == QMessageBox.StandardButton.Save:
        return "save"
    if answer == QMessageBox.StandardButton.Discard:
        return "discard"
    return "cancel"


def open_path(parent: QWidget | None, folder: str = "") -> str:
    """A preset file to open ("" when cancelled)."""
    path, _ = QFileDialog.getOpenFileName(parent, "Open preset", folder, PRESET_FILTER)
    return path


def save_path(parent: QWidget | None, suggested: str = "") -> str:
    """Where to save the preset ("" when cancelled)."""
    path, _ = QFileDialog.getSaveFileName(parent, "Save preset as", suggested, PRESET_FILTER)
    if path and not path.lower().endswith(".toml"):
        path += ".toml"
    return path
