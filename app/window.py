"""The workbench window: assembles the panels and plots over one Session, and the menus.

Nothing here computes; see :mod:`app.session` for the state and the calls into core.
"""

from __future__ import annotations

import gc
import sys
from pathlib import Path

from PySide6.QtCore import QSettings, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (QApplication, QLabel, QMainWindow, QMessageBox, QScrollArea, QSplitter,
                               QTabWidget, QVBoxLayout, QWidget)

from app import warmup
from app import dialogs
from app.panels.axis_panel import AxisPanel
from app.panels.flags_panel import FlagsPanel
from app.panels.gain_sets_panel import GainSetsPanel
from app.panels.gains_panel import GainsPanel
from app.panels.targets_panel import TargetsPanel
from app.plots.plots_panel import PlotsPanel
from app.plots.robustness_view import RobustnessView
from app.recent import recent_files, remember
from app.safety import ABOUT_TEXT, caution_needed, show_caution
from app.session import Session
from app.theme import apply_theme
from core.errors import InputError
from core.presets import Preset, builtin_names, builtin_preset


def _scrolled(widget: QWidget) -> QScrollArea:
    area = QScrollArea()
    area.setWidget(widget)
    area.setWidgetResizable(True)
    area.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
    area.setFrameShape(QScrollArea.Shape.NoFrame)
    return area


