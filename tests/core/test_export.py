"""Export profiles, the configuration sheet and its files (core.export, core.report_pdf).

Unit conversions are held against a fresh pint registry that is told the
conventions in its own terms (A_pk / A_rms, per-unit bases and one sample as units),
so every factor of sqrt(2), 2*pi, 60 and Ts is computed a second, independent way.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from pathlib import Path

import numpy as np
import pint
import pytest
from numpy.testing import assert_allclose
from scipy.signal import cont2discrete

from core.errors import InputError
from core.export import (FORMATS, builtin_profile_names, builtin_profiles, gain_value, import_sheet_json,
                         load_profile, loads_profile, resolve_bases, resolve_profile, sample_time_s, sheet,
                         write_csv, write_json, write_sheet, write_xlsx)
from core.presets import builtin_names, builtin_preset

HEAD = 'format = "loopwright-export-profile"\nname = "test"\n'


def _profile(rows: str, bases: str = "") -> str:
    return HEAD + (f"[bases]\n{bases}\n" if bases else "") + rows


# --- the independent reference -----------------------------------------------------------

_REGISTRIES: dict = {}


def _reference_registry(preset, profile) -> pint.UnitRegistry:
    """A fresh pint registry with the sheet's conventions as units (one per preset and profile)."""
    pmsm = preset.axis.motor.kind == "pmsm"
    bases = resolve_bases(profile, preset)
    model_rated = bases.rated_current_a * (math.sqrt(2) if (pmsm and bases.current_convention == "rms") else 1.0)
    definitions = (
        "rev = revolution",
        # Model amperes and volts are peak for a PMSM (amplitude-invariant dq); rms = peak/sqrt(2).
        "A_pk = ampere", "V_pk = volt",
        f"A_rms = {math.sqrt(2) if pmsm else 1.0} * A_pk", f"V_rms = {math.sqrt(2) if pmsm else 1.0} * V_pk",
        f"I_base = {model_rated!r} * A_pk", f"w_base = {bases.rated_speed_rad_s!r} * radian / second",
        f"V_base = {bases.bus_voltage_v!r} * V_pk", f"enc_count = revolution / {bases.counts_per_rev!r}",
        *(f"sample_{loop} = {sample_time_s(preset, loop)!r} * second" for loop in ("current", "speed", "position")),
    )
    if definitions not in _REGISTRIES:
        ureg = pint.UnitRegistry()
        for d in definitions:
            ureg.define(d)
        _REGISTRIES[definitions] = ureg
    return _REGISTRIES[definitions]


def reference_value(row, gains, preset, profile):
    """The drive value of a profile row computed by pint with the conventions as units."""
    ureg = _reference_registry(preset, profile)
    bases = resolve_bases(profile, preset)
    x = "rms" if bases.current_convention == "rms" else "pk"
    loop = row.spec.loop
    kp = {"current": gains.current.pi.kp, "speed": gains.speed.pi.kp, "position": gains.position.kp_per_s}[loop]
    value = gain_value(gains, row.gain)
    si_units = {"current.kp": "V_pk/A_pk", "current.ki": "V_pk/(A_pk*s)", "speed.kp": "A_pk*s/rad",
                "speed.ki": "A_pk/rad", "position.kp": "1/s", "position.ki": "1/s^2", "speed.feedback_lowpass": "Hz"}
    gain = row.gain.replace(".ti", ".ki")
    if row.form == "integral_time":
        q = ureg.Quantity(math.inf if value == 0 else kp / value, "s")
    elif row.form == "series":
        q = ureg.Quantity(value / kp, "1/s")
    else:
        q = ureg.Quantity(value, si_units.get(gain, "Hz" if gain.endswith("centre") else "dimensionless"))
    unit = row.unit.strip()
    unit = re.sub(r"\bcounts?\b", "enc_count", unit)
    unit = re.sub(r"\bmA\b", f"(0.001*A_{x})", unit)
    unit = re.sub(r"\bmV\b", f"(0.001*V_{x})", unit)
    unit = re.sub(r"\bA\b", f"A_{x}", unit)
    unit = re.sub(r"\bV\b", f"V_{x}", unit)
    unit = unit or "dimensionless"
    if row.per_unit and row.form == "parallel":
        scale = {"current": "V_base/I_base", "speed": "I_base/w_base"}[loop]
        unit = f"{scale} * ({unit})"
    if row.time_base == "discrete":
        unit = f"sample_{loop}" if row.form == "integral_time" else f"({unit}) / sample_{loop}"
    target = ureg.parse_expression(unit)
    return float(q.to(target.units).magnitude / getattr(target, "magnitude", 1.0))


