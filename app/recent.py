"""Recently used preset files, kept in QSettings."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QSettings

KEY = "files/recent"
LIMIT = 8


def recent_files(settings: QSettings) -> list[str]:
    """Most recent first; files that no longer exist are dropped."""
    value = settings.value(KEY, [])
    if isinstance(value, str):
        value = [value]
    return [p for p in (value or []) if Path(p).is_file()]


def remember(settings: QSettings, path: str | Path) -> list[str]:
    """Put ``path`` at the top of the list and return it."""
    path = str(Path(path).resolve())
    files = [path] + [p for p in recent_files(settings) if p != path]
    files = files[:LIMIT]
    settings.setValue(KEY, files)
    return files
