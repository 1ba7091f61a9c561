"""Pens and plot set-up shared by every plot (1-px pens: wide pens are slow to paint)."""

from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtCore import Qt

from app.theme import CARD, INK, LOOP_COLOURS, MUTED, RULE, SEVERITY_COLOURS

pg.setConfigOptions(antialias=False, background=CARD, foreground=INK)


def pen(colour: str, width: float = 1, style=Qt.PenStyle.SolidLine):
    p = pg.mkPen(colour, width=width, style=style)
    p.setCosmetic(True)
    return p


LOOP_PEN = {loop: pen(c) for loop, c in LOOP_COLOURS.items()}
REF_PEN = pen(MUTED, 1, Qt.PenStyle.DashLine)
GRID_PEN = pen(RULE, 1, Qt.PenStyle.DotLine)
SEVERITY_PEN = {k: pen(c, 1) for k, c in SEVERITY_COLOURS.items()}
SEVERITY_BORDER = {k: pen(c, 2) for k, c in SEVERITY_COLOURS.items()}
NO_BORDER = pen(RULE, 1)


def styled_plot(plot: pg.PlotItem, title: str, x_label: str, x_units: str | None, y_label: str,
                y_units: str | None) -> pg.PlotItem:
    """Labels with units (SI prefixes chosen by pyqtgraph), no mouse interaction surprises."""
    plot.setTitle(title, size="9pt", color=INK)
    plot.setLabel("bottom", x_label, units=x_units)
    plot.setLabel("left", y_label, units=y_units)
    for name in ("bottom", "left"):
        ax = plot.getAxis(name)
        ax.setPen(pen(MUTED))
        ax.setTextPen(pen(INK))
        ax.label.setFont(pg.QtGui.QFont(ax.label.font().family(), 8))
        ax.setStyle(tickFont=pg.QtGui.QFont(ax.label.font().family(), 8))
    plot.hideButtons()
    plot.setMenuEnabled(False)
    plot.vb.setBorder(NO_BORDER)
    plot.vb.disableAutoRange()
    return plot


def curve(plot: pg.PlotItem, colour_pen) -> pg.PlotDataItem:
    """A data item created once and fed with ``setData`` afterwards."""
    item = pg.PlotDataItem(pen=colour_pen, skipFiniteCheck=True, autoDownsample=False, clipToView=False)
    plot.addItem(item)
    return item


def hline(plot: pg.PlotItem, y: float, p=REF_PEN) -> pg.InfiniteLine:
    line = pg.InfiniteLine(pos=y, angle=0, pen=p, movable=False)
    plot.addItem(line, ignoreBounds=True)
    return line


def vline(plot: pg.PlotItem, x: float, p=REF_PEN) -> pg.InfiniteLine:
    line = pg.InfiniteLine(pos=x, angle=90, pen=p, movable=False)
    plot.addItem(line, ignoreBounds=True)
    return line
