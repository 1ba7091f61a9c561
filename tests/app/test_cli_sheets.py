"""``compare`` and ``export`` on the command line (no Qt imported)."""

from __future__ import annotations

import argparse
import io
import json
import subprocess
import sys
from pathlib import Path

import pytest

from app.cli_sheets import add_commands
from core.errors import InputError
from core.export import import_sheet_json
from core.presets import builtin_preset

REPO = Path(__file__).resolve().parents[2]


def run(argv: list[str]) -> tuple[int, str]:
    parser = argparse.ArgumentParser(prog="loopwright")
    add_commands(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    out = io.StringIO()
    return args.func(args, out), out.getvalue()


def test_compare_text_table():
    code, text = run(["compare", "belt_gantry", "--baseline", "production"])
    assert code == 0
    assert "production (baseline)" in text and "phase margin" in text and "CAUTION" in text


def test_compare_json_subset():
    code, text = run(["compare", "dc_spindle", "--sets", "production,first motion", "--json"])
    doc = json.loads(text)
    assert code == 0 and doc["sets"] == ["production", "first motion"] and doc["baseline"] == "production"
    assert {r["group"] for r in doc["rows"]} >= {"current", "speed", "position", "load step", "move", "flags"}
    assert "emergency stop" in doc["caution"]


@pytest.mark.parametrize("argv, field", [
    (["compare", "belt_gantry", "--sets", "production,nope"], "--sets"),
    (["compare", "belt_gantry", "--sets", "production,"], "--sets"),
    (["compare", "belt_gantry", "--baseline", "nope"], "--baseline"),
    (["compare", "no_such_preset"], "PRESET"),
    (["export", "belt_gantry", "--set", "nope", "--profile", "si", "--format", "csv", "-o", "x.csv"], "gain_set"),
    (["export", "belt_gantry", "--set", "production", "--profile", "nope", "--format", "csv", "-o", "x.csv"],
     "--profile"),
])
def test_bad_input_raises_input_error(argv, field, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError) as err:
        run(argv)
    assert err.value.field == field
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("fmt", ["csv", "xlsx", "json", "pdf"])
def test_export_every_format(tmp_path, fmt):
    path = tmp_path / f"sheet.{fmt}"
    code, text = run(["export", "rotary_table", "--set", "production", "--profile", "ti_ms_rpm",
                      "--format", fmt, "-o", str(path)])
    assert code == 0 and path.stat().st_size > 0
    assert "ATTENTION" in text and "CAUTION" in text
    if fmt == "json":
        preset = builtin_preset("rotary_table")
        assert import_sheet_json(path, preset) == preset.gain_set("production")


def test_export_profile_by_path(tmp_path):
    profile = REPO / "presets" / "profiles" / "per_unit.toml"
    code, _ = run(["export", "belt_gantry", "--set", "first motion", "--profile", str(profile),
                   "--format", "csv", "-o", str(tmp_path / "s.csv")])
    assert code == 0 and "per unit" in (tmp_path / "s.csv").read_text()


def test_commands_import_no_qt():
    script = ("import sys, io, argparse\n"
              "from app.cli_sheets import add_commands\n"
              "p = argparse.ArgumentParser(); add_commands(p.add_subparsers(dest='c'))\n"
              "a = p.parse_args(['compare', 'dc_spindle', '--json']); a.func(a, io.StringIO())\n"
              "print(sorted(m for m in sys.modules if m.split('.')[0] in ('PySide6', 'shiboken6', 'pyqtgraph')))\n")
    done = subprocess.run([sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"
