"""The axis editor: typed units, bad values marked in place, the last good model kept."""

from __future__ import annotations

import numpy as np


def _enter(edit, text):
    edit.setText(text)
    edit.editingFinished.emit()


def test_typed_units_update_the_model(window):
    s = window.session
    edit = window.axis_panel.field("motor", "inductance_h")
    _enter(edit, "6.1 mH")
    np.testing.assert_allclose(s.axis.motor.inductance_h, 6.1e-3, rtol=1e-12)
    _enter(edit, "7")  # a bare number is read in the unit shown (mH)
    np.testing.assert_allclose(s.axis.motor.inductance_h, 7e-3, rtol=1e-12)
    assert "ms" in window.axis_panel.derived["τe = L/R"].text()


def test_bad_value_is_marked_and_the_last_good_model_kept(window, qtbot):
    s = window.session
    s.flush()
    good_axis, good_analysis = s.axis, s.analysis
    edit = window.axis_panel.field("motor", "resistance_ohm")
    row = window.axis_panel.rows["motor.resistance_ohm"]
    for text in ("-2 ohm", "3 kg", "banana"):
        _enter(edit, text)
        assert edit.text() == text, "the typed text is never lost"
        assert edit.property("invalid") is True
        assert edit.reason and "motor.resistance" in edit.reason
        assert edit.toolTip() == edit.reason
        assert not row.reason.isHidden()
        assert s.axis is good_axis
    s.flush()
    assert s.analysis is good_analysis
    _enter(edit, "1.5 ohm")
    assert edit.property("invalid") is False and row.reason.isHidden()
    assert s.axis.motor.resistance_ohm == 1.5


def test_cross_field_rule_is_reported_on_the_field(window):
    s = window.session
    edit = window.axis_panel.field("drive", "speed_rate_hz")
    before = s.axis
    _enter(edit, "40 kHz")  # faster than the current loop: the drive refuses it
    assert s.axis is before
    assert "current-loop rate" in edit.reason


def test_undo_of_an_axis_edit_refreshes_the_field(window):
    s = window.session
    edit = window.axis_panel.field("load", "inertia")
    before = s.axis.load.inertia
    _enter(edit, "12 kg")
    assert s.axis.load.inertia == 12.0
    window.undo_action.trigger()
    assert s.axis.load.inertia == before
    assert edit.text().startswith(f"{before:.4g}")
