"""Compared gain sets in columns: one row per loop and metric, differences from the baseline,
the better value of each row in bold with a marker (never colour alone)."""

from __future__ import annotations

import math

from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import QHeaderView, QLabel, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget

from app.theme import COMPARE_STYLES, LOOP_TITLES, MUTED, PAPER

BEST_MARK = "★"
BEST_ROLE = Qt.ItemDataRole.UserRole + 1
GROUP_TITLES = {**LOOP_TITLES, "load step": "Load step", "move": "Move", "flags": "Flags"}
# Dash patterns drawn as text in the column header, so a column names its curve style.
_DASH_TEXT = ("━━━", "━ ━ ━", "┅┅┅", "━ · ━", "━ · · ━", "╍╍╍")


def _prefix(value: float, unit: str) -> tuple[float, str]:
    """Factor and unit text with an engineering prefix for the units that span decades."""
    if unit == "s" and abs(value) < 1:
        return 1e3, " ms"
    if unit == "Hz" and abs(value) >= 1000:
        return 1e-3, " kHz"
    if unit.startswith("%") or not unit:
        return 1.0, unit[:1]
    return 1.0, f" {unit}"


def cell_text(value: float, delta: float, unit: str, is_base: bool, best: bool) -> str:
    """One table cell: the value, its difference from the baseline, the best-of-row marker."""
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        text = "none" if value > 0 else "−∞"
    else:
        factor, shown = _prefix(value, unit)
        text = f"{value * factor:.4g}{shown}"
        if not is_base and math.isfinite(delta) and delta != 0:
            text += f"  ({delta * factor:+.3g})"
    return f"{BEST_MARK} {text}" if best else text


class ComparisonTable(QWidget):
    """The metrics of a :class:`core.gainsets.Comparison`, one column per set."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        self.caption = QLabel()
        self.caption.setObjectName("comparison_caption")
        self.caption.setWordWrap(True)
        layout.addWidget(self.caption)
        self.table = QTableWidget()
        self.table.setObjectName("comparison_table")
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.table.setSelectionMode(QTableWidget.SelectionMode.NoSelection)
        self.table.verticalHeader().setDefaultSectionSize(20)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Fixed)
        layout.addWidget(self.table, 1)
        self.comparison = None
        self.show_comparison(None)

    def show_comparison(self, comparison) -> None:
        """Fill the table (None: say how to start a comparison)."""
        self.comparison = comparison
        table = self.table
        if comparison is None:
            table.setRowCount(0)
            table.setColumnCount(0)
            self.caption.setText("Tick two or more gain sets under “Gain sets” to compare them here and in "
                                 "every plot.")
            return
        names = comparison.sets
        table.setColumnCount(len(names) + 1)
        headers = ["metric"] + [f"{n}{' (baseline)' if n == comparison.baseline else ''}\n"
                                f"{_DASH_TEXT[i % len(_DASH_TEXT)]}" for i, n in enumerate(names)]
        table.setHorizontalHeaderLabels(headers)
        for i in range(len(names)):
            item = table.horizontalHeaderItem(i + 1)
            item.setForeground(QBrush(QColor(COMPARE_STYLES[i % len(COMPARE_STYLES)][0])))
        rows = comparison.rows
        table.setRowCount(len(rows))
        bold = QFont(table.font())
        bold.setBold(True)
        shade = QBrush(QColor(PAPER))
        group = None
        for r, row in enumerate(rows):
            unit = f" [{row.unit}]" if row.unit else ""  # in the tooltip: the cells carry their own units
            arrow = "↑" if row.better == "higher" else "↓"
            title = GROUP_TITLES.get(row.group, row.group)
            label = QTableWidgetItem(f"{title if row.group != group else ''}  {row.label} {arrow}".strip())
            label.setToolTip(f"{title}: {row.label}{unit} — {row.better} is better")
            label.setForeground(QBrush(QColor(MUTED)) if row.group == group else label.foreground())
            table.setItem(r, 0, label)
            striped = list(GROUP_TITLES).index(row.group) % 2 == 1 if row.group in GROUP_TITLES else False
            for c, (name, value, delta) in enumerate(zip(names, row.values, row.deltas)):
                best = name in row.best
                item = QTableWidgetItem(cell_text(value, delta, row.unit, name == comparison.baseline, best))
                item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                item.setData(BEST_ROLE, best)
                if best:
                    item.setFont(bold)
                    item.setToolTip(f"best of the row ({row.better} is better)")
                if striped:
                    item.setBackground(shade)
                table.setItem(r, c + 1, item)
            if striped:
                label.setBackground(shade)
            group = row.group
        header = table.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.ResizeMode.ResizeToContents)
        for c in range(1, len(names) + 1):
            header.setSectionResizeMode(c, QHeaderView.ResizeMode.Stretch)
        scenario = f"; move scenario “{comparison.scenario}”" if comparison.scenario else \
            "; move rows fill in once the move is simulated"
        self.caption.setText(f"{comparison.axis}: {len(names)} gain sets, differences (in brackets) against "
                             f"“{comparison.baseline}”{scenario}. {BEST_MARK} and bold: the better value of the "
                             "row (↑ higher is better, ↓ lower is better); “none”: the margin does not exist.")

    def column_of(self, name: str) -> int:
        """Table column of gain set ``name`` (tests)."""
        return 1 + self.comparison.sets.index(name)
