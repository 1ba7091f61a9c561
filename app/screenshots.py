"""Render the real window offscreen into ``screenshots/`` at a fixed size.

    QT_QPA_PLATFORM=offscreen python -m app.screenshots [OUTDIR]

Shots: the demo axis as it opens; a violated-margin state (speed Kp raised until
the phase margin breaks its target); the axis model with a refused value; and,
when the time simulation is present, a move that saturates the current; three gain sets
compared (every plot overlaid, and the metrics table); and the first pages of the PDF
report, rendered with ``pdftoppm`` (poppler) when it is installed.
"""

from __future__ import annotations

import os
import shutil
import subprocess
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
    window.editors.setCurrentIndex(next(k for k in range(window.editors.count())
                                        if window.editors.tabText(k) == "Axis model"))
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

    # Three gain sets side by side: every plot overlaid, then the metrics table.
    if len(session.gain_sets) >= 3:
        session.set_active_gain_set(session.gain_sets[0].name)
        names = [g.name for g in session.gain_sets][:3]
        session.set_compared(names)
        session.set_baseline(names[0])
        window.editors.setCurrentWidget(window.gain_sets_panel)
        window.plots.setCurrentWidget(window.plots.loops_view)
        session.flush()
        session.run_simulation()
        shots.append(_shot(app, window, out, "05_compare_loops.png"))
        window.plots.setCurrentWidget(window.plots.comparison_table)
        shots.append(_shot(app, window, out, "06_compare_table.png"))
        session.set_compared(())
        session.flush()

    shots += report_pages(session, out)
    # The robustness view after a corners sweep of the active set (run in its worker, waited for here).
    view = window.robustness
    window.plots.setCurrentWidget(view)
    view.mode_box.setCurrentText("corners")
    view.loop_box.setCurrentText("speed")
    if view.start_sweep():
        while view.busy:
            view.job.wait(50)
            app.processEvents()
    shots.append(_shot(app, window, out, "09_robustness.png", keep_status=True))

    session.undo_stack.setClean()
    window.close()
    return shots


def report_pages(session, out: Path) -> list[Path]:
    """The PDF report of the active gain set: its first page (the sheet) and its last (the plots)
    as PNG at 80 dpi, rendered by poppler's ``pdftoppm`` (skipped when it is not installed)."""
    from core.export import resolve_profile

    if shutil.which("pdftoppm") is None:
        print("pdftoppm not found (poppler-utils): report pages not rendered")
        return []
    folder = Path(tempfile.mkdtemp())
    pdf = session.write_sheet(session.config_sheet(session.active, resolve_profile("ti_ms_rpm")),
                              folder / "report.pdf", "pdf")
    subprocess.run(["pdftoppm", "-png", "-r", "80", str(pdf), str(folder / "page")], check=True)
    pages = sorted(folder.glob("page*.png"))
    written = []
    for number, page in ((1, pages[0]), (len(pages), pages[-1])) if len(pages) > 1 else ((1, pages[0]),):
        target = out / f"{6 + len(written) + 1:02d}_report_page{number}.png"
        shutil.copyfile(page, target)
        print(f"wrote {target}")
        written.append(target)
    return written


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0]) if argv else Path(__file__).resolve().parents[1] / "screenshots"
    render(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
