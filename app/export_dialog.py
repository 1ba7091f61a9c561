"""File > Export sheet…: one gain set through one export profile into CSV, XLSX, JSON or PDF.

The dialog shows the sheet's rows and every active finding before anything is written; a
set with an error-level finding (from the analysis or from the sheet itself, such as a gain
that rounds to 0) is only written after :func:`app.dialogs.confirm_export` says yes. The
sheet and the file come from the session (``config_sheet``, ``write_sheet``), which writes
atomically through :mod:`core.export`.
"""

from __future__ import annotations

import math
from pathlib import Path

from PySide6.QtGui import QBrush, QColor
from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QFormLayout, QHBoxLayout, QHeaderView,
                               QLabel, QLineEdit, QListWidget, QPushButton, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from app import dialogs
from app.session import Session
from app.theme import SEVERITY_COLOURS
from core.errors import InputError
from core.export import FORMATS, builtin_profile_names, load_profile, resolve_profile
from core.safety import CAUTION

BROWSE = "Browse…"
SEVERITY_WORDS = {"error": "ERROR", "warning": "WARNING", "info": "NOTE"}
COLUMNS = ("row", "drive value", "drive unit", "form", "SI value", "findings")


def _si(value: float, unit: str) -> str:
    if math.isnan(value):
        return "—"
    if math.isinf(value):
        return "off"
    return f"{value:.5g} {unit}".strip()


