"""The caution: shown on first launch until acknowledged, and repeated in Help > About."""

from __future__ import annotations

import pytest
from PySide6.QtWidgets import QLabel

from app import safety
from app.safety import ABOUT_TEXT, CautionDialog, caution_needed, show_caution

# What the caution must say wherever gains leave the tool (the project's brief; the
# points are common practice in commissioning).
POINTS = ("reduced torque", "emergency stop", "guards", "real axis", "manufacturer's manual",
          "machine-safety standards", "local codes", "licensed")


@pytest.mark.parametrize("point", POINTS)
def test_the_dialog_and_the_about_box_carry_every_point(qtbot, point):
    dialog = CautionDialog()
    qtbot.addWidget(dialog)
    shown = " ".join(label.text() for label in dialog.findChildren(QLabel))
    assert point in shown
    assert point in ABOUT_TEXT


def test_first_launch_shows_the_caution_until_it_is_acknowledged(qtbot, settings, monkeypatch):
    seen = []

    def answer(dialog, tick):
        seen.append(dialog.windowTitle())
        dialog.dont_show.setChecked(tick)
        return 1

    assert caution_needed(settings)                       # a new user sees it
    monkeypatch.setattr(CautionDialog, "exec", lambda self: answer(self, False))
    show_caution(None, settings)
    assert caution_needed(settings)                       # OK without the tick: shown again next time
    monkeypatch.setattr(CautionDialog, "exec", lambda self: answer(self, True))
    show_caution(None, settings)
    assert not caution_needed(settings)                   # acknowledged: not shown at start any more
    assert seen == [safety.CAUTION_TITLE] * 2
