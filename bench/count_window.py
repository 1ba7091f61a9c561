"""Instructions per slider move, counted by callgrind over the moves only.

Timings on a shared machine drift; instruction counts do not. This script drives the
same slider moves as ``bench_window.py`` and, when run under callgrind, switches
collection on for the moves and off again, so start-up (Qt, numba's cache, the first
analysis) is not counted:

    valgrind --tool=callgrind --collect-atstart=no --callgrind-out-file=cg.out \\
        $(python -c "import sys; print(sys.executable)") bench/count_window.py speed.kp 20
    callgrind_annotate cg.out | grep "PROGRAM TOTALS"      # divide by the moves printed

Give valgrind the interpreter's real path (a pyenv shim is a shell script, and valgrind
would trace the shell). The switch is callgrind's ``CALLGRIND_TOGGLE_COLLECT`` client
request, compiled here into a three-line shared library with the system C compiler
and ``valgrind/callgrind.h`` (Debian's valgrind package has it). Outside valgrind the
request does nothing, and the script only runs the moves.
"""

from __future__ import annotations

import ctypes
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from PySide6.QtCore import QSettings  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

from bench_window import _until_idle, time_moves  # noqa: E402  (bench/ is on the path as a script)

_SHIM = "#include <valgrind/callgrind.h>\nvoid toggle_collect(void) { CALLGRIND_TOGGLE_COLLECT; }\n"


def _toggle():
    """The client request as a Python callable (compiled once into a temporary folder)."""
    folder = Path(tempfile.mkdtemp(prefix="loopwright-cg-"))
    (folder / "shim.c").write_text(_SHIM)
    subprocess.run(["cc", "-O1", "-shared", "-fPIC", "-o", str(folder / "shim.so"), str(folder / "shim.c")],
                   check=True)
    return ctypes.CDLL(str(folder / "shim.so")).toggle_collect


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    path = argv[0] if argv else "speed.kp"
    moves = int(argv[1]) if len(argv) > 1 else 20
    toggle = _toggle()
    from app.window import freeze_start_up_objects, main_window

    settings = QSettings(str(Path(tempfile.mkdtemp()) / "bench.ini"), QSettings.Format.IniFormat)
    window = main_window(settings=settings)
    window.resize(1600, 1000)
    window.show()
    app = QApplication.instance()
    _until_idle(app, window.session, -1, time.perf_counter() + 60.0)
    freeze_start_up_objects()
    time_moves(app, window, path, 10)   # caches and pixmaps as in a drag already under way
    toggle()
    time_moves(app, window, path, moves)
    toggle()
    print(f"counted {moves + 10} moves of {path} (time_moves adds 10 warm-up moves to the {moves} asked for)")
    window.session.undo_stack.setClean()
    window.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
