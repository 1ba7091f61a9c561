"""Preset files: the demos load, a write reads back exactly, and every mistake is an InputError."""

from __future__ import annotations

import copy
import math
from pathlib import Path

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings, strategies as st

from core.errors import InputError
from core.gains import PI, CurrentGains, GainSet, Notch, PositionGains, SpeedGains
from core.presets import (Preset, builtin_names, builtin_preset, dumps_preset, load_preset, loads_preset,
                          save_preset)

NAMES = builtin_names()


def same_check(a, b) -> bool:
    """ConstantsCheck equality with NaN == NaN (an absent constant is NaN)."""
    return all((x == y) or (math.isnan(x) and math.isnan(y))
               for x, y in zip((a.kt_given_nm_per_a, a.kt_from_ke_nm_per_a, a.relative_difference),
                               (b.kt_given_nm_per_a, b.kt_from_ke_nm_per_a, b.relative_difference))) \
        and a.consistent == b.consistent


def document(name: str = "belt_gantry") -> dict:
    """A builtin preset's TOML document, to be edited by a test."""
    return copy.deepcopy(builtin_preset(name).raw)


def load_doc(doc: dict) -> Preset:
    return loads_preset(tomli_w.dumps(doc), source="edited.toml")


# --- the demos ---------------------------------------------------------------------------

def test_the_demo_presets_are_there():
    assert {"belt_gantry", "rotary_table", "dc_spindle"} <= set(NAMES)


@pytest.mark.parametrize("name", NAMES)
def test_every_builtin_loads(name):
    preset = builtin_preset(name)
    assert preset.source_path is not None and preset.source_path.name == f"{name}.toml"
    assert len(preset.gain_sets) >= 2 and preset.active_gain_set.name == preset.active
    assert len(preset.scenarios) >= 2 and all(s["name"] and s["kind"] for s in preset.scenarios)
    assert preset.constants_check.consistent
    assert preset.targets and preset.tuning
    assert preset.axis.total_inertia_kgm2 > preset.axis.motor.inertia_kgm2
    assert builtin_preset(f"{name}.toml") == preset


def test_belt_gantry_is_the_axis_it_claims():
    axis = builtin_preset("belt_gantry").axis
    assert axis.load.motion == "linear" and axis.load.compliant
    assert axis.motor.resistance_ohm == 1.4  # 2.8 ohm line to line
    assert 45 < axis.antiresonance_hz < 65 and 120 < axis.resonance_hz < 160  # as its description says


def test_rotary_table_resonates_at_a_few_hundred_hz():
    axis = builtin_preset("rotary_table").axis
    assert 200 < axis.resonance_hz < 400


# --- round trip --------------------------------------------------------------------------

@pytest.mark.parametrize("name", NAMES)
def test_dump_then_load_gives_the_same_preset(name):
    preset = builtin_preset(name)
    again = loads_preset(dumps_preset(preset))
    assert again.axis == preset.axis
    assert again.gain_sets == preset.gain_sets
    assert (again.active, again.description) == (preset.active, preset.description)
    assert again.targets == preset.targets and again.tuning == preset.tuning
    assert again.scenarios == preset.scenarios
    assert same_check(again.constants_check, preset.constants_check)
    assert dumps_preset(again) == dumps_preset(preset)


@pytest.mark.parametrize("name", NAMES)
def test_save_is_atomic_and_loads_back(tmp_path: Path, name):
    preset = builtin_preset(name)
    target = tmp_path / "axis.toml"
    target.write_text("old contents")
    save_preset(preset, target)
    assert [p.name for p in tmp_path.iterdir()] == ["axis.toml"]  # no temporary file left
    again = load_preset(target)
    assert again == preset and again.source_path == target


finite = st.floats(min_value=1e-30, max_value=1e30, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, suppress_health_check=[HealthCheck.too_slow])
@given(kp=finite, ki=finite, skp=finite, ski=finite, lp=finite, centre=finite, pkp=finite, pki=finite,
       vff=st.floats(0.0, 1.5), r=finite, l=finite, pm=st.floats(0.0, 180.0), gm=st.floats(0.0, 60.0),
       bw=finite)
def test_round_trip_is_exact_for_any_float(kp, ki, skp, ski, lp, centre, pkp, pki, vff, r, l, pm, gm, bw):
    base = builtin_preset("rotary_table")
    gains = GainSet(CurrentGains(PI(kp, ki)), SpeedGains(PI(skp, ski), lp, (Notch(centre),)),
                    PositionGains(pkp, pki, vff), name="random", note="")
    motor = base.axis.motor.__class__(**{**base.axis.motor.__dict__, "resistance_ohm": r, "inductance_h": l})
    axis = base.axis.__class__(motor, base.axis.load, base.axis.drive, base.axis.name)
    preset = Preset(axis, base.constants_check, (gains,), "random", "", {"speed_phase_margin_min": pm,
                    "speed_gain_margin_min": gm}, {"current_bandwidth": bw, "speed_rule": "separation"})
    again = loads_preset(dumps_preset(preset))
    assert again.axis == preset.axis and again.gain_sets == preset.gain_sets
    assert again.targets == preset.targets and again.tuning == preset.tuning


# --- errors ------------------------------------------------------------------------------

def raises_for(field: str, text: str) -> InputError:
    with pytest.raises(InputError) as info:
        loads_preset(text)
    assert info.value.field == field, str(info.value)
    assert field in str(info.value)
    return info.value


def edited(section: str, key: str, value) -> str:
    doc = document()
    if value is None:
        del doc[section][key]
    else:
        doc[section][key] = value
    return tomli_w.dumps(doc)


