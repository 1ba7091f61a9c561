"""Slider move -> recompute -> repainted window, timed offscreen.

Drives gain sliders of the real window, held down as in a drag, and times each move
from ``setValue`` until the window is idle again: the session has recomputed and every
widget the move touched (plots, figures, findings, the slider and its field) has
painted. Prints per slider the median and the 95th percentile of the wall time
(targets: 16 ms and 33 ms) and the median CPU time of the GUI thread.

The machine's speed drifts by up to 2x within minutes, so the same run also times a
reference on the same gain values: the nine loop plots drawn the plain pyqtgraph way
(``plot()`` items, default grid, auto-range on, markers and text items, antialiasing
off as in the window), recomputed with ``core.analysis.analyse`` and repainted
synchronously. The ratio (reference / ours, above 1 when the window is faster) drifts
far less than either time does. A full repaint of the window with nothing recomputed
is printed too, at the start and the end: a large change between the two means the
machine's speed changed during the run.

    QT_QPA_PLATFORM=offscreen python bench/bench_window.py [--loop speed.kp | all] [--moves 200]
                                                           [--view loops | disturbance | move]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
from PySide6.QtCore import QEventLoop, QSettings  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

MEDIAN_MS, P95_MS = 16.0, 33.0
_SETTLE_S = 2.0
"""Longest a move may take before the benchmark gives up waiting for idle, s."""


def _until_idle(app: QApplication, session, count: int, deadline: float) -> None:
    """Process events until the session has recomputed past ``count`` and the event
    loop has nothing left to do (every paint the move caused has been done)."""
    dispatcher = app.eventDispatcher()
    flags = QEventLoop.ProcessEventsFlag.AllEvents
    while time.perf_counter() < deadline:
        busy = dispatcher.processEvents(flags)
        if session.recompute_count > count and not busy:
            return


def _percentile(sorted_values: list[float], q: float) -> float:
    return sorted_values[int(round(q * (len(sorted_values) - 1)))]


def time_moves(app: QApplication, window, path: str, moves: int) -> tuple[list[float], list[float], list]:
    """Wall and GUI-thread CPU time of ``moves`` slider moves on ``path``, ms (10 warm-up
    moves excluded), and the gain sets the moves produced. The slider is held down:
    ranges stay still and the move simulation waits, as in a drag."""
    session = window.session
    slider = window.gains_panel.controls[path].slider
    slider.setSliderDown(True)
    start = min(max(slider.value(), 60), slider.maximum() - 60)
    wall, cpu, gains = [], [], []
    for i in range(moves + 10):
        count = session.recompute_count
        t0, c0 = time.perf_counter(), time.thread_time()
        slider.setValue(start - 60 + (i * 7) % 120)
        _until_idle(app, session, count, t0 + _SETTLE_S)
        if i >= 10:
            wall.append((time.perf_counter() - t0) * 1e3)
            cpu.append((time.thread_time() - c0) * 1e3)
            gains.append(session.gains)
    slider.setSliderDown(False)
    _until_idle(app, session, -1, time.perf_counter() + _SETTLE_S)
    return sorted(wall), sorted(cpu), gains


class PlainPlots:
    """The reference: the window's nine loop plots (step, |L| and angle of L per loop)
    drawn the plain pyqtgraph way, in a view the size of the window's plot area."""

    def __init__(self, size):
        import pyqtgraph as pg

        self.view = pg.GraphicsLayoutWidget()
        self.view.resize(size)
        self.items = {}
        for col, loop in enumerate(("current", "speed", "position")):
            step = self.view.addPlot(row=0, col=col, title=f"{loop} loop step")
            mag = self.view.addPlot(row=1, col=col, title=f"{loop} loop |L|")
            phase = self.view.addPlot(row=2, col=col, title=f"{loop} loop arg L")
            step.setLabels(bottom=("Time", "s"), left="Output / step")
            mag.setLabels(bottom=("Frequency", "Hz"), left=("Magnitude", "dB"))
            phase.setLabels(bottom=("Frequency", "Hz"), left=("Phase", "deg"))
            for p in (mag, phase):
                p.setLogMode(x=True, y=False)
            for p in (step, mag, phase):
                p.showGrid(x=True, y=True)
            step.addItem(pg.InfiniteLine(1.0, angle=0))
            mag.addItem(pg.InfiniteLine(0.0, angle=0))
            phase.addItem(pg.InfiniteLine(-180.0, angle=0))
            crossings = (pg.InfiniteLine(0.0, angle=90), pg.InfiniteLine(0.0, angle=90))
            mag.addItem(crossings[0])
            phase.addItem(crossings[1])
            texts = (pg.TextItem(anchor=(1, 0)), pg.TextItem(anchor=(1, 0)))
            step.addItem(texts[0])
            mag.addItem(texts[1])
            self.items[loop] = (step.plot(pen="b"), mag.plot(pen="b"), phase.plot(pen="b"), crossings, texts)
        self.view.show()
        QApplication.processEvents()  # exposed: a repaint now paints

    def move(self, axis, gains, targets, constants) -> None:
        from core.analysis import analyse

        analysis = analyse(axis, gains, targets, constants)
        f = analysis.frequency.omega_rad_s / (2 * np.pi)
        for loop, (step, mag, phase, crossings, texts) in self.items.items():
            st, m = analysis.steps[loop], analysis.margins[loop]
            values = analysis.frequency.open_loop[loop]
            step.setData(st.time_s, st.value)
            mag.setData(f, 20 * np.log10(np.abs(values)))
            phase.setData(f, np.degrees(np.unwrap(np.angle(values))))
            for line in crossings:
                line.setValue(np.log10(m.crossover_hz) if np.isfinite(m.crossover_hz) else 0.0)
            texts[0].setText(f"overshoot {st.overshoot_pct:.3g} %")
            texts[1].setText(f"fc {m.crossover_hz:.3g} Hz  PM {m.phase_margin_deg:.1f} deg")
        self.view.viewport().repaint()


