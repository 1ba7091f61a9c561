"""Notch depth and phase against CHECKS.md; the proposed notch on the compliant demo axis."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.presets import builtin_preset
from core.resonance import notch_response, propose_filter
from core.tolerances import tolerances_from_dict


@pytest.mark.parametrize("f_ratio, mag_db, phase_deg, atol_db, atol_deg", [
    (1.0, -20.0, 0.0, 0.01, 0.01),     # CHECKS.md notch row: depth zz/zp at wn (Ellis 2012, from memory)
    (0.5, -1.58, -29.9, 0.01, 0.05),   # CHECKS.md notch row at wn/2 (Ellis 2012, from memory)
])
def test_notch_matches_checks(f_ratio, mag_db, phase_deg, atol_db, atol_deg):
    n = notch_response(100.0, 0.05, 0.5, [100.0 * f_ratio])[0]
    assert_allclose(20 * math.log10(abs(n)), mag_db, atol=atol_db)
    assert_allclose(math.degrees(np.angle(n)), phase_deg, atol=atol_deg)


def test_proposed_notch_raises_the_speed_gain_margin():
    p = builtin_preset("rotary_table")
    g = p.gain_set("first motion")
    bare = replace(g, speed=replace(g.speed, notches=()))
    r = propose_filter(p.axis, bare, tolerances_from_dict(p.tolerances, p.axis))
    assert r.centre_hz == pytest.approx(p.axis.resonance_hz)
    assert r.resonance_margin_after_db > r.resonance_margin_before_db
    assert r.resonance_margin_worst_after_db > r.resonance_margin_worst_before_db
    assert r.gain_margin_after_db > r.gain_margin_before_db
    assert r.phase_cost_deg < 0


def test_rigid_load_is_refused():
    p = builtin_preset("dc_spindle")
    with pytest.raises(InputError):
        propose_filter(p.axis, p.active_gain_set)
