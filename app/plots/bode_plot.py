"""Bode magnitude and phase of one loop's open loop, with crossover and margin markers.

The frequency axis is logarithmic: pyqtgraph maps data items through log10 itself,
but :class:`pyqtgraph.InfiniteLine` is not log-aware, so markers sit at log10(f).
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt

from app.plots.overlay import Overlay
from app.plots.style import (Annotation, DecadeRules, LOOP_PEN, NO_BORDER, SEVERITY_BORDER, SEVERITY_PEN, curve,
                             hline, pen, styled_plot, vline)
from app.theme import LOOP_COLOURS, LOOP_TITLES, MUTED


def _log10(f: float) -> float:
    return math.log10(f) if f > 0 and math.isfinite(f) else math.nan


def open_loop_db_deg(values: np.ndarray, reference_hz: float, f_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """|L| in dB and arg L in degrees, unwrapped and shifted so the phase at the
    crossover reads between -360 and 0 deg (the phase margin is then its distance
    above the -180 deg line)."""
    mag = 20.0 * np.log10(np.maximum(np.abs(values), 1e-300))
    phase = np.degrees(np.unwrap(np.angle(values)))
    if math.isfinite(reference_hz) and reference_hz > 0:
        k = min(int(np.searchsorted(f_hz, reference_hz)), len(f_hz) - 1)
        phase = phase - 360.0 * math.floor((phase[k] + 360.0) / 360.0)
    else:
        phase = phase - 360.0 * math.floor((phase[0] + 360.0) / 360.0)
    return mag, phase


class BodePlots:
    """The magnitude and phase plots of ``loop`` (two PlotItems, one marker set)."""

    def __init__(self, mag: pg.PlotItem, phase: pg.PlotItem, loop: str):
        self.loop, self.mag, self.phase = loop, mag, phase
        styled_plot(mag, f"{LOOP_TITLES[loop]} — open loop |L|", "Frequency", None, "Magnitude", "dB")
        styled_plot(phase, f"{LOOP_TITLES[loop]} — open loop ∠L", "Frequency", None, "Phase", "°")
        mag.getAxis("bottom").setLabel("Frequency", units="Hz")
        phase.getAxis("bottom").setLabel("Frequency", units="Hz")
        for p in (mag, phase):
            p.setLogMode(x=True, y=False)
            p.getAxis("bottom").enableAutoSIPrefix(False)
            DecadeRules(p)
        phase.setXLink(mag)
        hline(mag, 0.0)
        hline(phase, -180.0)
        marker = pen(LOOP_COLOURS[loop], 1, Qt.PenStyle.DashLine)
        self.marker_pen = marker
        self.cross_mag = vline(mag, 0.0, marker)
        self.cross_phase = vline(phase, 0.0, marker)
        self.res_lines = [vline(p, 0.0, pen(MUTED, 1, Qt.PenStyle.DotLine)) for p in (mag, phase) for _ in range(2)]
        for line in self.res_lines:
            line.hide()
        self.mag_curve = curve(mag, LOOP_PEN[loop])
        self.phase_curve = curve(phase, LOOP_PEN[loop])
        self.mag_overlay, self.phase_overlay = Overlay(mag), Overlay(phase)
        # Margin bars: GM from the curve up to 0 dB at the phase crossover; PM from -180 deg up to the curve.
        self.gm_bar = curve(mag, pen(LOOP_COLOURS[loop], 2), ignore_bounds=True)
        self.pm_bar = curve(phase, pen(LOOP_COLOURS[loop], 2), ignore_bounds=True)
        self.mag_text = Annotation(mag.vb, "top-right")
        self.phase_text = Annotation(phase.vb, "bottom-right")
        self._alerts: dict = {}
        self._f = self._db = self._deg = None

    def update(self, analysis, axis) -> None:
        m = analysis.margins[self.loop]
        f = analysis.frequency.omega_rad_s / (2 * math.pi)
        values = analysis.frequency.open_loop[self.loop]
        db, deg = open_loop_db_deg(values, m.phase_margin_hz if math.isfinite(m.phase_margin_hz)
                                   else m.crossover_hz, f)
        self._f, self._db, self._deg = f, db, deg
        x = np.log10(f)
        self.mag_curve.setData(x, db)
        self.phase_curve.setData(x, deg)
        for line in (self.cross_mag, self.cross_phase):
            x = _log10(m.crossover_hz)
            line.setVisible(math.isfinite(x))
            if math.isfinite(x):
                line.setValue(x)
        if math.isfinite(m.gain_margin_db) and math.isfinite(m.gain_margin_hz):
            x = math.log10(m.gain_margin_hz)
            self.gm_bar.setData(np.array([x, x]), np.array([-m.gain_margin_db, 0.0]))
            self.gm_bar.show()
        else:
            self.gm_bar.hide()
        if math.isfinite(m.phase_margin_deg) and math.isfinite(m.phase_margin_hz):
            x = math.log10(m.phase_margin_hz)
            self.pm_bar.setData(np.array([x, x]), np.array([-180.0, -180.0 + m.phase_margin_deg]))
            self.pm_bar.show()
        else:
            self.pm_bar.hide()
        fc = "—" if not math.isfinite(m.crossover_hz) else _hz(m.crossover_hz)
        gm = "∞" if not math.isfinite(m.gain_margin_db) else f"{m.gain_margin_db:.1f} dB"
        pm = "∞" if not math.isfinite(m.phase_margin_deg) else f"{m.phase_margin_deg:.1f}°"
        self.mag_text.set_text(f"fc {fc}   GM {gm}")
        self.phase_text.set_text(f"PM {pm}")
        res = [axis.resonance_hz, axis.antiresonance_hz] if self.loop != "current" else []
        for i, line in enumerate(self.res_lines):
            fr = res[i % 2] if res else math.nan
            line.setVisible(math.isfinite(fr))
            if math.isfinite(fr):
                line.setValue(math.log10(fr))

    def compare(self, names, analyses) -> None:
        """Draw every compared set's |L| and ∠L together (no names: the active set alone)."""
        if not names:
            for o in (self.mag_overlay, self.phase_overlay):
                o.hide()
            self.mag_curve.show()
            self.phase_curve.show()
            return
        self.mag_curve.hide()
        self.phase_curve.hide()
        mags, phases = [], []
        for a in analyses:
            m = a.margins[self.loop]
            f = a.frequency.omega_rad_s / (2 * math.pi)
            db, deg = open_loop_db_deg(a.frequency.open_loop[self.loop], m.phase_margin_hz
                                       if math.isfinite(m.phase_margin_hz) else m.crossover_hz, f)
            x = np.log10(f)
            mags.append((x, db))
            phases.append((x, deg))
        self.mag_overlay.show(names, mags)
        self.phase_overlay.show(names, phases)

    def fit(self) -> None:
        if self._f is None:
            return
        x0, x1 = math.log10(self._f[0]), math.log10(self._f[-1])
        db = np.clip(self._db, -120.0, 160.0)
        lo, hi = float(db.min()), float(db.max())
        if self.mag_overlay.active:
            lo, hi = self.mag_overlay.y_extent() or (lo, hi)
        lo, hi = max(lo, -100.0), min(hi, 120.0)
        pad = 0.06 * (hi - lo + 1)
        self.mag.vb.setRange(xRange=(x0, x1), yRange=(lo - pad, hi + pad), padding=0)
        lo, hi = float(np.min(self._deg)), float(np.max(self._deg))
        if self.phase_overlay.active:
            lo, hi = self.phase_overlay.y_extent() or (lo, hi)
        lo, hi = max(min(lo, -200.0), -450.0), min(max(hi, -60.0), 360.0)
        self.phase.vb.setRange(xRange=(x0, x1), yRange=(lo - 10, hi + 10), padding=0)

    def set_alerts(self, alerts: dict) -> None:
        """``alerts``: kind -> severity for this loop (see :mod:`app.flag_kinds`)."""
        if alerts == self._alerts:
            return
        self._alerts = dict(alerts)
        gm = alerts.get("gain_margin") or alerts.get("unstable")
        pm = alerts.get("phase_margin") or alerts.get("unstable")
        cross = alerts.get("separation") or alerts.get("sampling") or alerts.get("no_crossover") \
            or alerts.get("resonance")
        mag_border = gm or cross or alerts.get("sensitivity")
        self.mag.vb.setBorder(SEVERITY_BORDER[mag_border] if mag_border else NO_BORDER)
        self.phase.vb.setBorder(SEVERITY_BORDER[pm] if pm else NO_BORDER)
        bar = lambda sev: pen(SEVERITY_PEN[sev].color().name(), 2) if sev else pen(LOOP_COLOURS[self.loop], 2)
        self.gm_bar.setPen(bar(gm))
        self.pm_bar.setPen(bar(pm))
        cross_pen = SEVERITY_PEN[cross] if cross else self.marker_pen
        self.cross_mag.setPen(cross_pen)
        self.cross_phase.setPen(cross_pen)
        for line in self.res_lines:
            line.setPen(SEVERITY_PEN[alerts["resonance"]] if alerts.get("resonance")
                        else pen(MUTED, 1, Qt.PenStyle.DotLine))


def _hz(f: float) -> str:
    return f"{f / 1000:.3g} kHz" if f >= 1000 else f"{f:.3g} Hz"

