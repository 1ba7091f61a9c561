"""Compile the time simulation's kernel in the background, off the first paint.

numba compiles the kernel on first use (3-4 s the first time on a machine, about
0.3 s from its disk cache afterwards, measured here); a daemon thread does that
while the window opens, and the session waits for it before its first simulation.
"""

from __future__ import annotations

import threading

_done = threading.Event()
_started = False


def start() -> None:
    """Begin compiling (or loading) the kernel in a daemon thread; safe to call twice."""
    global _started
    if _started:
        return
    _started = True

    def work():
        try:
            from core.simulate import warm_up

            warm_up()
        finally:
            _done.set()

    threading.Thread(target=work, name="loopwright-warm-up", daemon=True).start()


def ready() -> bool:
    """True once the kernel is compiled, or when no warm-up was started (it then compiles on use)."""
    return _done.is_set() or not _started
