"""The response views: one tab of loop plots (step, |L|, ∠L per loop), one of disturbance plots,
and the move simulation when the core has it. Items are created once and fed with setData."""

from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtWidgets import (QComboBox, QGraphicsItem, QGraphicsScene, QGraphicsTextItem, QGraphicsView, QHBoxLayout,
                               QLabel, QTabWidget, QVBoxLayout, QWidget)

from app.flag_kinds import flag_kind
from app.panels.comparison_table import ComparisonTable
from app.plots.bode_plot import BodePlots
from app.plots.disturbance_plot import LoadStepPlots
from app.plots.step_plot import StepPlot
from app.plots.stiffness_plot import StiffnessPlot
from app.session import Session
from app.theme import CARD

LOOPS = ("current", "speed", "position")


def _loop_inputs(axis, gains) -> dict:
    """What each loop's step and Bode plots depend on: the axis, the gains of the loop and
    of the loops inside it, and the position gain (it sets the frequency grid)."""
    grid = gains.position.kp_per_s
    return {"current": (axis, gains.current, grid), "speed": (axis, gains.current, gains.speed, grid),
            "position": (axis, gains)}


def _cache_text(view: pg.GraphicsLayoutWidget) -> None:
    """Keep every text of a view (titles, axis labels, annotations) as a pixmap: laying a
    text out again on every repaint costs more than the curves; a text that changes
    re-renders its own pixmap."""
    for item in view.scene().items():
        if isinstance(item, QGraphicsTextItem):
            item.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)


def _layout_widget(name: str) -> pg.GraphicsLayoutWidget:
    w = pg.GraphicsLayoutWidget()
    w.setObjectName(name)
    w.setBackground(CARD)
    w.ci.setContentsMargins(4, 4, 4, 4)
    w.ci.setSpacing(6)
    # Not DontSavePainterState: pyqtgraph items rely on Qt restoring the painter (blank plots otherwise).
    # Curves change shape on every slider tick; keeping Qt's BSP item index up to date
    # then costs more than it saves on a scene of a few hundred items.
    w.scene().setItemIndexMethod(QGraphicsScene.ItemIndexMethod.NoIndex)
    # One rectangle around what changed, not the exact region: a slider tick dirties a few
    # whole plots, whose exact region is some twenty rectangles, and clipping every item
    # to such a region costs more than painting the few pixels between them.
    w.setViewportUpdateMode(QGraphicsView.ViewportUpdateMode.BoundingRectViewportUpdate)
    return w