class ExportDialog(QDialog):
    """Choose gain set, profile, format and file; see the rows and findings; export."""

    def __init__(self, session: Session, parent: QWidget | None = None, gain_set: str | None = None):
        super().__init__(parent)
        self.session = session
        self.setWindowTitle("Export drive configuration sheet")
        self.resize(920, 640)
        self.sheet = None
        self.written: Path | None = None
        self._profile_paths: dict[str, str] = {}
        layout = QVBoxLayout(self)
        form = QFormLayout()
        self.gain_set_box = QComboBox()
        self.gain_set_box.setObjectName("export_gain_set")
        self.gain_set_box.addItems([g.name for g in session.gain_sets])
        self.gain_set_box.setCurrentText(gain_set or session.active)
        form.addRow("Gain set", self.gain_set_box)
        self.profile_box = QComboBox()
        self.profile_box.setObjectName("export_profile")
        self.profile_box.addItems(builtin_profile_names() + [BROWSE])
        if "si" in builtin_profile_names():
            self.profile_box.setCurrentText("si")
        form.addRow("Profile", self.profile_box)
        self.profile_note = QLabel()
        self.profile_note.setProperty("role", "derived")
        self.profile_note.setWordWrap(True)
        form.addRow("", self.profile_note)
        self.format_box = QComboBox()
        self.format_box.setObjectName("export_format")
        self.format_box.addItems(list(FORMATS))
        form.addRow("Format", self.format_box)
        row = QHBoxLayout()
        self.path = QLineEdit()
        self.path.setObjectName("export_path")
        row.addWidget(self.path, 1)
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._choose_path)
        row.addWidget(browse)
        form.addRow("File", row)
        layout.addLayout(form)
        self.attention = QLabel()
        self.attention.setObjectName("export_attention")
        self.attention.setWordWrap(True)
        self.attention.setStyleSheet(f"color: {SEVERITY_COLOURS['error']}; font-weight: bold;")
        layout.addWidget(self.attention)
        self.rows = QTableWidget(0, len(COLUMNS))
        self.rows.setObjectName("export_rows")
        self.rows.setHorizontalHeaderLabels(list(COLUMNS))
        self.rows.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.rows.verticalHeader().setVisible(False)
        header = self.rows.horizontalHeader()
        for c in range(len(COLUMNS) - 1):
            header.setSectionResizeMode(c, QHeaderView.ResizeMode.ResizeToContents)
        header.setSectionResizeMode(len(COLUMNS) - 1, QHeaderView.ResizeMode.Stretch)
        layout.addWidget(self.rows, 3)
        heading = QLabel("Findings carried by the sheet")
        heading.setProperty("role", "heading")
        layout.addWidget(heading)
        self.findings = QListWidget()
        self.findings.setObjectName("export_findings")
        self.findings.setWordWrap(True)
        layout.addWidget(self.findings, 2)
        caution = QLabel(CAUTION)
        caution.setWordWrap(True)
        caution.setProperty("role", "derived")
        layout.addWidget(caution)
        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Cancel)
        self.export_button = self.buttons.addButton("Export", QDialogButtonBox.ButtonRole.AcceptRole)
        self.export_button.setObjectName("export_button")
        self.buttons.accepted.connect(self.export)
        self.buttons.rejected.connect(self.reject)
        layout.addWidget(self.buttons)
        self.gain_set_box.currentTextChanged.connect(self._gain_set_chosen)
        self.profile_box.currentTextChanged.connect(self._profile_chosen)
        self.format_box.currentTextChanged.connect(self._format_chosen)
        self._last_profile = self.profile_box.currentText()
        self._suggest_path()
        self.refresh()

    # --- choices --------------------------------------------------------------------
    @property
    def gain_set(self) -> str:
        return self.gain_set_box.currentText()

    @property
    def fmt(self) -> str:
        return self.format_box.currentText()

    def _profile(self):
        name = self.profile_box.currentText()
        if name in self._profile_paths:
            return load_profile(self._profile_paths[name])
        return resolve_profile(name)

    def _profile_chosen(self, name: str) -> None:
        if name != BROWSE:
            self._last_profile = name
            self.refresh()
            return
        path = dialogs.open_profile_path(self)
        self.profile_box.blockSignals(True)
        if path:
            label = Path(path).name
            self._profile_paths[label] = path
            if self.profile_box.findText(label) < 0:
                self.profile_box.insertItem(self.profile_box.count() - 1, label)
            self.profile_box.setCurrentText(label)
            self._last_profile = label
        else:
            self.profile_box.setCurrentText(self._last_profile)
        self.profile_box.blockSignals(False)
        self.refresh()

    def _suggest_path(self) -> None:
        folder = self.session.path.parent if self.session.path else Path.cwd()
        stem = f"{self.session.axis.name}_{self.gain_set}".replace(" ", "_").lower()
        self.path.setText(str(folder / f"{stem}.{self.fmt}"))

    def _gain_set_chosen(self, _name: str) -> None:
        self._suggest_path()
        self.refresh()

    def _format_chosen(self, fmt: str) -> None:
        text = self.path.text().strip()
        if text:
            self.path.setText(str(Path(text).with_suffix(f".{fmt}")))

    def _choose_path(self) -> None:
        path = dialogs.export_path(self, self.path.text(), self.fmt)
        if path:
            self.path.setText(path)

    # --- the sheet --------------------------------------------------------------------
    def refresh(self) -> None:
        """Build the sheet of the chosen set and profile and show its rows and findings."""
        self.rows.setRowCount(0)
        self.findings.clear()
        try:
            profile = self._profile()
            self.sheet = self.session.config_sheet(self.gain_set, profile)
        except InputError as err:
            self.sheet = None
            self.profile_note.setText("")
            self.attention.setText(f"Cannot build the sheet: {err}")
            self.export_button.setEnabled(False)
            return
        s = self.sheet
        self.profile_note.setText(s.profile_description)
        self.export_button.setEnabled(True)
        self.rows.setRowCount(len(s.rows))
        for r, row in enumerate(s.rows):
            words = "; ".join(f"{SEVERITY_WORDS.get(f.severity, f.severity)}: {f.message}" for f in row.flags)
            cells = (row.label, row.text, row.drive_unit, row.form_text, _si(row.si_value, row.si_unit), words)
            worst = "error" if any(f.severity == "error" for f in row.flags) else \
                "warning" if row.flags else None
            for c, text in enumerate(cells):
                item = QTableWidgetItem(text)
                item.setToolTip(text)
                if worst and c in (1, 5):
                    item.setForeground(QBrush(QColor(SEVERITY_COLOURS[worst])))
                self.rows.setItem(r, c, item)
        for f in s.flags:
            self.findings.addItem(f"{SEVERITY_WORDS.get(f.severity, f.severity)}  [{f.loop}] {f.message}")
        if not s.flags:
            self.findings.addItem("No finding: every margin, limit and sheet value passes its check.")
        errors = self.errors
        self.attention.setText(
            (f"{len(errors)} error-level finding(s): you will be asked to confirm before the file is written. "
             if errors else "") + (s.attention or ""))

    @property
    def errors(self) -> list[str]:
        """Error-level findings of the current sheet (analysis and rows)."""
        return [] if self.sheet is None else [f"[{f.loop}] {f.message}" for f in self.sheet.flags
                                              if f.severity == "error"]

    def export(self) -> Path | None:
        """Write the sheet (after the confirmation an error-level finding needs); the path, or None."""
        if self.sheet is None:
            return None
        target = self.path.text().strip()
        if not target:
            dialogs.show_error(self, "Export sheet", "Choose a file to write.")
            return None
        if self.errors and not dialogs.confirm_export(self, self.gain_set, self.errors):
            return None
        try:
            self.written = self.session.write_sheet(self.sheet, target, self.fmt)
        except InputError as err:
            dialogs.show_error(self, "Cannot export sheet", str(err))
            return None
        self.accept()
        return self.written