class MainWindow(QMainWindow):
    """Left: Loop gains / Axis model / Targets & rules. Centre: Responses. Right: Findings."""

    def __init__(self, session: Session, settings: QSettings | None = None):
        super().__init__()
        self.session = session
        self.settings = settings if settings is not None else QSettings("Loopwright", "Loopwright")
        self.setObjectName("MainWindow")
        self.gains_panel = GainsPanel(session)
        self.gain_sets_panel = GainSetsPanel(session)
        self.axis_panel = AxisPanel(session)
        self.targets_panel = TargetsPanel(session)
        self.plots = PlotsPanel(session)
        self.robustness = RobustnessView(session)
        self.plots.addTab(self.robustness, "Robustness")
        self.flags_panel = FlagsPanel(session)
        self.editors = QTabWidget()
        self.editors.setObjectName("editors")
        self.editors.addTab(_scrolled(self.gains_panel), "Loop gains")
        self.editors.addTab(self.gain_sets_panel, "Gain sets")
        self.editors.addTab(_scrolled(self.axis_panel), "Axis model")
        self.editors.addTab(_scrolled(self.targets_panel), "Targets && rules")
        findings = QWidget()
        column = QVBoxLayout(findings)
        column.setContentsMargins(0, 0, 0, 0)
        title = QLabel("Findings")
        title.setProperty("role", "heading")
        title.setContentsMargins(8, 6, 0, 0)
        column.addWidget(title)
        column.addWidget(self.flags_panel)
        splitter = QSplitter(Qt.Orientation.Horizontal)
        splitter.addWidget(self.editors)
        splitter.addWidget(self.plots)
        splitter.addWidget(findings)
        splitter.setStretchFactor(0, 0)
        splitter.setStretchFactor(1, 1)
        splitter.setStretchFactor(2, 0)
        splitter.setSizes([390, 880, 330])
        splitter.setChildrenCollapsible(False)
        self.editors.setMinimumWidth(340)
        findings.setMinimumWidth(280)
        self.setCentralWidget(splitter)
        self.gains_panel.drag_started.connect(self.plots.hold_ranges)
        self.gains_panel.drag_finished.connect(self.plots.release_ranges)
        self.flags_panel.flag_selected.connect(self.plots.highlight)
        session.error.connect(lambda text: self.statusBar().showMessage(text, 8000))
        session.file_changed.connect(self._update_title)
        session.preset_loaded.connect(self._update_title)
        self._build_menus()
        self._update_title()
        self.resize(1600, 1000)

    # --- menus ----------------------------------------------------------------------
    def _action(self, menu, text: str, slot, shortcut=None) -> QAction:
        action = QAction(text, self)
        if shortcut is not None:
            action.setShortcut(shortcut)
        action.triggered.connect(slot)
        menu.addAction(action)
        return action

    def _build_menus(self) -> None:
        bar = self.menuBar()
        file_menu = bar.addMenu("&File")
        self._action(file_menu, "&Open preset…", self.open_dialog, QKeySequence.StandardKey.Open)
        self.recent_menu = file_menu.addMenu("Open &recent")
        self.builtin_menu = file_menu.addMenu("Open &built-in")
        for name in builtin_names():
            self._action(self.builtin_menu, name, lambda _=False, n=name: self.open_builtin(n))
        file_menu.addSeparator()
        self._action(file_menu, "&Save", self.save, QKeySequence.StandardKey.Save)
        self._action(file_menu, "Save &as…", self.save_as, QKeySequence.StandardKey.SaveAs)
        file_menu.addSeparator()
        self._action(file_menu, "&Export sheet…", self.export_sheet)
        self._action(file_menu, "&Import sheet (JSON)…", self.import_sheet)
        file_menu.addSeparator()
        self._action(file_menu, "&Quit", self.close, QKeySequence.StandardKey.Quit)
        edit = bar.addMenu("&Edit")
        undo = self.session.undo_stack.createUndoAction(self, "&Undo")
        undo.setShortcut(QKeySequence.StandardKey.Undo)
        redo = self.session.undo_stack.createRedoAction(self, "&Redo")
        redo.setShortcut(QKeySequence.StandardKey.Redo)
        edit.addAction(undo)
        edit.addAction(redo)
        self.undo_action, self.redo_action = undo, redo
        help_menu = bar.addMenu("&Help")
        self._action(help_menu, "&Safety caution…", lambda: show_caution(self, self.settings))
        self._action(help_menu, "&About Loopwright", self.about)
        self._fill_recent()

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        files = recent_files(self.settings)
        for path in files:
            self._action(self.recent_menu, path, lambda _=False, p=path: self.open_path(p))
        self.recent_menu.setEnabled(bool(files))

    def _update_title(self) -> None:
        mark = " •" if self.session.dirty else ""
        self.setWindowTitle(f"Loopwright — {self.session.display_name}{mark}")

    def export_sheet(self) -> None:
        """File > Export sheet…: the export dialog on the active gain set (modal)."""
        from app.export_dialog import ExportDialog

        dialog = ExportDialog(self.session, self)
        if dialog.exec() and dialog.written is not None:
            self.statusBar().showMessage(f"Exported {dialog.written}", 8000)

    def import_sheet(self) -> bool:
        """File > Import sheet (JSON)…: restore a sheet's gain set as a new, active gain set."""
        folder = str(self.session.path.parent) if self.session.path else ""
        path = dialogs.open_sheet_path(self, folder)
        if not path:
            return False
        reason = self.session.import_gain_set(path)
        if reason:
            dialogs.show_error(self, "Cannot import sheet", f"{Path(path).name}\n\n{reason}")
            return False
        self.statusBar().showMessage(f"Imported gain set “{self.session.active}” from {Path(path).name}", 8000)
        return True

    def about(self) -> None:
        QMessageBox.about(self, "About Loopwright", ABOUT_TEXT)

    # --- files ----------------------------------------------------------------------
    def _may_discard(self) -> bool:
        """True when there is nothing unsaved, or the user saved or chose to discard it."""
        if not self.session.dirty:
            return True
        answer = dialogs.ask_unsaved(self, self.session.display_name)
        if answer == "save":
            return self.save()
        return answer == "discard"

    def open_dialog(self) -> None:
        if not self._may_discard():
            return
        folder = str(self.session.path.parent) if self.session.path else ""
        path = dialogs.open_path(self, folder)
        if path:
            self.open_path(path, ask=False)

    def open_path(self, path: str | Path, ask: bool = True) -> bool:
        """Load a preset file; on any problem show why and leave the window as it was."""
        if ask and not self._may_discard():
            return False
        try:
            self.session.open_file(path)
        except InputError as err:
            dialogs.show_error(self, "Cannot open preset", f"{Path(path).name}\n\n{err}")
            return False
        remember(self.settings, path)
        self._fill_recent()
        return True

    def open_builtin(self, name: str) -> None:
        if not self._may_discard():
            return
        self.load(builtin_preset(name))

    def load(self, preset: Preset, path=None) -> None:
        self.session.load_preset(preset, path)

    def save(self) -> bool:
        if self.session.path is None or not str(self.session.path).endswith(".toml") or \
                self._is_builtin(self.session.path):
            return self.save_as()
        return self._write(self.session.path)

    def save_as(self) -> bool:
        suggested = str(self.session.path) if self.session.path and not self._is_builtin(self.session.path) \
            else f"{self.session.axis.name.replace(' ', '_').lower()}.toml"
        path = dialogs.save_path(self, suggested)
        return bool(path) and self._write(Path(path))

    def _write(self, path: Path) -> bool:
        try:
            written = self.session.save(path)
        except InputError as err:
            dialogs.show_error(self, "Cannot save preset", str(err))
            return False
        remember(self.settings, written)
        self._fill_recent()
        self.statusBar().showMessage(f"Saved {written}", 5000)
        return True

    @staticmethod
    def _is_builtin(path: Path) -> bool:
        return path.parent.name == "presets" and path.stem in builtin_names() and \
            (Path(__file__).resolve().parents[1] / "presets") == path.parent.resolve()

    def closeEvent(self, event):  # noqa: N802 - Qt's name
        if self._may_discard():
            self.robustness.cancel()       # a running sweep or auto-tune stops; nothing is applied
            self.robustness.wait(10000)
            event.accept()
        else:
            event.ignore()


