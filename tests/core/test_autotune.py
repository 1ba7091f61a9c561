"""Auto-tune: the result re-analysed independently at every corner meets every constraint."""

from __future__ import annotations

import math

import pytest

from core.autotune import autotune
from core.errors import InputError
from core.flags import targets_from_dict
from core.margins import LOOPS, loop_margins
from core.presets import builtin_preset
from core.sweep import variant_factors
from core.tolerances import factor_dict, tolerances_from_dict, varied_axis


@pytest.fixture(scope="module")
def tuned():
    p = builtin_preset("belt_gantry")
    tol = tolerances_from_dict(p.tolerances, p.axis)
    targets = targets_from_dict(p.targets)
    return p, tol, targets, autotune(p.axis, p.active_gain_set, tol, targets, objective="position_gain")


def test_every_corner_meets_every_constraint(tuned):
    """Independent re-check with the scalar loop_margins on real Axis objects (its own default grid)."""
    p, tol, targets, r = tuned
    assert r.status == "optimal" and r.gains is not None
    assert r.objective_value > r.start_value
    for row in variant_factors(tol, "corners"):
        m, _ = loop_margins(varied_axis(p.axis, factor_dict(row)), r.gains)
        for loop in LOOPS:
            assert m[loop].stable
            # 0.05 deg / 0.02 dB / 0.002 Ms: the tuner's coarser grid against the analysis grid.
            assert m[loop].phase_margin_deg >= targets.phase_margin_deg(loop) - 0.05
            assert m[loop].gain_margin_db >= targets.gain_margin_db(loop) - 0.02
            assert m[loop].sensitivity_peak <= targets.sensitivity_peak_max + 0.002
        assert m["current"].crossover_hz / m["speed"].crossover_hz >= targets.separation_min * 0.999
        assert m["speed"].crossover_hz / m["position"].crossover_hz >= targets.separation_min * 0.999


def test_active_constraints_are_reported(tuned):
    r = tuned[3]
    assert any(c.active for c in r.constraints)
    assert all(c.slack >= -1e-6 for c in r.constraints)


def test_infeasible_names_the_binding_constraint():
    p = builtin_preset("belt_gantry")
    tol = tolerances_from_dict(p.tolerances, p.axis)
    targets = targets_from_dict({**p.targets, "speed_phase_margin_min": 89.0})
    r = autotune(p.axis, p.active_gain_set, tol, targets, max_iterations=8)
    assert r.status == "infeasible" and r.gains is None
    assert r.binding


def test_cancel_returns_cleanly():
    p = builtin_preset("belt_gantry")
    tol = tolerances_from_dict(p.tolerances, p.axis)
    calls = {"n": 0}

    def cancel():
        calls["n"] += 1
        return calls["n"] > 3

    r = autotune(p.axis, p.active_gain_set, tol, cancel=cancel)
    assert r.status == "cancelled" and r.gains is None and math.isnan(r.objective_value)


@pytest.mark.parametrize("kw", [dict(objective="speed"), dict(objective="stiffness"),
                                dict(objective="stiffness", at_hz=-1.0),
                                dict(gain_ranges={"speed.kp": (2.0, 1.0)}),
                                dict(gain_ranges={"current.ki": (1.0, 2.0)})])
def test_bad_input(kw):
    p = builtin_preset("belt_gantry")
    with pytest.raises(InputError):
        autotune(p.axis, p.active_gain_set, tolerances_from_dict(p.tolerances, p.axis), **kw)


def test_speed_objective_sets_position_kp_by_separation():
    """Speed-bandwidth objective: position Kp = worst-case speed crossover x 2 pi / ratio (common practice:
    speed crossover 3-10x the position gain), unless a constraint pulled it back; the report says which."""
    p = builtin_preset("belt_gantry")
    tol = tolerances_from_dict(p.tolerances, p.axis)
    targets = targets_from_dict(p.targets)
    r = autotune(p.axis, p.active_gain_set, tol, targets, speed_to_position_ratio=5.0)
    assert r.status == "optimal"
    assert "separation" in r.position_kp_choice
    worst_fc = min(loop_margins(varied_axis(p.axis, factor_dict(row)), r.gains)[0]["speed"].crossover_hz
                   for row in variant_factors(tol, "corners"))
    ratio = max(5.0, targets.separation_min)
    if "pulled back" not in r.position_kp_choice:
        assert r.gains.position.kp_per_s == pytest.approx(2 * math.pi * worst_fc / ratio, rel=2e-3)
    assert r.gains.position.kp_per_s > 0.5 * p.active_gain_set.position.kp_per_s


def test_profile_rows_become_si_gain_ranges():
    """per_sample_counts: speed.kp max 1000 mA/(count/s) -> SI by the row's own conversion factor."""
    from core.autotune import profile_gain_ranges
    from core.export import GAINS, convert_row, resolve_bases, resolve_profile, sample_time_s

    p = builtin_preset("belt_gantry")
    g = p.active_gain_set
    prof = resolve_profile("per_sample_counts")
    ranges, notes = profile_gain_ranges(p, g, prof)
    row = next(r for r in prof.rows if r.gain == "speed.kp")
    si, drive, _ = convert_row(row, g, resolve_bases(prof, p), sample_time_s(p, GAINS["speed.kp"].loop))
    assert ranges["speed.kp"][1] == pytest.approx(row.maximum * si / drive, rel=1e-12)
    assert set(ranges) <= {"current.kp", "speed.kp", "speed.ki", "position.kp"}
    assert notes
    r = autotune(p.axis, g, tolerances_from_dict(p.tolerances, p.axis), gain_ranges=ranges, max_iterations=10)
    if r.gains is not None:
        assert r.gains.speed.pi.kp <= ranges["speed.kp"][1] * (1 + 1e-9)