PROFILES = builtin_profiles()
CASES = [(pn, preset, g) for pn in builtin_profile_names() for preset in builtin_names()
         for g in ("first motion", "production")]


@pytest.mark.parametrize("profile_name, preset_name, set_name", CASES)
def test_every_profile_row_against_pint(profile_name, preset_name, set_name):
    preset = builtin_preset(preset_name)
    profile = PROFILES[profile_name]
    s = sheet(preset, set_name, profile)
    gains = preset.gain_set(set_name)
    for prow, srow in zip(profile.rows, s.rows):
        if math.isnan(srow.drive_value):
            continue  # a notch this set does not have
        expected = reference_value(prow, gains, preset, profile)
        # 1e-12: both are a handful of float multiplications of the same inputs.
        assert_allclose(srow.drive_value, expected, rtol=1e-12, err_msg=f"{profile_name} {srow.label}")


@pytest.mark.parametrize("text_unit, kp_si, expected, source", [
    ("A/rpm", 1.0, 2 * math.pi / 60 / math.sqrt(2), "derived: 1 rpm = 2*pi/60 rad/s; A rms = A peak/sqrt(2)"),
    ("A*s/rad", 1.0, 1 / math.sqrt(2), "derived: rms of a sinusoid"),
    ("mA/(count/s)", 1.0, 1000 * 2 * math.pi / 4096 / math.sqrt(2), "derived: 1 count = 2*pi/4096 rad"),
])
def test_worked_speed_kp_conversions(text_unit, kp_si, expected, source):
    preset = builtin_preset("belt_gantry")  # PMSM
    profile = loads_profile(_profile(f'[[rows]]\nlabel = "kp"\ngain = "speed.kp"\nunit = "{text_unit}"\n',
                                     'current_convention = "rms"\ncounts_per_rev = 4096'))
    g = preset.gain_set("first motion")
    from core.export import convert_row
    _, value, _ = convert_row(profile.rows[0], g, resolve_bases(profile, preset), 1e-3)
    assert_allclose(value / g.speed.pi.kp, expected, rtol=1e-12)  # source: see parametrize


def test_ti_in_ms_and_rpm_per_rev_worked_values():
    # belt_gantry "first motion": Kp 19.6 V/A, Ki 5280 V/(A*s) -> Ti 3.7121 ms (derived: Ti = Kp/Ki);
    # position Kp 25 1/s = 1500 rpm/rev (derived: 1 rev/min per rev = 1/60 s^-1).
    s = sheet(builtin_preset("belt_gantry"), "first motion", resolve_profile("ti_ms_rpm"))
    rows = {r.gain: r for r in s.rows}
    assert_allclose(rows["current.ti"].drive_value, 19.6 / 5280 * 1e3, rtol=1e-12)
    assert rows["current.ti"].text == "3.71"
    assert_allclose(rows["position.kp"].drive_value, 1500.0, rtol=1e-12)


@pytest.mark.parametrize("method, scipy_method", [("backward_euler", "backward_diff"), ("tustin", "bilinear"),
                                                  ("forward_euler", "euler")])
