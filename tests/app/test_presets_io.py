"""Open, save and the unsaved-changes guard, with dialogs routed to a recorder."""

from __future__ import annotations

from dataclasses import replace

from core.presets import dumps_preset, load_preset


def test_save_then_load_round_trips_exactly(window, tmp_path, no_dialogs):
    s = window.session
    s.set_gain("speed.kp", 0.1234567890123)
    s.set_gain("position.acceleration_ff", 0.37)
    s.set_target("speed_phase_margin_min", 47.5)
    window.axis_panel.field("motor", "inductance_h").setText("5.55 mH")
    window.axis_panel.field("motor", "inductance_h").editingFinished.emit()
    path = tmp_path / "gantry.toml"
    no_dialogs["save"] = str(path)
    assert window.save_as()
    assert not s.dirty and s.path == path
    saved = s.preset
    loaded = load_preset(path)
    assert loaded.axis == saved.axis
    assert loaded.gain_sets == saved.gain_sets
    assert loaded.active == saved.active
    assert loaded.targets == saved.targets
    assert loaded.tuning == saved.tuning
    assert loaded.scenarios == saved.scenarios
    assert dumps_preset(loaded) == dumps_preset(saved)
    # and through the window: open the file, the same state comes back
    s.set_gain("current.kp", 1.0)
    no_dialogs["unsaved"] = "discard"
    assert window.open_path(path)
    assert s.gains == saved.active_gain_set and s.axis == saved.axis
    assert str(path.resolve()) in window.settings.value("files/recent")


def test_malformed_preset_shows_an_error_and_leaves_the_window(window, tmp_path, no_dialogs):
    s = window.session
    s.set_gain("speed.kp", 0.2)
    state, title, undo = s.state, window.windowTitle(), s.undo_stack.count()
    curve = window.plots.bode["speed"].mag_curve.yData.copy()
    bad = tmp_path / "broken.toml"
    bad.write_text("format_version = 1\n[motor\nkind = 'dc'\n", encoding="utf-8")
    assert not window.open_path(bad, ask=False)
    assert no_dialogs["errors"] and "broken.toml" in no_dialogs["errors"][-1][1]
    wrong = tmp_path / "wrong_unit.toml"
    wrong.write_text(dumps_preset(s.preset).replace('resistance = "', 'resistance = "3 kg #'), encoding="utf-8")
    assert not window.open_path(wrong, ask=False)
    assert "motor.resistance" in no_dialogs["errors"][-1][1]
    assert s.state == state
    assert s.undo_stack.count() == undo
    assert (window.plots.bode["speed"].mag_curve.yData == curve).all()
    assert window.windowTitle() == title and s.dirty


def test_unsaved_changes_guard_on_close(window, no_dialogs):
    s = window.session
    s.set_gain("speed.kp", 0.21)
    no_dialogs["unsaved"] = "cancel"
    assert not window.close()
    assert window.isVisible()
    no_dialogs["unsaved"] = "discard"
    assert window.close()


def test_loading_a_preset_is_one_recompute(window, qtbot):
    s = window.session
    s.flush()
    count = s.recompute_count
    from core.presets import builtin_preset

    window.load(builtin_preset("rotary_table"))
    qtbot.waitUntil(lambda: s.recompute_count > count, timeout=5000)
    qtbot.wait(20)
    assert s.recompute_count == count + 1
    assert s.axis.load.motion == "rotary" and not s.dirty
    assert not s.undo_stack.canUndo()
    assert replace(s.preset, source_path=None).axis == builtin_preset("rotary_table").axis
