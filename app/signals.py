"""Helpers for binding widgets to the session without feedback loops."""

from __future__ import annotations

import contextlib

from PySide6.QtCore import QObject


@contextlib.contextmanager
def signals_blocked(*objects: QObject):
    """Block the objects' signals while the session pushes values into them."""
    previous = [o.blockSignals(True) for o in objects]
    try:
        yield
    finally:
        for o, p in zip(objects, previous):
            o.blockSignals(p)
