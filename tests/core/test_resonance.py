"""Notch depth and phase against CHECKS.md; the proposed notch on the compliant demo axis."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.presets import builtin_preset
from core.loops import CascadeModel
from core.margins import loop_margins
from core.resonance import notch_response, propose_filter
from core.sweep import VariantAlgebra, VariantAxis
from core.tolerances import PARAMETERS, tolerances_from_dict


@pytest.mark.parametrize("f_ratio, mag_db, phase_deg, atol_db, atol_deg", [
    (1.0, -20.0, 0.0, 0.01, 0.01),     # CHECKS.md notch row: depth zz/zp at wn (Ellis 2012, from memory)
    (0.5, -1.58, -29.9, 0.01, 0.05),   # CHECKS.md notch row at wn/2 (Ellis 2012, from memory)
])
def test_notch_matches_checks(f_ratio, mag_db, phase_deg, atol_db, atol_deg):
    n = notch_response(100.0, 0.05, 0.5, [100.0 * f_ratio])[0]
    assert_allclose(20 * math.log10(abs(n)), mag_db, atol=atol_db)
    assert_allclose(math.degrees(np.angle(n)), phase_deg, atol=atol_deg)


def _bare_rotary():
    p = builtin_preset("rotary_table")
    g = p.gain_set("first motion")
    return p, replace(g, speed=replace(g.speed, notches=()))


def test_proposed_notch_verifies_at_every_stiffness_and_inertia_corner():
    """Rotary table, notch removed: after the proposal the resonance peak of the speed open loop
    stays >= 6 dB below 0 dB at nominal and at every tolerance point, re-checked here on a finer
    frequency grid than the proposer's (derived: GM at the resonance = -20 log10 max|L|)."""
    p, bare = _bare_rotary()
    tol = tolerances_from_dict(p.tolerances, p.axis)
    r = propose_filter(p.axis, bare, tol)
    assert r.verified and r.kind == "notch" and r.added_notches >= 1
    assert r.resonance_margin_before_db < 0            # the bare loop's peak sits above 0 dB
    rows = np.ones((len(r.corners), len(PARAMETERS)))
    rows[:, PARAMETERS.index("stiffness")] = [c["stiffness"] for c in r.corners]
    rows[:, PARAMETERS.index("load_inertia")] = [c["load_inertia"] for c in r.corners]
    # every corner of the stiffness x inertia box is among the points checked
    for s in (tol.get("stiffness").low_factor, tol.get("stiffness").high_factor):
        for j in (tol.get("load_inertia").low_factor, tol.get("load_inertia").high_factor):
            assert any(c["stiffness"] == pytest.approx(s) and c["load_inertia"] == pytest.approx(j) for c in r.corners)
    va = VariantAxis(p.axis, rows)
    f = np.geomspace(0.8 * va.resonance_hz.min(), 1.25 * va.resonance_hz.max(), 4000)
    model = CascadeModel(va, r.gains, VariantAlgebra(2j * math.pi * f))
    peak_db = 20 * np.log10(np.abs(np.broadcast_to(model.speed_open, (len(rows), len(f)))).max(axis=1))
    assert np.all(-peak_db >= 6.0 - 0.05)              # 0.05 dB: 400-point search grid vs 4000 points here
    nominal, _ = loop_margins(p.axis, r.gains)
    assert nominal["speed"].stable
    # the phase cost at the speed crossover is the added notches' own phase there (closed form)
    fc = nominal["speed"].crossover_hz
    added = r.gains.speed.notches[-r.added_notches:]
    phase = sum(math.degrees(np.angle(notch_response(n.centre_hz, n.zeta_zero, n.zeta_pole, [r.speed_crossover_hz])[0]))
                for n in added)
    assert_allclose(r.phase_cost_deg, phase, atol=1e-9)
    assert -30.0 < r.phase_cost_deg < 0
    assert fc > 0


def test_lowpass_proposal_reports_when_it_cannot_verify():
    p, bare = _bare_rotary()
    r = propose_filter(p.axis, bare, tolerances_from_dict(p.tolerances, p.axis), kind="lowpass")
    assert r.verified == (r.resonance_margin_worst_after_db >= r.gm_target_db)


def test_proposed_notch_raises_the_speed_gain_margin():
    p, bare = _bare_rotary()
    r = propose_filter(p.axis, bare, tolerances_from_dict(p.tolerances, p.axis))
    assert r.resonance_margin_after_db > r.resonance_margin_before_db
    assert r.resonance_margin_worst_after_db > r.resonance_margin_worst_before_db
    assert r.gain_margin_after_db > r.gain_margin_before_db
    assert r.phase_cost_deg < 0


def test_rigid_load_is_refused():
    p = builtin_preset("dc_spindle")
    with pytest.raises(InputError):
        propose_filter(p.axis, p.active_gain_set)
