"""The window opens on the demo axis with every view fed, and survives many repaints."""

from __future__ import annotations

import numpy as np

from PySide6.QtCore import QPoint, QRect
from PySide6.QtWidgets import QApplication


def test_window_opens_on_demo_with_results(window):
    s = window.session
    assert s.analysis is not None
    assert window.plots.update_count >= 1
    assert "Loopwright" in window.windowTitle()
    curve = window.plots.bode["speed"].mag_curve
    assert len(curve.xData) == len(s.analysis.frequency.omega_rad_s)


def test_repaint_full_window_200_times(window, qtbot):
    # PySide6 6.12.0 + pyqtgraph 0.14 aborted in paint ("none_dealloc") on exactly this.
    s = window.session
    slider = window.gains_panel.controls["speed.kp"].slider
    start = slider.value()
    for i in range(200):
        slider.setValue(start + (i % 40) - 20)
        s.flush()
        window.repaint()
        QApplication.processEvents()
    assert s.analysis is not None
    assert window.plots.update_count > 100


def test_a_speed_gain_leaves_the_current_loop_plots_alone(window):
    """Dragging speed Kp redraws the speed and position plots and not the current loop's,
    whose inputs did not change; a current gain redraws all three."""
    s = window.session
    plots = window.plots
    before = {loop: plots.bode[loop].mag_curve.yData for loop in ("current", "speed", "position")}
    slider = window.gains_panel.controls["speed.kp"].slider
    slider.setValue(slider.value() + 5)
    s.flush()
    after = {loop: plots.bode[loop].mag_curve.yData for loop in ("current", "speed", "position")}
    assert after["current"] is before["current"]
    assert after["speed"] is not before["speed"] and after["position"] is not before["position"]
    slider = window.gains_panel.controls["current.kp"].slider
    slider.setValue(slider.value() + 5)
    s.flush()
    assert plots.bode["current"].mag_curve.yData is not after["current"]


def test_the_disturbance_plots_follow_when_their_tab_is_shown(window):
    """A gain moved while the loop plots are shown leaves the hidden load-step curve as it
    was; showing the disturbance tab brings it to the latest result."""
    s, plots = window.session, window.plots
    plots.setCurrentWidget(plots.loops_view)
    before = plots.load_step.speed_curve.yData
    slider = window.gains_panel.controls["speed.kp"].slider
    slider.setValue(slider.value() + 8)
    s.flush()
    assert plots.load_step.speed_curve.yData is before
    plots.setCurrentWidget(plots.disturbance_view)
    shown = plots.load_step.speed_curve.yData
    assert shown is not before
    np.testing.assert_array_equal(shown, s.analysis.load_step.speed_rad_s)


def test_the_loop_plots_follow_when_their_tab_is_shown(window):
    """A gain moved while the move tab is shown leaves the hidden loop plots as they were;
    showing the loop tab brings them to the latest result."""
    s, plots = window.session, window.plots
    plots.setCurrentWidget(plots.move_page)
    before = plots.bode["speed"].mag_curve.yData
    slider = window.gains_panel.controls["speed.kp"].slider
    slider.setValue(slider.value() + 8)
    s.flush()
    assert plots.bode["speed"].mag_curve.yData is before
    plots.setCurrentWidget(plots.loops_view)
    shown = plots.bode["speed"].mag_curve.yData
    assert shown is not before
    expected = 20 * np.log10(np.abs(s.analysis.frequency.open_loop["speed"]))
    np.testing.assert_allclose(shown, expected, rtol=1e-12)


def _loops_view_on_screen(window):
    """The loop view's pixels as the window last painted them (the backing store), which is
    where a stale partial repaint or a stale cached pixmap would show."""
    view = window.plots.loops_view
    shot = QApplication.primaryScreen().grabWindow(window.winId())
    return shot.copy(QRect(view.mapTo(window, QPoint(0, 0)), view.size())).toImage()


def test_partial_repaints_draw_what_a_fresh_window_draws(window, qtbot, settings):
    """The loop view repaints one rectangle around what changed and keeps its axes as
    pixmaps. After a preset change (every range re-ticked), a held drag, its release and
    a plain move, its pixels must equal those of a new window drawn once on the same
    state (derived: two drawings of one state by the same code)."""
    from app.window import main_window
    from core.presets import builtin_preset

    window.load(builtin_preset("rotary_table"))
    control = window.gains_panel.controls["speed.kp"]
    control.slider.setSliderDown(True)
    for _ in range(8):
        control.slider.setValue(control.slider.value() + 9)
        QApplication.processEvents()
    control.slider.setSliderDown(False)
    window.gains_panel._drag_finished()
    window.gains_panel.controls["current.ki"].slider.setValue(
        window.gains_panel.controls["current.ki"].slider.value() - 30)
    window.session.flush()
    for _ in range(5):
        QApplication.processEvents()
    painted = _loops_view_on_screen(window)

    fresh = main_window(builtin_preset("rotary_table"), settings=settings)
    qtbot.addWidget(fresh)
    fresh.session.set_gains(window.session.gains)
    fresh.session.flush()
    fresh.resize(window.size())
    fresh.show()
    qtbot.waitExposed(fresh)
    for _ in range(5):
        QApplication.processEvents()
    drawn = fresh.plots.loops_view.grab().toImage().convertToFormat(painted.format())
    fresh.session.undo_stack.setClean()
    assert painted.size() == drawn.size()
    assert painted == drawn