def test_discrete_pi_matches_cont2discrete(method, scipy_method):
    """Kp and Ki_d = Ki*Ts, run as the stated difference equation, equal scipy's discretisation of Kp + Ki/s."""
    preset = builtin_preset("dc_spindle")
    profile = loads_profile(_profile(
        '[[rows]]\nlabel = "kp"\ngain = "current.kp"\nunit = "V/A"\n'
        f'[[rows]]\nlabel = "ki"\ngain = "current.ki"\nunit = "V/A"\ntime_base = "discrete"\n'
        f'discretisation = "{method}"\n'))
    g = preset.gain_set("production")
    s = sheet(preset, "production", profile)
    kp, kid = s.rows[0].drive_value, s.rows[1].drive_value
    ts = sample_time_s(preset, "current")
    num, den, _ = cont2discrete(([g.current.pi.kp, g.current.pi.ki], [1.0, 0.0]), ts, method=scipy_method)
    num, den = np.ravel(num) / den[0], np.asarray(den) / den[0]
    ours = {"backward_euler": [kp + kid, -kp], "tustin": [kp + kid / 2, kid / 2 - kp],
            "forward_euler": [kp, kid - kp]}[method]  # derived, over (z - 1)
    assert_allclose(den, [1.0, -1.0], atol=1e-12)
    # Tolerance: relative 1e-12 of Kp; scipy goes through state space, we multiply once.
    assert_allclose(num[-2:], ours, rtol=1e-12, atol=1e-12 * kp)


def test_ti_in_samples_and_per_unit_and_off_value():
    preset = builtin_preset("belt_gantry")
    profile = loads_profile(_profile(
        '[[rows]]\nlabel = "Ti samples"\ngain = "speed.ti"\nunit = ""\ntime_base = "discrete"\n'
        '[[rows]]\nlabel = "pos Ti"\ngain = "position.ti"\nunit = "ms"\noff_value = 0\n'
        '[[rows]]\nlabel = "pos Ti no off"\ngain = "position.ti"\nunit = "ms"\n'))
    s = sheet(preset, "first motion", profile)
    g = preset.gain_set("first motion")
    assert_allclose(s.rows[0].drive_value, g.speed.pi.kp / g.speed.pi.ki * preset.axis.drive.speed_rate_hz, rtol=1e-12)
    assert s.rows[1].rounded_value == 0 and s.rows[1].flags == ()
    assert s.rows[2].text == "off" and "off_value" in s.rows[2].flags[0].message


def test_rounding_flags_and_range():
    preset = builtin_preset("belt_gantry")
    profile = loads_profile(_profile(
        '[[rows]]\nlabel = "speed Ki"\ngain = "speed.ki"\nunit = "A/rad"\nresolution = 10\n'      # 4 -> 0
        '[[rows]]\nlabel = "speed Kp"\ngain = "speed.kp"\nunit = "A*s/rad"\nresolution = 0.1\n'   # 0.152 -> 0.2
        '[[rows]]\nlabel = "pos Kp"\ngain = "position.kp"\nunit = "1/s"\nmax = 10\n'))           # 25 > 10
    s = sheet(preset, "first motion", profile)
    assert "rounds to 0 at this resolution" in s.rows[0].flags[0].message and s.rows[0].flags[0].severity == "error"
    assert "quantised by 32%" in s.rows[1].flags[0].message
    assert "outside the drive's range" in s.rows[2].flags[0].message
    assert s.attention.startswith("ATTENTION: 3 flag(s)")


# --- bad profiles ------------------------------------------------------------------------

