"""Slider move -> recompute -> repainted window, timed offscreen.

Drives the speed Kp slider of the real window (held down, as in a drag), and for
each move times from ``setValue`` until the plot views have finished painting.
Prints the median and the 95th percentile (targets: 16 ms and 33 ms).

    QT_QPA_PLATFORM=offscreen python bench/bench_window.py [--moves 200]
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

from PySide6.QtCore import QEvent, QObject, QSettings  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402


class PaintCounter(QObject):
    """Counts Paint events reaching the plot viewports."""

    def __init__(self):
        super().__init__()
        self.count = 0

    def eventFilter(self, obj, event):  # noqa: N802 - Qt's name
        if event.type() == QEvent.Type.Paint:
            self.count += 1
        return False


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=200)
    parser.add_argument("--loop", default="speed.kp", help="gain slider to drive")
    args = parser.parse_args(argv)

    from app.window import main_window

    settings = QSettings(str(Path(os.environ.get("TMPDIR", "/tmp")) / "loopwright-bench.ini"),
                         QSettings.Format.IniFormat)
    window = main_window(settings=settings)
    window.resize(1600, 1000)
    window.show()
    app = QApplication.instance()
    for _ in range(10):
        app.processEvents()
    session = window.session
    view = window.plots.loops_view
    counter = PaintCounter()
    view.viewport().installEventFilter(counter)
    slider = window.gains_panel.controls[args.loop].slider
    slider.setSliderDown(True)  # a drag: ranges held, the move simulation deferred
    start = slider.value()
    times, analyse_ms = [], []
    for i in range(args.moves + 10):
        painted = counter.count
        t0 = time.perf_counter()
        slider.setValue(start - 60 + (i * 7) % 120)
        deadline = t0 + 2.0
        while counter.count == painted and time.perf_counter() < deadline:
            app.processEvents()
        t1 = time.perf_counter()
        if i >= 10:  # warm-up moves excluded
            times.append((t1 - t0) * 1e3)
        ta = time.perf_counter()
    slider.setSliderDown(False)
    for _ in range(5):
        app.processEvents()
    # the analysis alone, for comparison
    for _ in range(30):
        ta = time.perf_counter()
        session.recompute()
        analyse_ms.append((time.perf_counter() - ta) * 1e3)
    times.sort()
    median = statistics.median(times)
    p95 = times[int(round(0.95 * (len(times) - 1)))]
    print(f"window: {len(times)} slider moves on {args.loop}, 1600x1000 offscreen, "
          f"PySide6 {__import__('PySide6').__version__}, pyqtgraph {__import__('pyqtgraph').__version__}")
    print(f"slider -> recompute -> repaint: median {median:.1f} ms, p95 {p95:.1f} ms "
          f"(targets 16 / 33 ms); max {times[-1]:.1f} ms")
    print(f"recompute alone (analyse + setData, no paint): median {statistics.median(analyse_ms):.1f} ms")
    print(f"recomputes {session.recompute_count}, plot updates {window.plots.update_count}, "
          f"paints {counter.count}")
    ok = median <= 16.0 and p95 <= 33.0
    print("PASS" if ok else "OVER BUDGET")
    window.session.undo_stack.setClean()
    window.close()
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
