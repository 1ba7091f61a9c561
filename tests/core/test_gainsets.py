"""Gain-set edits and the side-by-side comparison (core.gainsets)."""

from __future__ import annotations

import json
import math
from dataclasses import replace

import pytest
from numpy.testing import assert_allclose

from core.analysis import analyse
from core.errors import InputError
from core.flags import targets_from_dict
from core.gainsets import (add_gain_set, compare, comparison_table, comparison_to_json, delete_gain_set,
                           duplicate_gain_set, rename_gain_set, replace_gain_set, set_active, set_note)
from core.presets import builtin_preset, dumps_preset, loads_preset


@pytest.fixture(scope="module")
def belt():
    # The two hand-made sets; the shipped preset also holds "auto-tuned", which these edits leave aside.
    p = builtin_preset("belt_gantry")
    return replace(p, gain_sets=tuple(g for g in p.gain_sets if g.name in ("first motion", "production")))


def test_add_copies_the_active_set_and_makes_it_active(belt):
    p = add_gain_set(belt, "  heavier load ", note="for 12 kg")
    assert [g.name for g in p.gain_sets] == ["first motion", "production", "heavier load"]
    assert p.active == "heavier load"
    new, src = p.gain_set("heavier load"), belt.gain_set("first motion")
    assert (new.current, new.speed, new.position) == (src.current, src.speed, src.position)
    assert new.note == "for 12 kg"
    assert belt.gain_sets[-1].name == "production"  # the input preset is untouched (frozen)


def test_duplicate_inserts_after_source_and_keeps_active(belt):
    p = duplicate_gain_set(belt, "first motion", "first motion b")
    assert [g.name for g in p.gain_sets] == ["first motion", "first motion b", "production"]
    assert p.active == belt.active
    assert p.gain_set("first motion b").note == belt.gain_set("first motion").note


def test_rename_moves_the_active_name(belt):
    p = rename_gain_set(belt, "first motion", "commissioning")
    assert p.active == "commissioning"
    assert [g.name for g in p.gain_sets] == ["commissioning", "production"]
    assert rename_gain_set(belt, "production", "production").gain_sets == belt.gain_sets


def test_delete_moves_active_and_keeps_the_last(belt):
    p = delete_gain_set(belt, "first motion")
    assert p.active == "production" and len(p.gain_sets) == 1
    p2 = delete_gain_set(set_active(belt, "production"), "production")
    assert p2.active == "first motion"
    with pytest.raises(InputError, match="at least one"):
        delete_gain_set(p, "production")


def test_set_active_and_note(belt):
    assert set_active(belt, "production").active == "production"
    assert set_note(belt, "production", "stiff").gain_set("production").note == "stiff"
    edited = belt.gain_set("production").renamed("production", "x")
    assert replace_gain_set(belt, edited).gain_set("production").note == "x"


@pytest.mark.parametrize("call, field", [
    (lambda p: add_gain_set(p, "production"), "gain_set.name"),        # taken
    (lambda p: add_gain_set(p, "   "), "gain_set.name"),               # empty
    (lambda p: add_gain_set(p, "a\nb"), "gain_set.name"),              # not one line
    (lambda p: duplicate_gain_set(p, "nope", "x"), "gain_set"),        # missing source
    (lambda p: rename_gain_set(p, "first motion", "production"), "gain_set.name"),
    (lambda p: rename_gain_set(p, "nope", "x"), "gain_set"),
    (lambda p: delete_gain_set(p, "nope"), "gain_set"),
    (lambda p: set_active(p, "nope"), "active_gain_set"),
    (lambda p: set_note(p, "nope", ""), "gain_set"),
])
def test_bad_names_are_input_errors(belt, call, field):
    with pytest.raises(InputError) as err:
        call(belt)
    assert err.value.field == field


def test_edited_preset_round_trips_through_toml(belt):
    p = set_note(add_gain_set(belt, "third"), "third", "note")
    assert loads_preset(dumps_preset(p)) == p


@pytest.fixture(scope="module")
def three(belt):
    p = duplicate_gain_set(belt, "first motion", "first motion copy")
    return p, compare(p, baseline="first motion")


def test_compare_rows_match_analyse(three):
    # Independent of the comparison: analyse() called directly on each set.
    p, c = three
    assert c.sets == ("first motion", "first motion copy", "production")
    for i, name in enumerate(c.sets):
        a = analyse(p.axis, p.gain_set(name), targets_from_dict(p.targets), p.constants_check)
        for loop in ("current", "speed", "position"):
            assert c.row(loop, "phase_margin_deg").values[i] == a.margins[loop].phase_margin_deg
            assert c.row(loop, "sensitivity_peak").values[i] == a.margins[loop].sensitivity_peak
            assert c.row(loop, "step_overshoot_pct").values[i] == a.steps[loop].overshoot_pct
        assert c.row("load step", "speed_dip_rad_s").values[i] == abs(a.load_step.speed_dip_rad_s)
        assert c.row("flags", "flag_count").values[i] == len(a.flags)


def test_compare_directions_deltas_and_best(three):
    p, c = three
    pm = c.row("speed", "phase_margin_deg")
    assert pm.better == "higher" and c.row("speed", "sensitivity_peak").better == "lower"
    # first motion has the larger speed PM (59.6 vs 18.7 deg); its copy ties with it.
    assert pm.best == ("first motion", "first motion copy")
    assert pm.deltas[0] == 0.0 and pm.deltas[1] == 0.0
    assert_allclose(pm.deltas[2], pm.values[2] - pm.values[0], rtol=0, atol=0)
    bw = c.row("speed", "bandwidth_hz")
    assert bw.best == ("production",)
    move = c.row("move", "peak_current_a")
    assert c.scenario == "gentle move" and all(v > 0 for v in move.values) and move.unit == "A peak"


def test_compare_fixed_shape_without_move(belt):
    c1 = compare(belt, simulate_move=False)
    assert c1.scenario == "" and all(math.isnan(v) for v in c1.row("move", "peak_voltage_pct").values)
    assert c1.row("move", "peak_voltage_pct").best == ()
    c2 = compare(belt, ["production"])
    assert [(r.group, r.metric) for r in c1.rows] == [(r.group, r.metric) for r in c2.rows]


def test_comparison_json_and_table(three):
    _, c = three
    doc = json.loads(json.dumps(comparison_to_json(c), allow_nan=False))
    assert doc["sets"] == list(c.sets) and doc["baseline"] == "first motion"
    assert len(doc["rows"]) == len(c.rows)
    text = comparison_table(c)
    assert "first motion (baseline)" in text and "phase margin" in text and "*" in text


@pytest.mark.parametrize("names, baseline, field", [
    (["production", "nope"], None, "--sets"),
    (["production", "production"], None, "--sets"),
    ([], None, "--sets"),
    (["production"], "first motion", "--baseline"),
])
def test_compare_bad_input(belt, names, baseline, field):
    with pytest.raises(InputError) as err:
        compare(belt, names, baseline, simulate_move=False)
    assert err.value.field == field