def _application() -> QApplication:
    app = QApplication.instance()
    if app is None:
        app = QApplication(sys.argv[:1])
        app.setApplicationName("Loopwright")
        app.setOrganizationName("Loopwright")
    apply_theme(app)
    return app


def main_window(preset: Preset | None = None, settings: QSettings | None = None) -> MainWindow:
    """A window on ``preset`` (the demo when None), not yet shown; for tests and screenshots."""
    _application()
    session = Session(preset)
    session.flush()
    return MainWindow(session, settings)


def freeze_start_up_objects() -> None:
    """Collect once, then leave everything alive now out of later garbage collections.

    The window, its plot items and the loaded kernels are some 200,000 objects that live
    until the program ends; a full collection that scans them all stalls the window for
    about 0.1 s (measured here during a slider drag), one scanning only what came after
    them takes a few ms (``gc.freeze``, Python 3.7+)."""
    gc.collect()
    gc.freeze()


def _starting_notice() -> QLabel:
    """A small note shown while the first analysis runs: the first start after an install
    compiles the numerical kernels (about 15 s here, then about 0.6 s from the disk cache)."""
    notice = QLabel("Loopwright is starting.\n\nThe first start after installing compiles the "
                    "numerical kernels, which takes about a quarter of a minute; later starts are quick.")
    notice.setWindowFlags(Qt.WindowType.SplashScreen | Qt.WindowType.FramelessWindowHint)
    notice.setMargin(24)
    notice.show()
    QApplication.processEvents()
    return notice


def run(preset_path: str | None = None) -> int:
    """Open the window (on the demo preset or ``preset_path``), show the caution, run; exit code."""
    app = _application()
    warmup.start()
    notice = _starting_notice()
    window = main_window()
    if preset_path:
        if not window.open_path(preset_path, ask=False):
            print(f"loopwright: could not open {preset_path}; showing the demo preset", file=sys.stderr)
    window.show()
    notice.close()
    freeze_start_up_objects()
    if caution_needed(window.settings):
        QTimer.singleShot(0, lambda: show_caution(window, window.settings))
    return app.exec()
