"""Closed-loop unit-step response of one loop."""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg

from app.plots.overlay import Overlay
from app.plots.style import (Annotation, LOOP_PEN, NO_BORDER, REF_PEN, SEVERITY_BORDER, SEVERITY_PEN, curve, hline,
                             styled_plot)
from app.theme import LOOP_TITLES

_DISPLAY_LIMIT = 1e3  # an unstable response is drawn clipped: its growth, not its size, is the news


def _shown(y: np.ndarray) -> np.ndarray:
    if not np.isfinite(y).all() or np.abs(y).max() > _DISPLAY_LIMIT:
        y = np.clip(np.nan_to_num(y, nan=0.0, posinf=_DISPLAY_LIMIT, neginf=-_DISPLAY_LIMIT),
                    -_DISPLAY_LIMIT, _DISPLAY_LIMIT)
    return y


class StepPlot:
    """Step of the closed ``loop``: the response, the unit reference and the ±2 % band.

    With ``legend`` the plot also carries the legend of a comparison (one per view is enough:
    every plot draws slot ``i`` in the same pen).
    """

    def __init__(self, plot: pg.PlotItem, loop: str, legend: bool = False):
        self.loop, self.plot = loop, plot
        styled_plot(plot, f"{LOOP_TITLES[loop]} — step", "Time", "s", "Output / step", None)
        self.reference = hline(plot, 1.0)
        self.band = (hline(plot, 1.02, REF_PEN), hline(plot, 0.98, REF_PEN))
        for b in self.band:
            b.setOpacity(0.35)
        self.curve = curve(plot, LOOP_PEN[loop])
        self.overlay = Overlay(plot, (-4, -4) if legend else None)
        self.text = Annotation(plot.vb, "top-right")
        self._alert = None
        self._x = self._y = None

    def update(self, analysis) -> None:
        st = analysis.steps[self.loop]
        y = _shown(st.value)
        self._x, self._y = st.time_s, y
        self.curve.setData(st.time_s, y)
        settle = st.settling_time_s
        words = "overshoot < 0.01 %" if st.overshoot_pct < 0.01 else f"overshoot {st.overshoot_pct:.3g} %"
        if math.isfinite(settle):
            words += f"\nsettles {settle * 1e3:.3g} ms" if settle < 1 else f"\nsettles {settle:.3g} s"
        self.text.set_text(words)

    def compare(self, names, analyses) -> None:
        """Draw every compared set's step together (no names: back to the active set alone)."""
        if not names:
            self.overlay.hide()
            self.curve.show()
            return
        self.curve.hide()
        self.overlay.show(names, [(a.steps[self.loop].time_s, _shown(a.steps[self.loop].value)) for a in analyses])

    def fit(self) -> None:
        if self._x is None or len(self._x) < 2:
            return
        lo, hi = float(np.min(self._y)), float(np.max(self._y))
        t1 = float(self._x[-1])
        if self.overlay.active:
            t1 = max([float(x[-1]) for x, _ in self.overlay.data] + [0.0]) or t1
            lo, hi = self.overlay.y_extent() or (lo, hi)
        lo, hi = min(lo, 0.0), max(hi, 1.1)
        pad = 0.06 * (hi - lo)
        self.plot.vb.setRange(xRange=(0.0, t1), yRange=(lo - pad, hi + pad), padding=0)

    def set_alert(self, severity: str | None) -> None:
        if severity == self._alert:
            return
        self._alert = severity
        self.plot.vb.setBorder(SEVERITY_BORDER[severity] if severity else NO_BORDER)
        self.curve.setPen(SEVERITY_PEN[severity] if severity == "error" else LOOP_PEN[self.loop])
