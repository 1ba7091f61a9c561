"""Compared gain sets drawn together: a fixed pool of curves per plot and a legend.

Every plot that can show a comparison holds one :class:`Overlay`: its curves are created
once (one per slot of :data:`app.theme.COMPARE_STYLES`) and fed with ``setData``; unused
slots are hidden. Slot ``i`` always has the same colour and dash pattern on every plot,
so one legend per view reads for all of them.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor

from app.plots.style import Curve, pen
from app.theme import CARD, COMPARE_STYLES, INK, RULE

SLOTS = len(COMPARE_STYLES)
"""How many gain sets a plot can draw together."""

PEN_WIDTH = 1.6  # dash patterns need a little width to read; only drawn while comparing


def compare_pen(slot: int):
    """The pen of comparison slot ``slot``: its colour and its dash pattern."""
    colour, dashes = COMPARE_STYLES[slot % SLOTS]
    p = pen(colour, PEN_WIDTH)
    if dashes is not None:
        p.setStyle(Qt.PenStyle.CustomDashLine)
        p.setDashPattern(list(dashes))
    return p


def pen_signature(p) -> tuple:
    """What tells two pens apart for a reader: colour, style and dash pattern."""
    return p.color().name(), p.style(), tuple(p.dashPattern())


class Overlay:
    """``SLOTS`` curves on ``plot``, hidden until a comparison is shown.

    Parameters
    ----------
    plot : pyqtgraph.PlotItem
    legend_corner : tuple of float, optional
        Where a legend goes, as pyqtgraph's LegendItem ``offset`` (negative: from the right
        or bottom edge); None for no legend on this plot.
    """

    def __init__(self, plot: pg.PlotItem, legend_corner: tuple[float, float] | None = None):
        self.plot = plot
        self.curves = []
        for slot in range(SLOTS):
            item = Curve(pen=compare_pen(slot), skipFiniteCheck=True)
            item.setZValue(5 + SLOTS - slot)  # the first (baseline-side) set on top
            item.hide()
            plot.addItem(item)
            self.curves.append(item)
        self.legend = None
        if legend_corner is not None:
            self.legend = pg.LegendItem(offset=legend_corner, labelTextColor=INK, labelTextSize="8pt",
                                        brush=pg.mkBrush(QColor(CARD)), pen=pen(RULE), verSpacing=-4)
            self.legend.setParentItem(plot.vb)
            self.legend.hide()
        self.names: tuple[str, ...] = ()
        self.data: list[tuple[np.ndarray, np.ndarray]] = []

    @property
    def active(self) -> bool:
        """True while a comparison is drawn."""
        return bool(self.names)

    def show(self, names, data) -> None:
        """Draw ``data[i] = (x, y)`` for set ``names[i]`` (None: that set has nothing to draw)."""
        names = tuple(names)[:SLOTS]
        self.data = []
        for slot, item in enumerate(self.curves):
            xy = data[slot] if slot < len(names) else None
            if xy is None or len(xy[0]) < 2:
                item.hide()
                continue
            item.setData(xy[0], xy[1])
            item.show()
            self.data.append(xy)
        if self.legend is not None and names != self.names:
            self.legend.clear()
            for slot, name in enumerate(names):
                self.legend.addItem(self.curves[slot], name)
            self.legend.setVisible(bool(names))
        self.names = names

    def hide(self) -> None:
        """Back to the single active set: every slot and the legend hidden."""
        for item in self.curves:
            item.hide()
        if self.legend is not None:
            self.legend.hide()
            self.legend.clear()
        self.names, self.data = (), []

    def shown(self) -> list[Curve]:
        """The curves on screen now (tests and range fitting)."""
        return [c for c in self.curves if c.isVisible()]

    def y_extent(self, x_min: float = -np.inf, x_max: float = np.inf) -> tuple[float, float] | None:
        """Smallest and largest finite y of the drawn sets (None when nothing is drawn)."""
        lo, hi = np.inf, -np.inf
        for x, y in self.data:
            y = np.asarray(y)[(np.asarray(x) >= x_min) & (np.asarray(x) <= x_max)]
            y = y[np.isfinite(y)]
            if y.size:
                lo, hi = min(lo, float(y.min())), max(hi, float(y.max()))
        return None if lo > hi else (lo, hi)
