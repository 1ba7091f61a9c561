"""The printable report of a configuration sheet (PDF, drawn with reportlab).

Three pages: the header block, attention line, caution and the gains in SI and
drive units; the margins and bandwidths per loop, the flags and the axis; the
plots (open-loop Bode magnitude and phase, closed-loop steps, load step), drawn
with reportlab's own graphics so no plotting library is needed. Lines differ in
dash pattern as well as colour, so they read in grey print and for colour-blind
readers.
"""

from __future__ import annotations

import math

import numpy as np
from reportlab.graphics.shapes import Drawing, Line, PolyLine, Rect, String
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import PageBreak, Paragraph, SimpleDocTemplate, Spacer, Table, TableStyle

from core.margins import LOOPS

# A palette of our own (dark blue, orange, teal), each with its own dash pattern.
LINE_STYLES = {
    "current": (colors.HexColor("#1f3a93"), None),
    "speed": (colors.HexColor("#d35400"), (6, 3)),
    "position": (colors.HexColor("#117a65"), (1.5, 2.5)),
}


def _esc(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _decimate(x: np.ndarray, y: np.ndarray, n: int = 400) -> tuple[np.ndarray, np.ndarray]:
    step = max(1, len(x) // n)
    return x[::step], y[::step]


def _nice_ticks(low: float, high: float, count: int = 5) -> np.ndarray:
    """Round tick values (1, 2 or 5 times a power of ten apart) covering [low, high]."""
    span = max(high - low, 1e-12)
    raw = span / max(count - 1, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    return np.arange(math.ceil(low / step) * step, high + 0.5 * step, step)


def _plot(title: str, series: list[tuple[str, np.ndarray, np.ndarray]], x_label: str, y_label: str,
          log_x: bool = False, width: float = 170 * mm, height: float = 52 * mm,
          y_range: tuple[float, float] | None = None) -> Drawing:
    """A line plot with a frame, grid, tick labels and a legend (series: name, x, y)."""
    d = Drawing(width, height)
    left, bottom, right, top = 16 * mm, 9 * mm, width - 4 * mm, height - 7 * mm
    d.add(String(left, height - 4.5 * mm, title, fontName="Helvetica-Bold", fontSize=8.5))
    xs = [np.log10(x) if log_x else x for _, x, _ in series]
    ok = [np.isfinite(a) & np.isfinite(y) for a, (_, _, y) in zip(xs, series)]
    allx = np.concatenate([a[m] for a, m in zip(xs, ok)]) if series else np.array([0.0, 1.0])
    ally = np.concatenate([y[m] for (_, _, y), m in zip(series, ok)]) if series else np.array([0.0, 1.0])
    x0, x1 = (float(np.floor(allx.min())), float(np.ceil(allx.max()))) if log_x else (float(allx.min()), float(allx.max()))
    y0, y1 = y_range if y_range else (float(ally.min()), float(ally.max()))
    if x1 <= x0:
        x1 = x0 + 1.0
    if y1 <= y0:
        y0, y1 = y0 - 1.0, y1 + 1.0
    pad = 0.05 * (y1 - y0)
    y0, y1 = y0 - pad, y1 + pad

    def px(v):
        return left + (v - x0) / (x1 - x0) * (right - left)

    def py(v):
        return bottom + (min(max(v, y0), y1) - y0) / (y1 - y0) * (top - bottom)

    d.add(Rect(left, bottom, right - left, top - bottom, strokeColor=colors.black, fillColor=None, strokeWidth=0.5))
    grey = colors.HexColor("#c8c8c8")
    xticks = np.arange(x0, x1 + 0.5) if log_x else _nice_ticks(x0, x1, 6)
    for t in xticks[(xticks >= x0) & (xticks <= x1)]:
        d.add(Line(px(t), bottom, px(t), top, strokeColor=grey, strokeWidth=0.3))
        text = f"{10 ** t:g}" if log_x else f"{t:.3g}"
        d.add(String(px(t), bottom - 3.5 * mm, text, fontSize=6, textAnchor="middle"))
    yticks = _nice_ticks(y0, y1, 5)
    for t in yticks[(yticks >= y0) & (yticks <= y1)]:
        d.add(Line(left, py(t), right, py(t), strokeColor=grey, strokeWidth=0.3))
        d.add(String(left - 1 * mm, py(t) - 2, f"{t:.4g}", fontSize=6, textAnchor="end"))
    d.add(String((left + right) / 2, 1 * mm, x_label, fontSize=6.5, textAnchor="middle"))
    d.add(String(left, top + 1.2 * mm, y_label, fontSize=6.5, textAnchor="end"))
    for k, ((name, _, y), a, m) in enumerate(zip(series, xs, ok)):
        colour, dash = LINE_STYLES.get(name, (colors.black, None))
        points = [c for xv, yv in zip(a[m], y[m]) for c in (px(float(xv)), py(float(yv)))]
        if len(points) >= 4:
            d.add(PolyLine(points, strokeColor=colour, strokeWidth=1.0, strokeDashArray=dash))
        lx = right - 30 * mm
        ly = top - 4 * mm - k * 3.5 * mm
        d.add(Line(lx, ly + 1, lx + 8 * mm, ly + 1, strokeColor=colour, strokeWidth=1.0, strokeDashArray=dash))
        d.add(String(lx + 9 * mm, ly - 1, name, fontSize=6.5))
    return d


def _plots(s) -> list:
    a = s.analysis
    f = a.frequency.omega_rad_s / (2 * math.pi)
    mag, phase = [], []
    for loop in LOOPS:
        ol = a.frequency.open_loop[loop]
        x, y = _decimate(f, 20 * np.log10(np.maximum(np.abs(ol), 1e-12)))
        mag.append((loop, x, y))
        x, y = _decimate(f, np.degrees(np.unwrap(np.angle(ol))))
        phase.append((loop, x, y))
    steps = [(loop, *_decimate(a.steps[loop].time_s * 1e3, a.steps[loop].value)) for loop in LOOPS]
    ls = a.load_step
    out = [_plot("Open loops |L| (each broken at its controller output)", mag, "frequency [Hz]", "dB", log_x=True,
                 y_range=(-60.0, 60.0)),
           _plot("Open-loop phase (unwrapped, shown from -540 deg)", phase, "frequency [Hz]", "deg", log_x=True,
                 y_range=(-540.0, 90.0)),
           _plot("Closed-loop unit steps", steps, "time [ms]", "per unit of step"),
           _plot(f"Load step {ls.load_torque_nm:.3g} N*m at the motor: speed deviation",
                 [("speed", *_decimate(ls.time_s * 1e3, ls.speed_rad_s))], "time [ms]", "rad/s")]
    return out


def _fmt(x: float, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    if math.isinf(x):
        return "none"
    return f"{x:.{digits}g} {unit}".strip()


def write_report(s, path) -> None:
    """Draw the report of sheet ``s`` (a :class:`core.export.Sheet`) into the PDF file ``path``."""
    styles = getSampleStyleSheet()
    body, small = styles["BodyText"], styles["BodyText"].clone("small", fontSize=7.5, leading=9)
    warn = styles["BodyText"].clone("warn", textColor=colors.HexColor("#9c0006"), fontName="Helvetica-Bold")
    grid = TableStyle([("GRID", (0, 0), (-1, -1), 0.3, colors.grey), ("FONTSIZE", (0, 0), (-1, -1), 7),
                       ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#e6e6e6")),
                       ("VALIGN", (0, 0), (-1, -1), "TOP"), ("FONTNAME", (0, 0), (-1, 0), "Helvetica-Bold")])
    story = [Paragraph(f"Drive configuration sheet: {_esc(s.axis_name)}, gain set '{_esc(s.gain_set_name)}'",
                       styles["Heading2"])]
    if s.attention:
        story.append(Paragraph(_esc(s.attention), warn))
    from core.export import header_block

    head = [[k, Paragraph(_esc(v), small)] for k, v in header_block(s) if k not in ("title", "attention", "caution")]
    story += [Table(head, colWidths=[32 * mm, 140 * mm], style=TableStyle([("FONTSIZE", (0, 0), (-1, -1), 7.5),
                                                                         ("VALIGN", (0, 0), (-1, -1), "TOP")])),
              Spacer(1, 3 * mm), Paragraph(_esc(s.caution), warn), Spacer(1, 3 * mm),
              Paragraph("Gains: SI (model convention) and drive units", styles["Heading3"])]
    rows = [["label", "gain", "SI value", "drive value", "drive unit", "range", "flag"]]
    for r in s.rows:
        rng = "" if math.isinf(r.minimum) and math.isinf(r.maximum) else f"{r.minimum:g} .. {r.maximum:g}"
        rows.append([Paragraph(_esc(r.label), small), Paragraph(_esc(r.gain + (f" ({r.form_text})" if r.form_text else "")), small),
                     Paragraph(_esc(_fmt(r.si_value, r.si_unit, 6)), small), r.text, Paragraph(_esc(r.drive_unit), small),
                     rng, Paragraph(_esc(" ".join(f.severity for f in r.flags)), small)])
    story.append(Table(rows, colWidths=[40 * mm, 36 * mm, 30 * mm, 20 * mm, 20 * mm, 16 * mm, 12 * mm], style=grid,
                       repeatRows=1))
    story.append(PageBreak())

    story.append(Paragraph("Margins and bandwidths per loop", styles["Heading3"]))
    a = s.analysis
    mrows = [["loop", "crossover", "bandwidth", "phase margin", "gain margin", "delay margin", "Ms", "overshoot",
              "settling", "stable"]]
    for loop in LOOPS:
        m, st = a.margins[loop], a.steps[loop]
        mrows.append([loop, _fmt(m.crossover_hz, "Hz"), _fmt(m.bandwidth_hz, "Hz"), _fmt(m.phase_margin_deg, "deg", 3),
                      _fmt(m.gain_margin_db, "dB", 3), _fmt(m.delay_margin_s * 1e6, "us", 3), _fmt(m.sensitivity_peak, "", 3),
                      _fmt(st.overshoot_pct, "%", 3), _fmt(st.settling_time_s * 1e3, "ms", 3), "yes" if m.stable else "NO"])
    story.append(Table(mrows, style=grid))
    ls = a.load_step
    story.append(Paragraph(_esc(f"Load step {ls.load_torque_nm:.3g} N*m at the motor: speed dip "
                                f"{_fmt(abs(ls.speed_dip_rad_s), 'rad/s')}, position error {_fmt(abs(ls.position_error_rad), 'rad')}, "
                                f"recovery {_fmt(ls.recovery_time_s * 1e3, 'ms')}."), small))
    story.append(Paragraph(f"Flags ({len(s.flags)})", styles["Heading3"]))
    if s.flags:
        frows = [["severity", "loop", "message"]] + [[f.severity, f.loop, Paragraph(_esc(f.message), small)] for f in s.flags]
        story.append(Table(frows, colWidths=[16 * mm, 16 * mm, 140 * mm], style=grid, repeatRows=1))
    else:
        story.append(Paragraph("No flag: every check passes on the model.", body))
    story.append(Paragraph("Axis", styles["Heading3"]))
    story.append(Table([[k, Paragraph(_esc(v), small)] for k, v in s.axis_lines], colWidths=[55 * mm, 117 * mm],
                       style=TableStyle([("FONTSIZE", (0, 0), (-1, -1), 7.5), ("VALIGN", (0, 0), (-1, -1), "TOP")])))
    story.append(PageBreak())
    story.append(Paragraph("Responses of the model", styles["Heading3"]))
    story += _plots(s)
    story.append(Paragraph(_esc(s.caution), warn))

    def footer(canvas, doc):
        canvas.saveState()
        canvas.setFont("Helvetica", 7)
        canvas.drawString(15 * mm, 8 * mm, f"{s.axis_name} / {s.gain_set_name} / {s.profile_name} / "
                                          f"preset {s.preset_sha256[:12]} / Loopwright {s.program_version} / {s.created}")
        canvas.drawRightString(A4[0] - 15 * mm, 8 * mm, f"page {doc.page}")
        canvas.restoreState()

    doc = SimpleDocTemplate(str(path), pagesize=A4, leftMargin=15 * mm, rightMargin=15 * mm, topMargin=12 * mm,
                            bottomMargin=14 * mm, title=f"{s.axis_name} - {s.gain_set_name}", author="Loopwright")
    doc.build(story, onFirstPage=footer, onLaterPages=footer)
