"""Load-torque step with all loops closed: motor speed and position deviation."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

from app.plots.overlay import Overlay
from app.plots.style import Annotation, LOOP_PEN, NO_BORDER, SEVERITY_BORDER, curve, hline, styled_plot


class LoadStepPlots:
    """Speed dip and position error after a load-torque step at the motor."""

    def __init__(self, speed: pg.PlotItem, position: pg.PlotItem):
        self.speed, self.position = speed, position
        styled_plot(speed, "Load-torque step — speed deviation", "Time", "s", "Motor speed", "rad/s")
        styled_plot(position, "Load-torque step — position deviation", "Time", "s", "Motor position", "rad")
        position.setXLink(speed)
        hline(speed, 0.0)
        hline(position, 0.0)
        self.speed_curve = curve(speed, LOOP_PEN["speed"])
        self.position_curve = curve(position, LOOP_PEN["position"])
        self.speed_overlay, self.position_overlay = Overlay(speed, (-4, 4)), Overlay(position)
        self.text = Annotation(speed.vb, "bottom-right")
        self._data = None
        self._title = ""

    def update(self, analysis) -> None:
        ls = analysis.load_step
        self._data = (ls.time_s, ls.speed_rad_s, ls.position_rad)
        self.speed_curve.setData(ls.time_s, ls.speed_rad_s)
        self.position_curve.setData(ls.time_s, ls.position_rad)
        title = f"Load-torque step of {ls.load_torque_nm:.3g} N·m — speed deviation"
        if title != self._title:
            self._title = title
            self.speed.setTitle(title, size="9pt")
        self.text.set_text(f"dip {ls.speed_dip_rad_s:.3g} rad/s\nerror {ls.position_error_rad * 1e3:.3g} mrad")

    def compare(self, names, analyses) -> None:
        """Draw every compared set's load step together (no names: the active set alone)."""
        if not names:
            for o in (self.speed_overlay, self.position_overlay):
                o.hide()
            self.speed_curve.show()
            self.position_curve.show()
            return
        self.speed_curve.hide()
        self.position_curve.hide()
        self.speed_overlay.show(names, [(a.load_step.time_s, a.load_step.speed_rad_s) for a in analyses])
        self.position_overlay.show(names, [(a.load_step.time_s, a.load_step.position_rad) for a in analyses])

    def fit(self) -> None:
        if self._data is None:
            return
        t, w, x = self._data
        for plot, y, overlay in ((self.speed, w, self.speed_overlay), (self.position, x, self.position_overlay)):
            lo, hi = float(np.min(y)), float(np.max(y))
            if overlay.active:
                lo, hi = overlay.y_extent(0.0, float(t[-1])) or (lo, hi)
            lo, hi = min(lo, 0.0), max(hi, 0.0)
            pad = 0.08 * (hi - lo) or 1e-9
            plot.vb.setRange(xRange=(0.0, float(t[-1])), yRange=(lo - pad, hi + pad), padding=0)

    def set_alert(self, severity: str | None) -> None:
        self.speed.vb.setBorder(SEVERITY_BORDER[severity] if severity else NO_BORDER)
