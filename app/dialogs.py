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


SHEET_FILTERS = {"csv": "CSV sheet (*.csv)", "xlsx": "Excel workbook (*.xlsx)", "json": "JSON sheet (*.json)",
                 "pdf": "PDF report (*.pdf)"}


def ask_text(parent: QWidget | None, title: str, label: str, text: str = "") -> str | None:
    """One line of text from the user (None when cancelled)."""
    from PySide6.QtWidgets import QInputDialog

    value, ok = QInputDialog.getText(parent, title, label, text=text)
    return value if ok else None


def confirm_export(parent: QWidget | None, gain_set: str, errors: list[str]) -> bool:
    """Second confirmation before exporting a gain set with error-level findings: True to export."""
    box = QMessageBox(QMessageBox.Icon.Warning, "Export a gain set with errors",
                      f"Gain set “{gain_set}” has {len(errors)} error-level finding(s):", parent=parent)
    box.setInformativeText("\n".join(f"• {e}" for e in errors[:8]) + ("\n…" if len(errors) > 8 else "")
                           + "\n\nExport it anyway? The sheet will list these findings at the top.")
    box.setStandardButtons(QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.Cancel)
    box.setDefaultButton(QMessageBox.StandardButton.Cancel)
    return box.exec() == QMessageBox.StandardButton.Yes


def open_profile_path(parent: QWidget | None, folder: str = "") -> str:
    """An export profile file ("" when cancelled)."""
    path, _ = QFileDialog.getOpenFileName(parent, "Export profile", folder,
                                          "Export profiles (*.toml);;All files (*)")
    return path


def export_path(parent: QWidget | None, suggested: str, fmt: str) -> str:
    """Where to write a sheet in ``fmt`` ("" when cancelled); the extension is added when missing."""
    path, _ = QFileDialog.getSaveFileName(parent, "Export sheet as", suggested,
                                          f"{SHEET_FILTERS.get(fmt, fmt)};;All files (*)")
    if path and not path.lower().endswith(f".{fmt}"):
        path += f".{fmt}"
    return path


def open_sheet_path(parent: QWidget | None, folder: str = "") -> str:
    """A JSON sheet to import ("" when cancelled)."""
    path, _ = QFileDialog.getOpenFileName(parent, "Import sheet", folder, f"{SHEET_FILTERS['json']};;All files (*)")
    return path
