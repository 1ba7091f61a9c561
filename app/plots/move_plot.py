"""The simulated move: position and following error, current and voltage against their limits.

Saturated intervals are shaded: one filled step curve per plot (limit where the
command was clamped, zero elsewhere), so nothing is created per interval.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor

from app.plots.overlay import Overlay
from app.plots.style import Annotation, LOOP_PEN, NO_BORDER, SEVERITY_BORDER, curve, hline, pen, styled_plot
from app.theme import LOOP_COLOURS, MUTED, SEVERITY_COLOURS


def _shade(plot: pg.PlotItem, colour: str) -> pg.PlotDataItem:
    c = QColor(colour)
    c.setAlpha(55)
    item = pg.PlotCurveItem(pen=pg.mkPen(None), fillLevel=0.0, brush=c, skipFiniteCheck=True)
    item.setZValue(-10)
    plot.addItem(item, ignoreBounds=True)
    return item


BUCKETS = 1500
"""Columns a trace is reduced to for drawing: about one per pixel of the plot's width."""


def envelope(t: np.ndarray, y: np.ndarray, buckets: int = BUCKETS) -> tuple[np.ndarray, np.ndarray]:
    """The samples a plot ``buckets`` pixels wide shows: the lowest and the highest of each
    run of samples that falls in one column, in time order (a run at 16 kHz is some
    16,000 samples per second, and a single-sample spike must still be drawn).

    Parameters
    ----------
    t : ndarray
        Sample times, s (increasing).
    y : ndarray
        The trace, any unit.
    buckets : int
        Columns to reduce to; traces of at most two samples per column are drawn whole.

    Returns
    -------
    t, y : ndarray
        At most ``2 * buckets`` + one column's worth of samples.
    """
    n = len(t)
    k = -(-n // buckets)
    if k <= 2:
        return t, y
    m = n // k
    rows = y[:m * k].reshape(m, k)
    lo, hi = rows.argmin(axis=1), rows.argmax(axis=1)
    start = np.arange(m) * k
    idx = np.empty(2 * m + n - m * k, dtype=np.intp)
    idx[0:2 * m:2] = start + np.minimum(lo, hi)
    idx[1:2 * m:2] = start + np.maximum(lo, hi)
    idx[2 * m:] = np.arange(m * k, n)
    return t[idx], y[idx]


def steps(t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A piecewise-constant trace (a saturation band: the limit while saturated, 0 else) as
    the corners of its steps only: two points per change instead of one per sample.

    Parameters
    ----------
    t : ndarray
        Sample times, s (increasing).
    y : ndarray
        The trace, constant between changes, any unit.

    Returns
    -------
    t, y : ndarray
        Start, a vertical edge at each sample where ``y`` changes, and end.
    """
    k = np.flatnonzero(y[1:] != y[:-1]) + 1
    tt, yy = np.empty(2 * len(k) + 2), np.empty(2 * len(k) + 2)
    tt[0], yy[0], tt[-1], yy[-1] = t[0], y[0], t[-1], y[-1]
    tt[1:-1:2], yy[1:-1:2] = t[k], y[k - 1]
    tt[2:-1:2], yy[2:-1:2] = t[k], y[k]
    return tt, yy


def _band(item: pg.PlotCurveItem, t: np.ndarray, y: np.ndarray) -> None:
    """Shade ``y`` (0 where unsaturated); an empty band is hidden, not filled."""
    shown = bool(np.any(y))
    item.setVisible(shown)
    if shown:
        item.setData(*steps(t, y))


class MovePlots:
    """Three stacked plots in ``view`` (a GraphicsLayoutWidget), x-linked."""

    def __init__(self, view: pg.GraphicsLayoutWidget):
        self.position = view.addPlot(row=0, col=0)
        self.current = view.addPlot(row=1, col=0)
        self.voltage = view.addPlot(row=2, col=0)
        styled_plot(self.position, "Move — following error", "Time", "s", "Following error", "m")
        styled_plot(self.current, "Move — current (q axis)", "Time", "s", "Current", "A")
        styled_plot(self.voltage, "Move — voltage demand", "Time", "s", "Voltage", "V")
        for p in (self.current, self.voltage):
            p.setXLink(self.position)
        hline(self.position, 0.0)
        self.error_curve = curve(self.position, LOOP_PEN["position"])
        self.speed_curve = None
        self.i_shade = _shade(self.current, SEVERITY_COLOURS["error"])
        self.v_shade = _shade(self.voltage, SEVERITY_COLOURS["error"])
        limit_pen = pen(SEVERITY_COLOURS["error"], 1, Qt.PenStyle.DashLine)
        self.i_limits = (hline(self.current, 1.0, limit_pen), hline(self.current, -1.0, limit_pen))
        cont_pen = pen(MUTED, 1, Qt.PenStyle.DotLine)
        self.i_cont = (hline(self.current, 1.0, cont_pen), hline(self.current, -1.0, cont_pen))
        self.v_limits = (hline(self.voltage, 1.0, limit_pen), hline(self.voltage, -1.0, limit_pen))
        self.i_cmd = curve(self.current, pen(LOOP_COLOURS["speed"], 1, Qt.PenStyle.DashLine))
        self.i_act = curve(self.current, LOOP_PEN["current"])
        self.v_demand = curve(self.voltage, pen(MUTED, 1, Qt.PenStyle.DashLine))
        self.v_cmd = curve(self.voltage, LOOP_PEN["current"])
        self.overlays = (Overlay(self.position, (-4, 4)), Overlay(self.current), Overlay(self.voltage))
        self._single = (self.error_curve, self.i_cmd, self.i_act, self.v_cmd, self.v_demand)
        self.message = Annotation(self.position.vb, "top-left", SEVERITY_COLOURS["error"])
        self.figures = Annotation(self.current.vb, "top-right")
        self._ranges = None
        self._unit = None

    def update(self, result, axis) -> None:
        t = result.time_s
        if len(t) < 2:
            return
        unit = result.load_unit
        if unit != self._unit:
            self._unit = unit
            self.position.setLabel("left", "Following error", units=unit)
        ref_load = result.position_reference_rad / axis.load.ratio
        err = ref_load - result.load_position
        m = result.metrics
        i_lim, v_lim = m.current_limit_a, result.voltage_limit_v
        i_cmd, v_dem = result.current_command_a, result.voltage_demand_v
        self.error_curve.setData(*envelope(t, err))
        self.i_cmd.setData(*envelope(t, i_cmd))
        self.i_act.setData(*envelope(t, result.current_a))
        self.v_cmd.setData(*envelope(t, result.voltage_command_v))
        self.v_demand.setData(*envelope(t, v_dem))
        _band(self.i_shade, t, np.where(i_cmd >= 0, i_lim, -i_lim) * result.saturated_current)
        _band(self.v_shade, t, np.where(v_dem >= 0, v_lim, -v_lim) * result.saturated_voltage)
        for line, y in zip(self.i_limits, (i_lim, -i_lim)):
            line.setValue(y)
        cont = m.continuous_current_a
        for line, y in zip(self.i_cont, (cont, -cont)):
            line.setVisible(math.isfinite(cont))
            if math.isfinite(cont):
                line.setValue(y)
        for line, y in zip(self.v_limits, (v_lim, -v_lim)):
            line.setValue(y)
        diverged = math.isfinite(result.diverged_at_s)
        self.message.set_text(f"diverged at t = {result.diverged_at_s * 1e3:.3g} ms" if diverged else "")
        self.figures.set_text(f"peak {m.peak_current_a:.3g} A of {i_lim:.3g} A   "
                             f"I-sat {m.time_current_saturated_s * 1e3:.3g} ms   "
                             f"V-sat {m.time_voltage_saturated_s * 1e3:.3g} ms")
        self.current.vb.setBorder(SEVERITY_BORDER["error"] if m.time_current_saturated_s > 0 else NO_BORDER)
        self.voltage.vb.setBorder(SEVERITY_BORDER["error"] if m.time_voltage_saturated_s > 0 else NO_BORDER)
        self._ranges = (float(t[-1]), err, max(i_lim, float(np.max(np.abs(result.current_a)))),
                        max(v_lim, float(np.max(np.abs(v_dem)))))

    def compare(self, names, simulations, axis) -> None:
        """Draw every compared set's following error, current and voltage together.

        ``simulations[i]`` is None for a set not simulated yet (its slot stays empty);
        no names: back to the active set alone.
        """
        if not names:
            for o in self.overlays:
                o.hide()
            for item in self._single:
                item.show()
            return
        for item in self._single:
            item.hide()
        series = ([], [], [])
        for result in simulations:
            if result is None or len(result.time_s) < 2:
                for s in series:
                    s.append(None)
                continue
            err = result.position_reference_rad / axis.load.ratio - result.load_position
            for s, y in zip(series, (err, result.current_a, result.voltage_command_v)):
                s.append(envelope(result.time_s, y))
        for overlay, data in zip(self.overlays, series):
            overlay.show(names, data)

    def show_error(self, text: str) -> None:
        self.message.set_text(text)

    def fit(self) -> None:
        if self._ranges is None:
            return
        t1, err, i_max, v_max = self._ranges
        e = float(np.max(np.abs(err))) or 1e-9
        extents = [o.y_extent() if o.active else None for o in self.overlays]
        if extents[0]:
            e = max(abs(extents[0][0]), abs(extents[0][1])) or e
        if extents[1]:
            i_max = max(i_max, abs(extents[1][0]), abs(extents[1][1]))
        if extents[2]:
            v_max = max(v_max, abs(extents[2][0]), abs(extents[2][1]))
        self.position.vb.setRange(xRange=(0.0, t1), yRange=(-1.1 * e, 1.1 * e), padding=0)
        self.current.vb.setRange(yRange=(-1.15 * i_max, 1.15 * i_max), padding=0)
        self.voltage.vb.setRange(yRange=(-1.15 * v_max, 1.15 * v_max), padding=0)



