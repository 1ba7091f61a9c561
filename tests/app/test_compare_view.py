"""Comparing gain sets: every plot draws them together in distinct pens with a legend; the
metrics table has one column per set and marks the better value; unchanged sets are not
re-analysed on a slider tick."""

from __future__ import annotations

import math

from PySide6.QtGui import QFont

from app.panels.comparison_table import BEST_MARK, BEST_ROLE
from app.plots.overlay import pen_signature
from core.analysis import analyse
from core.flags import targets_from_dict


def _compare_three(window):
    s = window.session
    names = [g.name for g in s.gain_sets][:3]
    assert len(names) == 3
    s.set_compared(names)
    s.flush()
    return names


def _overlays(plots):
    out = {}
    for loop in ("current", "speed", "position"):
        out[f"{loop} step"] = plots.steps[loop].overlay
        out[f"{loop} |L|"] = plots.bode[loop].mag_overlay
        out[f"{loop} phase"] = plots.bode[loop].phase_overlay
    out["load step speed"] = plots.load_step.speed_overlay
    out["load step position"] = plots.load_step.position_overlay
    out["stiffness"] = plots.stiffness.overlay
    return out


def test_three_sets_draw_three_distinct_curves_on_every_plot(window):
    names = _compare_three(window)
    plots = window.plots
    for label, overlay in _overlays(plots).items():
        shown = overlay.shown()
        assert len(shown) == 3, label
        assert len({pen_signature(c.opts["pen"]) for c in shown}) == 3, label
        assert len({(c.opts["pen"].style(), tuple(c.opts["pen"].dashPattern())) for c in shown}) == 3, \
            f"{label}: the dash patterns alone must tell the sets apart"
    assert not plots.steps["speed"].curve.isVisible()  # the single-set curve steps aside
    legend = plots.steps["current"].overlay.legend
    assert legend.isVisible() and [label.text for _, label in legend.items] == names
    assert plots.load_step.speed_overlay.legend.isVisible()


def test_overlay_curves_are_the_sets_own_results(window):
    names = _compare_three(window)
    s = window.session
    p = s.preset
    expected = analyse(p.axis, p.gain_set(names[1]), targets_from_dict(p.targets), p.constants_check)
    curve = window.plots.steps["speed"].overlay.curves[1]
    assert math.isclose(float(curve.yData[-1]), float(expected.steps["speed"].value[-1]), rel_tol=1e-12)


def test_move_plot_overlays_after_the_simulation(window):
    if window.plots.move is None:
        return
    _compare_three(window)
    window.session.run_simulation()
    assert all(sim is not None for sim in window.session.comparison.simulations)
    for overlay in window.plots.move.overlays:
        assert len(overlay.shown()) == 3
    assert window.plots.move.overlays[0].legend.isVisible()


def test_table_one_column_per_set_and_the_better_value_marked(window):
    names = _compare_three(window)
    view = window.plots.comparison_table
    table, comparison = view.table, window.session.comparison
    assert table.columnCount() == 1 + len(names)
    assert table.rowCount() == len(comparison.rows)
    for i, name in enumerate(names):
        assert table.horizontalHeaderItem(1 + i).text().startswith(name)
    assert "(baseline)" in table.horizontalHeaderItem(1).text()
    r = next(i for i, row in enumerate(comparison.rows) if row.group == "speed" and row.metric == "phase_margin_deg")
    row = comparison.rows[r]
    assert row.best, "the demo's sets differ in speed phase margin"
    for c, name in enumerate(names):
        item = table.item(r, 1 + c)
        best = name in row.best
        assert item.data(BEST_ROLE) == best
        assert item.text().startswith(BEST_MARK) == best  # a marker, not colour alone
        assert QFont(item.font()).bold() == best
    # differences against the baseline are shown in brackets on the other columns
    assert "(" in table.item(r, 2).text() and "(" not in table.item(r, 1).text()


def test_baseline_moves_the_differences(window):
    names = _compare_three(window)
    s = window.session
    s.set_baseline(names[2])
    s.flush()
    assert s.comparison.baseline == names[2]
    assert "(baseline)" in window.plots.comparison_table.table.horizontalHeaderItem(3).text()
    row = s.comparison.row("speed", "crossover_hz")
    assert row.deltas[2] == 0.0


def test_slider_tick_reanalyses_only_the_active_set(window, monkeypatch):
    _compare_three(window)
    s = window.session
    import app.session as session_module

    calls = []
    real = session_module.analyse
    monkeypatch.setattr(session_module, "analyse", lambda *a, **k: calls.append(a[1].name) or real(*a, **k))
    control = window.gains_panel.controls["speed.kp"]
    control.slider.setValue(control.slider.value() + 10)
    s.flush()
    assert calls == [s.active]
    assert s.comparison is not None and len(s.comparison.sets) == 3


def test_one_set_or_none_is_no_comparison(window):
    _compare_three(window)
    s = window.session
    s.set_compared([s.active])
    s.flush()
    assert s.comparison is None
    assert all(not o.shown() for o in _overlays(window.plots).values())
    assert window.plots.steps["speed"].curve.isVisible()
    assert window.plots.comparison_table.table.columnCount() == 0
