"""Gain sliders drive the session, recompute once per burst, and move the curves and the findings."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt

from app.session import gain_value


def _pm_flags(window, loop="speed"):
    return [f for f in window.session.analysis.flags if f.loop == loop and f.message.startswith("Phase margin")]


def test_slider_updates_session_and_curves(window, qtbot):
    s = window.session
    control = window.gains_panel.controls["speed.kp"]
    before_kp = s.gains.speed.pi.kp
    before_curve = np.array(window.plots.steps["speed"].curve.yData, copy=True)
    with qtbot.waitSignal(s.results_ready, timeout=5000):
        control.slider.setValue(control.slider.value() + 60)
    assert s.gains.speed.pi.kp > before_kp
    assert control.field.text().startswith(f"{s.gains.speed.pi.kp:.4g}")
    after_curve = window.plots.steps["speed"].curve.yData
    assert len(after_curve) != len(before_curve) or not np.allclose(after_curve, before_curve)


def test_burst_of_moves_recomputes_once(window, qtbot):
    s = window.session
    slider = window.gains_panel.controls["current.kp"].slider
    s.flush()
    count = s.recompute_count
    for step in range(1, 11):
        slider.setValue(slider.value() + 3)
    assert s.recompute_count == count  # nothing computed inside the slots
    qtbot.waitUntil(lambda: s.recompute_count > count, timeout=5000)
    qtbot.wait(20)
    assert s.recompute_count == count + 1


def test_session_change_moves_the_widget_without_feedback(window, qtbot):
    s = window.session
    control = window.gains_panel.controls["position.kp_per_s"]
    undo_count = s.undo_stack.count()
    s.set_gain("position.kp_per_s", gain_value(s.gains, "position.kp_per_s") * 1.5)
    assert control.value == s.gains.position.kp_per_s
    assert control.field.text().startswith(f"{s.gains.position.kp_per_s:.4g}")
    assert s.undo_stack.count() == undo_count + 1  # the widget's update did not push a second edit


def test_raising_speed_kp_brings_the_phase_margin_flag_and_lowering_clears_it(window, qtbot):
    s = window.session
    s.flush()
    assert not _pm_flags(window), "the demo's first-motion gains meet the speed phase-margin target"
    control = window.gains_panel.controls["speed.kp"]
    start = control.slider.value()
    position = start
    while not _pm_flags(window) and position < 1000:
        position = min(position + 25, 1000)
        control.slider.setValue(position)
        s.flush()
    assert _pm_flags(window), "raising speed Kp must eventually break the phase-margin target"
    assert not window.flags_panel.all_pass
    qtbot.waitUntil(lambda: any("Phase margin" in window.flags_panel.list.item(i).text()
                                for i in range(window.flags_panel.list.count())), timeout=3000)
    assert window.plots.bode["speed"]._alerts.get("phase_margin") == "warning"
    while _pm_flags(window) and position > 0:
        position = max(position - 25, 0)
        control.slider.setValue(position)
        s.flush()
    assert not _pm_flags(window)
    assert window.plots.bode["speed"]._alerts.get("phase_margin") is None


def test_keyboard_fine_steps(window, qtbot):
    s = window.session
    control = window.gains_panel.controls["current.kp"]
    before = s.gains.current.pi.kp
    control.field.setFocus()
    qtbot.keyClick(control.field, Qt.Key.Key_Up)
    np.testing.assert_allclose(s.gains.current.pi.kp, before * 1.01, rtol=1e-12)
    qtbot.keyClick(control.field, Qt.Key.Key_Down, Qt.KeyboardModifier.ShiftModifier)
    np.testing.assert_allclose(s.gains.current.pi.kp, before * 1.01 / 1.1, rtol=1e-12)
    position = control.slider.value()
    qtbot.keyClick(control.slider, Qt.Key.Key_Right)
    assert control.slider.value() == position + 1
    assert s.gains.current.pi.kp > before * 1.01 / 1.1


def test_typed_value_with_units_and_refused_value(window, qtbot):
    s = window.session
    control = window.gains_panel.controls["speed.kp"]
    control.field.setText("0.2 A*s/rad")
    control.field.editingFinished.emit()
    assert s.gains.speed.pi.kp == 0.2
    control.field.setText("-3")
    control.field.editingFinished.emit()
    assert s.gains.speed.pi.kp == 0.2
    assert control.field.reason and control.field.text() == "-3"


def test_propose_shows_the_rationale(window, qtbot):
    s = window.session
    before = s.gains.current.pi
    window.gains_panel.propose_buttons["current"].click()
    assert s.gains.current.pi != before
    assert "Pole-zero" in window.gains_panel.rationale.toPlainText()
    window.gains_panel.propose_buttons["position"].click()
    assert "Separation" in window.gains_panel.rationale.toPlainText()


def test_undo_restores_previous_gains(window, qtbot):
    s = window.session
    original = s.gains
    control = window.gains_panel.controls["speed.ki"]
    control.slider.setSliderDown(True)
    for step in range(5):
        control.slider.setValue(control.slider.value() + 10)
    control.slider.setSliderDown(False)
    window.gains_panel.controls["position.kp_per_s"].slider.setValue(100)
    assert s.gains != original
    assert s.dirty
    window.undo_action.trigger()
    assert s.gains.position == original.position and s.gains.speed != original.speed
    window.undo_action.trigger()  # the whole drag is one step
    assert s.gains == original
    assert window.gains_panel.controls["speed.ki"].value == original.speed.pi.ki
    assert not s.dirty
    window.redo_action.trigger()
    assert s.gains.speed != original.speed
