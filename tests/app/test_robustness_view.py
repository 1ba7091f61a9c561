"""The robustness view: sweep and auto-tune in the worker, cancel, new gain set, notch with undo."""

from __future__ import annotations

import numpy as np
import pytest

from core.presets import builtin_preset


def _wait_done(qtbot, view, timeout=60000):
    qtbot.waitUntil(lambda: not view.busy, timeout=timeout)


def test_sweep_runs_in_the_worker_and_fills_table_and_bands(window, qtbot):
    view = window.robustness
    window.plots.setCurrentWidget(view)
    view.mode_box.setCurrentText("corners")
    with qtbot.waitSignal(view.job_done, timeout=60000) as blocker:
        assert view.start_sweep()
        assert view.busy and view.job.thread.isRunning()      # off the GUI thread
        assert not view.sweep_button.isEnabled() and view.cancel_button.isEnabled()
    assert blocker.args == ["sweep", "finished"]
    r = view.result
    assert r is not None and r.settings.mode == "corners"
    assert view.worst_table.rowCount() == len(r.worst)
    texts = [view.worst_table.item(i, 1).text() for i in range(view.worst_table.rowCount())]
    assert "phase margin" in texts
    assert view.ranking_table.rowCount() == len(r.ranking) > 0
    x, y = view.bands["mag"].low.getData()
    assert len(x) > 10 and np.all(np.isfinite(y))
    nx, ny = view.bands["mag"].nominal.getData()
    assert np.allclose(nx, np.log10(r.bode_magnitude["speed"].x))     # plotted as log10(Hz)
    view.loop_box.setCurrentText("current")
    assert np.allclose(view.bands["mag"].nominal.getData()[1], r.bode_magnitude["current"].nominal)


def test_autotune_cancelled_midway_leaves_gain_sets_unchanged(window, qtbot):
    view = window.robustness
    session = window.session
    before, active, undo = session.gain_sets, session.active, session.undo_stack.count()
    progressed = []
    with qtbot.waitSignal(view.job_done, timeout=60000) as blocker:
        assert view.start_autotune()
        view.job.progress.connect(lambda f, m: progressed.append(f))
        qtbot.waitUntil(lambda: len(progressed) >= 2, timeout=30000)
        view.cancel()
    assert blocker.args == ["autotune", "cancelled"]
    assert session.gain_sets == before and session.active == active
    assert session.undo_stack.count() == undo
    assert "cancelled" in view.status.text().lower()
    assert view.sweep_button.isEnabled() and not view.cancel_button.isEnabled()


def test_autotune_result_becomes_a_new_gain_set(window, qtbot):
    view = window.robustness
    session = window.session
    names = [g.name for g in session.gain_sets]
    view.objective_box.setCurrentText("speed_bandwidth")
    with qtbot.waitSignal(view.job_done, timeout=90000) as blocker:
        assert view.start_autotune()
    assert blocker.args == ["autotune", "finished"]
    assert view.tune_result.gains is not None
    new = [g.name for g in session.gain_sets if g.name not in names]
    assert len(new) == 1 and session.active == new[0]
    assert session.gains.speed.pi.kp == pytest.approx(view.tune_result.gains.speed.pi.kp)
    session.undo_stack.undo()
    assert [g.name for g in session.gain_sets] == names


def test_notch_action_adds_a_notch_and_undo_removes_it(window, qtbot):
    session = window.session
    session.load_preset(builtin_preset("rotary_table"))
    session.set_active_gain_set("first motion")
    view = window.robustness
    count = len(session.gains.speed.notches)
    with qtbot.waitSignal(view.job_done, timeout=60000) as blocker:
        assert view.start_notch()
    assert blocker.args == ["notch", "finished"]
    assert len(session.gains.speed.notches) == count + view.proposal.added_notches > count
    assert "Notch added" in view.status.text()
    session.undo_stack.undo()
    assert len(session.gains.speed.notches) == count


def test_tolerance_table_edits_the_preset(window, qtbot):
    view = window.robustness
    session = window.session
    from core.tolerances import PARAMETERS

    row = PARAMETERS.index("resistance")
    view.tolerance_table.item(row, 2).setText("+50")
    t = session.tolerances().get("resistance")
    assert t.high_factor == pytest.approx(1.5)
    assert session.preset.tolerances["resistance"][1] == "+50 %"
    session.undo_stack.undo()
    assert session.tolerances().get("resistance").high_factor != pytest.approx(1.5)
    assert view.tolerance_table.item(row, 2).text() != "+50"


def test_slider_ticks_never_start_robustness_work(window, qtbot):
    view = window.robustness
    control = window.gains_panel.controls["speed.kp"]
    for step in range(5):
        control.slider.setValue(control.slider.value() + 3)
        window.session.flush()
    assert view.job is None and view.result is None
