"""Findings: the list follows the analysis, rewriting its rows in place while only the
numbers change, so a chosen finding stays chosen during a drag."""

from __future__ import annotations


def _rows(panel):
    return [panel.list.item(i) for i in range(panel.list.count())]


def _pm_row(panel):
    return next(item for item in _rows(panel) if "Phase margin" in item.text())


def test_a_drag_rewrites_the_rows_in_place_and_keeps_the_choice(window):
    s, panel = window.session, window.flags_panel
    control = window.gains_panel.controls["speed.kp"]
    control.slider.setValue(control.slider.value() + 100)      # well past the phase-margin target
    s.flush()
    chosen = _pm_row(panel)
    panel.list.setCurrentItem(chosen)
    before_text, before_rows = chosen.text(), _rows(panel)
    control.slider.setValue(control.slider.value() + 3)
    s.flush()
    assert _rows(panel) == before_rows                          # the same items, not a new list
    assert panel.list.currentItem() is chosen
    assert chosen.text() != before_text                         # its numbers followed the move
    pm = next(f for f in s.analysis.flags if f.loop == "speed" and "Phase margin" in f.message)
    assert chosen.text().endswith(pm.message)


def test_the_list_is_rebuilt_when_the_findings_change(window):
    s, panel = window.session, window.flags_panel
    assert panel.all_pass and "All checks pass" in panel.status.text()
    pass_rows = [item.text() for item in _rows(panel)]
    control = window.gains_panel.controls["speed.kp"]
    start = control.slider.value()
    control.slider.setValue(start + 100)
    s.flush()
    assert not panel.all_pass and panel.status.text().startswith("▲")
    assert len(_rows(panel)) > len(pass_rows)
    control.slider.setValue(start)
    s.flush()
    assert panel.all_pass and "All checks pass" in panel.status.text()
    assert [item.text() for item in _rows(panel)] == pass_rows
