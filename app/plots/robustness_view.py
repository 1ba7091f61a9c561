"""The robustness view: tolerance sweeps, worst cases, ranking, auto-tune and the resonance notch.

Everything heavy runs in a :class:`app.robustness_worker.RobustnessJob` on its own
thread, started only by the buttons here (never by a slider tick). A finished result
is shown (sweep) or offered to the Session (auto-tuned set, notch); a cancelled or
failed job changes nothing. Plot items are created once and updated with setData.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QGridLayout, QGroupBox, QHBoxLayout, QHeaderView, QLabel,
                               QProgressBar, QPushButton, QSpinBox, QSplitter, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from app.plots.style import LEFT_AXIS_PX
from app.robustness_worker import RobustnessJob, autotune_work, notch_work, sweep_work
from app.session import Session
from core.errors import InputError
from core.tolerances import DESCRIPTIONS, PARAMETERS

LOOP_NAMES = ("current", "speed", "position")
_UNITS = {"phase_margin_deg": "deg", "gain_margin_db": "dB", "sensitivity_peak": "", "bandwidth_hz": "Hz",
          "delay_margin_s": "s", "overshoot_pct": "%", "speed_dip_rad_s": "rad/s"}
_METRIC_TEXT = {"phase_margin_deg": "phase margin", "gain_margin_db": "gain margin", "sensitivity_peak": "Ms",
                "bandwidth_hz": "bandwidth", "delay_margin_s": "delay margin", "overshoot_pct": "step overshoot",
                "speed_dip_rad_s": "load-step speed dip"}
_BAND = (70, 130, 220, 70)
_EDGE = (70, 130, 220, 160)


def _num(x: float, unit: str = "") -> str:
    if x is None or not math.isfinite(x):
        return "none" if x is not None and x == math.inf else "n/a"
    return f"{x:.4g} {unit}".strip()


def _corner_text(factors: dict) -> str:
    parts = [f"{DESCRIPTIONS.get(k, k)} x{v:.3g}" for k, v in factors.items() if v != 1.0]
    return ", ".join(parts) if parts else "nominal"


class _Band:
    """A min/max band with the nominal curve on top (items made once)."""

    def __init__(self, plot: pg.PlotItem):
        self.low = pg.PlotCurveItem(pen=pg.mkPen(_EDGE, width=1))
        self.high = pg.PlotCurveItem(pen=pg.mkPen(_EDGE, width=1))
        self.fill = pg.FillBetweenItem(self.low, self.high, brush=pg.mkBrush(_BAND))
        self.nominal = pg.PlotCurveItem(pen=pg.mkPen((20, 20, 20), width=2))
        for item in (self.fill, self.low, self.high, self.nominal):
            plot.addItem(item)

    def set(self, x, low, high, nominal) -> None:
        ok = np.isfinite(low) & np.isfinite(high)
        self.low.setData(x[ok], low[ok])
        self.high.setData(x[ok], high[ok])
        self.nominal.setData(x, nominal)


class RobustnessView(QWidget):
    """Tolerances, sweep and auto-tune controls, band plots, worst-case table and ranking.

    Signals
    -------
    job_done(str, str)
        A job ended: its kind ("sweep", "autotune", "notch") and how ("finished",
        "cancelled" or "failed").
    """

    job_done = Signal(str, str)

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.job: RobustnessJob | None = None
        self.result = None           # the last SweepResult shown
        self.tune_result = None      # the last AutotuneResult
        self.proposal = None         # the last FilterProposal

        # --- actions -------------------------------------------------------------------
        self.mode_box = QComboBox()
        self.mode_box.addItems(["corners", "grid", "montecarlo"])
        self.count_box = QSpinBox()
        self.count_box.setRange(1, 200_000)
        self.count_box.setValue(1000)
        self.count_box.setToolTip("Monte Carlo variants (grid: levels per parameter)")
        self.seed_box = QSpinBox()
        self.seed_box.setRange(0, 2 ** 31 - 1)
        self.sweep_button = QPushButton("Sweep")
        self.objective_box = QComboBox()
        self.objective_box.addItems(["speed_bandwidth", "position_gain", "stiffness"])
        self.at_box = QDoubleSpinBox()
        self.at_box.setRange(0.01, 1e5)
        self.at_box.setValue(10.0)
        self.at_box.setSuffix(" Hz")
        self.tune_button = QPushButton("Auto-tune")
        self.notch_button = QPushButton("Propose notch")
        self.notch_button.setToolTip("Propose a speed-feedback notch for the load resonance and add it (undoable)")
        self.progress = QProgressBar()
        self.progress.setRange(0, 1000)
        self.progress.setTextVisible(True)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setEnabled(False)
        self.status = QLabel("Run a sweep to see the worst case of every margin across the tolerances.")
        self.status.setWordWrap(True)

        bar = QGridLayout()
        bar.addWidget(QLabel("Sweep"), 0, 0)
        bar.addWidget(self.mode_box, 0, 1)
        bar.addWidget(QLabel("count"), 0, 2)
        bar.addWidget(self.count_box, 0, 3)
        bar.addWidget(QLabel("seed"), 0, 4)
        bar.addWidget(self.seed_box, 0, 5)
        bar.addWidget(self.sweep_button, 0, 6)
        bar.addWidget(QLabel("Objective"), 1, 0)
        bar.addWidget(self.objective_box, 1, 1)
        bar.addWidget(QLabel("at"), 1, 2)
        bar.addWidget(self.at_box, 1, 3)
        bar.addWidget(self.tune_button, 1, 6)
        bar.addWidget(self.notch_button, 1, 7)
        bar.addWidget(self.progress, 0, 7)
        bar.addWidget(self.cancel_button, 0, 8)

        # --- tolerances, worst cases, ranking ----------------------------------------
        self.tolerance_table = QTableWidget(len(PARAMETERS), 3)
        self.tolerance_table.setHorizontalHeaderLabels(["parameter", "low %", "high %"])
        self.tolerance_table.verticalHeader().setVisible(False)
        self.tolerance_table.horizontalHeader().setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        self.worst_table = QTableWidget(0, 5)
        self.worst_table.setHorizontalHeaderLabels(["loop", "metric", "nominal", "worst", "worst corner"])
        self.worst_table.verticalHeader().setVisible(False)
        self.worst_table.horizontalHeader().setSectionResizeMode(4, QHeaderView.ResizeMode.Stretch)
        self.worst_table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.ranking_table = QTableWidget(0, 4)
        self.ranking_table.setHorizontalHeaderLabels(["tolerance", "range", "loop hit hardest", "PM lost"])
        self.ranking_table.verticalHeader().setVisible(False)
        self.ranking_table.horizontalHeader().setStretchLastSection(True)
        self.ranking_table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)

        def boxed(title, widget):
            box = QGroupBox(title)
            lay = QVBoxLayout(box)
            lay.setContentsMargins(4, 4, 4, 4)
            lay.addWidget(widget)
            return box

        tables = QSplitter(Qt.Orientation.Vertical)
        tables.addWidget(boxed("Tolerances (% of nominal; stored in the preset)", self.tolerance_table))
        tables.addWidget(boxed("Worst case per loop", self.worst_table))
        tables.addWidget(boxed("Which tolerance costs the most margin", self.ranking_table))
        tables.setSizes([230, 400, 210])
        self.tolerance_table.resizeColumnsToContents()

        # --- band plots ----------------------------------------------------------------
        self.loop_box = QComboBox()
        self.loop_box.addItems(list(LOOP_NAMES))
        self.loop_box.setCurrentText("speed")
        self.graphics = pg.GraphicsLayoutWidget()
        self.mag_plot = self.graphics.addPlot(row=0, col=0, title="open loop |L| across variants")
        self.phase_plot = self.graphics.addPlot(row=1, col=0, title="arg L")
        self.step_plot = self.graphics.addPlot(row=2, col=0, title="closed-loop step")
        for p in (self.mag_plot, self.phase_plot):
            # Data go in as log10(f) and the axis shows 10^x: FillBetweenItem does not follow
            # a plot's log mode, so the transform is done once here for every item alike.
            p.getAxis("bottom").setLogMode(True)
            p.showGrid(x=True, y=True, alpha=0.25)
            p.getAxis("left").enableAutoSIPrefix(False)
        for p in (self.mag_plot, self.phase_plot, self.step_plot):
            p.getAxis("left").setWidth(LEFT_AXIS_PX)
        self.phase_plot.setXLink(self.mag_plot)
        self.step_plot.showGrid(x=True, y=True, alpha=0.25)
        self.mag_plot.setLabel("left", "|L|", units="dB")
        self.phase_plot.setLabel("left", "phase", units="deg")
        self.phase_plot.setLabel("bottom", "frequency (Hz)")
        self.step_plot.setLabel("left", "output / step")
        self.step_plot.setLabel("bottom", "time", units="s")
        self.mag_plot.addLine(y=0.0, pen=pg.mkPen((150, 150, 150), style=Qt.PenStyle.DashLine))
        self.phase_plot.addLine(y=-180.0, pen=pg.mkPen((150, 150, 150), style=Qt.PenStyle.DashLine))
        self.bands = {"mag": _Band(self.mag_plot), "phase": _Band(self.phase_plot), "step": _Band(self.step_plot)}
        right = QWidget()
        rl = QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        row = QHBoxLayout()
        row.addWidget(QLabel("Loop"))
        row.addWidget(self.loop_box)
        row.addWidget(QLabel("band: min/max over the stable variants; black: nominal"))
        row.addStretch(1)
        rl.addLayout(row)
        rl.addWidget(self.graphics)

        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(tables)
        split.addWidget(right)
        split.setSizes([700, 560])
        layout = QVBoxLayout(self)
        layout.addLayout(bar)
        layout.addWidget(self.status)
        layout.addWidget(split, 1)

        self.sweep_button.clicked.connect(self.start_sweep)
        self.tune_button.clicked.connect(self.start_autotune)
        self.notch_button.clicked.connect(self.start_notch)
        self.cancel_button.clicked.connect(self.cancel)
        self.loop_box.currentTextChanged.connect(lambda _t: self._show_bands())
        self.objective_box.currentTextChanged.connect(lambda t: self.at_box.setEnabled(t == "stiffness"))
        self.at_box.setEnabled(False)
        self.tolerance_table.itemChanged.connect(self._tolerance_edited)
        session.changed.connect(self._fill_tolerances)
        session.preset_loaded.connect(self._preset_loaded)
        self._fill_tolerances()

    # --- tolerances -----------------------------------------------------------------------
    def _fill_tolerances(self) -> None:
        # session.changed fires on every slider tick: re-read only when the tolerances or the axis changed.
        key = (self.session.state.tolerances, self.session.axis)
        if key == getattr(self, "_shown_key", None):
            return
        self._shown_key = key
        try:
            tol = self.session.tolerances()
        except InputError:
            return
        self.tolerance_table.blockSignals(True)
        try:
            for i, name in enumerate(PARAMETERS):
                t = tol.get(name)
                cells = (DESCRIPTIONS.get(name, name), f"{(t.low_factor - 1) * 100:+.4g}",
                         f"{(t.high_factor - 1) * 100:+.4g}")
                for j, text in enumerate(cells):
                    item = self.tolerance_table.item(i, j)
                    if item is None:
                        item = QTableWidgetItem()
                        self.tolerance_table.setItem(i, j, item)
                    item.setText(text)
                    if j == 0:
                        item.setFlags(item.flags() & ~Qt.ItemFlag.ItemIsEditable)
                        item.setData(Qt.ItemDataRole.UserRole, name)
                compliant_only = name == "stiffness" and not self.session.axis.load.compliant
                for j in (1, 2):
                    item = self.tolerance_table.item(i, j)
                    flags = item.flags() | Qt.ItemFlag.ItemIsEditable
                    item.setFlags(flags & ~Qt.ItemFlag.ItemIsEditable if compliant_only else flags)
        finally:
            self.tolerance_table.blockSignals(False)

    def _tolerance_edited(self, item: QTableWidgetItem) -> None:
        row = item.row()
        name = PARAMETERS[row]
        try:
            low = float(self.tolerance_table.item(row, 1).text().replace("%", ""))
            high = float(self.tolerance_table.item(row, 2).text().replace("%", ""))
        except ValueError:
            self.status.setText(f"{DESCRIPTIONS.get(name, name)}: type a percentage, e.g. -10 or +40")
            self._shown_key = None
            self._fill_tolerances()
            return
        reason = self.session.set_tolerance(name, low, high)
        if reason:
            self.status.setText(reason)
            self._shown_key = None
            self._fill_tolerances()

    def _preset_loaded(self) -> None:
        self.cancel()
        self.result = None
        self.worst_table.setRowCount(0)
        self.ranking_table.setRowCount(0)
        for band in self.bands.values():
            band.set(np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0))
        self._shown_key = None
        self._fill_tolerances()

    # --- jobs -----------------------------------------------------------------------------
    @property
    def busy(self) -> bool:
        return self.job is not None

    def _start(self, kind: str, work, label: str) -> bool:
        if self.job is not None:
            return False
        job = RobustnessJob(kind, work)
        job.progress.connect(self._progress)
        job.finished.connect(self._finished)
        job.cancelled.connect(self._cancelled)
        job.failed.connect(self._failed)
        self.job = job
        for b in (self.sweep_button, self.tune_button, self.notch_button):
            b.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress.setValue(0)
        self.progress.setFormat(f"{label} %p%")
        self.status.setText(f"{label}...")
        job.start()
        return True

    def _inputs(self):
        """Frozen inputs for a job, read once from the Session (None with the reason shown when refused)."""
        try:
            tol = self.session.tolerances()
        except InputError as err:
            self.status.setText(str(err))
            return None
        if not tol.varied:
            self.status.setText("No tolerance is set: give at least one parameter a range in the table.")
            return None
        from core.flags import targets_from_dict

        return self.session.axis, self.session.gains, tol, targets_from_dict(self.session.targets_table)

    def start_sweep(self) -> bool:
        """Sweep the active gain set over the tolerances (mode, count, seed from the controls)."""
        from core.sweep import SweepSettings

        inputs = self._inputs()
        if inputs is None:
            return False
        mode = self.mode_box.currentText()
        try:
            count = self.count_box.value()
            settings = SweepSettings(mode=mode, count=count, seed=self.seed_box.value(),
                                     levels=min(max(count, 2), 50) if mode == "grid" else 3)
        except InputError as err:
            self.status.setText(str(err))
            return False
        axis, gains, tol, targets = inputs
        return self._start("sweep", sweep_work(axis, gains, tol, settings, targets), f"sweep ({mode})")

    def start_autotune(self) -> bool:
        """Auto-tune from the active gain set; the result is offered as a new gain set."""
        inputs = self._inputs()
        if inputs is None:
            return False
        axis, gains, tol, targets = inputs
        objective = self.objective_box.currentText()
        at = self.at_box.value() if objective == "stiffness" else None
        ratio = self.session.tuning_table.get("position_separation")
        work = autotune_work(axis, gains, tol, targets, objective, at, None if ratio is None else float(ratio),
                             f"{gains.name} auto-tuned")
        return self._start("autotune", work, f"auto-tune ({objective})")

    def start_notch(self) -> bool:
        """Propose a resonance notch for the active set; when it comes, add it to the speed loop (undoable)."""
        if not self.session.axis.load.compliant:
            self.status.setText("The load is rigid: there is no two-mass resonance to notch.")
            return False
        try:
            tol = self.session.tolerances()
        except InputError as err:
            self.status.setText(str(err))
            return False
        return self._start("notch", notch_work(self.session.axis, self.session.gains, tol), "notch proposal")

    def cancel(self) -> None:
        """Ask the running job to stop; its result, if any arrives, is dropped."""
        if self.job is not None:
            self.job.cancel()
            self.status.setText("Cancelling...")

    def wait(self, ms: int = 60000) -> None:
        """Block until the running job's thread ends (tests, window close)."""
        if self.job is not None:
            self.job.wait(ms)

    def _progress(self, fraction: float, message: str) -> None:
        if self.job is not None and not self.job.stopping:
            self.progress.setValue(int(1000 * fraction))
            self.progress.setToolTip(message)

    def _end(self, how: str) -> str:
        job, self.job = self.job, None
        kind = job.kind if job is not None else ""
        if job is not None:
            job.wait(5000)
            job.deleteLater()
        for b in (self.sweep_button, self.tune_button, self.notch_button):
            b.setEnabled(True)
        self.cancel_button.setEnabled(False)
        self.progress.setValue(1000 if how == "finished" else 0)
        self.progress.setFormat("%p%")
        return kind

    def _finished(self, result) -> None:
        job = self.job
        if job is not None and job.stopping:
            self._cancelled()
            return
        kind = self._end("finished")
        if kind == "sweep":
            self.show_sweep(result)
        elif kind == "autotune":
            self._tuned(result)
        elif kind == "notch":
            self._notched(result)
        self.job_done.emit(kind, "finished")

    def _cancelled(self) -> None:
        kind = self._end("cancelled")
        self.status.setText(f"{kind.replace('autotune', 'auto-tune').capitalize()} cancelled; nothing was changed.")
        self.job_done.emit(kind, "cancelled")

    def _failed(self, text: str) -> None:
        kind = self._end("failed")
        self.status.setText(f"{kind} refused: {text}")
        self.job_done.emit(kind, "failed")

    # --- results ----------------------------------------------------------------------------
    def _tuned(self, result) -> None:
        self.tune_result = result
        if result.gains is None:
            self.status.setText(f"Auto-tune {result.status}: {result.message}")
            return
        reason = self.session.add_tuned_gain_set(result.gains)
        if reason:
            self.status.setText(f"Auto-tuned set not added: {reason}")
            return
        self.status.setText(f"Auto-tune {result.status} in {result.elapsed_s:.1f} s: worst-case "
                            f"{result.objective.replace('_', ' ')} {result.objective_value:.4g} (start "
                            f"{result.start_value:.4g}); binding: {result.binding}. Added as gain set "
                            f"'{self.session.active}' (Undo removes it). {result.position_kp_choice}")

    def _notched(self, proposal) -> None:
        self.proposal = proposal
        added = proposal.gains.speed.notches[len(proposal.gains.speed.notches) - proposal.added_notches:]
        if not added:
            self.status.setText("No notch proposed.")
            return
        reason = self.session.add_speed_notches(added)
        if reason:
            self.status.setText(f"Notch not added: {reason}")
            return
        where = ", ".join(f"{n.centre_hz:.4g} Hz ({20 * math.log10(n.zeta_zero / n.zeta_pole):.1f} dB)" for n in added)
        verdict = "verified at every tolerance point" if proposal.verified else "NOT verified at every tolerance point"
        self.status.setText(f"Notch added to the speed feedback: {where}. Resonance margin worst "
                            f"{proposal.resonance_margin_worst_before_db:+.1f} -> "
                            f"{proposal.resonance_margin_worst_after_db:+.1f} dB (target {proposal.gm_target_db:g} dB, "
                            f"{verdict}); phase cost at the speed crossover {proposal.phase_cost_deg:+.1f} deg. "
                            "Undo removes it.")

    def show_sweep(self, result) -> None:
        """Fill the worst-case table, the ranking and the bands from a SweepResult."""
        self.result = result
        self.worst_table.setRowCount(len(result.worst))
        for i, w in enumerate(result.worst):
            unit = _UNITS.get(w.metric, "")
            cells = (w.loop.replace("_", " "), _METRIC_TEXT.get(w.metric, w.metric), _num(w.nominal, unit),
                     _num(w.value, unit), _corner_text(w.factors))
            for j, text in enumerate(cells):
                self.worst_table.setItem(i, j, QTableWidgetItem(text))
        self.worst_table.resizeColumnsToContents()
        self.worst_table.horizontalHeader().setSectionResizeMode(4, QHeaderView.ResizeMode.Stretch)
        self.ranking_table.setRowCount(len(result.ranking))
        for i, r in enumerate(result.ranking):
            cells = (DESCRIPTIONS.get(r.parameter, r.parameter),
                     f"x{r.low_factor:.3g} .. x{r.high_factor:.3g}", r.worst_loop,
                     _num(r.phase_margin_loss_deg[r.worst_loop], "deg"))
            for j, text in enumerate(cells):
                self.ranking_table.setItem(i, j, QTableWidgetItem(text))
        self.ranking_table.resizeColumnsToContents()
        unstable = sum(int((~result.margins[loop].stable).sum()) for loop in LOOP_NAMES)
        flags = "; ".join(f.message for f in result.flags[:2])
        self.status.setText(f"{result.settings.mode} sweep: {result.variant_count} variants in "
                            f"{result.elapsed_s:.2f} s; {unstable} unstable loop-variants. {flags}")
        self._show_bands()

    def _show_bands(self) -> None:
        r = self.result
        if r is None:
            return
        loop = self.loop_box.currentText()
        m, p, s = r.bode_magnitude[loop], r.bode_phase[loop], r.steps[loop]
        self.bands["mag"].set(np.log10(m.x), m.low, m.high, m.nominal)
        self.bands["phase"].set(np.log10(p.x), p.low, p.high, p.nominal)
        self.bands["step"].set(s.x, s.low, s.high, s.nominal)
        self.mag_plot.setTitle(f"{loop} open loop |L| across {r.variant_count} variants")
        for plot in (self.mag_plot, self.phase_plot, self.step_plot):
            plot.enableAutoRange()
