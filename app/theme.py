"""Loopwright's own palette: warm paper panels, white plot cards, one colour per loop."""

from __future__ import annotations

from PySide6.QtGui import QColor, QPalette
from PySide6.QtWidgets import QApplication

LOOP_COLOURS = {"current": "#b8561b", "speed": "#1f7a5c", "position": "#3a57a0", "axis": "#6b5b7a"}
LOOP_TITLES = {"current": "Current loop", "speed": "Speed loop", "position": "Position loop", "axis": "Axis"}
SEVERITY_COLOURS = {"error": "#b3261e", "warning": "#b07800", "info": "#4a6a8a", "ok": "#2e7d32"}
INK = "#2b2b2b"
MUTED = "#77736a"
PAPER = "#f4f2ec"
CARD = "#ffffff"
RULE = "#d9d5cb"
INVALID_BG = "#fbe3df"
# Compared gain sets: each slot has a colour and a dash pattern (dash/gap lengths in pen widths; None is
# solid), so the sets stay apart in grey print and for colour-blind readers. Our own choice of hues,
# spread in lightness as well as hue.
COMPARE_STYLES = (
    ("#23467f", None),
    ("#d9811e", (7.0, 3.0)),
    ("#2a9484", (1.5, 2.5)),
    ("#b0306f", (7.0, 2.5, 1.5, 2.5)),
    ("#55534e", (12.0, 3.0, 1.5, 3.0, 1.5, 3.0)),
    ("#8a9a1c", (3.5, 3.5)),
)

STYLE_SHEET = f"""
QWidget {{ color: {INK}; }}
QMainWindow, QTabWidget::pane, QScrollArea, QScrollArea > QWidget > QWidget {{ background: {PAPER}; }}
QGroupBox {{ border: 1px solid {RULE}; border-radius: 4px; margin-top: 14px; padding: 6px 4px 4px 4px;
             background: {CARD}; font-weight: bold; }}
QGroupBox::title {{ subcontrol-origin: margin; left: 8px; padding: 0 4px; color: {MUTED}; }}
QLineEdit {{ border: 1px solid {RULE}; border-radius: 3px; padding: 1px 4px; background: {CARD}; }}
QLineEdit[invalid="true"] {{ border: 1px solid {SEVERITY_COLOURS['error']}; background: {INVALID_BG}; }}
QLineEdit:read-only {{ background: {PAPER}; color: {MUTED}; }}
QLabel[role="derived"] {{ color: {MUTED}; }}
QLabel[role="reason"] {{ color: {SEVERITY_COLOURS['error']}; font-size: 11px; }}
QLabel[role="heading"] {{ font-weight: bold; color: {MUTED}; }}
QPushButton {{ border: 1px solid {RULE}; border-radius: 3px; padding: 3px 10px; background: {CARD}; }}
QPushButton:hover {{ border-color: {MUTED}; }}
QTabBar::tab {{ padding: 5px 9px; background: {PAPER}; border: 1px solid {RULE}; border-bottom: none;
               margin-right: 2px; border-top-left-radius: 4px; border-top-right-radius: 4px; }}
QTabBar::tab:selected {{ background: {CARD}; font-weight: bold; }}
QListWidget, QTableWidget, QPlainTextEdit {{ background: {CARD}; border: 1px solid {RULE}; }}
QSlider::groove:horizontal {{ height: 4px; background: {RULE}; border-radius: 2px; }}
QSlider::handle:horizontal {{ width: 12px; margin: -5px 0; border-radius: 6px; background: {MUTED}; }}
QSlider::handle:horizontal:focus {{ background: {INK}; }}
"""


def apply_theme(app: QApplication) -> None:
    """Fusion style with our palette and style sheet (the same on every platform)."""
    app.setStyle("Fusion")
    pal = app.palette()
    pal.setColor(QPalette.ColorRole.Window, QColor(PAPER))
    pal.setColor(QPalette.ColorRole.Base, QColor(CARD))
    pal.setColor(QPalette.ColorRole.Text, QColor(INK))
    pal.setColor(QPalette.ColorRole.WindowText, QColor(INK))
    pal.setColor(QPalette.ColorRole.Highlight, QColor(LOOP_COLOURS["position"]))
    app.setPalette(pal)
    app.setStyleSheet(STYLE_SHEET)