class PlotsPanel(QTabWidget):
    """"Responses" tabs. Ranges refit after each result unless held (a slider is being dragged)."""

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("plots")
        self.loops_view = _layout_widget("loops_view")
        self.steps: dict[str, StepPlot] = {}
        self.bode: dict[str, BodePlots] = {}
        for col, loop in enumerate(LOOPS):
            self.steps[loop] = StepPlot(self.loops_view.addPlot(row=0, col=col), loop, legend=col == 0)
        for col, loop in enumerate(LOOPS):
            mag = self.loops_view.addPlot(row=1, col=col)
            phase = self.loops_view.addPlot(row=2, col=col)
            self.bode[loop] = BodePlots(mag, phase, loop)
        self.addTab(self.loops_view, "Loops")
        self.disturbance_view = _layout_widget("disturbance_view")
        self.load_step = LoadStepPlots(self.disturbance_view.addPlot(row=0, col=0),
                                       self.disturbance_view.addPlot(row=1, col=0))
        self.stiffness = StiffnessPlot(self.disturbance_view.addPlot(row=0, col=1, rowspan=2))
        self.addTab(self.disturbance_view, "Disturbance")
        self.move = None
        if session.simulation_available:
            try:
                from app.plots.move_plot import MovePlots
                self.move_view = _layout_widget("move_view")
                self.move = MovePlots(self.move_view)
                page = QWidget()
                column = QVBoxLayout(page)
                column.setContentsMargins(0, 4, 0, 0)
                row = QHBoxLayout()
                row.addWidget(QLabel("  Scenario"))
                self.scenario_box = QComboBox()
                self.scenario_box.setObjectName("scenario_box")
                self.scenario_box.currentTextChanged.connect(self._scenario_chosen)
                row.addWidget(self.scenario_box, 1)
                column.addLayout(row)
                column.addWidget(self.move_view, 1)
                self.move_page = page
                self.addTab(page, "Move")
                self._fill_scenarios()
                session.simulation_ready.connect(self._simulation)
            except Exception:  # noqa: BLE001 - the move view is optional
                self.move = None
        self.comparison_table = ComparisonTable()
        self.comparison_table.setObjectName("comparison_view")
        self.addTab(self.comparison_table, "Compare")
        session.comparison_ready.connect(self.show_comparison)
        self.held = False
        self.selected = None
        self.update_count = 0
        self._shown: dict = {}
        self._loops_due = None
        self._disturbance_due = None
        self.currentChanged.connect(self._tab_changed)
        for view in (self.loops_view, self.disturbance_view):
            _cache_text(view)
        session.results_ready.connect(self.show_results)
        session.preset_loaded.connect(self._preset_loaded)
        if session.analysis is not None:
            self.show_results(session.analysis)

    def _preset_loaded(self) -> None:
        self.held = False
        if self.move is not None:
            self._fill_scenarios()

    def _fill_scenarios(self) -> None:
        self.scenario_box.blockSignals(True)
        self.scenario_box.clear()
        names = [s.get("name", "") for s in self.session.scenarios]
        self.scenario_box.addItems(names)
        self.scenario_box.setCurrentText(self.session.scenario_name)
        self.scenario_box.blockSignals(False)

    def _scenario_chosen(self, name: str) -> None:
        if name:
            self.session.set_scenario(name)

    @property
    def move_shown(self) -> bool:
        return self.move is not None and self.currentWidget() is self.move_page

    def show_results(self, analysis) -> None:
        """Feed the plots the new result (setData only) and colour what the flags point at.

        The loop plots and the disturbance plots are fed when their tab is shown (a drag
        watched on the move tab does not feed nine hidden plots), and a loop's plots are
        left as they are when nothing it depends on changed (dragging a speed gain leaves
        the current loop's step and Bode plots alone), so Qt does not repaint them either.
        """
        self.update_count += 1
        axis = self.session.axis
        self._loops_due = (analysis, axis, self.session.gains)
        self._disturbance_due = (analysis, axis)
        if self.currentWidget() is self.loops_view:
            self._show_loops()
        elif self.currentWidget() is self.disturbance_view:
            self._show_disturbance()
        self._alerts(analysis.flags)

    def _show_loops(self) -> None:
        if self._loops_due is None:
            return
        analysis, axis, gains = self._loops_due
        self._loops_due = None
        shown = _loop_inputs(axis, gains)
        for loop in LOOPS:
            if shown[loop] != self._shown.get(loop):
                self.steps[loop].update(analysis)
                self.bode[loop].update(analysis, axis)
        self._shown = shown
        if not self.held:
            for loop in LOOPS:
                self.steps[loop].fit()
                self.bode[loop].fit()

    def _show_disturbance(self) -> None:
        if self._disturbance_due is None:
            return
        analysis, axis = self._disturbance_due
        self._disturbance_due = None
        self.load_step.update(analysis)
        self.stiffness.update(analysis, axis)
        if not self.held:
            self.load_step.fit()
            self.stiffness.fit()

    def _tab_changed(self, _index: int) -> None:
        if self.currentWidget() is self.loops_view:
            self._show_loops()
        elif self.currentWidget() is self.disturbance_view:
            self._show_disturbance()

    def show_comparison(self, comparison) -> None:
        """Draw the compared sets together in every plot and fill the metrics table (None: stop)."""
        names = () if comparison is None else comparison.sets
        analyses = () if comparison is None else comparison.analyses
        for loop in LOOPS:
            self.steps[loop].compare(names, analyses)
            self.bode[loop].compare(names, analyses)
        self.load_step.compare(names, analyses)
        self.stiffness.compare(names, analyses)
        if self.move is not None:
            simulated = comparison is not None and any(s is not None for s in comparison.simulations)
            self.move.compare(names if simulated else (), comparison.simulations if simulated else (),
                              self.session.axis)
        self.comparison_table.show_comparison(comparison)
        if not self.held:
            self.fit()

    def _alerts(self, flags) -> None:
        per_loop: dict[str, dict[str, str]] = {loop: {} for loop in LOOPS}
        rank = {"error": 0, "warning": 1, "info": 2}
        for flag in flags:
            if flag.loop in per_loop:
                kinds = per_loop[flag.loop]
                kind = flag_kind(flag)
                if kind not in kinds or rank.get(flag.severity, 3) < rank.get(kinds[kind], 3):
                    kinds[kind] = flag.severity
        for loop in LOOPS:
            self.bode[loop].set_alerts(per_loop[loop])
            self.steps[loop].set_alert(per_loop[loop].get("unstable"))
        unstable = [a["unstable"] for a in per_loop.values() if "unstable" in a]
        self.load_step.set_alert(unstable[0] if unstable else None)

    def fit(self) -> None:
        for loop in LOOPS:
            self.steps[loop].fit()
            self.bode[loop].fit()
        self.load_step.fit()
        self.stiffness.fit()
        if self.move is not None:
            self.move.fit()

    def hold_ranges(self) -> None:
        """Keep axes still while a slider is dragged (no re-ticking on every frame); the move
        simulation then only runs when its view is on screen."""
        self.held = True
        self.session.set_simulate_enabled(self.move_shown)

    def release_ranges(self) -> None:
        self.held = False
        self.session.set_simulate_enabled(True)
        self.fit()

    def highlight(self, flag) -> None:
        """Bring the plot a chosen finding is about to the front."""
        self.selected = flag
        if flag is None:
            return
        kind = flag_kind(flag)
        if flag.loop in LOOPS or kind in ("unstable", "phase_margin", "gain_margin"):
            self.setCurrentWidget(self.loops_view)

    def _simulation(self, result) -> None:
        if self.move is None:
            return
        if isinstance(result, Exception):
            self.move.show_error(str(result))
        else:
            self.move.update(result, self.session.axis)
            if not self.held:
                self.move.fit()