@pytest.mark.parametrize("text, field, words", [
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kd"\nunit = "A"\n'), "rows[0] (x).gain", "speed.kp"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "V/A"\n'), "rows[0] (x).unit", "convertible"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "frobs"\n'), "rows[0] (x).unit", "pint"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = ""\n', 'rated_speed = "0 rpm"'),
     "bases.rated_speed", "zero base"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = ""\n', 'rated_current = "0 A"'),
     "bases.rated_current", "zero base"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "A/rpm"\nmin = 5\nmax = 1\n'), "rows[0] (x).min", "max"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "A/rpm"\nresolution = 0\n'), "rows[0] (x).resolution", "positive"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "A/rpm"\nform = "series"\n'), "rows[0] (x).form", "integral"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "A/rpm"\ncolour = 1\n'), "rows[0] (x).colour", "known"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "position.kp"\nunit = ""\nper_unit = true\n'), "rows[0] (x).per_unit", "false"),
    (_profile('[[rows]]\nlabel = "x"\ngain = "speed.kp"\nunit = "A/rpm"\ntime_base = "discrete"\n'),
     "rows[0] (x).time_base", "continuous"),
    (_profile('[[rows]]\ngain = "speed.kp"\nunit = "A/rpm"\n'), "rows[0].label", "required"),
    (HEAD, "rows", "one or more"),
    (HEAD + "rows = [\n", "profile", "valid TOML"),
])
def test_bad_profile_names_row_and_field(text, field, words):
    with pytest.raises(InputError) as err:
        loads_profile(text)
    assert err.value.field == field and words in str(err.value)


def test_missing_profile_file(tmp_path):
    with pytest.raises(InputError, match="readable profile file"):
        load_profile(tmp_path / "none.toml")
    with pytest.raises(InputError) as err:
        resolve_profile(str(tmp_path / "none.toml"))
    assert err.value.field == "--profile" and "si" in str(err.value)


def test_per_unit_needs_a_rated_base():
    from dataclasses import replace
    preset = builtin_preset("dc_spindle")
    unrated = replace(preset, axis=replace(preset.axis, motor=replace(preset.axis.motor, max_speed_rad_s=math.inf)))
    with pytest.raises(InputError, match="bases.rated_speed"):
        sheet(unrated, "production", resolve_profile("per_unit"))


# --- files -------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def belt_sheet():
    return sheet(builtin_preset("belt_gantry"), "production", resolve_profile("ti_ms_rpm"))


def test_csv_reads_back(tmp_path, belt_sheet):
    path = write_csv(belt_sheet, tmp_path / "s.csv")
    rows = list(csv.reader(io.StringIO(path.read_text(encoding="utf-8"))))
    head = dict(r for r in rows[:12] if len(r) == 2)
    assert rows[1][0] == "attention"  # flags active: said at the top
    assert head["axis"] == "Belt gantry X" and head["gain set"] == "production"
    assert head["program version"] == "Loopwright 0.1.0" and len(head["preset sha256"]) == 64
    start = next(i for i, r in enumerate(rows) if r and r[0] == "label") + 1
    table = {r[1]: r for r in rows[start:start + len(belt_sheet.rows)]}
    assert table["speed.kp"][6] == "0.02244" and table["speed.kp"][7] == "A/rpm"
    assert any(r and r[0] == "caution" and "emergency stop" in r[1] for r in rows[-2:])


def test_xlsx_reads_back(tmp_path, belt_sheet):
    openpyxl = pytest.importorskip("openpyxl")
    path = write_xlsx(belt_sheet, tmp_path / "s.xlsx")
    ws = openpyxl.load_workbook(path).active
    cells = [[c.value for c in row] for row in ws.iter_rows()]
    assert cells[0][:2] == ["title", "Loopwright drive configuration sheet"]
    assert cells[1][0] == "attention"
    start = next(i for i, r in enumerate(cells) if r[0] == "label") + 1
    by_gain = {r[1]: r for r in cells[start:start + len(belt_sheet.rows)]}
    assert by_gain["position.kp"][6] == 4500.0 and by_gain["speed.kp"][6] == 0.02244
    assert any(r[0] == "caution" and "guards" in r[1] for r in cells)