def test_malformed_toml_names_the_file_line_and_column():
    text = tomli_w.dumps(document()).replace('kind = "pmsm"', 'kind = pmsm', 1)
    err = raises_for("file", text)
    line = next(i for i, row in enumerate(text.splitlines(), 1) if row.startswith("kind = pmsm"))
    assert f"line {line}, column" in str(err)


def test_missing_resistance_names_field_and_unit():
    err = raises_for("motor.resistance", edited("motor", "resistance", None))
    assert "ohm" in err.expected and "required" in err.expected


def test_unknown_key_is_a_typo():
    err = raises_for("motor.resistence", edited("motor", "resistence", "2.8 ohm"))
    assert "resistance" in err.expected  # the known keys are listed


def test_unknown_top_level_section():
    raises_for("motorr", tomli_w.dumps({**document(), "motorr": {"kind": "dc"}}))


def test_wrong_unit():
    err = raises_for("motor.inductance", edited("motor", "inductance", "2.4 kg"))
    assert "H" in err.expected


@pytest.mark.parametrize("section,key,value", [
    ("motor", "resistance", "-2.8 ohm"), ("motor", "inertia", "0 kg*m^2"), ("drive", "bus_voltage", "-48 V"),
    ("load", "mass", "-8 kg"), ("load", "stiffness", "0 N/m"), ("drive", "speed_rate", "-8 kHz"),
])
def test_negative_or_zero_values(section, key, value):
    err = raises_for(f"{section}.{key}", edited(section, key, value))
    assert repr(value) in str(err)  # the value shown is the one the user typed


@pytest.mark.parametrize("key", ["ke_convention", "kt_convention", "winding_convention", "current_convention"])
def test_pmsm_conventions_are_required(key):
    err = raises_for(f"motor.{key}", edited("motor", key, None))
    assert "required" in err.expected


def test_lead_per_revolution_is_refused():
    raises_for("load.lead", edited("load", "lead", "100 mm/rev"))
    raises_for("load.lead", edited("load", "lead", "100 mm/turn"))


def test_mass_on_a_rotary_load_is_refused():
    raises_for("load.mass", tomli_w.dumps({**document("rotary_table"),
                                           "load": {**document("rotary_table")["load"], "mass": "3 kg"}}))


def test_drive_rate_rules_come_through():
    raises_for("drive.speed_rate", edited("drive", "speed_rate", "32 kHz"))


def test_gain_set_errors_name_the_gain_set():
    doc = document()
    doc["gain_sets"][1]["speed"]["kp"] = "0.3 V/A"
    with pytest.raises(InputError) as info:
        load_doc(doc)
    assert info.value.field == "gain_sets[1].speed.kp"
    doc = document("rotary_table")
    doc["gain_sets"][1]["speed"]["notches"][0]["zeta_pole"] = 50.0
    with pytest.raises(InputError) as info:
        load_doc(doc)
    assert info.value.field == "gain_sets[1].speed.notches[0].zeta_pole"


def test_active_gain_set_must_exist():
    doc = document()
    doc["active_gain_set"] = "prodution"
    with pytest.raises(InputError) as info:
        load_doc(doc)
    assert info.value.field == "active_gain_set" and "production" in info.value.expected


def test_unknown_rule_and_scenario_without_name():
    raises_for("tuning.speed_rule", edited("tuning", "speed_rule", "fastest"))
    doc = document()
    del doc["scenarios"][0]["name"]
    with pytest.raises(InputError) as info:
        load_doc(doc)
    assert info.value.field == "scenarios[0].name"


def test_missing_file_and_unknown_builtin(tmp_path: Path):
    with pytest.raises(InputError) as info:
        load_preset(tmp_path / "nope.toml")
    assert info.value.field == "file"
    with pytest.raises(InputError) as info:
        builtin_preset("nope")
    assert info.value.field == "preset" and "belt_gantry" in info.value.expected


# --- property tests: only InputError ever comes out ------------------------------------------

text = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=40)
toml_values = st.one_of(
    text, st.floats(), st.integers(-10**6, 10**6), st.booleans(),
    st.lists(st.integers(), max_size=3), st.dictionaries(st.sampled_from(["a", "kind"]), text, max_size=2),
    st.sampled_from(["2.4 mH", "-1 ohm", "1e400 H", "nan H", "3000 rpm", "45 V/krpm", "0", "inf", "line"]),
)
FIELDS = [("motor", k) for k in ("kind", "resistance", "inductance", "ke", "ke_convention", "pole_pairs",
                                 "peak_current")] + \
         [("load", k) for k in ("motion", "lead", "mass", "compliant", "stiffness", "gear_ratio")] + \
         [("drive", k) for k in ("bus_voltage", "speed_rate", "modulation", "encoder_counts_per_rev",
                                 "current_delay", "max_modulation")] + \
         [("targets", "ms_max"), ("targets", "speed_gain_margin_min"), ("tuning", "symmetric_optimum_a"),
          ("axis", "name"), ("", "active_gain_set"), ("", "gain_sets"), ("", "scenarios")]


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow])
@given(where=st.sampled_from(FIELDS), value=toml_values)
def test_any_value_in_any_field_gives_a_preset_or_input_error(where, value):
    doc = document()
    section, key = where
    (doc[section] if section else doc)[key] = value
    try:
        load_doc(doc)
    except InputError as err:
        assert err.field and str(err)


@settings(max_examples=200)
@given(junk=text)
def test_any_text_as_a_file_gives_input_error(junk):
    with pytest.raises(InputError):
        loads_preset(junk)
