"""Gain sets: the preset's named sets with their notes; new, duplicate, rename, delete, make active,
edit the note; and which sets to compare, against which baseline.

Every edit goes through a :class:`app.session.Session` method (one undo step each); names come
from :func:`app.dialogs.ask_text`, so tests answer for the user.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QFont
from PySide6.QtWidgets import (QComboBox, QGridLayout, QHBoxLayout, QLabel, QLineEdit, QListWidget,
                               QListWidgetItem, QPushButton, QVBoxLayout, QWidget)

from app import dialogs
from app.session import Session
from app.signals import signals_blocked
from app.theme import PAPER

NAME_ROLE = Qt.ItemDataRole.UserRole + 1


def _free_name(taken: set[str], stem: str) -> str:
    name, k = stem, 2
    while name in taken:
        name, k = f"{stem} {k}", k + 1
    return name


class GainSetsPanel(QWidget):
    """"Gain sets" panel: a checkable list (ticked = compared), actions, the note and the baseline."""

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        heading = QLabel("Gain sets of this preset — tick two or more to compare them")
        heading.setProperty("role", "heading")
        heading.setWordWrap(True)
        layout.addWidget(heading)
        self.list = QListWidget()
        self.list.setObjectName("gain_sets_list")
        self.list.setWordWrap(True)
        self.list.setMinimumHeight(150)
        self.list.setAlternatingRowColors(True)
        self.list.setSpacing(1)
        self.list.setStyleSheet(f"QListWidget {{ alternate-background-color: {PAPER}; }}"
                                f"QListWidget::item {{ padding: 3px 2px; }}")
        self.list.itemChanged.connect(self._item_changed)
        self.list.itemDoubleClicked.connect(lambda item: self.make_active())
        self.list.currentItemChanged.connect(lambda *_: self._show_selected())
        layout.addWidget(self.list, 1)
        grid = QGridLayout()
        self.buttons: dict[str, QPushButton] = {}
        for i, (key, text, tip, slot) in enumerate((
                ("new", "New from active", "A new set copied from the active one, made active", self.new_set),
                ("duplicate", "Duplicate", "A copy of the selected set, placed after it", self.duplicate),
                ("rename", "Rename…", "Rename the selected set", self.rename),
                ("delete", "Delete", "Delete the selected set (a preset keeps at least one)", self.delete),
                ("activate", "Make active", "Edit and analyse the selected set (double-click does the same)",
                 self.make_active),
                ("all", "Compare all", "Tick every set", self.compare_all))):
            button = QPushButton(text)
            button.setObjectName(f"gain_set:{key}")
            button.setToolTip(tip)
            button.clicked.connect(lambda _=False, s=slot: s())
            grid.addWidget(button, i // 3, i % 3)
            self.buttons[key] = button
        layout.addLayout(grid)
        layout.addWidget(QLabel("Note of the selected set"))
        self.note = QLineEdit()
        self.note.setObjectName("gain_set_note")
        self.note.setPlaceholderText("what the set is for, how it was made")
        self.note.editingFinished.connect(self._note_edited)
        layout.addWidget(self.note)
        row = QHBoxLayout()
        row.addWidget(QLabel("Baseline"))
        self.baseline = QComboBox()
        self.baseline.setObjectName("baseline_box")
        self.baseline.setToolTip("The compared set the table's differences are taken against")
        self.baseline.currentTextChanged.connect(self._baseline_chosen)
        row.addWidget(self.baseline, 1)
        layout.addLayout(row)
        self.status = QLabel()
        self.status.setProperty("role", "derived")
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self._shown = None
        session.changed.connect(self.refresh)
        session.comparison_ready.connect(lambda _c: self.refresh())
        self.refresh()

    # --- session -> widgets ---------------------------------------------------------
    @property
    def selected(self) -> str:
        item = self.list.currentItem()
        return item.data(NAME_ROLE) if item is not None else self.session.active

    def refresh(self) -> None:
        s = self.session
        # A slider tick changes gains, not what this panel shows: skip the rebuild then.
        shown = (tuple((g.name, g.note) for g in s.gain_sets), s.active, s.compared, s.baseline)
        if shown == self._shown:
            return
        self._shown = shown
        current = self.selected
        compared = set(s.compared)
        bold = QFont(self.list.font())
        bold.setBold(True)
        with signals_blocked(self.list):
            self.list.clear()
            for g in s.gain_sets:
                active = g.name == s.active
                text = f"{g.name}{'   ● active' if active else ''}"
                if g.note:
                    text += f"\n{g.note}"
                item = QListWidgetItem(text)
                item.setData(NAME_ROLE, g.name)
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                item.setCheckState(Qt.CheckState.Checked if g.name in compared else Qt.CheckState.Unchecked)
                item.setToolTip(g.note or g.name)
                if active:
                    item.setFont(bold)
                self.list.addItem(item)
                if g.name == current:
                    self.list.setCurrentItem(item)
            if self.list.currentItem() is None and self.list.count():
                self.list.setCurrentRow(0)
        self.buttons["delete"].setEnabled(len(s.gain_sets) > 1)
        self._sync_compare()
        self._show_selected()

    def _sync_compare(self) -> None:
        s = self.session
        with signals_blocked(self.baseline):
            self.baseline.clear()
            self.baseline.addItems(list(s.compared))
            self.baseline.setCurrentText(s.baseline)
            self.baseline.setEnabled(len(s.compared) > 1)
        n = len(s.compared)
        self.status.setText("Not comparing: tick two or more sets." if n < 2 else
                            f"Comparing {n} sets against “{s.baseline}”: every plot draws them together; "
                            "the Compare tab lists their figures.")

    def _show_selected(self) -> None:
        name = self.selected
        note = next((g.note for g in self.session.gain_sets if g.name == name), "")
        if self.note.text() != note and not self.note.hasFocus():
            with signals_blocked(self.note):
                self.note.setText(note)
        self.buttons["activate"].setEnabled(name != self.session.active)

    def select(self, name: str) -> None:
        """Select the row of gain set ``name`` (tests, and after an edit)."""
        for i in range(self.list.count()):
            if self.list.item(i).data(NAME_ROLE) == name:
                self.list.setCurrentRow(i)
                return

    # --- widgets -> session ---------------------------------------------------------
    def _report(self, reason: str | None) -> bool:
        if reason:
            self.status.setText(reason)
        return not reason

    def _ask_name(self, title: str, default: str) -> str | None:
        name = dialogs.ask_text(self, title, "Name of the gain set", default)
        return name.strip() if name and name.strip() else None

    def new_set(self) -> None:
        taken = {g.name for g in self.session.gain_sets}
        name = self._ask_name("New gain set", _free_name(taken, f"{self.session.active} edit"))
        if name and self._report(self.session.add_gain_set(name, f"Copied from “{self.session.active}”.")):
            self.select(name)

    def duplicate(self) -> None:
        source = self.selected
        taken = {g.name for g in self.session.gain_sets}
        name = self._ask_name("Duplicate gain set", _free_name(taken, f"{source} copy"))
        if name and self._report(self.session.duplicate_gain_set(source, name)):
            self.select(name)

    def rename(self) -> None:
        old = self.selected
        name = self._ask_name("Rename gain set", old)
        if name and name != old and self._report(self.session.rename_gain_set(old, name)):
            self.select(name)

    def delete(self) -> None:
        self._report(self.session.delete_gain_set(self.selected))

    def make_active(self) -> None:
        self.session.set_active_gain_set(self.selected)

    def compare_all(self) -> None:
        self.session.set_compared([g.name for g in self.session.gain_sets])
        self._shown = None
        self.refresh()

    def _note_edited(self) -> None:
        self._report(self.session.set_gain_set_note(self.selected, self.note.text()))

    def _item_changed(self, _item: QListWidgetItem) -> None:
        names = [self.list.item(i).data(NAME_ROLE) for i in range(self.list.count())
                 if self.list.item(i).checkState() == Qt.CheckState.Checked]
        self.session.set_compared(names)
        self._shown = None
        self._sync_compare()

    def _baseline_chosen(self, name: str) -> None:
        if name:
            self.session.set_baseline(name)