def time_plain(plain: PlainPlots, session, gain_sets: list) -> list[float]:
    """The reference's time for the same gain values, ms (5 warm-up moves excluded)."""
    from app.preset_mapping import targets_from_table

    state = session.state
    targets = targets_from_table(dict(state.targets))
    times = []
    for i, gains in enumerate(gain_sets[:5] + gain_sets):
        t0 = time.perf_counter()
        plain.move(state.axis, gains, targets, state.constants)
        if i >= 5:
            times.append((time.perf_counter() - t0) * 1e3)
    return sorted(times)


def time_repaints(window, repeats: int) -> list[float]:
    """A full synchronous repaint of the window, nothing recomputed, ms (the reference;
    5 warm-up repaints excluded)."""
    times = []
    for i in range(repeats + 5):
        t0 = time.perf_counter()
        window.repaint()
        if i >= 5:
            times.append((time.perf_counter() - t0) * 1e3)
    return sorted(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=200)
    parser.add_argument("--loop", default="speed.kp",
                        help="gain slider to drive (e.g. current.kp), or 'all' for every gain slider")
    parser.add_argument("--view", choices=("loops", "disturbance", "move"), default="loops",
                        help="the response tab shown while dragging (the move tab simulates on every move)")
    args = parser.parse_args(argv)

    from app.window import freeze_start_up_objects, main_window

    settings = QSettings(str(Path(os.environ.get("TMPDIR", "/tmp")) / "loopwright-bench.ini"),
                         QSettings.Format.IniFormat)
    window = main_window(settings=settings)
    window.resize(1600, 1000)
    window.show()
    app = QApplication.instance()
    _until_idle(app, window.session, -1, time.perf_counter() + 10.0)
    freeze_start_up_objects()  # as app.window.run does once the window is up
    plots = window.plots
    plots.setCurrentWidget({"loops": plots.loops_view, "disturbance": plots.disturbance_view,
                            "move": getattr(plots, "move_page", None)}[args.view])
    _until_idle(app, window.session, -1, time.perf_counter() + 10.0)
    paths = list(window.gains_panel.controls) if args.loop == "all" else [args.loop]
    unknown = [p for p in paths if p not in window.gains_panel.controls]
    if unknown:
        parser.error(f"--loop {unknown[0]!r}: expected 'all' or one of {', '.join(window.gains_panel.controls)}")

    print(f"window: 1600x1000 offscreen, PySide6 {__import__('PySide6').__version__}, "
          f"pyqtgraph {__import__('pyqtgraph').__version__}; {args.moves} moves per slider, "
          f"{args.view} tab shown (the reference draws the loop plots)")
    repaint = statistics.median(time_repaints(window, 50))
    print(f"full repaint of the window, nothing recomputed: median {repaint:.2f} ms")
    plain = PlainPlots(window.plots.loops_view.size())
    print(f"{'slider':28s} {'median':>8s} {'p95':>8s} {'max':>8s} {'cpu':>8s} {'reference':>10s} {'ratio':>7s}")
    ok = True
    for path in paths:
        wall, cpu, gain_sets = time_moves(app, window, path, args.moves)
        median, p95 = statistics.median(wall), _percentile(wall, 0.95)
        reference = statistics.median(time_plain(plain, window.session, gain_sets))
        ok &= median <= MEDIAN_MS and p95 <= P95_MS
        print(f"{path:28s} {median:6.1f}ms {p95:6.1f}ms {wall[-1]:6.1f}ms {statistics.median(cpu):6.1f}ms "
              f"{reference:8.1f}ms {reference / median:6.2f}x")
    plain.view.close()
    repaint_after = statistics.median(time_repaints(window, 50))
    print(f"full repaint of the window again at the end: median {repaint_after:.2f} ms")
    print(f"targets: median <= {MEDIAN_MS:g} ms, p95 <= {P95_MS:g} ms per slider: "
          + ("PASS" if ok else "OVER BUDGET"))
    window.session.undo_stack.setClean()
    window.close()
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
