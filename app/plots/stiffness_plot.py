"""Dynamic stiffness at the load: how hard the closed axis pushes back, over frequency."""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg

from app.plots.overlay import Overlay
from app.plots.style import LOOP_PEN, DecadeRules, curve, styled_plot


class StiffnessPlot:
    """|load torque / load position| against frequency, log-log."""

    def __init__(self, plot: pg.PlotItem):
        self.plot = plot
        styled_plot(plot, "Dynamic stiffness at the load", "Frequency", "Hz", "|ΔF / Δx|", None)
        plot.setLogMode(x=True, y=True)
        plot.getAxis("bottom").enableAutoSIPrefix(False)
        plot.getAxis("left").enableAutoSIPrefix(False)
        DecadeRules(plot)
        self.curve = curve(plot, LOOP_PEN["axis"])
        self.overlay = Overlay(plot, (-4, 4))
        self._data = None
        self._unit = None

    def update(self, analysis, axis) -> None:
        unit = "N/m" if axis.load.motion == "linear" else "N·m/rad"
        if unit != self._unit:
            self._unit = unit
            self.plot.setLabel("left", f"|ΔF / Δx| ({unit})")
        f, k = analysis.stiffness_hz, analysis.dynamic_stiffness
        ok = np.isfinite(k) & (k > 0)
        if not ok.all():
            f, k = f[ok], k[ok]
        self._data = (f, k)
        self.curve.setData(np.log10(f), np.log10(k))

    def compare(self, names, analyses) -> None:
        """Draw every compared set's stiffness together (no names: the active set alone)."""
        if not names:
            self.overlay.hide()
            self.curve.show()
            return
        self.curve.hide()
        data = []
        for a in analyses:
            f, k = a.stiffness_hz, a.dynamic_stiffness
            ok = np.isfinite(k) & (k > 0)
            data.append((np.log10(f[ok]), np.log10(k[ok])))
        self.overlay.show(names, data)

    def fit(self) -> None:
        if self._data is None or len(self._data[0]) < 2:
            return
        f, k = self._data
        lo, hi = math.log10(float(k.min())), math.log10(float(k.max()))
        if self.overlay.active:
            lo, hi = self.overlay.y_extent() or (lo, hi)
        self.plot.vb.setRange(xRange=(math.log10(f[0]), math.log10(f[-1])), yRange=(lo - 0.2, hi + 0.2),
                              padding=0)
