"""The headless command line: documented JSON shape, caution, clear errors (no Qt needed)."""

import io
import json
import subprocess
import sys

import pytest

from app.cli import main
from core.presets import builtin_names

LOOP_KEYS = {"crossover_hz", "phase_margin_deg", "gain_margin_db", "bandwidth_hz", "sensitivity_peak", "stable"}


def run(*argv):
    out = io.StringIO()
    code = main(list(argv), out=out)
    return code, out.getvalue()


@pytest.mark.parametrize("name", builtin_names())
def test_check_json_has_the_documented_shape(name):
    code, text = run("check", name, "--json")
    assert code == 0
    doc = json.loads(text)
    assert set(doc["loops"]) == {"current", "speed", "position"}
    for loop in doc["loops"].values():
        assert LOOP_KEYS <= set(loop)
        assert isinstance(loop["stable"], bool)
    for flag in doc["flags"]:
        assert set(flag) == {"loop", "severity", "message"}
        assert flag["severity"] in ("error", "warning", "info")
    assert "emergency stop" in doc["caution"]


@pytest.mark.parametrize("name", builtin_names())
def test_tune_proposes_gains_with_reasons_and_the_caution(name):
    code, text = run("tune", name, "--json")
    assert code == 0
    doc = json.loads(text)
    assert doc["gains"]["current"]["kp_v_per_a"] > 0 and doc["gains"]["speed"]["kp_a_s_per_rad"] > 0
    assert set(doc["rationale"]) == {"current", "speed", "position"}
    code, text = run("tune", name)
    assert code == 0 and "why:" in text and "CAUTION" in text


def test_simulate_reports_saturation_in_words():
    code, text = run("simulate", "belt_gantry", "--scenario", "aggressive move with push", "--json")
    assert code == 0
    doc = json.loads(text)
    assert any("saturated" in f["message"] for f in doc["flags"])


@pytest.mark.parametrize("argv, field", [
    (("check", "no_such_preset.toml"), "PRESET"),
    (("check", "belt_gantry", "--set", "nope"), "gain_set"),
    (("simulate", "belt_gantry", "--scenario", "nope"), "--scenario"),
])
def test_bad_input_is_one_line_naming_the_field(argv, field, capsys):
    code, _ = run(*argv)
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith(f"loopwright: {field}") and "Traceback" not in err


def test_malformed_preset_file_is_a_clear_error(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[motor\nkind = 'dc'\n")
    code, _ = run("check", str(bad))
    assert code == 2 and "file" in capsys.readouterr().err


def test_headless_commands_do_not_import_qt():
    code = ("import sys, io; from app.cli import main; main(['check', 'dc_spindle'], out=io.StringIO()); "
            "bad = [m for m in sys.modules if m.split('.')[0] in ('PySide6', 'shiboken6', 'pyqtgraph')]; "
            "print(bad); sys.exit(1 if bad else 0)")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert result.returncode == 0, result.stdout + result.stderr
