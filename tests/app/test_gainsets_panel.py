"""Gain sets panel: edits through the widgets reach the session and the preset; undo restores."""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from app import dialogs


@pytest.fixture
def answer(monkeypatch):
    """What the name prompt answers (None: the user cancels)."""
    box = {"text": None}
    monkeypatch.setattr(dialogs, "ask_text", lambda parent, title, label, text="": box["text"])
    return box


def _names(window):
    return [g.name for g in window.session.gain_sets]


def _listed(panel):
    return [panel.list.item(i).text().split("\n")[0].split("   ")[0] for i in range(panel.list.count())]


def test_list_shows_every_set_with_its_note(window):
    panel = window.gain_sets_panel
    assert _listed(panel) == _names(window) and len(_names(window)) >= 3
    first = window.session.gain_sets[0]
    assert first.note in panel.list.item(0).text()
    assert "active" in panel.list.item(_names(window).index(window.session.active)).text()


def test_new_duplicate_rename_delete_and_undo(window, answer, qtbot):
    s, panel = window.session, window.gain_sets_panel
    original = s.preset.gain_sets
    s.flush()
    count = s.recompute_count
    answer["text"] = "heavier load"
    panel.buttons["new"].click()
    assert _names(window)[-1] == "heavier load" and s.active == "heavier load"
    assert s.preset.gain_set("heavier load").speed == original[0].speed  # copied from the active set
    assert "heavier load" in _listed(panel)
    qtbot.waitUntil(lambda: s.recompute_count > count, timeout=5000)
    qtbot.wait(20)
    assert s.recompute_count == count + 1  # one edit, one recompute

    panel.select("production")
    answer["text"] = "production b"
    panel.buttons["duplicate"].click()
    names = _names(window)
    assert names[names.index("production") + 1] == "production b"
    assert s.preset.gain_set("production b").note == s.preset.gain_set("production").note

    panel.select("production b")
    answer["text"] = "stiff"
    panel.buttons["rename"].click()
    assert "stiff" in _names(window) and "production b" not in _names(window)

    panel.select("stiff")
    panel.buttons["delete"].click()
    assert "stiff" not in _names(window)

    window.undo_action.trigger()  # the delete
    assert "stiff" in _names(window)
    window.undo_action.trigger()  # the rename
    assert "production b" in _names(window) and "stiff" not in _names(window)
    window.undo_action.trigger()  # the duplicate
    window.undo_action.trigger()  # the new set
    assert s.preset.gain_sets == original
    assert _listed(panel) == [g.name for g in original]


def test_cancelled_or_taken_name_changes_nothing(window, answer):
    s, panel = window.session, window.gain_sets_panel
    before = s.preset.gain_sets
    answer["text"] = None
    panel.buttons["new"].click()
    answer["text"] = "production"
    panel.buttons["new"].click()
    assert s.preset.gain_sets == before
    assert "production" in panel.status.text()  # the reason is shown


def test_activate_and_note(window, qtbot):
    s, panel = window.session, window.gain_sets_panel
    panel.select("production")
    with qtbot.waitSignal(s.results_ready, timeout=5000):
        panel.buttons["activate"].click()
    assert s.active == "production" and s.preset.active == "production"
    assert window.gains_panel.gain_set_box.currentText() == "production"
    panel.note.setText("for the 12 kg payload")
    panel.note.editingFinished.emit()
    assert s.preset.gain_set("production").note == "for the 12 kg payload"
    window.undo_action.trigger()
    assert s.preset.gain_set("production").note != "for the 12 kg payload"
    window.undo_action.trigger()
    assert s.active != "production"


def test_the_last_set_cannot_be_deleted(window):
    s, panel = window.session, window.gain_sets_panel
    while len(s.gain_sets) > 1:
        panel.select(s.gain_sets[-1].name)
        panel.buttons["delete"].click()
    assert len(s.gain_sets) == 1
    assert not panel.buttons["delete"].isEnabled()
    assert s.delete_gain_set(s.gain_sets[0].name)  # refused, with a reason
    assert len(s.gain_sets) == 1


def test_ticks_choose_the_compared_sets(window, qtbot):
    s, panel = window.session, window.gain_sets_panel
    with qtbot.waitSignal(s.comparison_ready, timeout=5000):
        for i in range(panel.list.count()):
            panel.list.item(i).setCheckState(Qt.CheckState.Checked)
    assert s.compared == tuple(_names(window))
    assert s.comparison is not None and s.comparison.sets == s.compared
    panel.baseline.setCurrentText("production")
    s.flush()
    assert s.comparison.baseline == "production"
    with qtbot.waitSignal(s.comparison_ready, timeout=5000):
        for i in range(1, panel.list.count()):
            panel.list.item(i).setCheckState(Qt.CheckState.Unchecked)
    assert s.comparison is None
