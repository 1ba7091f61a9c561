"""Pens and plot set-up shared by every plot (1-px pens: wide pens are slow to paint)."""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QGraphicsItem, QGraphicsSimpleTextItem

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


LEFT_AXIS_PX = 56
"""Width of every plot's left axis: plots stacked in a column then share one left edge, so
plots with linked x axes (Bode magnitude over phase, a move's traces) show the same
range; with widths that follow the tick labels pyqtgraph offsets the linked ranges by
the difference instead. Wide enough for "-1000" and a rotated label."""


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
        # An axis overlaps its view box by the tick length, so every curve update repaints
        # it; kept as a pixmap it is blitted instead of replayed (pyqtgraph calls update()
        # when the range or label changes, which renews the pixmap).
        ax.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)
    plot.getAxis("left").setWidth(LEFT_AXIS_PX)
    plot.hideButtons()
    plot.setMenuEnabled(False)
    plot.vb.setBorder(NO_BORDER)
    plot.vb.disableAutoRange()
    return plot


def curve(plot: pg.PlotItem, colour_pen, ignore_bounds: bool = False) -> pg.PlotCurveItem:
    """A curve created once and fed with ``setData`` afterwards.

    A bare PlotCurveItem, not a PlotDataItem: the latter's display pipeline (log
    mapping, downsampling, clipping) costs more per update than the whole paint,
    so log axes are fed log10 data by the caller.
    """
    item = Curve(pen=colour_pen, skipFiniteCheck=True)
    plot.addItem(item, ignoreBounds=ignore_bounds)
    return item


class Curve(pg.PlotCurveItem):
    """A PlotCurveItem whose full-range data bounds (asked for by Qt's repaint on every
    ``setData``) are a plain min and max when the data are finite and the pen cosmetic,
    as they almost always are here; pyqtgraph's own path (NaN-tolerant, with its warning
    filters, adding the width of a non-cosmetic pen) runs otherwise, with the same result."""

    def dataBounds(self, ax, frac=1.0, orthoRange=None):  # noqa: N802, N803 - pyqtgraph's names
        cache = self._boundsCache[ax]
        if frac < 1.0 or orthoRange is not None or (cache is not None and cache[0] == (frac, orthoRange)):
            return super().dataBounds(ax, frac, orthoRange)
        x, y = self.getData()
        if x is None or len(x) == 0:
            return (None, None)
        d = x if ax == 0 else y
        bounds = (float(d.min()), float(d.max()))
        plain = self.opts["fillLevel"] is None and self.opts["pen"].isCosmetic() and self.opts["shadowPen"] is None
        if not (plain and math.isfinite(bounds[0]) and math.isfinite(bounds[1])):
            return super().dataBounds(ax, frac, orthoRange)
        self._boundsCache[ax] = [(frac, orthoRange), bounds]
        return bounds


class DecadeRules:
    """Light vertical rules at each decade of a log axis, drawn as one item (not one per line)."""

    def __init__(self, plot: pg.PlotItem, decades=range(-3, 7), span: float = 1e6):
        x = np.repeat(np.asarray(list(decades), float), 2)
        y = np.tile([-span, span], len(x) // 2)
        self.item = pg.PlotCurveItem(x, y, pen=GRID_PEN, connect="pairs", skipFiniteCheck=True)
        self.item.setZValue(-20)
        plot.addItem(self.item, ignoreBounds=True)


def hline(plot: pg.PlotItem, y: float, p=REF_PEN) -> pg.InfiniteLine:
    line = pg.InfiniteLine(pos=y, angle=0, pen=p, movable=False)
    plot.addItem(line, ignoreBounds=True)
    return line


def vline(plot: pg.PlotItem, x: float, p=REF_PEN) -> pg.InfiniteLine:
    line = pg.InfiniteLine(pos=x, angle=90, pen=p, movable=False)
    plot.addItem(line, ignoreBounds=True)
    return line


class Annotation:
    """A plain text pinned to a corner of a plot's view box, in pixels (not data units).

    A simple text item rather than pyqtgraph's rich-text ``TextItem``: setting its text
    lays out no document, and the text is kept as a pixmap between changes. Setting the
    same text again does nothing.

    Parameters
    ----------
    vb : pyqtgraph.ViewBox
    corner : {"top-right", "bottom-right", "top-left"}
    colour : str
    """

    MARGIN = (6, 4)
    """Distance from the view box's edges, px (x, y)."""

    def __init__(self, vb: pg.ViewBox, corner: str = "top-right", colour: str = "#555"):
        self.vb, self.corner = vb, corner
        self.item = QGraphicsSimpleTextItem()
        self.item.setParentItem(vb)
        self.item.setBrush(pg.mkColor(colour))
        self.item.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)
        self.item.setZValue(50)
        self._text = ""
        vb.sigResized.connect(self.place)

    def set_text(self, text: str) -> None:
        if text == self._text:
            return
        self._text = text
        self.item.setText(text)
        self.place()

    def place(self, *_) -> None:
        r = self.item.boundingRect()
        mx, my = self.MARGIN
        x = self.vb.width() - mx - r.width() if self.corner.endswith("right") else mx
        y = my if self.corner.startswith("top") else self.vb.height() - my - r.height()
        self.item.setPos(x, y)
