"""File > Export sheet… and Import sheet: files that read back, the confirmation an
error-level finding needs, and a JSON sheet that restores identical gains."""

from __future__ import annotations

import csv
import json

import openpyxl
import pytest

from app import dialogs
from app.export_dialog import ExportDialog
from core.safety import CAUTION


@pytest.fixture
def confirm(monkeypatch):
    """The second confirmation: records each question and answers ``box["answer"]``."""
    box = {"answer": False, "asked": []}

    def ask(parent, gain_set, errors):
        box["asked"].append((gain_set, list(errors)))
        return box["answer"]

    monkeypatch.setattr(dialogs, "confirm_export", ask)
    return box


def _dialog(window, qtbot, gain_set, profile, fmt, path):
    d = ExportDialog(window.session, window, gain_set)
    qtbot.addWidget(d)
    d.profile_box.setCurrentText(profile)
    d.format_box.setCurrentText(fmt)
    d.path.setText(str(path))
    return d


def test_dialog_shows_rows_and_flags_before_writing(window, qtbot, tmp_path):
    d = _dialog(window, qtbot, "first motion", "per_sample_counts", "csv", tmp_path / "s.csv")
    assert d.rows.rowCount() == len(d.sheet.rows) > 0
    texts = [d.rows.item(r, 5).text() for r in range(d.rows.rowCount())]
    assert any("rounds to 0" in t for t in texts)  # the flag sits beside its row
    assert any("rounds to 0" in d.findings.item(i).text() for i in range(d.findings.count()))
    assert "confirm" in d.attention.text()
    assert not (tmp_path / "s.csv").exists()


def test_csv_export_reads_back(window, qtbot, tmp_path, confirm):
    target = tmp_path / "first.csv"
    d = _dialog(window, qtbot, "first motion", "si", "csv", target)
    assert d.errors == []
    assert d.export() == target
    assert confirm["asked"] == []  # nothing to confirm without an error-level finding
    with open(target, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    flat = [c for row in rows for c in row]
    assert "first motion" in flat
    assert any(CAUTION in c for c in flat)
    labels = [r.label for r in d.sheet.rows]
    assert all(label in flat for label in labels)


def test_xlsx_and_json_exports_read_back(window, qtbot, tmp_path, confirm):
    x = tmp_path / "prod.xlsx"
    _dialog(window, qtbot, "production", "ti_ms_rpm", "xlsx", x).export()
    book = openpyxl.load_workbook(x)
    cells = [str(c.value) for ws in book.worksheets for row in ws.iter_rows() for c in row if c.value is not None]
    assert "production" in cells and any(CAUTION in c for c in cells)
    j = tmp_path / "prod.json"
    _dialog(window, qtbot, "production", "per_unit", "json", j).export()
    doc = json.loads(j.read_text(encoding="utf-8"))
    assert doc["gain_set"]["name"] == "production" and doc["caution"] == CAUTION


def test_error_flag_needs_confirmation_and_declining_writes_nothing(window, qtbot, tmp_path, confirm):
    target = tmp_path / "counts.json"
    d = _dialog(window, qtbot, "first motion", "per_sample_counts", "json", target)
    assert d.errors
    confirm["answer"] = False
    assert d.export() is None
    assert len(confirm["asked"]) == 1 and confirm["asked"][0][0] == "first motion"
    assert not target.exists() and list(tmp_path.iterdir()) == []
    confirm["answer"] = True
    assert d.export() == target and target.exists()
    assert json.loads(target.read_text(encoding="utf-8"))["attention"]


def test_pdf_export_is_a_pdf(window, qtbot, tmp_path, confirm):
    target = tmp_path / "report.pdf"
    _dialog(window, qtbot, "first motion", "si", "pdf", target).export()
    assert target.read_bytes()[:5] == b"%PDF-"


def test_unwritable_target_is_an_error_and_nothing_written(window, qtbot, tmp_path, no_dialogs, confirm):
    d = _dialog(window, qtbot, "first motion", "si", "csv", tmp_path / "missing" / "x.csv")
    assert d.export() is None
    assert no_dialogs["errors"] and "Cannot export" in no_dialogs["errors"][0][0]


def test_browsed_profile_is_used(window, qtbot, tmp_path, monkeypatch):
    from core.export import _profile_dir

    source = (_profile_dir() / "ti_ms_rpm.toml").read_text(encoding="utf-8")
    mine = tmp_path / "my_drive.toml"
    mine.write_text(source.replace('name = "', 'name = "my drive, ', 1), encoding="utf-8")
    monkeypatch.setattr(dialogs, "open_profile_path", lambda parent, folder="": str(mine))
    d = _dialog(window, qtbot, "first motion", "si", "csv", tmp_path / "x.csv")
    d.profile_box.setCurrentText("Browse…")
    assert d.profile_box.currentText() == "my_drive.toml"
    assert d.sheet.profile_name.startswith("my drive")


def test_import_restores_identical_gains_as_a_new_set(window, qtbot, tmp_path, monkeypatch, confirm):
    s = window.session
    target = tmp_path / "auto.json"
    _dialog(window, qtbot, "auto-tuned", "si", "json", target).export()
    original = s.preset.gain_set("auto-tuned")
    count = len(s.gain_sets)
    monkeypatch.setattr(dialogs, "open_sheet_path", lambda parent, folder="": str(target))
    assert window.import_sheet()
    assert len(s.gain_sets) == count + 1
    restored = s.gains
    assert s.active == "auto-tuned (imported)"
    assert (restored.current, restored.speed, restored.position) == (original.current, original.speed,
                                                                      original.position)
    assert restored.note == original.note
    window.undo_action.trigger()
    assert len(s.gain_sets) == count


def test_import_of_another_axis_is_refused(window, tmp_path, monkeypatch, no_dialogs):
    from core.export import resolve_profile, sheet, write_json
    from core.presets import builtin_preset

    other = builtin_preset("dc_spindle")
    path = write_json(sheet(other, other.active, resolve_profile("si")), tmp_path / "spindle.json")
    monkeypatch.setattr(dialogs, "open_sheet_path", lambda parent, folder="": str(path))
    before = window.session.preset.gain_sets
    assert not window.import_sheet()
    assert window.session.preset.gain_sets == before
    assert "axis" in no_dialogs["errors"][0][1]
