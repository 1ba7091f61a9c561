"""Qt offscreen for every window test, and a window factory that never touches user settings."""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402
from PySide6.QtCore import QSettings  # noqa: E402

from app import dialogs  # noqa: E402


@pytest.fixture
def settings(tmp_path):
    """QSettings in a throwaway INI file (recent files, the caution flag)."""
    return QSettings(str(tmp_path / "loopwright.ini"), QSettings.Format.IniFormat)


@pytest.fixture
def no_dialogs(monkeypatch):
    """Route every modal dialog to a recorder; tests read what would have been shown."""
    shown = {"errors": [], "infos": [], "unsaved": "discard", "open": "", "save": ""}
    monkeypatch.setattr(dialogs, "show_error", lambda parent, title, text: shown["errors"].append((title, text)))
    monkeypatch.setattr(dialogs, "show_info", lambda parent, title, text: shown["infos"].append((title, text)))
    monkeypatch.setattr(dialogs, "ask_unsaved", lambda parent, name: shown["unsaved"])
    monkeypatch.setattr(dialogs, "open_path", lambda parent, folder="": shown["open"])
    monkeypatch.setattr(dialogs, "save_path", lambda parent, suggested="": shown["save"])
    return shown


@pytest.fixture
def window(qtbot, settings, no_dialogs):
    """The real main window on the demo preset, shown offscreen at the screenshot size."""
    from app.window import main_window

    w = main_window(settings=settings)
    qtbot.addWidget(w)
    w.resize(1600, 1000)
    w.show()
    qtbot.waitExposed(w)
    return w
