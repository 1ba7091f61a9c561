"""Findings: every violation the core reports, per loop with its severity, and the loop figures."""

from __future__ import annotations

import math

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (QHeaderView, QLabel, QListWidget, QListWidgetItem, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from app.session import Session
from app.theme import LOOP_COLOURS, LOOP_TITLES, SEVERITY_COLOURS
from core.flagtypes import Flag

LOOPS = ("current", "speed", "position")
FIGURES = ("Crossover", "Phase margin", "Gain margin", "Ms", "Bandwidth", "Overshoot", "Settling")
SEVERITY_WORDS = {"error": "ERROR", "warning": "WARNING", "info": "NOTE"}
FLAG_ROLE = Qt.ItemDataRole.UserRole + 1


def _hz(f: float) -> str:
    if f is None or not math.isfinite(f):
        return "—"
    return f"{f / 1000:.3g} kHz" if f >= 1000 else f"{f:.3g} Hz"


def _figures(analysis, loop: str) -> tuple[str, ...]:
    m, st = analysis.margins[loop], analysis.steps[loop]
    pm = "∞" if not math.isfinite(m.phase_margin_deg) else f"{m.phase_margin_deg:.1f}°"
    gm = "∞" if not math.isfinite(m.gain_margin_db) else f"{m.gain_margin_db:.1f} dB"
    settle = st.settling_time_s
    settle_text = "—" if not math.isfinite(settle) else (f"{settle * 1e3:.3g} ms" if settle < 1 else f"{settle:.3g} s")
    return (_hz(m.crossover_hz), pm, gm, f"{m.sensitivity_peak:.2f}", _hz(m.bandwidth_hz),
            "< 0.01 %" if st.overshoot_pct < 0.01 else f"{st.overshoot_pct:.3g} %", settle_text)


class FlagsPanel(QWidget):
    """"Findings" panel.

    Signals
    -------
    flag_selected(object)
        The user picked a finding (a core Flag), or None.
    """

    flag_selected = Signal(object)

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        self.status = QLabel()
        self.status.setObjectName("flags_status")
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self.list = QListWidget()
        self.list.setObjectName("flags_list")
        self.list.setWordWrap(True)
        self.list.setAlternatingRowColors(False)
        self.list.currentItemChanged.connect(self._picked)
        layout.addWidget(self.list, 1)
        heading = QLabel("Loop figures")
        heading.setProperty("role", "heading")
        layout.addWidget(heading)
        self.table = QTableWidget(len(FIGURES), len(LOOPS))
        self.table.setObjectName("figures")
        self.table.setHorizontalHeaderLabels([LOOP_TITLES[l].replace(" loop", "") for l in LOOPS])
        self.table.setVerticalHeaderLabels(FIGURES)
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        for r in range(len(FIGURES)):
            for c, loop in enumerate(LOOPS):
                item = QTableWidgetItem("")
                item.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.table.setItem(r, c, item)
        for c, loop in enumerate(LOOPS):
            self.table.horizontalHeaderItem(c).setForeground(QBrush(QColor(LOOP_COLOURS[loop])))
        self.table.verticalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Fixed)
        self.table.verticalHeader().setDefaultSectionSize(24)
        self.table.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.table.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.table.setFixedHeight(24 * len(FIGURES) + self.table.horizontalHeader().sizeHint().height() + 4)
        layout.addWidget(self.table)
        self._flags = None
        self._status_colour = None
        self._shape = None
        self.flags: tuple = ()
        self.sim_flags: tuple = ()
        self.sim_title = ""
        session.results_ready.connect(self.show_results)
        session.simulation_ready.connect(self.show_simulation)
        session.preset_loaded.connect(self._forget_simulation)
        session.error.connect(self.show_error)
        if session.analysis is not None:
            self.show_results(session.analysis)

    @property
    def all_pass(self) -> bool:
        return not any(f.severity in ("error", "warning") for f in self.flags + self.sim_flags)

    def _forget_simulation(self) -> None:
        self.sim_flags, self.sim_title = (), ""

    def show_simulation(self, result) -> None:
        """Findings of the move simulation (or why it could not run), under their own heading."""
        if isinstance(result, Exception):
            flags = (Flag("axis", "warning", f"The scenario could not be simulated: {result}"),)
        else:
            flags = tuple(result.flags)
        title = f"Move — {self.session.scenario_name}"
        if flags == self.sim_flags and title == self.sim_title:
            return
        self.sim_flags, self.sim_title = flags, title
        self._render()

    def show_results(self, analysis) -> None:
        for c, loop in enumerate(LOOPS):
            for r, text in enumerate(_figures(analysis, loop)):
                item = self.table.item(r, c)
                if item.text() != text:
                    item.setText(text)
        if analysis.flags == self._flags:
            return
        self._flags = self.flags = analysis.flags
        self._render()

    def _render(self) -> None:
        """Status line and list from the current findings. While a gain is dragged the same
        findings come back with other numbers: the rows are then rewritten in place (the
        selection stays, nothing is laid out anew), and the list is rebuilt only when its
        rows change."""
        flags = self.flags
        if self.all_pass:
            status = "✔  All checks pass: every loop meets its margin, separation and sizing targets."
            colour = SEVERITY_COLOURS["ok"]
        else:
            both = flags + tuple(f for f in self.sim_flags if f.severity in ("error", "warning"))
            counts = {s: sum(f.severity == s for f in both) for s in ("error", "warning")}
            words = ", ".join(f"{n} {s}{'s' if n > 1 else ''}" for s, n in counts.items() if n)
            colour = SEVERITY_COLOURS["error" if counts["error"] else "warning"]
            status = f"▲  {words} — select one to see where it shows."
        if self.status.text() != status:
            self.status.setText(status)
        if colour != self._status_colour:
            self._status_colour = colour
            self.status.setStyleSheet(f"color: {colour}; font-weight: bold; padding: 4px;")
        rows = []
        for loop in LOOPS + ("axis",):
            mine = [f for f in flags if f.loop == loop]
            if mine:
                rows += self._group(LOOP_TITLES.get(loop, loop), LOOP_COLOURS.get(loop, "#444"), mine)
        if self.sim_flags:
            rows += self._group(self.sim_title, LOOP_COLOURS["axis"], self.sim_flags)
        self.list.blockSignals(True)
        shape = [(ink, flag is None) for _, ink, flag in rows]
        if shape != self._shape:
            self._shape = shape
            self.list.clear()
            for text, ink, flag in rows:
                item = QListWidgetItem(text)
                item.setForeground(QBrush(QColor(ink)))
                if flag is None:
                    font = QFont(item.font())
                    font.setBold(True)
                    item.setFont(font)
                    item.setFlags(Qt.ItemFlag.NoItemFlags)
                self.list.addItem(item)
        for row, (text, _ink, flag) in enumerate(rows):
            item = self.list.item(row)
            if item.text() != text:
                item.setText(text)
            if flag is not None:
                item.setData(FLAG_ROLE, flag)
        self.list.blockSignals(False)

    @staticmethod
    def _group(title: str, colour: str, flags) -> list[tuple[str, str, Flag | None]]:
        """A heading row (no flag) and one row per finding: (text, colour, flag)."""
        return [(title, colour, None)] + [
            (f"{SEVERITY_WORDS.get(f.severity, f.severity)}  {f.message}", SEVERITY_COLOURS.get(f.severity, "#444"), f)
            for f in flags]

    def show_error(self, text: str) -> None:
        self.status.setToolTip(text)

    def _picked(self, item, _previous) -> None:
        self.flag_selected.emit(item.data(FLAG_ROLE) if item is not None else None)
