"""Tests of core.flags: each rule flags what it should, and only that, with loop and severity."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest

from core.errors import InputError
from core.flags import Targets, margin_flags
from core.gains import PI
from core.margins import loop_margins
from core.motor import ConstantsCheck

try:  # tests/core is a rootdir-relative directory, or a package if one is added
    from . import axes
except ImportError:
    import axes

DELAYED = dict(current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3, position_delay_s=1 / 8e3)


def _flags(axis, g, targets=None, constants=None):
    margins, _ = loop_margins(axis, g)
    return margins, margin_flags(axis, margins, targets or Targets(), constants)


def _find(flags, loop, words):
    return [f for f in flags if f.loop == loop and words in f.message]


@pytest.mark.parametrize("current_hz, speed_hz, flagged", [
    (1000.0, 400.0, True),    # ~2.5x: below a 3x minimum
    (1000.0, 150.0, False),   # ~6.7x
])
def test_separation_ratio_below_minimum_is_flagged(current_hz, speed_hz, flagged):
    """Loop separation (common practice, CHECKS.md): each outer loop 3-10x below the inner one;
    a ratio of measured crossovers below Targets.separation_min is flagged on the outer loop."""
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis, current_hz, speed_hz)
    margins, flags = _flags(axis, g, Targets(separation_min=3.0))
    ratio = margins["current"].crossover_hz / margins["speed"].crossover_hz
    assert (ratio < 3.0) == flagged
    hits = _find(flags, "speed", "target separation")
    assert bool(hits) == flagged
    if flagged:
        assert hits[0].severity == "warning" and f"{ratio:.2g}x" in hits[0].message


def test_separation_minimum_is_the_users_setting():
    """The same gains pass a 2x minimum and fail a 10x minimum."""
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis, 1000.0, 150.0)
    assert not _find(_flags(axis, g, Targets(separation_min=2.0))[1], "speed", "target separation")
    assert _find(_flags(axis, g, Targets(separation_min=10.0))[1], "speed", "target separation")


def test_position_separation_flagged():
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis, 1000.0, 150.0, position_ratio=1.2)
    assert _find(_flags(axis, g)[1], "position", "target separation")


def test_unstable_loop_is_an_error_first_and_its_margins_are_not_reported_as_warnings():
    """Speed Kp x20: the speed loop (and the position loop over it) is unstable -> error flags, sorted first."""
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis, 1000.0, 150.0, speed_kp_scale=20.0)
    margins, flags = _flags(axis, g)
    assert not margins["speed"].stable
    errors = [f for f in flags if f.severity == "error"]
    assert {f.loop for f in errors} >= {"speed"}
    assert flags[0].severity == "error"
    assert "unstable" in errors[0].message
    assert not [f for f in flags if f.loop == "speed" and f.severity == "warning" and "Phase margin" in f.message]


def test_phase_gain_margin_and_sensitivity_targets():
    """A current loop at PM 56.25 deg, GM 8.52 dB, Ms 1.75 (CHECKS.md integrator + delay, derived):
    flagged against PM >= 60 / GM >= 9 / Ms <= 1.5, not against the defaults 45 / 6 / 2."""
    axis = axes.rigid_axis(current_delay_s=93.75e-6)
    g = axes.gains(axes.cancelling_current_pi(2 * math.pi * 1000.0), PI(0.02, 1.0), position_kp=2.0)
    _, default = _flags(axis, g)
    assert not [f for f in default if f.loop == "current"]
    _, strict = _flags(axis, g, Targets(current_phase_margin_deg=60.0, current_gain_margin_db=9.0, sensitivity_peak_max=1.5))
    assert _find(strict, "current", "Phase margin 56.")
    assert _find(strict, "current", "Gain margin 8.5")
    assert _find(strict, "current", "Sensitivity peak Ms = 1.75")


def test_current_crossover_too_close_to_sampling():
    """Crossover above 0.1 of the 16 kHz current rate (1.6 kHz) is flagged."""
    axis = axes.rigid_axis(current_delay_s=20e-6)
    g = axes.nominal_gains(axis, 2000.0, 200.0)
    assert _find(_flags(axis, g)[1], "current", "sample rate")
    g = axes.nominal_gains(axis, 1000.0, 150.0)
    assert not _find(_flags(axis, g)[1], "current", "sample rate")


def test_resonance_near_speed_crossover():
    """Two-mass case of CHECKS.md (fr 84.22 Hz, fa 59.55 Hz); a speed crossover near them is flagged."""
    axis = axes.two_mass_axis(damping=0.5, **DELAYED)
    g = axes.nominal_gains(axis, 1000.0, 60.0)
    margins, flags = _flags(axis, g)
    if margins["speed"].stable:
        assert _find(flags, "speed", "resonance")


def test_kt_ke_mismatch_flagged():
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis)
    bad = ConstantsCheck(0.5, 0.4, 0.25, False)
    good = ConstantsCheck(0.5, 0.49, 0.02, True)
    assert _find(_flags(axis, g, constants=bad)[1], "axis", "Kt and Ke disagree")
    assert not [f for f in _flags(axis, g, constants=good)[1] if f.loop == "axis"]


def test_no_crossover_is_flagged():
    """A loop whose gain never reaches 1 has a NaN crossover: reported in words, not silently."""
    axis = axes.rigid_axis(**DELAYED)
    g = axes.nominal_gains(axis, 1000.0, 150.0)
    margins, _ = loop_margins(axis, g)
    margins = dict(margins, position=replace(margins["position"], crossover_hz=math.nan, gain_crossovers_hz=()))
    flags = margin_flags(axis, margins, Targets())
    assert _find(flags, "position", "never reaches 1")


@pytest.mark.parametrize("field, kwargs", [
    ("targets.current_phase_margin", dict(current_phase_margin_deg=-1.0)),
    ("targets.speed_phase_margin", dict(speed_phase_margin_deg=float("nan"))),
    ("targets.position_gain_margin", dict(position_gain_margin_db=float("inf"))),
    ("targets.sensitivity_peak_max", dict(sensitivity_peak_max=0.5)),
    ("targets.separation_min", dict(separation_min=0.0)),
])
def test_targets_reject_bad_values_naming_the_field(field, kwargs):
    with pytest.raises(InputError) as err:
        Targets(**kwargs)
    assert err.value.field == field


def test_every_core_check_names_its_kind():
    """Front ends point at the plot element from Flag.kind, not from the wording."""
    from core.analysis import analyse
    from core.flags import targets_from_dict
    from core.presets import builtin_names, builtin_preset

    seen = 0
    for name in builtin_names():
        p = builtin_preset(name)
        for g in p.gain_sets:
            for f in analyse(p.axis, g, targets_from_dict(p.targets), p.constants_check).flags:
                assert f.kind, f
                seen += 1
    assert seen > 0
