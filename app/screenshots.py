"""Render the real window offscreen into ``screenshots/`` at a fixed size.

    QT_QPA_PLATFORM=offscreen python -m app.screenshots [OUTDIR]

Shots: the demo axis as it opens; a violated-margin state (speed Kp raised until
the phase margin breaks its target); the axis model with a refused value; and,
when the time simulation is present, a move that saturates the current.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from PySide6.QtCore import QSettings  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

SIZE = (1600, 1000)


def _settle(app: QApplication, window) -> None:
    for _ in range(6):
        app.processEvents()
    window.session.flush()
    window.plots.fit()
    for _ in range(6):
        app.processEvents()


def _shot(app, window, out: Path, name: str, keep_status: bool = False) -> Path:
    if not keep_status:
        window.statusBar().clearMessage()
    _settle(app, window)
    path = out / name
    window.grab().save(str(path))
    print(f"wrote {path}")
    return path


def render(out: Path) -> list[Path]:
    """Write the screenshots into ``out``; returns their paths."""
    from app.window import main_window

    out.mkdir(parents=True, exist_ok=True)
    settings = QSettings(str(Path(tempfile.mkdtemp()) / "shots.ini"), QSettings.Format.IniFormat)
    window = main_window(settings=settings)
    app = QApplication.instance()
    window.resize(*SIZE)
    window.show()
    session = window.session
    shots = [_shot(app, window, out, "01_demo_axis.png")]

    # Violated margins: push the speed-loop gain up until the phase-margin check fails.
    control = window.gains_panel.controls["speed.kp"]
    position = control.slider.value()
    while position < 1000 and not any(f.loop == "speed" and "Phase margin" in f.message
                                      for f in session.analysis.flags):
        position += 20
        control.slider.setValue(position)
        session.flush()
    flags = window.flags_panel.list
    for i in range(flags.count()):
        if "Phase margin" in flags.item(i).text():
            flags.setCurrentRow(i)
            break
    shots.append(_shot(app, window, out, "02_violated_margin.png"))
    session.undo_stack.undo()

    # The axis model with a value the core refuses (kept as typed, reason beside it).
    window.editors.setCurrentIndex(1)
    window.plots.setCurrentWidget(window.plots.disturbance_view)
    edit = window.axis_panel.field("motor", "inductance_h")
    edit.setText("-5 mH")
    edit.editingFinished.emit()
    shots.append(_shot(app, window, out, "03_axis_model_and_disturbance.png", keep_status=True))
    edit.set_value(session.axis.motor.inductance_h)

    if window.plots.move is not None:
        window.editors.setCurrentIndex(0)
        names = [g.name for g in session.gain_sets]
        if "production" in names:
            session.set_active_gain_set("production")
        moves = [s["name"] for s in session.scenarios if s.get("kind") == "move"]
        if moves:
            window.plots.scenario_box.setCurrentText(moves[-1])
        window.plots.setCurrentWidget(window.plots.move_page)
        session.flush()
        session.run_simulation()
        shots.append(_shot(app, window, out, "04_saturating_move.png"))

    session.undo_stack.setClean()
    window.close()
    return shots


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0]) if argv else Path(__file__).resolve().parents[1] / "screenshots"
    render(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
