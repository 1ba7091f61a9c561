"""Long robustness work (sweep, auto-tune, notch proposal) off the GUI thread.

A :class:`RobustnessJob` is a QObject moved to its own QThread. It calls one core
function with frozen inputs captured when the job was made, reports progress through
signals (queued to the GUI thread) and ends with exactly one of ``finished(result)``,
``cancelled()`` or ``failed(text)``. It never touches the Session: the caller applies a
finished result through Session methods, so a cancelled or failed job changes nothing.
"""

from __future__ import annotations

import threading
from typing import Callable

from PySide6.QtCore import QObject, QThread, Signal, Slot

from core.errors import InputError


class _Stop(Exception):
    """Raised inside a core progress callback to leave a sweep early."""


class RobustnessJob(QObject):
    """Run ``work(progress, cancelled) -> result`` on a worker thread.

    Signals
    -------
    progress(float, str)
        Fraction done (0..1) and a message.
    finished(object)
        The result (whatever ``work`` returned).
    cancelled()
        :meth:`cancel` was called before the result was ready; nothing is returned.
    failed(str)
        The core refused the input (InputError text) or the work raised.
    """

    progress = Signal(float, str)
    finished = Signal(object)
    cancelled = Signal()
    failed = Signal(str)

    def __init__(self, kind: str, work: Callable):
        super().__init__()
        self.kind = kind
        self._work = work
        self._stop = threading.Event()
        self.thread = QThread()
        self.thread.setObjectName(f"loopwright-{kind}")
        self.moveToThread(self.thread)
        self.thread.started.connect(self._run)

    def start(self) -> None:
        self.thread.start()

    def cancel(self) -> None:
        """Ask the job to stop at its next progress point (thread-safe)."""
        self._stop.set()

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def _report(self, fraction: float, message: str = "") -> None:
        if self._stop.is_set():
            raise _Stop
        self.progress.emit(float(fraction), str(message))

    @Slot()
    def _run(self) -> None:
        try:
            result = self._work(self._report, self._stop.is_set)
        except _Stop:
            self.cancelled.emit()
        except InputError as err:
            self.failed.emit(str(err))
        except Exception as err:  # noqa: BLE001 - reported to the user, never lost on the thread
            self.failed.emit(f"{type(err).__name__}: {err}")
        else:
            if self._stop.is_set() or getattr(result, "status", "") == "cancelled":
                self.cancelled.emit()
            else:
                self.finished.emit(result)
        finally:
            self.thread.quit()

    def wait(self, ms: int = 30000) -> bool:
        """Block until the thread has ended (tests, window close)."""
        return self.thread.wait(ms)


def sweep_work(axis, gains, tolerances, settings, targets):
    """The work of a sweep job: :func:`core.sweep.sweep` on frozen inputs."""
    from core.sweep import sweep

    def work(progress, _stopped):
        return sweep(axis, gains, tolerances, settings, targets, progress=progress)

    return work


def autotune_work(axis, gains, tolerances, targets, objective, at_hz, ratio, name):
    """The work of an auto-tune job: :func:`core.autotune.autotune`, polled for cancel."""
    from core.autotune import autotune

    def work(progress, stopped):
        return autotune(axis, gains, tolerances, targets, objective=objective, at_hz=at_hz, progress=progress,
                        cancel=stopped, name=name, speed_to_position_ratio=ratio)

    return work


def notch_work(axis, gains, tolerances):
    """The work of a notch proposal: :func:`core.resonance.propose_filter`."""
    from core.resonance import propose_filter

    def work(_progress, _stopped):
        return propose_filter(axis, gains, tolerances)

    return work