@pytest.mark.parametrize("preset_name", builtin_names())
def test_json_round_trip_restores_the_gain_set_exactly(tmp_path, preset_name):
    preset = builtin_preset(preset_name)
    for name in ("first motion", "production"):
        path = write_json(sheet(preset, name, resolve_profile("si")), tmp_path / "s.json")
        assert import_sheet_json(path, preset) == preset.gain_set(name)  # dataclass equality: bit-exact floats


def test_json_from_another_axis_is_refused(tmp_path, belt_sheet):
    path = write_json(belt_sheet, tmp_path / "s.json")
    with pytest.raises(InputError) as err:
        import_sheet_json(path, builtin_preset("rotary_table"))
    assert err.value.field == "sheet.axis_sha256" and "Belt gantry X" in str(err.value)
    (tmp_path / "bad.json").write_text("{}")
    with pytest.raises(InputError, match="sheet.format"):
        import_sheet_json(tmp_path / "bad.json", builtin_preset("belt_gantry"))
    with pytest.raises(InputError, match="readable"):
        import_sheet_json(tmp_path / "none.json", builtin_preset("belt_gantry"))


def test_pdf_has_three_pages(tmp_path, belt_sheet):
    pypdf = pytest.importorskip("pypdf")
    path = write_sheet(belt_sheet, tmp_path / "s.pdf", "pdf")
    reader = pypdf.PdfReader(str(path))
    assert len(reader.pages) == 3  # gains; margins, flags, axis; plots
    text = reader.pages[0].extract_text()
    assert "ATTENTION" in text and "Belt gantry X" in text and "emergency stop" in text


@pytest.mark.parametrize("fmt", FORMATS)
def test_unwritable_target_leaves_nothing(tmp_path, belt_sheet, fmt):
    blocker = tmp_path / "a_file"
    blocker.write_text("keep")
    with pytest.raises(InputError) as err:
        write_sheet(belt_sheet, blocker / "out", fmt)   # a folder that is a file
    assert err.value.field == "-o"
    with pytest.raises(InputError):
        write_sheet(belt_sheet, tmp_path / "no" / "such" / "dir.x", fmt)
    assert blocker.read_text() == "keep" and sorted(p.name for p in tmp_path.iterdir()) == ["a_file"]


@pytest.mark.parametrize("fmt", FORMATS)
def test_failed_write_keeps_the_existing_file(tmp_path, belt_sheet, fmt, monkeypatch):
    target = tmp_path / f"sheet.{fmt}"
    target.write_bytes(b"the old sheet")
    import core.export as ex
    import core.report_pdf as rp

    def boom(*args, **kwargs):
        raise RuntimeError("disk full halfway")

    # Break the step that produces the bytes, after the temporary file exists.
    monkeypatch.setattr(ex.json, "dumps", boom)
    monkeypatch.setattr(ex, "sheet_csv", boom)
    monkeypatch.setattr(rp, "write_report", boom)
    import openpyxl
    monkeypatch.setattr(openpyxl.Workbook, "save", boom)
    with pytest.raises(RuntimeError):
        write_sheet(belt_sheet, target, fmt)
    assert target.read_bytes() == b"the old sheet"
    assert [p.name for p in tmp_path.iterdir()] == [target.name]  # no temporary file left


def test_unknown_format(tmp_path, belt_sheet):
    with pytest.raises(InputError, match="--format"):
        write_sheet(belt_sheet, tmp_path / "x", "docx")


def test_every_export_carries_header_and_caution(tmp_path):
    s = sheet(builtin_preset("dc_spindle"), "first motion", resolve_profile("per_unit"))
    doc = json.loads(write_json(s, tmp_path / "s.json").read_text())
    for key in ("axis", "date", "program_version", "preset_sha256", "gain_set_name", "caution", "attention"):
        assert doc[key] or key == "attention"
    assert "licensed practice" in doc["caution"] and "drive maker's manual" in doc["caution"]
